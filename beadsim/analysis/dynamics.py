"""Chain dynamics: mean-square displacements, diffusion coefficient, end-to-end vector relaxation.

Time correlations are averaged over all time origins. The mean-square
displacement at lag m of a path r_0 .. r_{T-1} is

    MSD(m) = (1/(T-m)) sum_t |r_{t+m} - r_t|^2
           = (1/(T-m)) [sum_{t<T-m} |r_t|^2 + sum_{t>=m} |r_t|^2] - 2 A(m),

where ``A(m) = (1/(T-m)) sum_t r_t . r_{t+m}`` is obtained for all lags at once
with a zero-padded FFT (Wiener-Khinchin theorem), so the cost is O(T log T).
Frames must be equally spaced and chains continuous in time (as
:func:`beadsim.analysis.trajectory.trajectory_positions` makes them).
"""

from dataclasses import dataclass

import numpy as np

from .._validate import as_array, interval, positive, positive_int
from ..errors import AnalysisError, InputError
from ._common import autocorrelation_sum, check_chains, check_positions, line_fit
from .size import end_to_end_vector
from .trajectory import find_chains, trajectory_positions


def _frames(series, name):
    """Return ``series`` (n_frames, ...) if it holds at least one frame, else raise InputError."""
    if series.shape[0] == 0:
        raise InputError(f"{name}: expected one or more frames, got shape {series.shape}")
    return series


def mean_square_displacement(paths):
    """Time-origin-averaged mean-square displacement of each path.

    Parameters
    ----------
    paths : array_like, shape (n_frames, n_paths, 3), float64
        Continuous (unwrapped) trajectories of points, unit L.

    Returns
    -------
    ndarray, shape (n_frames, n_paths), float64
        MSD at lags 0 .. n_frames-1 frames, unit L^2.
    """
    r = _frames(as_array(paths, "paths", shape=(None, None, 3)), "paths")
    r = r - r.mean(axis=0)
    n = r.shape[0]
    sq = np.einsum("tpa,tpa->tp", r, r)
    prefix = np.concatenate([np.zeros((1, r.shape[1])), np.cumsum(sq, axis=0)], axis=0)
    m = np.arange(n)
    squares = prefix[n - m] + (prefix[n] - prefix[m])
    msd = (squares - 2.0 * autocorrelation_sum(r)) / (n - m)[:, None]
    return np.maximum(msd, 0.0)


def center_of_mass_paths(positions, chains):
    """Centre of mass (equal bead masses) of each chain in each frame.

    Parameters
    ----------
    positions : array_like, shape (n_frames, n_beads, 3), float64
        Unit L.
    chains : sequence of array_like of int
        Bead indices of each chain.

    Returns
    -------
    ndarray, shape (n_frames, n_chains, 3), float64
    """
    x = check_positions(positions)
    chains = check_chains(chains, x.shape[1])
    return np.stack([x[:, c].mean(axis=1) for c in chains], axis=1)


def center_of_mass_msd(positions, chains):
    """MSD of each chain's centre of mass, shape (n_frames, n_chains), unit L^2 (lags in frames)."""
    return mean_square_displacement(center_of_mass_paths(positions, chains))


def inner_bead_msd(positions, chains, n_inner=5):
    """MSD of the innermost beads of each chain, averaged over those beads.

    Middle beads avoid the faster motion of chain ends; ``n_inner = 5`` is
    common practice.

    Parameters
    ----------
    positions, chains
        As for :func:`center_of_mass_paths`.
    n_inner : int
        Number of central beads per chain (at most the chain length).

    Returns
    -------
    ndarray, shape (n_frames, n_chains), float64
        Unit L^2, lags in frames.
    """
    x = check_positions(positions)
    chains = check_chains(chains, x.shape[1])
    n_inner = positive_int(n_inner, "n_inner")
    out = []
    for c in chains:
        k = min(n_inner, c.size)
        start = (c.size - k) // 2
        out.append(mean_square_displacement(x[:, c[start:start + k]]).mean(axis=1))
    return np.stack(out, axis=1)


@dataclass(frozen=True)
class DiffusionFit:
    """Diffusion coefficient from ``MSD(t) = 6 D t + c`` fitted over a window.

    Attributes
    ----------
    coefficient : float
        Mean of the per-path values, unit L^2 per time unit.
    error : float or None
        Standard error across paths (independent chains); None for a single path.
    per_path : ndarray, shape (n_paths,), float64
        D of each path.
    t_min, t_max : float
        Fit window.
    """

    coefficient: float
    error: float | None
    per_path: np.ndarray
    t_min: float
    t_max: float


