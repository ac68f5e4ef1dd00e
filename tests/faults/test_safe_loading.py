"""Nothing beadsim reads from a user's file can run code, and paths in input files cannot write outside the
output folder.

The pickle threat is shown first with the libraries themselves (reference: ``mdtraj.load`` of an HDF5
file whose attribute PyTables unpickles, and ``numpy.load(allow_pickle=True)``): the payload creates a
folder when unpickled, so whether code ran is visible. Then every beadsim path reading such files must
refuse them with a beadsim error and leave the folder uncreated.
"""

import os

import mdtraj
import numpy as np
import pytest
import tables

from beadsim import cli
from beadsim.analysis import load_trajectory as analysis_load
from beadsim.config import read_settings
from beadsim.errors import BeadsimError, InputError
from beadsim.io import TrajectoryWriter, load_trajectory, make_topology, read_checkpoint


class MakesFolderWhenUnpickled:
    """Unpickling this object calls ``os.mkdir(marker)``: proof of whether any code ran."""

    def __init__(self, marker):
        self.marker = str(marker)

    def __reduce__(self):
        return os.mkdir, (self.marker,)


@pytest.fixture
def poisoned_h5(tmp_path):
    """A valid beadsim trajectory whose root attribute ``title`` holds a pickled payload; (path, marker)."""
    path, marker = tmp_path / "shared.h5", tmp_path / "code_ran"
    top = make_topology([4], [(0, 1), (1, 2), (2, 3)])
    with TrajectoryWriter(path, top) as writer:
        for k in range(3):
            writer.append(k, float(k), np.arange(12.0).reshape(4, 3) + k)
    with tables.open_file(path, "a") as h5:
        h5.root._v_attrs.title = MakesFolderWhenUnpickled(marker)  # PyTables pickles it
    mdtraj.load(str(path))  # the threat, shown with mdtraj alone: loading runs the payload
    assert marker.is_dir()
    marker.rmdir()
    return path, marker


def test_hdf5_trajectory_with_a_pickled_attribute_is_refused_everywhere(poisoned_h5, tmp_path, capsys, tally):
    path, marker = poisoned_h5
    readers = {"beadsim.io.load_trajectory": lambda: load_trajectory(path),
               "beadsim.analysis.load_trajectory": lambda: analysis_load(path),
               "beadsim analyze": lambda: cli.main(["analyze", str(path), "--out", str(tmp_path / "an")])}
    for name, read in readers.items():
        try:
            status = read()
        except BeadsimError as exc:
            assert "pickled" in str(exc), (name, exc)
            status = 2
        tally.add("files carrying code (pickles)", injected=1, survived=int(status == 2 and not marker.exists()))
        assert status == 2, name
        assert not marker.exists(), name  # nothing was unpickled
    err = capsys.readouterr().err
    assert "pickled" in err and "Traceback" not in err


def test_checkpoint_with_a_pickled_array_is_refused(tmp_path, tally):
    marker = tmp_path / "code_ran"
    payload = np.empty(1, dtype=object)
    payload[0] = MakesFolderWhenUnpickled(marker)
    np.savez(tmp_path / "checkpoint.npz", positions=payload)
    with pytest.raises(BeadsimError, match="pickled Python object"):
        read_checkpoint(tmp_path / "checkpoint.npz")
    tally.add("files carrying code (pickles)", injected=1, survived=int(not marker.exists()))
    assert not marker.exists()


ESCAPES = ["../escape.h5", "/tmp/escape.h5", "sub/escape.h5", "..", "x.h5/../../escape.h5", "~/escape.h5",
           "./escape.h5", ""]


@pytest.mark.parametrize("name", ESCAPES)
def test_trajectory_name_cannot_point_outside_the_output_folder(name, tmp_path, tally):
    path = tmp_path / "chain.toml"
    path.write_text(f'[chains]\nlength = 8\n[run]\nseed = 1\n[output]\ntrajectory = "{name}"\n', encoding="utf-8")
    tally.add("output paths pointing outside the output folder", bad_inputs=1)
    with pytest.raises(InputError, match=r"\[output\] trajectory"):
        read_settings(path)


def test_a_run_writes_only_inside_its_output_folder(tmp_path):
    inputs, out = tmp_path / "inputs", tmp_path / "out"
    inputs.mkdir()
    (inputs / "bond.txt").write_text("0.5 50\n0.8 10\n1.0 0\n1.2 10\n1.5 60\n")  # tables may be read from anywhere
    (inputs / "chain.toml").write_text('[chains]\nlength = 8\n[bonds]\npotential = "table"\ntable = "bond.txt"\n'
                                       "[run]\nseed = 1\nequilibration_steps = 100\nproduction_steps = 300\n"
                                       "[output]\nframe_interval = 100\ncheckpoint_interval = 200\n",
                                       encoding="utf-8")
    before = {p for p in tmp_path.rglob("*")}
    assert cli.main(["run", str(inputs / "chain.toml"), "--out", str(out), "--quiet"]) == 0
    new = {p for p in tmp_path.rglob("*")} - before
    assert new and all(p == out or out in p.parents for p in new)
