"""Second virial coefficient: single beads against scipy quadrature, hard spheres, error bars; kernels against twins."""

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.stats import chi2

from beadsim.analysis import compute_second_virial
from beadsim.errors import AnalysisError, InputError
from beadsim.kernels.virial import (ball_placements, intermolecular_energies, intermolecular_energies_reference,
                                    mayer_ball_average, mayer_ball_average_reference)
from beadsim.model.potentials import (WCA, CosineSquared, ForceField, LennardJones, NoPair, TabulatedPair)
from beadsim.model.system import System
from beadsim.model.tables import Table

LJ_SHIFT_25 = 4.0 * (2.5 ** -12 - 2.5 ** -6)  # U_LJ(2.5 sigma), epsilon


def monomer_b2_quad(cutoff, shift, kt):
    """B2 = -2 pi integral_0^rc (exp(-u/kT) - 1) r^2 dr for u = 4 (r^-12 - r^-6) - shift, by scipy.integrate.quad.

    Below 0.1 sigma exp(-u/kT) underflows to 0 (u > 1e12 epsilon), so the integrand is exactly -r^2 there:
    quad runs from 0.1 and the exact -0.1^3/3 is added for [0, 0.1].
    """
    def integrand(r):
        return (math.exp(-(4.0 * (r ** -12 - r ** -6) - shift) / kt) - 1.0) * r * r

    value, _ = quad(integrand, 0.1, cutoff, points=[1.0, 2.0 ** (1.0 / 6.0)], epsabs=1e-13, epsrel=1e-12, limit=200)
    return -2.0 * math.pi * (value - 0.1 ** 3 / 3.0)


def scattered_single_beads(seed, n_frames):
    """One bead per frame at random places (the analysis centres each frame, so all frames are alike)."""
    return np.random.default_rng(seed).normal(scale=5.0, size=(n_frames, 1, 3))


def gaussian_chains(rng, n_chains, n_beads):
    """Ideal chains with unit rms bond length (independent normal bond components of variance 1/3)."""
    steps = rng.normal(scale=1.0 / math.sqrt(3.0), size=(n_chains, n_beads - 1, 3))
    return np.concatenate([np.zeros((n_chains, 1, 3)), np.cumsum(steps, axis=1)], axis=1)


POTENTIALS = {"wca": (WCA, 2.0 ** (1.0 / 6.0), -1.0), "lj_2.5": (lambda: LennardJones(cutoff=2.5), 2.5, LJ_SHIFT_25)}


@pytest.mark.parametrize("n_frames", [1, 64])
@pytest.mark.parametrize("kt", [1.5, 3.0])
@pytest.mark.parametrize("name", list(POTENTIALS))
def test_single_beads_match_scipy_quadrature(name, kt, n_frames):
    # independent reference: the monomer B2 integral by scipy.integrate.quad (module docstring formula);
    # seed 1, 200,000 placements (1 frame: 20 batches; 64 frames: 32 pairs); 4 reported standard errors
    make, cutoff, shift = POTENTIALS[name]
    exact = monomer_b2_quad(cutoff, shift, kt)
    result = compute_second_virial(scattered_single_beads(7, n_frames), [0], make(), kt, n_samples=200_000, seed=1)
    assert result.b2_error > 0
    assert abs(result.b2 - exact) < 4.0 * result.b2_error
    assert result.psi_star is None and result.rg2 == 0.0


def test_reported_error_matches_spread_over_seeds():
    # Lennard-Jones cut and shifted at 2.5 sigma, kT = 1.5; 40 seeds (0..39), 64 frames (32 pairs), 6,400
    # placements each. If the reported errors are right, (S - 1) s^2 / <err^2> follows chi-square with
    # S - 1 = 39 degrees of freedom (s: spread of B2 over seeds): two-sided 99 % band; an error off by a
    # factor 1.4 either way puts the expected statistic outside it. The mean over seeds must also agree with scipy quad within 4 of
    # its standard errors.
    exact = monomer_b2_quad(2.5, LJ_SHIFT_25, 1.5)
    results = [compute_second_virial(scattered_single_beads(7, 64), [0], LennardJones(cutoff=2.5), 1.5,
                                     n_samples=6_400, seed=s) for s in range(40)]
    b2 = np.array([r.b2 for r in results])
    mean_square_error = np.mean([r.b2_error ** 2 for r in results])
    statistic = (len(b2) - 1) * b2.var(ddof=1) / mean_square_error
    low, high = chi2.ppf([0.005, 0.995], len(b2) - 1)
    assert low < statistic < high
    assert abs(b2.mean() - exact) < 4.0 * math.sqrt(mean_square_error / len(b2))


