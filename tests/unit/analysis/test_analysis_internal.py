"""Internal distances against their definition and the exact ideal-chain result; local exponent."""

import numpy as np
import pytest

from beadsim.analysis import effective_exponent, internal_distances
from beadsim.errors import AnalysisError, InputError


def test_fft_route_equals_direct_pair_average(gaussian_chains):
    # definition: R^2(s) = mean over pairs s apart of |r_{i+s} - r_i|^2, summed directly over every pair
    x = gaussian_chains(61, 8, 70).reshape(2, 280, 3)[:, :170]
    chains = [np.arange(0, 70), np.arange(70, 120), np.arange(120, 170)]
    r2 = internal_distances(x, chains)
    for s in range(1, 70):
        pairs = [x[:, c[s:]] - x[:, c[:-s]] for c in chains if c.size > s]
        direct = np.mean(np.concatenate([np.sum(d * d, axis=-1) for d in pairs], axis=1), axis=1)
        np.testing.assert_allclose(r2[:, s], direct, rtol=1e-9)
    assert np.all(r2[:, 0] == 0)


def test_ideal_chain_internal_distances_grow_linearly(gaussian_chains):
    # ideal chain: <R^2(s)> = s b^2 (exact); seed 62, 2000 independent chains of 50 beads, b = 1
    m, n = 2000, 50
    x = gaussian_chains(62, m, n)
    per_chain = internal_distances(x, [np.arange(n)])  # one chain per frame, independent frames
    mean = per_chain.mean(axis=0)
    se = per_chain.std(axis=0, ddof=1) / np.sqrt(m)
    s = np.arange(1, n)
    assert np.all(np.abs(mean[1:] - s) < 4 * se[1:])  # 49 separations, chance failure ~3e-3


def test_effective_exponent_of_exact_power_law():
    # <R^2(s)> = s^(2 nu) gives d ln R^2 / d ln s = 2 nu exactly (also for one-sided differences)
    s = np.arange(1.0, 200.0)
    np.testing.assert_allclose(effective_exponent(s, 3.0 * s ** (2 * 0.5876)), 0.5876, rtol=1e-12)


def test_effective_exponent_refuses_zero_separation():
    with pytest.raises(AnalysisError, match="positive separations"):
        effective_exponent(np.arange(0.0, 5.0), np.arange(0.0, 5.0))


@pytest.mark.parametrize("s, r2, message", [
    ({}, None, "s: expected an array of float64, got dict"),
    ([[0, 1, 2], [2, 30]], None, "s: expected an array of float64, got list"),
    ([1.0, 2.0, 3.0], {}, "r2: expected an array of float64, got dict"),
    ([1.0, 2.0, 3.0], [1.0, 2.0], r"r2: expected shape \(3\), got \(2,\)"),
    ([1.0, 2.0, 3.0], [1.0, np.nan, 3.0], "r2: contains NaN or infinity"),
    ([1.0, 3.0, 2.0], [1.0, 2.0, 3.0], "s: separations must increase"),
    ([1.0, 1.0, 2.0], [1.0, 2.0, 3.0], "s: separations must increase"),
])
def test_effective_exponent_names_the_bad_argument(s, r2, message):
    with pytest.raises(InputError, match=message):
        effective_exponent(s, r2)
