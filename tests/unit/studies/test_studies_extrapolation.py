"""Extrapolation of finite-N theta estimates to N -> infinity and the combination of estimators.

Synthetic model: theta(N) = THETA + SLOPE N^(-1/2) with THETA = 3.0, SLOPE = -4 (the form of Grassberger and
Hegger, J. Chem. Phys. 102, 6881, 1995; from memory), N = 32, 64, 128, 256, 512, Gaussian noise of standard
deviation SIGMA = 0.01 on each value with that SIGMA reported as its error. Checks are against exact results
(closed-form lines, exact crossings) or scipy.stats / scipy.integrate, named beside each check.

Bands for many seeded data sets (n = 400 sets, seeds 0..399): for pulls that are exactly N(0, 1), the sample
mean has standard deviation 1/sqrt(n) = 0.05 and the band is +-3 of those (+-0.15); the sample standard
deviation s obeys (n - 1) s^2 / 1 ~ chi2(n - 1) (exact for Gaussian samples), and the band is the
0.135 % and 99.865 % quantiles of that distribution (scipy.stats.chi2.ppf), the two-sided 3-sigma
equivalent, i.e. s in about [0.90, 1.11]. A fraction of n Bernoulli(p) outcomes is checked within
3 sqrt(p (1 - p) / n) of p.
"""

import json
import math

import numpy as np
import pytest
from scipy import integrate, stats

from beadsim.errors import AnalysisError, InputError
from beadsim.studies.extrapolation import (ONE_POINT_NOTE, POOR_FIT_P, combine, extrapolate, extrapolate_estimate,
                                           pair_length)
from beadsim.studies.theta import Estimate

THETA, SLOPE, SIGMA = 3.0, -4.0, 0.01
LENGTHS = np.array([32, 64, 128, 256, 512], dtype=float)
N_SETS = 400
Q_LOW, Q_HIGH = stats.norm.cdf(-3), stats.norm.cdf(3)  # two-sided 3-sigma tail probabilities


def _values(seed, sigma=SIGMA):
    return THETA + SLOPE * LENGTHS ** -0.5 + sigma * np.random.default_rng(seed).standard_normal(LENGTHS.size)


def _std_band(n):
    """Two-sided 3-sigma-equivalent band of the sample standard deviation of n unit-variance Gaussian pulls."""
    return (math.sqrt(stats.chi2.ppf(Q_LOW, n - 1) / (n - 1)), math.sqrt(stats.chi2.ppf(Q_HIGH, n - 1) / (n - 1)))


def _check_unit_normal(pulls):
    lo, hi = _std_band(pulls.size)
    assert abs(pulls.mean()) < 3 / math.sqrt(pulls.size), pulls.mean()
    assert lo < pulls.std(ddof=1) < hi, (pulls.std(ddof=1), lo, hi)


def _binomial_band(p, n):
    return 3 * math.sqrt(p * (1 - p) / n)


@pytest.fixture(scope="module")
def fits():
    """Fits of 400 seeded synthetic data sets (seeds 0..399)."""
    return [extrapolate(LENGTHS, _values(s), np.full(LENGTHS.size, SIGMA)) for s in range(N_SETS)]


# --- extrapolate ---------------------------------------------------------------------------------------------

def test_exact_data_recover_theta_and_slope():
    # no noise: the model line is reproduced to rounding (1e-10); chi2 ~ 0 and p-value 1 (scipy.stats.chi2.sf(0, 3))
    fit = extrapolate(LENGTHS, THETA + SLOPE * LENGTHS ** -0.5, np.full(LENGTHS.size, SIGMA))
    assert fit.value == pytest.approx(THETA, abs=1e-10) and fit.slope == pytest.approx(SLOPE, abs=1e-10)
    assert fit.dof == 3 and fit.chi2 < 1e-18 and fit.chi2_per_dof < 1e-18 and fit.p_value == pytest.approx(1.0) and fit.notes == ()


def test_noisy_fit_recovers_theta_within_three_errors():
    # seed 1000, 5 lengths, noise 0.01: |theta_inf - 3| < 3 reported errors and |a + 4| < 3 reported errors
    fit = extrapolate(LENGTHS, _values(1000), np.full(LENGTHS.size, SIGMA), method="crossing")
    assert fit.method == "crossing" and fit.error > 0
    assert abs(fit.value - THETA) < 3 * fit.error and abs(fit.slope - SLOPE) < 3 * fit.slope_error