def diffusion_coefficient(lag_times, msd, fit_range=None):
    """Fit ``MSD = 6 D t + c`` to each path's MSD and average.

    Parameters
    ----------
    lag_times : array_like, shape (n_lags,), float64
        Lag times, increasing, starting at 0.
    msd : array_like, shape (n_lags, n_paths), float64
        MSD per path (e.g. from :func:`center_of_mass_msd`).
    fit_range : (float, float), optional
        Time window; default from 10 % to 50 % of the longest lag (short lags
        are sub-diffusive, long lags have few time origins: common practice).

    Returns
    -------
    DiffusionFit
    """
    t = as_array(lag_times, "lag_times", shape=(None,))
    msd = as_array(msd, "msd", shape=(t.size, None))
    if msd.shape[1] == 0:
        raise InputError("msd: expected one or more paths (columns), got none")
    if t.size < 3:
        raise AnalysisError(f"diffusion fit needs three or more lags, got {t.size}")
    lo, hi = (0.1 * t[-1], 0.5 * t[-1]) if fit_range is None else interval(fit_range, "fit_range")
    use = (t >= lo) & (t <= hi)
    if use.sum() < 3:
        raise AnalysisError(f"diffusion fit needs three or more lags in [{lo}, {hi}], got {int(use.sum())}")
    d = np.array([line_fit(t[use], msd[use, p], what="diffusion fit")[0] / 6.0 for p in range(msd.shape[1])])
    error = float(d.std(ddof=1) / np.sqrt(d.size)) if d.size > 1 else None
    return DiffusionFit(coefficient=float(d.mean()), error=error, per_path=d,
                        t_min=float(t[use][0]), t_max=float(t[use][-1]))


SEGMENT_RELAXATIONS = 10
"""A segment of :func:`diffusion_by_segments` spans at least this many relaxation times (common practice:
the MSD of the centre of mass is linear only beyond the chain's relaxation time, and the fit window of
each segment runs from one relaxation time to half the segment)."""


