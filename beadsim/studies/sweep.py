"""Solvent-quality studies: plan, run, resume and tabulate a sweep over a control parameter and N.

A study file (TOML) has one section ``[study]`` (keys in :data:`STUDY_SCHEMA`)
naming a base run input (the model), the control parameter (``temperature`` or
the ``depth`` of the cosine-squared attraction), its values, the chain lengths,
the replicas per point and how long to sample. Every (N, value, replica) is a
*point* run by :func:`beadsim.runner.run` in its own folder; the study store
(:mod:`beadsim.studies.store`) records each point's status, so running the same
command again skips finished points, retries failed ones up to a limit and
resumes interrupted ones from their checkpoints.
"""

import copy
import json
import logging
import time
from pathlib import Path

import numpy as np
import tables

from ..config import (AT_LEAST_ONE, POSITIVE, REQUIRED, check_only_section, check_section, choice, load_toml,
                      read_settings)
from ..engine.integrators import INTEGRATORS
from ..errors import CheckpointError, InputError
from . import sweep_mbar
from .theta import Estimate

log = logging.getLogger(__name__)

STORE_FILE = "study.sqlite"
RESULTS_CSV = "results.csv"
RESULTS_PARQUET = "results.parquet"
SUMMARY_FILE = "study_summary.json"
POINTS_DIR = "points"
FIGURES_DIR = "figures"

CONTROLS = ("temperature", "depth")

#: Errors from reading back a point's files when a stopped process left them unusable: a half-written
#: trajectory, or one the checkpoint relies on that no longer opens (CheckpointError from the resume).
UNREADABLE_OUTPUT = (tables.exceptions.HDF5ExtError, OSError, CheckpointError)

STUDY_SCHEMA = {
    "base": (str, REQUIRED, ("a run input file", None), "run input describing the model, relative to the study file"),
    "control": (str, REQUIRED, choice(*CONTROLS),
                "temperature (kT, epsilon) or depth (cosine_squared attraction phi, epsilon)"),
    "values": (list, None, ("a non-empty list of numbers > 0", None), "control values (or give range)"),
    "range": (dict, None, ("a table {start, stop, count}", None), "evenly spaced control values, ends included"),
    "chain_lengths": (list, REQUIRED, ("a list of integers >= 2", None), "beads per chain"),
    "replicas": (int, 1, AT_LEAST_ONE, "independent runs per (N, value)"),
    "seed": (int, REQUIRED, ("an integer >= 0", lambda v: v >= 0), "study seed; point seeds derive from it"),
    "production_steps": (int, None, AT_LEAST_ONE, "override the base input's production_steps"),
    "target_relative_error": (float, None, POSITIVE,
                              "sample until the standard error of <Rg^2> is this fraction of it (0.01 = 1 %)"),
    "max_production_steps": (int, None, AT_LEAST_ONE, "cap on production steps when a target is set"),
    "max_attempts": (int, 3, AT_LEAST_ONE, "attempts per point before it is reported failed"),
}


def read_study(path):
    """Read and validate a study file; return ``(study, base_settings)``.

    Raises
    ------
    InputError
        Naming the file, the key and what is allowed.
    """
    path = Path(path)
    raw = load_toml(path)
    src = str(path)
    check_only_section(src, raw, "study", "study")
    study = check_section(src, "study", STUDY_SCHEMA, raw.get("study", {}))
    study["values"] = _control_values(study, src)
    lengths = study["chain_lengths"]
    if not lengths or not all(isinstance(n, int) and not isinstance(n, bool) and n >= 2 for n in lengths):
        raise InputError(f"{src}: [study] chain_lengths: must be a non-empty list of integers >= 2, got {lengths!r}")
    study["chain_lengths"] = sorted(set(lengths))
    base_path = (path.parent / study["base"]).resolve()
    study["base"] = str(base_path)
    base = read_settings(base_path)
    _check_control(base, study["control"], src)
    study["sampling"] = choose_sampler(base, "method" in load_toml(base_path).get("sampling", {}))
    if study["target_relative_error"] is not None and study["max_production_steps"] is None:
        raise InputError(f"{src}: [study] max_production_steps: required with target_relative_error (a cap on "
                         "how long to sample)")
    return study, base


def _control_values(study, src):
    values, rng = study["values"], study["range"]
    if (values is None) == (rng is None):
        raise InputError(f"{src}: [study] give exactly one of values = [...] or range = {{start, stop, count}}")
    if rng is not None:
        unknown = set(rng) - {"start", "stop", "count"}
        if unknown or not {"start", "stop", "count"} <= set(rng):
            raise InputError(f"{src}: [study] range: needs exactly start, stop and count, got {sorted(rng)}")
        if not isinstance(rng["count"], int) or rng["count"] < 1:
            raise InputError(f"{src}: [study] range count: must be an integer >= 1, got {rng['count']!r}")
        values = list(np.linspace(float(rng["start"]), float(rng["stop"]), rng["count"]))
    ok = all(isinstance(v, (int, float)) and not isinstance(v, bool) and np.isfinite(v) and v > 0 for v in values)
    if not values or not ok:
        raise InputError(f"{src}: [study] values: the parameter range is empty or holds values that are not "
                         f"numbers > 0: {values!r}")
    return sorted({float(v) for v in values})


#: Hybrid settings a study gives an isolated-chain model whose base input names no sampling method:
#: rounds of 20 Langevin steps, each followed by pivots whose count is tuned at the end of equilibration
#: (100 until then): about 0.4 accepted per bead per round where pivots are accepted often (coils), 2 pivots
#: per round where they are not (globules). Measured in analysis/statics_speed.md (engine.hybrid module
#: notes). Long chains get shorter rounds (:func:`study_segment_steps`).
STUDY_HYBRID = {"method": "hybrid", "segment_steps": 20, "pivot_moves_per_segment": 100,
                "accepted_pivots_per_bead": 0.4, "crankshaft_moves_per_segment": 0}

