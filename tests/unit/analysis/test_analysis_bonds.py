"""Bond statistics of chains with known distributions: freely jointed and freely rotating chains."""

import numpy as np
import pytest
from scipy import stats

from beadsim.analysis import bond_angles, bond_correlation, bond_lengths, distribution, persistence_length
from beadsim.errors import AnalysisError, InputError


def freely_rotating_chain(rng, n_chains, n_beads, cos_theta):
    """Unit bonds, each at a fixed angle arccos(cos_theta) to the previous one with uniform random azimuth."""
    b = np.empty((n_chains, n_beads - 1, 3))
    b[:, 0] = rng.normal(size=(n_chains, 3))
    b[:, 0] /= np.linalg.norm(b[:, 0], axis=1, keepdims=True)
    sin_theta = np.sqrt(1 - cos_theta ** 2)
    for k in range(1, n_beads - 1):
        prev = b[:, k - 1]
        helper = np.where(np.abs(prev[:, :1]) < 0.9, [[1.0, 0, 0]], [[0, 1.0, 0]])
        e1 = np.cross(prev, helper)
        e1 /= np.linalg.norm(e1, axis=1, keepdims=True)
        e2 = np.cross(prev, e1)
        phi = rng.uniform(0, 2 * np.pi, n_chains)[:, None]
        b[:, k] = cos_theta * prev + sin_theta * (np.cos(phi) * e1 + np.sin(phi) * e2)
    x = np.concatenate([np.zeros((n_chains, 1, 3)), np.cumsum(b, axis=1)], axis=1)
    return x.reshape(1, -1, 3), [np.arange(k * n_beads, (k + 1) * n_beads) for k in range(n_chains)]


def test_freely_jointed_chain_bond_angles_follow_sine_law():
    # freely jointed chain: bond lengths exactly 1, cos(angle) uniform on [-1, 1] (isotropic bonds);
    # Kolmogorov-Smirnov test via scipy.stats at the 0.1 % level; seed 71, 300 chains of 30 beads
    steps = np.random.default_rng(71).normal(size=(300, 29, 3))
    steps /= np.linalg.norm(steps, axis=-1, keepdims=True)
    x = np.concatenate([np.zeros((300, 1, 3)), np.cumsum(steps, axis=1)], axis=1).reshape(1, -1, 3)
    chains = [np.arange(k * 30, (k + 1) * 30) for k in range(300)]
    np.testing.assert_allclose(bond_lengths(x, chains), 1.0, rtol=1e-12)
    angles = bond_angles(x, chains).ravel()
    assert stats.kstest(np.cos(angles), stats.uniform(loc=-1, scale=2).cdf).pvalue > 1e-3


def test_straight_chain_has_angle_pi():
    x = np.zeros((1, 5, 3))
    x[0, :, 0] = np.arange(5)
    np.testing.assert_allclose(bond_angles(x, [np.arange(5)]), np.pi, rtol=1e-12)


def test_freely_rotating_chain_correlation_decays_geometrically():
    # freely rotating chain: <b_k . b_{k+s}> = cos(theta)^s (Flory, Statistical Mechanics of Chain Molecules,
    # 1969); seed 73, 2000 chains of 12 beads; per-chain estimates give the standard error
    c, n_chains, n = 0.6, 2000, 12
    x, chains = freely_rotating_chain(np.random.default_rng(73), n_chains, n, c)
    per_chain = np.array([bond_correlation(x, [ch]) for ch in chains])
    mean = per_chain.mean(axis=0)
    se = per_chain.std(axis=0, ddof=1) / np.sqrt(n_chains)
    np.testing.assert_allclose(bond_correlation(x, chains), mean, rtol=1e-12)  # equal-length chains
    assert abs(mean[1] - c) < 1e-12  # every neighbouring pair has exactly cos(theta)
    assert np.all(np.abs(mean[2:] - c ** np.arange(2, n - 1)) < 4 * se[2:])


def test_persistence_length_of_exact_geometric_decay():
    # C(s) = c^s with bond length b gives l_p = b / (-ln c) exactly (worm-like definition in the module)
    c, b = 0.8, 0.97
    fit = persistence_length(c ** np.arange(30), b)
    assert abs(fit.length - b / -np.log(c)) < 1e-10 * fit.length
    assert fit.s_max == int(np.floor(2 / -np.log(c)))  # last s with c^s > exp(-2)


@pytest.mark.parametrize("correlation, message", [
    # freely jointed: C(1) = 0 exactly (independent bond directions), here with sampling noise
    ([1.0, 0.01, -0.02, 0.0], r"no persistence length worth quoting: .*C\(1\) = 0.01 <= 1/e"),
    ([1.0, -0.1, 0.02], r"C\(1\) = -0.1 <= 1/e"),
    # rigid rod: C(s) = 1 at every s, no decay within the chain
    (np.ones(20), r"not resolved: C\(s\) stays above 0.135 over the whole chain"),
    # stiff at one bond, lost at two: only s = 0, 1 lie above exp(-2)
    ([1.0, 0.5, 0.1, 0.05], r"falls below 0.135 at s = 2, leaving fewer than three points"),
])
def test_persistence_length_is_refused_without_stiffness_or_contour(correlation, message):
    with pytest.raises(AnalysisError, match=message):
        persistence_length(np.asarray(correlation, dtype=float), 1.0)


@pytest.mark.parametrize("correlation, mean_bond_length, kwargs, message", [
    ([0, 1], None, {}, "mean_bond_length: expected a number, got None"),
    ([0, 1], np.array([], dtype=float), {}, "mean_bond_length: expected a number"),
    ([1.0, 0.5], -1.0, {}, "mean_bond_length: must be a finite number > 0"),
    ([1.0, 0.5], 1.0, {"cutoff": 1.5}, "cutoff: must lie between 0 and 1"),
    ([1.0, 0.5], 1.0, {"cutoff": "x"}, "cutoff: expected a number"),
    ({}, 1.0, {}, "correlation: expected an array of float64, got dict"),
])
def test_persistence_length_names_the_bad_argument(correlation, mean_bond_length, kwargs, message):
    with pytest.raises(InputError, match=message):
        persistence_length(correlation, mean_bond_length, **kwargs)


def test_persistence_length_of_a_single_value_is_an_analysis_error():
    # only C(0): chains of two beads have one bond each, so no decay can be measured
    with pytest.raises(AnalysisError, match=r"correlation holds 1 value\(s\)"):
        persistence_length([1.0], 1.0)


def test_distribution_is_a_normalised_density():
    # numpy.histogram(density=True) integrates to one over the range
    centres, density = distribution(np.random.default_rng(74).normal(size=5000), bins=40)
    assert np.isclose(np.sum(density) * (centres[1] - centres[0]), 1.0)


def test_distribution_of_equal_samples_is_one_narrow_peak():
    # rigid bonds: lengths equal to rounding; the density integrates to one and peaks at the common value
    centres, density = distribution(1.0 + 1e-16 * np.arange(50), bins=80)
    width = centres[1] - centres[0]
    assert np.isclose(np.sum(density) * width, 1.0) and abs(centres[np.argmax(density)] - 1.0) <= width
