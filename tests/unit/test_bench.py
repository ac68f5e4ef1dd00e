"""`beadsim bench` bookkeeping on a tiny system (no timing is asserted: speed is recorded, not tested)."""

import numpy as np
import pytest

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


def test_statics_cost_exponent_recovers_an_exact_power_law():
    """Rates r = 40 (N / 256)^-2.3 (exact power law): the fitted exponent is 2.3 to rounding, with a zero error;
    two lengths give no error at all."""
    from beadsim.statics_bench import cost_exponent
    sizes = [256, 512, 1024, 2048]
    x, error = cost_exponent(sizes, [40.0 * (n / 256) ** -2.3 for n in sizes])
    assert abs(x - 2.3) < 1e-12 and error < 1e-12
    assert cost_exponent(sizes[:2], [40.0, 10.0])[1] is None


def test_statics_cost_exponent_error_is_the_textbook_slope_error():
    """Scattered rates: the error is the standard error of a least-squares slope,
    sqrt(sum(residual^2) / (n - 2) / sum((x - mean x)^2)) in x = ln N (any regression text, e.g. Draper and
    Smith, Applied Regression Analysis, 1998, ch. 1), written out here."""
    from beadsim.statics_bench import cost_exponent
    sizes = np.array([256, 512, 1024, 2048])
    rates = np.array([30.0, 18.0, 5.0, 4.0])
    x, y = np.log(sizes), np.log(rates)
    sxx = np.sum((x - x.mean()) ** 2)
    slope = np.sum((x - x.mean()) * (y - y.mean())) / sxx
    residual = y - y.mean() - slope * (x - x.mean())
    expected = np.sqrt(np.sum(residual ** 2) / (x.size - 2) / sxx)
    value, error = cost_exponent(sizes, rates)
    assert abs(value + slope) < 1e-12 and abs(error - expected) < 1e-12


def test_statics_measurement_reports_its_sampler_and_flags_unresolved_runs():
    """A 24-bead chain for 0.5 CPU-seconds per sampler: every sampler reports a positive rate, and a run is
    flagged as an upper bound exactly when it is shorter than RESOLVED_RUNS times its g; the hybrid samplers
    report their pivot acceptance and count (100 for the previous moves)."""
    from beadsim.statics_bench import RESOLVED_RUNS
    from beadsim.statics_bench import equilibrated_chain, measure_sampler
    system = equilibrated_chain(24, 3.3, rounds=200)
    runs = {name: measure_sampler(system, 3.3, name, cpu_seconds=0.5, warmup_rounds=50)
            for name in ("hybrid", "previous-moves", "dynamics")}
    assert all(r["per_cpu_second"] > 0 and r["rounds"] > 0 for r in runs.values())
    for r in runs.values():
        g = max(r["g_autocorrelation"], r["g_blocking"] or 0.0, 1.0)
        assert r["upper_bound"] == (r["rounds"] < RESOLVED_RUNS * g or r["g_blocking"] is None)
    assert "pivot_acceptance" not in runs["dynamics"]
    assert runs["previous-moves"]["pivots_per_round"] == 100
    assert 0 < runs["hybrid"]["pivot_acceptance"] < 1


def test_statics_benchmark_reports_the_exponent_with_its_error():
    """Three short chains, hybrid only: the summary gives the cost exponent as a value with an error (three
    lengths) and the table prints both."""
    from beadsim.statics_bench import format_statics, run_statics_benchmark
    report = run_statics_benchmark(sizes=(12, 16, 24), cpu_seconds=0.3, samplers=("hybrid",), log=lambda line: None,
                                   equilibration_rounds=200)
    x = report["summary"]["cost_exponent_hybrid"]
    assert np.isfinite(x["value"]) and x["error"] is not None and x["error"] >= 0
    assert f"cost exponent of the hybrid sampler in N: {x['value']} +- {x['error']}" in format_statics(report)


def test_statics_benchmark_replicas_give_the_mean_rate_and_its_standard_error():
    """Two replicas of one short chain: the summary rate is the mean of the two runs' rates and its error the
    standard error of that mean, which for two values is half their difference (exact)."""
    from beadsim.statics_bench import format_statics, run_statics_benchmark
    report = run_statics_benchmark(sizes=(12,), cpu_seconds=0.3, samplers=("hybrid",), log=lambda line: None,
                                   equilibration_rounds=100, replicas=2, seed=5)
    a, b = (r["per_cpu_second"] for r in report["runs"])
    (mean,) = report["rates"]
    assert [r["replica"] for r in report["runs"]] == [0, 1] and mean["replicas"] == 2
    assert mean["per_cpu_second"] == pytest.approx((a + b) / 2, rel=1e-12)
    assert mean["error"] == pytest.approx(abs(a - b) / 2, rel=1e-12)
    assert "mean over replicas" in format_statics(report)


def test_statics_benchmark_refuses_zero_replicas():
    from beadsim.errors import InputError
    from beadsim.statics_bench import run_statics_benchmark
    with pytest.raises(InputError, match="--replicas"):
        run_statics_benchmark(sizes=(12,), replicas=0, log=lambda line: None)
