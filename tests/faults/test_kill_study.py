"""A study whose workers and coordinator are killed with SIGKILL at random moments still records every point
exactly once, loses and duplicates no frame of any point, and keeps a store that passes SQLite's own
``PRAGMA integrity_check`` (reference: SQLite).

``beadsim sweep`` (local pool, 2 workers) runs in its own process group. Kills are scheduled against the
study's observed progress (the steps recorded in the points' checkpoints), so they land while work remains
on a busy machine as on an idle one: before each kill the test draws, from a seeded generator, a share of
the remaining steps to wait for, then a further random delay of up to 0.3 s so that kills do not line up
with checkpoint writes. The victim is drawn too:

``worker``       one worker process (the coordinator restarts the pool, the point resumes from its checkpoint)
``coordinator``  the coordinator alone (its workers must notice and stop by themselves within seconds)
``group``        the whole process group, coordinator and workers together

After a coordinator or group kill the next round resumes the study. When the kills are done the study is
run to its end and once more (nothing may be recorded twice by a rerun). The expected frames of a point
follow from its input (a frame every ``frame_interval`` steps after equilibration).
"""

import json
import os
import signal
import sqlite3
import subprocess
import time

import mdtraj
import numpy as np
import pandas as pd
import psutil

from beadsim.config import read_settings
from beadsim.errors import BeadsimError
from beadsim.io import read_checkpoint
from beadsim.runner import CHECKPOINT_FILE, INPUT_FILE, SUMMARY_FILE as POINT_SUMMARY
from beadsim.studies.sweep import POINTS_DIR, RESULTS_CSV, STORE_FILE, SUMMARY_FILE

EQUILIBRATION, FRAME_INTERVAL = 1000, 500
MODEL = ("[chains]\nlength = 12\n[nonbonded]\npotential = \"lennard_jones\"\n[run]\nseed = 1\n"
         f"equilibration_steps = {EQUILIBRATION}\nproduction_steps = {{steps}}\n[output]\n"
         f"frame_interval = {FRAME_INTERVAL}\ntable_interval = 50\ncheckpoint_interval = 1000\n")
# max_attempts is far above the kills: a worker kill breaks the whole pool and costs every running point an
# attempt, and this test is about records, not about the retry limit
STUDY = ('[study]\nbase = "model.toml"\ncontrol = "temperature"\nvalues = {values}\nchain_lengths = {lengths}\n'
         "seed = 3\nmax_attempts = 1000\n")
#: (control values, chain lengths, production steps per point, kills scheduled, kills that must land).
#: Long: 8 points of 40,000 steps (about 5 s each on one idle core); short: 2 points of 12,000 steps.
LONG = ("[1.5, 2.0, 2.5, 3.0]", "[10, 14]", 40000, 24, 20)
SHORT = ("[1.5, 3.0]", "[10]", 12000, 2, 2)
VICTIMS = ("worker", "coordinator", "group")
#: Seconds any one wait may take (starting a sweep imports numba's cached kernels in every process).
TIMEOUT = 900.0
#: Seconds the workers of a killed coordinator may take to stop (they check their parent every second).
ORPHAN_TIMEOUT = 30.0


def _store_rows(out):
    with sqlite3.connect(out / STORE_FILE) as db:
        assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        return db.execute("SELECT key, status, attempts FROM points").fetchall()


def _workers(proc):
    """The pool's worker processes (spawned interpreters; not the resource tracker)."""
    try:
        children = psutil.Process(proc.pid).children(recursive=True)
    except psutil.NoSuchProcess:
        return []
    workers = []
    for child in children:
        try:
            if "spawn_main" in " ".join(child.cmdline()):
                workers.append(child)
        except psutil.NoSuchProcess:
            continue
    return workers


def _steps_done(out):
    """Steps recorded in the points' checkpoints (checkpoints are replaced atomically, so never half read)."""
    total = 0
    for path in (out / POINTS_DIR).glob(f"*/{CHECKPOINT_FILE}"):
        try:
            total += int(read_checkpoint(path)[0]["step_count"])
        except BeadsimError:  # removed between the listing and the read (a point started afresh)
            continue
    return total


def _wait_for_progress(proc, out, goal):
    """Wait until the study's checkpoints hold ``goal`` steps; True if reached with the sweep still running."""
    deadline = time.monotonic() + TIMEOUT
    while proc.poll() is None and time.monotonic() < deadline:
        if _steps_done(out) >= goal and _workers(proc):
            return True
        time.sleep(0.05)
    assert proc.poll() is not None, "the study made no progress before the deadline"
    return False


