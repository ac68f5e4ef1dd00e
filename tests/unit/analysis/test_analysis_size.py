"""Chain size and shape against mdtraj, exact ideal-chain results and exact geometric cases."""

import mdtraj
import numpy as np
import pytest

from beadsim.analysis import (compute_hydrodynamic_radius, end_to_end_distance, gyration_tensor, hydrodynamic_radius,
                              mean_square_ratio, radius_of_gyration, shape_descriptors)
from beadsim.errors import AnalysisError, InputError
from beadsim.kernels.scattering import inverse_distance_sum, inverse_distance_sum_reference


@pytest.fixture
def random_system():
    rng = np.random.default_rng(11)
    x = rng.normal(size=(25, 60, 3)) * 2.0
    chains = [np.arange(0, 20), np.arange(20, 45), np.arange(45, 60)]
    return x, chains


def test_rg_equals_mdtraj_compute_rg(random_system):
    x, chains = random_system
    rg = radius_of_gyration(x, chains)
    for k, c in enumerate(chains):
        ref = mdtraj.compute_rg(mdtraj.Trajectory(x[:, c], None))  # mdtraj computes in float32
        np.testing.assert_allclose(rg[:, k], ref, rtol=1e-6)


def test_mass_weighted_rg_agrees_with_mdtraj_compute_rg_with_masses(random_system):
    # mdtraj 1.11 (geometry/rg.py) weights squared distances from the *unweighted* centroid c;
    # the parallel-axis theorem (exact) converts: sum_i w_i |r_i - c|^2 = Rg_mass^2 + |R_cm - c|^2
    x, chains = random_system
    masses = np.random.default_rng(12).uniform(0.5, 3.0, x.shape[1])
    rg = radius_of_gyration(x, chains, masses)
    for k, c in enumerate(chains):
        ref = mdtraj.compute_rg(mdtraj.Trajectory(x[:, c], None), masses=masses[c])
        w = masses[c] / masses[c].sum()
        offset2 = np.sum((np.einsum("i,fia->fa", w, x[:, c]) - x[:, c].mean(axis=1)) ** 2, axis=-1)
        np.testing.assert_allclose(rg[:, k] ** 2 + offset2, ref.astype(np.float64) ** 2, rtol=2e-6)


def test_gyration_tensor_matches_mdtraj_and_trace_is_rg_squared(random_system):
    x, chains = random_system
    s = gyration_tensor(x, chains)
    ref = mdtraj.compute_gyration_tensor(mdtraj.Trajectory(x[:, chains[1]], None))
    np.testing.assert_allclose(s[:, 1], ref, rtol=1e-5, atol=1e-6)
    # identity Rg^2 = tr S (definition of the gyration tensor)
    np.testing.assert_allclose(np.trace(s, axis1=2, axis2=3), radius_of_gyration(x, chains) ** 2, rtol=1e-12)


def test_ideal_chain_size_ratio_is_six_n_over_n_plus_one(gaussian_chains):
    # exact for ideal chains: <Re^2> = (N-1) b^2, <Rg^2> = b^2 (N^2-1)/(6N), ratio 6N/(N+1)
    n, m = 20, 4000  # seed 21, 4000 independent chains
    x = gaussian_chains(21, m, n).reshape(1, m * n, 3)
    chains = [np.arange(k * n, (k + 1) * n) for k in range(m)]
    re2 = end_to_end_distance(x, chains)[0] ** 2
    rg2 = radius_of_gyration(x, chains)[0] ** 2
    # standard errors of independent chains; delta method for the ratio of means
    se_re2 = re2.std(ddof=1) / np.sqrt(m)
    se_rg2 = rg2.std(ddof=1) / np.sqrt(m)
    assert abs(re2.mean() - (n - 1)) < 4 * se_re2
    assert abs(rg2.mean() - (n * n - 1) / (6 * n)) < 4 * se_rg2
    ratio = mean_square_ratio(re2[None, :] ** 0.5, rg2[None, :] ** 0.5)
    a, b = re2.mean(), rg2.mean()
    cov = np.cov(re2, rg2)
    se_ratio = np.sqrt((cov[0, 0] / b ** 2 - 2 * a * cov[0, 1] / b ** 3 + a * a * cov[1, 1] / b ** 4) / m)
    assert abs(ratio - 6 * n / (n + 1)) < 4 * se_ratio