def test_pulls_of_unscaled_errors_are_unit_normal(fits):
    # linear least squares with known Gaussian errors: (estimate - truth) / covariance error is exactly N(0, 1);
    # 400 sets, mean within +-0.15, standard deviation within the chi2(399) band (module notes); both parameters
    assert all(f.value is not None for f in fits)
    _check_unit_normal(np.array([(f.value - THETA) / (f.error / f.birge_ratio) for f in fits]))
    _check_unit_normal(np.array([(f.slope - SLOPE) / (f.slope_error / f.birge_ratio) for f in fits]))


def test_chi2_of_fits_follows_chi2_with_three_dof(fits):
    # 5 points, 2 parameters: chi2 ~ chi2(3), mean 3 and variance 6 (exact); 400 sets: mean within
    # 3 sqrt(6 / 400) = 0.37 of 3; and the p-values are uniform: fraction below 0.5 within 3 binomial sd of 0.5
    chi2 = np.array([f.chi2 for f in fits])
    assert all(f.dof == 3 for f in fits)
    assert abs(chi2.mean() - 3) < 3 * math.sqrt(6 / N_SETS)
    assert abs(np.mean([f.p_value < 0.5 for f in fits]) - 0.5) < _binomial_band(0.5, N_SETS)


def test_quoted_birge_scaled_errors_have_the_predicted_spread(fits):
    # quoted pull = Z / max(1, sqrt(Q/3)), Z ~ N(0, 1) independent of Q ~ chi2(3) (Cochran's theorem for linear
    # least squares). So E[pull^2] = E[m], m = min(1, 3/Q), and Var(pull^2) = 3 E[m^2] - E[m]^2 (E[Z^4] = 3).
    # E[m^k] = P(Q <= 3) + integral_3^inf (3/q)^k pdf(q) dq with scipy.stats.chi2(3) and scipy.integrate.quad.
    # 400 sets: mean of pull^2 within 3 sqrt(Var / 400) of E[m] (two-sided: errors quoted too large and too small
    # both fail; the band is about +-0.19 around 0.86, i.e. a 12 % miscalibration of the errors is caught).
    def moment(k):
        tail = integrate.quad(lambda q: (3.0 / q) ** k * stats.chi2.pdf(q, 3), 3.0, np.inf)[0]
        return stats.chi2.cdf(3.0, 3) + tail

    e_m, e_m2 = moment(1), moment(2)
    pull2 = np.array([((f.value - THETA) / f.error) ** 2 for f in fits])
    assert abs(pull2.mean() - e_m) < 3 * math.sqrt((3 * e_m2 - e_m ** 2) / N_SETS), (pull2.mean(), e_m)
    scaled = [f for f in fits if f.birge_ratio > 1]
    assert scaled and all("Birge ratio" in f.notes[0] for f in scaled)


def test_two_points_give_the_exact_line_with_propagated_errors():
    # exact: through (x1, y1), (x2, y2) with x = N^(-1/2): theta = (y1 x2 - y2 x1) / (x2 - x1),
    # var = (x2^2 e1^2 + x1^2 e2^2) / (x2 - x1)^2 (propagation of independent errors)
    n, e = np.array([64.0, 256.0]), np.array([0.01, 0.02])
    y = THETA + SLOPE * n ** -0.5 + np.array([0.004, -0.003])
    x1, x2 = n ** -0.5
    fit = extrapolate(n, y, e)
    assert fit.value == pytest.approx((y[0] * x2 - y[1] * x1) / (x2 - x1), abs=1e-12)
    assert fit.error == pytest.approx(math.sqrt(x2 ** 2 * e[0] ** 2 + x1 ** 2 * e[1] ** 2) / abs(x2 - x1), rel=1e-12)
    assert fit.dof == 0 and fit.p_value is None and fit.chi2_per_dof is None and fit.birge_ratio == 1.0
    assert "dof = 0" in fit.notes[-1] and "fit quality cannot be judged" in fit.notes[-1]


def test_one_point_gives_no_extrapolation():
    fit = extrapolate([128], [2.7], [0.01])
    assert fit.value is None and fit.error is None and fit.notes[-1] == ONE_POINT_NOTE
    with pytest.raises(AnalysisError, match="no extrapolation"):
        fit.curve([100])


