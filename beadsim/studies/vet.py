"""Vet a coarse-grained model before the production runs: a battery of checks, each ending in a verdict.

``beadsim vet MODEL.toml`` reads a run input (the model) or a vet file (one section ``[vet]`` naming the
model and what else the battery should know, keys in :data:`VET_SCHEMA`) and runs, on one chain of the
model in an open box (implicit solvent):

1. **timestep**: velocity Verlet (no thermostat) from the same equilibrated state at a ladder of
   timesteps; the energy drift per bead and the size of the total-energy fluctuations decide which are
   stable, giving the largest stable timestep and a suggested one (half of it);
2. **forces**: the forces of the whole model against the finite-difference gradient of its energy;
3. **tables** (tabulated potentials only): the force column against -dU/dr of the energy column,
   jumps in the rows, and whether the range keeps bonds inside the bond table and ends the pair table at
   zero energy;
4. **crossing barrier**: the energy of two bonds crossing at their midpoints (bond and pair terms) in kT;
5. **solvent quality** at the model's own temperature: nu_eff from internal distances and
   ``<Re^2>/<Rg^2>`` of a production run (by :func:`beadsim.runner.run` and
   :func:`beadsim.studies.sweep.analyze_point`), with a verdict good / near theta / poor;
6. **structure**: bond-length and bond-angle distributions against the Boltzmann-inversion targets,
   when the model ships them;
7. **theta point**: a temperature sweep with :func:`beadsim.studies.sweep.run_study` sized to the time
   budget;
8. **production time**: the measured throughput of the production system the user describes.

Each check returns :class:`Verdict` objects carrying the number, its uncertainty, the threshold and
where the threshold comes from (exact, our choice, or a rule of thumb in common practice). Only
``status == "fail"`` is a problem; ``"note"`` verdicts report a measurement without a pass mark.
Figures go to ``<out>/figures``; :mod:`beadsim.studies.vet_report` writes the HTML and JSON report.
"""

import copy
import logging
import math
import os
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .._validate import positive
from ..config import (
    AT_LEAST_ONE,
    REQUIRED,
    check_section,
    choice,
    load_toml,
    read_settings,
    suggest,
    to_toml,
)
from ..errors import InputError, InstabilityError, MinimizationError
from ..model.tables import read_columns

log = logging.getLogger(__name__)

#: Keys of the ``[vet]`` section of a vet file: ``key: (type, default, (rule text, rule), help)``.
VET_SCHEMA = {
    "model": (str, REQUIRED, ("a run input file", None), "run input describing the model, relative to the vet file"),
    "expected_quality": (str, None, choice("good", "near_theta", "poor"),
                         ("the solvent quality the model should have at its temperature; a different verdict "
                         "is a problem")),
    "bond_target": (str, None, ("a file of columns r P(r)", None),
                    "bond-length density the bond table was inverted from (r in sigma, P in 1/sigma)"),
    "angle_target": (str, None, ("a file of columns angle P", None),
                     "bead-angle density (degrees, 180 = straight; P in 1/degree)"),
    "production_beads": (int, None, AT_LEAST_ONE, "beads of the planned production system (default: the model's)"),
    "production_steps": (int, None, AT_LEAST_ONE,
                         "steps of the planned production run (default: the model's equilibration + production)"),
    "sweep_temperatures": (list, None, ("a list of two or more numbers > 0", None),
                           "temperatures of the theta sweep (default: 0.6 to 1.6 times the model's)"),
}

#: Optional stages of the battery (the numerical checks always run).
STAGES = ("solvent", "theta", "production")
FAST_BUDGET_MINUTES = 4.0
DEFAULT_BUDGET_MINUTES = 30.0

#: Velocity-Verlet timesteps tried (tau); the model's own is added.
TIMESTEP_LADDER = (0.001, 0.002, 0.003, 0.004, 0.005, 0.007, 0.01, 0.014, 0.02, 0.028, 0.04)
#: Timestep of the thermostatted equilibration before the scan, at most (tau).
EQUILIBRATION_TIMESTEP = 0.002

# Thresholds. Each is quoted in the report with its basis.
DRIFT_LIMIT = 1e-3
"""Largest |dE/dt| per bead, kT per tau, for a stable timestep (our choice: a thousandth of kT per bead and
tau is small beside what a Langevin thermostat with gamma ~ 0.5/tau exchanges, about gamma kT)."""
FLUCTUATION_LIMIT = 0.1
"""Largest rms fluctuation of the (detrended) total energy over that of the kinetic energy for a stable
timestep (our choice: velocity Verlet's energy error grows as dt^2 and passes this well before the run
breaks down)."""
SAFETY_FACTOR = 2.0
"""Suggested timestep = largest stable / SAFETY_FACTOR (rule of thumb, common practice)."""
FORCE_TOLERANCE = 1e-4
"""Relative force-gradient mismatch allowed (our choice; central differences with a 1e-5 sigma step are
accurate to about 1e-8 here)."""
TABLE_FORCE_TOLERANCE = 0.01
"""Mismatch of a table's force column against -dU/dr, relative to its largest accessible force (our choice)."""
JUMP_LIMIT = 0.05
"""Energy jump between table rows, kT, counted as a discontinuity (our choice)."""
ACCESSIBLE = 30.0
"""Only table rows within this many kT of the minimum are checked for smoothness: Boltzmann weight e^-30."""
END_WALL = 10.0
"""A bond table must rise at least this many kT above its minimum at both ends (our choice: e^-10 per bond)."""
INNER_REACH_LIMIT = 1e-6
"""Upper bound on exp(-(U(r_first) - U_min)/kT) (r_first/sigma)^3 for a pair table's inner end (our choice)."""
CUTOFF_ENERGY_LIMIT = 0.05
"""|U| at the last row of a pair table, kT: the energy jump where the table ends (our choice)."""
CROSSING_BARRIER = 20.0
"""Smallest bond-crossing barrier, kT (rule of thumb, common practice: bonds must not cross in an entangled
melt; quoted thresholds run from about 20 to 70 kT, and FENE + WCA at kT = 1 (Kremer and Grest, J. Chem.
Phys. 92, 5057, 1990) has about 70; we use the lower end)."""
NU_BAND = 0.03
"""nu_eff within 1/2 +- NU_BAND counts as near theta (our choice, for chains of tens to hundreds of beads)."""
STRUCTURE_LIMIT = 0.1
"""Largest shift of the mean, and change of the width, of a bond or angle distribution, in units of the
target's standard deviation (our choice)."""

COMMON_PRACTICE = "rule of thumb (common practice)"
OUR_CHOICE = "our choice"


