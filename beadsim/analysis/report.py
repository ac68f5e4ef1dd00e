"""One call from a trajectory file to the standard set of results, tables and figures.

:func:`analyze_file` loads a trajectory, finds the chains, computes sizes,
shapes, internal distances, bonds, form factor and dynamics, attaches error
bars from :func:`beadsim.analysis.stats.summarize`, writes CSV and JSON tables
and figures into an output directory and returns a JSON-ready summary.
:func:`format_table` renders that summary as plain text. A quantity that cannot
be computed for this trajectory (too short, branched chains, no time stamps)
is listed under ``"skipped"`` with the reason instead of failing the whole run.

Output files (in ``out_dir``): ``summary.json``, ``series.csv`` (per-frame chain
averages), ``internal_distances.csv``, ``form_factor.csv``, ``bonds.csv``,
``dynamics.csv``, for periodic trajectories ``structure_factor.csv``, and figures
``rg_series``, ``form_factor``, ``kratky``, ``internal_distances``,
``bond_lengths`` and ``structure_factor`` (``.png`` or ``.svg``).
"""

import json
import logging
import math
import numbers
import os

import numpy as np
import pandas as pd

from .. import plots
from .._validate import positive_int
from ..config import load_toml
from ..engine.hybrid import DYNAMICS_CAUTION
from ..errors import AnalysisError, InputError
from . import bonds, dynamics, internal, scaling, scattering, size, stats
from .trajectory import find_chains, is_periodic, load_trajectory, trajectory_positions

logger = logging.getLogger(__name__)

MAX_PAIR_FRAMES = 100
"""Frames (evenly spaced over the equilibrated part) used for the O(N^2) quantities R_h and P(q)."""

MAX_STRUCTURE_FRAMES = 20
"""Frames (evenly spaced over the equilibrated part) used for S(q) of a periodic system."""

MAX_LATTICE_INDEX = 14
"""S(q) uses reciprocal lattice vectors 2 pi n / L with |n| up to this (about 5,700 vectors)."""


def _finite(value):
    return None if value is None or not math.isfinite(value) else float(value)


def _series_summary(series, t0=None):
    """``summarize`` of a per-frame series as a JSON-ready dict.

    With ``t0`` the equilibration start found for Rg is imposed instead of detected.
    """
    result = stats.summarize(series if t0 is None else series[t0:], detect=t0 is None).as_dict()
    if t0 is not None:
        result["equilibration_index"] = t0
        result["n_samples"] = int(series.size)
    return {k: (_finite(v) if isinstance(v, float) else v) for k, v in result.items()}


def _note(value, unit, n_samples, t0, reason):
    """A quantity without an error bar, in the same layout as a summarize dict."""
    return {"mean": value, "error": None, "n_samples": n_samples, "equilibration_index": t0,
            "statistical_inefficiency": None, "n_independent": None, "blocking_error": None,
            "reason": reason, "unit": unit}


def _pick_frames(t0, n_frames, limit):
    return np.unique(np.linspace(t0, n_frames - 1, min(limit, n_frames - t0)).astype(int))


