"""``beadsim run`` killed with SIGKILL again and again, resumed each time, ends exactly as an uninterrupted run.

Kills come two ways: at a random moment (delay drawn from a seeded generator over the run's measured
length) and inside a chosen write (``_die_inside.py``: half a checkpoint, an unflushed HDF5 frame, a
sealed part without its checkpoint, half a table row, the trajectory join before and after its
rename). After the last kill the run is resumed to the end and compared with a run that was never
interrupted. References: ``mdtraj.load`` reads both trajectories; the tables are compared byte for
byte; checkpoints are read with ``numpy.load(allow_pickle=False)``. The expected frame steps follow
from the input (a frame every ``frame_interval`` steps after equilibration): a frame missing or
written twice shows as a count or a time that differs.
"""

import subprocess
import time
from pathlib import Path

import mdtraj
import numpy as np
import pytest

from beadsim import cli
from beadsim.io import read_checkpoint

HERE = Path(__file__).parent
RUN = dict(length=24, equilibration_steps=1000, production_steps=20000, frame_interval=100, table_interval=50,
           checkpoint_interval=1000, timestep=0.005)
OUTPUT_FILES = {"input.toml", "trajectory.h5", "observables.csv", "checkpoint.npz", "summary.json"}
#: Places inside writes where ``_die_inside.py`` kills the run, with the call count drawn up to this bound.
PLACES = {"checkpoint": 20, "frame": 200, "sealed": 20, "table": 400, "join_written": 1, "join_replaced": 1}


def run_input(path):
    p = RUN
    path.write_text(f"[chains]\nlength = {p['length']}\n[dynamics]\ntimestep = {p['timestep']}\n"
                    f"[run]\nseed = 5\nequilibration_steps = {p['equilibration_steps']}\n"
                    f"production_steps = {p['production_steps']}\n[output]\nframe_interval = {p['frame_interval']}\n"
                    f"table_interval = {p['table_interval']}\ncheckpoint_interval = {p['checkpoint_interval']}\n",
                    encoding="utf-8")
    return path


def expected_times():
    p = RUN
    steps = np.arange(0, p["equilibration_steps"] + p["production_steps"] + 1, p["frame_interval"])
    return (steps[steps > p["equilibration_steps"]] * p["timestep"]).astype(np.float32)


def frame_accounting(traj):
    """(frames lost, frames duplicated) of ``traj`` against the frame times an uninterrupted run writes."""
    want = expected_times()
    found, counts = np.unique(traj.time, return_counts=True)
    lost = len(np.setdiff1d(want, found))
    return lost, int((counts - 1).sum()) + len(np.setdiff1d(found, want))


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """An uninterrupted run in this process: (input file, output folder, wall seconds)."""
    folder = tmp_path_factory.mktemp("reference")
    path = run_input(folder / "chain.toml")
    started = time.monotonic()
    assert cli.main(["run", str(path), "--out", str(folder / "out"), "--quiet"]) == 0
    return path, folder / "out", time.monotonic() - started


def _table_stamp(out):
    table = out / "observables.csv"
    return table.stat().st_mtime_ns if table.exists() else None


def _remaining_fraction(out):
    """Fraction of the run still to do after the folder's checkpoint (1 without one)."""
    if not (out / "checkpoint.npz").exists():
        return 1.0
    step = int(read_checkpoint(out / "checkpoint.npz")[0]["step_count"])
    return 1.0 - step / (RUN["equilibration_steps"] + RUN["production_steps"])


def _kill_at_random(command, env, out, delay):
    """Start ``command``; once it works on the folder (the table is written or rewritten), wait ``delay`` s
    and SIGKILL it. Returns True if the kill landed, False if the run finished first."""
    before = _table_stamp(out)
    proc = subprocess.Popen(command, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + STARTUP
        while _table_stamp(out) == before and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.005)
        time.sleep(delay)
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=60)
            return True
        _, err = proc.communicate(timeout=60)
        assert proc.returncode == 0, err.decode()
        return False
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=60)


STARTUP = 600.0


def _run_command(python, path, out, prefix=("-m", "beadsim")):
    """Continue the run in ``out``, or start it afresh if the last attempt finished it."""
    again = "--overwrite" if (out / "summary.json").exists() else "--resume"
    return [python, *prefix, "run", str(path), "--out", str(out), "--quiet", again]


def test_kill_9_at_random_moments_and_inside_writes_loses_and_duplicates_no_frame(
        tmp_path, reference, long_faults, tally, subprocess_env, python):
    ref_path, ref_out, ref_seconds = reference
    path = run_input(tmp_path / "chain.toml")
    out = tmp_path / "out"
    rng = np.random.default_rng(20261202)  # the kill schedule: seed stated, so a failure can be replayed
    n_random, places = (18, list(PLACES)) if long_faults else (2, ["checkpoint", "frame"])
    bound = (lambda place: PLACES[place]) if long_faults else (lambda place: min(PLACES[place], 5))
    schedule = [(place, int(rng.integers(1, bound(place) + 1))) for place in places] + [("random", None)] * n_random
    if long_faults:
        rng.shuffle(schedule)  # the short version kills inside writes first, while most of the run is still ahead
    injected = 0
    for where, k in schedule:
        if where == "random":
            # the whole run takes about ref_seconds of work; a resumed one only what is left after its checkpoint
            delay = float(rng.uniform(0.0, ref_seconds * _remaining_fraction(out)))
            landed = _kill_at_random(_run_command(python, path, out), subprocess_env, out, delay)
        else:
            done = subprocess.run(_run_command(python, path, out, (str(HERE / "_die_inside.py"), where, str(k))),
                                  env=subprocess_env, capture_output=True, text=True, timeout=STARTUP)
            landed = done.returncode == -9
            assert landed or done.returncode == 0, done.stderr
            assert "Traceback" not in done.stderr
        injected += landed
    if (out / "summary.json").exists():
        (out / "summary.json").unlink()  # make the last command a resume, whatever the last kill did
    finish = subprocess.run(_run_command(python, path, out), env=subprocess_env, capture_output=True, text=True,
                            timeout=STARTUP)
    assert finish.returncode == 0, finish.stderr
    assert "Traceback" not in finish.stderr

    a, b = mdtraj.load(str(out / "trajectory.h5")), mdtraj.load(str(ref_out / "trajectory.h5"))
    lost, duplicated = frame_accounting(a)
    tally.add("kill -9 of a run (random moments and inside writes)", injected=injected,
              survived=injected if (lost, duplicated) == (0, 0) else 0, frames_lost=lost,
              frames_duplicated=duplicated)
    assert injected >= (20 if long_faults else 2)  # the kills landed mid-run (a late one may find the run done)
    assert (lost, duplicated) == (0, 0)
    assert b.n_frames == len(expected_times())
    np.testing.assert_array_equal(a.xyz, b.xyz)
    np.testing.assert_array_equal(a.time, b.time)
    assert (out / "observables.csv").read_bytes() == (ref_out / "observables.csv").read_bytes()
    arrays_a, meta_a = read_checkpoint(out / "checkpoint.npz")
    arrays_b, _ = read_checkpoint(ref_out / "checkpoint.npz")
    assert set(arrays_a) == set(arrays_b)
    for name in arrays_b:
        np.testing.assert_array_equal(arrays_a[name], arrays_b[name], err_msg=name)  # identical final state
    assert meta_a["trajectory"] == {"base_frames": b.n_frames, "parts": []}
    assert {p.name for p in out.iterdir()} == OUTPUT_FILES  # no part or temporary file left behind
