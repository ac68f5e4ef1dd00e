"""Independent Rg^2 samples per CPU-second of the samplers a sweep can use, for one chain length and temperature.

Each configuration is one `beadsim.runner.run` of a single FENE chain with Lennard-Jones beads cut and
shifted at 2.5 sigma (the bundled study's model, inputs/lj_chain_model.toml), one numba thread. The
figure of merit is the run's own `summary.json` entry `sampling.rg_independent_samples`
(`beadsim.analysis.efficiency.independent_samples_rate`: steps per CPU-second over g x table interval,
g the statistical inefficiency of the production Rg series). Hybrid runs start from a hybrid-equilibrated
chain (the equilibration phase uses the same mix), so their rates are equilibrium rates. Plain dynamics
runs far shorter than their correlation time give an upper bound on their rate at best; the script says
when g is not resolved.

Usage::

    NUMBA_NUM_THREADS=1 python analysis/statics_efficiency.py N T OUT.json [--steps S] [--dynamics-steps D]
        [--mixes SEGMENT:PIVOTS[:ACCEPTED] ...]

ACCEPTED, when given, tunes the pivot count at the end of equilibration (``accepted_pivots_per_bead``, per bead);
PIVOTS is then the count used until the tuning.
"""

import argparse
import copy
import json
import platform
import tempfile
import time
from pathlib import Path

from beadsim.config import read_settings
from beadsim.runner import run

MODEL = Path(__file__).resolve().parent.parent / "inputs" / "lj_chain_model.toml"

#: Default (segment_steps, pivot_moves_per_segment, accepted_pivots_per_bead or None) tried.
MIXES = [(20, 100, None), (20, 20, None), (100, 100, None), (200, 20, None), (20, 20, 0.4)]


def parse_mix(text):
    parts = text.split(":")
    return int(parts[0]), int(parts[1]), float(parts[2]) if len(parts) > 2 else None


def settings_for(n_beads, temperature, steps, mix=None):
    s = copy.deepcopy(read_settings(MODEL))
    s["chains"]["length"] = [n_beads]
    s["dynamics"]["temperature"] = temperature
    s["run"].update(seed=7, equilibration_steps=max(steps // 4, 1000), production_steps=steps)
    s["output"].update(frame_interval=steps, table_interval=20 if mix else 100, checkpoint_interval=10 * steps)
    if mix is not None:
        s["sampling"].update(method="hybrid", segment_steps=mix[0], pivot_moves_per_segment=mix[1],
                             accepted_pivots_per_bead=mix[2])
    return s


def measure(settings):
    with tempfile.TemporaryDirectory() as tmp:
        started = time.perf_counter()
        summary = run(settings, Path(tmp) / "run", progress=False)
        wall = time.perf_counter() - started
    sampling = summary["sampling"]
    return {"rate": sampling["rg_independent_samples"], "acceptance": sampling.get("acceptance"),
            "cpu_seconds": sampling["cpu_seconds_this_invocation"], "wall_seconds": round(wall, 1)}


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("n_beads", type=int)
    parser.add_argument("temperature", type=float)
    parser.add_argument("out")
    parser.add_argument("--steps", type=int, default=20_000, help="hybrid production steps")
    parser.add_argument("--dynamics-steps", type=int, default=0, help="plain dynamics production steps (0: skip)")
    parser.add_argument("--mixes", nargs="*", type=parse_mix, default=MIXES, help="SEGMENT:PIVOTS[:ACCEPTED]")
    args = parser.parse_args()
    record = {"machine": f"{platform.machine()} {platform.processor()}", "model": str(MODEL.name),
              "n_beads": args.n_beads, "temperature": args.temperature,
              "date": time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime()), "runs": []}
    configs = [("hybrid", mix, args.steps) for mix in args.mixes]
    if args.dynamics_steps:
        configs.append(("dynamics", None, args.dynamics_steps))
    for name, mix, steps in configs:
        entry = {"sampler": name, "segment_steps": mix and mix[0], "pivots": mix and mix[1],
                 "accepted_pivots_target": mix and mix[2], "steps": steps}
        entry.update(measure(settings_for(args.n_beads, args.temperature, steps, mix)))
        record["runs"].append(entry)
        print(json.dumps(entry), flush=True)
        Path(args.out).write_text(json.dumps(record, indent=2) + "\n")


if __name__ == "__main__":
    main()
