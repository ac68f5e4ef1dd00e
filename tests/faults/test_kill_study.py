"""A study whose workers and coordinator are killed with SIGKILL at random moments still records every point
exactly once, in a store that passes SQLite's own ``PRAGMA integrity_check`` (reference: SQLite).

Each round starts ``beadsim sweep`` (local pool) in its own process group, waits a random time drawn from a
seeded generator, and kills either one worker process (the pool is restarted and the point resumes from its
checkpoint) or the whole group, coordinator included (the next round resumes the study). A last round runs
the study to the end.
"""

import json
import os
import signal
import sqlite3
import subprocess
import time

import numpy as np
import pandas as pd
import psutil

from beadsim.studies.sweep import RESULTS_CSV, STORE_FILE, SUMMARY_FILE

MODEL = ("[chains]\nlength = 12\n[nonbonded]\npotential = \"lennard_jones\"\n[run]\nseed = 1\n"
         "equilibration_steps = 1000\nproduction_steps = 6000\n[output]\nframe_interval = 500\ntable_interval = 50\n"
         "checkpoint_interval = 1000\n")
STUDY = '[study]\nbase = "model.toml"\ncontrol = "temperature"\nvalues = [1.5, 3.0]\nchain_lengths = [10, 14]\nseed = 3\n'
TIMEOUT = 900.0


def _store_rows(out):
    with sqlite3.connect(out / STORE_FILE) as db:
        assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        return db.execute("SELECT key, status, attempts FROM points").fetchall()


def _workers(proc):
    try:
        return [c for c in psutil.Process(proc.pid).children(recursive=True) if "python" in c.name()]
    except psutil.NoSuchProcess:
        return []


def test_killed_workers_and_coordinator_record_every_point_once(tmp_path, long_faults, tally, subprocess_env,
                                                                python):
    (tmp_path / "model.toml").write_text(MODEL)
    (tmp_path / "study.toml").write_text(STUDY)
    out = tmp_path / "out"
    command = [python, "-m", "beadsim", "sweep", str(tmp_path / "study.toml"), "--out", str(out), "--workers", "2",
               "--quiet"]
    rng = np.random.default_rng(7)  # the kill schedule
    rounds = ["worker", "coordinator"] * (5 if long_faults else 1)
    injected = 0
    for victim in rounds:
        proc = subprocess.Popen(command, env=subprocess_env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                start_new_session=True)
        try:
            deadline = time.monotonic() + TIMEOUT
            while proc.poll() is None and time.monotonic() < deadline and len(_workers(proc)) < 2:
                time.sleep(0.1)  # the pool is up
            time.sleep(float(rng.uniform(0.5, 6.0)))
            if proc.poll() is None:
                if victim == "worker" and _workers(proc):
                    os.kill(_workers(proc)[-1].pid, signal.SIGKILL)
                    proc.wait(timeout=TIMEOUT)  # the coordinator restarts the pool and finishes
                else:
                    os.killpg(proc.pid, signal.SIGKILL)
                    proc.wait(timeout=60)
                injected += 1
        finally:
            if proc.poll() is None:
                os.killpg(proc.pid, signal.SIGKILL)
                proc.wait(timeout=60)
        _store_rows(out)  # never corrupt, whatever the kill hit
    done = subprocess.run(command, env=subprocess_env, capture_output=True, text=True, timeout=TIMEOUT)
    rows = _store_rows(out)
    results = pd.read_csv(out / RESULTS_CSV)
    once = sorted(results["key"]) == sorted(k for k, _, _ in rows) and results["key"].is_unique
    tally.add("kill -9 of study workers and coordinator", injected=injected,
              survived=injected if done.returncode == 0 and once and all(s == "done" for _, s, _ in rows) else 0)
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr
    assert len(rows) == 4 and all(status == "done" for _, status, _ in rows)
    assert once  # every point recorded exactly once
    summary = json.loads((out / SUMMARY_FILE).read_text())
    for key in ("beadsim", "numpy", "numba", "numba_threads_per_point", "seed", "study_sha256"):
        assert key in summary, key
    assert summary["seed"] == 3 and len(summary["study_sha256"]) == 64
