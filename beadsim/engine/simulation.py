"""A system, its force field and an integrator, ready to step."""

import numpy as np

from .._validate import positive, positive_int
from ..errors import InputError, MinimizationError
from ..kernels.forces import total_forces
from ..model.potentials import ForceField, LennardJones
from ..model.system import System
from .integrators import Integrator
from .neighbors import NeighborList


class Simulation:
    """Langevin (or other) dynamics of a :class:`~beadsim.model.system.System`.

    Parameters
    ----------
    system : System
        The state; it is advanced in place.
    forcefield : ForceField
    integrator : Integrator
    seed : int
        Seed of the thermostat noise (counter-based: the state of the random
        numbers is ``(seed, step_count)``).
    skin : float
        Verlet-list skin, sigma.
    tail_correction : bool
        Add the analytic long-range corrections of a Lennard-Jones pair potential
        truncated without shift (:meth:`~beadsim.model.potentials.LennardJones.tail_correction`)
        to the pair energy and the pressure of :meth:`observables`. Only for a
        periodic box with one such potential between all bead types: the
        correction assumes a uniform fluid beyond the cutoff.

    Examples
    --------
    >>> import beadsim as bs
    >>> system = bs.build_chains(32, seed=1)
    >>> sim = bs.Simulation(system, bs.ForceField(bs.WCA(), bs.FENE()), bs.BAOABLangevin(0.005), seed=1)
    >>> sim.minimize()                                  # doctest: +SKIP
    >>> sim.run(1000)                                   # doctest: +SKIP
    """

    def __init__(self, system, forcefield, integrator, seed=0, skin=0.4, tail_correction=False):
        if not isinstance(system, System):
            raise InputError(f"system: expected a beadsim System, got {type(system).__name__}")
        if not isinstance(forcefield, ForceField):
            raise InputError(f"forcefield: expected a beadsim ForceField, got {type(forcefield).__name__}")
        if not isinstance(integrator, Integrator):
            raise InputError(f"integrator: expected a beadsim Integrator, got {type(integrator).__name__}")
        self.system = system
        self.forcefield = forcefield
        self.integrator = integrator
        self.seed = int(seed)
        self.noise_seed = self.seed % 2 ** 64
        self.compiled = forcefield.compile(system)
        self.tail_energy, self.tail_pressure = _tail_terms(system, forcefield, tail_correction)
        self.box_lengths = system.box.kernel_lengths()
        self.neighbors = NeighborList(system.types, self.compiled.cutoff, positive(skin, "skin"),
                                      self.compiled.excl_start, self.compiled.excl, system.box.lengths)
        self.forces = np.zeros((system.n_beads, 3))
        self.raw_energies = np.zeros(4)
        self.info = np.zeros(2, dtype=np.int64)
        self.step_count = 0
        self.rebuilds = 0
        self.hybrid = None  # a HybridSampler attaches itself here (beadsim.engine.hybrid)
        self.neighbors.build(system.positions, self.box_lengths, system.box.periodic)
        self.compute_forces()

    @property
    def time(self):
        """Simulated time, tau."""
        return self.step_count * self.integrator.timestep

    def compute_forces(self):
        """Recompute forces and energies at the current positions (list kept as is).

        Raises
        ------
        MinimizationError
            If two interacting beads sit at exactly the same position: the force
            between them has no direction, so no minimiser can separate them.
        """
        try:
            total_forces(self.system.positions, self.box_lengths, self.system.box.periodic, self.neighbors.arrays,
                         self.compiled.arrays, self.forces, self.raw_energies, self.info)
        except ZeroDivisionError:  # the compiled kernel divides by r^2 (or r) of a pair or bond
            raise MinimizationError(_coincident_message(self.system)) from None

    def refresh_neighbors(self):
        """Rebuild the Verlet list and forces at the current positions."""
        self.neighbors.build(self.system.positions, self.box_lengths, self.system.box.periodic)
        self.compute_forces()

    def advance(self, n_steps):
        """Take ``n_steps`` integrator steps (no output); see :func:`beadsim.engine.loop.iterate`.

        With a hybrid sampler attached, rounds of Monte Carlo moves come between the steps.
        """
        n_steps = positive_int(n_steps, "n_steps", allow_zero=True)
        if self.hybrid is None:
            self.integrator.step(self, n_steps)
        else:
            self.hybrid.advance(n_steps)

    def run(self, n_steps, every=None, observers=()):
        """Run ``n_steps`` steps, passing a snapshot every ``every`` steps to each observer."""
        from .loop import run
        return run(self, n_steps, every=every, observers=observers)

    def minimize(self, force_tolerance=1.0, max_iterations=20000):
        """Remove overlaps by FIRE minimisation; see :func:`beadsim.engine.minimize.fire`."""
        from .minimize import fire
        return fire(self, force_tolerance=force_tolerance, max_iterations=max_iterations)

    def observables(self):
        """Energies (epsilon), kinetic temperature (epsilon/k_B) and, in a periodic box, pressure.

        The kinetic temperature counts 3 n degrees of freedom (Langevin dynamics
        does not conserve momentum). The pressure is the virial route,

            p = n kT / V + W / (3 V)  (+ the tail correction if enabled),

        with W the virial sum of r_ij . f_ij over pairs and bonds (and bending
        terms). kT is the thermostat temperature for thermostatted schemes
        (baoab, brownian) and the kinetic temperature for the rest (verlet):
        configurations are sampled at the thermostat temperature, whereas the
        kinetic temperature of a discretised scheme is off by O(dt^2). For BAOAB
        (Leimkuhler and Matthews, Appl. Math. Res. Express 2013, 34) a harmonic
        mode of angular frequency omega has exact configurations but, at the end
        of a step, kinetic temperature kT (1 - (omega dt)^2 / 4), derived in
        ``tests/unit/engine/test_pressure.py``; Brownian dynamics has no velocities.
        With ``tail_correction`` the pair energy (and so the potential and total
        energies) includes n u_tail and the pressure p_tail.

        Returns
        -------
        dict of float
            ``pair_energy``, ``bond_energy``, ``bending_energy``, ``potential_energy``,
            ``kinetic_energy``, ``total_energy`` (epsilon), ``kinetic_temperature``
            (epsilon/k_B), ``virial`` (W, epsilon, without tail correction) and, in a
            periodic box, ``pressure`` (epsilon/sigma^3).
        """
        s = self.system
        e_pair, e_bond, e_bend, virial = (float(x) for x in self.raw_energies)
        e_pair += s.n_beads * self.tail_energy
        kinetic = s.kinetic_energy()
        kinetic_temperature = 2.0 * kinetic / (3.0 * s.n_beads)
        potential = e_pair + e_bond + e_bend
        out = {
            "pair_energy": e_pair,
            "bond_energy": e_bond,
            "bending_energy": e_bend,
            "potential_energy": potential,
            "kinetic_energy": kinetic,
            "total_energy": potential + kinetic,
            "kinetic_temperature": kinetic_temperature,
            "virial": virial,
        }
        if s.box.periodic:
            kT = self.integrator.temperature if self.integrator.thermostatted else kinetic_temperature
            out["pressure"] = (s.n_beads * kT + virial / 3.0) / s.box.volume + self.tail_pressure
        return out

    def state_arrays(self):
        """Everything needed for an exact restart, as plain arrays (for checkpoints)."""
        arrays = {
            "positions": self.system.positions.copy(),
            "velocities": self.system.velocities.copy(),
            "list_reference": self.neighbors.ref.copy(),
            "step_count": np.array(self.step_count, dtype=np.int64),
            "seed": np.array(self.noise_seed, dtype=np.uint64),
        }
        if self.hybrid is not None:
            arrays.update(self.hybrid.state_arrays())
        return arrays

    def restore(self, arrays):
        """Restore a state written by :meth:`state_arrays`, bit for bit.

        The Verlet list is rebuilt from the positions of its last build, so the
        pair order, and with it every rounding, is what it was.
        """
        n = self.system.n_beads
        for key, shape in (("positions", (n, 3)), ("velocities", (n, 3)), ("list_reference", (n, 3))):
            if key not in arrays or np.shape(arrays[key]) != shape:
                raise InputError(f"checkpoint: '{key}' missing or not shaped {shape}")
        self.system.positions[:] = arrays["positions"]
        self.system.velocities[:] = arrays["velocities"]
        self.step_count = int(arrays["step_count"])
        self.noise_seed = int(arrays["seed"])
        ref = np.ascontiguousarray(arrays["list_reference"], dtype=np.float64)
        self.neighbors.build(ref, self.box_lengths, self.system.box.periodic)
        self.compute_forces()
        if self.hybrid is not None:
            self.hybrid.restore(arrays)


