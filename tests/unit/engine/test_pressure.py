"""Pressure: the ideal term uses the thermostat temperature, BAOAB's kinetic temperature of a harmonic mode,
and the Lennard-Jones tail corrections.

Exact results used here
-----------------------
* Ideal gas: p V = n kT (beads that do not interact have virial W = 0, so the virial route
  p = n kT / V + W / (3 V) gives exactly n kT / V).
* Harmonic dimers (bond U = k r^2 / 2, no other forces) in a periodic box: by equipartition
  <k r^2> = 3 kT per bond, so <W> = -<k r^2> = -3 kT per dimer and <p> = n_dimers kT / V, the ideal
  gas of molecules (exact for the canonical configurational distribution, which BAOAB samples exactly
  for a harmonic system: Leimkuhler and Matthews, Appl. Math. Res. Express 2013, 34).
* BAOAB's kinetic temperature of a harmonic mode (derived below from the scheme's definition in
  Leimkuhler and Matthews 2013; mass 1, force -w^2 x, step h, u = (w h)^2, 0 < u < 4):

      B  p1 = p0 - (h/2) w^2 x0      A  x1 = x0 + (h/2) p1      O  p2 = c p1 + sqrt((1 - c^2) kT) xi
      A  x2 = x1 + (h/2) p2          B  p3 = p2 - (h/2) w^2 x2

  The deterministic part between two O steps, (x1, p2) -> (x1', p1'), maps the Gaussian with
  var x1 = (kT / w^2)(1 - u/4), var p = kT, cov = 0 onto itself (x2 = x1 + (h/2) p2 has variance
  kT / w^2 and cov(x2, p2) = h kT / 2; p1' = p2 - h w^2 x2 has variance kT (1 + u - u) = kT;
  x1' = x2 + (h/2) p1' has variance (kT / w^2)(1 - u/4) and cov(x1', p1') = -h kT/2 + h kT/2 = 0),
  and O keeps p ~ N(0, kT) independent of x, so that Gaussian is the stationary law. The velocity at
  the end of the step then has

      var p3 = kT + (h^2 w^4 / 4) var x2 - h w^2 cov(x2, p2) = kT (1 - u / 4),

  independent of the friction: the kinetic temperature is low by (w h)^2 / 4 while the configurations
  (var x2 = kT / w^2) are exact. For unit-mass dimers the bond is a mode with w^2 = 2 k (reduced
  mass 1/2) and the centre of mass a free mode (w = 0, kinetic temperature kT exactly).
* Long-range corrections of the Lennard-Jones potential truncated at rc without shift (Allen and
  Tildesley, Computer Simulation of Liquids, 2nd ed. 2017, section 2.8; eqs. 2.144-2.145 of the 1987
  edition): U_tail / N = (8/3) pi rho eps sigma^3 [(1/3)(sigma/rc)^9 - (sigma/rc)^3],
  p_tail = (16/3) pi rho^2 eps sigma^3 [(2/3)(sigma/rc)^9 - (sigma/rc)^3].
"""

import math

import numpy as np
import pytest

import beadsim as bs
from beadsim.model.system import System


def _gas(n, edge, seed):
    """n single beads at random places in a periodic cube of side ``edge`` (sigma)."""
    positions = np.random.default_rng(seed).uniform(0.0, edge, size=(n, 3))
    return System(positions, np.ones(n, dtype=np.int64), box=bs.Box(np.full(3, edge)))


def _dimer_gas(n_dimers, edge, seed):
    """n_dimers two-bead chains (bond along x, 0.3 sigma) at random places in a periodic cube."""
    centres = np.random.default_rng(seed).uniform(0.0, edge, size=(n_dimers, 3))
    positions = np.repeat(centres, 2, axis=0)
    positions[1::2, 0] += 0.3
    return System(positions, np.full(n_dimers, 2), box=bs.Box(np.full(3, edge)))


