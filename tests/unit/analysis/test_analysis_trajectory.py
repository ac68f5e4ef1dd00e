"""Loading, chain finding and unwrapping; every bad input gives an AnalysisError naming the file."""

import mdtraj
import numpy as np
import pytest

from beadsim.analysis import compute_rg, find_chains, load_trajectory, trajectory_positions, unwrap_chains
from beadsim.errors import AnalysisError, InputError


@pytest.fixture
def small_traj(chain_topology):
    rng = np.random.default_rng(7)
    return mdtraj.Trajectory(rng.normal(size=(5, 12, 3)).astype(np.float32), chain_topology([7, 5]))


def test_missing_file_names_the_path(tmp_path):
    path = tmp_path / "absent.h5"
    with pytest.raises(AnalysisError, match=f"{path}: no such trajectory file"):
        load_trajectory(path)


def test_unreadable_file_names_the_path(tmp_path):
    path = tmp_path / "garbage.h5"
    path.write_bytes(b"this is not an HDF5 file" * 10)
    with pytest.raises(AnalysisError, match=rf"{path}: cannot be read as a trajectory"):
        load_trajectory(path)


@pytest.mark.parametrize("ext", [".xtc", ".dcd"])
def test_format_without_topology_needs_one(tmp_path, small_traj, ext):
    path = tmp_path / f"run{ext}"
    small_traj.save(str(path))
    with pytest.raises(AnalysisError, match=rf"{path}: the \{ext} format stores no topology"):
        load_trajectory(path)
    top = tmp_path / "run.pdb"
    small_traj[0].save(str(top))
    loaded = load_trajectory(path, top=top)
    # positions round-trip through the file format's own precision (xtc stores 0.001 nm)
    np.testing.assert_allclose(loaded.xyz, small_traj.xyz, atol=1e-3)


def test_missing_topology_file_is_named(tmp_path, small_traj):
    path = tmp_path / "run.dcd"
    small_traj.save(str(path))
    with pytest.raises(AnalysisError, match="nothere.pdb: no such topology file"):
        load_trajectory(path, top=tmp_path / "nothere.pdb")


def test_trajectory_without_bonds_is_refused(tmp_path):
    top = mdtraj.Topology()
    chain = top.add_chain()
    for _ in range(4):
        top.add_atom("B", mdtraj.element.carbon, top.add_residue("MON", chain))
    path = tmp_path / "nobonds.h5"
    mdtraj.Trajectory(np.zeros((2, 4, 3), np.float32), top).save_hdf5(str(path))
    with pytest.raises(AnalysisError, match=f"{path}: the topology has no bonds"):
        load_trajectory(path)


@pytest.mark.parametrize("frames", [(3, 9), (5, 5), (-1, 2), (0, 6), (2.0, 4)])
def test_frame_range_outside_file_is_refused(tmp_path, small_traj, frames):
    path = tmp_path / "run.h5"
    small_traj.save_hdf5(str(path))
    with pytest.raises(AnalysisError, match=rf"{path}: frame range .* lies outside the file, which holds frames 0..4"):
        load_trajectory(path, frames=frames)


def test_frame_range_inside_file_selects_frames(tmp_path, small_traj):
    path = tmp_path / "run.h5"
    small_traj.save_hdf5(str(path))
    loaded = load_trajectory(path, frames=(1, None))
    np.testing.assert_array_equal(loaded.xyz, small_traj.xyz[1:])


def test_chains_are_connected_components_in_backbone_order():
    # beads numbered out of backbone order: chain A is 4-0-3-1, chain B is 2-5-6; bead 7 is free
    top = mdtraj.Topology()
    chain = top.add_chain()
    atoms = [top.add_atom("B", mdtraj.element.carbon, top.add_residue("MON", chain)) for _ in range(8)]
    for a, b in [(0, 3), (4, 0), (3, 1), (5, 6), (2, 5)]:
        top.add_bond(atoms[a], atoms[b])
    chains = find_chains(top)
    # expected by construction; each chain starts from its lower-indexed end
    assert [c.tolist() for c in chains] == [[1, 3, 0, 4], [2, 5, 6]]


def test_branched_chain_is_refused_unless_allowed():
    top = mdtraj.Topology()
    chain = top.add_chain()
    atoms = [top.add_atom("B", mdtraj.element.carbon, top.add_residue("MON", chain)) for _ in range(4)]
    for k in (1, 2, 3):  # a star: bead 0 bonded to three arms
        top.add_bond(atoms[0], atoms[k])
    with pytest.raises(AnalysisError, match="not linear"):
        find_chains(top)
    assert sorted(find_chains(top, require_linear=False)[0].tolist()) == [0, 1, 2, 3]


def test_unwrapping_restores_chains_up_to_one_lattice_shift(periodic_walks):
    # minimum-image convention: exact while bonds and frame-to-frame moves are shorter than half the box
    box = 3.0
    x, traj = periodic_walks(seed=3, n_frames=60, chain_lengths=[40, 25], box=box)
    unwrapped = trajectory_positions(traj)
    chains = find_chains(traj.topology)
    for c in chains:
        shift = (x[:, c] - unwrapped[:, c]) / box  # must be one constant integer vector per chain
        # atol: positions were stored as float32 (relative precision 6e-8 of values up to ~10 nm,
        # accumulated over at most 40 bonds)
        np.testing.assert_allclose(shift, np.round(shift[0, 0]) * np.ones_like(shift), atol=1e-4 / box)


def test_rg_of_wrapped_periodic_trajectory_matches_mdtraj_on_unwrapped(periodic_walks):
    x, traj = periodic_walks(seed=4, n_frames=20, chain_lengths=[30, 30, 12], box=2.5)
    rg = compute_rg(traj)
    start = 0
    for k, n in enumerate([30, 30, 12]):
        # reference: mdtraj.compute_rg of the original (never wrapped) chain
        ref = mdtraj.compute_rg(mdtraj.Trajectory(x[:, start:start + n].astype(np.float32), None))
        np.testing.assert_allclose(rg[:, k], ref, rtol=1e-5)  # float32 storage
        start += n


def test_length_scale_reports_in_sigma(periodic_walks):
    _, traj = periodic_walks(seed=5, n_frames=4, chain_lengths=[10], box=5.0)
    np.testing.assert_allclose(compute_rg(traj, length_scale=0.5), compute_rg(traj) / 0.5, rtol=1e-12)


@pytest.mark.parametrize("positions, box_vectors, error, message", [
    (np.zeros((2, 12, 3)), "abc", InputError, "box_vectors: expected an array of float64, got str"),
    (np.zeros((2, 12, 3)), None, InputError, r"box_vectors: expected shape \(2, 3, 3\), got \(1,\)"),
    (np.zeros((2, 12, 3)), np.zeros((2, 3, 3)), InputError, "box_vectors: the box of frame 0 has zero volume"),
    (np.zeros((0, 12, 3)), np.zeros((0, 3, 3)), InputError, "positions: expected one or more frames, got none"),
    (np.zeros((1, 2, 3)), np.eye(3)[None], AnalysisError, "topology: has 12 atoms but positions hold 2 beads"),
])
def test_unwrap_chains_refuses_inconsistent_arguments(small_traj, positions, box_vectors, error, message):
    with pytest.raises(error, match=message):
        unwrap_chains(positions, small_traj.topology, box_vectors)
