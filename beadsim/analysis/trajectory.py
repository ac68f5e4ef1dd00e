"""Loading trajectories, finding chains in the bond graph and making chains whole in periodic boxes.

Trajectories are read through mdtraj, so any format it reads works; formats
that store no topology (for example ``.xtc``, ``.dcd``, ``.trr``) need a
topology file as well. Positions come out of mdtraj in nm; pass
``length_scale`` (nm per sigma) to obtain reduced units.
"""

import logging
import os

import mdtraj
import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import breadth_first_order, connected_components

from .._validate import as_array
from ..errors import AnalysisError, InputError
from ..io.safety import refusing_pickles
from ._common import check_length_scale, check_positions

logger = logging.getLogger(__name__)

# Extensions whose files carry their own topology (mdtraj's own list).
_SELF_DESCRIBING = tuple(mdtraj.core.trajectory._TOPOLOGY_EXTS)


def load_trajectory(path, top=None, frames=None):
    """Read a trajectory file and check that it can be analysed as polymer chains.

    Parameters
    ----------
    path : str or os.PathLike
        Any file mdtraj reads (``.h5`` as written by beadsim, ``.pdb``, ``.dcd``, ...).
    top : str or os.PathLike, optional
        Topology file; required for formats that store none (``.xtc``, ``.dcd``, ...).
    frames : tuple of (int or None, int or None), optional
        Half-open frame range ``(start, stop)`` to keep; ``None`` ends are open.
        Negative values are not accepted.

    Returns
    -------
    mdtraj.Trajectory

    Raises
    ------
    AnalysisError
        The file is missing or unreadable, a topology is needed but not given,
        the topology has no bonds, or the frame range lies outside the file.
        The message names the file.
    """
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise AnalysisError(f"{path}: no such trajectory file")
    if top is not None:
        top = os.fspath(top)
        if not os.path.isfile(top):
            raise AnalysisError(f"{top}: no such topology file (given for {path})")
    elif not path.lower().endswith(_SELF_DESCRIBING):
        ext = os.path.splitext(path)[1] or "(no extension)"
        raise AnalysisError(
            f"{path}: the {ext} format stores no topology (bead names and bonds); "
            f"give a topology file too, e.g. the .h5 or .pdb file written with the run")
    try:
        with refusing_pickles(path):  # PyTables would unpickle HDF5 attributes: a file could run code
            traj = mdtraj.load(path, top=top) if top is not None else mdtraj.load(path)
    except Exception as exc:  # mdtraj raises many unrelated types for bad files
        raise AnalysisError(f"{path}: cannot be read as a trajectory ({type(exc).__name__}: {exc})") from None
    if traj.topology.n_bonds == 0:
        source = top if top is not None else path
        raise AnalysisError(f"{source}: the topology has no bonds, so no chains can be found")
    if frames is not None:
        traj = traj[_frame_slice(frames, traj.n_frames, path)]
    logger.info("loaded %s: %d frames, %d beads, %d bonds", path, traj.n_frames, traj.n_atoms, traj.topology.n_bonds)
    return traj


def _frame_slice(frames, n_frames, path):
    """Turn ``(start, stop)`` into a slice, raising AnalysisError if it lies outside ``n_frames``."""
    try:
        start, stop = frames
    except (TypeError, ValueError):
        raise AnalysisError(f"{path}: frames must be a pair (start, stop), got {frames!r}") from None
    start = 0 if start is None else start
    stop = n_frames if stop is None else stop
    ok = all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in (start, stop))
    if not ok or not 0 <= start < stop <= n_frames:
        raise AnalysisError(
            f"{path}: frame range {frames!r} lies outside the file, which holds frames 0..{n_frames - 1} "
            f"(need 0 <= start < stop <= {n_frames})")
    return slice(int(start), int(stop))


