"""Theta estimators recover a known theta from data generated with the Flory-type expansion-factor model.

Synthetic model (beadsim.studies.theta.flory_model_table, equation of Grosberg and Khokhlov 1994 /
de Gennes 1979 [memory]): alpha^5 - alpha^3 - w/alpha^3 = A tau N^(1/2), <Rg^2> = b2 (N^2-1)/(6N) alpha^2,
<Re^2> = b2 (N-1) alpha^2. With w independent of N, alpha is the same for every N at tau = 0, so every
estimator's criterion holds exactly at theta (exact for the model). Unless stated: theta = 3.0, A = 0.5,
w = 0.5, b2 = 1, N = 16, 32, 64, 128, T = 2.4 ... 3.8 step 0.1, 4 replicas per point, 1 % Gaussian
noise per run with that 1 % reported as its error.
"""

import numpy as np
import pandas as pd
import pytest

from beadsim.errors import InputError
from beadsim.studies.theta import (W_CRITICAL, Estimate, collapse_theta, crossing_theta, estimates_table,
                                   flory_alpha, flory_model_table, flory_nu_local,
                                   nu_internal_theta, nu_scaling_theta, ratio_theta, summarize_theta,
                                   tau_from_control)

THETA, A, W, B2 = 3.0, 0.5, 0.5, 1.0
LENGTHS = (16, 32, 64, 128)
TEMPERATURES = np.round(np.arange(2.4, 3.81, 0.1), 10)
THETA_DEPTH = 1.0
DEPTHS = np.round(np.arange(0.7, 1.31, 0.04), 10)


def _table(seed, noise=0.01, lengths=LENGTHS, kind="temperature"):
    """The model table, with <Rg^2> written out here from the textbook ideal-chain factor (N^2 - 1)/(6N)
    (Rubinstein and Colby, Polymer Physics, 2003, ch. 2) rather than through the module's own helper, so a
    wrong normaliser in the estimators cannot cancel against the same one in the data."""
    controls, theta = (TEMPERATURES, THETA) if kind == "temperature" else (DEPTHS, THETA_DEPTH)
    df = flory_model_table(lengths, controls, theta, A, W, B2, kind, n_replicas=4, relative_error=noise,
                           nu_error=noise / 2, seed=seed)
    n = df["n_beads"].to_numpy(dtype=float)
    alpha2 = flory_alpha(A * tau_from_control(df["control"].to_numpy(), theta, kind) * np.sqrt(n), W) ** 2
    rg2 = B2 * (n * n - 1.0) / (6.0 * n) * alpha2
    df["rg2"] = rg2 * (1 + noise * np.random.default_rng(seed + 10_000).standard_normal(n.size))
    df["rg2_error"] = noise * rg2
    return df


def _varying_ratio(df, kind, theta, kappa=0.3):
    """Multiply <Re^2> by (alpha/alpha_0)^(2 kappa), alpha_0 = alpha(z=0): the ratio then passes 6N/(N+1) at theta."""
    z = A * tau_from_control(df["control"], theta, kind) * np.sqrt(df["n_beads"])
    factor = (flory_alpha(z, W) / flory_alpha(0.0, W)) ** (2 * kappa)
    out = df.copy()
    out["re2"] *= factor
    out["re2_error"] *= factor
    return out


ESTIMATORS = {
    "crossing rg2": lambda df, kind: crossing_theta(df, kind, "rg2", n_bootstrap=100, seed=5),
    "crossing re2": lambda df, kind: crossing_theta(df, kind, "re2", n_bootstrap=100, seed=5),
    "nu scaling": nu_scaling_theta,
    "nu internal": nu_internal_theta,
    "collapse": lambda df, kind: collapse_theta(df, kind, n_bootstrap=40, seed=5),
}


@pytest.mark.parametrize("kind,theta", [("temperature", THETA), ("depth", THETA_DEPTH)])
@pytest.mark.parametrize("name", sorted(ESTIMATORS))
def test_estimator_recovers_theta_within_three_reported_errors(name, kind, theta):
    # seed 11, 4 lengths x 15-16 controls x 4 replicas, 1 % noise: |estimate - theta| < 3 reported errors
    est = ESTIMATORS[name](_table(11, kind=kind), kind)
    assert est.value is not None and est.error > 0
    assert abs(est.value - theta) < 3 * est.error, (est.value, est.error, est.notes)


