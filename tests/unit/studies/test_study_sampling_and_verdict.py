"""How a study samples its points, and the verdict it opens with.

Sampling: an isolated-chain model whose base input names no sampling method gets hybrid pivot sampling
with a tuned pivot count; a base input that names a method keeps it; periodic boxes fall back to
dynamics and say why. Verdict: with one chain length no extrapolation in N is possible, and the verdict
says so while the per-N estimates are still reported; a collapse midpoint outside the sampled range is
"not determined". The synthetic tables come from the expansion-factor model (beadsim.studies.theta.
flory_model_table; Flory 1953, Grosberg and Khokhlov 1994 [memory]), in which every finite-N criterion
holds exactly at theta.
"""

import numpy as np
import pytest

from beadsim.studies.sweep import (LONG_CHAIN_BEADS, LONG_CHAIN_SEGMENT_STEPS, STUDY_HYBRID, estimate_everything,
                                   point_settings, read_study)
from beadsim.studies.theta import flory_model_table

STUDY = '[study]\nbase = "model.toml"\ncontrol = "temperature"\nvalues = [1.0, 2.0]\nchain_lengths = [2, 16]\nseed = 4\n'
MODEL = '[chains]\nlength = 8\n[nonbonded]\npotential = "lennard_jones"\n[run]\nseed = 1\nproduction_steps = 100\n'


def _read(tmp_path, extra=""):
    (tmp_path / "model.toml").write_text(MODEL + extra)
    (tmp_path / "study.toml").write_text(STUDY)
    return read_study(tmp_path / "study.toml")


def _point(study, n):
    return {"n_beads": n, "control": 2.0, "replica": 0, "seed": 9}


def test_isolated_chain_without_a_sampling_method_gets_tuned_hybrid_sampling(tmp_path):
    study, base = _read(tmp_path)
    assert study["sampling"]["note"].startswith("hybrid")
    settings = point_settings(base, study, _point(study, 16))
    assert {k: settings["sampling"][k] for k in STUDY_HYBRID} == STUDY_HYBRID
    assert settings["sampling"]["accepted_pivots_per_bead"] == 0.4
    assert settings["output"]["table_interval"] == base["output"]["table_interval"]
    # long chains: shorter rounds and one table row per round (the rows are the Rg^2 samples)
    long = point_settings(base, study, _point(study, LONG_CHAIN_BEADS))
    assert long["sampling"]["segment_steps"] == LONG_CHAIN_SEGMENT_STEPS == long["output"]["table_interval"]
    assert LONG_CHAIN_SEGMENT_STEPS < STUDY_HYBRID["segment_steps"] < base["output"]["table_interval"]
    assert point_settings(base, study, _point(study, LONG_CHAIN_BEADS - 1))["sampling"]["segment_steps"] == 20
    # a dimer has no interior bead for pivot moves: it keeps the base input's (default) dynamics
    assert point_settings(base, study, _point(study, 2))["sampling"]["method"] == "dynamics"


def test_a_base_input_that_names_hybrid_keeps_its_own_segments_and_table(tmp_path):
    study, base = _read(tmp_path, '[sampling]\nmethod = "hybrid"\nsegment_steps = 40\n[output]\ntable_interval = 200\n')
    settings = point_settings(base, study, _point(study, 2 * LONG_CHAIN_BEADS))
    assert settings["sampling"]["segment_steps"] == 40 and settings["output"]["table_interval"] == 200


def test_every_point_is_one_chain_whatever_the_base_model_holds(tmp_path):
    study, base = _read(tmp_path, '[sampling]\nmethod = "dynamics"\n')
    base["chains"]["count"] = 3
    settings = point_settings(base, study, _point(study, 16))
    assert settings["chains"]["count"] == 1 and settings["chains"]["length"] == [16]
    assert base["chains"]["count"] == 3  # the base settings are not changed


