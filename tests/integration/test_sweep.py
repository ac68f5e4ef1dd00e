"""`beadsim sweep`: a tiny study runs, resumes after a kill without redoing finished points,
and refuses bad study files with exit status 2."""

import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from beadsim import cli
from beadsim.studies.sweep import RESULTS_CSV, STORE_FILE

MODEL = """
[chains]
length = 12
[nonbonded]
potential = "{potential}"
[dynamics]
timestep = 0.005
[run]
seed = 1
equilibration_steps = 2000
production_steps = {steps}
[output]
frame_interval = 500
table_interval = 50
checkpoint_interval = 2000
"""


def _study(tmp_path, *, values="[1.5, 3.0]", lengths="[10, 14]", control="temperature", potential="lennard_jones",
           steps=8000, replicas=1, extra=""):
    (tmp_path / "model.toml").write_text(MODEL.format(potential=potential, steps=steps))
    path = tmp_path / "study.toml"
    path.write_text(f'[study]\nbase = "model.toml"\ncontrol = "{control}"\nvalues = {values}\n'
                    f"chain_lengths = {lengths}\nreplicas = {replicas}\nseed = 3\n{extra}")
    return path


def _statuses(out):
    with sqlite3.connect(out / STORE_FILE) as db:
        return dict(db.execute("SELECT key, status || ':' || attempts FROM points").fetchall())


def test_tiny_study_writes_tidy_results(tmp_path, capsys):
    path = _study(tmp_path)
    out = tmp_path / "out"
    assert cli.main(["sweep", str(path), "--out", str(out), "--workers", "2", "--quiet"]) == 0
    table = pd.read_csv(out / RESULTS_CSV)
    assert len(table) == 4
    assert set(table["n_beads"]) == {10, 14} and set(table["control"]) == {1.5, 3.0}
    for column in ("rg2", "rg2_error", "re2", "n_independent", "equilibration_cut", "heat_capacity"):
        assert column in table
    parquet = pd.read_parquet(out / "results.parquet")
    # an empty note is "" in Parquet but reads back from CSV as NaN; compare notes as text
    for frame in (parquet, table):
        frame["note"] = frame["note"].fillna("").astype(str)
    pd.testing.assert_frame_equal(parquet, table, check_dtype=False)
    assert "points: 4 done" in capsys.readouterr().out
    for name in ("kratky", "snapshots", "size_crossing", "transition"):
        assert (out / "figures" / f"{name}.png").stat().st_size > 0
    # each point keeps its form factor, normalised so that P(q) -> 1 - (q Rg)^2/3 as q -> 0 (Guinier law)
    point = table.iloc[-1]
    ff = pd.read_csv(Path(point["folder"]) / "form_factor.csv")
    assert ff["p"].iloc[0] == pytest.approx(1 - ff["q"].iloc[0] ** 2 * point["rg2"] / 3, abs=1e-3)
    # a second run finds everything done and re-runs nothing
    before = _statuses(out)
    assert cli.main(["sweep", str(path), "--out", str(out), "--quiet"]) == 0
    assert _statuses(out) == before


def test_killed_sweep_resumes_only_unfinished_points(tmp_path):
    path = _study(tmp_path, values="[1.5, 2.0, 2.5, 3.0]", steps=60000)
    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "beadsim", "sweep", str(path), "--out", str(out), "--workers", "1", "--quiet"]
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    deadline = time.time() + 240
    done_before = {}
    while time.time() < deadline:
        time.sleep(0.5)
        if (out / STORE_FILE).exists():
            try:
                done_before = {k: v for k, v in _statuses(out).items() if v.startswith("done")}
            except sqlite3.OperationalError:
                continue
            if done_before:
                break
    os.killpg(proc.pid, signal.SIGKILL)  # the coordinator and its workers
    proc.wait()
    assert done_before, "no point finished before the deadline"
    statuses = _statuses(out)
    assert any(not v.startswith("done") for v in statuses.values()), "the kill came too late to test resuming"
    assert cli.main(["sweep", str(path), "--out", str(out), "--workers", "2", "--quiet"]) == 0
    after = _statuses(out)
    for key, status in done_before.items():
        assert after[key] == status  # finished points were not run again
    assert all(v.startswith("done") for v in after.values())
    assert len(pd.read_csv(out / RESULTS_CSV)) == len(after)  # each point recorded exactly once


