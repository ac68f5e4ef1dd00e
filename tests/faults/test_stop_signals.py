"""Ctrl-C (SIGINT) and SIGTERM: a run stops at a checkpoint of the current step and resumes to the same end,
and beadsim leaves the caller's signal handlers as it found them, however a run or a study ends.

The caller's handler is a Python function installed by the test, so any change (beadsim's own handler left
behind, or the default put back) shows as a different object from ``signal.getsignal`` (Python's ``signal``
module is the reference). A signal the caller ignores stays ignored during a run, as Python itself leaves
SIGINT ignored when it starts with SIGINT ignored (the POSIX shell rule for commands started with ``&``
without job control).
"""

import os
import signal

import mdtraj
import numpy as np
import pytest

from beadsim import cli
from beadsim.config import read_settings
from beadsim.errors import InstabilityError
from beadsim.io import read_checkpoint
from beadsim.runner import _Recorder, run
from beadsim.studies.sweep import run_study

RUN = ("[chains]\nlength = 16\n[run]\nseed = 9\nequilibration_steps = 200\nproduction_steps = 1800\n"
       "[output]\nframe_interval = 100\ntable_interval = 50\ncheckpoint_interval = 400\n")
#: Step at which the test sends the signal: not a checkpoint step, so the stop's own checkpoint shows.
SIGNAL_STEP = 700
STUDY = ('[study]\nbase = "chain.toml"\ncontrol = "temperature"\nvalues = [2.0]\nchain_lengths = [8]\nseed = 1\n'
         "production_steps = 400\n")
SIGNALS = (signal.SIGINT, signal.SIGTERM)


def _caller_handler(signum, frame):
    raise AssertionError(f"the caller's handler ran for signal {signum}: beadsim should have caught it")


@pytest.fixture
def caller_handlers():
    """Install the caller's own handlers for SIGINT and SIGTERM; put the originals back afterwards."""
    saved = {sig: signal.signal(sig, _caller_handler) for sig in SIGNALS}
    yield
    for sig, handler in saved.items():
        signal.signal(sig, handler)


def _handlers():
    return {sig: signal.getsignal(sig) for sig in SIGNALS}


def _signal_at(monkeypatch, sig, step):
    """Make the run send ``sig`` to its own process when it records ``step``."""
    append = _Recorder.append

    def append_then_signal(self, snap):
        append(self, snap)
        if snap.step == step:
            os.kill(os.getpid(), sig)
    monkeypatch.setattr(_Recorder, "append", append_then_signal)


@pytest.mark.parametrize("sig", SIGNALS, ids=["SIGINT", "SIGTERM"])
def test_signal_checkpoints_the_current_step_and_resume_ends_as_an_uninterrupted_run(
        tmp_path, reference, caller_handlers, monkeypatch, capsys, tally, sig):
    (tmp_path / "chain.toml").write_text(RUN, encoding="utf-8")
    out = tmp_path / "out"
    before = _handlers()
    with monkeypatch.context() as patch:
        _signal_at(patch, sig, SIGNAL_STEP)
        status = cli.main(["run", str(tmp_path / "chain.toml"), "--out", str(out), "--quiet"])
    assert status == cli.EXIT_INTERRUPTED, capsys.readouterr().err
    assert _handlers() == before
    assert int(read_checkpoint(out / "checkpoint.npz")[0]["step_count"]) == SIGNAL_STEP
    assert cli.main(["run", str(tmp_path / "chain.toml"), "--out", str(out), "--quiet", "--resume"]) == 0
    same_table = (out / "observables.csv").read_bytes() == (reference / "observables.csv").read_bytes()
    a, b = mdtraj.load(str(out / "trajectory.h5")), mdtraj.load(str(reference / "trajectory.h5"))
    same_frames = a.n_frames == b.n_frames and np.array_equal(a.xyz, b.xyz) and np.array_equal(a.time, b.time)
    tally.add("Ctrl-C or SIGTERM during a run", injected=1, survived=int(same_table and same_frames),
              frames_lost=max(b.n_frames - a.n_frames, 0), frames_duplicated=max(a.n_frames - b.n_frames, 0))
    assert same_table and same_frames


def test_handlers_are_unchanged_after_a_run_that_ends_normally_or_blows_up(tmp_path, caller_handlers):
    (tmp_path / "chain.toml").write_text(RUN, encoding="utf-8")
    before = _handlers()
    assert cli.main(["run", str(tmp_path / "chain.toml"), "--out", str(tmp_path / "fine"), "--quiet"]) == 0
    assert _handlers() == before
    (tmp_path / "wild.toml").write_text(RUN + "[dynamics]\ntimestep = 0.5\n", encoding="utf-8")  # 100x too large
    with pytest.raises(InstabilityError):
        run(read_settings(tmp_path / "wild.toml"), tmp_path / "wild", progress=False)
    assert _handlers() == before


def test_an_ignored_sigint_stays_ignored_during_a_run(tmp_path, monkeypatch):
    (tmp_path / "chain.toml").write_text(RUN, encoding="utf-8")
    saved = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        _signal_at(monkeypatch, signal.SIGINT, SIGNAL_STEP)
        status = cli.main(["run", str(tmp_path / "chain.toml"), "--out", str(tmp_path / "out"), "--quiet"])
        assert signal.getsignal(signal.SIGINT) == signal.SIG_IGN
    finally:
        signal.signal(signal.SIGINT, saved)
    assert status == 0  # the run did not stop
    assert int(read_checkpoint(tmp_path / "out" / "checkpoint.npz")[0]["step_count"]) == 2000


class _FailingBackend:
    """A backend that starts but cannot take a task: the study stops with an error inside its pool block."""

    slots, broken_errors = 1, ()

    def __init__(self, workers=None):
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False

    def submit(self, fn, arg):
        raise RuntimeError("no worker can take this task")


@pytest.mark.parametrize("backend", ["local", "dask", _FailingBackend], ids=["local pool", "dask", "error"])
def test_handlers_are_unchanged_after_a_study(tmp_path, caller_handlers, long_faults, backend):
    if backend == "dask" and not long_faults:
        pytest.skip("starting a local dask cluster takes long: with --faults-long")
    (tmp_path / "chain.toml").write_text(RUN, encoding="utf-8")
    (tmp_path / "study.toml").write_text(STUDY, encoding="utf-8")
    before = _handlers()
    if backend is _FailingBackend:
        with pytest.raises(RuntimeError, match="no worker"):
            run_study(tmp_path / "study.toml", tmp_path / "out", backend=backend, progress=False)
    else:
        summary = run_study(tmp_path / "study.toml", tmp_path / "out", workers=1, backend=backend, progress=False)
        assert summary["points"]["done"] == 1
    assert _handlers() == before