def _bond_graph(topology):
    """Sparse symmetric adjacency matrix of the topology's bonds."""
    if topology.n_bonds == 0:
        raise AnalysisError("the topology has no bonds, so no chains can be found")
    pairs = np.array([(a.index, b.index) for a, b in topology.bonds], dtype=np.int64)
    n = topology.n_atoms
    ones = np.ones(len(pairs))
    graph = coo_matrix((np.r_[ones, ones], (np.r_[pairs[:, 0], pairs[:, 1]], np.r_[pairs[:, 1], pairs[:, 0]])),
                       shape=(n, n)).tocsr()
    graph.data[:] = 1.0  # duplicated bonds count once
    return graph


def find_chains(topology, require_linear=True):
    """Find polymer chains as connected components (two or more beads) of the bond graph.

    Parameters
    ----------
    topology : mdtraj.Topology
        Must contain bonds.
    require_linear : bool
        If True, every chain must be a linear path (no branch points, no rings)
        and is returned in backbone order from its lower-indexed end. If False,
        branched or cyclic chains are accepted and returned in breadth-first order
        from their lowest-indexed bead; end-to-end and along-chain quantities are
        then meaningless.

    Returns
    -------
    list of ndarray of int64
        One index array per chain, ordered by the chain's lowest bead index.
        Beads without bonds (solvent, free particles) belong to no chain.

    Raises
    ------
    AnalysisError
        No bonds, or a non-linear chain while ``require_linear`` is True.
    """
    if not isinstance(topology, mdtraj.Topology):
        raise AnalysisError(f"topology: expected an mdtraj.Topology, got {type(topology).__name__}")
    graph = _bond_graph(topology)
    n_comp, labels = connected_components(graph, directed=False)
    degree = np.diff(graph.indptr)
    chains = []
    for comp in range(n_comp):
        members = np.flatnonzero(labels == comp)
        if members.size < 2:
            continue
        ends = members[degree[members] == 1]
        linear = ends.size == 2 and np.all(degree[members] <= 2)
        if require_linear and not linear:
            raise AnalysisError(
                f"chain containing beads {members[0]}..{members[-1]} is not linear "
                f"({ends.size} ends, largest bead degree {degree[members].max()}); "
                f"only linear chains have an end-to-end vector and a backbone order")
        root = ends.min() if linear else members[0]
        order, _ = breadth_first_order(graph, root, directed=False)
        chains.append(order.astype(np.int64))
    if not chains:
        raise AnalysisError("the bonds form no chain of two or more beads")
    logger.info("found %d chains (lengths %d..%d)", len(chains), min(map(len, chains)), max(map(len, chains)))
    return chains


def _minimum_image(delta, box_vectors):
    """Shift displacement vectors ``(n_frames, m, 3)`` by lattice vectors to their shortest image."""
    inverse = np.linalg.inv(box_vectors)
    fractional = np.einsum("fmj,fjk->fmk", delta, inverse)
    fractional -= np.round(fractional)
    return np.einsum("fmk,fkj->fmj", fractional, box_vectors)


