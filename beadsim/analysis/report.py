"""One call from a trajectory file to the standard set of results, tables and figures, each with its error.

:func:`measure` computes every number from positions in memory; :func:`analyze_file` loads a
trajectory, calls it, and writes CSV and JSON tables and figures into an output directory;
:func:`format_table` renders the summary as plain text.

Errors
------
Every reported number carries an error from a method that accounts for its correlations, or an
explicit reason why it has none:

* means of per-frame series (Rg^2, Re^2, shape, bond length): the statistical inefficiency of the
  series after the equilibration detected in Rg^2 (:func:`beadsim.analysis.stats.summarize`);
* everything computed from averages over frames, including fits over s or q and ratios of means
  (Re^2/Rg^2, R_h, nu from internal distances or the form factor, the Guinier Rg, the persistence
  length, P(q) and S(q) at each q): the delete-one-block jackknife over contiguous blocks of at least
  four statistical inefficiencies of Rg^2 (:func:`beadsim.analysis.stats.block_jackknife`). A block of
  frames refitted as a whole carries the correlations between separations or scattering vectors of
  one frame, which a least-squares error treating the points as independent does not;
* the diffusion coefficient: batch means over time segments of ten relaxation times, refused when
  the frames are further apart than the relaxation time
  (:func:`beadsim.analysis.dynamics.diffusion_by_segments`);
* the integrated relaxation time: Madras and Sokal's window formula.

A quantity that cannot be computed for this trajectory (too short, branched chains, no time
stamps, no stiffness) is listed under ``"skipped"`` with the reason instead of failing the run.

Output files (in ``out_dir``): ``summary.json``, ``series.csv`` (per-frame chain averages),
``internal_distances.csv``, ``form_factor.csv``, ``bonds.csv``, ``dynamics.csv``, for periodic
trajectories ``structure_factor.csv``, and figures ``rg_series``, ``form_factor``, ``kratky``,
``internal_distances``, ``bond_lengths`` and ``structure_factor`` (``.png`` or ``.svg``).
"""

import json
import logging
import math
import numbers
import os

import numpy as np
import pandas as pd

from .. import plots
from .._validate import as_array, interval, positive_int
from ..config import load_toml
from ..engine.hybrid import DYNAMICS_CAUTION
from ..errors import AnalysisError, InputError
from . import bonds, dynamics, internal, scaling, scattering, size, stats
from .trajectory import find_chains, is_periodic, load_trajectory, trajectory_positions

logger = logging.getLogger(__name__)

DEFAULT_STRUCTURE_FRAMES = 200
"""Frames (evenly spaced over the blocks) used for S(q) of a periodic system unless the caller says otherwise."""

MAX_LATTICE_INDEX = 14
"""S(q) uses reciprocal lattice vectors 2 pi n / L with |n| up to this (about 5,700 vectors)."""

NU_FORM_FACTOR_SPAN = 2.0
"""Least ratio q_max / q_min of the window 3/Rg .. 1/<b> for a fit of P(q) ~ q^(-1/nu) (common practice:
a power law is not read off less than a factor of two)."""

JACKKNIFE = "delete-one-block jackknife over {blocks} blocks of {length} frames (>= 4 g of Rg^2)"


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


def _slowest_inefficiency(*series):
    """Largest statistical inefficiency of the series, frames: for each the larger of its autocorrelation and
    blocking estimates (:func:`~beadsim.analysis.stats.inefficiency_estimate`), so that blocks err long."""
    return max([stats.inefficiency_estimate(x).value for x in series
                if x.size >= stats.MIN_SAMPLES and not stats.is_constant(x)], default=1.0)


