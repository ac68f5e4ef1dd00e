"""Form factor against the Debye function and the exact finite-N Gaussian-chain sum; kernels against twins."""

import math

import numpy as np
import pytest

from beadsim.analysis import (debye_function, form_factor, guinier_rg, histogram_error_bound, kratky,
                              structure_factor)
from beadsim.errors import AnalysisError, InputError
from beadsim.kernels.scattering import (debye_sum, debye_sum_reference, linear_binned_pair_distances,
                                        linear_binned_pair_distances_reference)


def exact_gaussian_form_factor(q, n, b):
    """P(q) = 1/N + (2/N^2) sum_{k=1}^{N-1} (N-k) g^k, g = exp(-q^2 b^2/6): exact for a discrete Gaussian chain."""
    k = np.arange(1, n)
    g = np.exp(-(q[:, None] * b) ** 2 / 6.0) ** k[None, :]
    return 1.0 / n + 2.0 / n ** 2 * np.sum((n - k) * g, axis=1)


def block_means(x, n, q, n_blocks, method):
    """P(q) of independent chains (one per frame) averaged in blocks; returns (mean, standard error)."""
    blocks = np.array([form_factor(part, [np.arange(n)], q, method=method) for part in np.array_split(x, n_blocks)])
    return blocks.mean(axis=0), blocks.std(axis=0, ddof=1) / np.sqrt(n_blocks)


def test_gaussian_chain_matches_exact_finite_n_sum(gaussian_chains):
    # seed 51, 4000 independent chains of N = 16, bond rms b = 1; 40 blocks give the standard error
    n, b = 16, 1.0
    x = gaussian_chains(51, 4000, n, b)
    q = np.geomspace(0.05, 5.0, 25)
    p, se = block_means(x, n, q, 40, "exact")
    exact = exact_gaussian_form_factor(q, n, b)
    # 4 standard errors: each of the 25 q points fails by chance with probability 6e-5
    assert np.all(np.abs(p - exact) < 4 * se)


def test_long_gaussian_chain_approaches_debye_function(gaussian_chains):
    # Debye, J. Phys. Colloid Chem. 51, 18 (1947): P = 2(exp(-x) + x - 1)/x^2, x = q^2 Rg^2,
    # with <Rg^2> = b^2 (N^2-1)/(6N) (exact for ideal chains); seed 52, 400 chains of N = 300
    n, b = 300, 1.0
    x = gaussian_chains(52, 400, n, b)
    rg2 = b * b * (n * n - 1) / (6 * n)
    q = np.geomspace(0.02, 1.0, 20) / np.sqrt(rg2) * 5  # q Rg from 0.1 to 5
    p, se = block_means(x, n, q, 20, "histogram")
    debye = debye_function(q * q * rg2)
    # tolerance: sampling error plus the finite-N difference between the discrete exact sum and
    # the continuous Debye function (known from the two closed forms) plus the histogram bound
    finite_n = np.abs(exact_gaussian_form_factor(q, n, b) - debye)
    assert np.all(np.abs(p - debye) < 4 * se + finite_n + histogram_error_bound(q, 0.02 / q.max(), n))
    # the finite-N correction is small here, so the comparison is a real check of the Debye limit
    assert np.all(finite_n < 0.005)


def test_debye_function_series_branch_is_continuous():
    # both branches near x = 1e-3 against the Taylor series 2(e^-x + x - 1)/x^2 = sum_k 2(-x)^k/(k+2)! (exact),
    # five terms (remainder below 1e-17)
    x = np.array([1e-3 * (1 - 1e-9), 1e-3 * (1 + 1e-9)])
    series = sum(2 * (-x) ** k / math.factorial(k + 2) for k in range(5))
    np.testing.assert_allclose(debye_function(x), series, rtol=1e-12)


