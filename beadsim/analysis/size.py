"""Chain size and shape: radius of gyration, end-to-end vector, gyration tensor, hydrodynamic radius.

Array-level functions take positions shaped ``(n_frames, n_beads, 3)`` (float64,
any length unit L) and chains as a sequence of integer index arrays in backbone
order, and return per-frame, per-chain values shaped ``(n_frames, n_chains, ...)``.
The ``compute_*`` wrappers take an :class:`mdtraj.Trajectory`, find the chains
in its bond graph, make them whole across periodic boundaries and report in nm
or, with ``length_scale`` (nm per sigma), in sigma.

Definitions (for a chain of N beads with positions r_i, masses m_i, M = sum m_i):

* gyration tensor ``S_ab = (1/M) sum_i m_i (r_ia - R_a)(r_ib - R_b)`` about the
  centre of mass R; ``Rg^2 = tr S`` (all m_i = 1 unless masses are given);
* eigenvalues ``l1 <= l2 <= l3`` of S; asphericity ``b = l3 - (l1 + l2)/2``;
  relative shape anisotropy ``kappa^2 = 1 - 3 (l1 l2 + l2 l3 + l3 l1) / (l1 + l2 + l3)^2``
  (0 for spherical symmetry, 1 for a rod);
* end-to-end vector ``Re = r_N - r_1``;
* Kirkwood hydrodynamic radius ``1/Rh = (1/N^2) sum_{i != j} 1/r_ij``
  (Kirkwood and Riseman, J. Chem. Phys. 16, 565, 1948 [from memory]). The per-frame value
  returned is ``N^2 / sum_{i != j} 1/r_ij``; the ensemble value is
  ``1 / mean(1/Rh)``, not ``mean(Rh)``.
"""

from dataclasses import dataclass

import numpy as np

from .._validate import as_array
from ..errors import AnalysisError, InputError
from ..kernels.scattering import inverse_distance_sum
from ._common import check_chains, check_positions, per_chain
from .trajectory import find_chains, trajectory_positions


def _check(positions, chains, masses=None):
    x = check_positions(positions)
    chains = check_chains(chains, x.shape[1])
    if masses is not None:
        masses = as_array(masses, "masses", shape=(x.shape[1],))
        if not np.all(masses > 0):
            raise InputError("masses: every bead mass must be > 0")
    return x, chains, masses


def _gyration_tensor_group(x, index, masses):
    """Gyration tensors of gathered chains ``x`` (n_frames, n_group, n, 3) -> (n_frames, n_group, 3, 3)."""
    if masses is None:
        d = x - x.mean(axis=2, keepdims=True)
        return np.einsum("fcia,fcib->fcab", d, d) / x.shape[2]
    w = masses[index] / masses[index].sum(axis=1, keepdims=True)  # (n_group, n)
    d = x - np.einsum("ci,fcia->fca", w, x)[:, :, None, :]
    return np.einsum("ci,fcia,fcib->fcab", w, d, d)


def radius_of_gyration(positions, chains, masses=None):
    """Radius of gyration of each chain in each frame.

    Parameters
    ----------
    positions : array_like, shape (n_frames, n_beads, 3), float64
        Bead positions (chains whole), unit L.
    chains : sequence of array_like of int
        Bead indices of each chain.
    masses : array_like, shape (n_beads,), float64, optional
        Bead masses for the mass-weighted Rg; equal masses if omitted.

    Returns
    -------
    ndarray, shape (n_frames, n_chains), float64
        Rg, unit L.
    """
    x, chains, masses = _check(positions, chains, masses)

    def rg(xg, index):
        if masses is None:
            d = xg - xg.mean(axis=2, keepdims=True)
            return np.sqrt(np.einsum("fcia,fcia->fc", d, d) / xg.shape[2])
        return np.sqrt(np.trace(_gyration_tensor_group(xg, index, masses), axis1=2, axis2=3))

    return per_chain(x, chains, rg)


def gyration_tensor(positions, chains, masses=None):
    """Gyration tensor of each chain in each frame.

    Parameters
    ----------
    positions, chains, masses
        As for :func:`radius_of_gyration`.

    Returns
    -------
    ndarray, shape (n_frames, n_chains, 3, 3), float64
        Symmetric tensor S about the centre of mass, unit L^2.
    """
    x, chains, masses = _check(positions, chains, masses)
    return per_chain(x, chains, lambda xg, index: _gyration_tensor_group(xg, index, masses), (3, 3))


@dataclass(frozen=True)
class Shape:
    """Shape descriptors of each chain in each frame.

    Attributes
    ----------
    eigenvalues : ndarray, shape (n_frames, n_chains, 3), float64
        Gyration-tensor eigenvalues in ascending order, unit L^2.
    asphericity : ndarray, shape (n_frames, n_chains), float64
        ``l3 - (l1 + l2)/2``, unit L^2.
    anisotropy : ndarray, shape (n_frames, n_chains), float64
        Relative shape anisotropy kappa^2, dimensionless in [0, 1].
    """

    eigenvalues: np.ndarray
    asphericity: np.ndarray
    anisotropy: np.ndarray


def shape_descriptors(positions, chains, masses=None):
    """Gyration-tensor eigenvalues, asphericity and relative shape anisotropy.

    Parameters
    ----------
    positions, chains, masses
        As for :func:`radius_of_gyration`.

    Returns
    -------
    Shape
    """
    lam = np.linalg.eigvalsh(gyration_tensor(positions, chains, masses))
    l1, l2, l3 = lam[..., 0], lam[..., 1], lam[..., 2]
    trace = l1 + l2 + l3
    return Shape(eigenvalues=lam,
                 asphericity=l3 - 0.5 * (l1 + l2),
                 anisotropy=1.0 - 3.0 * (l1 * l2 + l2 * l3 + l3 * l1) / trace ** 2)