LONG_CHAIN_BEADS = 256
"""Chains of at least this many beads get rounds of :data:`LONG_CHAIN_SEGMENT_STEPS` and one table row per round.

There a round costs milliseconds, mostly pivots, and decorrelates Rg^2 within 2-5 rounds, so rows every
round are independent samples at little cost. Shorter chains keep 20-step rounds and the base input's
table: their rounds cost a few tenths of a millisecond, as much as the fixed cost of a round or a row
(about 0.3 ms each, measured on 14-bead chains), and rows 100 steps apart are already independent."""

LONG_CHAIN_SEGMENT_STEPS = 10
"""Langevin steps per hybrid round for long chains: at N = 512 with about 1,200 pivots per round, rounds of
10 steps cost 13 % less than rounds of 20 and decorrelate Rg^2 as fast (rounds of 5 were no faster)."""


def study_segment_steps(n_beads):
    """Langevin steps per hybrid round that a study gives a chain of ``n_beads`` beads."""
    return LONG_CHAIN_SEGMENT_STEPS if n_beads >= LONG_CHAIN_BEADS else STUDY_HYBRID["segment_steps"]


def choose_sampler(base, explicit):
    """How a study samples its points: the base input's own choice, hybrid moves, or dynamics.

    Parameters
    ----------
    base : dict
        Resolved base settings.
    explicit : bool
        True if the base input file names ``[sampling] method`` itself.

    Returns
    -------
    dict
        ``settings``: the ``[sampling]`` section every point uses; ``by_length``: True when the study
        chose hybrid moves itself, whose rounds then follow :func:`study_segment_steps`; ``note``: one
        line for the console and the summary saying which sampler and why.
    """
    sampling = dict(base["sampling"])
    if explicit:
        return {"settings": sampling, "by_length": False, "note": f"{sampling['method']} (set in the base input)"}
    if base["box"]["kind"] != "open":
        return {"settings": sampling, "by_length": False,
                "note": "dynamics: the base model is a periodic box, where pivot moves do not apply; plain "
                        "Langevin dynamics samples every point"}
    if not INTEGRATORS[base["dynamics"]["integrator"]].thermostatted:
        return {"settings": sampling, "by_length": False,
                "note": f"dynamics: the base integrator '{base['dynamics']['integrator']}' has no temperature "
                        "for the Metropolis rule of pivot moves"}
    sampling.update(STUDY_HYBRID)
    return {"settings": sampling, "by_length": True,
            "note": f"hybrid (the base input names no [sampling] method, so each isolated chain is sampled by "
                    f"Langevin segments of {STUDY_HYBRID['segment_steps']} steps ({LONG_CHAIN_SEGMENT_STEPS} "
                    f"from {LONG_CHAIN_BEADS} beads on, with one table row per segment) and pivot moves tuned per "
                    "point: about 0.4 accepted per bead per segment in coils, 2 per segment where pivots are "
                    "rarely accepted; factorized Metropolis rule, tree pair sums; the pivot count of each point "
                    "is in results.csv; statics only)"}


def _check_control(base, control, src):
    if control == "depth" and base["nonbonded"]["potential"] != "cosine_squared":
        raise InputError(f"{src}: [study] control: 'depth' is the attraction depth of the cosine_squared potential, "
                         f"but the base model uses '{base['nonbonded']['potential']}'; use control = 'temperature' "
                         "or set [nonbonded] potential = 'cosine_squared' in the base input")
    if control == "temperature" and base["dynamics"]["integrator"] == "verlet":
        raise InputError(f"{src}: [study] control: 'temperature' needs a thermostatted integrator, but the base "
                         "input uses 'verlet'; use baoab or brownian")


def point_seed(study_seed, n_beads, control, replica):
    """Seed of one point, derived reproducibly from the study seed and the point (NumPy SeedSequence)."""
    value_id = int(round(control * 1e6))
    return int(np.random.SeedSequence([study_seed, n_beads, value_id, replica]).generate_state(1)[0])


def point_key(n_beads, control, replica):
    """Folder and store key of a point; keyed on values, so adding values or lengths keeps old points."""
    return f"n{n_beads:05d}_v{control:.6g}_r{replica:02d}"


def plan(study, out):
    """All points of a study: dicts with key, n_beads, control, replica, seed, folder."""
    points = []
    for n in study["chain_lengths"]:
        for value in study["values"]:
            for r in range(study["replicas"]):
                key = point_key(n, value, r)
                points.append({"key": key, "n_beads": n, "control": value, "replica": r,
                               "seed": point_seed(study["seed"], n, value, r),
                               "folder": str(Path(out) / POINTS_DIR / key)})
    return points


def point_settings(base, study, point):
    """Run settings of one point: the base model with N, control value and seed set."""
    s = copy.deepcopy(base)
    s["chains"].update(count=1, length=[point["n_beads"]])
    s["run"]["seed"] = point["seed"]
    s["solvent"] = {key: None for key in s["solvent"]}  # the control value replaces any preset
    if point["n_beads"] >= 3:  # pivot moves need an interior bead; dimers keep the base input's sampling
        s["sampling"] = dict(study["sampling"]["settings"])
        if study["sampling"]["by_length"]:
            s["sampling"]["segment_steps"] = study_segment_steps(point["n_beads"])
            if point["n_beads"] >= LONG_CHAIN_BEADS:  # one table row per round
                s["output"]["table_interval"] = min(s["output"]["table_interval"], s["sampling"]["segment_steps"])
    if study["control"] == "temperature":
        s["dynamics"]["temperature"] = point["control"]
    else:
        s["nonbonded"]["depth"] = point["control"]
    if study["production_steps"] is not None:
        s["run"]["production_steps"] = study["production_steps"]
    return s


