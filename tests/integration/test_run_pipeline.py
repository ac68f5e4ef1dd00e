"""``beadsim run`` end to end: every output written, read back by mdtraj, resumable after SIGKILL, bad input refused.

Inputs are small open-box FENE + WCA chains (16-32 beads) written into ``tmp_path`` by
:func:`chain_input`, so the whole file runs in well under a minute. References:

* ``mdtraj.load`` / ``mdtraj.compute_rg`` read the trajectory and compute Rg independently of beadsim;
* ``pandas.read_csv`` reads the scalar table;
* ``tomllib`` (standard library) reads the resolved ``input.toml`` copy;
* ``json`` (standard library) reads ``summary.json``;
* ``numpy.load(allow_pickle=False)`` via :func:`beadsim.io.read_checkpoint` reads checkpoints.
"""

import errno
import hashlib
import json
import os
import signal
import subprocess
import sys
import time
import tomllib

import mdtraj
import numpy as np
import pandas as pd
import pytest

import beadsim
from beadsim import cli
from beadsim.analysis.size import compute_rg
from beadsim.config import read_settings
from beadsim.io import checkpoint as checkpoint_module
from beadsim.io import read_checkpoint

EPS32 = float(np.finfo(np.float32).eps)
TIMESTEP = 0.005  # the dynamics.timestep written by chain_input, tau
OUTPUT_FILES = {"input.toml", "trajectory.h5", "observables.csv", "checkpoint.npz", "summary.json"}
# The scalar table's columns as the README documents them (written out here, not imported from the runner).
EXPECTED_COLUMNS = ["step", "time", "production", "pair_energy", "bond_energy", "bending_energy",
                    "potential_energy", "kinetic_energy", "total_energy", "kinetic_temperature", "pressure",
                    "radius_of_gyration", "end_to_end_distance"]


def chain_input(*, length=16, seed=11, equilibration_steps=200, production_steps=1000, frame_interval=100,
                table_interval=50, checkpoint_interval=400, length_scale_nm=0.5):
    """Text of a small open-box FENE + WCA chain input (a good-solvent chain in miniature)."""
    return (f"# small single chain for pipeline tests\n"
            f"[chains]\nlength = {length}\n\n"
            f"[dynamics]\ntimestep = 0.005\ntemperature = 1.0\nfriction = 0.5\n\n"
            f"[run]\nseed = {seed}\nequilibration_steps = {equilibration_steps}\n"
            f"production_steps = {production_steps}\n\n"
            f"[output]\nframe_interval = {frame_interval}\ntable_interval = {table_interval}\n"
            f"checkpoint_interval = {checkpoint_interval}\nlength_scale_nm = {length_scale_nm}\n")


# The small run shared by the output and trajectory checks.
SMALL = dict(length=16, seed=11, equilibration_steps=200, production_steps=1000, frame_interval=100,
             table_interval=50, checkpoint_interval=400, length_scale_nm=0.5)


def _frame_steps(p):
    """Steps at which an uninterrupted run saves frames: after equilibration, every frame_interval."""
    steps = np.arange(0, p["equilibration_steps"] + p["production_steps"] + 1, p["frame_interval"])
    return steps[steps > p["equilibration_steps"]]


@pytest.fixture(scope="module")
def small_run(tmp_path_factory):
    """One finished in-process ``beadsim run`` of :data:`SMALL`: (input path, output folder, exit status)."""
    folder = tmp_path_factory.mktemp("small_run")
    path = folder / "chain.toml"
    path.write_text(chain_input(**SMALL), encoding="utf-8")
    out = folder / "out"
    status = cli.main(["run", str(path), "--out", str(out), "--quiet"])
    return path, out, status


# ---------------------------------------------------------------------------------------------------------------
# 1. every output written, with the expected content
# ---------------------------------------------------------------------------------------------------------------

def test_run_exits_zero_and_writes_exactly_the_documented_outputs(small_run):
    _, out, status = small_run
    assert status == 0
    assert {p.name for p in out.iterdir()} == OUTPUT_FILES  # no temporary or probe files left behind


def test_resolved_input_copy_reads_back_to_the_same_settings(small_run):
    path, out, _ = small_run
    # reference: tomllib parses the copy; validating it again gives the very settings of the original file
    with open(out / "input.toml", "rb") as fh:
        copy = tomllib.load(fh)
    assert copy["run"]["seed"] == SMALL["seed"]
    assert copy["chains"]["length"] == [SMALL["length"]]
    assert read_settings(out / "input.toml") == read_settings(path)


