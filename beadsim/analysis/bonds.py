"""Local chain structure: bond lengths, bond angles, bond-vector correlations, persistence length.

Bonds and angles are taken along each chain's backbone order: bond k of a
chain joins its beads k and k+1, and the bond angle at bead k (0 < k < n-1) is
the angle between the vectors to beads k-1 and k+1 (pi for a straight chain).
The bond-vector correlation is ``C(s) = <b_k . b_{k+s}> / <b^2>`` averaged over
all bonds and chains; for a worm-like chain ``C(s) = exp(-s <b> / l_p)``, which
defines the persistence length l_p used here.
"""

from dataclasses import dataclass

import numpy as np

from .._validate import as_array, positive, positive_int
from ..errors import AnalysisError, InputError
from ._common import check_chains, check_positions, line_fit
from .trajectory import find_chains, trajectory_positions

_CHUNK_ELEMENTS = 4_000_000  # bond-vector components transformed at once (bounds memory)


def _bond_vectors(positions, chains):
    x = check_positions(positions)
    chains = check_chains(chains, x.shape[1])
    return [x[:, c[1:]] - x[:, c[:-1]] for c in chains]


def bond_lengths(positions, chains):
    """Length of every backbone bond in every frame.

    Parameters
    ----------
    positions : array_like, shape (n_frames, n_beads, 3), float64
        Bead positions (chains whole), unit L.
    chains : sequence of array_like of int
        Bead indices of each chain in backbone order.

    Returns
    -------
    ndarray, shape (n_frames, n_bonds), float64
        Bonds of all chains in chain order, unit L.
    """
    return np.concatenate([np.linalg.norm(b, axis=-1) for b in _bond_vectors(positions, chains)], axis=1)


def bond_angles(positions, chains):
    """Bond angle at every inner backbone bead in every frame.

    Parameters
    ----------
    positions, chains
        As for :func:`bond_lengths`; chains need three or more beads.

    Returns
    -------
    ndarray, shape (n_frames, n_angles), float64
        Angles in radians in [0, pi]; pi for a straight chain.
    """
    angles = []
    for b in _bond_vectors(positions, chains):
        if b.shape[1] < 2:
            raise AnalysisError("bond angles need chains of three or more beads")
        u, v = -b[:, :-1], b[:, 1:]
        cos = np.einsum("fka,fka->fk", u, v) / (np.linalg.norm(u, axis=-1) * np.linalg.norm(v, axis=-1))
        angles.append(np.arccos(np.clip(cos, -1.0, 1.0)))
    return np.concatenate(angles, axis=1)


EQUAL_SAMPLES = 1e-6
"""Relative spread below which :func:`distribution` treats its samples as equal (rigid bonds)."""


def distribution(values, bins=100, value_range=None):
    """Normalised histogram (probability density) of bond lengths or angles.

    Parameters
    ----------
    values : array_like, float64
        Samples, any shape (flattened).
    bins : int
        Number of bins.
    value_range : (float, float), optional
        Histogram range; default the sample range, or +- :data:`EQUAL_SAMPLES` (relative) about the
        samples when they are all equal to rounding (rigid bonds).

    Returns
    -------
    centres : ndarray, shape (bins,), float64
    density : ndarray, shape (bins,), float64
        Integrates to 1 over the range.
    """
    values = np.ravel(as_array(values, "values", finite=False))
    if values.size == 0 or (value_range is None and not np.all(np.isfinite(values))):
        raise AnalysisError("values: need samples, all finite unless value_range is given (the histogram's range "
                            "comes from the samples)")
    if value_range is None and np.ptp(values) <= EQUAL_SAMPLES * max(1.0, float(np.abs(values).max())):
        centre, half = float(values.mean()), EQUAL_SAMPLES * max(1.0, float(np.abs(values).max()))
        value_range = (centre - half, centre + half)  # all samples equal (rigid bonds): a narrow range about them
    try:
        density, edges = np.histogram(values, bins=bins, range=value_range, density=True)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(f"bins / value_range: {exc}") from None
    return 0.5 * (edges[1:] + edges[:-1]), density


