"""Standard benchmark systems: bead-steps per second, where the time goes, and the gain over NumPy.

Systems (issue 7):

* A: bead-spring melt, WCA + FENE, density 0.85, 32,000 beads (320 chains of 100), periodic;
* B: the same with 2,000 beads (fits in cache);
* C: Lennard-Jones melt cut at 2.5 sigma, density 0.85, 32,000 beads (many neighbours per bead);
* D: one 1,000-bead WCA + FENE chain in an open box (good solvent);
* E: one 1,000-bead LJ 2.5 + FENE globule in an open box at T = 1, well below its theta
  temperature (about 3); grown compactly and collapsed before timing;
* F: the size series of A from 1,000 to 256,000 beads, with the exponent of time per step vs N.

Every system is minimised (FIRE, under WCA + FENE) and run for a few hundred BAOAB steps (dt = 0.005 tau,
gamma = 0.5 / tau, kT = 1) before timing, so compilation and the first list builds are
excluded. Throughput is the median over repeats of a timed run of ``advance``; the time per
step is split by timing the force kernel, the list build and the update kernel on their own
(the list build is charged at the rebuild rate seen in the timed runs). The reference is
:func:`beadsim.engine.reference.reference_forces` plus the same BAOAB update in NumPy,
timed for a few steps on a copy of the same state.
"""

import os
import platform
import time

import numpy as np

from .engine.integrators import BAOABLangevin
from .engine.reference import reference_forces
from .engine.simulation import Simulation
from .engine.threads import PARALLEL_MIN_BEADS, set_threads, threads_for
from .kernels.forces import total_forces
from .kernels.integrate import BAOAB, half_kick, move_beads, refresh_list
from .model.build import build_chains
from .model.potentials import FENE, WCA, ForceField, LennardJones
from .model.system import System

TIMESTEP = 0.005
FRICTION = 0.5
SIZE_SERIES = (1_000, 4_000, 16_000, 64_000, 256_000)
QUICK_SIZE_SERIES = (1_000, 4_000, 16_000, 64_000)


