"""Benchmark: replica exchange against a plain Langevin run of the same CPU cost, 128-bead LJ chain at 0.6 theta.

The ladder is ``analysis/studies/replica_exchange_ladder.toml`` (8 rungs, T = 1.8 to 3.0); the plain
run is its base model at T = 1.8 for 8 times the steps each replica takes. Both start from swollen
grown chains. Each part is resumable and measures the processor time it used (summed over invocations
in ``cpu.json`` of its folder).

Usage::

    python analysis/replica_exchange.py ladder DIR     # run (or continue) the ladder in DIR/ladder
    python analysis/replica_exchange.py plain DIR      # run (or continue) the plain run in DIR/plain
    python analysis/replica_exchange.py report DIR     # figure and the numbers of analysis/replica_exchange.md
    python analysis/replica_exchange.py swollen DIR         # second comparison: all runs from one swollen start
    python analysis/replica_exchange.py swollen-report DIR  # its figure and numbers

The two run parts may run at the same time (in two processes).
"""

import json
import math
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


# ---------------------------------------------------------------------------------------------------------------
# Second comparison: plain runs and ladders that all start from one swollen conformation (section "From a
# swollen start" of analysis/replica_exchange.md). Every choice below was fixed before any of these runs.

#: Temperature of the swollen start: above theta (about 3.0), where <Rg^2> of this chain is about 48.5
#: (analysis/lj_theta_calibration.md, N = 128, T = 4.0), over four times the globule's 11.3 at T = 1.8.
SWOLLEN_TEMPERATURE = 4.0
#: Steps at SWOLLEN_TEMPERATURE from the grown, minimised chain (about 20 correlation times there: the
#: calibration found about 70 independent samples per 1,000,000 steps at T = 4.0).
SWOLLEN_STEPS = 300_000
START_SEED = 1290
PLAIN_SEEDS = (1291, 1292, 1293)
LADDER_SEEDS = (1301, 1302, 1303)
#: Rounds of each ladder (1,000 steps each); every plain run takes the ladder's total, 8 x 1,000 x ROUNDS steps.
#: Sized from the measured speed (16,000-18,000 steps of this chain per CPU-second, both kinds of run) and
#: the machine's load (this process got about a quarter of a core): the six runs take about 10 CPU-minutes,
#: 1.6 million steps of one chain each, 80 times the collapse time of the first comparison's ladder replica.
SWOLLEN_ROUNDS = 200
#: A run counts as collapsed at its first Rg^2 sample below this (1.5 x the reference <Rg^2> at T = 1.8).
COLLAPSED_FACTOR = 1.5
SWOLLEN = "swollen"


def reference_rg2():
    """<Rg^2> at T = 1.8 of the first comparison (plain and ladder runs, weighted mean) and its error."""
    first = json.loads((HERE / "replica_exchange_results.json").read_text())
    values = [(first[k]["mean"], first[k]["error"]) for k in ("plain", "ladder")]
    weights = [1 / e ** 2 for _, e in values]
    mean = sum(w * m for w, (m, _) in zip(weights, values)) / sum(weights)
    return mean, sum(weights) ** -0.5


def swollen_start(folder):
    """Grow and minimise the chain, run it at SWOLLEN_TEMPERATURE, keep its last positions and velocities."""
    import numpy as np

    from beadsim.engine.loop import iterate
    from beadsim.runner import chain_sizes
    from beadsim.studies.tempering import read_ladder, start_simulation

    path = Path(folder) / SWOLLEN / "start.npz"
    if path.exists():
        return path
    path.parent.mkdir(parents=True, exist_ok=True)
    _, model = read_ladder(LADDER)
    sim = start_simulation(model, START_SEED)
    sim.integrator.temperature = SWOLLEN_TEMPERATURE
    offsets = sim.system.chain_offsets
    rg2 = [chain_sizes(s.positions, offsets)[0] ** 2 for s in iterate(sim, SWOLLEN_STEPS, 1000)]
    np.savez(path, positions=sim.system.positions, velocities=sim.system.velocities, rg2=np.array(rg2))
    return path


def _start(folder):
    import numpy as np

    with np.load(swollen_start(folder)) as data:
        return data["positions"], data["velocities"]


def swollen_plain(folder, index):
    """Plain Langevin run at the coldest rung's temperature from the swollen start (seed PLAIN_SEEDS[index])."""
    import numpy as np

    from beadsim.engine.loop import iterate
    from beadsim.engine.threads import threads_for
    from beadsim.runner import chain_sizes
    from beadsim.studies.tempering import read_ladder, start_simulation

    path = Path(folder) / SWOLLEN / f"plain_{index}.npz"
    if path.exists():
        return
    ladder, model = read_ladder(LADDER)
    steps = len(ladder["temperatures"]) * ladder["exchange_interval"] * SWOLLEN_ROUNDS
    cpu = time.process_time()
    with threads_for(model["chains"]["length"][0]):
        sim = start_simulation(model, PLAIN_SEEDS[index], _start(folder))
        offsets = sim.system.chain_offsets
        rows = [(s.step, chain_sizes(s.positions, offsets)[0] ** 2)
                for s in iterate(sim, steps, ladder["sample_interval"])]
    rows = np.array(rows)
    np.savez(path, step=rows[:, 0], rg2=rows[:, 1], cpu_seconds=time.process_time() - cpu)


def swollen_ladder(folder, index):
    """Replica exchange (the ladder file with seed LADDER_SEEDS[index]) with every replica at the swollen start."""
    from beadsim.studies.tempering import SUMMARY_FILE, read_ladder, run_ladder

    out = Path(folder) / SWOLLEN / f"ladder_{index}"
    if (out / SUMMARY_FILE).exists():
        return
    ladder, model = read_ladder(LADDER)
    ladder.update(seed=LADDER_SEEDS[index], rounds=SWOLLEN_ROUNDS)
    start = time.process_time()
    try:
        run_ladder(ladder, model, out, progress=False, analyze=False, start=_start(folder))
    finally:
        _add_cpu(out, time.process_time() - start)


