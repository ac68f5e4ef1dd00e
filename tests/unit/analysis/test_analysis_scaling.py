"""Scaling fits recover known exponents, with errors that cover the truth."""

import numpy as np
import pytest

from beadsim.analysis import (debye_function, fit_power_law, nu_from_chain_size, nu_from_form_factor,
                              nu_from_internal_distances)
from beadsim.errors import AnalysisError, InputError

NU_SAW = 0.587597  # Clisby, Phys. Rev. Lett. 104, 055702 (2010)


def test_nu_from_noisy_chain_sizes():
    # synthetic R = 0.4 N^nu with 1 % Gaussian noise at 8 chain lengths, seed 101, errors given;
    # the fitted exponent must lie within 3 reported standard errors of the input
    rng = np.random.default_rng(101)
    n = np.array([16, 32, 64, 128, 256, 512, 1024, 2048], dtype=float)
    size = 0.4 * n ** NU_SAW
    err = 0.01 * size
    fit = nu_from_chain_size(n, size + err * rng.normal(size=n.size), err)
    assert abs(fit.nu - NU_SAW) < 3 * fit.nu_error
    # propagated error of the slope for equal relative errors 0.01 (least squares, exact formula)
    lx = np.log(n)
    assert fit.nu_error == pytest.approx(0.01 / np.sqrt(np.sum((lx - lx.mean()) ** 2)), rel=0.02)
    assert (fit.x_min, fit.x_max) == (16, 2048)


def test_errors_of_power_law_fit_are_calibrated():
    # seed 102: 300 synthetic data sets as above; the input exponent lies within one reported error in
    # 68.27 % of fits; binomial standard deviation sqrt(0.6827 * 0.3173 / 300) = 0.027, tolerance 3 of those
    rng = np.random.default_rng(102)
    n = np.geomspace(10, 1000, 6)
    truth = 0.4 * n ** NU_SAW
    hits = []
    for _ in range(300):
        fit = nu_from_chain_size(n, truth * (1 + 0.02 * rng.normal(size=n.size)), 0.02 * truth)
        hits.append(abs(fit.nu - NU_SAW) < fit.nu_error)
    assert abs(np.mean(hits) - 0.6827) < 3 * np.sqrt(0.6827 * 0.3173 / 300)


def test_fit_range_selects_points():
    x = np.arange(1.0, 101.0)
    fit = fit_power_law(x, 2 * x ** 1.5, x_range=(10, 50))
    assert (fit.x_min, fit.x_max, fit.n_points) == (10, 50, 41)
    assert fit.exponent == pytest.approx(1.5, rel=1e-12) and fit.prefactor == pytest.approx(2, rel=1e-12)


def test_nu_from_exact_internal_distance_power_law():
    s = np.arange(1.0, 300.0)
    fit = nu_from_internal_distances(s, 1.3 * s ** (2 * NU_SAW), s_range=(10, 100))
    assert fit.nu == pytest.approx(NU_SAW, rel=1e-12) and (fit.x_min, fit.x_max) == (10, 100)


def test_nu_from_exact_form_factor_power_law():
    q = np.geomspace(0.1, 10, 50)
    fit = nu_from_form_factor(q, 0.7 * q ** (-1 / NU_SAW), q_range=(0.5, 5))
    assert fit.nu == pytest.approx(NU_SAW, rel=1e-12)


def test_nu_from_debye_function_tail_is_one_half():
    # Debye function -> 2/x - 2/x^2 for large x = (q Rg)^2, i.e. P ~ q^-2 and nu = 1/2; over q Rg in
    # [30, 300] the 1/x correction shifts the local slope by at most 2/x / (1 - 1/x) < 2.3e-3
    q = np.geomspace(10, 1000, 60)
    fit = nu_from_form_factor(q, debye_function(q * q), q_range=(30, 300))
    assert abs(fit.nu - 0.5) < 0.5 * 2.3e-3


def test_too_few_points_is_an_analysis_error():
    with pytest.raises(AnalysisError, match="needs 3 or more points"):
        fit_power_law([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], x_range=(1.5, 2.5))


def test_weighted_power_law_fit_equals_numpy_polyfit():
    # reference: numpy.polyfit on (ln x, ln y) with weights 1/sigma_ln_y and cov="unscaled" (absolute errors);
    # seed 103, 7 points, 3 % errors; both solve the same least-squares problem, so they agree to rounding
    rng = np.random.default_rng(103)
    x = np.geomspace(8, 512, 7)
    y = 0.4 * x ** NU_SAW * (1 + 0.03 * rng.normal(size=x.size))
    err = 0.03 * y
    fit = fit_power_law(x, y, err)
    coef, cov = np.polyfit(np.log(x), np.log(y), 1, w=y / err, cov="unscaled")
    assert fit.exponent == pytest.approx(coef[0], rel=1e-12)
    assert fit.prefactor == pytest.approx(np.exp(coef[1]), rel=1e-12)
    assert fit.exponent_error == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-10)


@pytest.mark.parametrize("q_range", ["", {}, 0, "0", [[0, 1, 2], [2, 30]], (0.5, float("nan"))])
def test_form_factor_window_must_be_a_pair_of_numbers(q_range):
    q = np.geomspace(0.1, 10, 20)
    with pytest.raises(InputError, match=r"q_range: expected a pair of numbers|q_range: expected \(low, high\)"):
        nu_from_form_factor(q, q ** -1.7, q_range)


def test_internal_distances_at_one_separation_have_no_slope():
    # every point at s = 4: ln <R^2> against ln s is a vertical set, no straight line through it
    with pytest.raises(AnalysisError, match="power-law fit: slope undefined, the 3 points share one abscissa"):
        nu_from_internal_distances(np.full(3, 4.0), np.array([1.0, 2.0, 3.0]))


def test_internal_distance_arrays_are_checked_by_name():
    with pytest.raises(InputError, match=r"r2: expected shape \(3\), got \(2,\)"):
        nu_from_internal_distances([1.0, 2.0, 3.0], [1.0, 2.0])
    with pytest.raises(InputError, match="s: expected an array of float64, got dict"):
        nu_from_internal_distances({}, [1.0, 2.0])


def test_power_law_errors_out_of_floating_point_range_are_refused():
    # relative errors of 1e-200 square to zero: weights 1/sigma^2 would be infinite
    x = np.array([1.0, 2.0, 4.0])
    with pytest.raises(AnalysisError, match=r"power-law fit: the weights 1/sigma\^2 must be finite and > 0"):
        fit_power_law(x, x ** 0.5, 1e-200 * x ** 0.5)
