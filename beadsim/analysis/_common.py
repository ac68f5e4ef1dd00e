"""Shared argument checks, chain grouping and lagged sums for the array-level analysis functions.

Chains are given as a sequence of integer index arrays, one per chain, each
listing the chain's beads in backbone order (as returned by
:func:`beadsim.analysis.trajectory.find_chains`). Chains of equal length are
gathered into one array shaped ``(n_frames, n_chains_of_that_length, length, 3)``
so that every quantity is computed with whole-array operations.
"""

import numpy as np

from .._validate import as_array, positive
from ..errors import AnalysisError, InputError


def autocorrelation_sum(v):
    """``sum_t v_t . v_{t+m}`` for m = 0..T-1 of paths ``v`` (T, ..., d) -> (T, ...), by a zero-padded FFT.

    Parameters
    ----------
    v : ndarray, shape (T, ..., d), float64
        Equally spaced values; the last axis is summed over (the dot product).

    Returns
    -------
    ndarray, shape (T, ...), float64
        Unnormalised lagged sums over the T - m time origins of each lag m.
    """
    n = v.shape[0]
    spectrum = np.fft.rfft(v, n=2 * n, axis=0)
    return np.fft.irfft(np.sum(spectrum * spectrum.conj(), axis=-1).real, n=2 * n, axis=0)[:n]


def check_positions(positions, name="positions"):
    """Return ``positions`` as C-contiguous float64 shaped (n_frames, n_beads, 3), finite."""
    return as_array(positions, name, shape=(None, None, 3))


def check_chains(chains, n_beads, *, min_length=2):
    """Validate a sequence of index arrays against ``n_beads``; return a list of int64 arrays."""
    if isinstance(chains, np.ndarray) and chains.ndim == 2:
        chains = list(chains)
    try:
        items = list(chains)
    except TypeError:
        raise InputError(f"chains: expected a sequence of integer index arrays, got {type(chains).__name__}") from None
    if not items:
        raise InputError("chains: expected at least one chain, got none")
    out = []
    for k, chain in enumerate(items):
        arr = as_array(chain, f"chains[{k}]", shape=(None,), dtype=np.int64)
        if arr.size < min_length:
            raise InputError(f"chains[{k}]: expected at least {min_length} beads, got {arr.size}")
        if arr.min() < 0 or arr.max() >= n_beads:
            raise InputError(f"chains[{k}]: bead indices must lie in [0, {n_beads}), got {arr.min()}..{arr.max()}")
        out.append(arr)
    return out


def check_length_scale(length_scale):
    """Return the factor positions are divided by: 1.0 if ``length_scale`` is None, else the positive float."""
    return 1.0 if length_scale is None else positive(length_scale, "length_scale")


def group_by_length(chains):
    """Gather chains of equal length.

    Parameters
    ----------
    chains : list of ndarray of int64
        Validated chains.

    Returns
    -------
    list of (ndarray, ndarray)
        For each distinct length, ``(chain_ids, index)`` with ``chain_ids`` shaped
        (n_group,) (positions in ``chains``) and ``index`` shaped (n_group, length).
    """
    lengths = np.array([c.size for c in chains])
    groups = []
    for length in np.unique(lengths):
        ids = np.flatnonzero(lengths == length)
        groups.append((ids, np.stack([chains[i] for i in ids])))
    return groups


def per_chain(positions, chains, func, tail_shape=(), *, chunk_elements=4_000_000):
    """Apply ``func`` to each group of equally long chains, in frame chunks, and assemble per-chain results.

    Parameters
    ----------
    positions : ndarray, shape (n_frames, n_beads, 3), float64
        Validated positions.
    chains : list of ndarray of int64
        Validated chains.
    func : callable
        ``func(x, index)`` with ``x`` shaped (n_chunk_frames, n_group, length, 3)
        and ``index`` the group's (n_group, length) bead indices; returns an
        array shaped (n_chunk_frames, n_group) + ``tail_shape``.
    tail_shape : tuple of int
        Trailing shape of the per-chain result.
    chunk_elements : int
        Upper bound on floats gathered at once (bounds memory for long runs).

    Returns
    -------
    ndarray, shape (n_frames, n_chains) + tail_shape, float64
    """
    n_frames = positions.shape[0]
    out = np.empty((n_frames, len(chains)) + tuple(tail_shape))
    for ids, index in group_by_length(chains):
        step = max(1, chunk_elements // (3 * index.size))
        for start in range(0, n_frames, step):
            frames = slice(start, min(start + step, n_frames))
            out[frames, ids] = func(positions[frames][:, index], index)
    return out


def line_fit(x, y, sigma=None, what="straight-line fit"):
    """Least-squares straight line ``y = slope * x + intercept``.

    Solved in closed form about the weighted mean of x (no matrix inversion), so
    the only degenerate case, all x equal, is detected and reported.

    Parameters
    ----------
    x, y : ndarray, shape (m,), float64
        Finite data, m >= 3 (m >= 2 when ``sigma`` is given).
    sigma : ndarray, shape (m,), float64, optional
        Standard errors of ``y``; used as absolute weights. Without them the
        covariance is scaled by the residual variance (m - 2 degrees of freedom).
    what : str
        Name of the fit in error messages (e.g. "power-law fit").

    Returns
    -------
    slope, intercept : float
    covariance : ndarray, shape (2, 2), float64
        Covariance of (slope, intercept).
    chi2_reduced : float
        Weighted residual sum of squares over m - 2 (NaN when m == 2).

    Raises
    ------
    AnalysisError
        The weights ``1 / sigma^2`` are not finite and positive, all x are equal
        (no slope is defined), or the result overflows floating point.
    """
    with np.errstate(divide="ignore", over="ignore", under="ignore"):  # checked on the next line
        w = np.ones_like(x) if sigma is None else 1.0 / sigma ** 2
    if not np.all(np.isfinite(w) & (w > 0)):
        raise AnalysisError(f"{what}: the weights 1/sigma^2 must be finite and > 0; "
                            f"the errors span {sigma.min():g}..{sigma.max():g}")
    total = w.sum()
    x_mean = np.sum(w * x) / total
    dx = x - x_mean
    sxx = np.sum(w * dx * dx)
    if not sxx > 0:
        raise AnalysisError(f"{what}: slope undefined, the {x.size} points share one abscissa "
                            f"({x[0]:g} on the fit's x axis) or their spread is out of floating-point range")
    slope = np.sum(w * dx * y) / sxx
    intercept = np.sum(w * y) / total - slope * x_mean
    covariance = np.array([[1.0 / sxx, -x_mean / sxx], [-x_mean / sxx, 1.0 / total + x_mean ** 2 / sxx]])
    dof = x.size - 2
    chi2 = float(np.sum(w * (y - slope * x - intercept) ** 2) / dof) if dof > 0 else float("nan")
    if sigma is None:
        covariance = covariance * chi2
    if not (np.isfinite(slope) and np.isfinite(intercept) and np.all(np.isfinite(covariance))):
        raise AnalysisError(f"{what}: the fit overflows floating point (x spans {x.min():g}..{x.max():g}, "
                            f"y spans {y.min():g}..{y.max():g})")
    return float(slope), float(intercept), covariance, chi2