def end_to_end_vector(positions, chains):
    """End-to-end vector ``r_last - r_first`` of each chain in each frame.

    Parameters
    ----------
    positions : array_like, shape (n_frames, n_beads, 3), float64
        Bead positions (chains whole), unit L.
    chains : sequence of array_like of int
        Bead indices of each chain in backbone order.

    Returns
    -------
    ndarray, shape (n_frames, n_chains, 3), float64
        Unit L.
    """
    x, chains, _ = _check(positions, chains)
    first = np.array([c[0] for c in chains])
    last = np.array([c[-1] for c in chains])
    return x[:, last] - x[:, first]


def end_to_end_distance(positions, chains):
    """Length of the end-to-end vector, shape (n_frames, n_chains), unit L (see :func:`end_to_end_vector`)."""
    return np.linalg.norm(end_to_end_vector(positions, chains), axis=-1)


def hydrodynamic_radius(positions, chains):
    """Kirkwood hydrodynamic radius of each chain in each frame (see the module notes).

    Cost is O(n_beads^2) per chain and frame (compiled kernel); subsample frames
    for long runs of long chains.

    Parameters
    ----------
    positions : array_like, shape (n_frames, n_beads, 3), float64
        Bead positions (chains whole), unit L; no two beads of a chain coincide.
    chains : sequence of array_like of int
        Bead indices of each chain.

    Returns
    -------
    ndarray, shape (n_frames, n_chains), float64
        ``N^2 / sum_{i != j} 1/r_ij``, unit L.

    Raises
    ------
    AnalysisError
        Two beads of a chain coincide in some frame (1/r_ij is infinite); the
        message names the first such frame and chain.
    """
    x, chains, _ = _check(positions, chains)

    def inverse_rh(xg, index):
        n = xg.shape[2]
        return 2.0 * inverse_distance_sum(np.ascontiguousarray(xg)) / (n * n)

    inverse = per_chain(x, chains, inverse_rh)
    if not np.all(np.isfinite(inverse)):
        frame, chain = (int(i) for i in np.argwhere(~np.isfinite(inverse))[0])
        raise AnalysisError(f"positions: two beads of chain {chain} (first bead {chains[chain][0]}) coincide in "
                            f"frame {frame}, so its hydrodynamic radius (sum of 1/r_ij) is undefined")
    return 1.0 / inverse


def mean_square_ratio(re, rg):
    """Ratio ``<Re^2> / <Rg^2>`` over all frames and chains (6 for long ideal chains).

    Parameters
    ----------
    re : array_like, shape (n_frames, n_chains), float64
        End-to-end distances, unit L.
    rg : array_like, shape (n_frames, n_chains), float64
        Radii of gyration of the same chains, unit L.

    Returns
    -------
    float

    Raises
    ------
    AnalysisError
        No values, or every radius of gyration is zero (the ratio is undefined).
    """
    re = as_array(re, "re", shape=(None, None))
    rg = as_array(rg, "rg", shape=re.shape)
    if rg.size == 0:
        raise AnalysisError("mean_square_ratio: undefined without values (re and rg are empty)")
    if not np.mean(rg ** 2) > 0:
        raise AnalysisError("mean_square_ratio: undefined, every radius of gyration is zero")
    return float(np.mean(re ** 2) / np.mean(rg ** 2))


def _prepare(traj, chains, length_scale):
    x = trajectory_positions(traj, length_scale)
    return x, find_chains(traj.topology) if chains is None else chains


def compute_rg(traj, chains=None, masses=None, length_scale=None):
    """Radius of gyration per frame and chain of an mdtraj trajectory.

    Parameters
    ----------
    traj : mdtraj.Trajectory
        Trajectory with bonds in its topology; positions in nm.
    chains : sequence of array_like of int, optional
        Chains to analyse; default: connected components of the bond graph.
    masses : array_like, shape (n_beads,), optional
        Bead masses for the mass-weighted Rg, taken from the simulation's own
        data (the topology's elements are labels only); equal masses if omitted.
    length_scale : float, optional
        nm per sigma; report in sigma if given, else in nm.

    Returns
    -------
    ndarray, shape (n_frames, n_chains), float64
    """
    x, chains = _prepare(traj, chains, length_scale)
    return radius_of_gyration(x, chains, masses)


def compute_end_to_end(traj, chains=None, length_scale=None):
    """End-to-end vectors, shape (n_frames, n_chains, 3), of an mdtraj trajectory (arguments as :func:`compute_rg`)."""
    x, chains = _prepare(traj, chains, length_scale)
    return end_to_end_vector(x, chains)


def compute_shape(traj, chains=None, length_scale=None):
    """:class:`Shape` descriptors of an mdtraj trajectory (arguments as :func:`compute_rg`)."""
    x, chains = _prepare(traj, chains, length_scale)
    return shape_descriptors(x, chains)


def compute_hydrodynamic_radius(traj, chains=None, length_scale=None):
    """Kirkwood hydrodynamic radius, shape (n_frames, n_chains), of an mdtraj trajectory.

    Arguments as for :func:`compute_rg`.
    """
    x, chains = _prepare(traj, chains, length_scale)
    return hydrodynamic_radius(x, chains)
