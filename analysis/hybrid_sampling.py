"""Benchmark: effectively independent Rg samples per CPU-second, hybrid sampling against plain Langevin.

Good-solvent chain: FENE bonds, WCA beads, kT = 1, BAOAB dt = 0.005, friction 0.5, open box, one numba
thread. The rate is (steps per CPU-second) / (g * sampling interval) with g the statistical
inefficiency of the Rg series after equilibration detection (beadsim.analysis.efficiency).

Plain Langevin decorrelates a 512-bead chain far too slowly for a direct measurement within this
benchmark, so its rate at N = 512 is obtained two ways, both recorded:

1. extrapolation: g (in steps) measured at N = 16, 32, 64 and fitted as a power of N, times the CPU cost
   per step measured at N = 512;
2. a direct but too short 512-bead run started in equilibrium, whose g underestimates the true one
   (the autocorrelation has not decayed within the run), so its rate overestimates the plain rate and
   the ratio is then a lower bound.

Usage (results to analysis/hybrid_sampling.json)::

    PYTHONPATH=. nice -n 19 python analysis/hybrid_sampling.py [--quick]

``--recheck`` measures only the hybrid rates at N = 128, 256 and 512 with the figure every run now reports
(an estimate from the larger of the autocorrelation and blocking g, with its error), into
analysis/hybrid_sampling_recheck.json.
"""

import argparse
import json
import os
import platform
import subprocess
import time
from pathlib import Path

import numba
import numpy as np

import beadsim as bs
from beadsim.analysis.efficiency import independent_samples_rate
from beadsim.engine.hybrid import HybridSampler

HERE = Path(__file__).parent


def chain_rg(x):
    """Radius of gyration of one chain, positions (n, 3) -> float, sigma."""
    return float(np.sqrt(np.mean(np.sum((x - x.mean(axis=0)) ** 2, axis=1))))


EQUILIBRATION = {"segment_steps": 20, "pivot_moves": 50, "crankshaft_moves": 0}
HYBRID_512 = {"segment_steps": 20, "pivot_moves": 100, "crankshaft_moves": 0}
"""The hybrid setting measured at N = 512."""


def chain_simulation(n, seed):
    """A grown (not yet minimised) good-solvent chain of ``n`` beads: FENE + WCA, BAOAB dt 0.005, friction 0.5, kT 1."""
    return bs.Simulation(bs.build_chains(n, seed=seed), bs.ForceField(bs.WCA(), bs.FENE()),
                         bs.BAOABLangevin(0.005, temperature=1.0, friction=0.5), seed=seed)


def machine_record():
    """CPU model, core count, versions and ``uptime`` now (the load average before a benchmark)."""
    machine = {"uptime_before": uptime(), "cpu": platform.processor() or platform.machine(),
               "cores": os.cpu_count(), "python": platform.python_version(), "numba": numba.__version__,
               "numba_threads": 1}
    try:
        machine["cpu"] = next(line.split(":", 1)[1].strip()
                              for line in Path("/proc/cpuinfo").read_text().splitlines()
                              if line.startswith("model name"))
    except (OSError, StopIteration):
        pass
    return machine


def uptime():
    """The output of ``uptime`` (load averages over 1, 5 and 15 minutes)."""
    return subprocess.run(["uptime"], capture_output=True, text=True, check=False).stdout.strip()


def measure(n, steps, every, seed, hybrid=None, equilibration=0, observe=None):
    """Run one chain; return the Rg efficiency record of its production part and the cost per step.

    ``hybrid`` is None (plain Langevin) or a dict of HybridSampler arguments. Every chain is first
    brought to equilibrium by ``equilibration`` steps of hybrid sampling (a grown chain is far more
    compact than an equilibrated one), so that plain runs start in equilibrium. ``observe``, if given,
    is called with every production snapshot (its time counts in the CPU time).
    """
    sim = chain_simulation(n, seed)
    sim.minimize()
    warmup = HybridSampler(sim, **EQUILIBRATION)
    sim.advance(equilibration)
    sim.hybrid = None
    sampler = None
    if hybrid:
        sampler = HybridSampler(sim, **hybrid)
        sampler.move_count = warmup.move_count  # continue the move stream, never reuse its numbers
    cpu0, wall0 = time.process_time(), time.perf_counter()
    rg = []
    for snap in bs.iterate(sim, steps, every):
        rg.append(chain_rg(snap.positions))
        if observe is not None:
            observe(snap)
    rg = np.array(rg)
    cpu, wall = time.process_time() - cpu0, time.perf_counter() - wall0
    rec = independent_samples_rate(rg, every, steps / cpu)
    rec.update(beads=n, steps=steps, interval_steps=every, cpu_seconds=round(cpu, 2), wall_seconds=round(wall, 2),
               cpu_seconds_per_step=cpu / steps, rg_mean=float(rg.mean()), method="hybrid" if hybrid else "dynamics")
    if sampler is not None:
        rec.update(hybrid=hybrid, acceptance=sampler.acceptance())
    print(json.dumps({k: v for k, v in rec.items() if k != "acceptance"}), flush=True)
    return rec


CROSSCHECK_CASES = {  # name: (pair potential, N, kT, production steps) ; plain records in the docstring
    "wca_64": ("wca", 64, 1.0, 400_000),
    "wca_128": ("wca", 128, 1.0, 400_000),
    "lj_64_kT2.25": ("lj", 64, 2.25, 400_000),
}