def analyze_file(traj_path, top_path=None, out_dir="analysis_output", frames=None, length_scale=None,
                 figure_format="png", n_q=60):
    """Analyse a trajectory file and write tables and figures.

    Parameters
    ----------
    traj_path : str or os.PathLike
        Trajectory readable by mdtraj (beadsim writes ``.h5`` with bonds).
    top_path : str or os.PathLike, optional
        Topology for formats that store none (``.xtc``, ``.dcd``).
    out_dir : str or os.PathLike
        Directory for the outputs (created if missing).
    frames : (int or None, int or None), optional
        Half-open frame range to analyse.
    length_scale : float, optional
        nm per sigma; results in sigma if given, else in nm.
    figure_format : {"png", "svg"}
        Figure file type.
    n_q : int
        Number of q values (log-spaced from 0.2/Rg to 10/<b>) for P(q).

    Returns
    -------
    dict
        JSON-ready summary: ``file``, ``topology``, ``n_frames``, ``n_chains``,
        ``chain_lengths``, ``length_unit``, ``quantities`` (name -> summarize dict
        with ``mean``, ``error``, ``n_independent``, ``equilibration_index``,
        ``reason``, ``unit``), ``fits`` (scaling and relaxation results),
        ``skipped`` (name -> reason) and ``outputs`` (paths written).

    Raises
    ------
    AnalysisError
        The file cannot be read or holds no chains (message names the file).
    """
    if figure_format not in ("png", "svg"):
        raise InputError(f"figure_format: expected 'png' or 'svg', got {figure_format!r}")
    n_q = positive_int(n_q, "n_q")
    traj = load_trajectory(traj_path, top_path, frames)
    out_dir = os.fspath(out_dir)
    os.makedirs(out_dir, exist_ok=True)
    unit = "nm" if length_scale is None else "sigma"
    skipped, fits, outputs, quantities = {}, {}, [], {}

    def out(name):
        path = os.path.join(out_dir, name)
        outputs.append(path)
        return path

    try:
        chains = find_chains(traj.topology)
        linear = True
    except AnalysisError as exc:
        if "not linear" not in str(exc):
            raise AnalysisError(f"{os.fspath(traj_path)}: {exc}") from None
        chains = find_chains(traj.topology, require_linear=False)
        linear = False
        for name in ("end_to_end", "internal_distances", "bonds", "re_autocorrelation"):
            skipped[name] = "chains are branched or cyclic"
    x = trajectory_positions(traj, length_scale)
    n_frames = x.shape[0]
    times = np.asarray(traj.time, dtype=np.float64)

    rg = size.radius_of_gyration(x, chains)
    shape = size.shape_descriptors(x, chains)
    rg2_frame = np.mean(rg ** 2, axis=1)
    rg_summary = _series_summary(rg2_frame)
    t0 = rg_summary["equilibration_index"]
    quantities["rg_squared"] = {**rg_summary, "unit": f"{unit}^2"}
    quantities["asphericity"] = {**_series_summary(shape.asphericity.mean(axis=1), t0=t0), "unit": f"{unit}^2"}
    quantities["relative_shape_anisotropy"] = {**_series_summary(shape.anisotropy.mean(axis=1), t0=t0), "unit": "1"}
    series = {"frame": np.arange(n_frames), "time": times, "rg_mean": rg.mean(axis=1),
              "rg_squared_mean": rg2_frame, "asphericity_mean": shape.asphericity.mean(axis=1),
              "anisotropy_mean": shape.anisotropy.mean(axis=1)}

    pair_frames = _pick_frames(t0, n_frames, MAX_PAIR_FRAMES)
    inverse_rh = 1.0 / size.hydrodynamic_radius(x[pair_frames], chains)
    rh_mean_inverse = float(np.mean(inverse_rh))
    quantities["hydrodynamic_radius"] = _note(
        1.0 / rh_mean_inverse, unit, int(pair_frames.size), t0,
        f"1 / mean(1/R_h) over {pair_frames.size} frames; frames correlated, no error given")

    if linear:
        re2_frame = np.mean(size.end_to_end_distance(x, chains) ** 2, axis=1)
        series["re_squared_mean"] = re2_frame
        quantities["re_squared"] = {**_series_summary(re2_frame, t0=t0), "unit": f"{unit}^2"}
        ratio = float(np.mean(re2_frame[t0:]) / np.mean(rg2_frame[t0:]))
        quantities["re2_over_rg2"] = _note(ratio, "1", n_frames, t0, "ratio of means; 6 N/(N+1) for ideal chains")
        r2 = internal.internal_distances(x[t0:], chains).mean(axis=0)
        s = np.arange(1, r2.size)
        nu_eff = internal.effective_exponent(s, r2[1:]) if s.size >= 2 else np.full(s.size, np.nan)
        pd.DataFrame({"s": s, "r2": r2[1:], "nu_effective": nu_eff}).to_csv(out("internal_distances.csv"), index=False)
        if s.size >= 2:
            plots.internal_distances(s, r2[1:], out(f"internal_distances.{figure_format}"), unit=unit)
        window = (max(2.0, r2.size / 10.0), r2.size / 2.0)
        try:
            fit = scaling.nu_from_internal_distances(s, r2[1:], s_range=window)
            fits["nu_internal_distances"] = {"nu": fit.nu, "error": fit.nu_error, "s_min": fit.x_min,
                                             "s_max": fit.x_max, "note": "fit error ignores correlations in s"}
        except AnalysisError as exc:
            skipped["nu_internal_distances"] = str(exc)

        mean_bond = _bonds(x[t0:], chains, t0, quantities, fits, skipped, out, unit, figure_format)
    else:
        pairs = np.array([(a.index, b.index) for a, b in traj.topology.bonds])
        mean_bond = float(np.mean(np.linalg.norm(x[t0:, pairs[:, 1]] - x[t0:, pairs[:, 0]], axis=-1)))

    pd.DataFrame(series).to_csv(out("series.csv"), index=False)
    plots.time_series(times, np.sqrt(rg2_frame), out(f"rg_series.{figure_format}"), t0,
                      label=r"$\sqrt{\langle R_g^2 \rangle}$", unit=unit)

    rg_rms = math.sqrt(rg_summary["mean"])
    q = np.geomspace(0.2 / rg_rms, 10.0 / mean_bond, n_q)
    p = scattering.form_factor(x[pair_frames], chains, q)
    pd.DataFrame({"q": q, "p": p, "debye": scattering.debye_function((q * rg_rms) ** 2)}).to_csv(
        out("form_factor.csv"), index=False)
    plots.form_factor(q, p, out(f"form_factor.{figure_format}"), rg=rg_rms, unit=unit)
    plots.kratky(q, p, rg_rms, out(f"kratky.{figure_format}"))
    try:
        guinier = scattering.guinier_rg(q, p)
        fits["guinier_rg"] = {"rg": guinier.rg, "error": guinier.rg_error, "q_min": guinier.q_min,
                              "q_max": guinier.q_max, "unit": unit}
    except AnalysisError as exc:
        skipped["guinier_rg"] = str(exc)
    try:
        fit = scaling.nu_from_form_factor(q, p, (3.0 / rg_rms, 1.0 / mean_bond))
        fits["nu_form_factor"] = {"nu": fit.nu, "error": fit.nu_error, "q_min": fit.x_min, "q_max": fit.x_max}
    except AnalysisError as exc:
        skipped["nu_form_factor"] = f"{exc} (window 3/Rg..1/<b> too narrow for these chains)"

    if _from_hybrid_run(traj_path):
        skipped["dynamics"] = f"not computed: {DYNAMICS_CAUTION}"
    else:
        _dynamics(x[t0:], times[t0:], chains, linear, fits, skipped, out, unit)
    _structure_factor(traj, x, t0, mean_bond, length_scale, skipped, out, unit, figure_format)

    summary = {"file": os.fspath(traj_path), "topology": None if top_path is None else os.fspath(top_path),
               "n_frames": n_frames, "n_chains": len(chains), "chain_lengths": sorted({int(c.size) for c in chains}),
               "length_unit": unit, "quantities": quantities, "fits": fits, "skipped": skipped,
               "outputs": outputs + [os.path.join(out_dir, "summary.json")]}
    with open(os.path.join(out_dir, "summary.json"), "w", encoding="utf-8") as handle:
        json.dump(summary, handle, indent=2)
    logger.info("analysis of %s written to %s", traj_path, out_dir)
    return summary


