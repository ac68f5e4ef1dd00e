"""What the safety nets of a run cost: the blow-up checks between step-loop calls and the trajectory join.

Usage (from the repository root)::

    python analysis/reliability_overhead.py                 # writes analysis/reliability_overhead.json
    python analysis/reliability_overhead.py --quick         # fewer repeats and steps (a smoke test)

Two of the standard benchmark systems (``beadsim/bench.py``): A, a WCA + FENE melt of 32,000 beads
(periodic, density 0.85), and D, one 1,000-bead WCA + FENE chain in an open box; both warmed up as the
benchmark does (BAOAB, dt = 0.005 tau).

Blow-up checks: a run moves in stretches of ``every`` steps (100 with the default output intervals, the
greatest common divisor of the table, frame and checkpoint intervals) and after each stretch
``engine.health.guarded`` calls ``diagnose`` and keeps a copy of the state (``Simulation.state_arrays``)
to replay from. There is no switch to turn the checks off, so the cost is measured two ways: (1) the
check and the copy timed on their own against the stretch they follow, and (2) a run of whole stretches
through ``guarded`` against the same through the unchecked ``engine.loop.iterate``, in pairs, alternating
which goes first; the ratio's median and range over the pairs are reported (the difference is often
below the run-to-run scatter of a shared machine).

Join: frames written through ``io.parts.PartedTrajectory`` in parts of one checkpoint interval each,
then ``join`` timed; compared with the time the dynamics took to produce those frames at the default
frame interval (1,000 steps).
"""

import argparse
import json
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from beadsim.bench import _melt, _open_chain, _prepare, machine_description  # noqa: E402
from beadsim.engine.health import diagnose, guarded  # noqa: E402
from beadsim.engine.loop import iterate  # noqa: E402
from beadsim.engine.threads import threads_for  # noqa: E402
from beadsim.io import make_topology  # noqa: E402
from beadsim.io.parts import PartedTrajectory  # noqa: E402
from beadsim.model.potentials import WCA  # noqa: E402

#: Steps between checks with the default output intervals (table 100, frames 1,000, checkpoints 10,000).
EVERY = 100
#: Default frame interval, steps: the dynamics time behind each joined frame.
FRAME_INTERVAL = 1000
SYSTEMS = {"A": ("WCA+FENE melt, 32,000 beads, periodic", lambda: _melt(32_000, WCA())),
           "D": ("one WCA+FENE chain, 1,000 beads, open box", lambda: _open_chain(1_000, WCA(), compact=False))}
#: (stretches per timed run, timed pairs, frames joined, parts) per system at full length.
PLAN = {"A": (3, 7, 40, 4), "D": (20, 7, 1000, 10)}


def _median_time(fn, repeats):
    """Median wall time of ``repeats`` calls of ``fn``, s."""
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def _drain(generator):
    for _ in generator:
        pass


def check_cost(sim, stretches, pairs):
    """Seconds per step, per check and per state copy (medians), and the guarded/unguarded wall-time ratios."""
    step = _median_time(lambda: sim.advance(EVERY), 5) / EVERY
    check = _median_time(lambda: diagnose(sim), 21)
    copy = _median_time(sim.state_arrays, 21)
    ratios, order = [], []
    for i in range(pairs):
        times = {}
        for kind in (("guarded", "plain") if i % 2 == 0 else ("plain", "guarded")):
            loop = guarded if kind == "guarded" else iterate
            t = time.perf_counter()
            _drain(loop(sim, stretches * EVERY, EVERY))
            times[kind] = time.perf_counter() - t
        ratios.append(times["guarded"] / times["plain"])
        order.append(times)
    return {"seconds_per_step": step, "seconds_per_check": check, "seconds_per_state_copy": copy,
            "check_and_copy_over_stretch": (check + copy) / (EVERY * step),
            "guarded_over_plain_median": statistics.median(ratios), "guarded_over_plain_min": min(ratios),
            "guarded_over_plain_max": max(ratios), "pairs": pairs, "steps_per_timed_run": stretches * EVERY}


def join_cost(sim, n_frames, n_parts, step_seconds):
    """Seconds to join ``n_frames`` frames kept in ``n_parts`` parts, and that over the dynamics behind them."""
    s = sim.system
    topology = make_topology(s.chain_lengths, s.bonds)
    box = s.box.lengths if s.box.periodic else None
    with tempfile.TemporaryDirectory(dir=ROOT / "analysis") as folder:
        traj = PartedTrajectory(Path(folder) / "trajectory.h5", topology, 1.0, box)
        t = time.perf_counter()
        for i in range(n_frames):
            traj.append(i + 1, 0.005 * (i + 1), s.positions)
            if (i + 1) % (n_frames // n_parts) == 0:
                traj.seal()
        written = time.perf_counter() - t
        t = time.perf_counter()
        traj.join()
        joined = time.perf_counter() - t
        size = os.path.getsize(Path(folder) / "trajectory.h5")
        traj.discard_parts()
    dynamics = n_frames * FRAME_INTERVAL * step_seconds
    return {"frames": n_frames, "parts": n_parts, "file_bytes": size, "seconds_writing_parts": written,
            "seconds_join": joined, "dynamics_seconds_behind_frames": dynamics,
            "join_over_dynamics": joined / dynamics}


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats and frames")
    parser.add_argument("--json", default=str(ROOT / "analysis" / "reliability_overhead.json"))
    args = parser.parse_args()
    report = {"machine_at_start": machine_description(), "every": EVERY, "frame_interval": FRAME_INTERVAL,
              "started_utc": time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime()), "systems": {}}
    for key, (label, make) in SYSTEMS.items():
        stretches, pairs, frames, parts = PLAN[key]
        if args.quick:
            stretches, pairs, frames = max(1, stretches // 3), 3, max(parts, frames // 10)
        system, forcefield = make()
        sim = _prepare(system, forcefield, 300)
        with threads_for(system.n_beads):
            checks = check_cost(sim, stretches, pairs)
            join = join_cost(sim, frames, parts, checks["seconds_per_step"])
        report["systems"][key] = {"label": label, "beads": int(system.n_beads), "checks": checks, "join": join}
        print(key, json.dumps(report["systems"][key], indent=1), flush=True)
    report["load_average_at_end"] = list(os.getloadavg())
    report["ended_utc"] = time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime())
    Path(args.json).write_text(json.dumps(report, indent=2) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
