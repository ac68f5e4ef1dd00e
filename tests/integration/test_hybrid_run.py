"""``beadsim run`` with ``[sampling] method = "hybrid"``: the summary reports the method, the caution about
dynamics-derived quantities and the acceptance rates; every run reports independent Rg samples per
CPU-second; a hybrid run resumed after a stop ends where an uninterrupted one ends; bad settings exit
with status 2 and a message naming the key. ``json`` (standard library) reads ``summary.json``.
"""

import json

import numpy as np
import pandas as pd
import pytest

from beadsim import runner
from beadsim.analysis.report import analyze_file
from beadsim.config import read_settings
from beadsim.io import read_checkpoint

BASE = ("[chains]\nlength = 16\n\n[dynamics]\ntimestep = 0.005\ntemperature = 1.0\n\n"
        "[run]\nseed = 3\nequilibration_steps = 2000\nproduction_steps = {steps}\n\n"
        "[output]\nframe_interval = 200\ntable_interval = 10\ncheckpoint_interval = 400\n")
HYBRID = "\n[sampling]\nmethod = \"hybrid\"\nsegment_steps = 20\npivot_moves_per_segment = 10\n" \
         "crankshaft_moves_per_segment = 10\n"


def _summary(folder):
    return json.loads((folder / "summary.json").read_text(encoding="utf-8"))


def test_hybrid_run_reports_method_caution_acceptance_and_efficiency(tmp_path, write_input, run_cli):
    status, _, _ = run_cli("run", write_input(BASE.format(steps=2000) + HYBRID), "--out", tmp_path / "h",
                           "--quiet")
    assert status == 0
    sampling = _summary(tmp_path / "h")["sampling"]
    assert sampling["method"] == "hybrid"
    assert "meaningless" in sampling["note"] and "diffusion" in sampling["note"]
    for kind in ("pivot", "crankshaft"):
        acc = sampling["acceptance"][kind]
        assert acc["attempted"] == 10 * 4000 // 20
        assert 0 < acc["accepted"] <= acc["attempted"] and acc["rate"] == acc["accepted"] / acc["attempted"]
    rate = sampling["rg_independent_samples"]
    assert rate["per_cpu_second"] > 0 and rate["samples"] == 2000 // 10
    report = analyze_file(tmp_path / "h" / "trajectory.h5", out_dir=tmp_path / "h_analysis", length_scale=1.0)
    assert "meaningless" in report["skipped"]["dynamics"] and "diffusion_coefficient" not in report["fits"]


def test_plain_run_reports_efficiency_without_caution(tmp_path, write_input, run_cli):
    # plain dynamics decorrelates Rg of 16 beads in about 500 steps (g ~ 50-100 rows), so the production part
    # must be some 20,000 steps to hold enough independent samples for a rate
    status, _, _ = run_cli("run", write_input(BASE.format(steps=20_000)), "--out", tmp_path / "p", "--quiet")
    assert status == 0
    sampling = _summary(tmp_path / "p")["sampling"]
    assert sampling["method"] == "dynamics" and "note" not in sampling and "acceptance" not in sampling
    rate = sampling["rg_independent_samples"]
    assert rate["per_cpu_second"] > 0 and 0 < rate["per_cpu_second_error"] < rate["per_cpu_second"]


def test_extended_hybrid_run_matches_uninterrupted_run(tmp_path, write_input):
    """A hybrid run of 1,000 production steps, resumed and extended to 2,000 (runner allow_longer), ends
    with the positions, move count and acceptance tallies of a run of 2,000 steps in one go (the moves'
    random numbers are a function of the seed and the move count, which the checkpoint keeps), and with the
    same scalar table, ``production`` column included (1 exactly after the 2,000 equilibration steps)."""
    whole = read_settings(write_input(BASE.format(steps=2000) + HYBRID, "whole.toml"))
    first = read_settings(write_input(BASE.format(steps=1000) + HYBRID, "first.toml"))
    runner.run(whole, tmp_path / "a", progress=False)
    runner.run(first, tmp_path / "b", progress=False)
    runner.run(whole, tmp_path / "b", resume=True, allow_longer=True, progress=False)
    a, _ = read_checkpoint(tmp_path / "a" / "checkpoint.npz")
    b, _ = read_checkpoint(tmp_path / "b" / "checkpoint.npz")
    np.testing.assert_array_equal(a["positions"], b["positions"])
    assert int(a["hybrid_move_count"]) == int(b["hybrid_move_count"]) == 20 * 4000 // 20
    np.testing.assert_array_equal(a["hybrid_counts"], b["hybrid_counts"])
    table = (tmp_path / "b" / "observables.csv").read_bytes()
    assert table == (tmp_path / "a" / "observables.csv").read_bytes()
    rows = pd.read_csv(tmp_path / "b" / "observables.csv")
    np.testing.assert_array_equal(rows["production"], (rows["step"] > 2000).astype(int))


@pytest.mark.parametrize("text, key", [
    (BASE.format(steps=100) + "\n[box]\nkind = \"periodic\"\ndensity = 0.1\n" + HYBRID, "kind = 'open'"),
    (BASE.format(steps=100).replace("[dynamics]\n", "[dynamics]\nintegrator = \"verlet\"\n") + HYBRID,
     "thermostatted"),
    (BASE.format(steps=100) + "\n[sampling]\nmethod = \"hybrid\"\npivot_moves_per_segment = 0\n", "both 0"),
])
def test_bad_hybrid_inputs_exit_with_status_2(tmp_path, write_input, run_cli, text, key):
    status, _, err = run_cli("run", write_input(text), "--out", tmp_path / "x", "--quiet")
    assert status == 2
    assert "[sampling] method = 'hybrid'" in err and key in err
