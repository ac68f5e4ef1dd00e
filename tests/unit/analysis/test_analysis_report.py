"""analyze_file end to end on small synthetic trajectories: numbers, files, figures and the too-short outcome."""

import json

import mdtraj
import numpy as np
import pandas as pd
import pytest

from beadsim import plots
from beadsim.analysis import analyze_file, format_table
from beadsim.errors import AnalysisError, InputError


@pytest.fixture
def run_file(tmp_path, periodic_walks):
    x, traj = periodic_walks(seed=111, n_frames=120, chain_lengths=[30, 30, 30], box=3.0)
    path = tmp_path / "run.h5"
    traj.save_hdf5(str(path))
    return x, traj, path


def test_analyze_file_writes_tables_and_figures(run_file, tmp_path):
    x, _, path = run_file
    out = tmp_path / "out"
    summary = analyze_file(path, out_dir=out)
    for name in ("summary.json", "series.csv", "internal_distances.csv", "form_factor.csv", "bonds.csv",
                 "dynamics.csv", "structure_factor.csv"):
        assert (out / name).stat().st_size > 0
    for name in ("rg_series", "form_factor", "kratky", "internal_distances", "bond_lengths", "structure_factor"):
        assert (out / f"{name}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature
    assert json.loads((out / "summary.json").read_text()) == json.loads(json.dumps(summary))
    # <Rg^2> over the equilibrated frames against mdtraj.compute_rg of the never-wrapped chains
    t0 = summary["quantities"]["rg_squared"]["equilibration_index"]
    ref = np.mean([mdtraj.compute_rg(mdtraj.Trajectory(x[t0:, k:k + 30].astype(np.float32), None)) ** 2
                   for k in (0, 30, 60)])
    assert summary["quantities"]["rg_squared"]["mean"] == pytest.approx(ref, rel=1e-5)  # float32 storage
    table = format_table(summary)
    assert "rg_squared" in table and "re2_over_rg2" in table and str(path) in table


def test_structure_factor_lies_on_the_reciprocal_lattice_of_the_box(run_file, tmp_path):
    # exact: the first shell (2 pi/L <= |k| < 4 pi/L) of an L-periodic cube holds the lattice vectors
    # 2 pi n / L with |n| = 1, sqrt 2, sqrt 3: 3 + 6 + 4 of them (one of each +-k pair)
    _, traj, path = run_file
    analyze_file(path, out_dir=tmp_path / "out")
    sq = pd.read_csv(tmp_path / "out" / "structure_factor.csv")
    box = float(traj.unitcell_lengths[0, 0])
    mean_n = (3 + 6 * np.sqrt(2) + 4 * np.sqrt(3)) / 13
    assert sq["q"].iloc[0] == pytest.approx(2 * np.pi / box * mean_n, rel=1e-6)
    assert sq["n_vectors"].iloc[0] == 13 and np.all(sq["s"] >= 0)


def test_open_system_skips_structure_factor_with_reason(run_file, tmp_path):
    _, traj, _ = run_file
    open_traj = mdtraj.Trajectory(traj.xyz, traj.topology, time=traj.time)
    path = tmp_path / "open.h5"
    open_traj.save_hdf5(str(path))
    summary = analyze_file(path, out_dir=tmp_path / "out")
    assert "periodic box" in summary["skipped"]["structure_factor"]
    assert not (tmp_path / "out" / "structure_factor.csv").exists()


def test_svg_figures_and_length_scale(run_file, tmp_path):
    _, _, path = run_file
    in_nm = analyze_file(path, out_dir=tmp_path / "nm")
    in_sigma = analyze_file(path, out_dir=tmp_path / "sigma", length_scale=0.5, figure_format="svg")
    assert b"<svg" in (tmp_path / "sigma" / "kratky.svg").read_bytes()[:2000]
    assert in_sigma["length_unit"] == "sigma"
    assert in_sigma["quantities"]["rg_squared"]["mean"] == pytest.approx(
        in_nm["quantities"]["rg_squared"]["mean"] / 0.25, rel=1e-10)


def test_xtc_with_topology_and_frame_range(run_file, tmp_path):
    _, traj, _ = run_file
    xtc, pdb = tmp_path / "run.xtc", tmp_path / "top.pdb"
    traj.save_xtc(str(xtc))
    traj[0].save_pdb(str(pdb))
    summary = analyze_file(xtc, pdb, out_dir=tmp_path / "out", frames=(20, 100))
    assert summary["n_frames"] == 80 and summary["n_chains"] == 3 and summary["chain_lengths"] == [30]
    with pytest.raises(AnalysisError, match=f"{xtc}: the .xtc format stores no topology"):
        analyze_file(xtc, out_dir=tmp_path / "out2")


def test_short_run_reports_reasons_instead_of_errors(run_file, tmp_path):
    _, _, path = run_file
    summary = analyze_file(path, out_dir=tmp_path / "out", frames=(0, 10))
    rg2 = summary["quantities"]["rg_squared"]
    assert rg2["error"] is None and "only 10 samples" in rg2["reason"]
    assert "no error bar" in format_table(summary)


def test_figure_path_must_be_png_or_svg(tmp_path):
    with pytest.raises(InputError, match="figure.jpg: figure files must end in .png or .svg"):
        plots.histogram(np.arange(3.0), np.ones(3), tmp_path / "figure.jpg", "bond length [nm]")


def _minimal_summary(**changes):
    summary = {"file": "run.h5", "n_frames": 3, "n_chains": 1, "chain_lengths": [8], "length_unit": "nm",
               "quantities": {"rg_squared": {"mean": 1.5, "error": 0.1, "n_independent": 3, "unit": "nm^2"}},
               "fits": {}, "skipped": {}}
    summary.update(changes)
    return summary


def test_format_table_of_minimal_summary():
    assert "rg_squared" in format_table(_minimal_summary()) and "1.5" in format_table(_minimal_summary())


@pytest.mark.parametrize("summary, message", [
    (None, "summary: expected the dict returned by analyze_file .*, got NoneType"),
    ({}, "summary: missing key\\(s\\) file, n_frames, n_chains, chain_lengths, length_unit, quantities, fits, skipped"),
    (_minimal_summary(quantities=None), "summary\\['quantities'\\]: expected a dict, got NoneType"),
    (_minimal_summary(skipped=3), "summary\\['skipped'\\]: expected a dict, got int"),
    (_minimal_summary(chain_lengths=5), "summary\\['chain_lengths'\\]: expected a list, got int"),
    (_minimal_summary(quantities={"rg_squared": {"mean": 1.0}}),
     "summary\\['quantities'\\]\\['rg_squared'\\]: expected a name \\(str\\) mapped to a dict with keys mean"),
    (_minimal_summary(quantities={"rg_squared": {"mean": "big", "error": None, "n_independent": 3, "unit": "1"}}),
     "summary\\['quantities'\\]\\['rg_squared'\\]\\['mean'\\]: expected a number or None, got 'big'"),
    (_minimal_summary(fits={"guinier_rg": 2.0}), "summary\\['fits'\\]\\['guinier_rg'\\]: expected a dict, got float"),
])
def test_format_table_names_the_malformed_key(summary, message):
    with pytest.raises(InputError, match=message):
        format_table(summary)


def _numbers_without_error(summary):
    """Names of quantities and fits that give neither an error nor a reason for having none."""
    entries = {**summary["quantities"], **summary["fits"]}
    return [name for name, e in entries.items() if e["error"] is None and not e.get("reason")]


def test_every_reported_number_has_an_error_or_a_reason(run_file, tmp_path):
    """Periodic walks (every analysis path, S(q) included) and the same file cut to 10 frames: every quantity and
    fit in summary.json carries an error or says why not, and so do the P(q) and S(q) tables (an error column,
    or NaN there with the reason under error_blocks: these walks drift too slowly for 8 blocks)."""
    _, _, path = run_file
    for frames, out in ((None, "full"), ((0, 10), "short")):
        summary = analyze_file(path, out_dir=tmp_path / out, frames=frames)
        assert _numbers_without_error(json.loads((tmp_path / out / "summary.json").read_text())) == []
        for table, column in (("form_factor", "p_error"), ("structure_factor", "s_error")):
            errors = pd.read_csv(tmp_path / out / f"{table}.csv")[column]
            assert np.all(errors >= 0) or (errors.isna().all() and "no error" in summary["error_blocks"]["reason"])


def test_user_q_values_are_used_and_refused_when_not_positive(run_file, tmp_path):
    _, _, path = run_file
    analyze_file(path, out_dir=tmp_path / "q", q=[0.5, 1.0, 2.0])
    assert pd.read_csv(tmp_path / "q" / "form_factor.csv")["q"].tolist() == [0.5, 1.0, 2.0]
    with pytest.raises(InputError, match="q: expected one or more scattering vector magnitudes > 0"):
        analyze_file(path, out_dir=tmp_path / "bad", q=[-1.0, 2.0])
