"""Integrators: one base class, one fused kernel, a registry by name.

Contract of :class:`Integrator` (what a subclass provides):

1. ``scheme``: the kernel code in :mod:`beadsim.kernels.integrate`.
2. ``thermostatted``: whether the scheme holds a temperature.
3. ``_coefficients(masses)`` -> ``(coeffs, noise_scale)``: the float64 (2,)
   scheme constants and the float64 (n,) per-bead noise amplitudes.
4. optionally ``start_velocities(masses, seed)``: the velocities a run starts
   from; the base class draws them from the Maxwell-Boltzmann distribution at
   ``temperature``, removing the centre-of-mass motion only for schemes without a
   thermostat (which conserve momentum).

The public :meth:`Integrator.step` keeps the bookkeeping (step count, status
check, errors); ``_step_impl`` runs the compiled loop.
"""

import math

import numpy as np

from .._validate import positive
from ..errors import InstabilityError
from ..kernels import forces as KF
from ..kernels.integrate import BAOAB as _BAOAB, BROWNIAN as _BROWNIAN, VERLET as _VERLET, advance
from ..model.build import maxwell_boltzmann_velocities
from ..model.potentials import lookup
from .health import non_finite_term
from .threads import threads_for


class Integrator:
    """Base class: stores timestep, temperature and friction; advances a Simulation.

    Parameters
    ----------
    timestep : float
        dt, tau.
    temperature : float
        kT, epsilon (ignored by schemes without a thermostat).
    friction : float
        gamma, 1/tau (ignored by schemes without a thermostat).
    """

    scheme = None
    thermostatted = True

    def __init__(self, timestep=0.005, temperature=1.0, friction=0.5):
        self.timestep = positive(timestep, "timestep")
        self.temperature = positive(temperature, "temperature", allow_zero=not self.thermostatted)
        self.friction = positive(friction, "friction", allow_zero=not self.thermostatted)

    def _coefficients(self, masses):
        raise NotImplementedError

    def start_velocities(self, masses, seed):
        """Velocities a run starts from: Maxwell-Boltzmann at ``temperature``, reproducible from ``seed``.

        A thermostatted scheme gets every component drawn (its kinetic temperature
        counts 3 n degrees of freedom, so the start is an equilibrium sample of the
        velocities). A scheme without a thermostat conserves momentum, so the
        centre-of-mass motion is removed: a drifting system would carry the drift
        for the whole run (an open-box chain would fly off), and the kinetic
        temperature then starts at kT (3 n - 3) / (3 n) on average.

        Parameters
        ----------
        masses : float64 (n,)
            Bead masses, m.
        seed : int
            Seed of the run (the velocities have their own stream of it,
            :func:`beadsim.model.build.maxwell_boltzmann_velocities`).

        Returns
        -------
        float64 (n, 3)
            sigma / tau.
        """
        return maxwell_boltzmann_velocities(masses, self.temperature, seed, remove_drift=not self.thermostatted)

    def step(self, sim, n_steps):
        """Advance ``sim`` by ``n_steps``; raise InstabilityError if the dynamics broke.

        Parameters
        ----------
        sim : beadsim.engine.simulation.Simulation
        n_steps : int
        """
        counters = np.zeros(2, dtype=np.int64)
        try:
            self._step_impl(sim, int(n_steps), counters)
        except ZeroDivisionError:  # the force kernel met two interacting beads at one point
            sim.step_count += int(counters[0]) + 1
            raise InstabilityError(f"two interacting beads reached the same position at step {sim.step_count} "
                                   "(pair term): the dynamics is unstable; lower the timestep",
                                   step=sim.step_count) from None
        sim.step_count += int(counters[0])
        sim.rebuilds += int(counters[1])
        status, index = int(sim.info[0]), int(sim.info[1])
        if status != KF.OK:
            raise InstabilityError(_describe(status, index, sim), step=sim.step_count)

    def _step_impl(self, sim, n_steps, counters):
        coeffs, noise = self._coefficients(sim.system.masses)
        nl = sim.neighbors
        with threads_for(sim.system.n_beads):
            nl.arrays = advance(self.scheme, n_steps, sim.step_count, np.uint64(sim.noise_seed), self.timestep,
                             coeffs, sim.system.positions, sim.system.velocities, sim.forces,
                             1.0 / sim.system.masses, noise, sim.box_lengths, sim.system.box.periodic,
                             sim.system.types, sim.compiled.arrays, nl.r_list, nl.skin, nl.excl_start, nl.excl,
                             nl.arrays, nl.ref, sim.raw_energies, sim.info, counters)

    def __repr__(self):
        return (f"{type(self).__name__}(timestep={self.timestep!r}, temperature={self.temperature!r}, "
                f"friction={self.friction!r})")


class BAOABLangevin(Integrator):
    """BAOAB Langevin splitting (Leimkuhler and Matthews, Appl. Math. Res. Express 2013, 34).

    Samples configurations with O(dt^2) error in general and the harmonic
    oscillator's configurational distribution exactly.
    """

    scheme = _BAOAB

    def _coefficients(self, masses):
        c1 = math.exp(-self.friction * self.timestep)
        return np.array([c1, 0.0]), np.sqrt((1.0 - c1 * c1) * self.temperature / masses)


class VelocityVerlet(Integrator):
    """Velocity Verlet, no thermostat: for energy-conservation checks (NVE)."""

    scheme = _VERLET
    thermostatted = False

    def _coefficients(self, masses):
        return np.zeros(2), np.zeros(len(masses))


class Brownian(Integrator):
    """Overdamped Brownian dynamics, Euler-Maruyama; velocities are not defined and stay zero."""

    scheme = _BROWNIAN

    def start_velocities(self, masses, seed):
        """Zero velocities (overdamped dynamics has none), float64 (n, 3)."""
        return np.zeros((len(masses), 3))

    def _coefficients(self, masses):
        return (np.array([1.0 / self.friction, 0.0]),
                np.sqrt(2.0 * self.temperature * self.timestep / (masses * self.friction)))


INTEGRATORS = {"baoab": BAOABLangevin, "verlet": VelocityVerlet, "brownian": Brownian}


def make_integrator(name, **settings):
    """Instantiate an integrator from its registry name (or a user's subclass)."""
    return lookup(INTEGRATORS, name, "integrator")(**settings)


def _describe(status, index, sim):
    where = f"at step {sim.step_count}"
    if status == KF.FENE_OVERSTRETCH:
        i, j = sim.system.bonds[index]
        return (f"FENE bond {index} (beads {i}-{j}) stretched to its maximum extension {where}: "
                "the dynamics is unstable; lower the timestep (or minimise the start structure)")
    if status == KF.OUTSIDE_TABLE:
        what = (f"bond {index}" if index >= 0 else f"a pair at bead {-1 - index}")
        return (f"{what} left the range of its tabulated potential {where}; extend the table to "
                "shorter/longer distances or lower the timestep")
    bead, term = non_finite_term(sim)
    return (f"non-finite energy {where} (bead {bead}, {term} term): the dynamics blew up; lower the timestep"
            + (", or check the tabulated potential for a hole" if term != "bending" else ""))