def bond_correlation(positions, chains):
    """Bond-vector correlation ``C(s) = <b_k . b_{k+s}> / <b^2>`` along the backbone.

    Parameters
    ----------
    positions, chains
        As for :func:`bond_lengths`.

    Returns
    -------
    ndarray, shape (n_max - 1,), float64
        C(s) for s = 0 .. (longest chain's bonds - 1), averaged over frames,
        chains and bond pairs; C(0) = 1.
    """
    vectors = _bond_vectors(positions, chains)
    n_max = max(b.shape[1] for b in vectors)
    total = np.zeros(n_max)
    count = np.zeros(n_max)
    for b in vectors:
        n_frames, n = b.shape[:2]
        step = max(1, _CHUNK_ELEMENTS // (3 * n))
        for start in range(0, n_frames, step):
            spectrum = np.fft.rfft(b[start:start + step], n=2 * n, axis=1)
            power = np.sum(spectrum.real ** 2 + spectrum.imag ** 2, axis=-1)
            total[:n] += np.fft.irfft(power, n=2 * n, axis=1)[:, :n].sum(axis=0)
        count[:n] += n_frames * (n - np.arange(n))
    mean = total / count
    return mean / mean[0]


STIFFNESS_MIN_CORRELATION = float(np.exp(-1.0))
"""Smallest neighbouring-bond correlation C(1) for which :func:`persistence_length` quotes a value: below it
the persistence length is under one bond and the exponential has no range to be fitted over."""


@dataclass(frozen=True)
class PersistenceFit:
    """Persistence length from the decay of the bond-vector correlation.

    Attributes
    ----------
    length : float
        ``l_p = <b> / decay`` with ``C(s) = exp(-decay * s)``, unit L.
    error : float
        Standard error from the fit residuals (treats the separations as independent, which they are
        not; :mod:`beadsim.analysis.report` gives a block-jackknife error instead).
    s_max : int
        Largest separation used.
    """

    length: float
    error: float
    s_max: int


def persistence_length(correlation, mean_bond_length, cutoff=np.exp(-2.0), s_max=None):
    """Fit ``ln C(s) = -s <b> / l_p`` over s = 0 .. s_max, where C stays above ``cutoff``.

    The cutoff exp(-2) (the fit stops once the correlation has decayed by two
    e-folds, before noise dominates) is common practice.

    Parameters
    ----------
    correlation : array_like, shape (m,), float64
        C(s) from :func:`bond_correlation` (C(0) = 1).
    mean_bond_length : float
        ``<b>``, unit L.
    cutoff : float
        Fit only the leading points with C(s) > cutoff; 0 < cutoff < 1.
    s_max : int, optional
        Fit s = 0 .. s_max instead of the range the cutoff picks (for resampled copies of one data set,
        which must share the fit range of the whole).

    Returns
    -------
    PersistenceFit

    Raises
    ------
    AnalysisError
        Fewer than two values C(0), C(1); C(1) <= 1/e (:data:`STIFFNESS_MIN_CORRELATION`: no bending
        stiffness worth a persistence length); C(s) never falls below ``cutoff`` (contour too short for
        the decay); or fewer than three points above the cutoff.
    InputError
        ``correlation`` not a finite 1-D array, ``mean_bond_length`` not a finite
        number > 0, or ``cutoff`` outside (0, 1).
    """
    c = as_array(correlation, "correlation", shape=(None,))
    mean_bond_length = positive(mean_bond_length, "mean_bond_length")
    cutoff = positive(cutoff, "cutoff")
    if cutoff >= 1:
        raise InputError(f"cutoff: must lie between 0 and 1 (exclusive), got {cutoff!r}")
    if c.size < 2:
        raise AnalysisError(f"persistence length undefined: correlation holds {c.size} value(s), "
                            f"C(0) and at least C(1) are needed (chains of three or more beads)")
    if c[1] <= STIFFNESS_MIN_CORRELATION:
        raise AnalysisError(f"no persistence length worth quoting: neighbouring bonds correlate with C(1) = "
                            f"{c[1]:.3g} <= 1/e, a persistence length under one bond (a freely-jointed chain has "
                            "C(1) = 0): the chain has no bending stiffness to speak of")
    if s_max is not None:
        return _decay_fit(c, mean_bond_length, positive_int(s_max, "s_max"))
    below = np.flatnonzero(c <= cutoff)
    if not below.size:
        raise AnalysisError(f"persistence length not resolved: C(s) stays above {cutoff:.3g} over the whole chain "
                            f"(C = {c[-1]:.3g} at s = {c.size - 1}), so the contour is too short to show the decay")
    s_max = int(below[0]) - 1
    if s_max < 2:
        raise AnalysisError(f"persistence length not resolved: C(s) falls below {cutoff:.3g} at s = {s_max + 1}, "
                            "leaving fewer than three points to fit")
    return _decay_fit(c, mean_bond_length, s_max)


def _decay_fit(c, mean_bond_length, s_max):
    """Fit ``ln C(s) = -s <b> / l_p`` over s = 0 .. s_max."""
    if not 2 <= s_max < c.size or np.any(c[:s_max + 1] <= 0):
        raise AnalysisError(f"persistence-length fit over s = 0 .. {s_max}: needs 2 <= s_max < {c.size} and C > 0")
    s = np.arange(s_max + 1, dtype=np.float64)
    slope, _, cov, _ = line_fit(s, np.log(c[:s_max + 1]), what="persistence-length fit")
    decay, error = -slope, np.sqrt(cov[0, 0])
    length = mean_bond_length / decay
    return PersistenceFit(length=float(length), error=float(length * error / decay), s_max=int(s_max))


def compute_bond_lengths(traj, chains=None, length_scale=None):
    """Backbone bond lengths, shape (n_frames, n_bonds), of an mdtraj trajectory.

    Lengths in nm, or in sigma when ``length_scale`` (nm per sigma) is given.
    """
    x = trajectory_positions(traj, length_scale)
    return bond_lengths(x, find_chains(traj.topology) if chains is None else chains)


def compute_bond_angles(traj, chains=None):
    """Backbone bond angles in radians, shape (n_frames, n_angles), of an mdtraj trajectory."""
    x = trajectory_positions(traj)
    return bond_angles(x, find_chains(traj.topology) if chains is None else chains)