def run_point(task):
    """Run (or resume) one point and analyse it; executed in a worker process.

    Parameters
    ----------
    task : dict
        ``settings``, ``folder``, ``target`` (relative error or None), ``cap`` (steps or None).

    Returns
    -------
    dict
        Observables of the point (see :func:`analyze_point`) plus ``host`` and ``restarted`` (True if
        files left by a stopped run were unreadable and the point was run again from step 0).
    """
    import socket

    from ..runner import CHECKPOINT_FILE, run

    settings, folder = task["settings"], Path(task["folder"])
    resume = (folder / CHECKPOINT_FILE).exists()
    if resume:
        settings = _extended_settings(settings, folder, task)
    restarted = False
    try:
        run(settings, folder, resume=resume, overwrite=not resume, progress=False, allow_longer=True)
    except UNREADABLE_OUTPUT as exc:
        if not resume:
            raise
        # a worker killed while writing can leave an HDF5 file that cannot be opened again; a point is
        # cheap to redo and deterministic, so start it afresh rather than fail it
        log.warning("point %s: files left by a stopped run are unreadable (%s); running it again from the start",
                    folder.name, exc)
        run(settings, folder, overwrite=True, progress=False)
        restarted = True
    result = analyze_point(folder, settings)
    while (task["target"] is not None and settings["run"]["production_steps"] < task["cap"]
           and not _precise_enough(result, task["target"])):
        settings = copy.deepcopy(settings)
        settings["run"]["production_steps"] = min(task["cap"], 2 * settings["run"]["production_steps"])
        run(settings, folder, resume=True, progress=False, allow_longer=True)
        result = analyze_point(folder, settings)
    result["host"] = socket.gethostname()
    result["restarted"] = restarted
    return result


def _extended_settings(settings, folder, task):
    """Settings of a point whose run a stopped sweep had already extended towards its target precision.

    The target loop of :func:`run_point` lengthens the production run in the folder; a point stopped
    during that phase resumes with the longer run (up to the cap) instead of being refused as a run
    with a different input.
    """
    from ..runner import INPUT_FILE

    if task["target"] is None or not (folder / INPUT_FILE).exists():
        return settings
    stored = load_toml(folder / INPUT_FILE).get("run", {}).get("production_steps")
    if not isinstance(stored, int) or not settings["run"]["production_steps"] < stored <= task["cap"]:
        return settings
    settings = copy.deepcopy(settings)
    settings["run"]["production_steps"] = stored
    return settings


def _precise_enough(result, target):
    err = result["rg2_error"]
    return err is not None and np.isfinite(err) and err <= target * result["rg2"]


def analyze_point(folder, settings):
    """Means, standard errors and sample counts of one finished point.

    Uses the production part of the scalar table (steps after equilibration),
    drops a further equilibration period found by Chodera's method, and reports
    <Rg^2>, <Re^2>, the potential energy, the heat capacity per bead from energy
    fluctuations C/N = (<E^2> - <E>^2)/(N kT^2), and the effective exponent from
    internal distances of the saved frames.

    Returns
    -------
    dict
        JSON-serialisable; errors are NaN with a ``note`` where the run was too short.
    """
    from ..analysis.stats import summarize
    from ..io import read_table
    from ..runner import TABLE_FILE

    folder = Path(folder)
    table = read_table(folder / TABLE_FILE)
    prod = table[table["step"] > settings["run"]["equilibration_steps"]]
    n = settings["chains"]["length"][0]
    kT = settings["dynamics"]["temperature"]
    out = {"production_steps": int(settings["run"]["production_steps"]), "note": ""}
    series = {"rg2": prod["radius_of_gyration"].to_numpy() ** 2,
              "re2": prod["end_to_end_distance"].to_numpy() ** 2,
              "potential_energy": prod["potential_energy"].to_numpy() / n}
    notes = []
    for name, x in series.items():
        s = summarize(x)
        out[name] = float(s.mean)
        out[f"{name}_error"] = float(s.error) if s.error is not None else float("nan")
        if name == "rg2":
            out["n_independent"] = float(s.n_independent) if s.n_independent is not None else float("nan")
            out["equilibration_cut"] = int(s.equilibration_index)
            out["n_samples"] = int(s.n_samples)
        if s.reason:
            notes.append(f"{name}: {s.reason}")
    energy = prod["potential_energy"].to_numpy()
    fluct = summarize((energy - energy.mean()) ** 2, detect=False)
    out["heat_capacity"] = float(fluct.mean / (n * kT ** 2))
    out["heat_capacity_error"] = (float(fluct.error / (n * kT ** 2)) if fluct.error is not None else float("nan"))
    out.update(_sampler_record(folder, settings))
    out.update(_frame_analysis(folder, settings))
    out["note"] = "; ".join(notes)
    return out