class _Blocks:
    """Blocks of equilibrated frames and the jackknife over them; ``reason`` when there are too few."""

    def __init__(self, t0, n_frames, g, pair_frames):
        plan = stats.plan_blocks(n_frames - t0, g)
        self.reason = None if plan.reason is None else f"no error: {plan.reason}"
        self.blocks = [t0 + b for b in plan.blocks] or [np.arange(t0, n_frames)]
        self.method = (None if plan.reason else
                       JACKKNIFE.format(blocks=len(self.blocks), length=self.blocks[0].size))
        self.pair_blocks = self.blocks if pair_frames is None else self.thinned(pair_frames)

    def thinned(self, limit):
        """The blocks with at most ``limit`` frames in all, evenly spaced within each block."""
        per_block = max(1, math.ceil(limit / len(self.blocks)))
        return [b[np.unique(np.linspace(0, b.size - 1, min(per_block, b.size)).astype(int))] for b in self.blocks]

    @property
    def frames(self):
        return np.concatenate(self.blocks)

    @property
    def pair_frames(self):
        return np.concatenate(self.pair_blocks)

    def split_means(self, values, pair=False):
        """Block means of per-frame ``values`` given for :attr:`frames` (or :attr:`pair_frames`), shape (B, ...)."""
        sizes = [b.size for b in (self.pair_blocks if pair else self.blocks)]
        return np.array([part.mean(axis=0) for part in np.split(np.asarray(values), np.cumsum(sizes)[:-1])])

    def estimate(self, block_means, estimator, unit, **details):
        """A JSON-ready fit entry: value with its jackknife error, or the value and the reason for none."""
        if self.reason is not None:
            value = estimator(*[np.mean(m, axis=0) for m in block_means])
            return {"value": float(value), "error": None, "reason": self.reason, "unit": unit, **details}
        result = stats.block_jackknife(block_means, estimator)
        return {"value": float(result.value), "error": float(result.error), "error_method": self.method,
                "n_blocks": result.n_blocks, "unit": unit, **details}

    def mean_and_error(self, block_means):
        """Mean over blocks and its jackknife (block) standard error per element; error NaN without blocks."""
        means = np.asarray(block_means, dtype=np.float64)
        if self.reason is not None:
            return means.mean(axis=0), np.full(means.shape[1:], np.nan)
        result = stats.block_jackknife([means], lambda m: m)
        return result.value, result.error


def _q_values(q, q_range, n_q, rg_rms, mean_bond):
    """The q grid of P(q): the caller's values, the caller's range, or 0.2/Rg .. 10/<b> (log-spaced)."""
    if q is not None:
        values = np.unique(as_array(q, "q", shape=(None,)))
        if values.size == 0 or values[0] <= 0:
            raise InputError("q: expected one or more scattering vector magnitudes > 0")
        return values
    lo, hi = (0.2 / rg_rms, 10.0 / mean_bond) if q_range is None else interval(q_range, "q_range")
    if not 0 < lo < hi:
        raise InputError(f"q_range: expected 0 < q_min < q_max, got ({lo}, {hi})")
    return np.geomspace(lo, hi, n_q)