def _bonds(x, chains, t0, quantities, fits, skipped, out, unit, figure_format):
    """Bond-length and angle distributions and persistence length (into the dicts); returns the mean bond length."""
    lengths = bonds.bond_lengths(x, chains)
    mean_bond = float(lengths.mean())
    centres, density = bonds.distribution(lengths, bins=80)
    table = {"bond_length": centres, "bond_length_density": density}
    if min(c.size for c in chains) >= 3:
        table["angle_rad"], table["angle_density"] = bonds.distribution(bonds.bond_angles(x, chains), bins=80,
                                                                        value_range=(0.0, np.pi))
    pd.DataFrame(table).to_csv(out("bonds.csv"), index=False)
    plots.histogram(centres, density, out(f"bond_lengths.{figure_format}"), f"bond length [{unit}]")
    quantities["bond_length"] = _note(mean_bond, unit, int(lengths.size), t0, "distribution mean; see bonds.csv")
    try:
        lp = bonds.persistence_length(bonds.bond_correlation(x, chains), mean_bond)
        fits["persistence_length"] = {"value": lp.length, "error": _finite(lp.error), "s_max": lp.s_max,
                                      "unit": unit}
    except AnalysisError as exc:
        skipped["persistence_length"] = str(exc)
    return mean_bond