def test_table_has_the_documented_columns_and_one_row_per_table_interval(small_run):
    _, out, _ = small_run
    table = pd.read_csv(out / "observables.csv")  # reference reader: pandas
    assert list(table.columns) == EXPECTED_COLUMNS
    total = SMALL["equilibration_steps"] + SMALL["production_steps"]
    np.testing.assert_array_equal(table["step"], np.arange(0, total + 1, SMALL["table_interval"]))
    np.testing.assert_allclose(table["time"], table["step"] * TIMESTEP, rtol=1e-15, atol=0)  # time = step * dt
    # production rows are those after the equilibration steps, as documented; frames come from them only
    np.testing.assert_array_equal(table["production"], (table["step"] > SMALL["equilibration_steps"]).astype(int))
    assert set(_frame_steps(SMALL)) <= set(table.loc[table["production"] == 1, "step"])
    assert table["pressure"].isna().all()  # open box: no pressure
    for column in EXPECTED_COLUMNS[3:]:
        if column != "pressure":
            assert np.isfinite(table[column]).all(), column
    # total = potential + kinetic, each a sum of its parts (float64 rounding of three additions)
    np.testing.assert_allclose(table["potential_energy"],
                               table["pair_energy"] + table["bond_energy"] + table["bending_energy"], rtol=1e-12)
    np.testing.assert_allclose(table["total_energy"], table["potential_energy"] + table["kinetic_energy"],
                               rtol=1e-12)
    assert (table["radius_of_gyration"] > 0).all() and (table["end_to_end_distance"] > 0).all()


def test_summary_records_versions_seed_and_throughput(small_run):
    import numba
    _, out, _ = small_run
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))  # reference reader: json
    assert summary["beadsim"] == beadsim.__version__
    assert summary["numpy"] == np.__version__
    assert summary["mdtraj"] == mdtraj.__version__
    assert summary["numba"] == numba.__version__
    assert summary["python"] == "{}.{}.{}".format(*sys.version_info[:3])
    assert summary["seed"] == SMALL["seed"]
    assert summary["beads"] == SMALL["length"]
    total = SMALL["equilibration_steps"] + SMALL["production_steps"]
    assert summary["final_step"] == summary["steps_this_invocation"] == total
    assert summary["wall_seconds"] > 0
    assert summary["bead_steps_per_second"] > 0
    assert len(summary["input_sha256"]) == 64 and int(summary["input_sha256"], 16) >= 0
    # reference: hashlib over the resolved input file, what `sha256sum input.toml` prints
    assert summary["input_toml_sha256"] == hashlib.sha256((out / "input.toml").read_bytes()).hexdigest()
    assert summary["numba_threads"] >= 1


def test_final_checkpoint_holds_the_last_step(small_run):
    _, out, _ = small_run
    arrays, meta = read_checkpoint(out / "checkpoint.npz")
    assert int(arrays["step_count"]) == SMALL["equilibration_steps"] + SMALL["production_steps"]
    assert arrays["positions"].shape == arrays["velocities"].shape == (SMALL["length"], 3)
    assert arrays["positions"].dtype == np.float64
    assert meta["beadsim"] == beadsim.__version__


def test_run_starts_from_maxwell_boltzmann_velocities_at_the_set_temperature(write_input, run_cli, tmp_path):
    """Row 0 of the table (the start state) of 1,000 four-bead chains at kT = 1.4 (baoab): T_kin = kT X / (3 n)
    with X = 2 K / kT chi-square with 3 n = 12,000 degrees of freedom (every component Maxwell-Boltzmann), so
    mean kT and standard deviation kT sqrt(2 / 12,000) = 0.018 (moments from scipy.stats.chi2); seed 31;
    tolerance 4 standard deviations. No minimisation, so row 0 holds the drawn velocities themselves."""
    from scipy.stats import chi2
    text = ("[chains]\nlength = 4\ncount = 1000\n\n[box]\nkind = \"periodic\"\ndensity = 0.3\n\n"
            "[nonbonded]\npotential = \"none\"\n\n[dynamics]\ntemperature = 1.4\n\n"
            "[run]\nseed = 31\nminimize = false\nequilibration_steps = 10\nproduction_steps = 10\n\n"
            "[output]\nframe_interval = 10\ntable_interval = 10\ncheckpoint_interval = 10\n")
    status, _, err = run_cli("run", write_input(text), "--out", tmp_path / "out", "--quiet")
    assert status == 0, err
    start = pd.read_csv(tmp_path / "out" / "observables.csv").iloc[0]
    dof = 3 * 4000
    assert start["step"] == 0 and start["production"] == 0
    assert abs(start["kinetic_temperature"] - 1.4 * chi2(dof).mean() / dof) < 4 * 1.4 * chi2(dof).std() / dof


