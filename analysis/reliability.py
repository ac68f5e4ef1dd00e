"""Run the fault-injection suite and record its tally in ``analysis/reliability.md``.

Usage (from the repository root)::

    python analysis/reliability.py            # the full-length suite (--faults-long)
    python analysis/reliability.py --short    # the default-suite version
    python analysis/reliability.py --from-record FILE   # only render a tally written by --fault-record

The cost of the safety nets (blow-up checks, trajectory join), measured by
``analysis/reliability_overhead.py`` into ``analysis/reliability_overhead.json``, is added as its own section.

The table lists, per kind of fault: faults injected, faults survived (the run or study ended exactly as an
uninterrupted one, or the input was refused with a beadsim error), frames lost and duplicated (must be 0),
bad inputs tried and uncaught exceptions (must be 0). The machine, its load average at the start and the
end, the pytest outcome and the wall time are recorded beside it.
"""

import argparse
import json
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
FIELDS = ("injected", "survived", "frames_lost", "frames_duplicated", "bad_inputs", "uncaught")
OVERHEAD = ROOT / "analysis" / "reliability_overhead.json"
HEADER = ("fault", "injected", "survived", "frames lost", "frames duplicated", "bad inputs tried", "uncaught exceptions")


def machine():
    cpu = next((line.split(":", 1)[1].strip() for line in open("/proc/cpuinfo") if line.startswith("model name")),
               platform.processor()) if os.path.exists("/proc/cpuinfo") else platform.processor()
    return f"{cpu}, {os.cpu_count()} cores, Python {platform.python_version()}"


def render(record, started_load, ended_load, wall, outcome):
    rows = record["faults"]
    total = {f: sum(r[f] for r in rows.values()) for f in FIELDS}
    lines = ["# Reliability under faults and bad input", "",
             f"Suite: `tests/faults` ({'full length, --faults-long' if record['long'] else 'default-suite version'}); "
             f"pytest outcome: {outcome}; wall time {wall / 60:.1f} min.",
             f"Machine: {machine()}; load average (1, 5, 15 min) {started_load} at the start, {ended_load} at the end "
             "(the machine is shared; timings are not the point here, counts are).", "",
             "| " + " | ".join(HEADER) + " |", "|" + "---|" * len(HEADER)]
    for kind, r in rows.items():
        lines.append(f"| {kind} | " + " | ".join(str(r[f]) for f in FIELDS) + " |")
    lines.append("| **total** | " + " | ".join(f"**{total[f]}**" for f in FIELDS) + " |")
    lines += ["", "Faults survived: the run resumed after the fault and ended with the same table bytes, trajectory "
              "frames and final checkpoint as an uninterrupted run (kills, full disk); the blow-up was stopped "
              "and named with its step, bead and term and no broken state was checkpointed; the study recorded "
              "every point exactly once in a store passing `PRAGMA integrity_check`; a file carrying a pickle "
              "was refused without running it. Bad inputs: random and malformed input files, command lines, "
              "arguments of every public analysis function and output paths; an uncaught exception is any "
              "exception that is not a beadsim error, or a traceback from the command line.", ""]
    if OVERHEAD.exists():
        lines += overhead_section(json.loads(OVERHEAD.read_text()))
    return "\n".join(lines)


def overhead_section(report):
    """Markdown lines for the cost of the blow-up checks and the trajectory join (``reliability_overhead.py``)."""
    m = report["machine_at_start"]
    load_start = ", ".join(f"{x:.2f}" for x in m["load_average_1_5_15"])
    load_end = ", ".join(f"{x:.2f}" for x in report["load_average_at_end"])
    lines = ["## Cost of the safety nets", "",
             f"Measured by `analysis/reliability_overhead.py` ({report['started_utc']} to {report['ended_utc']}) on "
             f"{m['cpu_model']}, {m['nproc']} cores, numba {m['numba']} with {m['numba_threads']} threads "
             "(systems under the parallel threshold run on one); load average (1, 5, 15 min) "
             f"{load_start} at the start and {load_end} at the end. Checks run after every stretch of "
             f"{report['every']} steps (the default output intervals); joined frames are one every "
             f"{report['frame_interval']} steps.", "",
             "| system | ms per step | check, ms | state copy, ms | check + copy per stretch | "
             "guarded / plain wall time (median, range) | join: frames, MB | join, s | join / dynamics behind it |",
             "|---|---|---|---|---|---|---|---|---|"]
    for key, r in report["systems"].items():
        c, j = r["checks"], r["join"]
        lines.append(f"| {key}: {r['label']} | {1e3 * c['seconds_per_step']:.3g} | {1e3 * c['seconds_per_check']:.3g} "
                     f"| {1e3 * c['seconds_per_state_copy']:.3g} | {100 * c['check_and_copy_over_stretch']:.2g} % | "
                     f"{c['guarded_over_plain_median']:.3f} ({c['guarded_over_plain_min']:.3f}-"
                     f"{c['guarded_over_plain_max']:.3f}, {c['pairs']} pairs of {c['steps_per_timed_run']} steps) | "
                     f"{j['frames']} in {j['parts']} parts, {j['file_bytes'] / 1e6:.3g} | {j['seconds_join']:.3g} | "
                     f"{100 * j['join_over_dynamics']:.2g} % |")
    systems = report["systems"].values()
    worst = max(r["checks"]["check_and_copy_over_stretch"] for r in systems)
    spread = max(r["checks"]["guarded_over_plain_max"] - r["checks"]["guarded_over_plain_min"] for r in systems)
    lines += ["", f"The check and the state copy together cost at most {100 * worst:.2g} % of the steps they follow. "
              f"The paired wall-time ratios scatter over a range of up to {spread:.2f} (the machine's load), far "
              "more than that cost: on a loaded machine the wall-time comparison cannot resolve it, and the timing "
              "of the parts is the figure to quote. "
              "The join reads and rewrites every frame once at the end of a run (writing the parts took "
              + ", ".join(f"{r['join']['seconds_writing_parts']:.3g} s for {key}" for key, r in report["systems"].items())
              + ", each part storing the topology again)."]
    return lines + [""]


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--short", action="store_true", help="the default-suite version")
    parser.add_argument("--from-record", help="render this tally instead of running the suite")
    parser.add_argument("--out", default=str(ROOT / "analysis" / "reliability.md"))
    args = parser.parse_args()
    started_load = [round(x, 2) for x in os.getloadavg()]
    started = time.monotonic()
    record_path = Path(args.from_record) if args.from_record else ROOT / "analysis" / "reliability_record.json"
    outcome = "not run here (rendered from a record)"
    if not args.from_record:
        command = [sys.executable, "-m", "pytest", "-q", "tests/faults", f"--fault-record={record_path}"]
        if not args.short:
            command.append("--faults-long")
        done = subprocess.run(command, cwd=ROOT)
        outcome = "all passed" if done.returncode == 0 else f"exit status {done.returncode} (see the pytest output)"
    record = json.loads(record_path.read_text())
    text = render(record, started_load, [round(x, 2) for x in os.getloadavg()], time.monotonic() - started, outcome)
    Path(args.out).write_text(text, encoding="utf-8")
    print(text)


if __name__ == "__main__":
    main()