def test_points_with_non_finite_errors_are_left_out_with_a_note():
    values, errors = _values(1001), np.full(LENGTHS.size, SIGMA)
    errors[[1, 3]] = [np.nan, np.inf]
    fit = extrapolate(LENGTHS, values, errors)
    assert fit.n_used == (32.0, 128.0, 512.0) and fit.dof == 1
    assert fit.notes[0] == "2 of 5 points left out (non-finite error): N = 64, 256"
    only_one = extrapolate(LENGTHS[:2], values[:2], [SIGMA, np.nan])
    assert only_one.value is None and only_one.notes[-1] == ONE_POINT_NOTE


def test_missing_values_are_left_out_with_a_note():
    fit = extrapolate(LENGTHS, [None, *_values(1002)[1:]], np.full(LENGTHS.size, SIGMA))
    assert fit.value is not None and fit.notes[0].startswith("1 of 5 points left out (no value)")


def test_all_points_at_one_length_is_a_singular_fit():
    fit = extrapolate([64, 64, 64], [2.5, 2.51, 2.49], [0.01, 0.01, 0.01])
    assert fit.value is None and "singular" in fit.notes[-1]


def test_wrong_correction_form_gives_a_flagged_poor_fit():
    # data theta + 20/N with noise 0.001 (seed 1003): a line in N^(-1/2) cannot follow the curvature;
    # chi2/dof is in the thousands, so the p-value (scipy.stats.chi2.sf) is far below 0.01 and both the
    # Birge scaling and the poor fit are noted. The same data fitted with exponent 1 are described.
    y = THETA + 20.0 / LENGTHS + 0.001 * np.random.default_rng(1003).standard_normal(LENGTHS.size)
    fit = extrapolate(LENGTHS, y, np.full(LENGTHS.size, 0.001))
    assert fit.p_value < POOR_FIT_P
    assert any("Birge ratio" in n for n in fit.notes) and any(n.startswith("poor fit") for n in fit.notes)
    right = extrapolate(LENGTHS, y, np.full(LENGTHS.size, 0.001), exponent=1.0)
    assert right.p_value > POOR_FIT_P and abs(right.value - THETA) < 3 * right.error


def test_curve_reproduces_the_fit_and_its_limit():
    fit = extrapolate(LENGTHS, _values(1004), np.full(LENGTHS.size, SIGMA))
    y, err = fit.curve([np.inf, 100.0])
    assert y[0] == fit.value and err[0] == pytest.approx(fit.error, rel=1e-12)
    assert y[1] == pytest.approx(fit.value + fit.slope / 10.0, rel=1e-12) and err[1] > 0
    assert json.dumps(fit.as_dict(), allow_nan=False)


# --- effective length of a pair -------------------------------------------------------------------------------

def test_geometric_pair_length_is_the_geometric_mean():
    assert pair_length([32, 50], [64, 200], rule="geometric") == pytest.approx([math.sqrt(32 * 64), 100.0])


def test_crossing_rule_equals_geometric_mean_for_exponent_one():
    # module derivation: with phi = 1/2 and x = 1 the correction exponent w = 1/2 = phi, for which
    # (N1^-w - N2^-w) / (N2^phi - N1^phi) = (N1 N2)^(-1/2) exactly
    assert pair_length([32, 50], [64, 200], 1.0) == pytest.approx(pair_length([32, 50], [64, 200], 1.0, "geometric"),
                                                                  rel=1e-12)


def test_crossing_rule_is_continuous_at_zero_correction_exponent_and_lies_between_the_lengths():
    # x = 1/2 uses the logarithmic limit; x = 1/2 + 1e-9 the general formula: equal to 1e-7 relative
    n1, n2 = np.array([32.0, 64.0]), np.array([64.0, 1024.0])
    at = pair_length(n1, n2, 0.5)
    assert at == pytest.approx(pair_length(n1, n2, 0.5 + 1e-9), rel=1e-7)
    assert np.all((at > n1) & (at < n2))
    # square of the logarithmic mean of sqrt(N1), sqrt(N2) (exact): (sqrt(N2) - sqrt(N1)) / ln(sqrt(N2/N1))
    assert at == pytest.approx(((np.sqrt(n2) - np.sqrt(n1)) / np.log(np.sqrt(n2 / n1))) ** 2, rel=1e-12)