def unwrap_chains(positions, topology, box_vectors):
    """Make chains whole across periodic boundaries and follow them continuously in time.

    Each chain is rebuilt along a breadth-first spanning tree of its bonds: a
    bead is placed at its parent plus the minimum-image bond vector. Each
    chain's root bead is first followed through time by adding minimum-image
    frame-to-frame displacements, so centre-of-mass motion stays continuous
    (valid while no bead moves more than half a box length between frames).

    Parameters
    ----------
    positions : ndarray, shape (n_frames, n_beads, 3), float64
        Wrapped positions, any length unit.
    topology : mdtraj.Topology
        Topology with bonds (n_atoms == n_beads).
    box_vectors : ndarray, shape (n_frames, 3, 3), float64
        Box vectors as rows, same unit as ``positions``.

    Returns
    -------
    ndarray, shape (n_frames, n_beads, 3), float64
        Unwrapped copy; beads in no chain are left where they were.

    Raises
    ------
    InputError
        ``positions`` or ``box_vectors`` of the wrong shape, empty, not finite,
        or a box of zero volume.
    AnalysisError
        ``topology`` not an mdtraj.Topology with bonds, or with another number of atoms than beads.
    """
    x = check_positions(positions).copy()
    if x.shape[0] == 0:
        raise InputError("positions: expected one or more frames, got none")
    if not isinstance(topology, mdtraj.Topology):
        raise AnalysisError(f"topology: expected an mdtraj.Topology, got {type(topology).__name__}")
    if topology.n_atoms != x.shape[1]:
        raise AnalysisError(f"topology: has {topology.n_atoms} atoms but positions hold {x.shape[1]} beads")
    box_vectors = as_array(box_vectors, "box_vectors", shape=(x.shape[0], 3, 3))
    flat = np.flatnonzero(np.linalg.det(box_vectors) == 0)
    if flat.size:
        raise InputError(f"box_vectors: the box of frame {flat[0]} has zero volume (linearly dependent vectors)")
    graph = _bond_graph(topology)
    n_comp, labels = connected_components(graph, directed=False)
    depth = np.full(x.shape[1], -1, dtype=np.int64)
    parent = np.full(x.shape[1], -1, dtype=np.int64)
    roots = []
    for comp in range(n_comp):
        members = np.flatnonzero(labels == comp)
        if members.size < 2:
            continue
        order, pred = breadth_first_order(graph, members[0], directed=False)
        roots.append(members[0])
        depth[order[0]] = 0
        for bead in order[1:]:  # breadth-first: a parent's depth is set before its children's
            parent[bead] = pred[bead]
            depth[bead] = depth[pred[bead]] + 1
    roots = np.array(roots, dtype=np.int64)
    steps = _minimum_image(np.diff(x[:, roots], axis=0), box_vectors[1:])
    x[1:, roots] = x[0, roots] + np.cumsum(steps, axis=0)
    for level in range(1, depth.max() + 1):
        beads = np.flatnonzero(depth == level)
        x[:, beads] = x[:, parent[beads]] + _minimum_image(x[:, beads] - x[:, parent[beads]], box_vectors)
    return x


def check_trajectory(traj, name="traj"):
    """Raise AnalysisError unless ``traj`` is an :class:`mdtraj.Trajectory`."""
    if not isinstance(traj, mdtraj.Trajectory):
        raise AnalysisError(f"{name}: expected an mdtraj.Trajectory (for example from beadsim.analysis."
                            f"load_trajectory), got {type(traj).__name__}")


def is_periodic(traj):
    """True if every frame of ``traj`` has a unit cell of positive volume (a zero box marks an open system)."""
    check_trajectory(traj)
    return traj.unitcell_vectors is not None and bool(np.all(np.abs(np.linalg.det(traj.unitcell_vectors)) > 0))


def trajectory_positions(traj, length_scale=None, unwrap=True):
    """Positions of a trajectory as float64, unwrapped if it is periodic, optionally in reduced units.

    Parameters
    ----------
    traj : mdtraj.Trajectory
        Positions in nm; bonds in the topology are needed when ``unwrap`` is True
        and the trajectory has a unit cell.
    length_scale : float, optional
        nm per sigma; if given, the result is in units of sigma, else in nm.
    unwrap : bool
        Make chains whole with :func:`unwrap_chains` when the trajectory is periodic
        (see :func:`is_periodic`).

    Returns
    -------
    ndarray, shape (n_frames, n_beads, 3), float64
    """
    check_trajectory(traj)
    scale = check_length_scale(length_scale)
    x = np.asarray(traj.xyz, dtype=np.float64) / scale
    if unwrap and is_periodic(traj):
        x = unwrap_chains(x, traj.topology, np.asarray(traj.unitcell_vectors, dtype=np.float64) / scale)
    return np.ascontiguousarray(x)
