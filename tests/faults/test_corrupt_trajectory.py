"""A broken file at the trajectory path (an HDF5 file cut short, as a writer appending to it in place leaves
when killed, or bytes that are not HDF5 at all) never gives a traceback on ``beadsim run --resume``.

* The checkpoint names no frame of that file (frames since the last join are in sealed parts): resume
  discards it without reading it and ends exactly as an uninterrupted run (table bytes, frames through
  ``mdtraj.load``, final checkpoint arrays).
* The checkpoint relies on frames in that file (a checkpoint written before trajectories were kept in parts,
  whose frames all went into the one file): resume stops with exit status 2 and an error naming the file and
  the way out; the checkpoint, the table and the broken file are left as they were.
"""

import mdtraj
import numpy as np
import pytest

from beadsim import cli
from beadsim.io import read_checkpoint, write_checkpoint
from beadsim.runner import _Recorder, frames_before

RUN = ("[chains]\nlength = 16\n[run]\nseed = 9\nequilibration_steps = 200\nproduction_steps = 1800\n"
       "[output]\nframe_interval = 100\ntable_interval = 50\ncheckpoint_interval = 400\n")
#: The run stops right after this checkpoint (the first is written at step 0): step 800, 6 frames sealed.
STOP_AFTER_CHECKPOINT = 3


def _stopped_run(tmp_path, monkeypatch):
    """A run stopped (as by Ctrl-C) right after its STOP_AFTER_CHECKPOINT-th checkpoint; returns its folder."""
    (tmp_path / "chain.toml").write_text(RUN, encoding="utf-8")
    checkpoint, calls = _Recorder.checkpoint, {"n": 0}

    def checkpoint_then_stop(self):
        checkpoint(self)
        calls["n"] += 1
        if calls["n"] == STOP_AFTER_CHECKPOINT:
            raise KeyboardInterrupt
    with monkeypatch.context() as patch:
        patch.setattr(_Recorder, "checkpoint", checkpoint_then_stop)
        assert cli.main(["run", str(tmp_path / "chain.toml"), "--out", str(tmp_path / "out"), "--quiet"]) == 130
    return tmp_path / "out"


def _broken_bytes(kind, reference):
    whole = (reference / "trajectory.h5").read_bytes()
    return whole[:len(whole) // 2] if kind == "cut short" else b"these bytes are not an HDF5 file\n" * 40


@pytest.mark.parametrize("kind", ["cut short", "not HDF5"])
def test_broken_trajectory_not_named_by_the_checkpoint_is_discarded_on_resume(
        tmp_path, reference, monkeypatch, capsys, tally, kind):
    out = _stopped_run(tmp_path, monkeypatch)
    _, meta = read_checkpoint(out / "checkpoint.npz")
    assert meta["trajectory"]["base_frames"] == 0 and meta["trajectory"]["parts"]  # frames are in parts only
    (out / "trajectory.h5").write_bytes(_broken_bytes(kind, reference))
    capsys.readouterr()
    status = cli.main(["run", str(tmp_path / "chain.toml"), "--out", str(out), "--quiet", "--resume"])
    err = capsys.readouterr().err
    assert status == 0, err
    assert (out / "observables.csv").read_bytes() == (reference / "observables.csv").read_bytes()
    a, b = mdtraj.load(str(out / "trajectory.h5")), mdtraj.load(str(reference / "trajectory.h5"))
    same = a.n_frames == b.n_frames and np.array_equal(a.xyz, b.xyz) and np.array_equal(a.time, b.time)
    tally.add("broken trajectory file left at the trajectory path", injected=1, survived=int(same),
              frames_lost=max(b.n_frames - a.n_frames, 0), frames_duplicated=max(a.n_frames - b.n_frames, 0))
    assert same
    arrays_a, _ = read_checkpoint(out / "checkpoint.npz")
    arrays_b, _ = read_checkpoint(reference / "checkpoint.npz")
    for name in arrays_b:
        np.testing.assert_array_equal(arrays_a[name], arrays_b[name], err_msg=name)


@pytest.mark.parametrize("kind", ["cut short", "not HDF5"])
def test_broken_trajectory_a_checkpoint_relies_on_stops_resume_with_a_clear_error(
        tmp_path, reference, monkeypatch, capsys, tally, kind):
    out = _stopped_run(tmp_path, monkeypatch)
    arrays, meta = read_checkpoint(out / "checkpoint.npz")
    del meta["trajectory"]  # as written before trajectories were kept in parts: every frame is in the one file
    write_checkpoint(out / "checkpoint.npz", arrays, meta)
    assert frames_before(int(arrays["step_count"]), {"output": {"frame_interval": 100},
                                                     "run": {"equilibration_steps": 200}}) == 6
    (out / "trajectory.h5").write_bytes(_broken_bytes(kind, reference))
    before = {name: (out / name).read_bytes() for name in ("checkpoint.npz", "observables.csv", "trajectory.h5")}
    capsys.readouterr()
    status = cli.main(["run", str(tmp_path / "chain.toml"), "--out", str(out), "--quiet", "--resume"])
    err = capsys.readouterr().err
    clear = status == 2 and err.startswith("beadsim: error:") and "Traceback" not in err
    tally.add("broken trajectory file left at the trajectory path", injected=1, survived=int(clear))
    assert clear, err
    assert "trajectory.h5" in err and "--overwrite" in err and "6 frames" in err, err
    assert {name: (out / name).read_bytes() for name in before} == before  # nothing already written is lost
