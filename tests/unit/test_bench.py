"""`beadsim bench` bookkeeping on a tiny system (no timing is asserted: speed is recorded, not tested)."""

import beadsim as bs
from beadsim import bench


def test_measure_reports_every_field_and_the_paired_speedup():
    system = bs.build_chains([20] * 10, density=0.85, seed=2)
    out = bench.measure(system, bs.ForceField(bs.WCA(), bs.FENE()), repeats=2, bead_steps=4_000, warmup_steps=20,
                        reference_steps=2, versus_one_thread=True)
    for key in ("bead_steps_per_s", "ms_per_step", "ms_force", "ms_list", "ms_update", "rebuilds_per_step",
                "neighbours_per_bead", "reference_ms_per_step", "speedup_vs_reference", "one_thread_bead_steps_per_s"):
        assert out[key] > 0, key
    mid, lo, hi = out["speedup_vs_one_thread"]
    assert lo <= mid <= hi
    assert out["steps_per_repeat"] == 20  # 4,000 bead-steps / 200 beads
    report = {"machine": bench.machine_description(), "systems": {"A": dict(out, load_average_1min=0.0)},
              "summary": {"threads": 2, "size_exponent": 1.0, "speedup_threads_vs_1": out["speedup_vs_one_thread"],
                          "one_thread_bead_steps_per_s": out["one_thread_bead_steps_per_s"]}}
    table = bench.format_table(report)
    assert "paired repeats" in table and table.splitlines()[2].startswith("A")