LJ_MELT = ("[chains]\nlength = 4\ncount = 50\n\n[box]\nkind = \"periodic\"\ndensity = 0.5\n\n"
           "[nonbonded]\npotential = \"lennard_jones\"\ncutoff = 2.5\nshift = false\n{extra}\n"
           "[run]\nseed = 8\nminimize = false\nequilibration_steps = 20\nproduction_steps = 20\n\n"
           "[output]\nframe_interval = 20\ntable_interval = 10\ncheckpoint_interval = 20\n")


def test_tail_correction_adds_the_allen_tildesley_terms_to_the_table(write_input, run_cli, tmp_path):
    """Two runs of a truncated LJ melt (200 beads, rho = 0.5, rc = 2.5, eps = sigma = 1), with and without
    ``tail_correction``: the forces do not change, so the runs are the same and every row differs by
    N U_tail / N in pair_energy and p_tail in pressure, written out from Allen and Tildesley, Computer
    Simulation of Liquids, 2nd ed. 2017, section 2.8 (1987 edition eqs. 2.144-2.145); to the rounding of
    the larger value."""
    tables = []
    for name, extra in (("plain", ""), ("corrected", "tail_correction = true\n")):
        status, _, err = run_cli("run", write_input(LJ_MELT.format(extra=extra), f"{name}.toml"), "--out",
                                 tmp_path / name, "--quiet")
        assert status == 0, err
        tables.append(pd.read_csv(tmp_path / name / "observables.csv"))
    plain, corrected = tables
    rho, x = 0.5, 1.0 / 2.5
    u_tail = 8.0 / 3.0 * np.pi * rho * (x ** 9 / 3.0 - x ** 3)
    p_tail = 16.0 / 3.0 * np.pi * rho ** 2 * (2.0 / 3.0 * x ** 9 - x ** 3)
    np.testing.assert_array_equal(plain["kinetic_energy"], corrected["kinetic_energy"])
    for column, exact in (("pair_energy", 200 * u_tail), ("pressure", p_tail)):
        rounding = 4 * np.finfo(float).eps * np.maximum(abs(plain[column]), abs(corrected[column]))
        assert np.all(np.abs(corrected[column] - plain[column] - exact) <= rounding + 1e-14 * abs(exact)), column


@pytest.mark.parametrize("change, fragments", [
    ("shift = false", ["tail_correction = true needs shift = false", "closed form"]),
    ("potential = \"lennard_jones\"", ["tail_correction = true is for potential = 'lennard_jones' only"]),
    ("kind = \"periodic\"", ["tail_correction = true needs [box] kind = 'periodic'"]),
])
def test_tail_correction_is_refused_where_the_formula_does_not_hold(change, fragments, write_input, run_cli,
                                                                   tmp_path):
    replacement = {"shift = false": "shift = true", "potential = \"lennard_jones\"": "potential = \"wca\"",
                   "kind = \"periodic\"": "kind = \"open\""}[change]
    path = write_input(_replace(LJ_MELT.format(extra="tail_correction = true\n"), change, replacement))
    status, stdout, err = run_cli("run", path, "--out", tmp_path / "out", "--quiet")
    assert status == 2
    _assert_one_paragraph_error(err, str(path), "[nonbonded]", *fragments)


# ---------------------------------------------------------------------------------------------------------------
# 2. the trajectory as mdtraj sees it
# ---------------------------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def small_traj(small_run):
    return mdtraj.load(str(small_run[1] / "trajectory.h5"))