def _from_hybrid_run(traj_path):
    """True if the trajectory lies in a ``beadsim run`` folder whose input asks for hybrid sampling."""
    resolved = os.path.join(os.path.dirname(os.path.abspath(traj_path)), "input.toml")
    if not os.path.exists(resolved):
        return False
    try:
        return load_toml(resolved).get("sampling", {}).get("method") == "hybrid"
    except InputError:
        return False


def _dynamics(x, times, chains, linear, fits, skipped, out, unit):
    """MSD, diffusion coefficient and end-to-end relaxation of the equilibrated frames (into ``fits``)."""
    steps = np.diff(times)
    if times.size < 8 or not np.all(steps > 0) or not np.allclose(steps, steps[0], rtol=1e-4):
        skipped["dynamics"] = "needs eight or more frames with equally spaced, increasing times"
        return
    lag = times - times[0]
    com = dynamics.center_of_mass_msd(x, chains)
    inner = dynamics.inner_bead_msd(x, chains)
    table = {"lag_time": lag, "msd_center_of_mass": com.mean(axis=1), "msd_inner_beads": inner.mean(axis=1)}
    try:
        d = dynamics.diffusion_coefficient(lag, com)
        fits["diffusion_coefficient"] = {"value": d.coefficient, "error": d.error, "t_min": d.t_min,
                                         "t_max": d.t_max, "unit": f"{unit}^2 per time unit"}
    except AnalysisError as exc:
        skipped["diffusion_coefficient"] = str(exc)
    if linear:
        acf = dynamics.vector_autocorrelation(size.end_to_end_vector(x, chains))
        table["re_autocorrelation"] = acf
        tau = dynamics.relaxation_time(acf, float(steps[0]))
        fits["re_relaxation_time"] = {"integrated": tau.integrated, "e_fold": tau.e_fold,
                                      "converged": tau.converged}
    pd.DataFrame(table).to_csv(out("dynamics.csv"), index=False)


def _structure_factor(traj, x, t0, mean_bond, length_scale, skipped, out, unit, figure_format):
    """Total S(q) of a periodic, orthorhombic trajectory on the reciprocal lattice, up to 10/<b>.

    The range is capped at ``MAX_LATTICE_INDEX`` lattice shells so that large boxes
    stay cheap; the table says where it stops.
    """
    if not is_periodic(traj):
        skipped["structure_factor"] = "open system (no unit cell): S(q) needs a periodic box"
        return
    if not np.allclose(traj.unitcell_angles, 90.0):
        skipped["structure_factor"] = "box is not orthorhombic"
        return
    scale = 1.0 if length_scale is None else length_scale
    frames = _pick_frames(t0, x.shape[0], MAX_STRUCTURE_FRAMES)
    box = np.asarray(traj.unitcell_lengths[frames], dtype=np.float64) / scale
    q_max = min(10.0 / mean_bond, 2.0 * np.pi * MAX_LATTICE_INDEX / float(box.max()))
    sq = scattering.structure_factor(x[frames], box, q_max)
    pd.DataFrame({"q": sq.q, "s": sq.s, "n_vectors": sq.n_vectors}).to_csv(out("structure_factor.csv"), index=False)
    plots.structure_factor(sq.q, sq.s, out(f"structure_factor.{figure_format}"), unit=unit)


