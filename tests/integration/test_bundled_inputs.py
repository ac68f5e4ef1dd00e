"""Every bundled input file parses, every run input and every [solvent] preset runs a few hundred steps, and every
file the README names exists.

Run inputs are run with their own model and short phases (100 + 200 steps); a run that blows up, writes a
non-finite energy or no table rows fails. Study, ladder and vet files are read and validated by their own readers.
"""

import copy
import re
from pathlib import Path

import numpy as np
import pytest

from beadsim.config import load_toml, read_settings
from beadsim.io import read_table
from beadsim.runner import TABLE_FILE, run
from beadsim.studies.sweep import read_study
from beadsim.studies.tempering import read_ladder
from beadsim.studies.vet import read_plan

ROOT = Path(__file__).resolve().parents[2]
BUNDLED = sorted(list((ROOT / "inputs").rglob("*.toml")) + list((ROOT / "analysis" / "studies").glob("*.toml")))
READERS = {"study": read_study, "ladder": read_ladder, "vet": read_plan}


def _short(settings):
    s = copy.deepcopy(settings)
    s["run"].update(equilibration_steps=100, production_steps=200)
    s["output"].update(frame_interval=100, table_interval=20, checkpoint_interval=100)
    return s


def _runs_cleanly(settings, folder):
    run(_short(settings), folder, progress=False)
    table = read_table(folder / TABLE_FILE)
    assert len(table) == 16 and np.all(np.isfinite(table["potential_energy"]))


def test_the_bundled_inputs_are_found():
    assert len(BUNDLED) >= 10 and (ROOT / "inputs" / "lj_theta_study.toml") in BUNDLED


@pytest.mark.parametrize("path", BUNDLED, ids=lambda p: str(p.relative_to(ROOT)))
def test_every_bundled_input_parses_and_runs(path, tmp_path):
    kind = next((k for k in READERS if k in load_toml(path)), None)
    if kind is not None:
        READERS[kind](path)
        return
    _runs_cleanly(read_settings(path), tmp_path / "run")


@pytest.mark.parametrize("preset", ['quality = "good"', 'quality = "theta"', 'quality = "poor"',
                                    "relative_temperature = 1.2"])
def test_every_solvent_preset_runs(preset, tmp_path):
    path = tmp_path / "chain.toml"
    path.write_text(f"[chains]\nlength = 24\n[solvent]\n{preset}\n[run]\nseed = 3\n")
    _runs_cleanly(read_settings(path), tmp_path / "run")


def test_every_file_the_readme_names_exists():
    text = (ROOT / "README.md").read_text()
    named = set(re.findall(r"(?<![\w/.-])((?:inputs|analysis|tests|beadsim)/[\w./-]+\.(?:toml|md|json|py|dat|png))",
                           text))
    assert len(named) > 10
    missing = sorted(p for p in named if not (ROOT / p).exists())
    assert missing == [], f"README names files that do not exist: {missing}"
