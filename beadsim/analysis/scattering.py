"""Scattering: single-chain form factor P(q), total structure factor S(q), Kratky and Guinier analysis.

Form factor of a chain of N identical beads, averaged over orientations
(Debye's formula, the sum running over all ordered pairs including i = j):

    P(q) = (1/N^2) sum_i sum_j sin(q r_ij) / (q r_ij),   P(0) = 1.

Two routes give it:

* ``"exact"``: the double sum itself (compiled kernel), O(N^2 n_q) per chain and frame;
* ``"histogram"``: pair distances are first binned with linear weights on a
  grid of spacing ``dr`` (compiled kernel, O(N^2) per chain and frame), then the
  sum over bins is taken for every q. Since sin(x)/x has second derivative
  bounded by 1/3, the result differs from the exact one by at most
  ``(N-1)/N * (q dr)^2 / 24`` (see :func:`histogram_error_bound`).

``method="auto"`` uses the histogram for chains longer than
:data:`HISTOGRAM_MIN_BEADS` beads. The default ``dr = 0.02 / max(q)`` keeps the
bound below 1.7e-5.
"""

import logging
from dataclasses import dataclass

import numpy as np

from .._validate import as_array, positive, positive_int
from ..errors import AnalysisError, InputError
from ..kernels.scattering import debye_sum, linear_binned_pair_distances
from ._common import check_chains, check_length_scale, check_positions, group_by_length
from .trajectory import check_trajectory, find_chains, trajectory_positions

logger = logging.getLogger(__name__)

HISTOGRAM_MIN_BEADS = 100
"""Chains longer than this use the histogram route under ``method="auto"``."""

_DEFAULT_Q_DR = 0.02  # default bin width is this divided by max(q)


def histogram_error_bound(q, bin_width, n_beads):
    """Largest possible difference between histogram and exact P(q) for a chain of ``n_beads``.

    Parameters
    ----------
    q : array_like, shape (n_q,), float64
        Scattering vector magnitudes, unit 1/L.
    bin_width : float
        Histogram spacing, unit L.
    n_beads : int
        Chain length.

    Returns
    -------
    ndarray, shape (n_q,), float64
        ``(n_beads - 1) / n_beads * (q * bin_width)**2 / 24``.

    Raises
    ------
    InputError
        ``q`` not a finite 1-D array of values >= 0, ``bin_width`` not a finite number > 0,
        or ``n_beads`` not an integer >= 1.
    """
    q = as_array(q, "q", shape=(None,))
    if np.any(q < 0):
        raise InputError(f"q: scattering vector magnitudes must be >= 0, got minimum {q.min():g}")
    bin_width = positive(bin_width, "bin_width")
    n_beads = positive_int(n_beads, "n_beads")
    return (n_beads - 1) / n_beads * (q * bin_width) ** 2 / 24.0