def _crossings(pairs, correction):
    """Exact crossing temperatures of y_N(T) = 0.4 sqrt(N) (T - THETA) + correction(N) for each pair (linear in T)."""
    return np.array([THETA + (correction(a) - correction(b)) / (0.4 * (math.sqrt(b) - math.sqrt(a)))
                     for a, b in pairs])


def test_pair_extrapolation_is_exact_for_curves_with_logarithmic_correction():
    # size per bond y_N(T) = 0.4 sqrt(N) (T - theta) - 0.3 ln N (phi = 1/2, w = 0, so x = 1/2): the crossings of
    # pairs are exactly theta + a N_eff^(-1/2) with the crossing rule (1e-10). Pairs of unequal ratio N2/N1: for a
    # constant ratio both rules give N_eff proportional to N1, so they differ only in the slope; here the
    # geometric mean leaves a bias (> 1e-4)
    pairs = np.array([[16, 24], [24, 64], [64, 256], [256, 512]], dtype=float)
    values = _crossings(pairs, lambda n: -0.3 * math.log(n))
    errors = np.full(len(pairs), 1e-3)
    fit = extrapolate(pairs, values, errors, pair_rule="crossing")
    assert fit.value == pytest.approx(THETA, abs=1e-10) and fit.chi2 < 1e-12
    assert fit.pairs_used[0] == (16.0, 24.0) and "correlated" in fit.notes[0]
    assert abs(extrapolate(pairs, values, errors, pair_rule="geometric").value - THETA) > 1e-4


def test_pair_extrapolation_with_power_correction_is_exact_for_its_exponent():
    # y_N(T) = 0.4 sqrt(N) (T - theta) + 0.5 N^(-1/4): w = 1/4, so the crossings shift as N^(-3/4); the crossing
    # rule with x = 3/4 reproduces theta to 1e-10
    pairs = np.array([[16, 32], [32, 64], [64, 128], [128, 256]], dtype=float)
    fit = extrapolate(pairs, _crossings(pairs, lambda n: 0.5 * n ** -0.25), np.full(4, 1e-3), exponent=0.75)
    assert fit.value == pytest.approx(THETA, abs=1e-10)


def test_extrapolate_estimate_reads_pairs_and_per_length_values():
    # exact model values: theta recovered to 1e-10 from both layouts of Estimate.details
    pairs = [(32, 64), (64, 128), (128, 256)]
    n_eff = pair_length(*np.array(pairs, dtype=float).T, 0.5)
    per_pair = Estimate("crossing", 2.8, 0.01, "N = 32..256",
                        details={"pairs": [{"n_small": a, "n_large": b, "value": THETA + SLOPE * n ** -0.5,
                                            "error": 0.01} for (a, b), n in zip(pairs, n_eff)]})
    fit = extrapolate_estimate(per_pair)
    assert fit.method == "crossing" and fit.value == pytest.approx(THETA, abs=1e-10)
    per_length = Estimate("nu internal", 2.8, 0.01, "N = 32..512",
                          details={"per_length": [{"n_beads": int(n), "value": THETA + SLOPE * n ** -0.5,
                                                   "error": 0.01} for n in LENGTHS]})
    assert extrapolate_estimate(per_length).value == pytest.approx(THETA, abs=1e-10)
    empty = extrapolate_estimate(Estimate("flory fit", 3.0, 0.01, ""))
    assert empty.value is None and "no per-pair or per-length values" in empty.notes[0]


# --- combine ---------------------------------------------------------------------------------------------------

CONSISTENT = {"crossing": (3.000, 0.01), "boyle": (3.004, 0.01), "nu pair": (2.998, 0.01)}


def test_consistent_estimators_have_no_systematic_error_and_all_agree():
    # chi2 = 0.56 < dof = 2, so the DerSimonian-Laird tau is exactly 0; each |v_i - m| < 2 sqrt(e_i^2 - 1/S1)
    result = combine(CONSISTENT)
    assert result.value == pytest.approx((3.000 + 3.004 + 2.998) / 3, abs=1e-12)
    assert result.statistical_error == pytest.approx(0.01 / math.sqrt(3), rel=1e-12)
    assert result.systematic_error == 0.0 and result.total_error == result.statistical_error
    assert result.consistent and set(result.agreeing) == set(CONSISTENT) and result.disagreeing == ()
    assert result.p_value == pytest.approx(stats.chi2.sf(result.chi2, 2)) and result.notes == ()
    # the record a study writes: every field under its own name, JSON-ready
    record = json.loads(json.dumps(result.as_dict()))
    assert (record["chi2"], record["dof"], record["value"], record["total_error"]) == (
        result.chi2, result.dof, result.value, result.total_error)