def _frame_accounting(out, steps):
    """(frames lost, frames duplicated) over all points, against the frames an uninterrupted point writes."""
    want = np.arange(EQUILIBRATION + FRAME_INTERVAL, EQUILIBRATION + steps + 1, FRAME_INTERVAL)
    lost = duplicated = 0
    for folder in sorted((out / POINTS_DIR).iterdir()):
        traj = mdtraj.load(str(folder / "trajectory.h5"))
        frame_steps = np.rint(traj.time / read_settings(folder / INPUT_FILE)["dynamics"]["timestep"]).astype(int)
        found, counts = np.unique(frame_steps, return_counts=True)
        lost += len(np.setdiff1d(want, found))
        duplicated += int((counts - 1).sum()) + len(np.setdiff1d(found, want))
        assert json.loads((folder / POINT_SUMMARY).read_text())["final_step"] == EQUILIBRATION + steps
    return lost, duplicated


def test_killed_workers_and_coordinator_record_every_point_once(tmp_path, long_faults, tally, subprocess_env,
                                                                python):
    values, lengths, steps, scheduled, needed = LONG if long_faults else SHORT
    (tmp_path / "model.toml").write_text(MODEL.format(steps=steps))
    (tmp_path / "study.toml").write_text(STUDY.format(values=values, lengths=lengths))
    n_points = len(json.loads(values)) * len(json.loads(lengths))
    study_steps = n_points * (EQUILIBRATION + steps)
    out = tmp_path / "out"
    command = [python, "-m", "beadsim", "sweep", str(tmp_path / "study.toml"), "--out", str(out), "--workers", "2",
               "--quiet"]
    rng = np.random.default_rng(7)  # the kill schedule: seed stated, so a failure can be replayed
    victims = ["worker", "group"] if not long_faults else [VICTIMS[i] for i in rng.choice(3, scheduled,
                                                                                           p=[0.5, 0.25, 0.25])]
    landed = dict.fromkeys(VICTIMS, 0)
    proc = None
    try:
        for left, victim in zip(range(len(victims), 0, -1), victims):
            if proc is None or proc.poll() is not None:
                proc = subprocess.Popen(command, env=subprocess_env, stdout=subprocess.DEVNULL,
                                        stderr=subprocess.DEVNULL, start_new_session=True)
            done = _steps_done(out)
            if not _wait_for_progress(proc, out, done + rng.uniform(0.2, 1.0) * (study_steps - done) / (left + 1)):
                break  # the study ended first: the remaining kills cannot land
            time.sleep(float(rng.uniform(0.0, 0.3)))
            workers = _workers(proc)
            if proc.poll() is not None or not workers:
                continue
            if victim == "worker":
                workers[int(rng.integers(len(workers)))].kill()
            elif victim == "coordinator":
                os.kill(proc.pid, signal.SIGKILL)
                proc.wait(timeout=60)
                _, alive = psutil.wait_procs(workers, timeout=ORPHAN_TIMEOUT)
                assert not alive, f"workers {[p.pid for p in alive]} outlived their killed coordinator"
            else:
                os.killpg(proc.pid, signal.SIGKILL)
                proc.wait(timeout=60)
            landed[victim] += 1
            _store_rows(out)  # never corrupt, whatever the kill hit
        if proc is not None:
            proc.wait(timeout=TIMEOUT)  # a sweep still running after the last kill ends by itself
    finally:
        if proc is not None and proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=60)
    finish = subprocess.run(command, env=subprocess_env, capture_output=True, text=True, timeout=TIMEOUT)
    again = subprocess.run(command, env=subprocess_env, capture_output=True, text=True, timeout=TIMEOUT)
    rows = _store_rows(out)
    results = pd.read_csv(out / RESULTS_CSV)
    once = sorted(results["key"]) == sorted(k for k, _, _ in rows) and results["key"].is_unique
    all_done = len(rows) == n_points and all(status == "done" for _, status, _ in rows)
    lost, duplicated = _frame_accounting(out, steps)
    ok = finish.returncode == 0 and again.returncode == 0 and once and all_done and (lost, duplicated) == (0, 0)
    injected = sum(landed.values())
    tally.add("kill -9 of a study worker", injected=landed["worker"], survived=landed["worker"] if ok else 0,
              frames_lost=lost, frames_duplicated=duplicated)
    tally.add("kill -9 of a study coordinator (alone, or with its workers)",
              injected=landed["coordinator"] + landed["group"],
              survived=landed["coordinator"] + landed["group"] if ok else 0)
    print(f"study kills landed: {landed} of {len(victims)} scheduled")
    assert finish.returncode == 0 and again.returncode == 0, finish.stderr + again.stderr
    assert "Traceback" not in finish.stderr + again.stderr
    assert all_done and once  # every point recorded exactly once, also after a rerun of the finished study
    assert (lost, duplicated) == (0, 0)
    assert injected >= needed, landed
    summary = json.loads((out / SUMMARY_FILE).read_text())
    for key in ("beadsim", "numpy", "numba", "numba_threads_per_point", "seed", "study_sha256"):
        assert key in summary, key
    assert summary["seed"] == 3 and len(summary["study_sha256"]) == 64