def _sampler_record(folder, settings):
    """Which sampler ran the point, with the pivot acceptance and the pivot count of production (hybrid)."""
    from ..runner import SUMMARY_FILE as RUN_SUMMARY

    out = {"sampler": settings["sampling"]["method"], "pivot_acceptance": float("nan"),
           "pivot_moves_per_segment": float("nan")}
    if out["sampler"] != "hybrid" or not (folder / RUN_SUMMARY).exists():
        return out
    pivot = json.loads((folder / RUN_SUMMARY).read_text()).get("sampling", {}).get("acceptance", {}).get("pivot", {})
    if pivot.get("rate") is not None:
        out["pivot_acceptance"] = float(pivot["rate"])
    out["pivot_moves_per_segment"] = float(pivot.get("tuned_moves_per_segment")
                                           or settings["sampling"]["pivot_moves_per_segment"])
    return out


#: Consecutive blocks of frames whose separate fits give the error of nu from internal distances.
INTERNAL_BLOCKS = 8

#: Per-point form factor table (columns q [1/sigma], p), read by the study's Kratky figure.
POINT_FORM_FACTOR = "form_factor.csv"

#: Scattering vectors of the per-point form factor, 1/sigma: from well inside the Guinier range of
#: the largest coils to beyond the bond scale.
FORM_FACTOR_Q = np.geomspace(0.02, 8.0, 56)

#: Saved frames (evenly spaced) used for the per-point form factor.
FORM_FACTOR_FRAMES = 100

#: Most saved frames (evenly spaced) paired for the second virial coefficient of two chains.
VIRIAL_FRAMES = 400


def _frame_analysis(folder, settings):
    """Quantities from the saved frames of one point: nu from internal distances, and P(q).

    The second virial coefficient B2 of two chains of the point (sigma^3) and the
    interpenetration ratio Psi* come from up to :data:`VIRIAL_FRAMES` frames paired at
    random orientations (:func:`beadsim.analysis.virial.compute_second_virial`, seeded by
    the point's seed); NaN with fewer than 4 frames.

    nu comes from <R^2(s)> over 3 <= s <= N/2. The frames are cut into
    :data:`INTERNAL_BLOCKS` consecutive blocks and nu is fitted to each block's mean
    <R^2(s)>; the error is the standard deviation of the block values over
    sqrt(blocks), which accounts for the correlation of successive frames and of
    neighbouring separations as long as a block is longer than the chain's
    relaxation time (batch means; Flyvbjerg and Petersen 1989). NaN when there
    are too few frames or beads.

    The single-chain form factor P(q) at :data:`FORM_FACTOR_Q` (exact Debye sum
    over up to :data:`FORM_FACTOR_FRAMES` frames) is written to
    :data:`POINT_FORM_FACTOR` in the point folder when there are frames.
    """
    import mdtraj
    import pandas as pd

    from ..analysis.internal import internal_distances
    from ..analysis.scaling import nu_from_internal_distances
    from ..analysis.scattering import form_factor

    n = settings["chains"]["length"][0]
    path = folder / settings["output"]["trajectory"]
    out = {"nu_internal": float("nan"), "nu_internal_error": float("nan"), "b2": float("nan"),
           "b2_error": float("nan"), "psi_star": float("nan"), "psi_star_error": float("nan")}
    if not path.exists():
        return out
    traj = mdtraj.load(str(path))
    if traj.n_frames == 0:
        return out
    pos = traj.xyz.astype(np.float64) / settings["output"]["length_scale_nm"]
    out.update(_virial(pos, settings))
    chain = [np.arange(n)]
    picks = np.unique(np.linspace(0, traj.n_frames - 1, min(FORM_FACTOR_FRAMES, traj.n_frames)).astype(int))
    pd.DataFrame({"q": FORM_FACTOR_Q, "p": form_factor(pos[picks], chain, FORM_FACTOR_Q)}).to_csv(
        folder / POINT_FORM_FACTOR, index=False)
    if n < 12 or traj.n_frames < 2 * INTERNAL_BLOCKS:
        return out
    r2 = internal_distances(pos, chain)
    s = np.arange(r2.shape[1], dtype=float)

    def fit(frames):
        return nu_from_internal_distances(s[1:], frames.mean(axis=0)[1:], s_range=(3, n / 2)).nu

    blocks = [fit(b) for b in np.array_split(r2, INTERNAL_BLOCKS)]
    out.update(nu_internal=float(fit(r2)), nu_internal_error=float(np.std(blocks, ddof=1) / np.sqrt(INTERNAL_BLOCKS)))
    return out


def _virial(pos, settings):
    """B2 and Psi* of two chains from the point's frames (see :func:`_frame_analysis`)."""
    from ..analysis.virial import compute_second_virial
    from ..runner import build_forcefield

    if pos.shape[0] < 4:
        return {}
    if settings["nonbonded"]["potential"] == "none":
        # no pair potential: two chains never interact, so B2 = 0 exactly; its error is not a sampled
        # quantity, and an error of 0 would weigh the point infinitely in the B2 crossing (left out there)
        return {"b2": 0.0}
    picks = np.unique(np.linspace(0, pos.shape[0] - 1, min(VIRIAL_FRAMES, pos.shape[0])).astype(int))
    v = compute_second_virial(pos[picks], np.zeros(pos.shape[1], dtype=np.int64), build_forcefield(settings),
                              settings["dynamics"]["temperature"], seed=settings["run"]["seed"] % 2 ** 31)
    nan = float("nan")
    return {"b2": v.b2, "b2_error": v.b2_error,
            "psi_star": nan if v.psi_star is None else v.psi_star,
            "psi_star_error": nan if v.psi_star_error is None else v.psi_star_error}


def results_frame(store):
    """Tidy pandas DataFrame of finished points: one row per (N, control, replica)."""
    import pandas as pd

    rows = []
    for p in store.points("done"):
        row = {k: p[k] for k in ("key", "n_beads", "control", "replica", "seed", "folder", "attempts", "host")}
        row.update(json.loads(p["results"]))
        rows.append(row)
    return pd.DataFrame(rows)