def _tail_terms(system, forcefield, enabled):
    """Tail corrections (energy per bead, epsilon; pressure, epsilon/sigma^3), or zeros when not ``enabled``."""
    if not isinstance(enabled, (bool, np.bool_)):
        raise InputError(f"tail_correction: expected True or False, got {enabled!r}")
    if not enabled:
        return 0.0, 0.0
    pair = forcefield.pair
    if not system.box.periodic:
        raise InputError("tail_correction: needs a periodic box (the correction assumes a uniform fluid beyond "
                         "the cutoff); an open box has no density")
    if type(pair) is not LennardJones or pair.shift:
        raise InputError(f"tail_correction: is for one Lennard-Jones potential truncated without shift between "
                         f"all bead types, got {pair!r}; use LennardJones(..., shift=False) or leave it off")
    return pair.tail_correction(system.n_beads / system.box.volume)


def _coincident_message(system):
    """Error text naming two beads at the same (wrapped) position, if any are found."""
    x = system.positions
    if system.box.periodic:
        x = x - system.box.lengths * np.floor(x / system.box.lengths)
    _, group, counts = np.unique(x, axis=0, return_inverse=True, return_counts=True)
    group = group.ravel()
    shared = np.flatnonzero(counts[group] > 1)
    who = "two beads"
    if shared.size:
        i, j = np.flatnonzero(group == group[shared[0]])[:2]
        who = f"beads {i} and {j}"
    return (f"positions: {who} sit at exactly the same place, so the force between them has no direction "
            "and minimisation cannot separate them; move one of them, or build the start structure with "
            "a larger min_distance")
