"""Statics benchmark: independent Rg^2 samples per CPU-second of the samplers of one attractive chain.

The model is the bundled study's (``inputs/lj_chain_model.toml``): one FENE chain (k = 30, R0 = 1.5)
whose beads attract through Lennard-Jones cut and shifted at 2.5 sigma, BAOAB at dt = 0.005 tau and
friction 0.5 / tau, one thread. For each chain length the chain is built, minimised and equilibrated
once with hybrid sampling; every sampler then starts from that state, warms up (the tuned sampler fixes
its pivot count there) and runs for a fixed CPU budget, recording Rg^2 every round (the study's round
for ``hybrid``, :func:`~beadsim.studies.sweep.study_segment_steps`; :data:`SEGMENT_STEPS` for the others);
rounds before the equilibration detected in that series (:func:`~beadsim.analysis.stats.summarize`) are
dropped but their CPU time is counted. Samplers:

* ``hybrid``: what a study uses (:data:`beadsim.studies.sweep.STUDY_HYBRID`): pivot count tuned to the
  acceptance, factorized Metropolis rule, tree pair sums;
* ``previous-moves``: 100 pivots per round, the plain Metropolis rule, every pair through cells
  (the move settings before the factorized rule and the tree), side by side for the ratio;
* ``dynamics``: Langevin dynamics alone.

Figure of merit (:mod:`beadsim.analysis.efficiency`): rounds / (g x CPU seconds), g the statistical
inefficiency of the Rg^2 series in rounds, taken as the larger of the autocorrelation and blocking
estimates with its standard error (:func:`~beadsim.analysis.stats.inefficiency_estimate`, shared with
``summary.json`` of every run), so the rate leans low. A run shorter than :data:`RESOLVED_RUNS` g
cannot resolve g: its rate is flagged as an upper bound.
"""

import math
import time

import numpy as np
from scipy.stats import linregress, sem

from ._validate import positive_int
from .analysis.stats import inefficiency_estimate, summarize
from .engine.hybrid import HybridSampler
from .engine.integrators import BAOABLangevin
from .engine.simulation import Simulation
from .engine.threads import set_threads
from .model.build import build_chains
from .model.potentials import FENE, ForceField, LennardJones
from .studies.sweep import STUDY_HYBRID, study_segment_steps

SEGMENT_STEPS = 20
"""Integrator steps per round (and between two Rg^2 samples) of ``previous-moves`` and ``dynamics``."""

RESOLVED_RUNS = 50
"""A run of at least this many times g resolves g (common practice); shorter ones give upper bounds."""

PREVIOUS_MOVES = {"pivot_moves": 100, "overlap_energy": None, "tree_min_beads": None}
"""The pivot settings of hybrid runs before the factorized rule and the tree (20 steps and 100 pivots per
segment), kept for the side-by-side ratio."""


def _simulation(system, temperature, seed):
    ff = ForceField(LennardJones(cutoff=2.5), FENE())
    return Simulation(system, ff, BAOABLangevin(0.005, temperature=temperature, friction=0.5), seed=seed)


def _round_steps(name, n_beads):
    return study_segment_steps(n_beads) if name == "hybrid" else SEGMENT_STEPS


def _sampler(sim, name, warmup_steps):
    if name == "dynamics":
        return None
    if name == "hybrid":
        return HybridSampler(sim, segment_steps=study_segment_steps(sim.system.n_beads),
                             pivot_moves=STUDY_HYBRID["pivot_moves_per_segment"],
                             accepted_pivots_per_bead=STUDY_HYBRID["accepted_pivots_per_bead"], tune_until=warmup_steps)
    return HybridSampler(sim, segment_steps=SEGMENT_STEPS, **PREVIOUS_MOVES)


def _rg2(x):
    return float(np.mean(np.sum((x - x.mean(axis=0)) ** 2, axis=1)))