def _study_provenance(study, base):
    """Versions, threads, seed and input hash of a study: how to reproduce it or explain a difference.

    Each point's own ``summary.json`` holds the same for the process that ran it (one numba thread per
    point on both backends).
    """
    from ..config import settings_hash
    from ..runner import provenance
    return {**provenance(), "seed": study["seed"], "numba_threads_per_point": 1,
            "study_sha256": settings_hash({"study": study, "base": base})}


def study_identity(study, base):
    """Hash of what makes two studies the same model: the base settings, the control parameter and the seed.

    Base settings left at their schema defaults are not hashed, so that a later
    version which adds an input key or section with defaults still recognises the folder.
    """
    from ..config import non_default_settings, settings_hash

    return settings_hash({"base": non_default_settings(base), "control": study["control"], "seed": study["seed"]})


def run_study(study_path, out=None, *, workers=None, backend="local", cluster=None, progress=True,
              reanalyze=False):
    """Plan, run (or resume) and tabulate a study; return its summary dict.

    Parameters
    ----------
    study_path : path-like
        Study file (TOML).
    out : path-like, optional
        Study folder (default: ``<study name>_study`` beside the current directory).
    workers : int, optional
        Worker processes on this machine (default: all cores).
    backend : str or backend class
        ``"local"`` or ``"dask"`` (see :data:`beadsim.studies.backends.BACKENDS`).
    cluster : str, optional
        Dask only: ``"local:N"`` or a scheduler address ``"tcp://HOST:PORT"``
        (see :func:`beadsim.studies.backends.parse_cluster`).
    progress : bool
        Show a study-level progress bar.
    reanalyze : bool
        Analyse every finished point again from its files (after an analysis upgrade).
    """
    from .backends import make_backend
    from .store import StudyStore

    study, base = read_study(study_path)
    pool = make_backend(backend, workers=workers, cluster=cluster)  # checks the options before the folder exists
    out = Path(out) if out else Path(f"{Path(study_path).stem}_study")
    try:
        (out / POINTS_DIR).mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{out}: cannot create the study folder ({exc.strerror or exc})") from None
    store = StudyStore(out / STORE_FILE)
    try:
        identity = study_identity(study, base)
        known = store.get_meta("identity")
        if known is not None and known != identity:
            raise InputError(f"{out}: the folder holds a study of another model, control or seed; use another "
                             "folder (values, chain lengths and replicas may be added to an existing study)")
        store.set_meta("identity", identity)
        store.set_meta("study", json.dumps(study))
        store.add_points(plan(study, out))
        recovered = store.recover()
        if recovered:
            log.warning("%d point(s) were left running by a stopped sweep; they resume from their checkpoints",
                        recovered)
        started = time.perf_counter()
        _execute(store, study, base, pool, progress)
        if reanalyze:
            _reanalyze(store)
        summary = finalize(store, study, out)
        summary["wall_seconds"] = round(time.perf_counter() - started, 1)
        summary.update(_study_provenance(study, base))
        (out / SUMMARY_FILE).write_text(json.dumps(summary, indent=2, default=_json_default) + "\n")
        return summary
    finally:
        store.close()


def _json_default(value):
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    return str(value)


def _reanalyze(store):
    """Recompute the results of every finished point from its own resolved input, table and trajectory."""
    from ..runner import INPUT_FILE
    for p in store.points("done"):
        folder = Path(p["folder"])
        store.replace_results(p["key"], analyze_point(folder, read_settings(folder / INPUT_FILE)))


def _execute(store, study, base, pool, progress):
    """Run every pending or retryable point on ``pool``, recording each outcome once.

    At most ``pool.slots`` points are handed out at a time, so a point is
    marked running only when a worker can start it, and a worker that dies
    costs an attempt only to the points that were really running. The
    progress bar counts finished points and shows the ETA; its postfix shows
    points running, waiting and failed.
    """
    from tqdm import tqdm

    def runnable():
        return [p for p in store.points() if p["status"] == "pending"
                or (p["status"] == "failed" and p["attempts"] < study["max_attempts"])]

    counts = store.counts()
    bar = tqdm(total=sum(counts.values()), initial=counts["done"], unit="point", disable=not progress,
               desc="beadsim sweep")
    try:
        with pool:
            waiting = runnable()
            while waiting:
                running, broken = {}, False
                while waiting or running:
                    while waiting and len(running) < pool.slots:
                        p = waiting.pop(0)
                        task = {"settings": point_settings(base, study, p), "folder": p["folder"],
                                "target": study["target_relative_error"], "cap": study["max_production_steps"]}
                        store.mark_running(p["key"])
                        running[pool.submit(run_point, task)] = p["key"]
                    bar.set_postfix(running=len(running), waiting=len(waiting), failed=store.counts()["failed"])
                    for fut in pool.wait_any(list(running)):
                        key = running.pop(fut)
                        err = fut.exception()
                        if err is None:
                            result = fut.result()
                            store.mark_done(key, result, host=result.pop("host", None))
                            bar.update(1)
                        else:
                            broken |= isinstance(err, pool.broken_errors)
                            store.mark_failed(key, f"{type(err).__name__}: {err}")
                            log.warning("point %s failed: %s", key, err)
                    if broken:
                        break
                if broken:
                    for fut, key in running.items():  # lost with the pool: not an attempt of theirs
                        store.release(key)
                    pool.restart()
                waiting = runnable()
    except KeyboardInterrupt:
        store.recover()
        raise
    finally:
        bar.close()