def test_kratky_plateau_of_debye_function():
    # q^2 P(q) of the Debye function tends to 2/Rg^2 as 2/Rg^2 (1 - 1/x + ...), x = (q Rg)^2 (expansion of
    # 2(exp(-x) + x - 1)/x^2); at q Rg = 100 the correction is 1e-4
    rg = 3.0
    q = np.array([100.0 / rg])
    np.testing.assert_allclose(kratky(q, debye_function((q * rg) ** 2)), 2 / rg ** 2 * (1 - 1e-4), rtol=1e-12)


def test_debye_kernel_equals_numpy_twin(gaussian_chains):
    x = np.ascontiguousarray(gaussian_chains(53, 6, 50).reshape(3, 2, 50, 3))
    q = np.geomspace(0.01, 20.0, 40)
    np.testing.assert_allclose(debye_sum(x, q), debye_sum_reference(x, q), rtol=1e-10)


def test_histogram_kernel_equals_numpy_twin(gaussian_chains):
    x = np.ascontiguousarray(gaussian_chains(54, 4, 60).reshape(2, 2, 60, 3))
    h = linear_binned_pair_distances(x, 0.05, 800)
    np.testing.assert_allclose(h, linear_binned_pair_distances_reference(x, 0.05, 800), rtol=1e-10, atol=1e-12)
    assert np.isclose(h.sum(), 4 * 60 * 59 / 2)  # every pair counted once


@pytest.mark.parametrize("bin_width", [0.01, 0.1, 0.4])
def test_histogram_path_within_stated_bound_of_exact_path(gaussian_chains, bin_width):
    # bound (N-1)/N (q dr)^2/24 follows from |d^2/dx^2 sin(x)/x| <= 1/3 and linear interpolation error dr^2/8 |f''|
    n = 120
    x = gaussian_chains(55, 10, n)
    q = np.geomspace(0.05, 3.0, 30)
    exact = form_factor(x, [np.arange(n)], q, method="exact")
    hist = form_factor(x, [np.arange(n)], q, method="histogram", bin_width=bin_width)
    assert np.all(np.abs(hist - exact) <= histogram_error_bound(q, bin_width, n))


def test_guinier_recovers_rg_from_exact_guinier_law():
    # Guinier's law P = exp(-q^2 Rg^2 / 3) is a straight line in ln P versus q^2 (exact)
    rg = 2.5
    q = np.linspace(0.01, 1.0, 100)
    fit = guinier_rg(q, np.exp(-(q * rg) ** 2 / 3))
    assert abs(fit.rg - rg) < 1e-10
    assert fit.q_max * rg < 1.0 and fit.n_points >= 5


def test_guinier_rg_of_the_exact_debye_curve_is_within_half_a_percent():
    """The exact form factor of a Gaussian coil, P = 2 (exp(-x) + x - 1) / x^2 with x = (q Rg)^2 (Debye, J. Phys.
    Colloid Chem. 51, 18, 1947), written out here rather than taken from the module: the Guinier estimate over
    its default window q Rg < 1 returns Rg within 0.5 % (a straight line in q^2 there is 3.3 % low)."""
    for rg in (0.7, 3.0, 12.0):
        q = np.geomspace(0.2 / rg, 10.0 / rg, 60)
        x = (q * rg) ** 2
        fit = guinier_rg(q, 2.0 * (np.exp(-x) + x - 1.0) / x ** 2)
        assert abs(fit.rg / rg - 1.0) < 0.005 and fit.q_max * rg < 1.0


def test_guinier_reports_the_range_of_its_last_fit():
    # one iteration fits the five smallest q only; the exact Guinier law makes that fit exact, and the
    # reported window must be those five points (not the window the fitted Rg would select next)
    rg = 2.5
    q = np.linspace(0.01, 1.0, 100)
    fit = guinier_rg(q, np.exp(-(q * rg) ** 2 / 3), max_iterations=1)
    assert (fit.n_points, fit.q_min, fit.q_max) == (5, q[0], q[4])
    assert abs(fit.rg - rg) < 1e-9


