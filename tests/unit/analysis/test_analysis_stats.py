"""Error bars calibrated on AR(1) series with known statistical inefficiency, and the too-short outcome.

AR(1): x_t = phi x_{t-1} + e_t, e_t ~ N(0, 1), started from the stationary distribution.
Exact: variance 1/(1-phi^2), autocorrelation phi^t, statistical inefficiency
g = (1+phi)/(1-phi), standard error of the mean of n samples -> sqrt(g / ((1-phi^2) n))
(e.g. Box and Jenkins, Time Series Analysis; from memory, and it follows from summing phi^|t|).
"""

import numpy as np
import pytest
from scipy.signal import lfilter

from beadsim.analysis import blocking, detect_equilibration, statistical_inefficiency, summarize
from beadsim.analysis.stats import autocorrelation_window, inefficiency_estimate
from beadsim.errors import AnalysisError


def ar1(rng, phi, n, n_series=1, start=None):
    """AR(1) series shaped (n_series, n); stationary start unless ``start`` is given."""
    noise = rng.normal(size=(n_series, n))
    x0 = rng.normal(size=n_series) / np.sqrt(1 - phi ** 2) if start is None else np.full(n_series, start)
    return lfilter([1.0], [1.0, -phi], noise, axis=1, zi=(phi * x0)[:, None])[0]


def exact_error(phi, n):
    return np.sqrt((1 + phi) / (1 - phi) / (1 - phi ** 2) / n)


def test_statistical_inefficiency_and_error_match_ar1():
    # seed 81, phi = 0.8 (g = 9), n = 2^18: the windowed estimate of g has relative standard deviation
    # about sqrt(2 (2 M + 1) / n) ~ 2 % for a window M ~ 5 g, so the required 10 % is a fair check
    phi, n = 0.8, 2 ** 18
    x = ar1(np.random.default_rng(81), phi, n)[0]
    g = (1 + phi) / (1 - phi)
    assert abs(statistical_inefficiency(x) / g - 1) < 0.10
    result = summarize(x)
    assert result.reason is None
    assert abs(result.statistical_inefficiency / g - 1) < 0.10
    assert abs(result.error / exact_error(phi, result.n_samples - result.equilibration_index) - 1) < 0.10
    assert abs(result.n_independent / (n / g) - 1) < 0.10
    # Flyvbjerg-Petersen blocking gives the same error within 10 % too
    assert abs(result.blocking_error / exact_error(phi, n) - 1) < 0.10


def test_blocking_error_matches_ar1_within_its_stated_uncertainty():
    # seed 82, phi = 0.5, n = 2^16: the chosen level's error is compared with the exact one, allowing
    # 4 times the level's own standard error (Flyvbjerg and Petersen 1989, eq. 28)
    phi, n = 0.5, 2 ** 16
    result = blocking(ar1(np.random.default_rng(82), phi, n)[0])
    assert result.level is not None
    assert abs(result.error - exact_error(phi, n)) < 4 * result.error_uncertainties[result.level]


def test_reported_errors_cover_the_truth_68_percent_of_the_time():
    # seed 83: 400 independent series, phi = 0.5, n = 4096 (about 1365 independent samples each);
    # a calibrated one-sigma error contains the true mean 0 with probability 0.6827; with 400 trials the
    # binomial standard deviation is sqrt(0.6827 * 0.3173 / 400) = 0.023, tolerance 3 of those
    series = ar1(np.random.default_rng(83), 0.5, 4096, n_series=400)
    results = [summarize(x) for x in series]
    assert all(r.error is not None for r in results)
    covered = np.mean([abs(r.mean) < r.error for r in results])
    assert abs(covered - 0.6827) < 3 * np.sqrt(0.6827 * 0.3173 / 400)


def test_equilibration_detection_removes_initial_transient():
    # seed 84: AR(1) with phi = 0.9 started far from equilibrium at x0 = 500 decays as 500 * 0.9^t,
    # which shifts the mean of all 5000 samples by about 500 / (1 - 0.9) / 5000 = 1 (several error bars);
    # Chodera's criterion trades this bias against variance, so after the detected cut the mean must
    # agree with the true mean 0 within 4 reported errors
    x = ar1(np.random.default_rng(84), 0.9, 5000, start=500.0)[0]
    t0 = detect_equilibration(x)[0]
    assert t0 > 0
    result = summarize(x)
    assert result.equilibration_index == t0
    assert abs(result.mean) < 4 * result.error
    # without the cut the transient biases the mean by far more than the error bar
    assert abs(x.mean()) > 4 * result.error


def test_too_short_series_gives_reason_not_error():
    result = summarize(np.arange(10.0))
    assert result.error is None and "only 10 samples" in result.reason
    assert result.mean == 4.5


def test_strongly_correlated_short_series_gives_reason_not_error():
    # seed 85: phi = 0.99 (g = 199) with 400 samples holds about 2 independent samples
    result = summarize(ar1(np.random.default_rng(85), 0.99, 400)[0])
    assert result.error is None
    assert "independent samples" in result.reason or "unequilibrated" in result.reason


def test_constant_series_is_explained():
    assert summarize(np.ones(100)).reason == "the series is constant"
    with pytest.raises(AnalysisError, match="constant"):
        statistical_inefficiency(np.ones(100))


@pytest.mark.parametrize("phi, seed", [(0.0, 86), (0.5, 87), (0.9, 88)])
def test_autocorrelation_window_is_where_pymbar_stops_its_sum(phi, seed):
    # reference: pymbar.timeseries.statistical_inefficiency (through statistical_inefficiency) equals the
    # direct sum 1 + 2 sum_{t=1}^{M} (1 - t/n) C(t) written out here, with M our window
    x = ar1(np.random.default_rng(seed), phi, 3000)[0]
    m = autocorrelation_window(x)
    d = x - x.mean()
    c = [np.sum(d[: d.size - t] * d[t:]) / ((d.size - t) * np.mean(d * d)) for t in range(1, m + 2)]
    assert c[m] <= 0.0 and (m <= 3 or c[m - 1] > 0.0)  # C(M + 1) <= 0 is the stop; C(M) > 0 past lag 3
    g = 1.0 + 2.0 * sum((1 - t / d.size) * c[t - 1] for t in range(1, m + 1))
    assert max(g, 1.0) == pytest.approx(statistical_inefficiency(x), rel=1e-12)


def test_inefficiency_estimate_errors_are_calibrated_on_ar1():
    # seed 89: 200 series, phi = 0.5 (g = 3), n = 4096. z = (estimate - 3) / error must have standard
    # deviation within 0.8-1.25 (its own standard error is about 0.05 for 200 series) and |mean| < 0.3
    # for the reported g (the autocorrelation estimate wins here; its Madras-Sokal error is about 7 %).
    rng = np.random.default_rng(89)
    z = []
    for _ in range(200):
        estimate = inefficiency_estimate(ar1(rng, 0.5, 4096)[0])
        assert estimate.value == max(estimate.autocorrelation, estimate.blocking or 0.0)
        z.append((estimate.value - 3.0) / estimate.error)
    assert 0.8 < np.std(z) < 1.25
    assert abs(np.mean(z)) < 0.3