@dataclass
class Verdict:
    """One check's outcome.

    Attributes
    ----------
    key : str
        Short identifier, e.g. ``"timestep"``.
    title : str
        What was checked, in words.
    status : {"pass", "fail", "note", "skipped"}
        ``fail`` is a problem; ``note`` a measurement without a pass mark.
    value, error : float or None
        The number the verdict rests on and its uncertainty (None: exact or not measured).
    unit : str
    threshold : str
        The pass mark in words ("" for notes).
    basis : str
        Where the threshold comes from: exact, our choice, or a rule of thumb.
    message : str
        The verdict in one or two sentences.
    """

    key: str
    title: str
    status: str
    value: float | None
    error: float | None
    unit: str
    threshold: str
    basis: str
    message: str

    def as_dict(self):
        """JSON-ready copy."""
        return dict(self.__dict__)


@dataclass
class VetContext:
    """What the checks share: the model, the plan, the output folder and the measurements so far."""

    settings: dict
    plan: dict
    out: Path
    fast: bool
    budget_seconds: float
    started: float = field(default_factory=time.perf_counter)
    numbers: dict = field(default_factory=dict)
    figures: dict = field(default_factory=dict)

    @property
    def kT(self):
        return self.settings["dynamics"]["temperature"]

    def remaining(self):
        """Seconds of the budget left."""
        return self.budget_seconds - (time.perf_counter() - self.started)


# --------------------------------------------------------------------------------------------- input

def read_plan(path):
    """Read a model (run input) or a vet file; return ``(plan, settings)``.

    Parameters
    ----------
    path : path-like
        A run input, or a file with one section ``[vet]`` (:data:`VET_SCHEMA`).

    Returns
    -------
    plan : dict
        Every key of :data:`VET_SCHEMA`, paths made absolute.
    settings : dict
        The model's validated settings (:func:`beadsim.config.read_settings`).

    Raises
    ------
    InputError
        Naming the file, the key and what is allowed.
    """
    path = Path(path)
    raw = load_toml(path)
    src = str(path)
    if "vet" not in raw:
        settings = read_settings(path)
        plan = {key: None for key in VET_SCHEMA}
        plan["model"] = str(path.resolve())
        return plan, settings
    for section in raw:
        if section != "vet":
            raise InputError(f"{src}: unknown section [{section}]{suggest(section, ['vet'])}; a vet file has one "
                             "section [vet] naming the model (model = 'run_input.toml'); or give the run input "
                             "itself")
    if not isinstance(raw["vet"], dict):
        raise InputError(f"{src}: 'vet' must be a section [vet], not a single value")
    plan = check_section(src, "vet", VET_SCHEMA, raw["vet"])
    for key in ("model", "bond_target", "angle_target"):
        if plan[key] is not None:
            plan[key] = str((path.parent / plan[key]).resolve())
            if not Path(plan[key]).is_file():
                raise InputError(f"{src}: [vet] {key}: file {plan[key]} not found (paths are relative to the "
                                 "vet file)")
    temps = plan["sweep_temperatures"]
    if temps is not None:
        ok = all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) and v > 0 for v in temps)
        if len(temps) < 2 or not ok:
            raise InputError(f"{src}: [vet] sweep_temperatures: must be a list of two or more numbers > 0, "
                             f"got {temps!r}")
        plan["sweep_temperatures"] = sorted({float(v) for v in temps})
    settings = read_settings(plan["model"])
    for key in ("bond_target", "angle_target"):
        if plan[key] is not None:
            plan[key + "_data"] = _read_target(plan[key], src, key)
    return plan, settings


def _read_target(path, src, key):
    try:
        data = np.loadtxt(path, comments="#", ndmin=2)
    except (OSError, ValueError) as exc:
        raise InputError(f"{src}: [vet] {key}: cannot read {path} as columns x P ({exc})") from None
    if data.shape[1] != 2 or len(data) < 4 or not np.all(np.isfinite(data)) or np.any(np.diff(data[:, 0]) <= 0) \
            or np.any(data[:, 1] < 0):
        raise InputError(f"{src}: [vet] {key}: {path} must hold two columns (x increasing, P >= 0) with 4 or more "
                         "rows")
    return data


# --------------------------------------------------------------------------------------------- model pieces

def single_chain_settings(settings, timestep=None):
    """The model as one chain of its first chain length in an open box (implicit solvent), thermostatted.

    Parameters
    ----------
    settings : dict
        Validated model settings.
    timestep : float, optional
        Replace the model's timestep (tau).

    Returns
    -------
    dict
        A deep copy; a Verlet integrator is replaced by BAOAB, presets already applied are dropped, and
        so is a Lennard-Jones tail correction (a term of a uniform fluid, not of one chain).
    """
    s = copy.deepcopy(settings)
    s["chains"].update(count=1, length=[settings["chains"]["length"][0]])
    s["box"]["kind"] = "open"
    s["nonbonded"]["tail_correction"] = False
    s["solvent"] = {key: None for key in s["solvent"]}
    if s["dynamics"]["integrator"] == "verlet":
        s["dynamics"]["integrator"] = "baoab"
    if timestep is not None:
        s["dynamics"]["timestep"] = float(timestep)
    return s


def equilibrated_chain(settings, n_steps):
    """Minimise and equilibrate one chain of the model with BAOAB at a cautious timestep.

    Parameters
    ----------
    settings : dict
        From :func:`single_chain_settings`.
    n_steps : int
        Thermostatted steps.

    Returns
    -------
    sim : Simulation
        Equilibrated (positions and velocities at the model's temperature).
    steps_per_second : float
        Measured speed of those steps on one chain (wall clock).
    """
    from ..runner import build_simulation

    s = copy.deepcopy(settings)
    s["dynamics"].update(integrator="baoab", timestep=min(s["dynamics"]["timestep"], EQUILIBRATION_TIMESTEP))
    sim = build_simulation(s)
    sim.minimize()
    sim.advance(1000)  # compile and settle before timing
    started = time.perf_counter()
    sim.advance(n_steps)
    return sim, n_steps / (time.perf_counter() - started)


# --------------------------------------------------------------------------------------------- 1. timestep