def test_block_jackknife_covers_correlated_frames():
    # frames in runs of 4 copies of one ideal 8-bead chain (40 conformations, 160 frames, 80 pairs), WCA
    # between the molecules, kT = 1; 40 data sets (conformation seeds 100..139, placement seeds 0..39), 8,000
    # placements each. With 20 blocks (4 pairs each, aligned with the runs) the reported error must match
    # the spread over data sets in the two-sided chi-square band of test_reported_error_matches_spread_over_seeds;
    # with 80 blocks of one pair the copies look independent and the error comes out too small, above the band.
    def statistic(n_blocks):
        results = []
        for s in range(40):
            frames = np.repeat(gaussian_chains(np.random.default_rng(100 + s), 40, 8), 4, axis=0)
            results.append(compute_second_virial(frames, np.zeros(8, dtype=np.int64), WCA(), 1.0, n_samples=8_000,
                                                 n_blocks=n_blocks, seed=s))
        b2 = np.array([r.b2 for r in results])
        return (len(b2) - 1) * b2.var(ddof=1) / np.mean([r.b2_error ** 2 for r in results])

    low, high = chi2.ppf([0.005, 0.995], 39)
    assert low < statistic(20) < high
    assert statistic(80) > high


def test_hard_spheres_give_psi_star_1_619():
    """Hard spheres of radius R: Psi* = (16 pi R^3 / 3) / (4 pi^(3/2) (3 R^2 / 5)^(3/2)) = 1.6186 (exact).

    B2 of hard spheres of diameter d = 2 R is (1/2) (4 pi / 3) d^3 = 16 pi R^3 / 3 (the Mayer function is 1
    for centre distances below d and 0 beyond), and a uniform ball has <r^2> = integral r^4 / integral r^2 =
    3 R^2 / 5 about its centre. Construction: each frame is a uniform sample of the ball, 1,000 points and
    their mirror images through the centre (so the centre of mass is exactly the ball's centre); one of the
    points carries a hard core of diameter 2 R (a table of zero energy from r = 2 R on: closer pairs overlap),
    the others carry no pair interaction. B2 does not depend on where the interaction site sits inside the
    molecule (shifting it shifts the integration variable only), so the molecule's B2 is the hard-sphere
    value, while its Rg^2 is that of the ball sample, whose mean is 3 R^2 / 5.
    Seed 11 for the points, seed 2 for the placements; 64 frames (32 pairs), 64,000 placements; 4 reported
    standard errors.
    """
    radius = 1.5
    rng = np.random.default_rng(11)
    n_frames, n_half = 64, 1000
    directions = rng.normal(size=(n_frames, n_half, 3))
    directions /= np.linalg.norm(directions, axis=2, keepdims=True)
    half = directions * radius * rng.uniform(size=(n_frames, n_half, 1)) ** (1.0 / 3.0)
    frames = np.concatenate([half, -half], axis=1)
    types = np.ones(2 * n_half, dtype=np.int64)
    types[0] = 0
    core = TabulatedPair(Table(np.linspace(2 * radius, 2 * radius + 0.5, 6), np.zeros(6)))
    result = compute_second_virial(frames, types, ForceField(pair={(0, 0): core}), 1.0, n_samples=64_000, seed=2)
    assert abs(result.b2 - 16.0 * math.pi * radius ** 3 / 3.0) < 4.0 * result.b2_error
    psi_exact = (16.0 * math.pi / 3.0) / (4.0 * math.pi ** 1.5 * 0.6 ** 1.5)
    assert abs(psi_exact - 1.6186) < 1e-4
    assert abs(result.psi_star - psi_exact) < 4.0 * result.psi_star_error


