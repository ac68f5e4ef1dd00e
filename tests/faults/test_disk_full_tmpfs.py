"""A real full disk: ``beadsim run`` writing into a small tmpfs filesystem stops with exit status 2 and a
message naming the file, keeps its last checkpoint readable, and once space is freed ``--resume`` ends
exactly as a run that never failed (table bytes, frames through ``mdtraj.load``, final checkpoint arrays).

Unlike ``test_disk_full.py`` (an ``OSError`` injected into one writer), nothing is patched here: the
kernel refuses the write (``ENOSPC``) wherever the space runs out, inside the HDF5 library, NumPy's
``savez``, the table or the trajectory join. The filesystem is a tmpfs mounted for the test (root, or
the ``CAP_SYS_ADMIN`` capability, is needed; otherwise the test is skipped with the reason). The free
space left for each run is drawn from a seeded generator between nothing and more than a whole run
needs; a run that finishes (enough space) injects no fault and is not counted. Runs only with
``--faults-long``.
"""

import errno
import os
import shutil
import subprocess

import mdtraj
import numpy as np
import pytest

from beadsim.io import read_checkpoint

#: Table-heavy and frame-heavy, so that the space runs out in every kind of writer.
RUN = ("[chains]\nlength = 48\n[run]\nseed = 9\nequilibration_steps = 200\nproduction_steps = 3800\n"
       "[output]\nframe_interval = 20\ntable_interval = 10\ncheckpoint_interval = 400\n")
TOTAL_STEPS, CHECKPOINT_INTERVAL = 4000, 400
#: Size of the test filesystem; each run gets a random share of it, the rest is taken by a ballast file.
FS_BYTES = 4 * 2 ** 20
#: Output files a message may name.
OUTPUTS = ("observables.csv", "checkpoint.npz", "trajectory.h5", "trajectory_parts", "input.toml")
TIMEOUT = 600.0


@pytest.fixture
def small_fs(tmp_path, long_faults):
    """A tmpfs of FS_BYTES mounted on a fresh folder; unmounted afterwards."""
    if not long_faults:
        pytest.skip("real full-disk runs go with --faults-long")
    mount = tmp_path / "small"
    mount.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={FS_BYTES}", "tmpfs", str(mount)],
                          capture_output=True, text=True, check=False)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here (root or CAP_SYS_ADMIN needed): {done.stderr.strip()}")
    try:
        yield mount
    finally:
        subprocess.run(["umount", str(mount)], check=True)


def _free_bytes(folder):
    st = os.statvfs(folder)
    return st.f_bavail * st.f_frsize


def _leave_free(folder, budget):
    """Fill ``folder``'s filesystem with a ballast file until ``budget`` bytes are free."""
    with open(folder / "ballast", "wb") as fh:
        fh.write(b"\0" * max(_free_bytes(folder) - budget, 0))
    return _free_bytes(folder)


def _empty(folder):
    for entry in folder.iterdir():
        shutil.rmtree(entry) if entry.is_dir() else entry.unlink()


def _beadsim(python, env, *args):
    return subprocess.run([python, "-m", "beadsim", "run", *map(str, args), "--quiet"], env=env, capture_output=True,
                          text=True, timeout=TIMEOUT, check=False)


def test_runs_on_a_full_tmpfs_stop_cleanly_and_resume_exactly(tmp_path, small_fs, tally, subprocess_env, python):
    path = tmp_path / "chain.toml"
    path.write_text(RUN, encoding="utf-8")
    reference = tmp_path / "reference"
    assert _beadsim(python, subprocess_env, path, "--out", reference).returncode == 0
    # space the finished run's files take on this filesystem (pages, not bytes); a run needs more on the way
    # (parts beside the joined file, a checkpoint beside its replacement), so every budget below it must stop
    # the run, and budgets up to twice it may or may not
    assert _beadsim(python, subprocess_env, path, "--out", small_fs / "out").returncode == 0
    whole_run = FS_BYTES - _free_bytes(small_fs)
    rng = np.random.default_rng(20261203)  # the budgets: seed stated, so a failure can be replayed
    below, above = rng.uniform(0.0, whole_run, 9), rng.uniform(whole_run, 2.0 * whole_run, 3)
    budgets = sorted(int(b) for b in np.concatenate([below, above]))
    named, stopped = {}, 0
    for budget in budgets:
        _empty(small_fs)
        free = _leave_free(small_fs, budget)
        out = small_fs / "out"
        first = _beadsim(python, subprocess_env, path, "--out", out)
        if first.returncode == 0:
            continue  # enough space: no fault injected
        err = first.stderr
        assert first.returncode == 2, (free, err)
        assert "Traceback" not in err and "beadsim: error:" in err, (free, err)
        assert os.strerror(errno.ENOSPC) in err, (free, err)
        file = next((name for name in OUTPUTS if name in err), None)
        assert file is not None, (free, err)
        named[file] = named.get(file, 0) + 1
        stopped += 1
        step = None
        if (out / "checkpoint.npz").exists():  # a checkpoint written before the disk filled is intact
            step = int(read_checkpoint(out / "checkpoint.npz")[0]["step_count"])
            assert step % CHECKPOINT_INTERVAL == 0 or step == TOTAL_STEPS, step
        (small_fs / "ballast").unlink()  # space again
        again = _beadsim(python, subprocess_env, path, "--out", out, "--resume")
        assert again.returncode == 0, (free, again.stderr)
        same_table = (out / "observables.csv").read_bytes() == (reference / "observables.csv").read_bytes()
        a, b = mdtraj.load(str(out / "trajectory.h5")), mdtraj.load(str(reference / "trajectory.h5"))
        same_frames = a.n_frames == b.n_frames and np.array_equal(a.xyz, b.xyz) and np.array_equal(a.time, b.time)
        arrays_a, arrays_b = read_checkpoint(out / "checkpoint.npz")[0], read_checkpoint(reference / "checkpoint.npz")[0]
        same_state = all(np.array_equal(arrays_a[k], arrays_b[k]) for k in arrays_b)
        survived = same_table and same_frames and same_state
        tally.add("disk full on a real filesystem (tmpfs)", injected=1, survived=int(survived),
                  frames_lost=max(b.n_frames - a.n_frames, 0), frames_duplicated=max(a.n_frames - b.n_frames, 0))
        assert survived, (free, step, err, same_table, same_frames, same_state)
    print(f"tmpfs: whole run {whole_run} bytes; {stopped} of {len(budgets)} runs stopped by a full disk; "
          f"files named: {named}")
    assert stopped >= len(below)