def form_factor(positions, chains, q, method="auto", bin_width=None, *, chunk_elements=4_000_000):
    """Orientation-averaged single-chain form factor, averaged over frames and chains.

    Parameters
    ----------
    positions : array_like, shape (n_frames, n_beads, 3), float64
        Bead positions (chains whole), unit L.
    chains : sequence of array_like of int
        Bead indices of each chain; every chain counts with equal weight.
    q : array_like, shape (n_q,), float64
        Scattering vector magnitudes, unit 1/L, > 0.
    method : {"auto", "exact", "histogram"}
        Summation route (see the module notes).
    bin_width : float, optional
        Histogram spacing, unit L; default ``0.02 / max(q)``.
    chunk_elements : int
        Upper bound on floats gathered at once.

    Returns
    -------
    ndarray, shape (n_q,), float64
        P(q), with P(0) = 1.
    """
    x = check_positions(positions)
    chains = check_chains(chains, x.shape[1])
    q = as_array(q, "q", shape=(None,))
    if q.size == 0 or np.any(q <= 0):
        raise InputError("q: expected one or more values > 0")
    if method not in ("auto", "exact", "histogram"):
        raise InputError(f"method: expected 'auto', 'exact' or 'histogram', got {method!r}")
    dr = _DEFAULT_Q_DR / q.max() if bin_width is None else positive(bin_width, "bin_width")
    n_frames = x.shape[0]
    total = np.zeros(q.size)
    for _, index in group_by_length(chains):
        n_group, n = index.shape
        use_histogram = method == "histogram" or (method == "auto" and n > HISTOGRAM_MIN_BEADS)
        step = max(1, chunk_elements // (3 * index.size))

        def chunks():
            for start in range(0, n_frames, step):
                yield np.ascontiguousarray(x[start:start + step][:, index])

        if use_histogram:
            # no pair in a chain is farther apart than twice the largest distance from its centroid
            r_max = max(2.0 * np.sqrt(np.max(np.sum((c - c.mean(axis=2, keepdims=True)) ** 2, axis=-1)))
                        for c in chunks())
            n_bins = int(r_max / dr) + 3
            hist = sum(linear_binned_pair_distances(c, dr, n_bins) for c in chunks())
            r = dr * np.arange(n_bins)
            pair_sum = np.sinc(np.outer(q, r) / np.pi) @ hist
            logger.debug("form factor of %d-bead chains by histogram: %d bins of %g", n, n_bins, dr)
        else:
            pair_sum = sum(debye_sum(c, q).sum(axis=(0, 1)) for c in chunks())
        total += (n * n_group * n_frames + 2.0 * pair_sum) / (n * n)
    return total / (len(chains) * n_frames)


def debye_function(x):
    """Debye form factor of a Gaussian chain, ``2 (exp(-x) + x - 1) / x^2`` with ``x = q^2 Rg^2``.

    Debye, J. Phys. Colloid Chem. 51, 18 (1947). A Taylor series is used for
    x < 1e-3 to avoid cancellation.

    Parameters
    ----------
    x : array_like, float64
        ``(q Rg)^2`` >= 0.

    Returns
    -------
    ndarray, float64, same shape as ``x``
    """
    try:
        x = np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"x: expected numbers, got {type(x).__name__} ({exc})") from None
    small = x < 1e-3
    xs = np.where(small, 1.0, x)
    exact = 2.0 * (np.expm1(-xs) + xs) / xs ** 2
    series = 1.0 - x / 3.0 + x ** 2 / 12.0 - x ** 3 / 60.0
    return np.where(small, series, exact)


def kratky(q, p):
    """Kratky representation ``q^2 P(q)``.

    Parameters
    ----------
    q : array_like, shape (n_q,), float64
        Unit 1/L.
    p : array_like, shape (n_q,), float64
        Form factor.

    Returns
    -------
    ndarray, shape (n_q,), float64
        ``q^2 P(q)``, unit 1/L^2; a plateau at high q marks Gaussian statistics.
    """
    q = as_array(q, "q", shape=(None,))
    p = as_array(p, "p", shape=q.shape)
    return q * q * p


@dataclass(frozen=True)
class GuinierFit:
    """Guinier estimate of the radius of gyration.

    Attributes
    ----------
    rg : float
        Radius of gyration, unit L.
    rg_error : float
        Standard error from the fit residuals. It treats the q values as independent, which points of
        one P(q) are not; :mod:`beadsim.analysis.report` gives a block-jackknife error instead.
    q_min, q_max : float
        Fit range actually used, unit 1/L.
    n_points : int
        Number of q values in the fit.
    """

    rg: float
    rg_error: float
    q_min: float
    q_max: float
    n_points: int


GUINIER_MIN_POINTS = 5
"""Fewest q values for the three-parameter Guinier fit (two degrees of freedom left)."""


def guinier_fit(q, p):
    """Fit ``ln P = a - (Rg^2 / 3) q^2 + c q^4`` to every point given (see :func:`guinier_rg`).

    Parameters
    ----------
    q, p : ndarray, shape (m,), float64
        At least :data:`GUINIER_MIN_POINTS` scattering vectors (1/L) and positive form factors.

    Returns
    -------
    GuinierFit

    Raises
    ------
    AnalysisError
        Too few points, or ``ln P`` does not decrease with ``q^2`` at small q.
    """
    if q.size < GUINIER_MIN_POINTS or np.any(p <= 0):
        raise AnalysisError(f"Guinier fit needs {GUINIER_MIN_POINTS} or more q values with P > 0, got {q.size}")
    design = np.stack([np.ones_like(q), q ** 2, q ** 4], axis=1)
    coef, _, _, _ = np.linalg.lstsq(design, np.log(p), rcond=None)
    if coef[1] >= 0:
        raise AnalysisError("Guinier fit: ln P(q) does not decrease with q^2 at small q")
    residual = np.log(p) - design @ coef
    cov = np.linalg.inv(design.T @ design) * (residual @ residual) / (q.size - 3)
    rg = np.sqrt(-3.0 * coef[1])
    # d Rg / d (q^2 coefficient) = -3 / (2 Rg)
    return GuinierFit(rg=float(rg), rg_error=float(1.5 / rg * np.sqrt(cov[1, 1])), q_min=float(q.min()),
                      q_max=float(q.max()), n_points=int(q.size))