def test_mdtraj_loads_the_frames_with_chain_bonds_and_no_unit_cell(small_traj):
    n = SMALL["length"]
    assert small_traj.n_atoms == n
    assert small_traj.n_frames == len(_frame_steps(SMALL))
    bonds = sorted(tuple(sorted((a.index, b.index))) for a, b in small_traj.topology.bonds)
    assert bonds == [(i, i + 1) for i in range(n - 1)]  # the chain's bonds survive in the HDF5 topology
    assert small_traj.unitcell_lengths is None  # open box
    # frame times: step * dt stored as float32 (mdtraj's HDF5 time field)
    np.testing.assert_array_equal(small_traj.time, (_frame_steps(SMALL) * TIMESTEP).astype(np.float32))


def _rg_tolerance(traj, length_scale, n_beads):
    """Absolute Rg tolerance in sigma from float32 precision.

    Coordinates are stored as float32 (rounding <= eps32/2 of |x|) and mdtraj sums n_beads float32 squares
    (naive summation: relative error <= n eps32); both are bounded by n_beads * eps32 * max|x|.
    """
    return n_beads * EPS32 * float(np.abs(traj.xyz).max()) / length_scale


def test_mdtraj_compute_rg_equals_beadsim_rg_of_the_same_frames(small_traj):
    ls = SMALL["length_scale_nm"]
    reference = mdtraj.compute_rg(small_traj) / ls  # reference: mdtraj.compute_rg, nm -> sigma
    ours = compute_rg(small_traj, length_scale=ls)[:, 0]
    np.testing.assert_allclose(ours, reference, rtol=0, atol=_rg_tolerance(small_traj, ls, SMALL["length"]))
    # the nm/sigma scale is applied: FENE + WCA bonds in the file, divided by sigma in nm, sit near 0.97 sigma
    bonds = np.array([(a.index, b.index) for a, b in small_traj.topology.bonds])
    bond_sigma = mdtraj.compute_distances(small_traj, bonds) / ls  # reference: mdtraj.compute_distances
    assert 0.85 < bond_sigma.mean() < 1.1


def test_table_radius_of_gyration_at_frame_steps_matches_mdtraj_compute_rg(small_run, small_traj):
    _, out, _ = small_run
    ls = SMALL["length_scale_nm"]
    table = pd.read_csv(out / "observables.csv").set_index("step")
    # the table holds Rg of the exact float64 positions; mdtraj works on the float32 copies in the file
    from_table = table.loc[_frame_steps(SMALL), "radius_of_gyration"].to_numpy()
    reference = mdtraj.compute_rg(small_traj) / ls  # reference: mdtraj.compute_rg
    np.testing.assert_allclose(from_table, reference, rtol=0, atol=_rg_tolerance(small_traj, ls, SMALL["length"]))


# ---------------------------------------------------------------------------------------------------------------
# 3. SIGKILL mid-run, then --resume, reproduces an uninterrupted run bit for bit
# ---------------------------------------------------------------------------------------------------------------

# Long enough (a few seconds) for the kill to land mid-run; checkpoints every 5000 steps.
RESUMABLE = dict(length=32, seed=23, equilibration_steps=2000, production_steps=150_000, frame_interval=1000,
                 table_interval=100, checkpoint_interval=5000, length_scale_nm=0.5)
STARTUP_TIMEOUT = 180.0  # s; the first subprocess may load or compile the numba kernels


def _checkpoint_step(path):
    """Step of the checkpoint at ``path`` (written by atomic rename, so always complete), or -1 if none yet."""
    if not path.exists():
        return -1
    arrays, _ = read_checkpoint(path)
    return int(arrays["step_count"])


def _last_table_step(path):
    """Step of the last complete row of the table, or -1."""
    if not path.exists():
        return -1
    lines = path.read_text(encoding="utf-8").splitlines(keepends=True)
    complete = [line for line in lines[1:] if line.endswith("\n") and line.count(",") == len(EXPECTED_COLUMNS) - 1]
    return int(complete[-1].split(",", 1)[0]) if complete else -1