def measure(x, times, chains, linear=True, box=None, with_dynamics=True, q=None, q_range=None, n_q=60,
            pair_frames=None, structure_frames=DEFAULT_STRUCTURE_FRAMES, unit="sigma"):
    """Every number of the standard analysis of whole chains, with errors, and the tables behind them.

    Parameters
    ----------
    x : ndarray, shape (n_frames, n_beads, 3), float64
        Positions, chains whole and continuous in time, unit L.
    times : ndarray, shape (n_frames,), float64
        Frame times.
    chains : list of ndarray of int
        Bead indices of each chain in backbone order.
    linear : bool
        False for branched or cyclic chains (end-to-end, internal distances and bonds are skipped).
    box : ndarray, shape (n_frames, 3), float64, optional
        Orthorhombic box edges, unit L, for S(q); None for an open system.
    with_dynamics : bool
        False skips MSD, diffusion and relaxation (frames not a time series).
    q : array_like, optional
        Scattering vectors of P(q), unit 1/L (overrides ``q_range``).
    q_range : (float, float), optional
        Range of a log-spaced grid of ``n_q`` values; default 0.2/Rg .. 10/<b>.
    n_q : int
        Grid size with ``q_range`` or the default range.
    pair_frames : int, optional
        Most frames for the O(N^2)-per-frame quantities R_h and P(q), spread evenly over the blocks;
        default all equilibrated frames.
    structure_frames : int
        Most frames for S(q), spread evenly over the blocks.
    unit : str
        Name of the length unit L, for the output.

    Returns
    -------
    dict
        ``quantities``, ``fits``, ``skipped``, ``error_blocks`` (JSON-ready, as in :func:`analyze_file`)
        and ``tables`` (name -> pandas.DataFrame; the error columns of P(q), S(q) and <R^2(s)> are NaN
        when ``error_blocks`` gives a reason) with ``figures`` (name -> arguments for :mod:`beadsim.plots`).
    """
    n_q = positive_int(n_q, "n_q")
    structure_frames = positive_int(structure_frames, "structure_frames")
    if pair_frames is not None:
        pair_frames = positive_int(pair_frames, "pair_frames")
    skipped, fits, quantities, tables, figures = {}, {}, {}, {}, {}
    if not linear:
        for name in ("end_to_end", "internal_distances", "bonds", "re_autocorrelation"):
            skipped[name] = "chains are branched or cyclic"
    n_frames = x.shape[0]

    rg = size.radius_of_gyration(x, chains)
    shape = size.shape_descriptors(x, chains)
    rg2_frame = np.mean(rg ** 2, axis=1)
    rg_summary = _series_summary(rg2_frame)
    t0 = rg_summary["equilibration_index"]
    quantities["rg_squared"] = {**rg_summary, "unit": f"{unit}^2"}
    quantities["asphericity"] = {**_series_summary(shape.asphericity.mean(axis=1), t0=t0), "unit": f"{unit}^2"}
    quantities["relative_shape_anisotropy"] = {**_series_summary(shape.anisotropy.mean(axis=1), t0=t0), "unit": "1"}
    tables["series"] = pd.DataFrame({"frame": np.arange(n_frames), "time": times, "rg_mean": rg.mean(axis=1),
                                     "rg_squared_mean": rg2_frame, "asphericity_mean": shape.asphericity.mean(axis=1),
                                     "anisotropy_mean": shape.anisotropy.mean(axis=1)})
    figures["rg_series"] = (times, np.sqrt(rg2_frame), t0)

    re2_frame = np.mean(size.end_to_end_distance(x, chains) ** 2, axis=1) if linear else None
    slow = [rg2_frame[t0:]] + ([re2_frame[t0:]] if linear else [])
    blocks = _Blocks(t0, n_frames, _slowest_inefficiency(*slow), pair_frames)

    inverse_rh = 1.0 / size.hydrodynamic_radius(x[blocks.pair_frames], chains).mean(axis=1)
    fits["hydrodynamic_radius"] = blocks.estimate([blocks.split_means(inverse_rh, pair=True)], lambda m: 1.0 / m,
                                                  unit, definition="1 / <1/R_h> (Kirkwood)",
                                                  frames=int(blocks.pair_frames.size))

    if linear:
        tables["series"]["re_squared_mean"] = re2_frame
        quantities["re_squared"] = {**_series_summary(re2_frame, t0=t0), "unit": f"{unit}^2"}
        fits["re2_over_rg2"] = blocks.estimate([blocks.split_means(re2_frame[blocks.frames]),
                                                blocks.split_means(rg2_frame[blocks.frames])],
                                               lambda a, b: a / b, "1",
                                               note="ratio of means; 6 N/(N+1) for ideal chains")
        mean_bond = _internal_and_bonds(x, chains, t0, blocks, quantities, fits, skipped, tables, figures, unit)
    else:
        pairs = np.concatenate([np.stack([c[:-1], c[1:]], axis=1) for c in chains])
        mean_bond = float(np.mean(np.linalg.norm(x[t0:, pairs[:, 1]] - x[t0:, pairs[:, 0]], axis=-1)))

    rg_rms = math.sqrt(rg_summary["mean"])
    _form_factor(x, chains, blocks, _q_values(q, q_range, n_q, rg_rms, mean_bond), rg_rms, mean_bond, fits,
                 skipped, tables, figures, unit)
    if with_dynamics:
        _dynamics(x[t0:], times[t0:], chains, linear, fits, skipped, tables, unit)
    if box is None:
        skipped["structure_factor"] = "open system (no unit cell): S(q) needs a periodic box"
    else:
        _structure_factor(x, box, blocks, structure_frames, mean_bond, skipped, tables, figures)
    error_blocks = ({"reason": blocks.reason} if blocks.reason else
                    {"n_blocks": len(blocks.blocks), "frames_per_block": int(blocks.blocks[0].size),
                     "first_frame": int(blocks.blocks[0][0]), "method": blocks.method})
    return {"quantities": quantities, "fits": fits, "skipped": skipped, "tables": tables, "figures": figures,
            "error_blocks": error_blocks}


