"""``beadsim temper``: a small ladder end to end, and bad ladder files -> a clear message and exit status 2."""

import pytest

MODEL = """
[chains]
length = 6
[bonds]
potential = "harmonic"
stiffness = 10.0
rest_length = 0.0
bond_length = 0.5
[nonbonded]
potential = "none"
[box]
min_distance = 0.1
[dynamics]
timestep = 0.01
[run]
seed = 3
minimize = false
"""

GOOD = """[ladder]
base = "model.toml"
lowest_temperature = 1.0
highest_temperature = 1.5
count = 3
exchange_interval = 20
sample_interval = 10
rounds = 6
seed = 8
"""


def test_small_ladder_runs_and_reports(tmp_path, write_input, run_cli):
    write_input(MODEL, "model.toml")
    ladder = write_input(GOOD, "ladder.toml")
    status, out, err = run_cli("temper", ladder, "--out", tmp_path / "out", "--quiet")
    assert status == 0, err
    assert "neighbour pair" in out and "no MBAR curves" in out  # 6 rounds: too few samples for MBAR, said so
    for k in range(3):
        assert (tmp_path / "out" / f"rung_{k:02d}" / "samples.csv").exists()
        assert (tmp_path / "out" / f"rung_{k:02d}" / "trajectory.h5").exists()


@pytest.mark.parametrize("ladder, words", [
    (GOOD.replace("count = 3", "count = 1"), ["ladder.toml", "[ladder] count", "an integer >= 2"]),
    (GOOD.replace("rounds = 6", "rounds = -6"), ["ladder.toml", "[ladder] rounds", "an integer >= 1"]),
    (GOOD.replace("sample_interval = 10", "sample_interval = 7"), ["ladder.toml", "sample_interval", "divide"]),
    (GOOD.replace("lowest_temperature", "low_temperature"), ["ladder.toml", "unknown key 'low_temperature'",
                                                             "lowest_temperature"]),
    (GOOD.replace('"model.toml"', '"missing.toml"'), ["missing.toml", "file not found"]),
    (GOOD.replace("[ladder]", "[rungs]"), ["ladder.toml", "unknown section [rungs]"]),
    (GOOD + "temperatures = [1.0, 2.0]\n", ["ladder.toml", "either temperatures"]),
])
def test_bad_ladder_exits_2_naming_file_and_key(tmp_path, write_input, run_cli, ladder, words):
    write_input(MODEL, "model.toml")
    path = write_input(ladder, "ladder.toml")
    status, _, err = run_cli("temper", path, "--out", tmp_path / "out", "--quiet")
    assert status == 2
    for word in words:
        assert word in err
    assert not (tmp_path / "out").exists()  # refused before anything was written


def test_verlet_model_is_refused(tmp_path, write_input, run_cli):
    write_input(MODEL.replace("timestep = 0.01", 'timestep = 0.01\nintegrator = "verlet"'), "model.toml")
    status, _, err = run_cli("temper", write_input(GOOD, "ladder.toml"), "--out", tmp_path / "out")
    assert status == 2 and "verlet" in err and "[ladder] base" in err


def test_folder_of_another_ladder_is_left_untouched(tmp_path, write_input, run_cli):
    write_input(MODEL, "model.toml")
    assert run_cli("temper", write_input(GOOD, "ladder.toml"), "--out", tmp_path / "out", "--quiet")[0] == 0
    before = {p: p.read_bytes() for p in (tmp_path / "out").rglob("*") if p.is_file()}
    other = write_input(GOOD.replace("seed = 8", "seed = 9"), "other.toml")
    status, _, err = run_cli("temper", other, "--out", tmp_path / "out", "--quiet")
    assert status == 2 and "another model or other settings" in err
    assert before == {p: p.read_bytes() for p in (tmp_path / "out").rglob("*") if p.is_file()}
