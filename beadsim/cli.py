"""Command line: parse, validate, call the library, map beadsim errors to exit status 2."""

import argparse
import logging
import sys
from pathlib import Path

from . import __version__
from .errors import BeadsimError

EXIT_INPUT = 2
EXIT_INTERRUPTED = 130


def _cmd_run(args):
    from .config import read_settings
    from .runner import run

    settings = read_settings(args.input)
    out = Path(args.out) if args.out else Path(f"{Path(args.input).stem}_run")
    if not args.quiet:
        print(f"beadsim: compiling kernels on first use (cached afterwards); output folder {out}", file=sys.stderr)
    summary = run(settings, out, resume=args.resume, overwrite=args.overwrite, progress=not args.quiet)
    print(f"done: {summary['final_step']} steps, {summary['bead_steps_per_second']:.3g} bead-steps/s, "
          f"outputs in {out}")
    return 0


def _cmd_analyze(args):
    from .analysis.report import analyze_file, format_table

    frames = None
    if args.first is not None or args.last is not None:
        frames = (args.first, args.last)
    summary = analyze_file(args.trajectory, top_path=args.top, out_dir=args.out, frames=frames,
                           length_scale=args.length_scale, q=args.q, q_range=args.q_range, n_q=args.q_count,
                           pair_frames=args.pair_frames, structure_frames=args.structure_frames)
    print(format_table(summary))
    print(f"tables and figures in {args.out}")
    return 0


def _cmd_sweep(args):
    from .studies.sweep import run_study

    out = Path(args.out) if args.out else Path(f"{Path(args.study).stem}_study")
    summary = run_study(args.study, out, workers=args.workers, backend="dask" if args.cluster else "local",
                        cluster=args.cluster, progress=not args.quiet, reanalyze=args.reanalyze)
    from .studies.report import format_study
    print(format_study(summary))
    return 0 if not summary["failed"] else EXIT_INPUT


def _cmd_temper(args):
    from .studies.tempering import format_summary, temper

    summary = temper(args.ladder, Path(args.out), workers=args.workers, cluster=args.cluster,
                     progress=not args.quiet)
    print(format_summary(summary))
    print(f"samples, frames, curves and figures in {args.out}")
    return 0


def _cmd_bench(args):
    import json

    from .bench import format_table, run_benchmarks

    if args.statics:
        return _statics_bench(args)
    if not args.quiet:
        print("beadsim: benchmark systems A-F (compiling kernels on first use); this takes minutes", file=sys.stderr)
    log = (lambda line: None) if args.quiet else (lambda line: print(f"beadsim: {line}", file=sys.stderr))
    report = run_benchmarks(quick=args.quick, threads=args.threads, log=log)
    print(format_table(report))
    if args.json:
        Path(args.json).write_text(json.dumps(report, indent=2) + "\n", encoding="utf-8")
        print(f"results in {args.json}")
    return 0


STATICS_SAMPLERS = ("hybrid", "previous-moves", "dynamics")


def _statics_bench(args):
    import json

    from .statics_bench import format_statics, run_statics_benchmark

    if not args.quiet:
        print("beadsim: statics benchmark (one thread; compiling kernels on first use); this takes "
              f"about {len(args.sizes) * args.replicas * (len(args.samplers) * args.cpu_seconds + 60) / 60:.0f} "
              "minutes or more", file=sys.stderr)
    log = (lambda line: None) if args.quiet else (lambda line: print(f"beadsim: {line}", file=sys.stderr))
    report = run_statics_benchmark(sizes=args.sizes, temperature=args.temperature, cpu_seconds=args.cpu_seconds,
                                   samplers=args.samplers, log=log, replicas=args.replicas, seed=args.seed)
    print(format_statics(report))
    if args.json:
        Path(args.json).write_text(json.dumps(report, indent=2) + "\n", encoding="utf-8")
        print(f"results in {args.json}")
    return 0


def _cmd_vet(args):
    from .studies.vet import vet

    out = Path(args.out) if args.out else Path(f"{Path(args.model).stem}_vet")
    if not args.quiet:
        print(f"beadsim: vetting {args.model} (compiling kernels on first use); report in {out}", file=sys.stderr)
    report = vet(args.model, out, budget_minutes=args.budget, fast=args.fast, overwrite=args.overwrite)
    for v in report["verdicts"]:
        print(f"{v['status']:>7}  {v['title']}: {v['message']}")
    print(f"{len(report['problems'])} problem(s); report: {report['html']}")
    return 0


