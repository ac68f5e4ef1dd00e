"""Start velocities of a run: Maxwell-Boltzmann at the set temperature, reproducible from the seed.

Exact result used: with every Cartesian velocity component of bead i Gaussian with variance kT / m_i
(Maxwell-Boltzmann), 2 K / kT = sum_i m_i |v_i|^2 / kT is chi-square with 3 n degrees of freedom, so the
kinetic temperature T_kin = 2 K / (3 n) has mean kT and variance 2 kT^2 / (3 n) (a chi-square variable
with k degrees of freedom has mean k and variance 2 k; the moments are taken from scipy.stats.chi2 below).
Subtracting the mass-weighted mean velocity is, in the coordinates sqrt(m_i) v_i, an orthogonal
projection removing 3 of the 3 n dimensions, so the remainder is chi-square with 3 n - 3 degrees of
freedom (Cochran's theorem). Tolerances: 4 standard deviations of that distribution.
"""

import numpy as np
import pytest
from scipy.stats import chi2

import beadsim as bs

N_BEADS = 300_000
KT = 1.7


def _masses(seed=3):
    """Per-bead masses between 0.5 and 4 m, so that the mass weighting is exercised."""
    return np.random.default_rng(seed).uniform(0.5, 4.0, size=N_BEADS)


def _kinetic_temperature(masses, v):
    return float(np.sum(masses[:, None] * v ** 2) / (3 * len(masses)))


def test_thermostatted_start_has_the_set_temperature_within_its_chi_square_spread():
    """BAOAB, kT = 1.7, 300,000 beads of masses 0.5-4 m, seed 12: T_kin within 4 sigma of kT, sigma =
    kT sqrt(2 / (3 n)) = 0.0025 (chi-square with 3 n degrees of freedom: every component drawn). The light
    and the heavy half of the beads are checked alike (per-bead masses). The centre-of-mass velocity is
    drawn too, not removed: each component of the total momentum is Gaussian with standard deviation
    sqrt(kT sum m), so it lies below 1e-6 of that with probability about 1e-6 (a removed drift gives 0)."""
    masses = _masses()
    v = bs.BAOABLangevin(0.005, KT, 1.0).start_velocities(masses, seed=12)
    assert v.shape == (N_BEADS, 3)
    momentum = np.sum(masses[:, None] * v, axis=0)
    assert np.all(np.abs(momentum) > 1e-6 * np.sqrt(KT * masses.sum()))
    light = masses < np.median(masses)
    for part in (slice(None), light, ~light):
        dof = 3 * masses[part].size
        mean, sigma = KT * chi2(dof).mean() / dof, KT * chi2(dof).std() / dof
        assert abs(_kinetic_temperature(masses[part], v[part]) - mean) < 4 * sigma


def test_start_without_thermostat_has_no_drift_and_3n_minus_3_degrees_of_freedom():
    """Velocity Verlet, kT = 1.7, seed 12: total momentum zero to rounding, and T_kin within 4 sigma of
    kT (3 n - 3) / (3 n), sigma = kT sqrt(2 (3 n - 3)) / (3 n) (chi-square with 3 n - 3 degrees of freedom)."""
    masses = _masses()
    v = bs.VelocityVerlet(0.005, KT).start_velocities(masses, seed=12)
    momentum = np.sum(masses[:, None] * v, axis=0)
    assert np.all(np.abs(momentum) < 1e-9 * np.sum(masses[:, None] * np.abs(v), axis=0))
    dof = 3 * N_BEADS - 3
    mean, sigma = KT * chi2(dof).mean() / (3 * N_BEADS), KT * chi2(dof).std() / (3 * N_BEADS)
    assert abs(_kinetic_temperature(masses, v) - mean) < 4 * sigma


def test_brownian_dynamics_starts_at_rest():
    """Overdamped dynamics has no velocities: they start (and stay) zero, one row of three per bead."""
    v = bs.Brownian(0.005, KT, 1.0).start_velocities(np.ones(10), seed=1)
    assert v.shape == (10, 3) and not np.any(v)


@pytest.mark.parametrize("integrator", [bs.BAOABLangevin(0.005, KT, 1.0), bs.VelocityVerlet(0.005, KT)])
def test_start_velocities_are_a_function_of_the_seed(integrator):
    masses = np.ones(100)
    first = integrator.start_velocities(masses, seed=5)
    np.testing.assert_array_equal(first, integrator.start_velocities(masses, seed=5))
    assert not np.array_equal(first, integrator.start_velocities(masses, seed=6))


@pytest.mark.parametrize("masses, temperature, words", [
    (np.array([1.0, 0.0]), 1.0, "masses: every bead mass must be > 0"),
    (np.ones((2, 2)), 1.0, "masses: expected shape"),
    (np.ones(2), -1.0, "temperature: must be a finite number >= 0"),
])
def test_maxwell_boltzmann_velocities_refuse_bad_arguments(masses, temperature, words):
    with pytest.raises(bs.InputError, match=words):
        bs.maxwell_boltzmann_velocities(masses, temperature, seed=1)
