"""Speed-up of a 16-point study on 2 workers against 1, with the local pool and with a Dask LocalCluster.

Runs ``beadsim sweep`` as a user would (a fresh process per run, numba cache warm)
and reports for each backend and worker count:

* ``wall``: the whole command (start-up, pool or cluster start, points, results table, figures);
* ``points``: from the first point handed out to the last one finished, read from the study store
  (the part that parallelises);
* ``busy workers``: the simulation time of all points (their ``summary.json``) divided by ``points``,
  i.e. how many workers were simulating on average; it shows whether the backend keeps every worker
  busy even when other programs slow each point down;
* ``CPU``: the CPU seconds the sweep and its workers used (a second worker should add little);
* the load on the machine: load averages before and after, and the CPU time that processes other
  than this benchmark used during the run (system busy time minus this benchmark's children).

Usage::

    python analysis/parallel_speedup.py [--folder DIR] [--steps N] [--json results.json]

Prints a Markdown table; ``analysis/parallel_speedup.md`` records a run and what it means.
"""

import argparse
import json
import os
import platform
import resource
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import psutil

MODEL = """
[chains]
length = 16
[nonbonded]
potential = "lennard_jones"
[dynamics]
timestep = 0.005
[run]
seed = 1
equilibration_steps = 2000
production_steps = {steps}
[output]
frame_interval = 1000
table_interval = 50
checkpoint_interval = 10000
"""

#: 2 chain lengths x 4 temperatures x 2 replicas = 16 points.
STUDY = """[study]
base = "model.toml"
control = "temperature"
values = [1.5, 2.0, 2.5, 3.0]
chain_lengths = [16, 32]
replicas = 2
seed = 11
"""

RUNS = [("local", 1), ("local", 2), ("dask", 1), ("dask", 2)]


def cpu_model():
    """CPU model name from /proc/cpuinfo (or the platform's processor string)."""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def points_span(store):
    """Seconds from the first point handed out to the last one finished, and the folders of the points done."""
    with sqlite3.connect(store) as db:
        first, last = db.execute("SELECT MIN(started), MAX(finished) FROM points").fetchone()
        folders = [row[0] for row in db.execute("SELECT folder FROM points WHERE status = 'done'")]
    return last - first, folders


def timed_sweep(study, out, backend, workers):
    """Run one sweep in a fresh process; return its timings and the machine's load during it."""
    option = ["--workers", str(workers)] if backend == "local" else ["--cluster", f"local:{workers}"]
    cmd = [sys.executable, "-m", "beadsim", "sweep", str(study), "--out", str(out), "--quiet", *option]
    load_before = os.getloadavg()
    busy_before = _busy_seconds()
    ours_before = _children_cpu()
    started = time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL)
    wall = time.perf_counter() - started
    ours = _children_cpu() - ours_before
    others = (_busy_seconds() - busy_before) - ours
    span, folders = points_span(out / "study.sqlite")
    simulated = sum(json.loads((Path(f) / "summary.json").read_text())["wall_seconds"] for f in folders)
    return {"backend": backend, "workers": workers, "wall_seconds": round(wall, 2),
            "points_seconds": round(span, 2), "points_done": len(folders), "busy_workers": round(simulated / span, 2),
            "cpu_seconds": round(ours, 1),
            "load_before": [round(x, 2) for x in load_before], "load_after": [round(x, 2) for x in os.getloadavg()],
            "other_processes_cores": round(max(others, 0.0) / wall, 2)}


def _busy_seconds():
    t = psutil.cpu_times()
    return t.user + t.nice + t.system + t.irq + t.softirq + getattr(t, "steal", 0.0)


def _children_cpu():
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--folder", help="working folder (default: a temporary one)")
    parser.add_argument("--steps", type=int, default=40000, help="production steps per point")
    parser.add_argument("--json", help="also write the results to this JSON file")
    parser.add_argument("--backends", nargs="+", choices=("local", "dask"), default=["local", "dask"],
                        help="backends to time (default: both)")
    args = parser.parse_args(argv)
    folder = Path(args.folder or tempfile.mkdtemp(prefix="beadsim_speedup_"))
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "model.toml").write_text(MODEL.format(steps=args.steps))
    (folder / "study.toml").write_text(STUDY)
    # warm the numba cache so that no run pays for compiling
    warm = folder / "warm.toml"
    warm.write_text(STUDY.replace("chain_lengths = [16, 32]", "chain_lengths = [16]").replace("replicas = 2",
                                                                                                "replicas = 1"))
    subprocess.run([sys.executable, "-m", "beadsim", "sweep", str(warm), "--out", str(folder / "warm"), "--quiet",
                    "--workers", "1"], check=True, stdout=subprocess.DEVNULL)
    runs = [timed_sweep(folder / "study.toml", folder / f"{backend}_{n}", backend, n) for backend, n in RUNS
            if backend in args.backends]
    machine = {"cpu": cpu_model(), "nproc": os.cpu_count(), "usable_cores": len(os.sched_getaffinity(0)),
               "python": platform.python_version(), "steps_per_point": args.steps}
    print(f"machine: {machine}")
    print("| backend | workers | wall (s) | points (s) | speed-up wall | speed-up points | busy workers | CPU (s) | "
          "load before -> after "
          "(1 min) | other processes (cores busy) |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for r in runs:
        one = next(x for x in runs if x["backend"] == r["backend"] and x["workers"] == 1)
        print(f"| {r['backend']} | {r['workers']} | {r['wall_seconds']} | {r['points_seconds']} | "
              f"{one['wall_seconds'] / r['wall_seconds']:.2f} | {one['points_seconds'] / r['points_seconds']:.2f} | "
              f"{r['busy_workers']} | {r['cpu_seconds']} | "
              f"{r['load_before'][0]} -> {r['load_after'][0]} | {r['other_processes_cores']} |")
    if args.json:
        Path(args.json).write_text(json.dumps({"machine": machine, "runs": runs}, indent=2) + "\n")


if __name__ == "__main__":
    main()
