"""Internal distances ``<R^2(s)>`` between beads s apart along the backbone, and the local exponent.

For a chain with positions r_0 .. r_{n-1}, ``R^2(s) = (1/(n-s)) sum_i |r_{i+s} - r_i|^2``.
All separations are obtained at once with the identity
``sum_i |r_{i+s} - r_i|^2 = sum_{i>=s} |r_i|^2 + sum_{i<n-s} |r_i|^2 - 2 sum_i r_i . r_{i+s}``,
whose last term is an autocorrelation along the chain computed with a
zero-padded FFT (Wiener-Khinchin theorem), so the cost is O(n log n) per chain
and frame instead of O(n^2). Positions are taken relative to the chain's
centroid first to keep the cancellation harmless.
"""

import numpy as np

from .._validate import as_array
from ..errors import AnalysisError, InputError
from ._common import check_chains, check_positions, group_by_length
from .trajectory import find_chains, trajectory_positions


def _pair_sums(y):
    """``sum_i |y_{i+s} - y_i|^2`` for s = 0..n-1 of centred chains ``y`` (..., n, 3) -> (..., n)."""
    n = y.shape[-2]
    sq = np.einsum("...ia,...ia->...i", y, y)
    prefix = np.concatenate([np.zeros(sq.shape[:-1] + (1,)), np.cumsum(sq, axis=-1)], axis=-1)
    s = np.arange(n)
    squares = (prefix[..., n:n + 1] - prefix[..., s]) + prefix[..., n - s]
    spectrum = np.fft.rfft(y, n=2 * n, axis=-2)
    corr = np.fft.irfft(np.sum(spectrum * spectrum.conj(), axis=-1).real, n=2 * n, axis=-1)[..., :n]
    return np.maximum(squares - 2.0 * corr, 0.0)


def internal_distances(positions, chains, *, chunk_elements=4_000_000):
    """Mean-square internal distance at every backbone separation, per frame.

    Parameters
    ----------
    positions : array_like, shape (n_frames, n_beads, 3), float64
        Bead positions (chains whole), unit L.
    chains : sequence of array_like of int
        Bead indices of each chain in backbone order.
    chunk_elements : int
        Upper bound on floats gathered at once.

    Returns
    -------
    ndarray, shape (n_frames, n_max), float64
        Entry ``[t, s]`` is ``|r_{i+s} - r_i|^2`` averaged over every bead pair s
        apart in every chain at frame t, unit L^2; ``n_max`` is the longest chain
        length, and column 0 is zero.
    """
    x = check_positions(positions)
    chains = check_chains(chains, x.shape[1])
    n_frames = x.shape[0]
    n_max = max(c.size for c in chains)
    total = np.zeros((n_frames, n_max))
    count = np.zeros(n_max)
    for _, index in group_by_length(chains):
        n_group, n = index.shape
        step = max(1, chunk_elements // (3 * index.size))
        for start in range(0, n_frames, step):
            frames = slice(start, min(start + step, n_frames))
            y = x[frames][:, index]
            y -= y.mean(axis=2, keepdims=True)
            total[frames, :n] += _pair_sums(y).sum(axis=1)
        count[:n] += n_group * (n - np.arange(n))
    return total / count


def effective_exponent(s, r2):
    """Local exponent ``nu_eff(s) = (1/2) d ln <R^2(s)> / d ln s`` by centred differences.

    Parameters
    ----------
    s : array_like, shape (m,), float64
        Backbone separations, increasing, > 0 (drop s = 0 first).
    r2 : array_like, shape (m,), float64
        Mean-square internal distances ``<R^2(s)>`` > 0, any unit.

    Returns
    -------
    ndarray, shape (m,), float64
        Local exponent (one-sided differences at the ends).

    Raises
    ------
    InputError
        ``s`` or ``r2`` not finite 1-D arrays of one shape, or ``s`` not increasing.
    AnalysisError
        Fewer than two separations, or a separation or ``<R^2(s)>`` <= 0 (no logarithm).
    """
    s = as_array(s, "s", shape=(None,))
    r2 = as_array(r2, "r2", shape=s.shape)
    if s.size < 2 or np.any(s <= 0) or np.any(r2 <= 0):
        raise AnalysisError("effective_exponent: need two or more positive separations with positive <R^2(s)>")
    if np.any(np.diff(np.log(s)) <= 0):
        raise InputError("s: separations must increase (and stay distinct in ln s)")
    return 0.5 * np.gradient(np.log(r2), np.log(s))


def compute_internal_distances(traj, chains=None, length_scale=None):
    """Internal distances per frame, shape (n_frames, n_max), of an mdtraj trajectory.

    Parameters
    ----------
    traj : mdtraj.Trajectory
        Trajectory with bonds in its topology; positions in nm.
    chains : sequence of array_like of int, optional
        Chains in backbone order; default: the linear chains of the bond graph.
    length_scale : float, optional
        nm per sigma; report in sigma^2 if given, else in nm^2.

    Returns
    -------
    ndarray, shape (n_frames, n_max), float64
    """
    x = trajectory_positions(traj, length_scale)
    return internal_distances(x, find_chains(traj.topology) if chains is None else chains)
