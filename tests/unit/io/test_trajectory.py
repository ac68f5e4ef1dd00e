"""Trajectory writer: every format read back by mdtraj, truncation and continuation, topology kept."""

import os

import mdtraj
import numpy as np
import pytest
import tables

from beadsim.errors import InputError
from beadsim.io.topology import make_topology
from beadsim.io.trajectory import (SUPPORTED_SUFFIXES, TrajectoryWriter, count_frames, load_trajectory,
                                   topology_path, truncate_trajectory)

CHAINS = [8, 6, 10]  # 24 beads: more than 9, so XTC really compresses
SIGMA_NM = 0.47
BOX = np.array([9.0, 10.0, 11.0])
N_FRAMES = 8
# Largest read-back error in nm per format: HDF5 and DCD store float32 (exact float32 in HDF5, via Angstrom
# in DCD), XTC rounds to 0.001 nm, PDB to 0.001 Angstrom.
TOLERANCE_NM = {".h5": 0.0, ".dcd": 1e-6, ".xtc": 5e-4 + 1e-6, ".pdb": 5e-5 + 1e-6}
STORES_TIME = {".h5", ".xtc"}


def chain_bonds():
    bonds, start = [], 0
    for n in CHAINS:
        bonds += [(start + i, start + i + 1) for i in range(n - 1)]
        start += n
    return bonds


@pytest.fixture
def topology():
    return make_topology(CHAINS, chain_bonds())


@pytest.fixture
def frames():
    rng = np.random.default_rng(4242)
    walk = np.cumsum(rng.normal(scale=0.3, size=(N_FRAMES, sum(CHAINS), 3)), axis=1)
    return walk + rng.uniform(0, 5, size=(N_FRAMES, 1, 3))


def steps_and_times(n):
    steps = np.arange(n) * 200
    return steps, steps * 0.005


def write(path, topology, frames, box, first=0, mode="w"):
    steps, times = steps_and_times(len(frames))
    with TrajectoryWriter(path, topology, length_scale_nm=SIGMA_NM, box_lengths=box, mode=mode) as writer:
        for k in range(first, len(frames)):
            writer.append(int(steps[k]), float(times[k]), frames[k])
    return writer


@pytest.mark.parametrize("box", [None, BOX], ids=["open", "periodic"])
@pytest.mark.parametrize("suffix", SUPPORTED_SUFFIXES)
def test_mdtraj_reads_back_the_frames_written(tmp_path, topology, frames, suffix, box):
    path = tmp_path / f"run{suffix}"
    write(path, topology, frames, box)
    top_file = {} if suffix in (".h5", ".pdb") else {"top": topology_path(path)}
    traj = mdtraj.load(str(path), **top_file)  # reference reader: mdtraj itself
    assert traj.n_frames == N_FRAMES
    expected = (frames * SIGMA_NM).astype(np.float32)
    np.testing.assert_allclose(traj.xyz, expected, rtol=0, atol=TOLERANCE_NM[suffix])
    if suffix in STORES_TIME:
        np.testing.assert_array_equal(traj.time, steps_and_times(N_FRAMES)[1].astype(np.float32))
    if box is None:
        assert traj.unitcell_lengths is None
    else:
        np.testing.assert_allclose(traj.unitcell_lengths, np.tile(BOX * SIGMA_NM, (N_FRAMES, 1)), rtol=1e-6)
        np.testing.assert_allclose(traj.unitcell_angles, 90.0)
    bonds = sorted(tuple(sorted((b.atom1.index, b.atom2.index))) for b in traj.topology.bonds)
    assert bonds == sorted(chain_bonds())
    assert traj.topology.n_chains == len(CHAINS)


def test_hdf5_is_exact_and_compute_rg_matches_numpy(tmp_path, topology, frames):
    path = tmp_path / "run.h5"
    write(path, topology, frames, None)
    traj = mdtraj.load(str(path))
    np.testing.assert_array_equal(traj.xyz, (frames * SIGMA_NM).astype(np.float32))
    first_chain = traj.atom_slice(traj.topology.select("chainid 0"))
    xyz = frames[:, :CHAINS[0]] * SIGMA_NM
    rg_reference = np.sqrt(np.mean(np.sum((xyz - xyz.mean(axis=1, keepdims=True)) ** 2, axis=2), axis=1))
    np.testing.assert_allclose(mdtraj.compute_rg(first_chain), rg_reference, rtol=1e-5)


@pytest.mark.parametrize("box", [None, BOX], ids=["open", "periodic"])
@pytest.mark.parametrize("suffix", SUPPORTED_SUFFIXES)
@pytest.mark.parametrize("keep", [0, 3])
def test_truncate_and_continue_equals_uninterrupted_write(tmp_path, topology, frames, suffix, box, keep):
    whole, resumed = tmp_path / f"whole{suffix}", tmp_path / "resumed" / f"run{suffix}"
    resumed.parent.mkdir()
    write(whole, topology, frames, box)
    write(resumed, topology, frames[:6], box)  # ran past the checkpoint, then crashed
    truncate_trajectory(resumed, keep)
    assert count_frames(resumed) == keep
    writer = write(resumed, topology, frames, box, first=keep, mode="a")
    assert writer.n_frames == N_FRAMES
    a, b = load_trajectory(whole), load_trajectory(resumed)
    np.testing.assert_array_equal(b.xyz, a.xyz)
    np.testing.assert_array_equal(b.time, a.time)
    assert (a.unitcell_lengths is None) == (b.unitcell_lengths is None)
    if box is not None:
        np.testing.assert_array_equal(b.unitcell_lengths, a.unitcell_lengths)
    assert b.topology == a.topology
    assert sorted(p.name for p in resumed.parent.iterdir()) == sorted(
        [resumed.name] + ([] if suffix in (".h5", ".pdb") else ["topology.pdb"]))