def finalize(store, study, out):
    """Write the results table (CSV, Parquet) and the study summary; return the summary dict."""
    frame = results_frame(store)
    counts = store.counts()
    failed = {p["key"]: p["error"] for p in store.points("failed")}
    summary = {"study": study, "points": counts, "failed": failed, "results_csv": str(Path(out) / RESULTS_CSV)}
    if frame.empty:
        summary["note"] = "no point finished"
        return summary
    frame = frame.sort_values(["n_beads", "control", "replica"]).reset_index(drop=True)
    frame.to_csv(Path(out) / RESULTS_CSV, index=False)
    try:
        frame.to_parquet(Path(out) / RESULTS_PARQUET, index=False)
        summary["results_parquet"] = str(Path(out) / RESULTS_PARQUET)
    except ImportError as exc:  # pyarrow is a dependency; a broken install still leaves the CSV
        summary["results_parquet"] = f"not written ({exc})"
    summary.update(estimate_everything(frame, study["control"], Path(out) / FIGURES_DIR, seed=study["seed"],
                                       curves_csv=Path(out) / sweep_mbar.CURVES_CSV))
    return {"verdict": summary.pop("verdict"), **summary}


#: Finite-N estimators extrapolated to N -> infinity (each gives a value per chain length or per pair).
EXTRAPOLATED = ("crossing of", "nu_eff(internal)", "<Re^2>/<Rg^2>", "B2 = 0")