def equilibrated_chain(n_beads, temperature, rounds, seed=1):
    """A chain of ``n_beads`` built, minimised and run for ``rounds`` rounds of tuned hybrid sampling.

    Returns
    -------
    beadsim.model.system.System
    """
    sim = _simulation(build_chains(n_beads, seed=seed), temperature, seed)
    sim.minimize()
    steps = rounds * _round_steps("hybrid", n_beads)
    _sampler(sim, "hybrid", steps // 2)
    sim.run(steps)
    return sim.system.copy()


def measure_sampler(system, temperature, name, cpu_seconds, warmup_rounds, seed=2):
    """Independent Rg^2 samples per CPU-second of one sampler started from ``system``.

    Parameters
    ----------
    system : beadsim.model.system.System
        An equilibrated chain (positions and velocities are used, not changed).
    temperature : float
        kT, epsilon.
    name : str
        ``"hybrid"``, ``"previous-moves"`` or ``"dynamics"``.
    cpu_seconds : float
        CPU budget of the production part.
    warmup_rounds : int
        Rounds run first and not counted.

    Returns
    -------
    dict
        steps_per_round, rounds (kept) and rounds_discarded, cpu_seconds (all of production), pivot acceptance
        and pivots per round, g (both estimates, rounds, and the standard error of the larger), independent
        samples, samples per CPU-second with its standard error, ``upper_bound`` and mean Rg^2 with its error.
    """
    sim = _simulation(system.copy(), temperature, seed)
    steps = _round_steps(name, system.n_beads)
    sampler = _sampler(sim, name, warmup_rounds * steps)
    sim.run(warmup_rounds * steps)
    if sampler is not None:
        for counts in sampler.counts.values():
            counts[:] = 0
    series = []
    x = sim.system.positions
    started = time.process_time()
    while time.process_time() - started < cpu_seconds:
        for _ in range(20):
            sim.run(steps)
            series.append(_rg2(x))
    cpu = time.process_time() - started
    start = summarize(np.array(series)).equilibration_index  # rounds still relaxing are not counted
    series = np.array(series[start:])
    ineff = inefficiency_estimate(series)
    g = ineff.value
    out = {"sampler": name, "steps_per_round": steps, "rounds": int(series.size), "rounds_discarded": int(start),
           "cpu_seconds": round(cpu, 2),
           "ms_per_round": round(1e3 * cpu / (series.size + start), 3),
           "g_autocorrelation": round(ineff.autocorrelation, 2),
           "g_blocking": None if ineff.blocking is None else round(ineff.blocking, 2),
           "g_error": round(ineff.error, 2),
           "independent_samples": round(series.size / g, 1),
           "per_cpu_second": series.size / g / cpu,
           "per_cpu_second_error": series.size / g / cpu * ineff.error / g,
           "upper_bound": bool(series.size < RESOLVED_RUNS * g or ineff.blocking is None),
           "rg2_mean": float(series.mean()), "rg2_error": float(series.std(ddof=1) * math.sqrt(g / series.size))}
    if sampler is not None:
        pivots = sampler.acceptance()["pivot"]
        out.update(pivot_acceptance=pivots["rate"], pivots_per_round=int(sampler.moves["pivot"]))
    return out


def cost_exponent(sizes, rates):
    """x in (independent samples per CPU-second) ~ N^-x, by least squares on the logarithms.

    Returns
    -------
    (float, float or None)
        x and its standard error from the scatter about the line (scipy.stats.linregress); None with
        fewer than three lengths, where the line has no residuals to judge it by.
    """
    fit = linregress(np.log(sizes), np.log(rates))
    return float(-fit.slope), (float(fit.stderr) if len(sizes) >= 3 else None)


def run_statics_benchmark(sizes=(256, 512, 1024), temperature=3.3, cpu_seconds=120.0,
                          samplers=("hybrid", "previous-moves", "dynamics"), log=print, equilibration_rounds=None,
                          replicas=1, seed=1):
    """The statics benchmark at each chain length; JSON-ready dict.

    Parameters
    ----------
    sizes : sequence of int
        Chain lengths.
    temperature : float
        kT, epsilon (3.3: a little above the model's theta temperature, beadsim/data/theta_points.toml).
    cpu_seconds : float
        Production CPU budget of each sampler at each length, per replica.
    samplers : sequence of str
    log : callable
        Receives one line per measurement.
    equilibration_rounds : int, optional
        Rounds of tuned hybrid sampling before the samplers start; default ``max(4000, 4 N)``.
    replicas : int
        Independent repetitions of each measurement, each from its own equilibrated chain (seeds
        ``seed + 2 r`` for the chain and ``seed + 2 r + 1`` for the samplers, replica ``r``). One run
        pins a rate only to a factor of about 1.5 near theta (its slowest drift is long), so the summary
        gives the mean over replicas with the standard error of that mean when there are two or more.
    seed : int
        First seed.

    Returns
    -------
    dict
        ``runs`` (one entry per length, sampler and replica), ``rates`` (one per length and sampler: mean over
        replicas, its standard error or None with one replica, and the replica count), ``summary`` (ratios of
        the mean rates, cost exponent), machine and date.
    """
    from .bench import machine_description

    replicas = positive_int(replicas, "--replicas")
    set_threads(1)
    results = []
    for n in sizes:
        equilibration = max(4000, 4 * n) if equilibration_rounds is None else equilibration_rounds
        for r in range(replicas):
            log(f"statics N = {n}, replica {r + 1} of {replicas}: equilibrating ({equilibration} rounds of hybrid "
                "sampling)")
            system = equilibrated_chain(n, temperature, equilibration, seed=seed + 2 * r)
            for name in samplers:
                entry = dict(measure_sampler(system, temperature, name, cpu_seconds, warmup_rounds=500,
                                             seed=seed + 2 * r + 1), n_beads=n, replica=r)
                results.append(entry)
                log(f"statics N = {n}, {name}, replica {r + 1}: {entry['per_cpu_second']:.3g} independent Rg^2 "
                    "samples per CPU-second" + (" (upper bound)" if entry["upper_bound"] else ""))
    rates = [_mean_rate([e for e in results if e["n_beads"] == n and e["sampler"] == name])
             for n in sizes for name in samplers]
    rate = {(r["n_beads"], r["sampler"]): r for r in rates}
    summary = {"temperature": temperature, "cpu_seconds_per_run": cpu_seconds, "replicas": replicas}
    ratios = {}
    for n in sizes:
        new, old = rate.get((n, "hybrid")), rate.get((n, "previous-moves"))
        if new and old:
            ratios[str(n)] = round(new["per_cpu_second"] / old["per_cpu_second"], 2)
    summary["ratio_hybrid_to_previous_moves"] = ratios
    hybrid = [rate[(n, "hybrid")] for n in sizes if (n, "hybrid") in rate]
    if len(hybrid) >= 2:
        x, error = cost_exponent([r["n_beads"] for r in hybrid], [r["per_cpu_second"] for r in hybrid])
        summary["cost_exponent_hybrid"] = {
            "value": round(x, 2), "error": None if error is None else round(error, 2),
            "reason": "two lengths: a line through two points has no error" if error is None else
                      "standard error of the slope from the scatter of the lengths about the power law; "
                      "it does not see a bias common to all lengths (runs too short for their slowest drift)"}
    return {"machine": machine_description(), "date": time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime()),
            "summary": summary, "rates": rates, "runs": results}


