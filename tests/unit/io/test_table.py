"""Scalar table: exact round trip, truncation and continuation, header checks."""

import numpy as np
import pandas as pd
import pytest

from beadsim.errors import InputError
from beadsim.io.table import ScalarTable, read_table, truncate_table

COLUMNS = ("time", "potential_energy", "temperature")


@pytest.fixture
def records():
    rng = np.random.default_rng(515)
    steps = np.arange(0, 1000, 100)
    values = np.column_stack([steps * 0.005, rng.normal(-3.0, 1.0, steps.size), rng.uniform(0.5, 1.5, steps.size)])
    return steps, values


def write_all(path, steps, values, mode="w"):
    with ScalarTable(path, COLUMNS, mode=mode) as table:
        for step, row in zip(steps, values):
            table.append(int(step), dict(zip(COLUMNS, row)))


def test_round_trip_is_bit_identical_through_pandas(tmp_path, records):
    steps, values = records
    write_all(tmp_path / "scalars.csv", steps, values)
    frame = read_table(tmp_path / "scalars.csv")
    assert list(frame.columns) == ["step", *COLUMNS]
    assert frame["step"].dtype == np.int64
    np.testing.assert_array_equal(frame["step"].to_numpy(), steps)
    np.testing.assert_array_equal(frame[list(COLUMNS)].to_numpy(), values)  # exact, not approximate


def test_header_line_names_the_columns(tmp_path, records):
    write_all(tmp_path / "scalars.csv", *records)
    assert (tmp_path / "scalars.csv").read_text().splitlines()[0] == "step,time,potential_energy,temperature"


def test_sequence_values_integers_and_special_floats(tmp_path):
    with ScalarTable(tmp_path / "t.csv", ["n_contacts", "energy"]) as table:
        table.append(0, [np.int64(3), float("nan")])
        table.append(10, (4, np.float32(0.1)))
        table.append(20, [5, float("inf")])
    text = (tmp_path / "t.csv").read_text().splitlines()
    assert text[1:] == ["0,3,nan", f"10,4,{float(np.float32(0.1))!r}", "20,5,inf"]
    frame = pd.read_csv(tmp_path / "t.csv")  # reference: a plain pandas reader
    assert np.isnan(frame["energy"][0]) and np.isinf(frame["energy"][2])


def test_truncate_then_continue_gives_identical_bytes(tmp_path, records):
    steps, values = records
    write_all(tmp_path / "whole.csv", steps, values)
    write_all(tmp_path / "resumed.csv", steps, values)  # the run went on past its checkpoint at step 400 ...
    kept = truncate_table(tmp_path / "resumed.csv", 400)  # ... crashed, and is resumed there
    assert kept == 5
    write_all(tmp_path / "resumed.csv", steps[steps > 400], values[steps > 400], mode="a")
    assert (tmp_path / "resumed.csv").read_bytes() == (tmp_path / "whole.csv").read_bytes()


def test_truncate_drops_a_line_cut_short_by_a_crash(tmp_path, records):
    steps, values = records
    path = tmp_path / "scalars.csv"
    write_all(path, steps[:3], values[:3])
    with open(path, "a") as fh:
        fh.write("300,1.5,-2.")
    assert truncate_table(path, 10_000) == 3
    np.testing.assert_array_equal(read_table(path)["step"].to_numpy(), steps[:3])


def test_truncate_refuses_a_damaged_middle_line(tmp_path, records):
    path = tmp_path / "scalars.csv"
    write_all(path, *records)
    lines = path.read_text().splitlines(keepends=True)
    lines[3] = "garbage\n"
    path.write_text("".join(lines))
    with pytest.raises(InputError, match="line 4"):
        truncate_table(path, 500)
    assert path.read_text() == "".join(lines)


def test_truncate_leaves_no_temporary_file(tmp_path, records):
    write_all(tmp_path / "scalars.csv", *records)
    truncate_table(tmp_path / "scalars.csv", 0)
    assert [p.name for p in tmp_path.iterdir()] == ["scalars.csv"]
    assert len(read_table(tmp_path / "scalars.csv")) == 1


def test_continue_refuses_different_columns(tmp_path, records):
    write_all(tmp_path / "scalars.csv", *records)
    table = ScalarTable(tmp_path / "scalars.csv", ["time", "kinetic_energy", "temperature"], mode="a")
    with pytest.raises(InputError, match="columns"):
        table.append(1000, [5.0, 1.0, 1.0])


def test_reset_discards_rows(tmp_path, records):
    path = tmp_path / "scalars.csv"
    write_all(path, *records)
    table = ScalarTable(path, COLUMNS, mode="a")
    table.reset()
    table.append(0, [0.0, -1.0, 1.0])
    table.close()
    assert path.read_text() == "step,time,potential_energy,temperature\n0,0.0,-1.0,1.0\n"


def test_flush_makes_rows_visible_before_close(tmp_path):
    table = ScalarTable(tmp_path / "t.csv", ["energy"])
    table.append(0, [1.25])
    table.flush()
    assert (tmp_path / "t.csv").read_text() == "step,energy\n0,1.25\n"
    table.close()


@pytest.mark.parametrize("columns, message", [
    ("time", "single string"),
    (["time", "time"], "duplicate"),
    (["step", "time"], "'step'"),
    (["Potential Energy"], "lower_snake_case"),
])
def test_bad_columns_are_refused(tmp_path, columns, message):
    with pytest.raises(InputError, match=message):
        ScalarTable(tmp_path / "t.csv", columns)


@pytest.mark.parametrize("step, values, message", [
    (-1, [1.0], "step"),
    (1.5, [1.0], "step"),
    (0, [1.0, 2.0], "expected 1 numbers"),
    (0, {"other": 1.0}, "missing"),
    (0, ["abc"], "expected a number"),
    (0, [True], "bool"),
])
def test_bad_rows_are_refused(tmp_path, step, values, message):
    table = ScalarTable(tmp_path / "t.csv", ["energy"])
    with pytest.raises(InputError, match=message):
        table.append(step, values)
    table.close()


def test_missing_files_give_clear_errors(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        truncate_table(tmp_path / "absent.csv", 3)
    with pytest.raises(InputError, match="does not exist"):
        read_table(tmp_path / "absent.csv")


def test_empty_column_list_and_foreign_files_are_refused(tmp_path):
    with pytest.raises(InputError, match="at least one"):
        ScalarTable(tmp_path / "t.csv", [])
    (tmp_path / "other.csv").write_text("a,b\n1,2\n")
    with pytest.raises(InputError, match="not a beadsim scalar table"):
        read_table(tmp_path / "other.csv")
    with pytest.raises(InputError, match="not a beadsim scalar table"):
        truncate_table(tmp_path / "other.csv", 1)
