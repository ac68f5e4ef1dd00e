"""`beadsim sweep` on Dask: a LocalCluster on 127.0.0.1 gives the local pool's results, a killed worker
costs no point and records none twice, Ctrl-C leaves a consistent store that the next run completes,
and bad ``--cluster`` values exit 2.

The tiny studies come from ``test_sweep`` (same model file, same store queries).
"""

from concurrent.futures import ThreadPoolExecutor
import json
import os
import signal
import sqlite3
import subprocess
import time

import pandas as pd
import psutil
import pytest
from distributed import Client, LocalCluster

from beadsim import cli
from beadsim.io import read_checkpoint
from beadsim.runner import CHECKPOINT_FILE, SUMMARY_FILE
from beadsim.studies.backends import ONE_THREAD, DaskCluster
from beadsim.studies.sweep import RESULTS_CSV, run_study
from test_sweep import _statuses, _study

#: Every test stops within this many seconds (the kill tests poll against it).
DEADLINE = 90


def _results(out):
    return pd.read_csv(out / RESULTS_CSV).sort_values("key").reset_index(drop=True)


def _listening_ips(process):
    """IP addresses the process and its children listen on (TCP)."""
    ips = set()
    for p in [process, *process.children(recursive=True)]:
        ips |= {c.laddr.ip for c in p.net_connections(kind="inet") if c.status == psutil.CONN_LISTEN}
    return ips


def test_local_dask_cluster_listens_on_loopback_only_with_one_numba_thread():
    with DaskCluster(cluster="local:2") as pool:
        assert pool.scheduler_address.startswith("tcp://127.0.0.1:")
        info = pool._client.scheduler_info()
        assert len(info["workers"]) == 2 and pool.slots == 2
        assert all(address.startswith("tcp://127.0.0.1:") for address in info["workers"])
        assert _listening_ips(psutil.Process()) == {"127.0.0.1"}  # no dashboard, nothing on other interfaces
        assert set(pool._client.run(os.getenv, "NUMBA_NUM_THREADS").values()) == {"1"}


def test_tiny_study_on_local_dask_cluster_matches_local_pool(tmp_path):
    path = _study(tmp_path)
    dask_out, pool_out = tmp_path / "dask", tmp_path / "pool"
    assert cli.main(["sweep", str(path), "--out", str(dask_out), "--cluster", "local:2", "--quiet"]) == 0
    assert cli.main(["sweep", str(path), "--out", str(pool_out), "--workers", "2", "--quiet"]) == 0
    dask_table, pool_table = _results(dask_out), _results(pool_out)
    assert len(dask_table) == 4 and set(_statuses(dask_out).values()) == {"done:1"}
    # one numba thread per worker on both backends, and the same seeds: the same trajectories, to the bit
    observables = ["rg2", "rg2_error", "re2", "potential_energy", "heat_capacity"]
    pd.testing.assert_frame_equal(dask_table[["key", *observables]], pool_table[["key", *observables]])
    for folder in dask_table["folder"]:
        assert json.loads((tmp_path / folder / SUMMARY_FILE).read_text())["numba_threads"] == 1


def _worker_mid_point(client, out, deadline):
    """Wait until a worker runs a point that has checkpointed past step 0; return ``(pid, key)`` (None at the deadline).

    The worker is the process holding the point's output files open.
    """
    def checkpointed(folder):
        path = folder / CHECKPOINT_FILE
        return path.exists() and read_checkpoint(path)[0]["step_count"] > 0 and not (folder / SUMMARY_FILE).exists()

    while time.time() < deadline:
        time.sleep(0.2)
        folders = {os.path.realpath(p): p.name for p in (out / "points").glob("*") if checkpointed(p)}
        for pid in client.run(os.getpid).values():
            for f in psutil.Process(pid).open_files():
                key = folders.get(os.path.dirname(os.path.realpath(f.path)))
                if key:
                    return pid, key
    return None


