"""Dynamics against exact results: energy conservation, equipartition, exact harmonic sampling,
Einstein diffusion, ideal-chain statistics and the bead-spring bond length.

Statistical checks state seed, sample size and a tolerance derived from the standard error.
"""

import numpy as np
import pytest
from scipy import integrate, stats

import beadsim as bs
from beadsim.model.system import System


def _free_beads(n, box=None):
    """n unbonded beads (chains of length 1) at the origin-less lattice, no interactions."""
    pos = np.column_stack([np.arange(n, dtype=float), np.zeros(n), np.zeros(n)])
    return System(pos, np.ones(n, dtype=np.int64))


def _dimers(n_dimers, bond_length):
    pos = np.zeros((2 * n_dimers, 3))
    pos[:, 0] = 5.0 * np.repeat(np.arange(n_dimers), 2)
    pos[1::2, 2] = bond_length
    return System(pos, np.full(n_dimers, 2))


def _block_means(samples, n_blocks=20):
    """Means of n_blocks consecutive blocks (blocks longer than the correlation time)."""
    return np.array([b.mean() for b in np.array_split(np.asarray(samples), n_blocks)])


def test_velocity_verlet_conserves_energy():
    """NVE: relative drift of the total energy < 1e-4 over 1e4 steps at dt = 0.005 (issue 2 requirement).

    Velocity Verlet is symplectic: the energy oscillates about a shadow value with an O(dt^2) offset
    and does not drift (Hairer, Lubich and Wanner, Geometric Numerical Integration, 2003). Drift is
    the change of the mean energy between the first and last tenth of the run; the oscillation itself
    must stay below 1e-3 relative.
    """
    system = bs.build_chains(64, seed=21)
    sim = bs.Simulation(system, bs.ForceField(bs.WCA(), bs.FENE()), bs.VelocityVerlet(0.005), seed=21)
    sim.minimize()
    system.velocities[:] = bs.maxwell_boltzmann_velocities(system.masses, 1.0, seed=21)
    sim.compute_forces()
    e0 = sim.observables()["total_energy"]
    energies = np.array([snap.observables["total_energy"] for snap in bs.iterate(sim, 10_000, 10)])
    tenth = len(energies) // 10
    drift = abs(energies[-tenth:].mean() - energies[:tenth].mean()) / abs(e0)
    assert drift < 1e-4
    assert np.abs(energies - e0).max() / abs(e0) < 1e-3


def test_equipartition_and_maxwell_speeds():
    """BAOAB at kT = 1.2: mean kinetic temperature equals kT within 4 standard errors (equipartition),
    and bead speeds follow scipy.stats.maxwell(scale=sqrt(kT/m)) by a Kolmogorov-Smirnov test.

    Seed 5; 64-bead FENE+WCA chain; 400 snapshots 50 steps apart after 2000 steps; standard error of
    the temperature from 20 block means; KS on one bead per snapshot (400 nearly independent speeds).
    """
    kT = 1.2
    system = bs.build_chains(64, seed=5)
    sim = bs.Simulation(system, bs.ForceField(bs.WCA(), bs.FENE()), bs.BAOABLangevin(0.005, kT, 1.0), seed=5)
    sim.minimize()
    sim.advance(2000)
    temps, speeds = [], []
    for k, snap in enumerate(bs.iterate(sim, 20_000, 50)):
        temps.append(snap.observables["kinetic_temperature"])
        speeds.append(np.linalg.norm(snap.velocities[k % 64]))
    blocks = _block_means(temps)
    sem = blocks.std(ddof=1) / np.sqrt(len(blocks))
    assert abs(np.mean(temps) - kT) < 4 * sem
    assert stats.kstest(speeds, stats.maxwell(scale=np.sqrt(kT)).cdf).pvalue > 0.001


