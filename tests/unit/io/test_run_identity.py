"""A run folder is recognised across versions that add input keys with defaults, and a real change is refused.

The stored ``input.toml`` of a version that predates a key or section (here the whole ``[sampling]``
section and the ``[nonbonded] shift`` key, both at their defaults) describes the same run, so
``--resume`` continues it; any change to a value is still refused.
"""

import re

import pytest

from beadsim.config import SCHEMA, read_settings, to_toml
from beadsim.errors import InputError
from beadsim.runner import INPUT_FILE, prepare_folder, run

MODEL = """
[chains]
length = 8
[nonbonded]
potential = "lennard_jones"
[run]
seed = 5
equilibration_steps = 100
production_steps = 200
[output]
frame_interval = 100
table_interval = 50
checkpoint_interval = 100
"""


def _older(text):
    """The resolved input as a version without [sampling] and without [nonbonded] shift would have written it."""
    text = re.sub(r"\n\[sampling\]\n(?:[^\[\n][^\n]*\n)*", "\n", text)
    return re.sub(r"\nshift = [^\n]*", "", text)


@pytest.fixture
def older_folder(tmp_path):
    (tmp_path / "model.toml").write_text(MODEL)
    settings = read_settings(tmp_path / "model.toml")
    out = tmp_path / "run"
    run(settings, out, progress=False)
    older = _older((out / INPUT_FILE).read_text())
    assert "[sampling]" not in older and "shift" not in older  # the folder really lacks them
    assert settings["nonbonded"]["shift"] == SCHEMA["nonbonded"]["shift"][1]
    (out / INPUT_FILE).write_text(older)
    return settings, out


def test_folder_of_a_version_without_default_keys_resumes(older_folder):
    settings, out = older_folder
    summary = run(settings, out, resume=True, progress=False)
    assert summary["final_step"] == 300
    assert (out / INPUT_FILE).read_text() == to_toml(settings)  # now records every key


@pytest.mark.parametrize("section, key, value", [("dynamics", "temperature", 1.5), ("nonbonded", "shift", False),
                                                 ("sampling", "method", "hybrid")])
def test_a_real_change_is_still_refused(older_folder, section, key, value):
    settings, out = older_folder
    changed = {**settings, section: {**settings[section], key: value}}
    with pytest.raises(InputError, match="different input"):
        prepare_folder(out, changed, resume=True, overwrite=False)


def test_longer_sampling_is_allowed_only_when_asked(older_folder):
    settings, out = older_folder
    longer = {**settings, "run": {**settings["run"], "production_steps": 400}}
    with pytest.raises(InputError, match="different input"):
        prepare_folder(out, longer, resume=True, overwrite=False)
    prepare_folder(out, longer, resume=True, overwrite=False, allow_longer=True)
    assert (out / INPUT_FILE).read_text() == to_toml(longer)