def crosscheck(scale, names):
    """Hybrid <Rg^2> beside the long plain-Langevin records of the same models: WCA at N = 64 and 128
    (analysis/good_solvent_scaling.md) and LJ 2.5 at N = 64, kT = 2.25, below theta
    (analysis/lj_theta_calibration.md); the error is from the statistical inefficiency."""
    from beadsim.analysis.stats import summarize
    out = {}
    for name in names:
        pair, n, kT, steps = CROSSCHECK_CASES[name]
        potential = bs.WCA() if pair == "wca" else bs.LennardJones(cutoff=2.5)
        sim = bs.Simulation(bs.build_chains(n, seed=21), bs.ForceField(potential, bs.FENE()),
                            bs.BAOABLangevin(0.005, temperature=kT, friction=0.5), seed=21)
        sim.minimize()
        HybridSampler(sim, segment_steps=20, pivot_moves=n // 4, crankshaft_moves=0)
        sim.advance(int(20_000 * scale))
        rg2 = []
        for snap in bs.iterate(sim, int(steps * scale), 20):
            x = snap.positions
            rg2.append(float(np.mean(np.sum((x - x.mean(axis=0)) ** 2, axis=1))))
        s = summarize(np.array(rg2))
        out[name] = {"rg2": s.mean, "error": s.error, "n_independent": s.n_independent, "steps": int(steps * scale),
                     "acceptance": sim.hybrid.acceptance()}
        print(json.dumps({name: out[name]}), flush=True)
    return out


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", type=float, nargs="?", const=0.1, default=None, metavar="FRACTION",
                        help="runs shortened to FRACTION (default 0.1) of their length, to try the script")
    parser.add_argument("--crosscheck", nargs="*", choices=list(CROSSCHECK_CASES), metavar="CASE",
                        help="only the hybrid <Rg^2> cross-checks (all if none named; merged into "
                             "hybrid_sampling_crosscheck.json)")
    parser.add_argument("--recheck", action="store_true",
                        help="only the hybrid rates at N = 128, 256, 512 (into hybrid_sampling_recheck.json)")
    args = parser.parse_args()
    scale = args.quick or 1.0
    if args.recheck:
        numba.set_num_threads(1)
        out = {"machine": machine_record(), "runs": []}
        for n, seed in ((128, 5), (256, 5), (512, 5), (512, 31)):
            out["runs"].append(measure(n, int(100_000 * scale), 20, seed=seed, hybrid=HYBRID_512,
                                       equilibration=int(10_000 * scale)))
            (HERE / "hybrid_sampling_recheck.json").write_text(json.dumps(out, indent=2, default=float) + "\n")
        out["machine"]["uptime_after"] = uptime()
        (HERE / "hybrid_sampling_recheck.json").write_text(json.dumps(out, indent=2, default=float) + "\n")
        return
    if args.crosscheck is not None:
        path = HERE / "hybrid_sampling_crosscheck.json"
        done = json.loads(path.read_text()) if path.exists() else {}
        done.update(crosscheck(scale, args.crosscheck or list(CROSSCHECK_CASES)))
        path.write_text(json.dumps(done, indent=2) + "\n")
        return
    numba.set_num_threads(1)
    machine = machine_record()
    name = "hybrid_sampling_quick.json" if args.quick else "hybrid_sampling.json"
    out = {"machine": machine}

    def save():
        (HERE / name).write_text(json.dumps(out, indent=2, default=float) + "\n")

    out["hybrid_512"] = measure(512, int(100_000 * scale), 20, seed=5, hybrid=HYBRID_512,
                                equilibration=int(10_000 * scale))
    save()
    plain = out["plain_small"] = {}
    for n, steps in ((16, 300_000), (32, 600_000), (64, 1_500_000)):
        plain[n] = measure(n, int(steps * scale), 20 if n < 64 else 50, seed=7, equilibration=int(10_000 * scale))
        save()
    out["plain_512_short"] = measure(512, int(500_000 * scale), 100, seed=5, equilibration=int(10_000 * scale))
    save()
    ns = np.array(sorted(n for n in plain if plain[n]["statistical_inefficiency"] is not None))
    if len(ns) < 2:
        print("too few plain runs with a measured correlation time for the fit", flush=True)
        return
    g_steps = np.array([plain[n]["statistical_inefficiency"] * plain[n]["interval_steps"] for n in ns])
    slope, intercept = np.polyfit(np.log(ns), np.log(g_steps), 1)
    g512 = float(np.exp(intercept + slope * np.log(512)))
    per_step = out["plain_512_short"]["cpu_seconds_per_step"]
    out["plain_512_extrapolated"] = {
        "fit": "g_steps = exp(a) N^z over N = 16, 32, 64", "z": float(slope), "a": float(intercept),
        "g_steps_512": g512, "per_cpu_second": 1.0 / (g512 * per_step),
        "z_rouse_good_solvent": 1 + 2 * 0.588, "g_steps_512_rouse_exponent":
            float(g_steps[-1] * (512 / ns[-1]) ** (1 + 2 * 0.588)),
    }
    out["plain_512_extrapolated"]["per_cpu_second_rouse_exponent"] = (
        1.0 / (out["plain_512_extrapolated"]["g_steps_512_rouse_exponent"] * per_step))
    h = out["hybrid_512"]["per_cpu_second"]
    out["ratio_extrapolated"] = h / out["plain_512_extrapolated"]["per_cpu_second"]
    out["ratio_rouse_exponent"] = h / out["plain_512_extrapolated"]["per_cpu_second_rouse_exponent"]
    short = out["plain_512_short"]["per_cpu_second"]
    out["ratio_lower_bound_from_short_run"] = h / short if short else None
    machine["uptime_after"] = uptime()
    save()
    print(json.dumps({k: v for k, v in out.items() if k.startswith("ratio")}, indent=2))


if __name__ == "__main__":
    main()