def estimate_everything(frame, control_kind, figures, seed=0, curves_csv=None):
    """Theta estimators side by side, their N -> infinity extrapolation, the transition, and the figures.

    Each finite-N estimator in :data:`EXTRAPOLATED` is fitted against ``N^(-1/2)``
    (:func:`beadsim.studies.extrapolation.extrapolate_estimate`); the quoted theta combines the
    extrapolated values (:func:`beadsim.studies.extrapolation.combine`, statistical error bounded
    for estimators from the same runs, systematic error from their spread). In temperature sweeps
    the points of each chain length are also combined by MBAR (:mod:`beadsim.studies.sweep_mbar`).

    Parameters
    ----------
    frame : pandas.DataFrame
        Tidy results (:func:`results_frame`).
    control_kind : {"temperature", "depth"}
    figures : path-like
        Folder for the PNG and SVG figures.
    seed : int
        Seed of the bootstrap estimators.
    curves_csv : path-like, optional
        Where to write the MBAR curves (:func:`beadsim.studies.sweep_mbar.curves_table`).

    Returns
    -------
    dict
        ``verdict`` (:func:`verdict`), ``theta`` (finite-N estimate dicts), ``theta_extrapolated``
        (extrapolation dicts), ``theta_combined`` (the quoted value, when there is one),
        ``collapse`` (lines of text), ``collapse_fits`` (estimate dicts), ``regime_figures``,
        ``mbar`` and ``figures``.
    """
    from . import collapse, figures as fig
    from .exponents import size_exponents
    from .extrapolation import combine, extrapolate_estimate
    from .theta import summarize_theta

    figures = Path(figures)
    figures.mkdir(parents=True, exist_ok=True)
    estimates = summarize_theta(frame, control_kind, seed=seed)
    extrapolations = [extrapolate_estimate(e) for e in estimates if e.method.startswith(EXTRAPOLATED)]
    forms = [form_error(e, x) for e, x in zip((e for e in estimates if e.method.startswith(EXTRAPOLATED)),
                                               extrapolations)]
    combined = combine([(x.method, x.value, None if x.error is None or f is None else float(np.hypot(x.error, f)))
                        for x, f in zip(extrapolations, forms)], same_data=True)
    out = {"theta": [e.as_dict() for e in estimates],
           "theta_extrapolated": [{**x.as_dict(), "form_error": f} for x, f in zip(extrapolations, forms)],
           "figures": str(figures), "collapse": [], "collapse_fits": []}
    if combined.value is not None:
        out["theta_combined"] = {
            "value": combined.value, "error": combined.total_error,
            "statistical_error": combined.statistical_error, "systematic_error": combined.systematic_error,
            "how": f"N -> infinity extrapolation of {len(combined.estimators)} estimator(s), combined",
            "agreeing": list(combined.agreeing), "disagreeing": list(combined.disagreeing),
            "note": "; ".join(combined.notes)}
    crossing = next((e for e in estimates if e.method.startswith("crossing") and "Rg" in e.method), None)
    nu = next((e for e in estimates if e.method.startswith("nu_eff")), None)
    fig.size_crossing_figure(frame, control_kind, figures / "size_crossing", estimate=crossing)
    fig.nu_eff_figure(frame, control_kind, figures / "nu_eff", estimate=nu)
    fig.extrapolation_figure(extrapolations, combined, control_kind, figures / "theta_extrapolation")
    fig.second_virial_figure(frame, control_kind, figures / "second_virial")
    quoted = (None if combined.value is None
              else Estimate("quoted theta (N -> infinity)", combined.value, combined.total_error, ""))
    if quoted is not None:
        fig.collapse_figure(frame, control_kind, quoted.value, figures / "scaling_collapse")
    measured = np.isfinite(frame["rg2"]) & np.isfinite(frame["rg2_error"])
    controls = sorted(frame.loc[measured, "control"].unique())
    if controls:
        picks = sorted({controls[0], controls[len(controls) // 2], controls[-1]})
        fig.size_scaling_figure(frame, control_kind, picks, figures / "size_scaling")
    sigmoids = collapse.transition_sigmoids(frame, control_kind)
    combined_mbar = sweep_mbar.sweep_curves(frame, seed=seed) if control_kind == "temperature" else []
    fig.sigmoid_figure(frame, control_kind, sigmoids, figures / "transition",
                       mbar={r.n_beads: r.curves for r in combined_mbar if r.curves is not None})
    out["mbar"] = _mbar_outputs(frame, combined_mbar, figures, curves_csv, control_kind)
    out["regime_figures"] = _regime_figures(frame, control_kind, figures, quoted)
    exponents = size_exponents(frame, control_kind)
    fits = (exponents + sigmoids + [r.peak for r in combined_mbar]
            + collapse.heat_capacity_peaks(frame, control_kind)
            + collapse.globule_scaling(frame, control_kind) + collapse.globule_extrapolation(frame, control_kind))
    for e in fits:
        text = "-" if e.value is None else (f"{e.value:.4g} +- {e.error:.2g}" if e.error is not None
                                            else f"{e.value:.4g}")
        out["collapse"].append(f"{e.method} ({e.fitted_on}): {text}" + (f"  [{'; '.join(e.notes)}]" if e.notes else ""))
        out["collapse_fits"].append(e.as_dict())
    out["verdict"] = verdict(frame, control_kind, combined, out["theta_extrapolated"], sigmoids, exponents)
    return out


#: Correction exponent of the alternative extrapolation whose difference from the N^(-1/2) one is the
#: form error (:func:`form_error`).
ALTERNATIVE_EXPONENT = 1.0


def form_error(estimate, extrapolation):
    """Uncertainty of an extrapolation from the form of its finite-size correction.

    The leading correction of theta-point estimates is of order N^(-1/2) in mean-field theory
    (Grassberger and Hegger 1995 [memory]), but with logarithmic three-body terms and the next
    corrections the accessible chain lengths do not pin the form down. The same finite-N values are
    therefore also fitted with a N^(-1) correction (:data:`ALTERNATIVE_EXPONENT`), and the difference of
    the two limits is taken as a systematic error of the extrapolation (common practice: vary the
    fitted form). It is added in quadrature to the fit's error before the estimators are combined.

    Parameters
    ----------
    estimate : Estimate
        Finite-N estimator with per-pair or per-length values.
    extrapolation : beadsim.studies.extrapolation.Extrapolation
        Its N^(-1/2) extrapolation.

    Returns
    -------
    float or None
        ``|theta(x = 1/2) - theta(x = 1)|`` (control units), None when either has no value.
    """
    from .extrapolation import extrapolate_estimate

    if extrapolation.value is None:
        return None
    other = extrapolate_estimate(estimate, exponent=ALTERNATIVE_EXPONENT)
    return None if other.value is None else abs(extrapolation.value - other.value)


def _undetermined(reason):
    return {"value": None, "error": None, "reason": f"not determined: {reason}"}


def verdict(frame, control_kind, combined, extrapolations, sigmoids, exponents):
    """The answer of a study in a few numbers, each with its error or "not determined: <reason>".

    Parameters
    ----------
    frame : pandas.DataFrame
        Tidy results.
    control_kind : {"temperature", "depth"}
    combined : beadsim.studies.extrapolation.CombinedEstimate
        The quoted theta.
    extrapolations : sequence of dict
        What it combines: :meth:`beadsim.studies.extrapolation.Extrapolation.as_dict` with ``form_error``.
    sigmoids : sequence of Estimate
        Logistic midpoints per N (:func:`beadsim.studies.collapse.transition_sigmoids`).
    exponents : sequence of Estimate
        Size exponents per control value (:func:`beadsim.studies.exponents.size_exponents`).

    Returns
    -------
    dict
        ``theta``, ``coil_globule_midpoint`` (longest chain), ``nu_good_side`` (best solvent sampled)
        and ``nu_poor_side`` (poorest solvent sampled); each ``{"value", "error", ...}`` or with
        ``value`` None and a ``reason``.
    """
    lengths = sorted(int(n) for n in frame.loc[np.isfinite(frame["rg2"]), "n_beads"].unique())
    out = {}
    if combined.value is None:
        reasons = sorted({n for x in extrapolations for n in x["note"].split("; ") if n})
        out["theta"] = _undetermined("; ".join(reasons) or "no estimator gave a finite-N value")
    else:
        used = [x for x in extrapolations if x["value"] is not None]
        out["theta"] = {
            "value": combined.value, "error": combined.total_error,
            "statistical_error": combined.statistical_error, "systematic_error": combined.systematic_error,
            "method": "each estimator's finite-N values fitted to theta + a N^(-1/2) (Grassberger and Hegger "
                      "1995), with the change under a N^(-1) fit as its form error; the fits combined by "
                      "inverse-variance weights; error = statistical (fit and form, bounded for estimators of the "
                      "same runs) and the spread between estimators, in quadrature",
            "estimators": [f"{x['method']}: {x['value']:.4g} +- {x['error']:.2g} (fit)" + (
                f" +- {x['form_error']:.2g} (form)" if x["form_error"] is not None else "") + (
                f", chi2/dof {x['chi2_per_dof']:.2g}" if x["chi2_per_dof"] is not None else ", 2 points: exact line")
                for x in used],
            "agree_within_errors": list(combined.agreeing), "disagree": list(combined.disagreeing),
            "chain_lengths": lengths}
    n_max = max(lengths) if lengths else None
    mid = next((e for e in sigmoids if e.method.endswith(f"N = {n_max}")), None)
    if mid is None:
        out["coil_globule_midpoint"] = _undetermined("no chain length with a logistic fit")
    elif mid.value is None:
        reason = "; ".join(mid.notes)
        out["coil_globule_midpoint"] = {"value": None, "error": None, "n_beads": n_max,
                                        "reason": reason if "not determined:" in reason else f"not determined: {reason}"}
    else:
        out["coil_globule_midpoint"] = {"value": mid.value, "error": mid.error, "n_beads": n_max,
                                        "width_10_90": 2 * np.log(9.0) * mid.details["width"]}
    plain = [e for e in exponents if e.method.startswith("nu from Rg vs N")]
    for side, pick in (("nu_good_side", -1), ("nu_poor_side", 0)):
        if not plain:
            out[side] = _undetermined("needs two or more chain lengths at one control value")
            continue
        ordered = sorted(plain, key=lambda e: e.details["control"])
        e = ordered[pick] if control_kind == "temperature" else ordered[-1 - pick]
        if e.value is None or e.error is None or not 0.0 <= e.value <= 1.0:
            out[side] = _undetermined(f"the fit at control {e.details['control']:g} gives "
                                      f"{e.value if e.value is None else f'{e.value:.3g}'}, outside [0, 1]")
        else:
            out[side] = {"value": e.value, "error": e.error, "control": e.details["control"], "where": e.fitted_on,
                         "note": "effective exponent over the sampled chain lengths (finite-N value)"}
    return out


def _mbar_outputs(frame, combined, figures, curves_csv, control_kind):
    """Per-N MBAR figures and the curves file; the summary's ``mbar`` entry."""
    from . import figures as fig

    if control_kind != "temperature":
        return {"note": "MBAR curves are made for temperature sweeps only (an attraction-depth sweep changes "
                        "the potential itself)"}
    per_n = []
    for r in combined:
        entry = {"n_beads": r.n_beads, "note": "; ".join(r.peak.notes)}
        if r.curves is not None:
            entry.update(overlap_gap=r.curves.overlap, sampled_temperatures=r.curves.sampled.tolist(),
                         neighbour_overlap=r.curves.neighbour_overlap.tolist(),
                         samples=r.curves.pooled.counts.tolist(),
                         figures=fig.reweighted_figure(r.curves, Path(figures) / f"mbar_n{r.n_beads}",
                                                       rungs=sweep_mbar.point_averages(frame, r.n_beads),
                                                       peak=r.peak, points_label="point averages"))
        per_n.append(entry)
    out = {"chain_lengths": per_n}
    table = sweep_mbar.curves_table(combined)
    if curves_csv is not None and not table.empty:
        table.to_csv(curves_csv, index=False)
        out["curves_csv"] = str(curves_csv)
    elif table.empty:
        out["note"] = "no chain length could be combined (see chain_lengths)"
    return out


def _regime_figures(frame, control_kind, figures, theta):
    """Kratky curves across the transition and chain snapshots per regime, for the longest N.

    Reads each point's :data:`POINT_FORM_FACTOR` and the last saved frame of its
    trajectory; points whose folders lack them (moved study, older results) are
    left out. Returns notes saying what was drawn or why not.
    """
    import mdtraj
    import pandas as pd

    from ..runner import INPUT_FILE
    from . import figures as fig

    n_max = int(frame["n_beads"].max())
    rows = frame[(frame["n_beads"] == n_max) & np.isfinite(frame["rg2"])]
    curves, notes = [], []
    for control, group in rows.groupby("control"):
        tables = [pd.read_csv(Path(f) / POINT_FORM_FACTOR) for f in group["folder"]
                  if (Path(f) / POINT_FORM_FACTOR).exists()]
        if tables:
            curves.append((float(control), tables[0]["q"].to_numpy(),
                           np.mean([t["p"].to_numpy() for t in tables], axis=0), float(group["rg2"].mean())))
    if curves:
        fig.kratky_figure(curves, control_kind, figures / "kratky", n_max)
        notes.append(f"kratky: N = {n_max}, {len(curves)} control values")
    else:
        notes.append(f"kratky: skipped, no {POINT_FORM_FACTOR} in the N = {n_max} point folders (run --reanalyze)")

    controls = sorted(rows["control"].unique())
    if not controls:
        return notes
    middle = (controls[len(controls) // 2] if theta is None
              else min(controls, key=lambda c: abs(c - theta.value)))
    picks = sorted({controls[0], middle, controls[-1]}, reverse=control_kind == "temperature")
    conformations, labels = [], []
    for control in picks:
        for folder in rows.loc[rows["control"] == control, "folder"]:
            folder = Path(folder)
            if not (folder / INPUT_FILE).exists():
                continue
            settings = read_settings(folder / INPUT_FILE)
            path = folder / settings["output"]["trajectory"]
            if path.exists():
                last = mdtraj.load(str(path))[-1]
                conformations.append(last.xyz[0].astype(np.float64) / settings["output"]["length_scale_nm"])
                labels.append(f"{'T' if control_kind == 'temperature' else 'depth'} = {control:g}"
                              f"{_regime_label(control, theta, control_kind)}")
                break
    if conformations:
        fig.snapshots_figure(conformations, labels, figures / "snapshots")
        notes.append(f"snapshots: N = {n_max}, last saved frame at {', '.join(labels)}")
    else:
        notes.append(f"snapshots: skipped, no readable trajectory in the N = {n_max} point folders")
    return notes


def _regime_label(control, theta, control_kind):
    """'(good-solvent side)', '(near theta)' or '(poor-solvent side)' relative to an estimate, or ''."""
    if theta is None or theta.value is None:
        return ""
    margin = theta.error if theta.error else 0.0
    if abs(control - theta.value) <= margin:
        return " (near theta)"
    better = (control > theta.value) == (control_kind == "temperature")
    return " (good-solvent side)" if better else " (poor-solvent side)"
