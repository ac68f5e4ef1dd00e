"""Topology of bead-spring chains as mdtraj sees it."""

import mdtraj
import numpy as np
import pytest

from beadsim.errors import InputError
from beadsim.io.topology import DEFAULT_BEAD_NAME, RESIDUE_NAME, make_topology


def linear_bonds(chain_lengths):
    bonds, start = [], 0
    for n in chain_lengths:
        bonds += [(start + i, start + i + 1) for i in range(n - 1)]
        start += n
    return np.array(bonds, dtype=np.int64).reshape(-1, 2)


def test_one_chain_per_polymer_and_one_residue_per_bead():
    top = make_topology([5, 3, 1], linear_bonds([5, 3, 1]))
    assert top.n_chains == 3 and top.n_residues == 9 and top.n_atoms == 9
    assert [c.n_atoms for c in top.chains] == [5, 3, 1]
    assert {r.name for r in top.residues} == {RESIDUE_NAME}
    assert [r.resSeq for r in top.chain(1).residues] == [1, 2, 3]
    assert {a.element for a in top.atoms} == {mdtraj.element.carbon}
    assert {a.name for a in top.atoms} == {DEFAULT_BEAD_NAME}
    pairs = sorted((b.atom1.index, b.atom2.index) for b in top.bonds)
    assert pairs == [tuple(p) for p in linear_bonds([5, 3, 1])]


def test_bead_names_become_atom_names_and_mdtraj_can_select_them():
    top = make_topology([4], linear_bonds([4]), bead_names=["A", "A", "B", "B"])
    np.testing.assert_array_equal(top.select("name B"), [2, 3])  # mdtraj's own selection language


def test_branched_chain_and_no_bonds():
    top = make_topology([4], [(0, 1), (1, 2), (1, 3)])
    assert top.n_bonds == 3
    assert make_topology([1, 1], []).n_bonds == 0


@pytest.mark.parametrize("chain_lengths, bonds, names, message", [
    ([3, 0], [], None, r"chain_lengths\[1\]"),
    (4, [], None, "single integer"),
    ([], [], None, "at least one chain"),
    ([3], [(0, 3)], None, r"\[0, 2\]"),
    ([2, 2], [(1, 2)], None, "different chains"),
    ([3], [(1, 1)], None, "itself"),
    ([3], [(0, 1), (1, 0)], None, "more than once"),
    ([3], [(0, 1, 2)], None, "shape"),
    ([2], [(0, 1)], ["A"], "expected 2 names"),
    ([2], [(0, 1)], ["A", "TOOLONG"], "1 to 4"),
])
def test_invalid_input_is_refused(chain_lengths, bonds, names, message):
    with pytest.raises(InputError, match=message):
        make_topology(chain_lengths, bonds, bead_names=names)
