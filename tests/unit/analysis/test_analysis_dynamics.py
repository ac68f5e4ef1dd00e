"""Mean-square displacement, diffusion coefficient and relaxation times against exact random-walk results."""

import numpy as np
import pytest

from beadsim.analysis import (center_of_mass_msd, diffusion_coefficient, inner_bead_msd,
                              mean_square_displacement, relaxation_time, vector_autocorrelation)
from beadsim.errors import AnalysisError, InputError


def test_fft_msd_equals_direct_time_origin_average():
    # definition: MSD(m) = mean over t of |r_{t+m} - r_t|^2
    paths = np.cumsum(np.random.default_rng(91).normal(size=(150, 4, 3)), axis=0)
    msd = mean_square_displacement(paths)
    for m in range(150):
        direct = np.mean(np.sum((paths[m:] - paths[:150 - m]) ** 2, axis=-1), axis=0)
        np.testing.assert_allclose(msd[m], direct, rtol=1e-9, atol=1e-9)


def test_diffusion_coefficient_of_random_walks():
    # Brownian paths with steps N(0, 2 D dt) per component: MSD = 6 D t exactly (Einstein);
    # seed 92, 200 independent paths of 2000 steps; tolerance 4 reported standard errors
    d_true, dt = 0.37, 0.5
    rng = np.random.default_rng(92)
    paths = np.cumsum(rng.normal(scale=np.sqrt(2 * d_true * dt), size=(2000, 200, 3)), axis=0)
    t = dt * np.arange(2000)
    fit = diffusion_coefficient(t, mean_square_displacement(paths))
    assert abs(fit.coefficient - d_true) < 4 * fit.error
    assert fit.t_min >= 0.1 * t[-1] and fit.t_max <= 0.5 * t[-1]


def test_chain_msd_of_rigidly_translated_chains_equals_translation_msd():
    # rigid translation: every bead and the centre of mass move by the same vector (exact)
    rng = np.random.default_rng(93)
    shape = rng.normal(size=(1, 20, 3))
    path = np.cumsum(rng.normal(size=(300, 1, 3)), axis=0)
    x = shape + path
    expected = mean_square_displacement(path)[:, 0]
    np.testing.assert_allclose(center_of_mass_msd(x, [np.arange(20)])[:, 0], expected, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(inner_bead_msd(x, [np.arange(20)])[:, 0], expected, rtol=1e-9, atol=1e-9)


def test_autocorrelation_of_ar1_vectors():
    # AR(1) vectors v_t = phi v_{t-1} + e_t: C(1) = phi, and for large n the estimate has variance
    # (1 - phi^2) / n_samples (Bartlett's formula, from memory); seed 94, 50 paths x 3 components x 4000 frames
    phi = 0.7
    rng = np.random.default_rng(94)
    v = np.empty((4000, 50, 3))
    v[0] = rng.normal(size=(50, 3)) / np.sqrt(1 - phi ** 2)
    for t in range(1, 4000):
        v[t] = phi * v[t - 1] + rng.normal(size=(50, 3))
    acf = vector_autocorrelation(v)
    assert acf[0] == 1.0
    assert abs(acf[1] - phi) < 4 * np.sqrt((1 - phi ** 2) / (4000 * 50 * 3))


def test_relaxation_times_of_exact_exponential():
    # C(m) = phi^m: integrated time dt (1/2 + phi/(1-phi)) (geometric series) and the 1/e time
    # tau = -dt / ln(phi) up to the linear interpolation between lags (exact here within 1e-3 relative)
    phi, dt = 0.95, 0.2
    acf = phi ** np.arange(2000)
    tau = relaxation_time(acf, dt)
    assert not tau.converged  # C never reaches zero: the integral is a lower bound
    assert tau.integrated == pytest.approx(dt * (0.5 + phi * (1 - phi ** 1999) / (1 - phi)), rel=1e-12)
    assert tau.e_fold == pytest.approx(-dt / np.log(phi), rel=1e-3)


@pytest.mark.parametrize("function, name", [(vector_autocorrelation, "vectors"), (mean_square_displacement, "paths")])
def test_series_without_frames_are_refused(function, name):
    with pytest.raises(InputError, match=rf"{name}: expected one or more frames, got shape \(0, 0, 3\)"):
        function(np.zeros((0, 0, 3)))


@pytest.mark.parametrize("lag_times, msd, kwargs, error, message", [
    ([], np.zeros((0, 1)), {}, AnalysisError, "diffusion fit needs three or more lags, got 0"),
    (np.arange(5.0), np.zeros((5, 0)), {}, InputError, "msd: expected one or more paths"),
    (np.arange(5.0), np.zeros((5, 1)), {"fit_range": "ab"}, InputError, "fit_range: expected a pair of numbers"),
    (np.zeros(5), np.ones((5, 1)), {"fit_range": (0.0, 1.0)}, AnalysisError,
     "diffusion fit: slope undefined, the 5 points share one abscissa"),
])
def test_diffusion_coefficient_refuses_degenerate_input(lag_times, msd, kwargs, error, message):
    with pytest.raises(error, match=message):
        diffusion_coefficient(lag_times, msd, **kwargs)
