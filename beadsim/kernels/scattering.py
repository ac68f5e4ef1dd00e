"""Pair-distance sums over one chain: Debye sum, linearly binned distance histogram, Kirkwood sum.

All kernels take positions of one group of equally long chains as a contiguous
float64 array shaped ``(n_frames, n_chains, n_beads, 3)`` (any length unit) and
loop over the ``n_beads * (n_beads - 1) / 2`` distinct pairs of each chain, so the
cost is O(n_frames n_chains n_beads^2). Each kernel has a plain-NumPy twin named
``*_reference`` that the tests compare against; the twins build the full
distance matrix and are meant for small inputs only.
"""

import numpy as np
from numba import njit


@njit(cache=True)
def debye_sum(positions, q):
    """Orientation-averaged double sum ``sum_{i<j} sin(q r_ij) / (q r_ij)`` per frame and chain.

    Parameters
    ----------
    positions : ndarray, shape (n_frames, n_chains, n_beads, 3), float64
        Bead positions, length unit L.
    q : ndarray, shape (n_q,), float64
        Scattering vector magnitudes, unit 1/L, all > 0.

    Returns
    -------
    ndarray, shape (n_frames, n_chains, n_q), float64
        Sum over distinct pairs (i < j); the form factor is
        ``(n_beads + 2 * sum) / n_beads**2``.
    """
    n_frames, n_chains, n_beads, _ = positions.shape
    n_q = q.shape[0]
    out = np.zeros((n_frames, n_chains, n_q))
    for f in range(n_frames):
        for c in range(n_chains):
            for i in range(n_beads - 1):
                for j in range(i + 1, n_beads):
                    dx = positions[f, c, j, 0] - positions[f, c, i, 0]
                    dy = positions[f, c, j, 1] - positions[f, c, i, 1]
                    dz = positions[f, c, j, 2] - positions[f, c, i, 2]
                    r = np.sqrt(dx * dx + dy * dy + dz * dz)
                    for k in range(n_q):
                        x = q[k] * r
                        if x > 0.0:
                            out[f, c, k] += np.sin(x) / x
                        else:
                            out[f, c, k] += 1.0
    return out


def debye_sum_reference(positions, q):
    """NumPy twin of :func:`debye_sum` (same arguments and result)."""
    diff = positions[:, :, :, None, :] - positions[:, :, None, :, :]
    r = np.sqrt(np.sum(diff * diff, axis=-1))
    upper = np.triu_indices(positions.shape[2], k=1)
    r_pairs = r[:, :, upper[0], upper[1]]
    # np.sinc(x) = sin(pi x) / (pi x), with sinc(0) = 1
    return np.sinc(r_pairs[..., None] * q / np.pi).sum(axis=2)


@njit(cache=True)
def linear_binned_pair_distances(positions, bin_width, n_bins):
    """Histogram of intra-chain pair distances with linear (two-bin) weights, summed over frames and chains.

    A pair at distance r, with ``x = r / bin_width`` and ``k = floor(x)``, adds
    ``1 - (x - k)`` to bin ``k`` and ``x - k`` to bin ``k + 1``; bin ``k`` is
    centred on ``k * bin_width``. Summing ``h[k] f(k * bin_width)`` then equals
    the sum over pairs of the piecewise-linear interpolant of f, which differs
    from the exact sum by at most ``bin_width**2 / 8 * max|f''|`` per pair.

    Parameters
    ----------
    positions : ndarray, shape (n_frames, n_chains, n_beads, 3), float64
        Bead positions, length unit L.
    bin_width : float
        Bin spacing, unit L, > 0.
    n_bins : int
        Number of bins; must exceed ``max r / bin_width + 1``.

    Returns
    -------
    ndarray, shape (n_bins,), float64
        Weighted pair counts (total weight = number of distinct pairs times
        n_frames times n_chains).
    """
    n_frames, n_chains, n_beads, _ = positions.shape
    hist = np.zeros(n_bins)
    for f in range(n_frames):
        for c in range(n_chains):
            for i in range(n_beads - 1):
                for j in range(i + 1, n_beads):
                    dx = positions[f, c, j, 0] - positions[f, c, i, 0]
                    dy = positions[f, c, j, 1] - positions[f, c, i, 1]
                    dz = positions[f, c, j, 2] - positions[f, c, i, 2]
                    x = np.sqrt(dx * dx + dy * dy + dz * dz) / bin_width
                    k = int(x)
                    w = x - k
                    hist[k] += 1.0 - w
                    hist[k + 1] += w
    return hist


def linear_binned_pair_distances_reference(positions, bin_width, n_bins):
    """NumPy twin of :func:`linear_binned_pair_distances` (same arguments and result)."""
    diff = positions[:, :, :, None, :] - positions[:, :, None, :, :]
    r = np.sqrt(np.sum(diff * diff, axis=-1))
    upper = np.triu_indices(positions.shape[2], k=1)
    x = (r[:, :, upper[0], upper[1]] / bin_width).ravel()
    k = np.floor(x).astype(np.int64)
    w = x - k
    return (np.bincount(k, weights=1.0 - w, minlength=n_bins)
            + np.bincount(k + 1, weights=w, minlength=n_bins))[:n_bins]


@njit(cache=True)
def inverse_distance_sum(positions):
    """Kirkwood double sum ``sum_{i<j} 1 / r_ij`` per frame and chain.

    Parameters
    ----------
    positions : ndarray, shape (n_frames, n_chains, n_beads, 3), float64
        Bead positions, length unit L.

    Returns
    -------
    ndarray, shape (n_frames, n_chains), float64
        Sum over distinct pairs, unit 1/L; infinite where two beads of a chain coincide.
    """
    n_frames, n_chains, n_beads, _ = positions.shape
    out = np.zeros((n_frames, n_chains))
    for f in range(n_frames):
        for c in range(n_chains):
            s = 0.0
            for i in range(n_beads - 1):
                for j in range(i + 1, n_beads):
                    dx = positions[f, c, j, 0] - positions[f, c, i, 0]
                    dy = positions[f, c, j, 1] - positions[f, c, i, 1]
                    dz = positions[f, c, j, 2] - positions[f, c, i, 2]
                    r = np.sqrt(dx * dx + dy * dy + dz * dz)
                    s += 1.0 / r if r > 0.0 else np.inf
            out[f, c] = s
    return out


def inverse_distance_sum_reference(positions):
    """NumPy twin of :func:`inverse_distance_sum` (same arguments and result)."""
    diff = positions[:, :, :, None, :] - positions[:, :, None, :, :]
    r = np.sqrt(np.sum(diff * diff, axis=-1))
    upper = np.triu_indices(positions.shape[2], k=1)
    with np.errstate(divide="ignore"):
        return (1.0 / r[:, :, upper[0], upper[1]]).sum(axis=2)