def test_baoab_samples_harmonic_configuration_exactly():
    """BAOAB samples the harmonic oscillator's configurations exactly at any stable dt (Leimkuhler and
    Matthews, Appl. Math. Res. Express 2013): <x^2> = kT/k per component of the bond vector, here with
    dt = 0.1, where velocity-Verlet-type schemes show an O(dt^2) bias of (omega dt)^2 / 4 with
    omega^2 = 2 k / m for the dimer's reduced mass m / 2, 5 percent here.

    Seed 9; 500 dimers (reduced mass 1/2, k = 10, rest length 0), 200 snapshots 25 steps apart
    (> 5 relaxation times); 3e5 samples; tolerance 4 standard errors (~0.8 percent).
    """
    k, kT = 10.0, 1.0
    system = _dimers(500, 0.3)
    ff = bs.ForceField(bs.NoPair(), bs.HarmonicBond(k, 0.0))
    sim = bs.Simulation(system, ff, bs.BAOABLangevin(0.1, kT, 2.0), seed=9)
    sim.advance(200)
    x2 = []
    for snap in bs.iterate(sim, 5000, 25):
        d = snap.positions[1::2] - snap.positions[0::2]
        x2.append((d ** 2).ravel())
    x2 = np.concatenate(x2)
    sem = x2.std(ddof=1) / np.sqrt(len(x2))
    assert abs(x2.mean() - kT / k) < 4 * sem


def test_free_bead_diffusion_follows_einstein_relation():
    """Free beads: MSD(t) = 6 D [t - (1 - exp(-gamma t))/gamma] with D = kT/(m gamma) (Einstein relation,
    Ornstein-Uhlenbeck velocity; REFERENCES 'Langevin dynamics'). BAOAB's free-particle diffusion is
    D (gamma dt/2) coth(gamma dt/2) = D (1 + (gamma dt)^2/12 + ...), a 8e-5 correction here.

    Seed 13; 4000 beads, gamma = 1, dt = 0.01, t = 100 tau; the MSD estimate from 12000 Gaussian
    components has relative standard error sqrt(2/12000) = 1.3 percent; tolerance 4 standard errors.
    """
    kT, gamma, dt, steps = 1.5, 1.0, 0.01, 10_000
    system = _free_beads(4000)
    start = system.positions.copy()
    sim = bs.Simulation(system, bs.ForceField(bs.NoPair(), bs.HarmonicBond()), bs.BAOABLangevin(dt, kT, gamma),
                        seed=13)
    system.velocities[:] = bs.maxwell_boltzmann_velocities(system.masses, kT, seed=13)
    sim.advance(steps)
    t = steps * dt
    msd = np.mean(np.sum((system.positions - start) ** 2, axis=1))
    d = kT / gamma * (gamma * dt / 2) / np.tanh(gamma * dt / 2)
    expected = 6 * d * (t - (1 - np.exp(-gamma * t)) / gamma)
    assert msd == pytest.approx(expected, rel=4 * np.sqrt(2 / (3 * 4000)))


def test_brownian_dynamics_samples_harmonic_dimers_with_its_exact_timestep_error():
    """Euler-Maruyama Brownian dynamics, x' = x + dt F / (m gamma) + sqrt(2 kT dt / (m gamma)) xi, moves the bond
    vector r of a harmonic dimer (rest length 0) as the AR(1) process r' = (1 - a) r + s xi with
    a = 2 k dt / (m gamma) and s^2 = 4 kT dt / (m gamma) per component, whose stationary variance is exactly
    s^2 / (1 - (1 - a)^2) = (kT / k) / (1 - k dt / (m gamma)) (stationary variance of an AR(1) process, e.g.
    Priestley, Spectral Analysis and Time Series, 1981, ch. 3; the overdamped limit kT/k as dt -> 0).

    Seed 23; 500 dimers, k = 10, kT = 1.3, m = 1, gamma = 2, dt = 0.02 (k dt / (m gamma) = 0.1: 11 % above kT/k);
    200 snapshots 25 steps apart (the AR(1) coefficient 0.8 decays to 4e-3 between them); 3e5 samples; tolerance
    4 standard errors (about 0.8 %). A noise amplitude off by sqrt(2) (sampling at kT/2) misses by 50 %."""
    k, kT, gamma, dt = 10.0, 1.3, 2.0, 0.02
    sim = bs.Simulation(_dimers(500, 0.3), bs.ForceField(bs.NoPair(), bs.HarmonicBond(k, 0.0)),
                        bs.Brownian(dt, kT, gamma), seed=23)
    sim.advance(200)
    x2 = np.concatenate([((snap.positions[1::2] - snap.positions[0::2]) ** 2).ravel()
                         for snap in bs.iterate(sim, 5000, 25)])
    exact = kT / k / (1.0 - k * dt / gamma)
    assert abs(x2.mean() - exact) < 4 * x2.std(ddof=1) / np.sqrt(x2.size)