def _internal_and_bonds(x, chains, t0, blocks, quantities, fits, skipped, tables, figures, unit):
    """Internal distances, nu from them, bonds and persistence length (into the dicts); the mean bond length."""
    r2_blocks = blocks.split_means(internal.internal_distances(x[blocks.frames], chains))
    r2, r2_error = blocks.mean_and_error(r2_blocks)
    s = np.arange(1, r2.size)
    nu_eff = internal.effective_exponent(s, r2[1:]) if s.size >= 2 else np.full(s.size, np.nan)
    tables["internal_distances"] = pd.DataFrame({"s": s, "r2": r2[1:], "r2_error": r2_error[1:],
                                                 "nu_effective": nu_eff})
    if s.size >= 2:
        figures["internal_distances"] = (s, r2[1:])
    window = (max(2.0, r2.size / 10.0), r2.size / 2.0)
    try:
        fit = scaling.nu_from_internal_distances(s, r2[1:], s_range=window)
        fits["nu_internal_distances"] = blocks.estimate(
            [r2_blocks], lambda m: scaling.nu_from_internal_distances(s, m[1:], s_range=window).nu, "1",
            s_min=fit.x_min, s_max=fit.x_max)
    except AnalysisError as exc:
        skipped["nu_internal_distances"] = str(exc)

    all_lengths = bonds.bond_lengths(x, chains)
    lengths = all_lengths[t0:]
    mean_bond = float(lengths.mean())
    centres, density = bonds.distribution(lengths, bins=80)
    table = {"bond_length": centres, "bond_length_density": density}
    if min(c.size for c in chains) >= 3:
        table["angle_rad"], table["angle_density"] = bonds.distribution(bonds.bond_angles(x[t0:], chains), bins=80,
                                                                        value_range=(0.0, np.pi))
    tables["bonds"] = pd.DataFrame(table)
    figures["bond_lengths"] = (centres, density)
    quantities["bond_length"] = {**_series_summary(all_lengths.mean(axis=1), t0=t0), "unit": unit}
    if min(c.size for c in chains) < 3:
        skipped["persistence_length"] = "chains of two beads have no bond pairs"
        return mean_bond
    correlations = np.array([bonds.bond_correlation(x[b], chains) for b in blocks.blocks])
    try:
        fit = bonds.persistence_length(correlations.mean(axis=0), mean_bond)
        fits["persistence_length"] = blocks.estimate(
            [correlations], lambda c: bonds.persistence_length(c, mean_bond, s_max=fit.s_max).length, unit,
            s_max=fit.s_max)
    except AnalysisError as exc:
        skipped["persistence_length"] = str(exc)
    return mean_bond


def _form_factor(x, chains, blocks, q, rg_rms, mean_bond, fits, skipped, tables, figures, unit):
    """P(q) per block with errors, the Guinier Rg and nu from the intermediate regime (into the dicts)."""
    p_blocks = np.array([scattering.form_factor(x[b], chains, q) for b in blocks.pair_blocks])
    p, p_error = blocks.mean_and_error(p_blocks)
    tables["form_factor"] = pd.DataFrame({"q": q, "p": p, "p_error": p_error,
                                          "debye": scattering.debye_function((q * rg_rms) ** 2)})
    figures["form_factor"] = (q, p, rg_rms)
    try:
        guinier = scattering.guinier_rg(q, p)
        window = (q >= guinier.q_min) & (q <= guinier.q_max)
        fits["guinier_rg"] = blocks.estimate(
            [p_blocks[:, window]], lambda m: scattering.guinier_fit(q[window], m).rg, unit,
            q_min=guinier.q_min, q_max=guinier.q_max, frames=int(blocks.pair_frames.size),
            note="ln P = a - (q Rg)^2/3 + c q^4 over q Rg < 1")
    except AnalysisError as exc:
        skipped["guinier_rg"] = str(exc)
    lo, hi = 3.0 / rg_rms, 1.0 / mean_bond
    if hi < NU_FORM_FACTOR_SPAN * lo:
        skipped["nu_form_factor"] = (f"the window 3/Rg .. 1/<b> = {lo:.3g} .. {hi:.3g} spans less than a factor "
                                     f"{NU_FORM_FACTOR_SPAN:g}: chains too short for a q^(-1/nu) regime")
        return
    try:
        fit = scaling.nu_from_form_factor(q, p, (lo, hi))
        use = (q >= lo) & (q <= hi)
        fits["nu_form_factor"] = blocks.estimate(
            [p_blocks[:, use]], lambda m: scaling.nu_from_form_factor(q[use], m, (lo, hi)).nu, "1",
            q_min=fit.x_min, q_max=fit.x_max)
    except AnalysisError as exc:
        skipped["nu_form_factor"] = f"{exc} (window 3/Rg..1/<b>)"