def diffusion_by_segments(times, paths, relaxation, max_segments=16, min_segments=8):
    """Diffusion coefficient from independent time segments, or an AnalysisError saying why not.

    The trajectory is cut into B equal segments of at least :data:`SEGMENT_RELAXATIONS` relaxation
    times; in each, ``MSD = 6 D t + c`` is fitted to the path-averaged MSD over lags from one relaxation
    time to half the segment. D is the mean of the B values and its error their standard error
    (batch means: segments longer than the relaxation time are nearly independent).

    Parameters
    ----------
    times : array_like, shape (n_frames,), float64
        Equally spaced, increasing frame times.
    paths : array_like, shape (n_frames, n_paths, 3), float64
        Continuous centre-of-mass paths, unit L.
    relaxation : RelaxationTime
        Of the chains' end-to-end vector over the same frames (:func:`relaxation_time`).
    max_segments, min_segments : int
        Bounds on B.

    Returns
    -------
    DiffusionFit
        ``per_path`` holds the per-segment values; ``error`` is their standard error.

    Raises
    ------
    AnalysisError
        The frames lie further apart than the relaxation time (their MSD cannot be told from that of
        independent samples); the chains never relax within the trajectory; or it spans fewer than
        ``min_segments`` segments of :data:`SEGMENT_RELAXATIONS` relaxation times.
    """
    t = as_array(times, "times", shape=(None,))
    r = as_array(paths, "paths", shape=(t.size, None, 3))
    dt = float(t[1] - t[0])
    tau = relaxation.e_fold
    if tau is None:
        raise AnalysisError("diffusion not determined: the end-to-end correlation never falls to 1/e within the "
                            "trajectory, so the chains never relax and the MSD has no diffusive regime")
    if tau < dt:
        raise AnalysisError(f"diffusion not determined: frames further apart than the relaxation time (end-to-end "
                            f"correlation below 1/e after one frame, {dt:.4g} time units); such frames cannot be "
                            "told from independent samples, and their MSD measures no motion")
    length = max(3, int(np.ceil(SEGMENT_RELAXATIONS * tau / dt)))
    count = min(max_segments, t.size // length)
    if count < min_segments:
        raise AnalysisError(f"diffusion not determined: the trajectory spans {t.size * dt / tau:.3g} relaxation times "
                            f"(tau = {tau:.4g}); an error needs {min_segments} segments of "
                            f"{SEGMENT_RELAXATIONS} relaxation times")
    length = t.size // count
    lags = dt * np.arange(length)
    use = (lags >= tau) & (lags <= 0.5 * lags[-1])
    if use.sum() < 3:
        raise AnalysisError(f"diffusion not determined: fewer than three lags between one relaxation time ({tau:.4g}) "
                            "and half a segment")
    values = np.array([line_fit(lags[use], mean_square_displacement(r[k * length:(k + 1) * length]).mean(axis=1)[use],
                                what="diffusion fit")[0] / 6.0 for k in range(count)])
    return DiffusionFit(coefficient=float(values.mean()), error=float(values.std(ddof=1) / np.sqrt(count)),
                        per_path=values, t_min=float(lags[use][0]), t_max=float(lags[use][-1]))


def vector_autocorrelation(vectors):
    """Normalised autocorrelation ``<v(t) . v(t+m)> / <v . v>`` averaged over paths and time origins.

    Parameters
    ----------
    vectors : array_like, shape (n_frames, n_paths, 3), float64
        E.g. end-to-end vectors per frame and chain.

    Returns
    -------
    ndarray, shape (n_frames,), float64
        Correlation at lags 0 .. n_frames-1 frames; value 1 at lag 0.
    """
    v = _frames(as_array(vectors, "vectors", shape=(None, None, 3)), "vectors")
    n = v.shape[0]
    corr = autocorrelation_sum(v).sum(axis=1) / (n - np.arange(n))
    if corr[0] <= 0:
        raise AnalysisError("vectors: all zero, autocorrelation undefined")
    return corr / corr[0]


@dataclass(frozen=True)
class RelaxationTime:
    """Relaxation times of a normalised autocorrelation function.

    Attributes
    ----------
    integrated : float
        ``dt (1/2 + sum_{m>=1} C(m))`` summed up to the first non-positive C;
        equals tau for ``C = exp(-t/tau)`` with ``dt << tau``.
    integrated_error : float
        Its standard error for a window of M lags over n frames,
        ``integrated * sqrt(2 (2 M + 1) / n)`` (Madras and Sokal, J. Stat. Phys. 50, 109, 1988, eq. 2.14
        [from memory]).
    e_fold : float or None
        First time where C falls to 1/e (linear interpolation); None if it never does.
    converged : bool
        False if C never reached zero within the data, so ``integrated`` is a lower bound.
    """

    integrated: float
    integrated_error: float
    e_fold: float | None
    converged: bool


def relaxation_time(acf, dt):
    """Integrated and 1/e relaxation times of a normalised autocorrelation function.

    Parameters
    ----------
    acf : array_like, shape (n_lags,), float64
        Autocorrelation with ``acf[0] = 1`` (e.g. from :func:`vector_autocorrelation`).
    dt : float
        Time between lags.

    Returns
    -------
    RelaxationTime
    """
    c = as_array(acf, "acf", shape=(None,))
    dt = positive(dt, "dt")
    if c.size < 2 or not np.isclose(c[0], 1.0):
        raise InputError("acf: expected two or more lags with acf[0] = 1")
    nonpositive = np.flatnonzero(c <= 0)
    stop = int(nonpositive[0]) if nonpositive.size else c.size
    integrated = dt * (0.5 + c[1:stop].sum())
    integrated_error = integrated * np.sqrt(2.0 * (2 * (stop - 1) + 1) / c.size)
    below = np.flatnonzero(c < np.exp(-1.0))
    e_fold = None
    if below.size:
        k = int(below[0])
        e_fold = float(dt * (k - 1 + (c[k - 1] - np.exp(-1.0)) / (c[k - 1] - c[k])))
    return RelaxationTime(integrated=float(integrated), integrated_error=float(integrated_error), e_fold=e_fold,
                          converged=bool(nonpositive.size))


def _lag_times(traj):
    t = np.asarray(traj.time, dtype=np.float64)
    return t - t[0]


def compute_msd(traj, chains=None, kind="com", n_inner=5, length_scale=None):
    """Mean-square displacement of an mdtraj trajectory.

    Parameters
    ----------
    traj : mdtraj.Trajectory
        Equally spaced frames; positions in nm.
    chains : sequence of array_like of int, optional
        Default: connected components of the bond graph.
    kind : {"com", "inner"}
        Centre of mass of each chain, or its ``n_inner`` middle beads.
    n_inner : int
        See :func:`inner_bead_msd`.
    length_scale : float, optional
        nm per sigma; MSD in sigma^2 if given, else nm^2.

    Returns
    -------
    lag_times : ndarray, shape (n_frames,), float64
        ``traj.time - traj.time[0]``, in the trajectory's time unit.
    msd : ndarray, shape (n_frames, n_chains), float64
    """
    if kind not in ("com", "inner"):
        raise InputError(f"kind: expected 'com' or 'inner', got {kind!r}")
    x = trajectory_positions(traj, length_scale)
    chains = find_chains(traj.topology) if chains is None else chains
    msd = center_of_mass_msd(x, chains) if kind == "com" else inner_bead_msd(x, chains, n_inner)
    return _lag_times(traj), msd


def compute_end_to_end_autocorrelation(traj, chains=None):
    """End-to-end vector autocorrelation of an mdtraj trajectory.

    Returns
    -------
    lag_times : ndarray, shape (n_frames,), float64
        In the trajectory's time unit.
    acf : ndarray, shape (n_frames,), float64
    """
    x = trajectory_positions(traj)
    chains = find_chains(traj.topology) if chains is None else chains
    return _lag_times(traj), vector_autocorrelation(end_to_end_vector(x, chains))