@pytest.mark.parametrize("n_frames", [1, 4, 9])
def test_chains_without_pair_interaction_have_b2_exactly_zero(n_frames):
    # no pair potential: U_12 = 0 for every placement, so B2 = 0 exactly (definition), with no sampling
    frames = gaussian_chains(np.random.default_rng(3), n_frames, 12)
    result = compute_second_virial(frames, np.zeros(12, dtype=np.int64), ForceField(pair=NoPair()), 1.0)
    assert (result.b2, result.b2_error, result.psi_star, result.psi_star_error) == (0.0, 0.0, 0.0, 0.0)
    assert result.n_samples == 0 and result.rg2 > 0
    assert result.n_frames_used == (1 if n_frames == 1 else n_frames - n_frames % 2)


def mixed_force_field():
    """Three bead types with four pair kinds (LJ, WCA, cosine-squared, table) and one non-interacting pair."""
    r = np.linspace(0.8, 1.6, 40)
    table = TabulatedPair(Table(r, 2.0 * (1.6 - r) ** 2 - 0.3 * np.cos(3 * r) * (1.6 - r)))
    return ForceField(pair={(0, 0): LennardJones(cutoff=2.5), (0, 1): WCA(), (1, 1): CosineSquared(depth=0.7),
                            (0, 2): table, (1, 2): NoPair(), (2, 2): LennardJones(epsilon=0.5, cutoff=1.8)})


def compiled_pairs(forcefield, types):
    system = System(np.zeros((types.size, 3)), [types.size], types=types, bonds=np.zeros((0, 2), dtype=np.int64),
                    angles=np.zeros((0, 3), dtype=np.int64))
    compiled = forcefield.compile(system)
    return compiled.arrays[:3], compiled.cutoff, forcefield.pair_table(int(types.max()) + 1)


@pytest.fixture
def two_molecules():
    """Two centred 30-bead chains with bond length 1.1 sigma (no two beads of a chain below 0.8 sigma apart)."""
    rng = np.random.default_rng(5)
    molecules = []
    while len(molecules) < 2:
        steps = rng.normal(size=(29, 3))
        steps *= 1.1 / np.linalg.norm(steps, axis=1, keepdims=True)
        x = np.concatenate([np.zeros((1, 3)), np.cumsum(steps, axis=0)])
        d = np.linalg.norm(x[:, None] - x[None], axis=2)
        if np.all(d[np.triu_indices(30, 1)] > 0.8):
            molecules.append(np.ascontiguousarray(x - x.mean(axis=0)))
    types = np.tile(np.array([0, 1, 2], dtype=np.int64), 10)
    return molecules[0], molecules[1], types


def test_energy_kernel_equals_numpy_twin(two_molecules):
    # the twin evaluates every pair with each potential's own NumPy energy (no pruning); relative 1e-10
    a, b, types = two_molecules
    (kinds, params, tables), cutoff, pair_table = compiled_pairs(mixed_force_field(), types)
    rotation, _ = ball_placements(np.uint64(9), 0, 1, 1.0)
    rng = np.random.default_rng(6)
    shifts = rng.normal(size=(60, 3)) * np.geomspace(0.5, 30.0, 60)[:, None]
    shifts[0] = a[4] - rotation[0] @ b[7] + [1.05, 0.0, 0.0]  # beads 4 and 7 (types 1, 1) 1.05 sigma apart
    energies = intermolecular_energies(a, types, b, types, rotation[0], shifts, kinds, params, tables, cutoff)
    twin = intermolecular_energies_reference(a, types, b, types, rotation[0], shifts, pair_table)
    finite = np.isfinite(twin)
    assert np.array_equal(np.isfinite(energies), finite)
    assert 10 < finite.sum() and np.count_nonzero(twin[finite]) > 10 and np.count_nonzero(twin == 0) > 5
    np.testing.assert_allclose(energies[finite], twin[finite], rtol=1e-10, atol=1e-12)


def test_energy_kernel_counts_overlaps_as_infinite(two_molecules):
    # single beads: interacting beads at one point, and a table pair (types 0, 2) inside its first
    # tabulated distance (0.8 sigma), are full overlaps, U_12 = +inf (module convention); LJ at 0.5 sigma
    # and the table pair at 0.9 sigma are finite. Kernel and twin alike.
    _, _, types = two_molecules
    (kinds, params, tables), cutoff, pair_table = compiled_pairs(mixed_force_field(), types)
    bead = np.zeros((1, 3))
    shifts = np.array([[0.0, 0.0, 0.0], [0.5, 0.0, 0.0], [0.9, 0.0, 0.0]])
    for type_b, expected in ((0, [True, False, False]), (2, [True, True, False])):
        tb = np.array([type_b])
        energies = intermolecular_energies(bead, types[:1], bead, tb, np.eye(3), shifts, kinds, params, tables,
                                           cutoff)
        twin = intermolecular_energies_reference(bead, types[:1], bead, tb, np.eye(3), shifts, pair_table)
        assert list(np.isposinf(energies)) == expected and list(np.isposinf(twin)) == expected
        np.testing.assert_allclose(energies[~np.isinf(twin)], twin[~np.isinf(twin)], rtol=1e-10)