def _children(pid):
    """Direct child process ids of ``pid`` (Linux /proc)."""
    return {int(c) for t in Path(f"/proc/{pid}/task").iterdir() for c in (t / "children").read_text().split()}


def test_workers_stop_when_the_coordinator_is_killed(tmp_path):
    # kill -9 the coordinator only: its local-pool workers must not go on running points on their own
    path = _study(tmp_path, values="[1.5, 2.0]", steps=4_000_000)
    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "beadsim", "sweep", str(path), "--out", str(out), "--workers", "2", "--quiet"]
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    try:
        deadline = time.time() + 240
        while time.time() < deadline and not any((out / "points").glob("*/checkpoint.npz")):
            time.sleep(0.5)
        workers = {c for c in _children(proc.pid) if "spawn_main" in Path(f"/proc/{c}/cmdline").read_text()}
        assert workers, "no worker was running a point before the deadline"
        proc.kill()
        proc.wait()
        deadline = time.time() + 30
        while time.time() < deadline and any(Path(f"/proc/{w}").exists() for w in workers):
            time.sleep(0.2)
        assert not any(Path(f"/proc/{w}").exists() for w in workers), "workers outlived their coordinator"
    finally:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass


@pytest.mark.parametrize("kwargs, words", [
    ({"values": "[]"}, "range is empty"),
    ({"control": "depth"}, "cosine_squared"),
    ({"control": "pressure"}, "one of temperature, depth"),
    ({"extra": "repicas = 2\n"}, "did you mean 'replicas'"),
    ({"extra": "target_relative_error = 0.01\n"}, "max_production_steps"),
])
def test_bad_study_files_exit_2(tmp_path, capsys, kwargs, words):
    path = _study(tmp_path, **kwargs)
    assert cli.main(["sweep", str(path), "--out", str(tmp_path / "out"), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert words in err and "study.toml" in err and "Traceback" not in err


def test_single_chain_length_skips_estimators_that_need_two(tmp_path, capsys):
    """Fewer than two chain lengths: the N-crossing estimators report why they have no value; the rest runs."""
    path = _study(tmp_path, lengths="[12]", values="[1.5, 2.5, 3.5]")
    out = tmp_path / "out"
    assert cli.main(["sweep", str(path), "--out", str(out), "--workers", "2", "--quiet"]) == 0
    text = capsys.readouterr().out
    crossing = next(line for line in text.splitlines() if line.strip().startswith("crossing of 6N"))
    assert "chain length" in crossing and " - " in crossing
    assert (out / "figures" / "size_crossing.png").exists()
    assert (out / "study_summary.json").exists()


def test_point_stopped_while_extending_towards_its_target_resumes(tmp_path):
    """A point whose production run the target loop had already lengthened (a sweep stopped in that phase
    leaves the longer input in the point folder) resumes with that length instead of being refused as a run
    with a different input."""
    from beadsim.studies.sweep import point_settings, read_study, run_point

    path = _study(tmp_path, lengths="[10]", values="[3.0]", steps=2000,
                  extra="target_relative_error = 1e-6\nmax_production_steps = 8000\n")
    study, base = read_study(path)
    point = {"n_beads": 10, "control": 3.0, "replica": 0, "seed": 5}
    task = {"settings": point_settings(base, study, point), "folder": str(tmp_path / "point"),
            "target": study["target_relative_error"], "cap": study["max_production_steps"]}
    first = run_point(task)
    assert first["production_steps"] == 8000  # 2000 -> 4000 -> 8000: the target is out of reach
    again = run_point(task)  # as after a restart: same task, the folder holds the 8,000-step run
    assert again["production_steps"] == 8000 and again["rg2"] == first["rg2"]