def _kill_mid_run(command, env, out):
    """Start ``command`` and SIGKILL it once a checkpoint past step 0 exists and the table has grown past it.

    The process is frozen with SIGSTOP while its files are inspected, so what is seen is exactly what the
    kill leaves on disk; if the table has not yet grown past the checkpoint it is resumed with SIGCONT.
    Returns the checkpoint step and the last complete table step left on disk.
    """
    proc = subprocess.Popen(command, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + STARTUP_TIMEOUT
        while time.monotonic() < deadline and proc.poll() is None:
            if (out / "checkpoint.npz").exists():
                proc.send_signal(signal.SIGSTOP)
                ck, row = _checkpoint_step(out / "checkpoint.npz"), _last_table_step(out / "observables.csv")
                if 0 < ck < row:
                    proc.send_signal(signal.SIGKILL)
                    assert proc.wait(timeout=30) == -signal.SIGKILL
                    return ck, row
                proc.send_signal(signal.SIGCONT)
            time.sleep(0.02)
        _, stderr = proc.communicate(timeout=30) if proc.poll() is not None else (b"", b"")
        pytest.fail(f"run ended (status {proc.returncode}) or timed out before it could be killed mid-run; "
                    f"stderr: {stderr.decode(errors='replace')}")
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=30)


def test_sigkill_then_resume_reproduces_an_uninterrupted_run(tmp_path, write_input, run_cli, subprocess_env,
                                                              beadsim_command):
    path = write_input(chain_input(**RESUMABLE))
    killed, whole = tmp_path / "killed", tmp_path / "whole"
    total = RESUMABLE["equilibration_steps"] + RESUMABLE["production_steps"]

    ck_step, row_step = _kill_mid_run(beadsim_command + ["run", str(path), "--out", str(killed), "--quiet"],
                                      subprocess_env, killed)
    assert 0 < ck_step < row_step < total  # killed mid-run, with table rows past the checkpoint to cut back
    assert not (killed / "summary.json").exists()  # the killed run never finished

    resumed = subprocess.run(beadsim_command + ["run", str(path), "--out", str(killed), "--quiet", "--resume"],
                             env=subprocess_env, capture_output=True, text=True, timeout=STARTUP_TIMEOUT)
    assert resumed.returncode == 0, resumed.stderr
    assert "Traceback" not in resumed.stderr

    status, _, err = run_cli("run", path, "--out", whole, "--quiet")  # uninterrupted, in this process
    assert status == 0, err

    assert (killed / "observables.csv").read_bytes() == (whole / "observables.csv").read_bytes()
    # reference reader: mdtraj
    a, b = mdtraj.load(str(killed / "trajectory.h5")), mdtraj.load(str(whole / "trajectory.h5"))
    assert a.n_frames == b.n_frames == len(_frame_steps(RESUMABLE))
    np.testing.assert_array_equal(a.xyz, b.xyz)
    np.testing.assert_array_equal(a.time, b.time)
    assert [tuple(sorted((x.index, y.index))) for x, y in a.topology.bonds] == \
        [tuple(sorted((x.index, y.index))) for x, y in b.topology.bonds]
    arrays_a, _ = read_checkpoint(killed / "checkpoint.npz")
    arrays_b, _ = read_checkpoint(whole / "checkpoint.npz")
    assert set(arrays_a) == set(arrays_b)
    assert int(arrays_a["step_count"]) == total
    for name in arrays_b:
        assert arrays_a[name].dtype == arrays_b[name].dtype, name
        np.testing.assert_array_equal(arrays_a[name], arrays_b[name], err_msg=name)
    summary = json.loads((killed / "summary.json").read_text(encoding="utf-8"))
    assert summary["final_step"] == total
    assert summary["steps_this_invocation"] == total - ck_step  # continued from the last checkpoint


# ---------------------------------------------------------------------------------------------------------------
# 4. a checkpoint holding a pickled object is refused without unpickling it
# ---------------------------------------------------------------------------------------------------------------

class _MakesFolderWhenUnpickled:
    """Unpickling this object calls ``os.mkdir(marker)``: proof of whether any code ran."""

    def __init__(self, marker):
        self.marker = str(marker)

    def __reduce__(self):
        return os.mkdir, (self.marker,)