def test_outlier_is_flagged_and_increases_the_total_error():
    # 3.15 +- 0.02 against three values within 0.006 of 3.0 with errors 0.01: residual 0.14 against a band
    # of 2 sqrt(0.02^2 - 1/S1) = 0.038; chi2 = 43 for 3 dof, p ~ 2e-9 (scipy.stats.chi2.sf)
    base = combine(CONSISTENT)
    result = combine({**CONSISTENT, "outlier": (3.15, 0.02)})
    assert result.disagreeing == ("outlier",) and set(result.agreeing) == set(CONSISTENT)
    assert not result.consistent and result.p_value < POOR_FIT_P
    assert result.systematic_error > 0 and result.total_error > base.total_error
    assert result.total_error == pytest.approx(math.hypot(result.statistical_error, result.systematic_error))
    assert any("outlier" in n for n in result.notes) and any("inconsistent" in n for n in result.notes)
    assert json.loads(json.dumps(result.as_dict(), allow_nan=False))["disagreeing"] == ["outlier"]


def test_same_data_error_covers_fully_correlated_estimators():
    """Estimators that are one and the same noisy number (correlation 1) scatter like any one of them:
    with same_data=True the statistical error is sum (w_i/S1) e_i, exactly the standard deviation of
    the weighted mean of fully correlated estimators; 400 seeded sets (seeds 0..399) of two estimators
    sharing one N(0, 1) draw with errors 0.01 and 0.02 must give pulls with rms inside the chi2(400)
    0.1 % and 99.9 % quantiles (scipy.stats), both sides. Without same_data the error is 1/sqrt(S1),
    11 % too small here, and fails."""
    e = np.array([0.01, 0.02])
    pulls, naive = [], []
    for seed in range(N_SETS):
        v = THETA + e * np.random.default_rng(seed).standard_normal()
        pulls.append((combine([("a", v[0], e[0]), ("b", v[1], e[1])], same_data=True).value - THETA)
                     / combine([("a", v[0], e[0]), ("b", v[1], e[1])], same_data=True).statistical_error)
        naive.append(combine([("a", v[0], e[0]), ("b", v[1], e[1])]).statistical_error)
    band = (stats.chi2.ppf(0.001, N_SETS), stats.chi2.ppf(0.999, N_SETS))
    assert band[0] < np.sum(np.square(pulls)) < band[1]
    assert naive[0] == pytest.approx(1 / math.sqrt(1e4 + 2.5e3), rel=1e-12)
    assert not band[0] < np.sum(np.square(np.array(pulls) * 0.012 / naive[0])) < band[1]


def test_dersimonian_laird_formula():
    # tau^2 = (Q - (k - 1)) / (S1 - S2/S1) (DerSimonian and Laird 1986), evaluated by hand for two estimators
    # 3.0 +- 0.01 and 3.1 +- 0.02: w = (1e4, 2.5e3), m = 3.02, Q = 1e4 * 0.02^2 + 2.5e3 * 0.08^2 = 20,
    # S1 - S2/S1 = 1.25e4 - (1e8 + 6.25e6) / 1.25e4 = 4000, tau^2 = 19 / 4000
    result = combine([("a", 3.0, 0.01), ("b", 3.1, 0.02)])
    assert result.value == pytest.approx(3.02, abs=1e-12) and result.chi2 == pytest.approx(20.0, rel=1e-10)
    assert result.systematic_error == pytest.approx(math.sqrt(19 / 4000), rel=1e-10)


def test_one_estimator_gives_its_value_and_a_note():
    result = combine({"crossing": (2.95, 0.03)})
    assert (result.value, result.statistical_error, result.total_error) == (2.95, 0.03, 0.03)
    assert result.systematic_error is None and result.chi2 is None
    assert result.notes[-1] == "one estimator: no systematic error could be estimated from one estimator"