def test_brownian_free_beads_diffuse_with_the_einstein_coefficient():
    """Free beads under Euler-Maruyama Brownian dynamics: each step adds an independent Gaussian displacement of
    variance 2 D dt per component with D = kT / (m gamma) (Einstein relation), so MSD(t) = 6 D t exactly at any dt.

    Seed 29; 4000 beads, kT = 0.8, gamma = 2.5, dt = 0.01, 2000 steps; the MSD estimate from 12000 Gaussian
    components has relative standard error sqrt(2/12000) = 1.3 percent; tolerance 4 standard errors."""
    kT, gamma, dt, steps = 0.8, 2.5, 0.01, 2000
    system = _free_beads(4000)
    start = system.positions.copy()
    sim = bs.Simulation(system, bs.ForceField(bs.NoPair(), bs.HarmonicBond()), bs.Brownian(dt, kT, gamma), seed=29)
    sim.advance(steps)
    msd = np.mean(np.sum((system.positions - start) ** 2, axis=1))
    assert msd == pytest.approx(6 * kT / gamma * steps * dt, rel=4 * np.sqrt(2 / (3 * 4000)))


def test_ideal_gaussian_chain_sizes():
    """Harmonic springs (rest length 0), no non-bonded forces: <Re^2> = 3 (N-1) kT/k_s and
    <Rg^2> = b^2 (N^2-1)/(6N), b^2 = 3 kT/k_s (exact; Rubinstein and Colby, Polymer Physics, 2003).

    Seed 17; 200 independent 16-bead chains, k_s = 3, 40 snapshots 500 steps (5 tau) apart. The Rouse time
    tau_R = zeta N^2 b^2 / (3 pi^2 kT) = zeta N^2 / (pi^2 k_s) is about 8.6 tau here (zeta = m gamma = 1), so
    successive snapshots of a chain are correlated: the standard error comes from the 200 chains' own time
    averages, which are independent; tolerance 4 standard errors.
    """
    n, k_s, kT = 16, 3.0, 1.0
    system = bs.build_chains([n] * 200, bond_length=1.0, density=0.01, min_distance=0.1, seed=17)
    ff = bs.ForceField(bs.NoPair(), bs.HarmonicBond(k_s, 0.0))
    sim = bs.Simulation(system, ff, bs.BAOABLangevin(0.01, kT, 1.0), seed=17)
    sim.advance(2000)
    re2, rg2 = [], []
    for snap in bs.iterate(sim, 20_000, 500):
        x = snap.positions.reshape(200, n, 3)
        re2.append(np.sum((x[:, -1] - x[:, 0]) ** 2, axis=1))
        rg2.append(np.mean(np.sum((x - x.mean(axis=1, keepdims=True)) ** 2, axis=2), axis=1))
    b2 = 3 * kT / k_s
    for values, exact in ((np.array(re2), (n - 1) * b2), (np.array(rg2), b2 * (n * n - 1) / (6 * n))):
        per_chain = values.mean(axis=0)  # (snapshots, chains) -> time average of each chain
        sem = per_chain.std(ddof=1) / np.sqrt(per_chain.size)
        assert abs(per_chain.mean() - exact) < 4 * sem


def _dimer_mean_bond_length(kT):
    """<b> of an isolated FENE+WCA dimer by direct integration of r^2 exp(-U/kT) (exact)."""
    fene, wca = bs.FENE(), bs.WCA()

    def weight(r, power):
        u = fene.energy_force(r * r)[0] + wca.energy_force(r * r)[0]
        return r ** power * np.exp(-u / kT)

    num = integrate.quad(weight, 0.7, 1.4999, args=(3,), points=[0.97], limit=200)[0]
    den = integrate.quad(weight, 0.7, 1.4999, args=(2,), points=[0.97], limit=200)[0]
    return num / den