def _fmt(value):
    return "-" if value is None else f"{value:.5g}"


_SUMMARY_KEYS = ("file", "n_frames", "n_chains", "chain_lengths", "length_unit", "quantities", "fits", "skipped")
_QUANTITY_KEYS = ("mean", "error", "n_independent", "unit")


def _check_summary(summary):
    """Raise InputError unless ``summary`` has the layout :func:`analyze_file` returns."""
    origin = "expected the dict returned by analyze_file (or read back from summary.json)"
    if not isinstance(summary, dict):
        raise InputError(f"summary: {origin}, got {type(summary).__name__}")
    missing = [key for key in _SUMMARY_KEYS if key not in summary]
    if missing:
        raise InputError(f"summary: missing key(s) {', '.join(missing)}; {origin}")
    for key in ("quantities", "fits", "skipped"):
        if not isinstance(summary[key], dict):
            raise InputError(f"summary['{key}']: expected a dict, got {type(summary[key]).__name__}")
    if not isinstance(summary["chain_lengths"], (list, tuple)):
        raise InputError(f"summary['chain_lengths']: expected a list, got {type(summary['chain_lengths']).__name__}")
    for name, quantity in summary["quantities"].items():
        if not (isinstance(name, str) and isinstance(quantity, dict) and all(k in quantity for k in _QUANTITY_KEYS)):
            raise InputError(f"summary['quantities'][{name!r}]: expected a name (str) mapped to a dict with keys "
                             f"{', '.join(_QUANTITY_KEYS)}")
        for key in ("mean", "error", "n_independent"):
            value = quantity[key]
            if value is not None and not isinstance(value, numbers.Real):
                raise InputError(f"summary['quantities'][{name!r}][{key!r}]: expected a number or None, "
                                 f"got {value!r}")
    for name, fit in summary["fits"].items():
        if not isinstance(fit, dict):
            raise InputError(f"summary['fits'][{name!r}]: expected a dict, got {type(fit).__name__}")


def format_table(summary):
    """Plain-text table of an :func:`analyze_file` summary.

    Parameters
    ----------
    summary : dict
        As returned by :func:`analyze_file` (or read back from ``summary.json``).

    Returns
    -------
    str
        One line per quantity (mean, standard error, independent samples, unit),
        then fits and skipped quantities with their reasons.

    Raises
    ------
    InputError
        ``summary`` lacks a key or holds a value of another type than
        :func:`analyze_file` writes; the message names the key.
    """
    _check_summary(summary)
    lines = [f"{summary['file']}: {summary['n_frames']} frames, {summary['n_chains']} chains "
             f"of {', '.join(map(str, summary['chain_lengths']))} beads; lengths in {summary['length_unit']}",
             "",
             f"{'quantity':<28}{'mean':>12}{'std error':>12}{'independent':>13}  unit"]
    notes = []
    for name, q in summary["quantities"].items():
        lines.append(f"{name:<28}{_fmt(q['mean']):>12}{_fmt(q['error']):>12}"
                     f"{_fmt(q['n_independent']):>13}  {q['unit']}")
        if q["error"] is None and q.get("reason"):
            notes.append(f"  {name}: {q['reason']}")
    if summary["fits"]:
        lines += ["", "fits:"]
        for name, fit in summary["fits"].items():
            lines.append(f"  {name}: " + ", ".join(f"{k} = {_fmt(v) if isinstance(v, float) else v}"
                                                   for k, v in fit.items()))
    if notes:
        lines += ["", "no error bar:"] + notes
    if summary["skipped"]:
        lines += ["", "skipped:"] + [f"  {k}: {v}" for k, v in summary["skipped"].items()]
    return "\n".join(lines)