def test_resume_refuses_a_checkpoint_holding_a_pickled_object(small_run, tmp_path, run_cli):
    import shutil
    path, source, _ = small_run
    out = tmp_path / "out"
    shutil.copytree(source, out)
    table_before = (out / "observables.csv").read_bytes()
    marker = tmp_path / "code_ran"
    positions = np.empty(1, dtype=object)
    positions[0] = _MakesFolderWhenUnpickled(marker)
    with open(out / "checkpoint.npz", "wb") as fh:
        np.savez(fh, positions=positions, step_count=np.array(400))  # numpy pickles object arrays
    # sanity: the file really does run code when loaded with pickle allowed (reference: numpy.load)
    with np.load(out / "checkpoint.npz", allow_pickle=True) as archive:
        archive["positions"]
    assert marker.is_dir()
    marker.rmdir()

    status, stdout, err = run_cli("run", path, "--out", out, "--quiet", "--resume")
    assert status == 2
    assert "Traceback" not in err
    assert "checkpoint.npz" in err and "pickled Python object" in err and "refused" in err
    assert not marker.exists()  # nothing was unpickled
    assert (out / "observables.csv").read_bytes() == table_before  # refused before touching the outputs
    assert stdout == ""


# ---------------------------------------------------------------------------------------------------------------
# 5. bad input through the command line: exit status 2, one paragraph naming file, key and what is allowed
# ---------------------------------------------------------------------------------------------------------------

def _assert_one_paragraph_error(err, *fragments):
    assert "Traceback" not in err
    text = err.strip()
    assert text.startswith("beadsim: error:"), err
    assert "\n\n" not in text, err  # one paragraph
    for fragment in fragments:
        assert fragment in text, f"{fragment!r} not in {text!r}"


def _replace(text, old, new):
    assert old in text
    return text.replace(old, new)


BASE = chain_input(**SMALL)
BAD_INPUTS = {
    "unknown_key": (_replace(BASE, "length = 16", "lenght = 16"),
                    ["[chains] unknown key 'lenght'", "did you mean 'length'", "allowed keys: count, length"]),
    "wrong_type": (_replace(BASE, "timestep = 0.005", 'timestep = "fast"'),
                   ["[dynamics] timestep", "expected float", "'fast'"]),
    "missing_required_key": (_replace(BASE, "seed = 11\n", ""),
                             ["[run] seed is required", "an integer >= 0"]),
    "out_of_range": (_replace(BASE, "temperature = 1.0", "temperature = -1"),
                     ["[dynamics] temperature", "must be a number > 0", "-1"]),
    "unknown_section": (_replace(BASE, "[dynamics]", "[dynamic]"),
                        ["unknown section [dynamic]", "did you mean 'dynamics'", "sections are chains, box"]),
    "retired_key": (BASE + '\n[sampling]\naccepted_pivots_per_segment = 40\n',
                    ["[sampling] accepted_pivots_per_segment", "accepted_pivots_per_bead", "X / N per bead"]),
}


@pytest.mark.parametrize("case", list(BAD_INPUTS))
def test_bad_input_exits_2_naming_file_key_and_allowed_values(case, write_input, run_cli, tmp_path):
    text, fragments = BAD_INPUTS[case]
    path = write_input(text)
    out = tmp_path / "out"
    status, stdout, err = run_cli("run", path, "--out", out, "--quiet")
    assert status == 2
    _assert_one_paragraph_error(err, str(path), *fragments)
    assert stdout == ""
    assert not out.exists()  # refused before anything was written


def test_bad_input_in_a_fresh_process_gives_status_2_and_no_traceback(write_input, tmp_path, subprocess_env,
                                                                       beadsim_command):
    text, fragments = BAD_INPUTS["unknown_key"]
    path = write_input(text)
    done = subprocess.run(beadsim_command + ["run", str(path), "--out", str(tmp_path / "out"), "--quiet"],
                          env=subprocess_env, capture_output=True, text=True, timeout=STARTUP_TIMEOUT)
    assert done.returncode == 2
    _assert_one_paragraph_error(done.stderr, str(path), *fragments)


