"""A study folder is recognised across versions that add input keys with defaults, and only then."""

import copy

from beadsim.config import SCHEMA
from beadsim.studies.sweep import read_study, study_identity

STUDY = '[study]\nbase = "model.toml"\ncontrol = "temperature"\nvalues = [1.0, 2.0]\nchain_lengths = [8, 16]\nseed = 4\n'
MODEL = '[chains]\nlength = 8\n[nonbonded]\npotential = "lennard_jones"\n[run]\nseed = 1\nproduction_steps = 100\n'


def _read(tmp_path):
    (tmp_path / "model.toml").write_text(MODEL)
    (tmp_path / "study.toml").write_text(STUDY)
    return read_study(tmp_path / "study.toml")


def test_identity_ignores_keys_at_their_defaults(tmp_path):
    study, base = _read(tmp_path)
    older = copy.deepcopy(base)
    del older["nonbonded"]["shift"]  # a version before this key existed (left at its default): same model
    del older["bending"]             # ... or before this section existed (all defaults)
    assert base["bending"] == {key: rule[1] for key, rule in SCHEMA["bending"].items()}
    assert study_identity(study, older) == study_identity(study, base)


def test_identity_changes_with_the_model_and_the_seed(tmp_path):
    study, base = _read(tmp_path)
    changed = copy.deepcopy(base)
    changed["nonbonded"]["cutoff"] = 3.0
    assert study_identity(study, changed) != study_identity(study, base)
    assert study_identity({**study, "seed": 5}, base) != study_identity(study, base)
