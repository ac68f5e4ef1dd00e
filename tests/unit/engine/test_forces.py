"""Forces: gradient consistency, momentum balance and agreement with the NumPy reference."""

import numpy as np
import pytest

import beadsim as bs
from beadsim.engine.reference import reference_forces
from beadsim.model.tables import Table


def _lj_table(tmp_path, with_force):
    """An LJ potential (eps=1, sigma=1, cut and shifted at 2.5) written as a table file."""
    r = np.linspace(0.7, 2.5, 361)
    lj = bs.LennardJones(cutoff=2.5)
    u, f_r = lj.energy_force(r ** 2)
    cols = [r, u, f_r * r] if with_force else [r, u]
    path = tmp_path / "pair.table"
    np.savetxt(path, np.column_stack(cols))
    return path


def _bond_table(tmp_path):
    r = np.linspace(0.5, 1.45, 400)
    u, f_r = bs.FENE().energy_force(r ** 2)
    path = tmp_path / "bond.table"
    np.savetxt(path, np.column_stack([r, u, f_r * r]))
    return path


def _systems(tmp_path):
    """(name, System, ForceField) covering every potential, both boxes, types and exclusions."""
    chain = bs.build_chains(40, seed=3, min_distance=0.85)
    melt = bs.build_chains([20] * 10, density=0.5, seed=4, min_distance=0.85)
    two_types = bs.build_chains([30, 30], density=0.1, seed=5, min_distance=0.85)
    two_types.types[::3] = 1
    return [
        ("wca_fene_open", chain, bs.ForceField(bs.WCA(), bs.FENE())),
        ("lj_fene_periodic", melt, bs.ForceField(bs.LennardJones(cutoff=2.5, shift=False), bs.FENE())),
        ("cos2_harmonic_bending", chain, bs.ForceField(bs.CosineSquared(depth=1.3), bs.HarmonicBond(50.0, 0.97),
                                                       bending=bs.Bending(2.0))),
        ("table_pairs_excl", melt, bs.ForceField(bs.TabulatedPair(_lj_table(tmp_path, True)),
                                                 bs.TabulatedBond(_bond_table(tmp_path)), exclude="bonded")),
        ("spline_table_angles_excl", chain, bs.ForceField(bs.TabulatedPair(_lj_table(tmp_path, False)), bs.FENE(),
                                                          bending=bs.Bending(1.0), exclude="bonded_and_angles")),
        ("two_types", two_types, bs.ForceField({(0, 0): bs.WCA(), (0, 1): bs.LennardJones(cutoff=2.5),
                                                (1, 1): bs.CosineSquared(depth=0.5)}, bs.FENE())),
    ]


def _kernel(system, ff):
    sim = bs.Simulation(system.copy(), ff, bs.VelocityVerlet(0.005))
    return sim.forces.copy(), sim.raw_energies.copy()


@pytest.fixture(scope="module")
def systems(tmp_path_factory):
    return _systems(tmp_path_factory.mktemp("tables"))


def test_kernel_forces_equal_numpy_reference(systems):
    """Compiled forces, energies and virial equal the NumPy/cKDTree twin to 1e-10 relative (issue 2)."""
    for name, system, ff in systems:
        f_k, e_k = _kernel(system, ff)
        f_r, e_r = reference_forces(system, ff)
        scale = np.abs(f_r).max()
        assert np.abs(f_k - f_r).max() <= 1e-10 * scale, name
        np.testing.assert_allclose(e_k, e_r, rtol=1e-10, atol=1e-10 * np.abs(e_r).max(), err_msg=name)


def test_bond_groups_with_cross_links_equal_numpy_reference():
    """Above PARALLEL_MIN_BONDS the bond forces run in chunk groups; cross-links between distant beads go
    to the last group. Forces and energies still equal the NumPy twin to 1e-10 relative (issue 2), and
    reversing the bond list changes nothing beyond rounding."""
    from scipy.spatial import cKDTree

    from beadsim.kernels.forces import PARALLEL_MIN_BONDS, bond_chunks

    melt = bs.build_chains([100] * 25, density=0.5, seed=8, min_distance=0.85)
    wrapped = melt.positions - melt.box.lengths * np.floor(melt.positions / melt.box.lengths)
    close = cKDTree(wrapped, boxsize=melt.box.lengths).query_pairs(1.2, output_type="ndarray")
    # cross-links: close in space, far apart in index, pairs whose images are nearest as unwrapped
    d = melt.positions[close[:, 1]] - melt.positions[close[:, 0]]
    links = close[(np.abs(close[:, 1] - close[:, 0]) > 500) & (np.abs(d).max(axis=1) < 1.2)][:40]
    assert len(links) == 40
    bonds = np.concatenate([melt.bonds, links])
    assert len(bonds) >= PARALLEL_MIN_BONDS
    ff = bs.ForceField(bs.WCA(), bs.FENE())
    for order in (bonds, bonds[::-1]):
        system = bs.System(melt.positions, melt.chain_lengths, bonds=order, box=melt.box)
        bond_order, bond_start = bond_chunks(system.bonds, system.n_beads)
        assert bond_start[-1] - bond_start[-2] == 40          # the cross-links form the last group
        assert sorted(bond_order) == list(range(len(bonds)))
        f_k, e_k = _kernel(system, ff)
        f_r, e_r = reference_forces(system, ff)
        assert np.abs(f_k - f_r).max() <= 1e-10 * np.abs(f_r).max()
        np.testing.assert_allclose(e_k, e_r, rtol=1e-10, atol=1e-10 * np.abs(e_r).max())