def _dynamics(x, times, chains, linear, fits, skipped, tables, unit):
    """MSD, diffusion coefficient and end-to-end relaxation of the equilibrated frames (into the dicts)."""
    steps = np.diff(times)
    if times.size < 8 or not np.all(steps > 0) or not np.allclose(steps, steps[0], rtol=1e-4):
        skipped["dynamics"] = "needs eight or more frames with equally spaced, increasing times"
        return
    lag = times - times[0]
    com = dynamics.center_of_mass_msd(x, chains)
    inner = dynamics.inner_bead_msd(x, chains)
    table = {"lag_time": lag, "msd_center_of_mass": com.mean(axis=1), "msd_inner_beads": inner.mean(axis=1)}
    if not linear:
        skipped["diffusion_coefficient"] = "needs the end-to-end relaxation time, which branched chains lack"
        tables["dynamics"] = pd.DataFrame(table)
        return
    acf = dynamics.vector_autocorrelation(size.end_to_end_vector(x, chains))
    table["re_autocorrelation"] = acf
    tau = dynamics.relaxation_time(acf, float(steps[0]))
    if tau.e_fold is not None and tau.e_fold < steps[0]:
        skipped["re_relaxation_time"] = ("not resolved: the end-to-end correlation falls below 1/e within one "
                                         "frame, so the frames are further apart than the relaxation time")
    else:
        fits["re_relaxation_time"] = {
            "value": tau.integrated, "error": tau.integrated_error,
            "error_method": "window formula of Madras and Sokal (1988)", "unit": "time",
            "definition": "integrated end-to-end autocorrelation time", "e_fold": tau.e_fold,
            "note": "e_fold (1/e crossing) is given without error; " + (
                "converged" if tau.converged else "the correlation never reached zero: the value is a lower bound")}
    try:
        d = dynamics.diffusion_by_segments(times, dynamics.center_of_mass_paths(x, chains), tau)
        fits["diffusion_coefficient"] = {"value": d.coefficient, "error": d.error,
                                         "error_method": f"batch means over {d.per_path.size} time segments",
                                         "t_min": d.t_min, "t_max": d.t_max, "unit": f"{unit}^2 per time unit"}
    except AnalysisError as exc:
        skipped["diffusion_coefficient"] = str(exc)
    tables["dynamics"] = pd.DataFrame(table)


def _structure_factor(x, box, blocks, structure_frames, mean_bond, skipped, tables, figures):
    """Total S(q) of a periodic, orthorhombic system on the reciprocal lattice, per block with errors.

    The range is capped at ``MAX_LATTICE_INDEX`` lattice shells so that large boxes stay cheap.
    """
    picks = blocks.thinned(structure_frames)
    q_max = min(10.0 / mean_bond, 2.0 * np.pi * MAX_LATTICE_INDEX / float(box[np.concatenate(picks)].max()))
    results = [scattering.structure_factor(x[f], box[f], q_max) for f in picks]
    if any(r.q.shape != results[0].q.shape or not np.allclose(r.q, results[0].q) for r in results):
        skipped["structure_factor"] = "the box changes between frames, so the lattice shells differ between blocks"
        return
    s, s_error = blocks.mean_and_error(np.array([r.s for r in results]))
    tables["structure_factor"] = pd.DataFrame({"q": results[0].q, "s": s, "s_error": s_error,
                                               "n_vectors": results[0].n_vectors})
    figures["structure_factor"] = (results[0].q, s)