def energy_drift(times, total, kinetic, n_beads, kT):
    """Drift and fluctuation of the total energy of one velocity-Verlet run.

    Parameters
    ----------
    times : float64 (m,)
        Sample times, tau.
    total, kinetic : float64 (m,)
        Total and kinetic energy, epsilon.
    n_beads : int
    kT : float
        epsilon.

    Returns
    -------
    dict
        ``drift`` (dE/dt per bead, kT/tau, least-squares slope), ``drift_error`` (its standard error
        times sqrt(g), g the statistical inefficiency of the residuals), ``fluctuation_ratio``
        (rms of the detrended total energy over rms of the kinetic energy).
    """
    from ..analysis.stats import statistical_inefficiency

    t = np.asarray(times, dtype=np.float64)
    e = np.asarray(total, dtype=np.float64) / (n_beads * kT)
    (slope, intercept), cov = np.polyfit(t, e, 1, cov="unscaled")
    resid = e - (slope * t + intercept)
    dof = max(len(t) - 2, 1)
    s2 = float(np.sum(resid ** 2) / dof)
    g = statistical_inefficiency(resid) if np.ptp(resid) > 0 else 1.0
    kin = np.std(np.asarray(kinetic) / (n_beads * kT))
    return {"drift": float(slope), "drift_error": float(math.sqrt(max(cov[0, 0] * s2, 0.0) * g)),
            "fluctuation_ratio": float(np.std(resid) / kin) if kin > 0 else float("nan")}