@pytest.mark.parametrize("integrator", [bs.BAOABLangevin(0.005, 1.7, 1.0), bs.Brownian(0.005, 1.7, 1.0)])
def test_ideal_term_uses_the_thermostat_temperature(integrator):
    """Non-interacting beads, any velocities (here 2.5 times too hot, or none for Brownian dynamics):
    p = n kT / V exactly with the thermostat's kT = 1.7 (ideal gas law), not the kinetic temperature."""
    system = _gas(500, 20.0, seed=1)
    sim = bs.Simulation(system, bs.ForceField(bs.NoPair(), bs.HarmonicBond()), integrator, seed=1)
    system.velocities[:] = bs.maxwell_boltzmann_velocities(system.masses, 2.5 * 1.7, seed=1)
    obs = sim.observables()
    assert obs["virial"] == 0.0
    assert obs["pressure"] == pytest.approx(500 * 1.7 / 20.0 ** 3, rel=1e-14)
    sim.advance(10)  # Brownian dynamics zeroes the velocities; the pressure still has its ideal term
    assert sim.observables()["pressure"] == pytest.approx(500 * 1.7 / 20.0 ** 3, rel=1e-14)


def test_without_a_thermostat_the_ideal_term_uses_the_kinetic_temperature():
    """Velocity Verlet holds no temperature: p = n T_kin / V = 2 K / (3 V) for non-interacting beads."""
    system = _gas(500, 20.0, seed=2)
    sim = bs.Simulation(system, bs.ForceField(bs.NoPair(), bs.HarmonicBond()), bs.VelocityVerlet(0.005), seed=2)
    system.velocities[:] = bs.maxwell_boltzmann_velocities(system.masses, 1.3, seed=2)
    obs = sim.observables()
    assert obs["pressure"] == pytest.approx(2.0 * obs["kinetic_energy"] / (3.0 * 20.0 ** 3), rel=1e-14)


def _sample_dimer_gas():
    """BAOAB on 1000 harmonic dimers (k = 10, rest length 0) at h = 0.1 (u = (w h)^2 = 0.2 for the bond),
    kT = 1, friction 2, periodic cube of side 20; seed 9; 200 samples 25 steps apart (bond relaxation
    time 1 / friction = 0.5 tau = 5 steps, so samples are nearly independent) after 200 steps.

    Returns per-sample arrays: pressure column, bond-mode and centre-of-mass kinetic temperatures.
    """
    k, n_dimers, edge = 10.0, 1000, 20.0
    system = _dimer_gas(n_dimers, edge, seed=9)
    sim = bs.Simulation(system, bs.ForceField(bs.NoPair(), bs.HarmonicBond(k, 0.0)),
                        bs.BAOABLangevin(0.1, 1.0, 2.0), seed=9)
    system.velocities[:] = bs.maxwell_boltzmann_velocities(system.masses, 1.0, seed=9)
    sim.advance(200)
    pressure, t_bond, t_com = [], [], []
    for snap in bs.iterate(sim, 5000, 25):
        v = snap.velocities
        relative, centre = v[0::2] - v[1::2], 0.5 * (v[0::2] + v[1::2])
        pressure.append(snap.observables["pressure"])
        t_bond.append(np.mean(0.5 * relative ** 2))  # reduced mass 1/2, per Cartesian component
        t_com.append(np.mean(2.0 * centre ** 2))  # total mass 2
    return np.array(pressure), np.array(t_bond), np.array(t_com), n_dimers / edge ** 3


def test_baoab_kinetic_temperature_of_a_harmonic_mode_follows_the_closed_form():
    """Bond mode: kinetic temperature kT (1 - u/4) = 0.95 with u = 2 k h^2 = 0.2 (module notes);
    centre of mass (free): kT. Set-up in ``_sample_dimer_gas``; 200 samples of 3000 components each;
    tolerance 4 standard errors of the sample mean (about 0.0018 each: a kinetic temperature
    from 3000 Gaussian components has relative standard deviation sqrt(2 / 3000))."""
    _, t_bond, t_com, _ = _sample_dimer_gas()
    u = 2 * 10.0 * 0.1 ** 2
    for series, exact in ((t_bond, 1.0 - u / 4), (t_com, 1.0)):
        sem = series.std(ddof=1) / math.sqrt(series.size)
        assert abs(series.mean() - exact) < 4 * sem, (series.mean(), exact, sem)