def test_estimators_without_a_value_are_left_out():
    none = extrapolate([128], [2.7], [0.01], method="ratio")
    fit = extrapolate(LENGTHS, _values(1005), np.full(LENGTHS.size, SIGMA), method="crossing")
    result = combine([fit, none])
    assert result.value == fit.value and result.notes[0] == "left out (no value or no finite error): ratio"


def test_no_usable_estimator_gives_no_value_and_a_complete_record():
    none = extrapolate([128], [2.7], [0.01], method="ratio")
    record = json.loads(json.dumps(combine([none]).as_dict()))
    assert record["value"] is None and record["total_error"] is None
    assert record["agreeing"] == record["disagreeing"] == record["estimators"] == []
    assert record["note"].endswith("no estimator has a value with a finite error")


ERRORS_4 = np.array([0.01, 0.02, 0.015, 0.03])


@pytest.fixture(scope="module")
def combinations():
    """combine() of 4 unbiased estimators of THETA with errors ERRORS_4, seeds 0..399."""
    out = []
    for seed in range(N_SETS):
        v = THETA + ERRORS_4 * np.random.default_rng(seed).standard_normal(4)
        out.append(combine([(f"e{i}", v[i], ERRORS_4[i]) for i in range(4)]))
    return out


def test_combined_statistical_error_is_calibrated(combinations):
    # pulls (m - theta) / statistical_error are exactly N(0, 1) for independent Gaussian estimators; module bands
    _check_unit_normal(np.array([(c.value - THETA) / c.statistical_error for c in combinations]))


def test_systematic_error_vanishes_as_often_as_chi2_predicts(combinations):
    # tau = 0 exactly when Q <= k - 1 = 3, probability scipy.stats.chi2.cdf(3, 3) = 0.608; 400 sets,
    # 3 binomial standard deviations (0.073)
    p = stats.chi2.cdf(3, 3)
    assert abs(np.mean([c.systematic_error == 0 for c in combinations]) - p) < _binomial_band(p, N_SETS)


@pytest.mark.parametrize("index", range(4))
def test_agreement_rule_has_its_nominal_coverage(combinations, index):
    # |v_i - m| / sqrt(e_i^2 - 1/S1) ~ N(0, 1): estimator i agrees with probability 2 Phi(2) - 1 = 0.9545
    # (scipy.stats.norm); 400 sets, 3 binomial standard deviations (0.031), both sides
    p = 2 * stats.norm.cdf(2) - 1
    hits = np.mean([f"e{index}" in c.agreeing for c in combinations])
    assert abs(hits - p) < _binomial_band(p, N_SETS)


# --- input checks ----------------------------------------------------------------------------------------------

@pytest.mark.parametrize("kwargs,name", [
    ({"n_values": LENGTHS[:4]}, "n_values"),
    ({"values": [3.0, 2.9]}, "errors"),
    ({"n_values": [0, 64, 128, 256, 512]}, "n_values: chain lengths must be > 0"),
    ({"n_values": [-32, 64, 128, 256, 512]}, "n_values: chain lengths must be > 0"),
    ({"errors": [0.01, -0.01, 0.01, 0.01, 0.01]}, "errors"),
    ({"errors": [0.01, 0.0, 0.01, 0.01, 0.01]}, "errors"),
    ({"exponent": 0.0}, "exponent"),
    ({"pair_rule": "midpoint"}, "pair_rule"),
    ({"n_values": [[32, 32], [64, 128]], "values": [3, 3], "errors": [1, 1]}, "n_values"),
    ({"values": [3.0, np.inf, 3.0, 3.0, 3.0]}, "values"),
])
def test_bad_extrapolation_input_names_the_argument(kwargs, name):
    args = {"n_values": LENGTHS, "values": _values(0), "errors": np.full(LENGTHS.size, SIGMA), **kwargs}
    with pytest.raises(InputError, match=f"^{name}"):
        extrapolate(**args)


@pytest.mark.parametrize("entries,match", [
    ({"crossing": (3.0, -0.01)}, r"extrapolations\['crossing'\]: error must be > 0"),
    ([("a", 3.0, 0.01), ("a", 3.1, 0.01)], "names must be distinct"),
    ({}, "no estimators"),
    ({"boyle": 3.0}, "entry 'boyle'"),
])
def test_bad_combine_input_names_the_estimator(entries, match):
    with pytest.raises(InputError, match=match):
        combine(entries)
