"""Benchmark: replica exchange against a plain Langevin run of the same CPU cost, 128-bead LJ chain at 0.6 theta.

The ladder is ``analysis/studies/replica_exchange_ladder.toml`` (8 rungs, T = 1.8 to 3.0); the plain
run is its base model at T = 1.8 for 8 times the steps each replica takes. Both start from swollen
grown chains. Each part is resumable and measures the processor time it used (summed over sessions
in ``cpu.json`` of its folder).

Usage::

    python analysis/replica_exchange.py ladder DIR     # run (or continue) the ladder in DIR/ladder
    python analysis/replica_exchange.py plain DIR      # run (or continue) the plain run in DIR/plain
    python analysis/replica_exchange.py report DIR     # figure and the numbers of analysis/replica_exchange.md

The two run parts may run at the same time (in two processes).
"""

import json
import os
import platform
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
LADDER = HERE / "studies" / "replica_exchange_ladder.toml"
FIGURE = HERE / "figures" / "replica_exchange" / "rg_series"


def _add_cpu(folder, seconds):
    record = folder / "cpu.json"
    total = json.loads(record.read_text())["cpu_seconds"] if record.exists() else 0.0
    record.write_text(json.dumps({"cpu_seconds": total + seconds}) + "\n")


def run_ladder_part(folder):
    from beadsim.studies.tempering import read_ladder, run_ladder

    folder = Path(folder) / "ladder"
    folder.mkdir(parents=True, exist_ok=True)
    ladder, model = read_ladder(LADDER)
    start = time.process_time()
    try:
        run_ladder(ladder, model, folder, progress=True)
    finally:
        _add_cpu(folder, time.process_time() - start)


def plain_settings():
    from beadsim.studies.tempering import read_ladder

    ladder, model = read_ladder(LADDER)
    model["run"]["production_steps"] = len(ladder["temperatures"]) * ladder["rounds"] * ladder["exchange_interval"]
    model["run"]["seed"] = 1283
    return model


def run_plain_part(folder):
    from beadsim.runner import CHECKPOINT_FILE, run

    folder = Path(folder) / "plain"
    start = time.process_time()
    try:
        run(plain_settings(), folder, resume=(folder / CHECKPOINT_FILE).exists(), progress=True)
    finally:
        _add_cpu(folder, time.process_time() - start)


def _series_summary(rg2, steps, cpu_seconds, interval):
    """Mean and error of an Rg^2 series, its two halves, and independent samples per CPU-second."""
    from beadsim.analysis.efficiency import independent_samples_rate
    from beadsim.analysis.stats import summarize

    s = summarize(rg2)
    half = rg2.size // 2
    halves = [summarize(part) for part in (rg2[:half], rg2[half:])]
    rate = independent_samples_rate(rg2, interval, steps / cpu_seconds)
    return {"mean": s.mean, "error": s.error, "equilibration_index": s.equilibration_index,
            "n_independent": s.n_independent, "reason": s.reason, "rate": rate,
            "first_half": (halves[0].mean, halves[0].error, halves[0].reason),
            "second_half": (halves[1].mean, halves[1].error, halves[1].reason),
            "cpu_seconds": cpu_seconds, "samples": int(rg2.size)}


def report(folder):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from beadsim.io import read_table
    from beadsim.studies.tempering import SAMPLE_FILE, SUMMARY_FILE, read_ladder, rung_folder

    folder = Path(folder)
    ladder, model = read_ladder(LADDER)
    n_rungs = len(ladder["temperatures"])
    rung = read_table(folder / "ladder" / rung_folder(0) / SAMPLE_FILE)
    plain = read_table(folder / "plain" / "observables.csv")
    plain = plain[plain["step"] > 0]
    cpu_ladder = json.loads((folder / "ladder" / "cpu.json").read_text())["cpu_seconds"]
    cpu_plain = json.loads((folder / "plain" / "cpu.json").read_text())["cpu_seconds"]
    # compare at equal cost: the plain run up to 8 x the steps the ladder's replicas have taken
    ladder_steps = int(rung["step"].max())
    plain_steps = int(plain["step"].max())
    plain = plain[plain["step"] <= n_rungs * ladder_steps]
    cpu_plain_used = cpu_plain * min(1.0, n_rungs * ladder_steps / plain_steps)
    rg2_ladder = rung["radius_of_gyration_squared"].to_numpy()
    rg2_plain = plain["radius_of_gyration"].to_numpy() ** 2
    interval = ladder["sample_interval"]
    out = {"ladder": _series_summary(rg2_ladder, ladder_steps, cpu_ladder, interval),
           "plain": _series_summary(rg2_plain, min(plain_steps, n_rungs * ladder_steps), cpu_plain_used, interval),
           "ladder_summary": json.loads((folder / "ladder" / SUMMARY_FILE).read_text()),
           "machine": f"{platform.machine()} {platform.processor() or ''}, {os.cpu_count()} cores, "
                      f"Python {platform.python_version()}",
           "load_now": os.getloadavg()}
    fig = Figure(figsize=(7.5, 4.2))
    ax = fig.add_subplot(1, 1, 1)
    ax.plot(plain["step"] / 1e6, rg2_plain, lw=0.5, color="C1", label=f"plain Langevin, T = {ladder['temperatures'][0]:g}")
    ax.plot(n_rungs * rung["step"] / 1e6, rg2_ladder, lw=0.5, color="C0",
            label=f"replica exchange, coldest rung T = {ladder['temperatures'][0]:g} ({n_rungs} rungs)")
    ax.set_xlabel(f"cost [10^6 steps of one {model['chains']['length'][0]}-bead chain]")
    ax.set_ylabel("Rg^2 [sigma^2]")
    ax.legend(frameon=False, fontsize="small")
    FigureCanvasAgg(fig)
    fig.tight_layout()
    FIGURE.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(str(FIGURE) + ".png", dpi=150)
    print(json.dumps(out, indent=2, default=str))


if __name__ == "__main__":
    part, target = sys.argv[1], sys.argv[2]
    {"ladder": run_ladder_part, "plain": run_plain_part, "report": report}[part](target)