def test_pressure_of_harmonic_dimers_is_the_molecular_ideal_gas():
    """<p> = n_dimers kT / V exactly (module notes) with the thermostat kT in the ideal term. The kinetic
    temperature would give <p> low by (n / V) kT u / 8 = 0.05 n_dimers kT / V (n = 2 n_dimers beads, half
    the modes are bonds, each low by u / 4), about 26 standard errors here (2.4e-4 with this seed).
    Set-up in ``_sample_dimer_gas``; tolerance 4 standard errors of the mean of 200 samples."""
    pressure, _, _, rho_dimers = _sample_dimer_gas()
    sem = pressure.std(ddof=1) / math.sqrt(pressure.size)
    assert abs(pressure.mean() - rho_dimers * 1.0) < 4 * sem, (pressure.mean(), rho_dimers, sem)
    assert 0.05 * rho_dimers > 8 * sem  # the check can tell the two conventions apart


@pytest.mark.parametrize("epsilon, sigma, cutoff", [(1.0, 1.0, 2.5), (0.7, 1.2, 3.0)])
def test_tail_correction_adds_the_allen_tildesley_terms(epsilon, sigma, cutoff):
    """pair_energy and pressure with the correction minus without it equal N U_tail/N and p_tail written
    out from Allen and Tildesley (module notes), to the rounding of the larger term (the random start
    has overlaps, so the uncorrected values are large); 400 beads at rho = 0.4 / sigma^3."""
    n, rho = 400, 0.4 / sigma ** 3
    edge = (n / rho) ** (1 / 3)
    lj = bs.LennardJones(epsilon, sigma, cutoff, shift=False)
    observed = []
    for enabled in (False, True):
        system = _gas(n, edge, seed=4)
        sim = bs.Simulation(system, bs.ForceField(lj, bs.HarmonicBond()), bs.BAOABLangevin(0.005, 1.0, 1.0),
                            seed=4, tail_correction=enabled)
        observed.append(sim.observables())
    x = sigma / cutoff
    u_tail = 8.0 / 3.0 * math.pi * rho * epsilon * sigma ** 3 * (x ** 9 / 3.0 - x ** 3)
    p_tail = 16.0 / 3.0 * math.pi * rho ** 2 * epsilon * sigma ** 3 * (2.0 / 3.0 * x ** 9 - x ** 3)
    plain, corrected = observed
    assert corrected["virial"] == plain["virial"]
    eps = np.finfo(np.float64).eps
    for name, exact in (("pair_energy", n * u_tail), ("potential_energy", n * u_tail), ("pressure", p_tail)):
        rounding = 4 * eps * max(abs(plain[name]), abs(corrected[name]))
        assert corrected[name] - plain[name] == pytest.approx(exact, rel=1e-14, abs=rounding), name


@pytest.mark.parametrize("pair, box, words", [
    (bs.LennardJones(cutoff=2.5, shift=True), 10.0, "truncated without shift"),
    (bs.WCA(), 10.0, "truncated without shift"),
    ({(0, 0): bs.LennardJones(cutoff=2.5, shift=False)}, 10.0, "truncated without shift"),
    (bs.LennardJones(cutoff=2.5, shift=False), None, "periodic box"),
])
def test_tail_correction_is_refused_where_the_formula_does_not_hold(pair, box, words):
    system = _gas(50, 10.0, seed=5)
    if box is None:
        system = System(system.positions, np.ones(50, dtype=np.int64))
    with pytest.raises(bs.InputError, match=f"tail_correction: .*{words}"):
        bs.Simulation(system, bs.ForceField(pair, bs.HarmonicBond()), bs.BAOABLangevin(0.005), tail_correction=True)