def test_hdf5_truncation_cuts_every_per_frame_array(tmp_path, topology, frames):
    path = tmp_path / "run.h5"
    write(path, topology, frames, BOX)
    truncate_trajectory(path, 2)
    with tables.open_file(path) as h5:
        lengths = {node._v_name: node.nrows for node in h5.walk_nodes("/", classname="EArray")}
    assert lengths == {"coordinates": 2, "time": 2, "cell_lengths": 2, "cell_angles": 2}


def test_append_mode_without_existing_file_starts_one(tmp_path, topology, frames):
    write(tmp_path / "run.h5", topology, frames, None, mode="a")
    assert count_frames(tmp_path / "run.h5") == N_FRAMES


@pytest.mark.parametrize("suffix", SUPPORTED_SUFFIXES)
def test_continuing_with_other_system_is_refused(tmp_path, topology, frames, suffix):
    path = tmp_path / f"run{suffix}"
    write(path, topology, frames[:2], None)
    other = make_topology([5], [(0, 1)])
    with pytest.raises(InputError, match="beads per frame"):
        TrajectoryWriter(path, other, mode="a").append(0, 0.0, np.zeros((5, 3)))
    with pytest.raises(InputError, match="unit cell"):
        TrajectoryWriter(path, topology, box_lengths=BOX, mode="a").append(0, 0.0, frames[0])
    assert count_frames(path) == 2


@pytest.mark.parametrize("suffix", SUPPORTED_SUFFIXES)
def test_truncating_beyond_the_end_is_refused(tmp_path, topology, frames, suffix):
    path = tmp_path / f"run{suffix}"
    write(path, topology, frames[:2], None)
    with pytest.raises(InputError, match="only 2"):
        truncate_trajectory(path, 3)
    assert count_frames(path) == 2


def test_flush_makes_frames_readable_before_close(tmp_path, topology, frames):
    path = tmp_path / "run.xtc"
    writer = TrajectoryWriter(path, topology, length_scale_nm=SIGMA_NM)
    for k in range(3):
        writer.append(k, 0.1 * k, frames[k])
    writer.flush()
    assert mdtraj.load(str(path), top=topology_path(path)).n_frames == 3
    writer.close()
    writer.close()


def test_reset_discards_earlier_frames(tmp_path, topology, frames):
    path = tmp_path / "run.h5"
    writer = write(path, topology, frames, None)
    writer.reset()
    writer.append(0, 0.0, frames[0])
    writer.close()
    assert count_frames(path) == 1


@pytest.mark.parametrize("kwargs, message", [
    ({"path": "run.trr"}, "unknown trajectory format"),
    ({"topology": "not a topology"}, "mdtraj.Topology"),
    ({"length_scale_nm": 0.0}, "length_scale_nm"),
    ({"box_lengths": [1.0, 2.0]}, "box_lengths"),
    ({"box_lengths": [1.0, -2.0, 3.0]}, r"box_lengths\[1\]"),
    ({"mode": "x"}, "mode"),
])
def test_invalid_settings_are_refused(tmp_path, topology, kwargs, message):
    settings = {"path": "run.h5", "topology": topology, **kwargs}
    settings["path"] = tmp_path / settings["path"]
    with pytest.raises(InputError, match=message):
        TrajectoryWriter(**settings)


@pytest.mark.parametrize("step, time, positions, message", [
    (-1, 0.0, None, "step"),
    (2**31, 0.0, None, "step"),
    (0, float("nan"), None, "time"),
    (0, 0.0, np.zeros((3, 3)), "positions"),
    (0, 0.0, np.full((24, 3), np.inf), "NaN or infinity"),
])
def test_invalid_frames_are_refused(tmp_path, topology, frames, step, time, positions, message):
    writer = TrajectoryWriter(tmp_path / "run.h5", topology)
    with pytest.raises(InputError, match=message):
        writer.append(step, time, frames[0] if positions is None else positions)
    writer.close()


def test_pdb_refuses_systems_too_large_for_its_numbering(tmp_path):
    big = make_topology([50_000, 50_000], [])
    with pytest.raises(InputError, match="too many for PDB"):
        TrajectoryWriter(tmp_path / "run.dcd", big)
    TrajectoryWriter(tmp_path / "run.h5", big)  # HDF5 has no such limit


def test_missing_trajectory_gives_clear_errors(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        truncate_trajectory(tmp_path / "absent.h5", 0)
    with pytest.raises(InputError, match="does not exist"):
        count_frames(tmp_path / "absent.dcd")
    assert not os.path.exists(tmp_path / "absent.h5")
