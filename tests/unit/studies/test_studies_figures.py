"""Study figures are written as PNG and SVG from a synthetic table (beadsim.studies.theta.flory_model_table)."""

import numpy as np
import pytest

from beadsim.errors import InputError
from beadsim.studies import figures
from beadsim.studies.collapse import transition_sigmoids
from beadsim.studies.theta import crossing_theta, flory_model_table

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def table():
    # theta = 3, A = 0.5, w = 0.5, N = 16, 32, 64, 1 % noise, seed 61
    return flory_model_table([16, 32, 64], np.round(np.arange(1.0, 4.01, 0.25), 10), 3.0, 0.5, 0.5, seed=61)


def _check_written(paths):
    for p in paths:
        data = open(p, "rb").read()
        assert data.startswith(PNG_SIGNATURE) if p.endswith(".png") else b"<svg" in data[:2000]


def test_every_figure_is_written_as_png_and_svg(table, tmp_path):
    theta = crossing_theta(table, "temperature", n_bootstrap=20)
    written = [
        figures.size_crossing_figure(table, "temperature", tmp_path / "crossing", estimate=theta),
        figures.size_crossing_figure(table, "temperature", tmp_path / "crossing_re", quantity="re2"),
        figures.nu_eff_figure(table, "temperature", tmp_path / "nu_eff", estimate=theta),
        figures.collapse_figure(table, "temperature", theta, tmp_path / "collapse"),
        figures.size_scaling_figure(table, "temperature", [1.0, 3.0, 4.0], tmp_path / "rg_vs_n"),
        figures.sigmoid_figure(table, "temperature", transition_sigmoids(table, "temperature"), tmp_path / "sigmoid"),
    ]
    for paths in written:
        assert [p[-4:] for p in paths] == [".png", ".svg"]
        _check_written(paths)


def test_single_format_by_suffix(table, tmp_path):
    paths = figures.collapse_figure(table, "depth", 3.0, tmp_path / "c.svg")
    assert paths == [str(tmp_path / "c.svg")]
    _check_written(paths)


def test_bad_figure_arguments_are_input_errors(table, tmp_path):
    with pytest.raises(InputError, match=".png or .svg"):
        figures.nu_eff_figure(table, "temperature", tmp_path / "nu.pdf")
    with pytest.raises(InputError, match="controls"):
        figures.size_scaling_figure(table, "temperature", [2.1], tmp_path / "x")
    with pytest.raises(InputError, match="theta"):
        figures.collapse_figure(table, "temperature", crossing_theta(table.query("n_beads == 16"), "temperature"),
                                tmp_path / "x")