def timestep_scan(sim, timesteps, duration, samples=200):
    """Run velocity Verlet from ``sim``'s state at each timestep and measure the energy drift.

    Parameters
    ----------
    sim : Simulation
        Equilibrated state (not advanced: each run starts from a copy).
    timesteps : sequence of float
        Timesteps, tau, tried in increasing order; the scan stops after two unstable ones in a row.
    duration : float
        Simulated time per timestep, tau.
    samples : int
        Energy samples per run.

    Returns
    -------
    list of dict
        Per timestep: ``timestep``, ``steps``, ``stable``, ``reason``, the :func:`energy_drift` numbers and
        the sampled ``times`` and ``energy`` (total energy per bead minus its start, kT).
    """
    from ..engine.integrators import VelocityVerlet
    from ..engine.loop import iterate
    from ..engine.simulation import Simulation

    kT = sim.integrator.temperature
    rows, unstable_run = [], 0
    for dt in sorted({float(x) for x in timesteps}):
        if unstable_run >= 2:
            rows.append({"timestep": dt, "steps": 0, "stable": False, "reason": "not run: two smaller timesteps "
                         "were already unstable", "drift": None, "drift_error": None, "fluctuation_ratio": None,
                         "times": [], "energy": []})
            continue
        system = sim.system.copy()
        run = Simulation(system, sim.forcefield, VelocityVerlet(timestep=dt), seed=sim.seed, skin=sim.neighbors.skin)
        n = max(round(duration / dt), samples)
        every = max(n // samples, 1)
        first = run.observables()
        times, total, kinetic = [0.0], [first["total_energy"]], [first["kinetic_energy"]]
        row = {"timestep": dt, "steps": n, "stable": True, "reason": ""}
        try:
            for snap in iterate(run, n, every):
                times.append(snap.time)
                total.append(snap.observables["total_energy"])
                kinetic.append(snap.observables["kinetic_energy"])
        except InstabilityError as exc:
            row.update(stable=False, reason=f"the run broke down at step {exc.step}: {exc}")
        row.update(energy_drift(times, total, kinetic, system.n_beads, kT) if len(times) > 3
                   else {"drift": None, "drift_error": None, "fluctuation_ratio": None})
        if row["stable"] and not (math.isfinite(row["drift"]) and abs(row["drift"]) <= DRIFT_LIMIT):
            row.update(stable=False, reason=f"|drift| {abs(row['drift']):.3g} kT per bead per tau exceeds "
                       f"{DRIFT_LIMIT:g}")
        if row["stable"] and not row["fluctuation_ratio"] <= FLUCTUATION_LIMIT:
            row.update(stable=False, reason=f"total-energy fluctuations are {row['fluctuation_ratio']:.3g} of the "
                       f"kinetic ones, above {FLUCTUATION_LIMIT:g}")
        row["times"] = times
        row["energy"] = list((np.asarray(total) - total[0]) / (system.n_beads * kT))
        unstable_run = 0 if row["stable"] else unstable_run + 1
        rows.append(row)
        log.info("timestep %.4g: %s", dt, "stable" if row["stable"] else row["reason"])
    return rows


def stability_limits(rows):
    """Largest stable timestep (all smaller ones stable too), the next one tried, and the suggested one.

    Returns
    -------
    (float or None, float or None, float or None)
        Largest stable, first unstable above it, suggested (largest tried <= largest stable / SAFETY_FACTOR).
    """
    largest, above = None, None
    for row in rows:
        if not row["stable"]:
            above = row["timestep"]
            break
        largest = row["timestep"]
    if largest is None:
        return None, above, None
    fitting = [r["timestep"] for r in rows if r["timestep"] <= largest / SAFETY_FACTOR * (1 + 1e-9)]
    return largest, above, (max(fitting) if fitting else rows[0]["timestep"])


def check_timestep(ctx, sim, duration):
    """Verdicts on the model's timestep from a velocity-Verlet scan (adds ``ctx.numbers['timestep']``)."""
    dt_model = ctx.settings["dynamics"]["timestep"]
    rows = timestep_scan(sim, TIMESTEP_LADDER + (dt_model,), duration)
    largest, above, suggested = stability_limits(rows)
    ctx.numbers["timestep"] = {"model_timestep": dt_model, "largest_stable": largest, "first_unstable": above,
                               "suggested": suggested, "duration_tau": duration, "drift_limit": DRIFT_LIMIT,
                               "fluctuation_limit": FLUCTUATION_LIMIT,
                               "scan": rows}
    bracket = (f"between {largest:g} and {above:g}" if largest and above else
               f"at least {largest:g} (largest tried)" if largest else f"below {rows[0]['timestep']:g}")
    ok = largest is not None and dt_model <= largest * (1 + 1e-9)
    threshold = (f"timestep <= largest stable timestep; stable = velocity Verlet for {duration:g} tau keeps "
                 f"|dE/dt| <= {DRIFT_LIMIT:g} kT per bead per tau and rms(E) <= {FLUCTUATION_LIMIT:g} rms(K)")
    message = (f"The model's timestep {dt_model:g} tau is {'within' if ok else 'above'} the stable range; the stability "
               f"limit lies {bracket} tau.")
    if suggested is not None:
        message += f" Suggested timestep: {suggested:g} tau (largest stable / {SAFETY_FACTOR:g})."
    own = next(r for r in rows if abs(r["timestep"] - dt_model) < 1e-12)
    return [Verdict("timestep", "timestep against the velocity-Verlet stability limit", "pass" if ok else "fail",
                    dt_model, None, "tau", threshold, f"{OUR_CHOICE} (drift limit); safety factor {SAFETY_FACTOR:g}: "
                    f"{COMMON_PRACTICE}", message + (f" At {dt_model:g} tau: {own['reason']}." if own["reason"] else "")),
            Verdict("largest_stable_timestep", "largest stable timestep (ladder bracket as uncertainty)", "note",
                    largest, (above - largest) if largest and above else None, "tau", "", OUR_CHOICE,
                    f"Stability limit {bracket} tau."),
            ]


# --------------------------------------------------------------------------------------------- 2. forces

def force_gradient_error(sim, n_directions=8, step=1e-5, seed=0):
    """Largest mismatch between the forces and the central-difference gradient of the energy.

    Along random unit directions u in the 3n-dimensional configuration space,
    ``dE/du ~ (E(x + h u) - E(x - h u)) / (2 h)`` is compared with ``-F . u``; the mismatch is
    divided by ``|F|`` (the largest ``|F . u|`` can be).

    Parameters
    ----------
    sim : Simulation
        Its positions are restored afterwards.
    n_directions : int
    step : float
        h, sigma.
    seed : int
        Seed of the directions.

    Returns
    -------
    float
        Largest relative mismatch.
    """
    rng = np.random.default_rng(seed)
    x0 = sim.system.positions.copy()
    sim.compute_forces()
    force = sim.forces.copy()
    norm = float(np.linalg.norm(force)) or 1.0
    worst = 0.0
    try:
        for _ in range(n_directions):
            u = rng.standard_normal(x0.shape)
            u /= np.linalg.norm(u)
            energies = []
            for sign in (1.0, -1.0):
                sim.system.positions[:] = x0 + sign * step * u
                sim.compute_forces()
                energies.append(float(np.sum(sim.raw_energies[:3])))
            slope = (energies[0] - energies[1]) / (2.0 * step)
            worst = max(worst, abs(slope + float(np.sum(force * u))) / norm)
    finally:
        sim.system.positions[:] = x0
        sim.compute_forces()
    return worst


def check_forces(ctx, sim):
    """Verdict: forces against the gradient of the energy for the whole model at an equilibrated state."""
    err = force_gradient_error(sim, seed=ctx.settings["run"]["seed"])
    ctx.numbers["force_gradient"] = {"relative_error": err, "tolerance": FORCE_TOLERANCE, "directions": 8,
                                     "step_sigma": 1e-5}
    ok = err <= FORCE_TOLERANCE
    return [Verdict("force_gradient", "forces against the energy gradient (whole model, 8 random directions)",
                    "pass" if ok else "fail", err, None, "relative", f"<= {FORCE_TOLERANCE:g}", OUR_CHOICE,
                    "Forces are the negative gradient of the energy." if ok else
                    "Forces do not match the energy gradient: energy is not conserved by any integrator.")]


# --------------------------------------------------------------------------------------------- 3. tables

def lagrange_residual(x, y):
    """Residual of each inner row against the cubic through its four neighbours (two each side).

    Parameters
    ----------
    x, y : float64 (m,)
        Increasing abscissae and values.

    Returns
    -------
    float64 (m,)
        ``y_i`` minus the interpolated value (0 for the two rows at each end). A smooth function leaves
        residuals of order h^4 y''''; a jump of size d leaves about d/2 next to it.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    res = np.zeros_like(y)
    if len(x) < 5:
        return res
    i = np.arange(2, len(x) - 2)
    nodes = np.stack([i - 2, i - 1, i + 1, i + 2])
    pred = np.zeros(len(i))
    for a in range(4):
        w = np.ones(len(i))
        for b in range(4):
            if b != a:
                w *= (x[i] - x[nodes[b]]) / (x[nodes[a]] - x[nodes[b]])
        pred += w * y[nodes[a]]
    res[i] = y[i] - pred
    return res


def table_report(path, kind, kT):
    """Numbers of one table file: force consistency, jumps and range.

    Parameters
    ----------
    path : path-like
        Table file ``r U [F]``.
    kind : {"bond", "pair"}
    kT : float
        epsilon.

    Returns
    -------
    dict
        ``force_mismatch`` (None without a force column), ``largest_jump`` (kT) and where, and the range
        numbers of the kind (``end_walls`` for bonds; ``inner_reach`` and ``cutoff_energy`` for pairs), plus
        the rows (``r``, ``u``, ``f``) and the ``accessible`` mask for the figures.
    """
    r, u, f = read_columns(path)
    accessible = (u - u.min()) <= ACCESSIBLE * kT
    du = np.gradient(u, r, edge_order=2)
    force = -du if f is None else f
    out = {"path": str(path), "kind": kind, "rows": len(r), "r_first": float(r[0]), "r_last": float(r[-1]),
           "force_column": f is not None, "r": r.tolist(), "u": u.tolist(), "f": force.tolist(),
           "accessible": accessible.tolist()}
    if f is not None:
        scale = max(float(np.max(np.abs(f[accessible]))), kT)
        out["force_mismatch"] = float(np.max(np.abs(f + du)[accessible]) / scale)
    else:
        out["force_mismatch"] = None
    jumps = np.abs(lagrange_residual(r, u)) / kT
    step = np.gradient(r)
    jumps = np.maximum(jumps, np.abs(lagrange_residual(r, force)) * step / kT)
    jumps[~accessible] = 0.0
    k = int(np.argmax(jumps))
    out.update(largest_jump=float(jumps[k]), jump_at=float(r[k]))
    if kind == "bond":
        out["end_walls"] = [float((u[0] - u.min()) / kT), float((u[-1] - u.min()) / kT)]
    else:
        out["inner_reach"] = float(math.exp(-min((u[0] - u.min()) / kT, 700.0)) * r[0] ** 3)
        out["cutoff_energy"] = float(abs(u[-1]) / kT)
        out["cutoff_force"] = float(abs(force[-1]))
    return out


def check_tables(ctx):
    """Verdicts on each tabulated potential of the model (none if it has no tables)."""
    verdicts = []
    ctx.numbers["tables"] = {}
    for section, kind in (("bonds", "bond"), ("nonbonded", "pair")):
        if ctx.settings[section]["potential"] != "table":
            continue
        rep = table_report(ctx.settings[section]["table"], kind, ctx.kT)
        ctx.numbers["tables"][kind] = rep
        name = Path(rep["path"]).name
        if rep["force_mismatch"] is not None:
            ok = rep["force_mismatch"] <= TABLE_FORCE_TOLERANCE
            verdicts.append(Verdict(f"{kind}_table_forces", f"{kind} table {name}: force column against -dU/dr",
                                    "pass" if ok else "fail", rep["force_mismatch"], None,
                                    "relative to the largest accessible force", f"<= {TABLE_FORCE_TOLERANCE:g}",
                                    OUR_CHOICE, "The force column is the derivative of the energy column."
                                    if ok else "The force column disagrees with -dU/dr of the energy column."))
        ok = rep["largest_jump"] <= JUMP_LIMIT
        verdicts.append(Verdict(f"{kind}_table_smoothness", f"{kind} table {name}: jumps between rows "
                                f"(rows within {ACCESSIBLE:g} kT of the minimum)", "pass" if ok else "fail",
                                rep["largest_jump"], None, "kT", f"<= {JUMP_LIMIT:g} kT", OUR_CHOICE,
                                f"Largest departure from a smooth curve {rep['largest_jump']:.2g} kT at r = "
                                f"{rep['jump_at']:.4g} sigma" + ("." if ok else ": a discontinuity or kink.")))
        if kind == "bond":
            wall = min(rep["end_walls"])
            ok = wall >= END_WALL
            verdicts.append(Verdict("bond_table_range", f"bond table {name}: range {rep['r_first']:g}-"
                                    f"{rep['r_last']:g} sigma keeps bonds inside", "pass" if ok else "fail", wall,
                                    None, "kT", f">= {END_WALL:g} kT above the minimum at both ends", OUR_CHOICE,
                                    f"The energy rises {rep['end_walls'][0]:.3g} and {rep['end_walls'][1]:.3g} kT "
                                    "at the two ends" + ("." if ok else "; bonds can run off the table and stop "
                                                                       "the run.")))
        else:
            ok_in = rep["inner_reach"] <= INNER_REACH_LIMIT
            verdicts.append(Verdict("pair_table_inner_end", f"pair table {name}: inner end r = {rep['r_first']:g} "
                                    "sigma out of reach", "pass" if ok_in else "fail", rep["inner_reach"], None,
                                    "exp(-dU/kT) (r_first/sigma)^3", f"<= {INNER_REACH_LIMIT:g}", OUR_CHOICE,
                                    "Pairs do not reach below the table." if ok_in else
                                    "Pairs can come closer than the table's first row, which stops the run."))
            ok_cut = rep["cutoff_energy"] <= CUTOFF_ENERGY_LIMIT
            verdicts.append(Verdict("pair_table_cutoff", f"pair table {name}: energy at its last row r = "
                                    f"{rep['r_last']:g} sigma", "pass" if ok_cut else "fail", rep["cutoff_energy"],
                                    None, "kT", f"|U| <= {CUTOFF_ENERGY_LIMIT:g} kT", OUR_CHOICE,
                                    f"The energy jumps by {rep['cutoff_energy']:.2g} kT where the table ends "
                                    f"(force there {rep['cutoff_force']:.2g} epsilon/sigma)."))
    return verdicts


# --------------------------------------------------------------------------------------------- 4. crossing

def crossing_barrier(forcefield, kT, bond_range=(0.5, 1.6), n_grid=2201):
    """Energy for two bonds to pass through each other, as a function of the bond length.

    Crossing geometry: two bonds of length l cross at their common midpoint at right angles, so each
    of the four beads of one bond is l / sqrt(2) from both beads of the other. The barrier is
    ``2 [U_b(l) - min U_b] + 4 U_pair(l / sqrt(2))``, with ``U_b`` the bond energy plus the pair energy
    between the bond's own beads (unless bonded pairs are excluded) and the pair energy of separated
    bonds taken as zero; the smallest value over l is the barrier.

    Parameters
    ----------
    forcefield : ForceField
        One bond and one pair potential (the first of each is used).
    kT : float
        epsilon.
    bond_range : (float, float)
        Bond lengths searched, sigma (clipped to the bond potential's range).
    n_grid : int

    Returns
    -------
    dict
        ``barrier`` (kT), ``bond_length`` at the minimum (sigma) and the curve (``l``, ``energy`` in kT).
    """
    bond = forcefield.bond_list(1)[0]
    pair = forcefield.pair_table(1)[0][0]
    lo, hi = bond_range
    table = getattr(bond, "table", None)
    if table is not None:
        lo, hi = max(lo, table.r_first), min(hi, table.r_last)
    hi = min(hi, bond.max_length * (1 - 1e-6))
    l = np.linspace(lo, hi, n_grid)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ub = bond.energy_force(l ** 2)[0]
        if forcefield.exclude == "none":
            ub = ub + pair.energy_force(l ** 2)[0]
        cross = pair.energy_force(l ** 2 / 2.0)[0]
    ub = np.where(np.isfinite(ub), ub, np.inf)
    total = (2.0 * (ub - np.min(ub)) + 4.0 * cross) / kT
    k = int(np.argmin(total))
    return {"barrier": float(total[k]), "bond_length": float(l[k]), "l": l.tolist(),
            "energy": np.where(np.isfinite(total), total, np.nan).tolist()}


def check_crossing(ctx):
    """Verdict: can bonds pass through each other?"""
    from ..runner import build_forcefield

    res = crossing_barrier(build_forcefield(ctx.settings), ctx.kT)
    res["threshold"] = CROSSING_BARRIER
    ctx.numbers["crossing"] = res
    ok = res["barrier"] >= CROSSING_BARRIER
    return [Verdict("crossing_barrier", "barrier against bond crossing (bond + pair energy, crossing geometry)",
                    "pass" if ok else "fail", res["barrier"], None, "kT", f">= {CROSSING_BARRIER:g} kT",
                    COMMON_PRACTICE + "; thresholds of 20-70 kT are quoted, we use 20",
                    f"Lowest crossing path at bond length {res['bond_length']:.3g} sigma costs {res['barrier']:.3g} kT"
                    + (": bonds stay uncrossable." if ok else
                       ": bonds can pass through each other, so chains are not mutually uncrossable and "
                       "entanglements are lost."))]


# --------------------------------------------------------------------------------------------- 5-6. runs

def run_intended(ctx, timestep, n_equilibration, n_production, frame_interval):
    """Sample one chain at the model's temperature and analyse it (sweep point analysis).

    Returns
    -------
    folder : Path
    settings : dict
    result : dict
        From :func:`beadsim.studies.sweep.analyze_point`, plus ``steps_per_second`` of the run.
    """
    from ..runner import run
    from .sweep import analyze_point

    s = single_chain_settings(ctx.settings, timestep)
    s["run"].update(equilibration_steps=int(n_equilibration), production_steps=int(n_production), minimize=True)
    s["output"].update(trajectory="trajectory.h5", frame_interval=int(frame_interval),
                       table_interval=max(int(frame_interval) // 5, 1),
                       checkpoint_interval=int(n_equilibration + n_production))
    folder = ctx.out / "runs" / "intended_condition"
    summary = run(s, folder, overwrite=True, progress=False)
    result = analyze_point(folder, s)
    result["steps_per_second"] = summary["steps_this_invocation"] / summary["wall_seconds"]
    return folder, s, result


def classify_quality(nu, error):
    """Solvent-quality class from nu_eff and the probability of each class (Gaussian error).

    Returns
    -------
    (str, dict)
        ``"good"``, ``"near_theta"`` or ``"poor"``; and ``{class: probability}``.
    """
    from scipy.stats import norm

    lo, hi = 0.5 - NU_BAND, 0.5 + NU_BAND
    if error is None or not math.isfinite(error) or error <= 0:
        probs = {"poor": float(nu < lo), "near_theta": float(lo <= nu <= hi), "good": float(nu > hi)}
    else:
        probs = {"poor": float(norm.cdf(lo, nu, error)), "good": float(norm.sf(hi, nu, error))}
        probs["near_theta"] = max(0.0, 1.0 - probs["poor"] - probs["good"])
    label = "good" if nu > hi else "poor" if nu < lo else "near_theta"
    return label, probs


def load_positions(folder, s):
    """Frames of a run folder's trajectory in sigma, float64 (n_frames, n_beads, 3)."""
    import mdtraj

    traj = mdtraj.load(str(Path(folder) / s["output"]["trajectory"]))
    return traj.xyz.astype(np.float64) / s["output"]["length_scale_nm"]


def check_solvent(ctx, s, result, positions):
    """Verdicts on the solvent quality at the model's temperature."""
    from ..analysis.internal import internal_distances

    n = s["chains"]["length"][0]
    nu, nu_err = result["nu_internal"], result["nu_internal_error"]
    ratio = result["re2"] / result["rg2"]
    ratio_err = ratio * math.hypot(result["re2_error"] / result["re2"], result["rg2_error"] / result["rg2"])
    ideal = 6.0 * n / (n + 1.0)
    ctx.numbers["solvent"] = {"n_beads": n, "temperature": ctx.kT, "timestep": s["dynamics"]["timestep"],
                              "equilibration_steps": s["run"]["equilibration_steps"],
                              "production_steps": s["run"]["production_steps"], "point": result,
                              "ratio": ratio, "ratio_error": ratio_err, "ratio_ideal": ideal}
    r2 = internal_distances(positions, [np.arange(n)]).mean(axis=0)
    ctx.numbers["solvent"].update(internal_s=list(range(1, n)), internal_r2=r2[1:].tolist())
    verdicts = []
    if not math.isfinite(nu):
        verdicts.append(Verdict("solvent_quality", "solvent quality at the model's temperature", "skipped", None,
                                None, "", "", "", "Too few frames or beads for nu_eff from internal distances."))
    else:
        label, probs = classify_quality(nu, nu_err)
        ctx.numbers["solvent"].update(verdict=label, probabilities=probs)
        expected = ctx.plan.get("expected_quality")
        status = "note" if expected is None else ("pass" if expected == label else "fail")
        words = {"good": "good solvent", "near_theta": "near theta", "poor": "poor solvent"}
        message = (f"nu_eff = {nu:.3f} +- {nu_err:.3f} over 3 <= s <= N/2 of a {n}-bead chain: {words[label]} at "
                   "this chain length "
                   f"(probability {probs[label]:.2f}; good {probs['good']:.2f}, near theta {probs['near_theta']:.2f}, "
                   f"poor {probs['poor']:.2f}).")
        if expected is not None:
            message += f" Expected: {words[expected]}."
        verdicts.append(Verdict("solvent_quality", "solvent quality at the model's temperature (nu_eff from internal "
                                "distances)", status, nu, nu_err, "",
                                f"near theta if |nu_eff - 1/2| <= {NU_BAND:g}; good above, poor below",
                                OUR_CHOICE + "; finite chains give nu_eff below the asymptotic 0.588 in good "
                                "solvent", message))
    verdicts.append(Verdict("size_ratio", "<Re^2>/<Rg^2> at the model's temperature", "note", ratio, ratio_err, "",
                            "", f"ideal finite-N value 6N/(N+1) = {ideal:.3f} (exact); about 6.3 for self-avoiding "
                            "walks (from memory); 2 for a compact globule (ends uncorrelated)",
                            f"<Re^2>/<Rg^2> = {ratio:.3f} +- {ratio_err:.2f} against the ideal {ideal:.3f}."))
    return verdicts


def _distribution_shift(samples, target):
    """Shift of the mean and change of the width of ``samples`` against a tabulated density, in target sd."""
    x, p = target[:, 0], target[:, 1]
    w = p / np.trapezoid(p, x)
    mean = np.trapezoid(w * x, x)
    sd = math.sqrt(np.trapezoid(w * (x - mean) ** 2, x))
    return {"target_mean": float(mean), "target_sd": float(sd), "mean": float(np.mean(samples)),
            "sd": float(np.std(samples)), "mean_shift": float((np.mean(samples) - mean) / sd),
            "width_change": float((np.std(samples) - sd) / sd)}


def check_structure(ctx, s, positions):
    """Verdicts on bond-length and angle distributions against the shipped targets (skipped without them)."""
    from ..analysis.bonds import bond_angles, bond_lengths

    wanted = [(k, t) for k, t in (("bond", "bond_target"), ("angle", "angle_target")) if ctx.plan.get(t)]
    if not wanted:
        return [Verdict("structure", "bond and angle distributions against Boltzmann-inversion targets", "skipped",
                        None, None, "", "", "", "The model ships no target distributions ([vet] bond_target, "
                        "angle_target).")]
    chains = [np.arange(s["chains"]["length"][0])]
    samples = {"bond": bond_lengths(positions, chains).ravel(),
               "angle": np.degrees(bond_angles(positions, chains)).ravel()}
    ctx.numbers["structure"] = {}
    verdicts = []
    for kind, key in wanted:
        target = ctx.plan[key + "_data"]
        shift = _distribution_shift(samples[kind], target)
        shift.update(samples=int(samples[kind].size), target_x=target[:, 0].tolist(), target_p=target[:, 1].tolist(),
                     histogram=np.histogram(samples[kind], bins=60, density=True)[0].tolist(),
                     edges=np.histogram_bin_edges(samples[kind], bins=60).tolist())
        ctx.numbers["structure"][kind] = shift
        worst = max(abs(shift["mean_shift"]), abs(shift["width_change"]))
        ok = worst <= STRUCTURE_LIMIT
        unit = "sigma" if kind == "bond" else "degrees"
        verdicts.append(Verdict(f"{kind}_distribution", f"{kind} distribution against its target "
                                f"({Path(ctx.plan[key]).name})", "pass" if ok else "fail", worst, None,
                                "target standard deviations",
                                f"mean shift and width change <= {STRUCTURE_LIMIT:g} target sd", OUR_CHOICE,
                                f"Mean {shift['mean']:.4g} against {shift['target_mean']:.4g} {unit}, width "
                                f"{shift['sd']:.3g} against {shift['target_sd']:.3g} {unit} "
                                f"({shift['samples']} samples)."))
    return verdicts


# --------------------------------------------------------------------------------------------- 7. theta

def has_attraction(forcefield):
    """True if the pair potential is negative somewhere inside its cutoff (a theta point can exist)."""
    pair = forcefield.pair_table(1)[0][0]
    if pair.cutoff <= 0:
        return False
    r = np.linspace(0.5, pair.cutoff, 2000)[:-1]
    with np.errstate(over="ignore", divide="ignore"):
        return bool(np.nanmin(pair.energy_force(r ** 2)[0]) < -1e-9)


def sweep_plan(ctx, timestep, seconds, steps_per_second):
    """Temperatures, chain lengths and steps per point of the theta sweep that fit in ``seconds``.

    The cost of a point is taken proportional to its beads, measured on the model's chain at
    ``steps_per_second``, plus a start-up of a few seconds per point.
    """
    n = ctx.settings["chains"]["length"][0]
    lengths = sorted({max(8, n // 4), max(12, n // 2), n})
    temps = ctx.plan.get("sweep_temperatures") or [round(ctx.kT * f, 4) for f in (0.6, 0.8, 1.0, 1.25, 1.6)]
    replicas = 1 if ctx.fast else 2
    workers = max(1, min(2, os.cpu_count() or 1))
    points = len(temps) * replicas
    startup = 4.0 * points * len(lengths) / workers
    bead_share = sum(length / n for length in lengths) * points
    steps = (max(seconds - startup, 0.0) * workers * steps_per_second) / (1.25 * bead_share)
    steps = int(min(max(steps, 50_000), 4_000_000) // 10_000 * 10_000)
    return {"temperatures": temps, "chain_lengths": lengths, "replicas": replicas, "production_steps": steps,
            "equilibration_steps": steps // 4, "timestep": timestep, "workers": workers,
            "frame_interval": max(steps // 400, 100)}


def check_theta(ctx, timestep, seconds, steps_per_second):
    """Run a temperature sweep with the study machinery and report the theta estimate."""
    from ..runner import build_forcefield
    from .sweep import run_study

    if ctx.settings["nonbonded"]["potential"] == "cosine_squared":
        note = "the attraction depth is the usual control of this model; the sweep varies temperature"
    else:
        note = ""
    if not has_attraction(build_forcefield(ctx.settings)):
        ctx.numbers["theta"] = {"skipped": "no attraction"}
        return [Verdict("theta", "theta temperature from a sweep", "skipped", None, None, "", "", "",
                        "The pair potential has no attractive part: the chain is in good solvent at every "
                        "temperature and there is no theta point to find.")]
    plan = sweep_plan(ctx, timestep, seconds, steps_per_second)
    folder = ctx.out / "theta_sweep"
    folder.mkdir(parents=True, exist_ok=True)
    base = single_chain_settings(ctx.settings, timestep)
    base["run"].update(equilibration_steps=plan["equilibration_steps"], minimize=True)
    base["output"].update(trajectory="trajectory.h5", frame_interval=plan["frame_interval"],
                          table_interval=max(plan["frame_interval"] // 5, 1),
                          checkpoint_interval=plan["production_steps"] + plan["equilibration_steps"])
    (folder / "model.toml").write_text(to_toml(base), encoding="utf-8")
    temps = ", ".join(repr(t) for t in plan["temperatures"])
    lengths = ", ".join(str(v) for v in plan["chain_lengths"])
    (folder / "study.toml").write_text(
        "# written by beadsim vet: theta sweep of the vetted model\n[study]\nbase = \"model.toml\"\n"
        f"control = \"temperature\"\nvalues = [{temps}]\nchain_lengths = [{lengths}]\nreplicas = {plan['replicas']}\n"
        f"seed = {ctx.settings['run']['seed']}\nproduction_steps = {plan['production_steps']}\n", encoding="utf-8")
    started = time.perf_counter()
    summary = run_study(folder / "study.toml", folder / "study", workers=plan["workers"], progress=False)
    plan["wall_seconds"] = round(time.perf_counter() - started, 1)
    best = summary.get("theta_combined")
    ctx.numbers["theta"] = {"plan": plan, "estimates": summary.get("theta", []), "combined": best,
                            "collapse": summary.get("collapse", []), "failed_points": summary.get("failed", {}),
                            "figures": summary.get("figures")}
    fig_dir = Path(summary.get("figures") or folder / "study" / "figures")
    for png in sorted(fig_dir.glob("*.png")):
        ctx.figures[f"sweep_{png.stem}"] = png
    fitted = (f"N = {lengths}, T = {temps}, {plan['replicas']} replica(s), {plan['production_steps']} steps each")
    if best is None:
        return [Verdict("theta", "theta temperature from a sweep", "note", None, None, "epsilon/k_B", "", "",
                        f"No theta estimate from this sweep ({fitted}); widen sweep_temperatures or raise the "
                        "budget." + (f" Note: {note}." if note else ""))]
    where = "above" if ctx.kT > best["value"] else "below"
    return [Verdict("theta", "theta temperature from a sweep (estimators side by side in the report)", "note",
                    best["value"], best["error"], "epsilon/k_B", "", "error from the budget's sampling",
                    f"theta = {best['value']:.3g} +- {best['error']:.2g} ({best['how']}); the model's temperature "
                    f"{ctx.kT:g} lies {where} it. Sweep: {fitted}." + (f" Note: {note}." if note else ""))]


# --------------------------------------------------------------------------------------------- 8. time

def production_estimate(ctx, timestep, max_beads=20_000, repeats=3):
    """Time a few hundred steps of the production system the plan describes and extrapolate.

    The production system is the model's chains (its first chain length) repeated up to
    ``production_beads`` in the model's box. Systems above ``max_beads`` are timed at ``max_beads`` and
    scaled linearly in the bead count (stated in the result).

    Returns
    -------
    dict
        ``beads``, ``steps``, ``bead_steps_per_second`` (median of ``repeats`` blocks, with min and max),
        ``hours`` (with ``hours_low``, ``hours_high``), ``timed_beads``, ``load_average``.
    """
    from ..runner import build_simulation

    s = copy.deepcopy(ctx.settings)
    length = s["chains"]["length"][0]
    beads = ctx.plan.get("production_beads") or sum(s["chains"]["length"])
    steps = ctx.plan.get("production_steps") or (s["run"]["equilibration_steps"] + s["run"]["production_steps"])
    timed = min(beads, max_beads)
    count = max(1, round(timed / length))
    s["chains"].update(count=count, length=[length] * count)
    s["solvent"] = {key: None for key in s["solvent"]}
    s["dynamics"]["timestep"] = timestep
    if s["dynamics"]["integrator"] == "verlet":
        s["dynamics"]["integrator"] = "baoab"
    sim = build_simulation(s)
    try:
        sim.minimize(max_iterations=3000)
    except MinimizationError as exc:
        log.info("production timing: minimisation stopped early (%s); timing from there", exc)
    n_timed = sim.system.n_beads
    block = max(50, int(300_000 / n_timed))
    sim.advance(block // 5)
    rates = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        sim.advance(block)
        rates.append(block * n_timed / (time.perf_counter() - t0))
    rate = float(np.median(rates))
    hours = beads * steps / rate / 3600.0
    return {"beads": int(beads), "steps": int(steps), "timed_beads": int(n_timed), "block_steps": block,
            "bead_steps_per_second": rate, "rate_min": float(min(rates)), "rate_max": float(max(rates)),
            "hours": hours, "hours_low": beads * steps / max(rates) / 3600.0,
            "hours_high": beads * steps / min(rates) / 3600.0, "load_average": list(os.getloadavg()),
            "extrapolated": beads > n_timed, "cores": os.cpu_count()}


def check_production(ctx, timestep):
    """Verdict (a note): wall time of the planned production run on this machine."""
    try:
        est = production_estimate(ctx, timestep)
    except InstabilityError as exc:
        ctx.numbers["production"] = {"error": str(exc)}
        return [Verdict("production_time", "wall time of the planned production run", "skipped", None, None, "h", "",
                        "", f"The timing run broke down ({exc}).")]
    ctx.numbers["production"] = est
    half = 0.5 * (est["hours_high"] - est["hours_low"])
    how = (f"{est['beads']} beads x {est['steps']} steps at {est['bead_steps_per_second']:.3g} bead-steps/s "
           f"(timed on {est['timed_beads']} beads" + (", scaled linearly in beads" if est["extrapolated"] else "")
           + f"; load average {est['load_average'][0]:.2f} on {est['cores']} cores)")
    return [Verdict("production_time", "wall time of the planned production run on this machine", "note",
                    est["hours"], half, "hours", "", "spread of three timed blocks",
                    f"About {est['hours']:.3g} h ({est['hours_low']:.3g}-{est['hours_high']:.3g} h): {how}.")]


# --------------------------------------------------------------------------------------------- battery

def vet(path, out, *, budget_minutes=None, fast=False, overwrite=False, stages=None):
    """Run the battery on a model and write the report (HTML and JSON) into ``out``.

    Parameters
    ----------
    path : path-like
        Run input or vet file.
    out : path-like
        Output folder (created).
    budget_minutes : float, optional
        Wall-time budget; default 4 minutes with ``fast``, else 30. The sweep takes what the other checks leave.
    fast : bool
        Short runs throughout (for a first look).
    overwrite : bool
        Replace a report already in ``out``.
    stages : collection of str, optional
        Subset of :data:`STAGES` to run (default all); the numerical checks always run.

    Returns
    -------
    dict
        The report (also in ``out/vet_report.json``): ``verdicts``, ``problems`` (keys of failed verdicts),
        ``numbers``, ``figures`` and the run's context.
    """
    from ..bench import machine_description
    from .vet_report import REPORT_HTML, REPORT_JSON, draw_figures, write_report

    plan, settings = read_plan(path)
    budget = positive(budget_minutes if budget_minutes is not None else
                      (FAST_BUDGET_MINUTES if fast else DEFAULT_BUDGET_MINUTES), "--budget (minutes)")
    stages = set(STAGES if stages is None else stages)
    unknown = stages - set(STAGES)
    if unknown:
        raise InputError(f"stages: unknown {sorted(unknown)}; choose from {', '.join(STAGES)}")
    out = Path(out)
    if (out / REPORT_JSON).exists() and not overwrite:
        raise InputError(f"{out}: folder already holds a vet report ({REPORT_JSON}); use --overwrite to replace it "
                         "or --out for another folder")
    try:
        (out / "figures").mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{out}: cannot create the output folder ({exc.strerror or exc}); choose another --out") \
            from None
    ctx = VetContext(settings=settings, plan=plan, out=out, fast=fast, budget_seconds=budget * 60.0)
    machine = {"description": machine_description()}  # load average at the start
    verdicts = []
    chain = single_chain_settings(settings)
    sim, speed = equilibrated_chain(chain, 10_000 if fast else 40_000)
    ctx.numbers["throughput_chain"] = {"steps_per_second": speed, "n_beads": sim.system.n_beads,
                                       "timestep": sim.integrator.timestep}
    verdicts += check_timestep(ctx, sim, 10.0 if fast else 40.0)
    verdicts += check_forces(ctx, sim)
    verdicts += check_tables(ctx)
    verdicts += check_crossing(ctx)
    ts = ctx.numbers["timestep"]
    dt_run = settings["dynamics"]["timestep"]
    if ts["largest_stable"] is None or dt_run > ts["largest_stable"]:
        dt_run = ts["suggested"] or TIMESTEP_LADDER[0]
        ctx.numbers["dynamics_timestep_note"] = (f"the model's timestep failed the stability check; runs use the "
                                                 f"suggested {dt_run:g} tau")
    if "solvent" in stages:
        share = 0.25 if "theta" in stages else 0.6
        n_prod = int(min(max(share * ctx.remaining() * speed, 100_000), 5_000_000) // 10_000 * 10_000)
        try:
            folder, s, result = run_intended(ctx, dt_run, n_prod // 5, n_prod, max(n_prod // 800, 100))
        except InstabilityError as exc:
            verdicts.append(Verdict("solvent_quality", "solvent quality at the model's temperature", "fail", None,
                                    None, "", "the sampling run completes", "exact",
                                    f"The thermostatted run at timestep {dt_run:g} tau broke down: {exc}"))
        else:
            speed = result["steps_per_second"]  # measured later, under the machine's current load
            positions = load_positions(folder, s)
            verdicts += check_solvent(ctx, s, result, positions)
            verdicts += check_structure(ctx, s, positions)
    if "production" in stages:
        verdicts += check_production(ctx, dt_run)
    if "theta" in stages:
        verdicts += check_theta(ctx, dt_run, 0.9 * ctx.remaining(), speed)
    report = {
        "model": plan["model"], "plan": {k: v for k, v in plan.items() if not k.endswith("_data")},
        "fast": fast, "budget_minutes": budget, "stages": sorted(stages),
        "wall_seconds": round(time.perf_counter() - ctx.started, 1),
        "machine": {**machine, "load_average_at_end": list(os.getloadavg())},
        "verdicts": [v.as_dict() for v in verdicts],
        "problems": [v.key for v in verdicts if v.status == "fail"], "numbers": ctx.numbers,
        "model_settings": settings,
    }
    ctx.figures.update(draw_figures(ctx.numbers, out / "figures"))
    report["figures"] = {name: str(p) for name, p in ctx.figures.items()}
    write_report(report, out)
    report["html"] = str(out / REPORT_HTML)
    return report