def build_parser():
    """The argument parser of the ``beadsim`` command."""
    parser = argparse.ArgumentParser(prog="beadsim", description="Coarse-grained bead-spring polymer chains: "
                                     "simulate, analyse, find the theta point.")
    parser.add_argument("--version", action="version", version=f"beadsim {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log progress details")
    sub = parser.add_subparsers(dest="command", required=True)

    p = sub.add_parser("run", help="minimise, equilibrate and sample one system from an input file")
    p.add_argument("input", help="input file (TOML)")
    p.add_argument("--out", help="output folder (default: <input name>_run)")
    group = p.add_mutually_exclusive_group()
    group.add_argument("--resume", action="store_true", help="continue the run in the output folder")
    group.add_argument("--overwrite", action="store_true", help="replace a run already in the output folder")
    p.add_argument("--quiet", action="store_true", help="no progress bar (batch use)")
    p.set_defaults(func=_cmd_run)

    p = sub.add_parser("sweep", help="run a solvent-quality study over a control parameter and chain lengths, "
                       "estimate the theta point and the collapse")
    p.add_argument("study", help="study file (TOML)")
    p.add_argument("--out", help="study folder (default: <study name>_study); run again to resume")
    p.add_argument("--workers", type=int, help="worker processes on this machine (default: all cores)")
    p.add_argument("--cluster", help="run the points with dask: 'local:N' starts N worker processes on "
                   "127.0.0.1, 'tcp://HOST:PORT' (or tls://) uses a running scheduler and its workers")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--reanalyze", action="store_true",
                   help="analyse finished points again from their files (after an analysis upgrade)")
    p.set_defaults(func=_cmd_sweep)

    p = sub.add_parser("temper", help="replica exchange across a temperature ladder, then MBAR curves and the "
                       "heat-capacity peak")
    p.add_argument("ladder", help="ladder file (TOML, section [ladder])")
    p.add_argument("--out", required=True, help="output folder; run again to continue, or with more rounds to extend")
    p.add_argument("--workers", type=int, help="run replicas on this many local worker processes (default: this "
                   "process only)")
    p.add_argument("--cluster", help="run replicas with dask: 'local:N' or a scheduler address 'tcp://HOST:PORT'")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=_cmd_temper)

    p = sub.add_parser("bench", help="time the standard systems: bead-steps per second, where the time goes, "
                       "gain over the NumPy reference")
    p.add_argument("--json", help="also write the results to this JSON file")
    p.add_argument("--quick", action="store_true", help="fewer repeats; size series up to 64,000 beads")
    p.add_argument("--threads", type=int, help="kernel threads (default: all numba was started with)")
    p.add_argument("--quiet", action="store_true", help="only the table")
    p.add_argument("--statics", action="store_true", help="instead: independent Rg^2 samples per CPU-second of "
                   "one attractive chain, hybrid sampling (now and with the previous moves) and dynamics")
    p.add_argument("--sizes", type=int, nargs="+", default=[256, 512, 1024], help="chain lengths (--statics)")
    p.add_argument("--temperature", type=float, default=3.3, help="kT (--statics; default 3.3)")
    p.add_argument("--cpu-seconds", type=float, default=120.0, help="production CPU budget per sampler and "
                   "length (--statics; default 120)")
    p.add_argument("--samplers", nargs="+", choices=list(STATICS_SAMPLERS), default=list(STATICS_SAMPLERS),
                   help="samplers to measure (--statics; default all)")
    p.add_argument("--replicas", type=int, default=1, help="independent repetitions of each measurement, each from "
                   "its own equilibrated chain; the summary gives their mean and its standard error (--statics)")
    p.add_argument("--seed", type=int, default=1, help="first seed of the replicas (--statics; default 1)")
    p.set_defaults(func=_cmd_bench)

    p = sub.add_parser("vet", help="check a model before production: timestep, forces, tables, bond crossing, "
                       "solvent quality, theta point, run time; writes an HTML and a JSON report")
    p.add_argument("model", help="run input of the model, or a vet file with a [vet] section naming it")
    p.add_argument("--budget", type=float, help="wall-time budget in minutes (default 30; 4 with --fast)")
    p.add_argument("--fast", action="store_true", help="short runs throughout, for a first look")
    p.add_argument("--out", help="report folder (default: <model name>_vet)")
    p.add_argument("--overwrite", action="store_true", help="replace a report already in the folder")
    p.add_argument("--quiet", action="store_true", help="no start-up message")
    p.set_defaults(func=_cmd_vet)

    p = sub.add_parser("analyze", help="size, shape, scattering and errors of a trajectory mdtraj can read")
    p.add_argument("trajectory", help="trajectory file")
    p.add_argument("--top", help="topology file for formats without one (.xtc, .dcd)")
    p.add_argument("--out", default="analysis_output", help="folder for tables and figures")
    p.add_argument("--first", type=int, help="first frame to use (default: 0)")
    p.add_argument("--last", type=int, help="frame to stop before (default: end)")
    p.add_argument("--length-scale", type=float, help="nm per sigma: report lengths in sigma")
    p.add_argument("--q", type=float, nargs="+", metavar="Q",
                   help="scattering vectors of P(q), 1/nm (1/sigma with --length-scale)")
    p.add_argument("--q-range", type=float, nargs=2, metavar=("QMIN", "QMAX"),
                   help="log-spaced P(q) grid over this range instead (default 0.2/Rg .. 10/<b>)")
    p.add_argument("--q-count", type=int, default=60, help="points of the log-spaced P(q) grid (default 60)")
    p.add_argument("--pair-frames", type=int,
                   help="most frames for P(q) and R_h, spread evenly (default: every equilibrated frame)")
    p.add_argument("--structure-frames", type=int, default=200,
                   help="most frames for S(q) of a periodic box, spread evenly (default 200)")
    p.set_defaults(func=_cmd_analyze)
    return parser


def main(argv=None):
    """Entry point of the ``beadsim`` console script; returns the exit status."""
    args = build_parser().parse_args(argv)
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                        format="beadsim: %(message)s")
    try:
        return args.func(args)
    except BeadsimError as exc:
        print(f"beadsim: error: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("beadsim: interrupted; the last checkpoint is kept (continue with --resume)", file=sys.stderr)
        return EXIT_INTERRUPTED


if __name__ == "__main__":
    sys.exit(main())