def analyze_file(traj_path, top_path=None, out_dir="analysis_output", frames=None, length_scale=None,
                 figure_format="png", q=None, q_range=None, n_q=60, pair_frames=None,
                 structure_frames=DEFAULT_STRUCTURE_FRAMES):
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
    q, q_range, n_q, pair_frames, structure_frames
        As :func:`measure` (q in 1/nm, or 1/sigma with ``length_scale``).

    Returns
    -------
    dict
        JSON-ready summary: ``file``, ``topology``, ``n_frames``, ``n_chains``, ``chain_lengths``,
        ``length_unit``, ``quantities`` (name -> summarize dict with ``mean``, ``error``,
        ``n_independent``, ``equilibration_index``, ``reason``, ``unit``), ``fits`` (name -> dict with
        ``value`` and ``error``, or ``error`` None and a ``reason``), ``skipped`` (name -> reason),
        ``error_blocks`` (the blocks of frames behind the jackknife errors and the error columns of the
        tables, or the ``reason`` there are none) and ``outputs`` (paths written).

    Raises
    ------
    AnalysisError
        The file cannot be read or holds no chains (message names the file).
    """
    if figure_format not in ("png", "svg"):
        raise InputError(f"figure_format: expected 'png' or 'svg', got {figure_format!r}")
    traj = load_trajectory(traj_path, top_path, frames)
    out_dir = os.fspath(out_dir)
    unit = "nm" if length_scale is None else "sigma"
    try:
        chains = find_chains(traj.topology)
        linear = True
    except AnalysisError as exc:
        if "not linear" not in str(exc):
            raise AnalysisError(f"{os.fspath(traj_path)}: {exc}") from None
        chains = find_chains(traj.topology, require_linear=False)
        linear = False
    x = trajectory_positions(traj, length_scale)
    box = _box(traj, length_scale)
    hybrid = _from_hybrid_run(traj_path)
    result = measure(x, np.asarray(traj.time, dtype=np.float64), chains, linear=linear, box=box,
                     with_dynamics=not hybrid, q=q, q_range=q_range, n_q=n_q, pair_frames=pair_frames,
                     structure_frames=structure_frames, unit=unit)
    if hybrid:
        result["skipped"]["dynamics"] = f"not computed: {DYNAMICS_CAUTION}"
    if box is None and is_periodic(traj):
        result["skipped"]["structure_factor"] = "box is not orthorhombic"
    os.makedirs(out_dir, exist_ok=True)
    outputs = _write(result, out_dir, figure_format, unit)
    summary = {"file": os.fspath(traj_path), "topology": None if top_path is None else os.fspath(top_path),
               "n_frames": int(x.shape[0]), "n_chains": len(chains),
               "chain_lengths": sorted({int(c.size) for c in chains}), "length_unit": unit,
               "quantities": result["quantities"], "fits": result["fits"], "skipped": result["skipped"],
               "error_blocks": result["error_blocks"],
               "outputs": outputs + [os.path.join(out_dir, "summary.json")]}
    with open(os.path.join(out_dir, "summary.json"), "w", encoding="utf-8") as handle:
        json.dump(summary, handle, indent=2)
    logger.info("analysis of %s written to %s", traj_path, out_dir)
    return summary


def _box(traj, length_scale):
    """Orthorhombic box edges per frame in the output unit, or None (open or non-orthorhombic)."""
    if not is_periodic(traj) or not np.allclose(traj.unitcell_angles, 90.0):
        return None
    return np.asarray(traj.unitcell_lengths, dtype=np.float64) / (1.0 if length_scale is None else length_scale)


def _write(result, out_dir, figure_format, unit):
    """Tables and figures of :func:`measure` into ``out_dir``; the paths written."""
    outputs = []

    def out(name):
        path = os.path.join(out_dir, name)
        outputs.append(path)
        return path

    for name, table in result["tables"].items():
        table.to_csv(out(f"{name}.csv"), index=False)
    fig = result["figures"]
    times, rg, t0 = fig["rg_series"]
    plots.time_series(times, rg, out(f"rg_series.{figure_format}"), t0, label=r"$\sqrt{\langle R_g^2 \rangle}$",
                      unit=unit)
    if "internal_distances" in fig:
        plots.internal_distances(*fig["internal_distances"], out(f"internal_distances.{figure_format}"), unit=unit)
    if "bond_lengths" in fig:
        plots.histogram(*fig["bond_lengths"], out(f"bond_lengths.{figure_format}"), f"bond length [{unit}]")
    q, p, rg_rms = fig["form_factor"]
    plots.form_factor(q, p, out(f"form_factor.{figure_format}"), rg=rg_rms, unit=unit)
    plots.kratky(q, p, rg_rms, out(f"kratky.{figure_format}"))
    if "structure_factor" in fig:
        plots.structure_factor(*fig["structure_factor"], out(f"structure_factor.{figure_format}"), unit=unit)
    return outputs


def _from_hybrid_run(traj_path):
    """True if the trajectory lies in a ``beadsim run`` folder whose input asks for hybrid sampling."""
    resolved = os.path.join(os.path.dirname(os.path.abspath(traj_path)), "input.toml")
    if not os.path.exists(resolved):
        return False
    try:
        return load_toml(resolved).get("sampling", {}).get("method") == "hybrid"
    except InputError:
        return False


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