def test_fene_wca_bond_length():
    """FENE (k=30, R0=1.5) + WCA at T = 1: isolated dimers match the exact integral <b> (= 0.970 sigma) within
    4 standard errors, and bonds in a 64-bead chain average about 0.97 sigma (Kremer and Grest, J. Chem.
    Phys. 92, 5057, 1990; value from memory, checked to +-0.01).

    Seed 19; 1000 dimers x 100 snapshots for the exact check; dt = 0.002 keeps BAOAB's O(dt^2) bias in the
    stiff bond far below the 2e-4 sigma standard error.
    """
    exact = _dimer_mean_bond_length(1.0)
    assert exact == pytest.approx(0.970, abs=5e-4)
    ff = bs.ForceField(bs.WCA(), bs.FENE())
    system = _dimers(1000, 0.97)
    sim = bs.Simulation(system, ff, bs.BAOABLangevin(0.002, 1.0, 2.0), seed=19)
    sim.advance(500)
    bonds = np.concatenate([np.linalg.norm(s.positions[1::2] - s.positions[0::2], axis=1)
                            for s in bs.iterate(sim, 10_000, 100)])
    assert abs(bonds.mean() - exact) < 4 * bonds.std(ddof=1) / np.sqrt(len(bonds))

    chain = bs.build_chains(64, seed=19)
    sim = bs.Simulation(chain, ff, bs.BAOABLangevin(0.005, 1.0, 0.5), seed=19)
    sim.minimize()
    sim.advance(2000)
    lengths = [np.linalg.norm(np.diff(s.positions, axis=0), axis=1).mean() for s in bs.iterate(sim, 10_000, 100)]
    assert np.mean(lengths) == pytest.approx(0.97, abs=0.01)


def test_same_seed_gives_identical_trajectory():
    """Determinism: identical seeds and inputs give bit-identical states; another seed differs."""
    def final(seed):
        system = bs.build_chains(32, seed=1)
        sim = bs.Simulation(system, bs.ForceField(bs.LennardJones(), bs.FENE()), bs.BAOABLangevin(0.005), seed=seed)
        sim.minimize()
        sim.advance(3000)
        return system.positions.copy()

    a, b, c = final(7), final(7), final(8)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)


def test_run_split_in_chunks_equals_one_run():
    """Advancing 1000 + 2000 steps gives exactly the state of 3000 steps at once (noise keyed on step)."""
    def make():
        system = bs.build_chains(32, seed=2)
        sim = bs.Simulation(system, bs.ForceField(bs.WCA(), bs.FENE()), bs.BAOABLangevin(0.005), seed=3)
        sim.minimize()
        return sim

    one, two = make(), make()
    one.advance(3000)
    two.advance(1000)
    two.advance(2000)
    assert np.array_equal(one.system.positions, two.system.positions)


def test_baoab_gives_light_and_heavy_free_beads_the_set_temperature():
    """4,000 free beads of masses 0.5 and 4 m (alternating), no forces, BAOAB at kT = 1.3, friction 10 / tau,
    400 steps of 0.005 tau (20 relaxation times 1 / gamma). The O step is the exact
    Ornstein-Uhlenbeck update, so each velocity component ends Gaussian with variance kT / m (Leimkuhler and
    Matthews, Appl. Math. Res. Express 2013, 34; Maxwell-Boltzmann), up to the e^-40 left of the start. The
    kinetic temperature of each mass class, sum m v^2 / (3 n), is then kT times a chi-square variable with
    6,000 degrees of freedom over 6,000: standard deviation kT sqrt(2 / 6000), tolerance 4 of them. Seed 9.
    Unit masses could not tell kT / m from kT m in the noise amplitude; these masses can (16 times apart)."""
    system = _free_beads(4000)
    system.masses[:] = np.tile([0.5, 4.0], 2000)
    sim = bs.Simulation(system, bs.ForceField(bs.NoPair(), bs.HarmonicBond(1.0, 0.0)),
                        bs.BAOABLangevin(0.005, temperature=1.3, friction=10.0), seed=9)
    sim.run(400)
    v, m = sim.system.velocities, sim.system.masses
    sigma = 1.3 * np.sqrt(2 / 6000)
    for mass in (0.5, 4.0):
        heavy = m == mass
        t_kin = float(np.sum(m[heavy, None] * v[heavy] ** 2) / (3 * heavy.sum()))
        assert abs(t_kin - 1.3) < 4 * sigma, (mass, t_kin)