def _mean_rate(runs):
    """Mean rate of the replicas of one length and sampler, with the standard error of the mean (None for one)."""
    values = np.array([r["per_cpu_second"] for r in runs])
    return {"n_beads": runs[0]["n_beads"], "sampler": runs[0]["sampler"], "replicas": len(runs),
            "per_cpu_second": float(values.mean()),
            "error": float(sem(values)) if values.size >= 2 else None,
            "upper_bound": any(r["upper_bound"] for r in runs)}


def format_statics(report):
    """The statics benchmark as a plain-text table (one line per run), the mean rates and a summary line."""
    head = (f"{'N':>6}  {'sampler':<18}{'replica':>8}{'pivots/round':>13}{'acceptance':>11}{'ms/round':>10}"
            f"{'g (rounds)':>11}{'indep.':>8}{'per CPU-s':>11}")
    lines = [head, "-" * len(head)]
    for r in report["runs"]:
        acc = f"{r['pivot_acceptance']:.3f}" if r.get("pivot_acceptance") is not None else "-"
        rate = f"{'<=' if r['upper_bound'] else ''}{r['per_cpu_second']:.3g}"
        lines.append(f"{r['n_beads']:>6}  {r['sampler']:<18}{r['replica'] + 1:>8}{r.get('pivots_per_round', '-'):>13}"
                     f"{acc:>11}{r['ms_per_round']:>10.2f}{max(r['g_autocorrelation'], r['g_blocking'] or 0):>11.1f}"
                     f"{r['independent_samples']:>8.0f}{rate:>11}")
    s = report["summary"]
    if s["replicas"] > 1:
        lines += ["", "mean over replicas (independent Rg^2 samples per CPU-second, standard error of the mean):"]
        for r in report["rates"]:
            bound = " (upper bound)" if r["upper_bound"] else ""
            lines.append(f"{r['n_beads']:>6}  {r['sampler']:<18}{r['per_cpu_second']:>10.3g} +- {r['error']:.2g}"
                         f"{bound}")
    tail = f"kT = {s['temperature']}"
    if s["ratio_hybrid_to_previous_moves"]:
        tail += "; hybrid / previous moves: " + ", ".join(
            f"N = {n}: {v}x" for n, v in s["ratio_hybrid_to_previous_moves"].items())
    if "cost_exponent_hybrid" in s:
        x = s["cost_exponent_hybrid"]
        tail += (f"; cost exponent of the hybrid sampler in N: {x['value']}"
                 + (f" +- {x['error']}" if x["error"] is not None else f" (no error: {x['reason']})"))
    m = report["machine"]
    lines += ["", tail, f"machine: {m['cpu_model']}, {m['nproc']} CPUs; one thread; {report['date']}"]
    return "\n".join(lines)