def test_a_base_input_that_names_dynamics_keeps_it(tmp_path):
    study, base = _read(tmp_path, '[sampling]\nmethod = "dynamics"\n')
    assert study["sampling"]["note"] == "dynamics (set in the base input)"
    assert point_settings(base, study, _point(study, 16))["sampling"]["method"] == "dynamics"


def test_periodic_melts_fall_back_to_dynamics_and_say_so(tmp_path):
    study, base = _read(tmp_path, '[box]\nkind = "periodic"\ndensity = 0.5\n')
    assert study["sampling"]["note"].startswith("dynamics: the base model is a periodic box")
    assert point_settings(base, study, _point(study, 16))["sampling"]["method"] == "dynamics"


def _table(tmp_path, lengths, controls, seed):
    """Model table with the point-folder column a study's results carry (folders without files here)."""
    df = flory_model_table(lengths, np.round(controls, 10), 3.0, 0.5, 0.5, seed=seed)
    df["folder"] = str(tmp_path / "no_point_files")
    return df


def test_one_chain_length_gives_per_n_estimates_but_no_extrapolated_theta(tmp_path):
    """N = 64 alone, T = 2.4 ... 3.8: the per-length estimators still cross (exactly at theta = 3 for
    the model), but theta(N -> infinity) is "not determined" with the reason."""
    df = _table(tmp_path, [64], np.arange(2.4, 3.81, 0.1), 3)
    out = estimate_everything(df, "temperature", tmp_path / "figures", seed=1)
    theta = out["verdict"]["theta"]
    assert theta["value"] is None and theta["reason"].startswith("not determined:")
    assert "no extrapolation possible" in theta["reason"]
    per_n = {e["method"]: e for e in out["theta"]}
    internal = per_n["nu_eff(internal) = 1/2"]
    assert abs(internal["value"] - 3.0) < 3 * internal["error"]
    assert "theta_combined" not in out


def test_collapse_midpoint_outside_the_sampled_range_is_not_determined(tmp_path):
    """Good-solvent side only (T = 3.2 ... 4.0 with theta = 3): the logistic midpoint of Rg lies below
    the sampled range, so the verdict says "not determined" instead of an extrapolated number."""
    df = _table(tmp_path, [32, 64, 128], np.arange(3.2, 4.01, 0.1), 4)
    out = estimate_everything(df, "temperature", tmp_path / "figures", seed=1)
    mid = out["verdict"]["coil_globule_midpoint"]
    assert mid["value"] is None and mid["n_beads"] == 128
    assert mid["reason"].startswith("not determined:")


@pytest.mark.parametrize("lengths", [[32, 64, 128, 256, 512]])
def test_extrapolated_theta_of_the_model_covers_the_truth(tmp_path, lengths):
    """With five chain lengths the quoted theta (N -> infinity) of the model table (theta = 3, seed 5,
    1 % noise) lies within 3 of its total errors of the truth, and its figure is drawn."""
    df = _table(tmp_path, lengths, np.arange(2.4, 3.81, 0.1), 5)
    out = estimate_everything(df, "temperature", tmp_path / "figures", seed=1)
    theta = out["verdict"]["theta"]
    assert abs(theta["value"] - 3.0) < 3 * theta["error"]
    assert (out["theta_combined"]["value"], out["theta_combined"]["error"]) == (theta["value"], theta["error"])
    # the verdict says which chain and which control values each of its numbers comes from
    verdict = out["verdict"]
    assert verdict["coil_globule_midpoint"]["n_beads"] == 512 and verdict["coil_globule_midpoint"]["value"] is not None
    for side, control in (("nu_good_side", 3.8), ("nu_poor_side", 2.4)):
        assert verdict[side]["control"] == pytest.approx(control)
        assert verdict[side]["where"] == f"N = 32, 64, 128, 256, 512 at control {control:g}"
    assert (tmp_path / "figures" / "theta_extrapolation.png").exists()