@pytest.mark.parametrize("kind,theta", [("temperature", THETA), ("depth", THETA_DEPTH)])
def test_ratio_estimator_recovers_theta(kind, theta):
    # seed 12; Re^2 modified so the ratio rises through 6N/(N+1) at theta (kappa = 0.3); 3 reported errors
    est = ratio_theta(_varying_ratio(_table(12, kind=kind), kind, theta), kind)
    assert est.value is not None and abs(est.value - theta) < 3 * est.error, (est.value, est.error, est.notes)
    assert len(est.details["per_length"]) == len(LENGTHS)


@pytest.mark.parametrize("name", sorted(ESTIMATORS))
def test_noise_free_model_gives_theta_up_to_local_fit_bias(name):
    # noise 1e-9: only the bias of the method remains; the 1 % data above give errors >= 4e-3,
    # so a bias below 1e-3 is negligible against them
    est = ESTIMATORS[name](_table(13, noise=1e-9), "temperature")
    assert est.value == pytest.approx(THETA, abs=1e-3)


def _coverage_tolerance(n_trials, p=0.9545):
    """Three binomial standard deviations of the fraction of 2-sigma hits."""
    return 3 * np.sqrt(p * (1 - p) / n_trials)


def test_bootstrap_error_of_crossing_matches_the_scatter_of_estimates():
    """60 seeds (1000..1059), n_bootstrap 60. For calibrated errors the pulls z = (estimate - theta) / error
    are standard normal, so sum z^2 follows chi2 with 60 degrees of freedom (scipy.stats); the check is
    two-sided at the 0.1 % and 99.9 % quantiles, i.e. the rms pull must lie in about [0.67, 1.34]: errors
    1.5 times too large or too small fail."""
    from scipy.stats import chi2
    pulls = np.array([(e.value - THETA) / e.error for e in
                      (crossing_theta(_table(s), "temperature", "rg2", 60, seed=s) for s in range(1000, 1060))])
    assert chi2.ppf(0.001, 60) < np.sum(pulls ** 2) < chi2.ppf(0.999, 60), np.sqrt(np.mean(pulls ** 2))


def test_delta_method_error_of_nu_crossing_covers_truth():
    # 150 seeds (2000..2149): fraction within 2 reported errors 0.954, tolerance 3 binomial sd (0.051), both sides
    hits = [abs((e := nu_scaling_theta(_table(s), "temperature")).value - THETA) < 2 * e.error
            for s in range(2000, 2150)]
    assert abs(np.mean(hits) - 0.9545) < _coverage_tolerance(150)


@pytest.mark.parametrize("estimator", [crossing_theta, nu_scaling_theta, collapse_theta])
def test_one_chain_length_gives_a_note_not_an_error(estimator):
    est = estimator(_table(15, lengths=(64,)), "temperature")
    assert est.value is None and est.error is None
    assert "needs at least 2 chain lengths" in est.notes[-1] and "N = 64" in est.notes[-1]


def test_per_length_estimators_still_work_with_one_chain_length():
    df = _table(16, lengths=(64,))
    assert abs(nu_internal_theta(df, "temperature").value - THETA) < 3 * nu_internal_theta(df, "temperature").error
    est = ratio_theta(_varying_ratio(df, "temperature", THETA), "temperature")
    assert abs(est.value - THETA) < 3 * est.error


def test_summary_lists_every_estimator_side_by_side():
    estimates = summarize_theta(_table(17), "temperature", seed=3, n_bootstrap=40)
    assert len(estimates) == 7 and all(isinstance(e, Estimate) for e in estimates)
    table = estimates_table(estimates)
    assert list(table.columns) == ["method", "value", "error", "fitted_on", "note"] and len(table) == 7
    assert table["method"].is_unique and "N = 16, 32, 64, 128" in table["fitted_on"].iloc[0]


def test_missing_nu_internal_column_is_a_note():
    est = nu_internal_theta(_table(18).drop(columns=["nu_internal", "nu_internal_error"]), "temperature")
    assert est.value is None and "nu_internal" in est.notes[0]


def test_runs_without_an_error_bar_are_left_out_with_a_note():
    df = _table(19)
    df.loc[:9, "rg2_error"] = np.nan
    est = crossing_theta(df, "temperature", n_bootstrap=20)
    assert est.value is not None and est.notes[0].startswith("10 of 240 runs left out")


def test_empty_table_is_an_input_error():
    with pytest.raises(InputError, match="empty"):
        crossing_theta(_table(20).iloc[:0], "temperature")


