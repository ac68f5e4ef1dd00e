"""Build an mdtraj topology for bead-spring chains.

Layout: one mdtraj chain per polymer chain and one residue per bead, residue
name :data:`RESIDUE_NAME`, residue numbers counting beads from 1 within each
chain. One residue per bead keeps every bead individually addressable in
mdtraj selections (``resid``) and in PDB files, and round-trips unchanged
through mdtraj's HDF5 and PDB formats.

Element: every bead is given the element carbon. mdtraj needs an element for
each atom (mass-weighted analysis, file formats), and its "virtual site"
element does not survive a PDB round trip (it reads back as no element),
whereas carbon does. The element is only a label: beadsim's analysis takes
bead masses from the simulation's own data, never from the element, and
passes them explicitly (``mdtraj.compute_rg(traj, masses=...)``); without
``masses`` mdtraj weights every bead equally.
"""

import mdtraj
import numpy as np

from .._validate import as_array, positive_int
from ..errors import InputError

__all__ = ["RESIDUE_NAME", "DEFAULT_BEAD_NAME", "make_topology"]

#: Residue name of every bead (three letters, fits the PDB column).
RESIDUE_NAME = "MON"
#: Atom name used when no bead names are given.
DEFAULT_BEAD_NAME = "B"


def make_topology(chain_lengths, bonds, bead_names=None):
    """Return an mdtraj topology of linear or branched bead-spring chains.

    Parameters
    ----------
    chain_lengths : sequence of int, shape (n_chains,)
        Number of beads of each chain, each >= 1. Beads are numbered
        consecutively, chain after chain, as in the simulation's arrays.
    bonds : array_like of int, shape (n_bonds, 2)
        Pairs of bead indices (0-based, global) joined by a bond. Both beads
        of a bond must belong to the same chain; bonds across chains are
        refused because a topology chain must be one connected molecule for
        mdtraj's per-molecule tools.
    bead_names : sequence of str, shape (n_beads,), optional
        Atom name of each bead, e.g. its bead type (at most four characters so
        PDB files keep it). Default: :data:`DEFAULT_BEAD_NAME` for all beads.

    Returns
    -------
    mdtraj.Topology
        ``n_chains`` chains, ``n_beads`` residues named :data:`RESIDUE_NAME`
        holding one carbon atom each, and the given bonds.

    Raises
    ------
    beadsim.errors.InputError
        Non-positive chain lengths, malformed or out-of-range bonds, bonds
        between chains, self-bonds, duplicate bonds, or wrong bead names.
    """
    if isinstance(chain_lengths, (int, np.integer)):
        raise InputError("chain_lengths: expected a sequence of chain lengths, got a single integer")
    lengths = [positive_int(n, f"chain_lengths[{i}]") for i, n in enumerate(chain_lengths)]
    if not lengths:
        raise InputError("chain_lengths: at least one chain is needed")
    n_beads = sum(lengths)
    pairs = (np.zeros((0, 2), dtype=np.int64) if np.size(bonds) == 0
             else as_array(bonds, "bonds", shape=(None, 2), dtype=np.int64))
    if pairs.size and (pairs.min() < 0 or pairs.max() >= n_beads):
        raise InputError(f"bonds: bead indices must lie in [0, {n_beads - 1}], got range "
                         f"[{pairs.min()}, {pairs.max()}]")
    chain_of_bead = np.repeat(np.arange(len(lengths)), lengths)
    across = np.flatnonzero(chain_of_bead[pairs[:, 0]] != chain_of_bead[pairs[:, 1]])
    if across.size:
        i, j = pairs[across[0]]
        raise InputError(f"bonds[{across[0]}]: beads {i} and {j} belong to different chains")
    loops = np.flatnonzero(pairs[:, 0] == pairs[:, 1])
    if loops.size:
        raise InputError(f"bonds[{loops[0]}]: bead {pairs[loops[0], 0]} is bonded to itself")
    if len(np.unique(np.sort(pairs, axis=1), axis=0)) != len(pairs):
        raise InputError("bonds: the same pair of beads is listed more than once")

    if bead_names is None:
        names = [DEFAULT_BEAD_NAME] * n_beads
    else:
        names = list(bead_names)
        if len(names) != n_beads:
            raise InputError(f"bead_names: expected {n_beads} names (one per bead), got {len(names)}")
        bad = [n for n in names if not isinstance(n, str) or not n.isalnum() or len(n) > 4]
        if bad:
            raise InputError(f"bead_names: names must be 1 to 4 letters or digits, got {bad[0]!r}")

    top = mdtraj.Topology()
    atoms = []
    for length in lengths:
        chain = top.add_chain()
        for position in range(length):
            residue = top.add_residue(RESIDUE_NAME, chain, resSeq=position + 1)
            atoms.append(top.add_atom(names[len(atoms)], mdtraj.element.carbon, residue))
    for i, j in pairs:
        top.add_bond(atoms[i], atoms[j])
    return top