def swollen_all(folder):
    """The start, then plain runs and ladders in turn (so that an interrupted invocation leaves pairs)."""
    swollen_start(folder)
    for i in range(len(PLAIN_SEEDS)):
        swollen_plain(folder, i)
        swollen_ladder(folder, i)


def _run_measures(cost, rg2, cpu_seconds, reference):
    """Collapse time, detected equilibration and averages of one run's Rg^2 series against the reference."""
    from beadsim.analysis.stats import summarize

    below = rg2 < COLLAPSED_FACTOR * reference[0]
    s = summarize(rg2)
    quarter = summarize(rg2[3 * rg2.size // 4:], detect=False)
    spacing = cost[1] - cost[0]

    def z(summary):
        return None if summary.error is None else (summary.mean - reference[0]) / math.hypot(summary.error,
                                                                                               reference[1])
    return {"collapsed_at_cost": float(cost[below.argmax()]) if below.any() else None,
            "equilibrated_at_cost": float(cost[0] + spacing * s.equilibration_index),
            "equilibrated_at_cpu_seconds": cpu_seconds * (spacing * s.equilibration_index + cost[0]) / cost[-1],
            "mean": s.mean, "error": s.error, "z": z(s), "n_independent": s.n_independent, "reason": s.reason,
            "last_quarter": {"mean": quarter.mean, "error": quarter.error, "z": z(quarter), "reason": quarter.reason},
            "cpu_seconds": cpu_seconds, "total_cost": float(cost[-1])}


def swollen_report(folder):
    """Figure and numbers of the swollen-start comparison."""
    import numpy as np
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from beadsim.io import read_table
    from beadsim.studies.tempering import SAMPLE_FILE, SUMMARY_FILE, read_ladder, rung_folder

    folder = Path(folder) / SWOLLEN
    ladder, model = read_ladder(LADDER)
    k = len(ladder["temperatures"])
    reference = reference_rg2()
    with np.load(folder / "start.npz") as data:
        start_rg2 = data["rg2"]
    runs = {}
    for i in range(len(PLAIN_SEEDS)):
        if (folder / f"plain_{i}.npz").exists():
            with np.load(folder / f"plain_{i}.npz") as data:
                runs[f"plain_{i}"] = (data["step"], data["rg2"], float(data["cpu_seconds"]))
        if (folder / f"ladder_{i}" / SUMMARY_FILE).exists():
            rung = read_table(folder / f"ladder_{i}" / rung_folder(0) / SAMPLE_FILE)
            cpu = json.loads((folder / f"ladder_{i}" / "cpu.json").read_text())["cpu_seconds"]
            runs[f"ladder_{i}"] = (k * rung["step"].to_numpy(), rung["radius_of_gyration_squared"].to_numpy(), cpu)
    out = {"reference": reference, "start": {"rg2_final": float(start_rg2[-1]),
                                             "rg2_mean_second_half": float(start_rg2[start_rg2.size // 2:].mean())},
           "runs": {name: _run_measures(*run, reference) for name, run in runs.items()},
           "exchanges": {name: json.loads((folder / name / SUMMARY_FILE).read_text())
                         for name in runs if name.startswith("ladder")},
           "machine": f"{platform.machine()} {platform.processor() or ''}, {os.cpu_count()} cores, "
                      f"Python {platform.python_version()}",
           "load_now": os.getloadavg()}
    for summary in out["exchanges"].values():
        summary.pop("temperatures", None)
    fig = Figure(figsize=(9.5, 4.2))
    axes = fig.subplots(1, 2, sharey=True)
    for ax, log_x in zip(axes, (False, True)):
        for name, (cost, rg2, _) in runs.items():
            kind, i = name.split("_")
            ax.plot(cost / 1e6, rg2, lw=0.4, color=f"C{int(i) + (3 if kind == 'ladder' else 0)}",
                    label=(f"plain, seed {PLAIN_SEEDS[int(i)]}" if kind == "plain"
                           else f"replica exchange rung T = {ladder['temperatures'][0]:g}, seed {LADDER_SEEDS[int(i)]}"))
        ax.axhline(reference[0], color="k", lw=0.8, ls="--", label=f"reference <Rg^2> = {reference[0]:.2f}")
        ax.set_xlabel(f"cost [10^6 steps of one {model['chains']['length'][0]}-bead chain]")
        if log_x:
            ax.set_xscale("log")
            ax.set_title("same, logarithmic cost axis", fontsize="small")
        else:
            ax.set_title(f"T = {ladder['temperatures'][0]:g} from one swollen start (Rg^2 = {start_rg2[-1]:.1f})",
                         fontsize="small")
    axes[0].set_ylabel("Rg^2 [sigma^2]")
    axes[0].legend(frameon=False, fontsize="x-small")
    FigureCanvasAgg(fig)
    fig.tight_layout()
    stem = FIGURE.parent / "rg_series_swollen_start"
    stem.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(str(stem) + ".png", dpi=150)
    (HERE / "replica_exchange_swollen_results.json").write_text(json.dumps(out, indent=2, default=str) + "\n")
    print(json.dumps(out, indent=2, default=str))


if __name__ == "__main__":
    part, target = sys.argv[1], sys.argv[2]
    parts = {"ladder": run_ladder_part, "plain": run_plain_part, "report": report,
             "swollen": swollen_all, "swollen-report": swollen_report}
    parts[part](target)