def guinier_rg(q, p, qrg_max=1.0, max_iterations=20):
    """Radius of gyration from the Guinier expansion of P(q) at small q.

    ``ln P(q) = -(q Rg)^2 / 3 + c (q Rg)^4 + ...`` holds for any particle (Guinier 1939); the plain
    straight line in ``q^2`` ignores the ``q^4`` term and is biased low: over ``q Rg < 1`` on the exact
    Debye function of a Gaussian chain (Debye, J. Phys. Colloid Chem. 51, 18, 1947; there
    ``c = 1/36``) it returns Rg 3.3 % too small. The ``q^4`` term is therefore fitted too (free ``c``,
    so it holds for any shape): the bias on the Debye curve is then below 0.1 %. The fit is repeated
    on the points with ``q Rg < qrg_max`` until the set of points stops changing.

    Parameters
    ----------
    q : array_like, shape (n_q,), float64
        Increasing scattering vector magnitudes, unit 1/L, > 0.
    p : array_like, shape (n_q,), float64
        Form factor, > 0 where used.
    qrg_max : float
        Upper limit of ``q Rg`` in the fit (1: common practice for chains).
    max_iterations : int
        Limit on refits.

    Returns
    -------
    GuinierFit

    Raises
    ------
    AnalysisError
        Fewer than :data:`GUINIER_MIN_POINTS` q values fall in the Guinier range, or the curve does
        not decrease there.
    InputError
        ``q`` not increasing and > 0, ``p`` not of the same shape, NaN or
        infinity in either, ``qrg_max`` not > 0 or ``max_iterations`` not >= 1.
    """
    q = as_array(q, "q", shape=(None,))
    p = as_array(p, "p", shape=q.shape)
    qrg_max = positive(qrg_max, "qrg_max")
    max_iterations = positive_int(max_iterations, "max_iterations")
    if np.any(q <= 0) or np.any(np.diff(q) <= 0):
        raise InputError("q: expected increasing scattering vector magnitudes > 0")
    use = (np.arange(q.size) < GUINIER_MIN_POINTS) & (p > 0)  # start from the smallest q
    for _ in range(max_iterations):
        if use.sum() < GUINIER_MIN_POINTS:
            raise AnalysisError(f"Guinier fit needs {GUINIER_MIN_POINTS} or more q values with q Rg < {qrg_max}; "
                                f"{int(use.sum())} available (extend q to smaller values)")
        fitted = use
        fit = guinier_fit(q[fitted], p[fitted])
        use = (q * fit.rg < qrg_max) & (p > 0)
        if np.array_equal(use, fitted):
            break
    return fit


@dataclass(frozen=True)
class StructureFactor:
    """Spherically averaged structure factor on the reciprocal lattice.

    Attributes
    ----------
    q : ndarray, shape (n_shells,), float64
        Mean |k| of the lattice vectors in each non-empty shell, unit 1/L.
    s : ndarray, shape (n_shells,), float64
        ``S(q) = <|sum_j exp(i k.r_j)|^2> / n_beads`` averaged over the shell's
        vectors and the frames.
    n_vectors : ndarray, shape (n_shells,), int64
        Lattice vectors per shell (counting k and -k once) per frame.
    """

    q: np.ndarray
    s: np.ndarray
    n_vectors: np.ndarray