@pytest.mark.parametrize("column", ["rg2_error", "n_beads", "re2"])
def test_missing_column_is_named(column):
    with pytest.raises(InputError, match=column):
        summarize_theta(_table(21).drop(columns=[column]), "temperature")


@pytest.mark.parametrize("bad,match", [
    (lambda df: df.assign(rg2=-df["rg2"]), "rg2 must be > 0"),
    (lambda df: df.assign(control=np.nan), "control has missing"),
    (lambda df: df.assign(n_beads=1), "n_beads must hold integers >= 2"),
    (lambda df: df.assign(re2="big"), "re2 holds non-numeric"),
])
def test_bad_values_are_input_errors(bad, match):
    with pytest.raises(InputError, match=match):
        nu_scaling_theta(bad(_table(22)), "temperature")


def test_unknown_control_kind_and_non_table_are_input_errors():
    with pytest.raises(InputError, match="control_kind"):
        crossing_theta(_table(23), "pressure")
    with pytest.raises(InputError, match="DataFrame"):
        crossing_theta(_table(23).to_dict(), "temperature")


@pytest.mark.parametrize("w", [W_CRITICAL, 0.1, 2.0])
def test_flory_alpha_solves_its_equation(w):
    z = np.linspace(-30, 30, 121)
    a = flory_alpha(z, w)
    assert np.allclose(a ** 5 - a ** 3 - w / a ** 3, z, rtol=1e-12, atol=1e-10)


def test_critical_three_body_coefficient_is_where_the_slope_first_vanishes():
    # exact: g'(alpha) = 5 alpha^4 - 3 alpha^2 + 3 w alpha^-4 has its zero minimum at alpha^2 = 9/20 for w = 729/32000
    u = np.linspace(0.05, 1.5, 20001)
    slope = 5 * u ** 2 - 3 * u + 3 * W_CRITICAL / u ** 2
    assert slope.min() == pytest.approx(0, abs=1e-7) and u[np.argmin(slope)] == pytest.approx(0.45, abs=1e-4)


def test_model_local_exponent_matches_finite_difference_and_limits():
    # nu = d ln R / d ln N with z = c N^(1/2): compare with a central difference in ln N; nu(z=0) = 1/2 exactly;
    # strongly poor solvent tends to the globule value 1/3 (alpha^3 -> w/|z|), good solvent to Flory's 3/5
    n, c, h = 100.0, 0.4, 1e-5
    alpha = lambda ln_n: flory_alpha(c * np.exp(ln_n / 2), W)
    numeric = 0.5 + (np.log(alpha(np.log(n) + h)) - np.log(alpha(np.log(n) - h))) / (2 * h)
    assert flory_nu_local(c * np.sqrt(n), W) == pytest.approx(numeric, rel=1e-6)
    assert flory_nu_local(0.0, W) == 0.5
    assert flory_nu_local(-1e6, W) == pytest.approx(1 / 3, abs=1e-4)
    assert flory_nu_local(1e8, W) == pytest.approx(3 / 5, abs=1e-3)


def test_tau_is_positive_on_the_good_solvent_side():
    assert tau_from_control(4.0, 3.0, "temperature") == pytest.approx(0.25)
    assert tau_from_control(0.8, 1.0, "depth") == pytest.approx(0.2)


def test_estimate_as_dict_is_flat():
    row = Estimate("m", 1.0, 0.1, "N = 8", ("a", "b")).as_dict()
    assert row == {"method": "m", "value": 1.0, "error": 0.1, "fitted_on": "N = 8", "note": "a; b"}
    assert isinstance(estimates_table([]), pd.DataFrame)


def test_ideal_rg2_factor_is_the_direct_sum_over_bead_pairs():
    """<Rg^2> of an ideal chain = (1/N^2) sum_{i<j} <r_ij^2> with <r_ij^2> = |i - j| b^2 (Rubinstein and Colby,
    Polymer Physics, 2003, eq. 2.48 [from memory]), summed pair by pair here for b = 1; the closed form the
    estimators use, (N^2 - 1)/(6N), must match it."""
    from beadsim.studies.theta import ideal_rg2_factor
    for n in (2, 3, 16, 101):
        i, j = np.triu_indices(n, k=1)
        assert ideal_rg2_factor(n) == pytest.approx(np.sum(j - i) / n ** 2, rel=1e-12)