def _melt(n_beads, pair, seed=1):
    """Periodic melt of 100-bead chains (fewer beads per chain below 1,000 beads) at density 0.85."""
    per_chain = 100 if n_beads >= 1000 else 10
    return build_chains([per_chain] * (n_beads // per_chain), density=0.85, seed=seed), ForceField(pair, FENE())


def _open_chain(n_beads, pair, compact, seed=1):
    """One chain in an open box; ``compact`` grows it at melt density and unfolds it out of its periodic cell."""
    if not compact:
        return build_chains(n_beads, seed=seed), ForceField(pair, FENE())
    cell = build_chains(n_beads, density=0.85, seed=seed)
    steps = np.diff(cell.positions, axis=0)
    steps -= cell.box.lengths * np.rint(steps / cell.box.lengths)
    pos = np.concatenate([cell.positions[:1], cell.positions[0] + np.cumsum(steps, axis=0)])
    return System(pos, [n_beads]), ForceField(pair, FENE())


SYSTEMS = {
    "A": ("WCA+FENE melt, rho 0.85, periodic", lambda: _melt(32_000, WCA())),
    "B": ("WCA+FENE melt, rho 0.85, periodic", lambda: _melt(2_000, WCA())),
    "C": ("LJ 2.5+FENE melt, rho 0.85, periodic", lambda: _melt(32_000, LennardJones(cutoff=2.5))),
    "D": ("one WCA+FENE chain, open box", lambda: _open_chain(1_000, WCA(), compact=False)),
    "E": ("one LJ 2.5+FENE globule (T=1), open box", lambda: _open_chain(1_000, LennardJones(cutoff=2.5), True)),
}


def machine_description():
    """CPU model, core count, load average and library versions of this machine, as a dict."""
    import numba

    model = platform.processor() or "unknown"
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as fh:
            model = next((line.split(":", 1)[1].strip() for line in fh if line.startswith("model name")), model)
    except OSError:
        pass
    return {
        "cpu_model": model,
        "nproc": os.cpu_count(),
        "load_average_1_5_15": list(os.getloadavg()) if hasattr(os, "getloadavg") else None,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "numba": numba.__version__,
        "numba_threading_layer": _threading_layer(),
        "numba_threads": numba.get_num_threads(),
    }


def _threading_layer():
    import numba
    try:
        return numba.threading_layer()
    except ValueError:  # no parallel region has run yet
        return None


def _prepare(system, forcefield, warmup_steps):
    """A warmed-up BAOAB simulation of ``system`` (compilation happens here).

    Overlaps are removed under WCA + FENE first: with an attractive tail FIRE
    would go on to a local energy minimum, which costs minutes and is not needed.
    """
    Simulation(system, ForceField(WCA(), FENE()), BAOABLangevin(TIMESTEP), seed=1).minimize()
    sim = Simulation(system, forcefield, BAOABLangevin(TIMESTEP, 1.0, FRICTION), seed=1)
    sim.advance(warmup_steps)
    return sim


def _best_of(fn, repeats):
    """Shortest wall time of ``repeats`` calls of ``fn`` (s)."""
    best = np.inf
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def _split(sim, rebuilds_per_step, repeats):
    """Seconds per step in forces, list rebuilds (at the observed rate) and the update, on a copy of the state."""
    s, nl = sim.system, sim.neighbors
    pos, vel, force, ref = s.positions.copy(), s.velocities.copy(), sim.forces.copy(), nl.ref.copy()
    nlist = tuple(a.copy() for a in nl.arrays)
    energies, info = np.zeros(4), np.zeros(2, dtype=np.int64)
    integ = sim.integrator
    coeffs, noise = integ._coefficients(s.masses)
    inv_mass = 1.0 / s.masses
    args = (sim.box_lengths, s.box.periodic)
    with threads_for(s.n_beads):
        t_force = _best_of(lambda: total_forces(pos, *args, nlist, sim.compiled.arrays, force, energies, info),
                           repeats)
        t_list = _best_of(lambda: refresh_list(pos, *args, nl.r_list, nl.excl_start, nl.excl, s.types, nlist, ref),
                          repeats) if nl.active else 0.0
        t_move = _best_of(lambda: (move_beads(BAOAB, np.uint64(1), 0, TIMESTEP, coeffs, pos, vel, force, inv_mass,
                                              noise, ref, True), half_kick(TIMESTEP, vel, force, inv_mass)),
                          repeats)
    return t_force, t_list * rebuilds_per_step, t_move


def reference_step_time(sim, n_steps):
    """Seconds per BAOAB step of the NumPy + cKDTree reference on a copy of ``sim``'s state."""
    s = sim.system.copy()
    ff, integ = sim.forcefield, sim.integrator
    c1 = np.exp(-integ.friction * integ.timestep)
    scale = np.sqrt((1.0 - c1 * c1) * integ.temperature / s.masses)[:, None]
    inv_m = 1.0 / s.masses[:, None]
    half = 0.5 * integ.timestep
    rng = np.random.default_rng(1)
    force, _ = reference_forces(s, ff)
    t = time.perf_counter()
    for _ in range(n_steps):
        s.velocities += half * inv_m * force
        s.positions += half * s.velocities
        s.velocities = c1 * s.velocities + scale * rng.standard_normal(s.velocities.shape)
        s.positions += half * s.velocities
        force, _ = reference_forces(s, ff)
        s.velocities += half * inv_m * force
    return (time.perf_counter() - t) / n_steps


def _timed_rate(sim, steps, threads=None):
    """Bead-steps per second of one timed ``advance(steps)``, on ``threads`` threads if given."""
    previous = set_threads(threads) if threads is not None else None
    try:
        t = time.perf_counter()
        sim.advance(steps)
        return sim.system.n_beads * steps / (time.perf_counter() - t)
    finally:
        if previous is not None:
            set_threads(previous)


def measure(system, forcefield, *, repeats=5, bead_steps=2_000_000, warmup_steps=300, reference_steps=None,
            versus_one_thread=False):
    """Benchmark one system.

    Parameters
    ----------
    system : System
    forcefield : ForceField
    repeats : int
        Timed runs; the median and the spread (min, max) over them are reported.
    bead_steps : int
        Work per timed run (steps = bead_steps / n, at least 20).
    warmup_steps : int
        Untimed steps after minimisation (compilation, first list builds).
    reference_steps : int, optional
        Steps of the NumPy reference to time (default: 3 above 20,000 beads, else 10); 0 skips it.
    versus_one_thread : bool
        Also time the same run on one thread right after each timed repeat, so that both
        thread counts see the same machine state; the parallel speed-up is the median of
        the paired ratios (a quiet stretch or a busy one affects both halves of a pair).

    Returns
    -------
    dict
        ``n_beads``, ``steps_per_repeat``, ``bead_steps_per_s`` (median), ``bead_steps_per_s_min``,
        ``bead_steps_per_s_max``, ``ms_per_step`` (median), ``ms_force``, ``ms_list``, ``ms_update``,
        ``rebuilds_per_step``, ``neighbours_per_bead``, ``reference_ms_per_step``, ``speedup_vs_reference``;
        with ``versus_one_thread`` also ``one_thread_bead_steps_per_s`` (median) and
        ``speedup_vs_one_thread`` (median, min, max of the paired ratios).
    """
    n = system.n_beads
    sim = _prepare(system, forcefield, warmup_steps)
    steps = max(20, bead_steps // n)
    rates, single, rebuilds = [], [], 0
    for _ in range(repeats):
        before = sim.rebuilds
        rates.append(_timed_rate(sim, steps))
        rebuilds += sim.rebuilds - before
        if versus_one_thread:
            single.append(_timed_rate(sim, steps, threads=1))
    per_rebuild = rebuilds / (repeats * steps)
    t_force, t_list, t_move = _split(sim, per_rebuild, max(3, repeats))
    rate = float(np.median(rates))
    out = {
        "n_beads": n,
        "steps_per_repeat": steps,
        "repeats": repeats,
        "bead_steps_per_s": rate,
        "bead_steps_per_s_min": float(min(rates)),
        "bead_steps_per_s_max": float(max(rates)),
        "ms_per_step": 1e3 * n / rate,
        "ms_force": 1e3 * t_force,
        "ms_list": 1e3 * t_list,
        "ms_update": 1e3 * t_move,
        "rebuilds_per_step": per_rebuild,
        "neighbours_per_bead": 2.0 * sim.neighbors.n_pairs / n,
    }
    if versus_one_thread:
        paired = np.array(rates) / np.array(single)
        out["one_thread_bead_steps_per_s"] = float(np.median(single))
        out["speedup_vs_one_thread"] = [float(np.median(paired)), float(paired.min()), float(paired.max())]
    if reference_steps is None:
        reference_steps = 3 if n > 20_000 else 10
    if reference_steps:
        t_ref = reference_step_time(sim, reference_steps)
        out["reference_ms_per_step"] = 1e3 * t_ref
        out["speedup_vs_reference"] = t_ref * rate / n
    return out


def size_exponent(sizes, ms_per_step):
    """Least-squares slope of log(time per step) against log(N)."""
    return float(np.polyfit(np.log(sizes), np.log(ms_per_step), 1)[0])


def run_benchmarks(quick=False, threads=None, log=print):
    """Run systems A-F and return the results as one JSON-ready dict.

    Parameters
    ----------
    quick : bool
        Fewer repeats and work per repeat; the size series stops at 64,000 beads.
    threads : int, optional
        Kernel threads (default: numba's current setting). With more than one,
        system A is also timed on one thread for the parallel speed-up.
    log : callable
        Receives one progress line per system.
    """
    import numba

    if threads is not None:
        set_threads(threads)
    threads = numba.get_num_threads()
    settings = {"repeats": 3, "bead_steps": 1_000_000} if quick else {"repeats": 5, "bead_steps": 3_000_000}
    loads = []
    results = {}

    def record(label, system, forcefield, **extra):
        loads.append(os.getloadavg()[0])
        log(f"{label}: {system.n_beads} beads ...")
        results[label] = dict(measure(system, forcefield, **settings, **extra), load_average_1min=loads[-1])

    for key, (_, make) in SYSTEMS.items():
        record(key, *make(), versus_one_thread=key == "A" and threads > 1)
    sizes = QUICK_SIZE_SERIES if quick else SIZE_SERIES
    for n in sizes:
        record(f"F {n}", *_melt(n, WCA()), reference_steps=0)
    exponent = size_exponent(sizes, [results[f"F {n}"]["ms_per_step"] for n in sizes])
    summary = {"threads": threads, "quick": quick, "size_exponent": exponent}
    if "speedup_vs_one_thread" in results["A"]:
        summary["speedup_threads_vs_1"] = results["A"]["speedup_vs_one_thread"]
        summary["one_thread_bead_steps_per_s"] = results["A"]["one_thread_bead_steps_per_s"]
    return {"machine": machine_description(), "summary": summary, "systems": results,
            "descriptions": {k: v[0] for k, v in SYSTEMS.items()}}


def format_table(report):
    """The report as one plain-text table plus a summary line."""
    head = (f"{'system':<14}{'beads':>8}{'M bead-steps/s':>16}{'(min-max)':>14}{'per thread':>11}{'ms/step':>9}"
            f"{'force':>8}{'list':>7}{'update':>8}{'nbrs':>6}{'x ref':>7}{'load':>6}")
    lines = [head, "-" * len(head)]
    threads = report["summary"]["threads"]
    for label, r in report["systems"].items():
        t = 1 if r["n_beads"] < PARALLEL_MIN_BEADS else threads
        ratio = f"{r['speedup_vs_reference']:.0f}" if "speedup_vs_reference" in r else "-"
        lines.append(f"{label:<14}{r['n_beads']:>8}{r['bead_steps_per_s'] / 1e6:>16.2f}"
                     f"{r['bead_steps_per_s_min'] / 1e6:>7.2f}-{r['bead_steps_per_s_max'] / 1e6:<6.2f}"
                     f"{r['bead_steps_per_s'] / 1e6 / t:>11.2f}{r['ms_per_step']:>9.3f}{r['ms_force']:>8.3f}"
                     f"{r['ms_list']:>7.3f}{r['ms_update']:>8.3f}{r['neighbours_per_bead']:>6.1f}{ratio:>7}"
                     f"{r['load_average_1min']:>6.1f}")
    s, m = report["summary"], report["machine"]
    tail = f"threads {s['threads']}; size exponent (F) {s['size_exponent']:.3f}"
    if "speedup_threads_vs_1" in s:
        mid, lo, hi = s["speedup_threads_vs_1"]
        tail += (f"; A on 1 thread {s['one_thread_bead_steps_per_s'] / 1e6:.2f} M bead-steps/s, speed-up "
                 f"{s['threads']} threads vs 1: {mid:.2f} ({lo:.2f}-{hi:.2f}, paired repeats)")
    lines += ["", tail, f"machine: {m['cpu_model']}, {m['nproc']} CPUs, load average {m['load_average_1_5_15']}"]
    return "\n".join(lines)