def structure_factor(positions, box_lengths, q_max, shell_width=None, *, chunk_elements=4_000_000):
    """Total structure factor of a periodic system, evaluated on the reciprocal lattice.

    Wave vectors ``k = 2 pi (n_x/L_x, n_y/L_y, n_z/L_z)`` with integer n and
    ``0 < |k| <= q_max`` are used (one of each pair k, -k, which give the same
    value); the result is averaged over spherical shells of width ``shell_width``.
    Cost is O(n_frames n_beads n_k).

    Parameters
    ----------
    positions : array_like, shape (n_frames, n_beads, 3), float64
        All bead positions (wrapped or not), unit L.
    box_lengths : array_like, shape (n_frames, 3), float64
        Orthorhombic box edge lengths, unit L.
    q_max : float
        Largest |k|, unit 1/L.
    shell_width : float, optional
        Shell width, unit 1/L; default ``2 pi / max(box_lengths)``.
    chunk_elements : int
        Upper bound on complex phases held at once.

    Returns
    -------
    StructureFactor
    """
    x = check_positions(positions)
    box = as_array(box_lengths, "box_lengths", shape=(x.shape[0], 3))
    if np.any(box <= 0):
        raise InputError("box_lengths: every edge must be > 0")
    q_max = positive(q_max, "q_max")
    dq = 2.0 * np.pi / box.max() if shell_width is None else positive(shell_width, "shell_width")
    n_cut = np.ceil(q_max * box.max() / (2.0 * np.pi)).astype(int)
    grid = np.arange(-n_cut, n_cut + 1)
    n_vec = np.stack(np.meshgrid(grid, grid, grid, indexing="ij"), axis=-1).reshape(-1, 3)
    # keep one of each pair (n, -n): first non-zero component positive
    first = np.where(n_vec[:, 0] != 0, n_vec[:, 0], np.where(n_vec[:, 1] != 0, n_vec[:, 1], n_vec[:, 2]))
    n_vec = n_vec[first > 0]
    n_shells = int(np.ceil(q_max / dq))
    s_sum = np.zeros(n_shells)
    q_sum = np.zeros(n_shells)
    counts = np.zeros(n_shells, dtype=np.int64)
    for f in range(x.shape[0]):
        k = 2.0 * np.pi * n_vec / box[f]
        k_norm = np.linalg.norm(k, axis=1)
        keep = k_norm <= q_max
        k, k_norm = k[keep], k_norm[keep]
        shell = np.minimum((k_norm / dq).astype(int), n_shells - 1)
        step = max(1, chunk_elements // x.shape[1])
        for start in range(0, k.shape[0], step):
            phase = x[f] @ k[start:start + step].T
            s_k = (np.cos(phase).sum(axis=0) ** 2 + np.sin(phase).sum(axis=0) ** 2) / x.shape[1]
            sh = shell[start:start + step]
            s_sum += np.bincount(sh, weights=s_k, minlength=n_shells)
            q_sum += np.bincount(sh, weights=k_norm[start:start + step], minlength=n_shells)
            counts += np.bincount(sh, minlength=n_shells)
    filled = counts > 0
    if not np.any(filled):
        raise AnalysisError(f"structure factor: no reciprocal lattice vector with |k| <= {q_max}; increase q_max")
    return StructureFactor(q=q_sum[filled] / counts[filled], s=s_sum[filled] / counts[filled],
                           n_vectors=counts[filled] // x.shape[0])


def compute_form_factor(traj, q, chains=None, method="auto", bin_width=None, length_scale=None):
    """Form factor P(q), shape (n_q,), averaged over frames and chains of an mdtraj trajectory.

    Parameters
    ----------
    traj : mdtraj.Trajectory
        Trajectory with bonds in its topology; positions in nm.
    q : array_like, shape (n_q,), float64
        Scattering vector magnitudes, in 1/nm, or in 1/sigma if ``length_scale`` is given.
    chains : sequence of array_like of int, optional
        Default: connected components of the bond graph.
    method, bin_width
        As for :func:`form_factor` (``bin_width`` in the same length unit as positions).
    length_scale : float, optional
        nm per sigma.

    Returns
    -------
    ndarray, shape (n_q,), float64
    """
    x = trajectory_positions(traj, length_scale)
    chains = find_chains(traj.topology, require_linear=False) if chains is None else chains
    return form_factor(x, chains, q, method=method, bin_width=bin_width)


def compute_structure_factor(traj, q_max, shell_width=None, length_scale=None):
    """Total structure factor of a periodic mdtraj trajectory (orthorhombic box).

    Parameters
    ----------
    traj : mdtraj.Trajectory
        Periodic trajectory; positions in nm.
    q_max : float
        Largest |k|, in 1/nm, or in 1/sigma if ``length_scale`` is given.
    shell_width : float, optional
        As for :func:`structure_factor`.
    length_scale : float, optional
        nm per sigma.

    Returns
    -------
    StructureFactor
    """
    check_trajectory(traj)
    if traj.unitcell_lengths is None:
        raise AnalysisError("structure factor needs a periodic box, but the trajectory has no unit cell")
    if not np.allclose(traj.unitcell_angles, 90.0):
        raise AnalysisError("structure factor is implemented for orthorhombic boxes only (all angles 90 degrees)")
    scale = check_length_scale(length_scale)
    return structure_factor(np.asarray(traj.xyz, dtype=np.float64) / scale,
                            np.asarray(traj.unitcell_lengths, dtype=np.float64) / scale, q_max, shell_width)