def test_killed_dask_worker_costs_no_point_and_records_none_twice(tmp_path):
    path = _study(tmp_path, steps=100000)
    out = tmp_path / "out"
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None, env=ONE_THREAD) as cluster, Client(cluster) as client, \
            ThreadPoolExecutor(1) as coordinator:
        # the study connects to this scheduler as to any running one; the test keeps its own client to kill a worker
        sweep = coordinator.submit(run_study, path, out, backend="dask", cluster=cluster.scheduler_address,
                                   progress=False)
        deadline = time.time() + DEADLINE
        found = _worker_mid_point(client, out, deadline)
        assert found, "no worker was inside a checkpointed point before the deadline"
        victim, killed_key = found
        os.kill(victim, signal.SIGKILL)
        summary = sweep.result(timeout=max(deadline - time.time(), 1))
    assert not summary["failed"]
    statuses = _statuses(out)
    assert set(statuses.values()) == {"done:1"}  # dask reran the point itself: one attempt in the store
    table = _results(out)
    assert sorted(table["key"]) == sorted(statuses)  # every point exactly once
    killed = json.loads((out / "points" / killed_key / SUMMARY_FILE).read_text())
    assert killed["final_step"] == 2000 + 100000
    if table.set_index("key").loc[killed_key, "restarted"]:
        # the kill left the point's HDF5 trajectory unreadable: by design the point reran from step 0
        assert killed["steps_this_invocation"] == killed["final_step"]
    else:
        assert 0 < killed["steps_this_invocation"] < killed["final_step"]  # resumed from its checkpoint


def test_ctrl_c_leaves_store_consistent_and_rerun_completes(tmp_path, beadsim_command, subprocess_env):
    # points long enough (about 7 s each, 2 rounds on 2 workers) that Ctrl-C lands while some are still to run, also on a
    # loaded machine where the store is polled late: after the first point, the other three are running or pending
    path = _study(tmp_path, values="[1.5, 2.0, 2.5, 3.0]", lengths="[12]", steps=300000)
    out = tmp_path / "out"
    cmd = [*beadsim_command, "sweep", str(path), "--out", str(out), "--cluster", "local:2", "--quiet"]
    # a terminal starts the command with Ctrl-C at its default action; a test suite started with '&' from a shell
    # without job control holds SIGINT ignored (POSIX shell rule; Python keeps it ignored), which a child inherits
    proc = subprocess.Popen(cmd, env=subprocess_env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                            start_new_session=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    try:
        deadline = time.time() + DEADLINE
        done_before = {}
        while time.time() < deadline and not done_before:
            time.sleep(0.3)
            try:
                done_before = {k: v for k, v in _statuses(out).items() if v.startswith("done")}
            except sqlite3.OperationalError:
                continue
        assert done_before, "no point finished before the deadline"
        os.killpg(proc.pid, signal.SIGINT)  # what Ctrl-C in a terminal does: the whole process group
        _, err = proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    assert proc.returncode == cli.EXIT_INTERRUPTED, err.decode()
    statuses = _statuses(out)
    assert not any(v.startswith("running") for v in statuses.values())  # handed-out points back to pending
    assert any(v.startswith("pending") for v in statuses.values()), "Ctrl-C came too late to test resuming"
    assert cli.main(["sweep", str(path), "--out", str(out), "--cluster", "local:2", "--quiet"]) == 0
    after = _statuses(out)
    assert all(after[key] == status for key, status in done_before.items())  # finished points not run again
    assert all(v.startswith("done") for v in after.values())
    assert sorted(_results(out)["key"]) == sorted(after)


@pytest.mark.parametrize("options, words", [
    (["--cluster", "local:0"], "'local:N'"),
    (["--cluster", "127.0.0.1:8786"], "tcp://HOST:PORT"),
    (["--cluster", "local:2", "--workers", "3"], "--workers 3 contradicts --cluster local:2"),
    (["--cluster", "tcp://127.0.0.1:8786", "--workers", "2"], "dask worker"),
])
def test_bad_cluster_option_exits_2(tmp_path, capsys, options, words):
    path = _study(tmp_path)
    assert cli.main(["sweep", str(path), "--out", str(tmp_path / "out"), "--quiet", *options]) == 2
    err = capsys.readouterr().err
    assert words in err and "Traceback" not in err
    assert not (tmp_path / "out").exists()  # refused before the study folder was made