def test_rod_has_anisotropy_one_and_exact_kirkwood_radius():
    # straight rod of N beads spaced a: eigenvalues (0, 0, a^2 (N^2-1)/12), kappa^2 = 1 (exact);
    # Kirkwood sum over i != j of 1/r_ij = 2 sum_{k=1}^{N-1} (N-k)/(k a)
    n, a = 9, 0.7
    x = np.zeros((1, n, 3))
    x[0, :, 2] = a * np.arange(n)
    chains = [np.arange(n)]
    shape = shape_descriptors(x, chains)
    np.testing.assert_allclose(shape.eigenvalues[0, 0], [0, 0, a * a * (n * n - 1) / 12], atol=1e-12)
    np.testing.assert_allclose(shape.anisotropy, 1.0, rtol=1e-12)
    np.testing.assert_allclose(shape.asphericity, a * a * (n * n - 1) / 12, rtol=1e-12)
    k = np.arange(1, n)
    expected_rh = n * n / (2 * np.sum((n - k) / (k * a)))
    np.testing.assert_allclose(hydrodynamic_radius(x, chains), expected_rh, rtol=1e-12)


def test_regular_octahedron_is_spherical():
    # six beads at +-e_x, +-e_y, +-e_z: gyration tensor (1/3) I, so asphericity and kappa^2 vanish (exact)
    x = np.concatenate([np.eye(3), -np.eye(3)])[None]
    shape = shape_descriptors(x, [np.arange(6)])
    np.testing.assert_allclose(shape.eigenvalues[0, 0], [1 / 3] * 3, rtol=1e-12)
    assert abs(shape.asphericity[0, 0]) < 1e-12 and abs(shape.anisotropy[0, 0]) < 1e-12


def test_kirkwood_kernel_equals_numpy_twin(gaussian_chains):
    x = gaussian_chains(31, 6, 40).reshape(3, 2, 40, 3)
    np.testing.assert_allclose(inverse_distance_sum(x), inverse_distance_sum_reference(x), rtol=1e-10)


def test_kirkwood_kernel_and_twin_give_infinity_for_coincident_beads():
    # 1/r_ij diverges when two beads coincide; both routes must say so rather than fail or return a number
    x = np.zeros((1, 1, 3, 3))
    x[0, 0, 2, 0] = 1.0  # beads 0 and 1 coincide, bead 2 apart
    assert np.isinf(inverse_distance_sum(x)[0, 0]) and np.isinf(inverse_distance_sum_reference(x)[0, 0])


def test_hydrodynamic_radius_names_frame_and_chain_with_coincident_beads(random_system):
    x, chains = random_system
    x = x.copy()
    x[7, 23] = x[7, 30]  # two beads of chain 1 (beads 20..44) coincide in frame 7
    with pytest.raises(AnalysisError, match=r"two beads of chain 1 \(first bead 20\) coincide in frame 7"):
        hydrodynamic_radius(x, chains)


def test_compute_hydrodynamic_radius_of_collapsed_trajectory_is_an_analysis_error(chain_topology):
    traj = mdtraj.Trajectory(np.zeros((1, 2, 3), dtype=np.float32), chain_topology([2]))
    with pytest.raises(AnalysisError, match="coincide in frame 0"):
        compute_hydrodynamic_radius(traj)


@pytest.mark.parametrize("chains, message", [
    ([np.array([3])], r"chains\[0\]: expected at least 2 beads, got 1"),
    ([np.array([0, 99])], r"chains\[0\]: bead indices must lie in \[0, 60\)"),
    ([], "expected at least one chain"),
])
def test_bad_chains_are_named(random_system, chains, message):
    x, _ = random_system
    with pytest.raises(InputError, match=message):
        radius_of_gyration(x, chains)


@pytest.mark.parametrize("rg", [np.zeros((0, 2)), np.zeros((3, 2))])
def test_mean_square_ratio_without_size_is_an_analysis_error(rg):
    with pytest.raises(AnalysisError, match="mean_square_ratio: undefined"):
        mean_square_ratio(np.ones_like(rg), rg)


def test_positions_with_wrong_shape_are_refused():
    with pytest.raises(InputError, match=r"positions: expected shape \(any, any, 3\), got \(4, 3\)"):
        radius_of_gyration(np.zeros((4, 3)), [np.arange(4)])


@pytest.mark.slow
def test_large_trajectory_sizes_stay_consistent(gaussian_chains):
    # performance sanity (not timed): 10^4 frames x 1000 beads through the vectorised path;
    # check the identity Rg^2 = tr S and <Re^2> = (N-1) b^2 for ideal chains (exact), seed 41
    n = 1000
    x = gaussian_chains(41, 10_000, n)
    chains = [np.arange(n)]
    rg = radius_of_gyration(x, chains)
    shape = shape_descriptors(x, chains)
    np.testing.assert_allclose(shape.eigenvalues.sum(axis=-1), rg ** 2, rtol=1e-10)
    re2 = end_to_end_distance(x, chains)[:, 0] ** 2
    assert abs(re2.mean() - (n - 1)) < 4 * re2.std(ddof=1) / np.sqrt(re2.size)