def test_chains_far_apart_in_open_box_equal_numpy_reference():
    """Open-box lists index z layers over the beads' extent; chains 1,000 sigma apart in z (more layers
    than twice the beads) fall back to hashing all three coordinates. Same forces as the NumPy twin."""
    pair = bs.build_chains([30, 30], density=0.1, seed=9, min_distance=0.85)
    pos = pair.positions - pair.positions.mean(axis=0)
    pos[30:, 2] += 1000.0
    system = bs.System(pos, [30, 30])
    ff = bs.ForceField(bs.LennardJones(cutoff=2.5), bs.FENE())
    f_k, e_k = _kernel(system, ff)
    f_r, e_r = reference_forces(system, ff)
    assert np.abs(f_k - f_r).max() <= 1e-10 * np.abs(f_r).max()
    np.testing.assert_allclose(e_k, e_r, rtol=1e-10, atol=1e-10 * np.abs(e_r).max())


def test_total_force_vanishes_on_isolated_system(systems):
    """Newton's third law: the net force on a closed system is zero (exact)."""
    for name, system, ff in systems:
        f, _ = _kernel(system, ff)
        assert np.abs(f.sum(axis=0)).max() < 1e-9 * np.abs(f).max(), name


def test_forces_are_minus_numerical_gradient(systems):
    """F = -dU/dx by central finite differences (h = 1e-6 sigma, truncation error O(h^2))."""
    h = 1e-6
    rng = np.random.default_rng(11)
    for name, system, ff in systems:
        f, _ = _kernel(system, ff)
        for bead in rng.choice(system.n_beads, 4, replace=False):
            for d in range(3):
                e = []
                for sign in (+1, -1):
                    s = system.copy()
                    s.positions[bead, d] += sign * h
                    e.append(_kernel(s, ff)[1][:3].sum())
                numeric = -(e[0] - e[1]) / (2 * h)
                assert numeric == pytest.approx(f[bead, d], rel=1e-5, abs=1e-5 * max(1.0, np.abs(f).max())), name


@pytest.mark.parametrize("pot", [bs.WCA(), bs.LennardJones(cutoff=2.5), bs.LennardJones(cutoff=3.0, shift=False),
                                 bs.CosineSquared(depth=1.0), bs.FENE(), bs.HarmonicBond(30.0, 0.9)])
def test_potential_force_is_minus_derivative(pot):
    """Each potential's f/r equals -dU/dr / r by central differences (exact calculus)."""
    r = np.linspace(0.85, 1.45, 200)
    r = r[np.abs(r - 2 ** (1 / 6)) > 1e-3]  # away from the kink of the cosine-squared joint (C1 there)
    h = 1e-6
    u_plus, _ = pot.energy_force((r + h) ** 2)
    u_minus, _ = pot.energy_force((r - h) ** 2)
    _, f_r = pot.energy_force(r ** 2)
    np.testing.assert_allclose(f_r * r, -(u_plus - u_minus) / (2 * h), rtol=1e-6, atol=1e-6)


def test_cosine_squared_matches_published_form():
    """Soddemann, Duenweg and Kremer (2001): U(r_min) = -phi, U(1.5 sigma) = 0, continuous at r_min."""
    phi = 0.8
    pot = bs.CosineSquared(depth=phi)
    rmin = 2 ** (1 / 6)
    u, _ = pot.energy_force(np.array([rmin ** 2 * (1 - 1e-12), rmin ** 2 * (1 + 1e-12), 1.5 ** 2 * (1 - 1e-12)]))
    np.testing.assert_allclose(u, [-phi, -phi, 0.0], atol=1e-9)


def test_table_reproduces_smooth_potential(tmp_path):
    """A table of LJ values and forces (spacing 0.005 sigma) reproduces LJ between its nodes.

    Energies to 1e-5 relative; forces to 1e-4 relative plus 1e-4 epsilon/sigma absolute,
    because near the force's zero at r = 2^(1/6) sigma a relative error is undefined
    (1e-4 epsilon/sigma is 1e-6 of the force at r = 0.8 sigma).
    """
    table = Table.from_file(_lj_table(tmp_path, True))
    r = np.linspace(0.8, 2.4, 1001)
    u, du = table.evaluate(r)
    u_ref, f_ref = bs.LennardJones(cutoff=2.5).energy_force(r ** 2)
    np.testing.assert_allclose(u, u_ref, rtol=1e-5, atol=1e-7)
    np.testing.assert_allclose(-du, f_ref * r, rtol=1e-4, atol=1e-4)
