"""A full disk (``OSError(ENOSPC)`` injected into a writer) stops ``beadsim run`` with a clear error and exit
status 2, leaves the last good checkpoint intact, and ``--resume`` with space again ends exactly as a run that
never failed (tables compared byte for byte, trajectories through ``mdtraj.load``).

Writers hit: the scalar table (its file's ``write``), a trajectory part (the HDF5 library's append, failing
as PyTables does with ``HDF5ExtError``), the checkpoint (``numpy.savez``) and the final join of the parts
(creating its temporary file).
"""

import errno
import os

import mdtraj
import numpy as np
import tables

from beadsim import cli
from beadsim.io import checkpoint as checkpoint_module
from beadsim.io import parts as parts_module
from beadsim.io import read_checkpoint
from beadsim.io import table as table_module
from beadsim.io.trajectory import _HDF5Format

RUN = ("[chains]\nlength = 16\n[run]\nseed = 9\nequilibration_steps = 200\nproduction_steps = 1800\n"
       "[output]\nframe_interval = 100\ntable_interval = 50\ncheckpoint_interval = 400\n")


def no_space():
    return OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


class _FullFile:
    """A text file that accepts ``budget`` more writes, then fails like a full disk after writing a few bytes."""

    def __init__(self, fh, budget):
        self._fh, self._budget = fh, budget

    def write(self, text):
        self._budget -= 1
        if self._budget < 0:
            self._fh.write(text[:7])
            raise no_space()
        return self._fh.write(text)

    def __getattr__(self, name):
        return getattr(self._fh, name)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self._fh.close()


def fail_table(monkeypatch, k):
    """The k-th row written to the table fails."""
    budget = {"left": k}

    def full_open(path, mode="r", *args, **kwargs):
        fh = open(path, mode, *args, **kwargs)
        if "w" in mode or "a" in mode:
            fh = _FullFile(fh, budget["left"] - (1 if "w" in mode else 0))  # "w" also writes the header
        return fh
    monkeypatch.setattr(table_module, "open", full_open, raising=False)


def fail_frame(monkeypatch, k):
    """The k-th trajectory frame fails inside the HDF5 library."""
    write, calls = _HDF5Format.write, {"n": 0}

    def full_write(self, handle, frames, topology, first_index):
        calls["n"] += 1
        if calls["n"] == k:
            raise tables.exceptions.HDF5ExtError("Problems appending the elements: No space left on device")
        return write(self, handle, frames, topology, first_index)
    monkeypatch.setattr(_HDF5Format, "write", full_write)


def fail_checkpoint(monkeypatch, k):
    """The k-th checkpoint fails after writing a few bytes."""
    calls = {"n": 0}

    class FullNumpy:
        def __getattr__(self, name):
            return getattr(np, name)

        def savez(self, file, **arrays):
            calls["n"] += 1
            if calls["n"] == k:
                file.write(b"PK\x03\x04 partial")
                raise no_space()
            return np.savez(file, **arrays)
    monkeypatch.setattr(checkpoint_module, "np", FullNumpy())


def fail_join(monkeypatch, k):
    """Joining the trajectory parts cannot create its temporary file."""
    def full_replacing_path(path):
        raise no_space()
    monkeypatch.setattr(parts_module, "replacing_path", full_replacing_path)


WRITERS = {"table": (fail_table, "observables.csv"), "trajectory part": (fail_frame, "part_"),
           "checkpoint": (fail_checkpoint, "checkpoint.npz"), "trajectory join": (fail_join, "trajectory.h5")}


def cases(long):
    ks = {"table": [5, 23, 38], "trajectory part": [2, 9, 17], "checkpoint": [2, 4, 6], "trajectory join": [1]}
    return [(w, k) for w, values in ks.items() for k in (values if long else values[:1])]


def test_full_disk_in_any_writer_exits_2_keeps_the_checkpoint_and_resume_completes(
        tmp_path, reference, long_faults, tally, monkeypatch, capsys):
    (tmp_path / "chain.toml").write_text(RUN, encoding="utf-8")
    for writer, k in cases(long_faults):
        out = tmp_path / f"{writer.replace(' ', '_')}_{k}"
        inject, names = WRITERS[writer]
        with monkeypatch.context() as patch:
            inject(patch, k)
            status = cli.main(["run", str(tmp_path / "chain.toml"), "--out", str(out), "--quiet"])
        err = capsys.readouterr().err
        assert status == 2, (writer, k, err)
        assert "Traceback" not in err and err.startswith("beadsim: error:")
        assert "No space left on device" in err and names in err and "--resume" in err or (
            writer == "checkpoint" and "previous checkpoint" in err), err
        arrays, _ = read_checkpoint(out / "checkpoint.npz")  # the last good checkpoint is intact
        step = int(arrays["step_count"])
        assert step % 400 == 0 or step == 2000
        assert not [p.name for p in out.iterdir() if ".tmp" in p.name]  # no temporary file left
        # space again: resume and finish exactly as the run that never failed
        status = cli.main(["run", str(tmp_path / "chain.toml"), "--out", str(out), "--quiet", "--resume"])
        capsys.readouterr()
        assert status == 0
        same_table = (out / "observables.csv").read_bytes() == (reference / "observables.csv").read_bytes()
        a, b = mdtraj.load(str(out / "trajectory.h5")), mdtraj.load(str(reference / "trajectory.h5"))
        same_frames = a.n_frames == b.n_frames and np.array_equal(a.xyz, b.xyz) and np.array_equal(a.time, b.time)
        tally.add("disk full (ENOSPC) in a writer", injected=1, survived=int(same_table and same_frames),
                  frames_lost=max(b.n_frames - a.n_frames, 0), frames_duplicated=max(a.n_frames - b.n_frames, 0))
        assert same_table and same_frames, (writer, k)
