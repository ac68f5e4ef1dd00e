"""Time `beadsim vet --fast` on the two 64-bead example models and record the outcome in vet_fast_mode.md.

Usage (from the repository root; takes several minutes per model):

    PYTHONPATH=. nice -n 19 python analysis/vet_fast_mode.py [OUT_DIR]

The record states the machine, its load before and after each run (the machine may be shared), the
wall time against the 5-minute aim, and the problems the battery found.
"""

import json
import os
import resource
import sys
import time
from pathlib import Path

from beadsim.bench import machine_description
from beadsim.studies.vet import vet

ROOT = Path(__file__).resolve().parents[1]
MODELS = (("reference (FENE + LJ 2.5, kT = 3)", "reference_model.toml"),
          ("flawed (tabulated, two planted flaws)", "flawed_vet.toml"))


def _cpu_seconds():
    """User + system CPU seconds of this process and its finished children (the sweep's workers)."""
    own, children = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + children.ru_utime + children.ru_stime


def main(out_dir):
    machine = machine_description()
    rows = []
    for label, name in MODELS:
        load_before = os.getloadavg()
        cpu_before = _cpu_seconds()
        started = time.perf_counter()
        report = vet(ROOT / "inputs" / "vet_example" / name, Path(out_dir) / Path(name).stem, fast=True,
                     overwrite=True)
        wall = time.perf_counter() - started
        verdicts = {v["key"]: v for v in report["verdicts"]}
        rows.append({"model": label, "wall_seconds": round(wall, 1),
                     "cpu_seconds": round(_cpu_seconds() - cpu_before, 1), "load_before": load_before,
                     "load_after": os.getloadavg(), "problems": report["problems"],
                     "solvent": verdicts["solvent_quality"]["message"],
                     "theta": verdicts["theta"]["message"],
                     "production": verdicts["production_time"]["message"]})
    lines = ["# `beadsim vet --fast` on the 64-bead example models", "",
             (f"Machine: {machine['cpu_model']}, {machine['nproc']} cores (numba threads {machine['numba_threads']}), "
             f"Python {machine['python']}, numba {machine['numba']}. The machine is shared: the load averages below "
             "say how busy it was; CPU time (this process and its sweep workers, user + system) depends less on "
             "the load. Aim: under 5 minutes on 2 cores (issue 9). Written by analysis/vet_fast_mode.py."),
             "", "| model | wall time | CPU time | load (1 min) before / after | problems found |",
             "|---|---|---|---|---|"]
    for r in rows:
        lines.append(f"| {r['model']} | {r['wall_seconds']:.0f} s | {r['cpu_seconds']:.0f} s | "
                     f"{r['load_before'][0]:.1f} / "
                     f"{r['load_after'][0]:.1f} | {', '.join(r['problems']) or 'none'} |")
    lines.append("")
    for r in rows:
        lines += [f"**{r['model']}**", "", f"- solvent quality: {r['solvent']}", f"- theta: {r['theta']}",
                  f"- production estimate: {r['production']}", ""]
    (ROOT / "analysis" / "vet_fast_mode.md").write_text("\n".join(lines), encoding="utf-8")
    (ROOT / "analysis" / "vet_fast_mode.json").write_text(json.dumps({"machine": machine, "runs": rows}, indent=1)
                                                          + "\n", encoding="utf-8")


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else "vet_fast_mode_runs")