def test_folder_holding_another_run_is_refused_unless_overwrite(write_input, run_cli, tmp_path):
    first = write_input(chain_input(**SMALL), "first.toml")
    second = write_input(chain_input(**{**SMALL, "seed": 12}), "second.toml")
    out, fresh = tmp_path / "out", tmp_path / "fresh"
    assert run_cli("run", first, "--out", out, "--quiet")[0] == 0
    table_first = (out / "observables.csv").read_bytes()

    status, _, err = run_cli("run", second, "--out", out, "--quiet")
    assert status == 2
    _assert_one_paragraph_error(err, str(out), "already holds a run", "--resume", "--overwrite", "--out")
    status, _, err = run_cli("run", second, "--out", out, "--quiet", "--resume")
    assert status == 2
    _assert_one_paragraph_error(err, str(out), "different input", "--overwrite")
    assert (out / "observables.csv").read_bytes() == table_first  # both refusals left the run alone

    status, _, err = run_cli("run", second, "--out", out, "--quiet", "--overwrite")
    assert status == 0, err
    assert json.loads((out / "summary.json").read_text(encoding="utf-8"))["seed"] == 12
    assert read_settings(out / "input.toml") == read_settings(second)
    # the replaced folder holds exactly what a fresh run of the second input writes
    assert run_cli("run", second, "--out", fresh, "--quiet")[0] == 0
    assert (out / "observables.csv").read_bytes() == (fresh / "observables.csv").read_bytes()
    np.testing.assert_array_equal(mdtraj.load(str(out / "trajectory.h5")).xyz,
                                  mdtraj.load(str(fresh / "trajectory.h5")).xyz)


@pytest.mark.parametrize("kind", ["path_under_a_regular_file", "read_only_folder"])
def test_output_folder_that_cannot_be_written_exits_2(kind, write_input, run_cli, tmp_path):
    path = write_input(chain_input(**SMALL))
    if kind == "path_under_a_regular_file":
        (tmp_path / "afile").write_text("not a folder\n")
        out = tmp_path / "afile" / "out"  # mkdir fails with an OSError (not a directory), root or not
    else:
        if os.geteuid() == 0:
            pytest.skip("running as root: permission bits do not stop writes (the regular-file case covers root)")
        out = tmp_path / "locked"
        out.mkdir()
        out.chmod(0o500)
    try:
        status, stdout, err = run_cli("run", path, "--out", out, "--quiet")
    finally:
        if kind == "read_only_folder":
            out.chmod(0o700)
    assert status == 2
    _assert_one_paragraph_error(err, str(out), "output folder is not writable", "--out")
    assert stdout == ""


class _NumpyOnAFullDisk:
    """Stands in for ``numpy`` inside :mod:`beadsim.io.checkpoint`: ``savez`` works ``good_writes`` times,
    then writes a few bytes and fails as a full disk does (``ENOSPC``)."""

    def __init__(self, good_writes):
        self.good_writes = good_writes
        self.calls = 0

    def __getattr__(self, name):
        return getattr(np, name)

    def savez(self, file, **arrays):
        self.calls += 1
        if self.calls > self.good_writes:
            file.write(b"PK\x03\x04 partial")
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return np.savez(file, **arrays)


def test_full_disk_during_a_checkpoint_exits_2_and_keeps_the_previous_checkpoint(write_input, run_cli, tmp_path,
                                                                               monkeypatch):
    path = write_input(chain_input(**SMALL))
    out, whole = tmp_path / "out", tmp_path / "whole"
    # checkpoints fall at steps 0, 400, 800, 1200: the third write (step 800) hits the full disk
    full_disk = _NumpyOnAFullDisk(good_writes=2)
    monkeypatch.setattr(checkpoint_module, "np", full_disk)
    status, stdout, err = run_cli("run", path, "--out", out, "--quiet")
    monkeypatch.undo()
    assert full_disk.calls == 3
    assert status == 2
    _assert_one_paragraph_error(err, str(out / "checkpoint.npz"), "No space left on device",
                                "previous checkpoint (if any) is unchanged")
    assert stdout == ""
    arrays, _ = read_checkpoint(out / "checkpoint.npz")  # the step-400 checkpoint is intact
    assert int(arrays["step_count"]) == SMALL["checkpoint_interval"]
    # no temporary file left; the frames so far wait in sealed parts, joined into trajectory.h5 when the run ends
    assert {p.name for p in out.iterdir()} == OUTPUT_FILES - {"summary.json", "trajectory.h5"} | {"trajectory_parts"}

    # with space again, --resume finishes the run exactly as an uninterrupted one
    status, _, err = run_cli("run", path, "--out", out, "--quiet", "--resume")
    assert status == 0, err
    assert run_cli("run", path, "--out", whole, "--quiet")[0] == 0
    assert (out / "observables.csv").read_bytes() == (whole / "observables.csv").read_bytes()
    np.testing.assert_array_equal(mdtraj.load(str(out / "trajectory.h5")).xyz,
                                  mdtraj.load(str(whole / "trajectory.h5")).xyz)