def test_mayer_ball_average_equals_numpy_twin(two_molecules):
    # 300 placements in a ball of radius reach_a + reach_b + cutoff, kT = 1.2; relative 1e-10
    a, b, types = two_molecules
    (kinds, params, tables), cutoff, pair_table = compiled_pairs(mixed_force_field(), types)
    radius = np.linalg.norm(a, axis=1).max() + np.linalg.norm(b, axis=1).max() + cutoff
    kernel = mayer_ball_average(a, types, b, types, radius, 300, np.uint64(4), 1000, kinds, params, tables, cutoff,
                                1 / 1.2)
    twin = mayer_ball_average_reference(a, types, b, types, radius, 300, np.uint64(4), 1000, pair_table, 1 / 1.2)
    assert kernel != 0.0
    np.testing.assert_allclose(kernel, twin, rtol=1e-10)


def test_placements_are_rotations_in_equal_volume_shells():
    # exact properties: g^T g = I and det g = +1 (rotations, never reflections); placement m lies in the
    # m-th of n shells of equal volume, radius^3 in [m, m + 1) R^3 / n
    n, radius = 500, 3.0
    rotations, shifts = ball_placements(np.uint64(8), 0, n, radius)
    np.testing.assert_allclose(np.einsum("mki,mkj->mij", rotations, rotations), np.broadcast_to(np.eye(3), (n, 3, 3)),
                               atol=1e-12)
    np.testing.assert_allclose(np.linalg.det(rotations), 1.0, atol=1e-12)
    shell = np.linalg.norm(shifts, axis=1) ** 3 / radius ** 3 * n
    assert np.all((shell >= np.arange(n) - 1e-9) & (shell < np.arange(n) + 1 + 1e-9))


@pytest.mark.parametrize("conformations, types, temperature, error, match", [
    (np.zeros((4, 3)), [0, 0, 0, 0], 1.0, InputError, "conformations: expected shape"),
    (np.zeros((4, 5, 3)), [0, 0, 0], 1.0, InputError, "types: expected shape"),
    (np.zeros((4, 2, 3)), [0, -1], 1.0, InputError, "types: bead types must be >= 0"),
    (np.zeros((4, 2, 3)), [0, 0], 0.0, InputError, "temperature: must be a finite number > 0"),
    (np.zeros((4, 2, 3)), [0, 0], -1.0, InputError, "temperature: must be a finite number > 0"),
    (np.full((4, 2, 3), np.nan), [0, 0], 1.0, InputError, "conformations: contains NaN"),
    (np.zeros((3, 2, 3)), [0, 0], 1.0, AnalysisError, "at least 4 frames"),
    (np.zeros((0, 2, 3)), [0, 0], 1.0, AnalysisError, "at least 4 frames"),
    (np.zeros((4, 0, 3)), [], 1.0, InputError, "at least one bead"),
])
def test_bad_input_is_refused_with_a_clear_message(conformations, types, temperature, error, match):
    with pytest.raises(error, match=match):
        compute_second_virial(conformations, types, WCA(), temperature)


@pytest.mark.parametrize("keyword, value, match", [
    ("n_blocks", 1, "n_blocks: need at least 2"),
    ("n_samples", 0, "n_samples: must be an integer >= 1"),
    ("seed", -1, "seed: must be an integer >= 0"),
])
def test_bad_settings_are_refused(keyword, value, match):
    with pytest.raises(InputError, match=match):
        compute_second_virial(np.zeros((4, 2, 3)), [0, 0], WCA(), 1.0, **{keyword: value})


def test_forcefield_must_be_a_force_field_or_pair_potential():
    with pytest.raises(InputError, match="forcefield: expected a beadsim ForceField or pair potential"):
        compute_second_virial(np.zeros((4, 2, 3)), [0, 0], "wca", 1.0)