@pytest.mark.parametrize("q, p, kwargs, error, message", [
    ([], [], {}, AnalysisError, "Guinier fit needs 5 or more q values with q Rg < 1.0; 0 available"),
    ([0.1, 0.3, 0.2, 0.4], [0.9, 0.8, 0.7, 0.6], {}, InputError, "q: expected increasing scattering vector"),
    ([0.0, 0.1, 0.2, 0.3], [1.0, 0.9, 0.8, 0.7], {}, InputError, "q: expected increasing scattering vector"),
    ([0.1, 0.2, 0.3], [0.9, 0.8], {}, InputError, r"p: expected shape \(3\), got \(2,\)"),
    ([0.1, 0.2, 0.3], [0.9, 0.8, 0.7], {"max_iterations": 0}, InputError, "max_iterations: must be an integer >= 1"),
    ([0.1, 0.2, 0.3], [0.9, 0.8, 0.7], {"qrg_max": -1.0}, InputError, "qrg_max: must be a finite number > 0"),
])
def test_guinier_refuses_bad_input_with_beadsim_errors(q, p, kwargs, error, message):
    with pytest.raises(error, match=message):
        guinier_rg(q, p, **kwargs)


@pytest.mark.parametrize("q, bin_width, n_beads, message", [
    ({}, 0.1, 10, "q: expected an array of float64, got dict"),
    ([[0, 1, 2], [2, 30]], 0.1, 10, "q: expected an array of float64, got list"),
    ([-1.0, 2.0], 0.1, 10, "q: scattering vector magnitudes must be >= 0"),
    ([1.0, 2.0], "", 10, "bin_width: expected a number, got ''"),
    ([1.0, 2.0], None, 10, "bin_width: expected a number, got None"),
    ([1.0, 2.0], 0.1, 0, "n_beads: must be an integer >= 1, got 0"),
    ([1.0, 2.0], 0.1, None, "n_beads: expected an integer, got None"),
])
def test_histogram_error_bound_refuses_bad_input(q, bin_width, n_beads, message):
    with pytest.raises(InputError, match=message):
        histogram_error_bound(q, bin_width, n_beads)


def test_structure_factor_of_simple_cubic_crystal_has_bragg_peak():
    # lattice of N points with spacing a in a box of m a: S(k) = N at k = 2 pi / a, 0 at other k (exact)
    a, m = 1.0, 4
    grid = np.stack(np.meshgrid(*[np.arange(m) * a] * 3, indexing="ij"), axis=-1).reshape(1, -1, 3)
    sf = structure_factor(grid, np.full((1, 3), m * a), q_max=2 * np.pi / a * 1.01, shell_width=2 * np.pi / (m * a))
    n = grid.shape[1]
    peak = np.argmin(np.abs(sf.q - 2 * np.pi / a))
    np.testing.assert_allclose(sf.q[peak], 2 * np.pi / a, rtol=1e-12)
    np.testing.assert_allclose(sf.s[peak], n, rtol=1e-10)
    assert np.all(np.delete(sf.s, peak) < 1e-18 * n ** 2 + 1e-9)


def test_structure_factor_of_ideal_gas_is_one():
    # uncorrelated uniform positions: <S(k)> = 1 at every nonzero reciprocal lattice vector (exact);
    # S(k) per vector has variance ~1, so a shell with m vectors over F frames has standard error 1/sqrt(m F)
    rng = np.random.default_rng(56)
    box, n_frames = 6.0, 20
    x = rng.uniform(0, box, size=(n_frames, 500, 3))
    sf = structure_factor(x, np.full((n_frames, 3), box), q_max=4.0)
    se = 1.0 / np.sqrt(sf.n_vectors * n_frames)
    assert np.all(np.abs(sf.s - 1.0) < 4.5 * se)  # 4.5 SE over the shells: chance failure below 1e-3
