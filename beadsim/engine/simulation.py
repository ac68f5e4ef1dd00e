"""A system, its force field and an integrator, ready to step."""

import numpy as np

from .._validate import positive, positive_int
from ..errors import InputError, MinimizationError
from ..kernels.forces import total_forces
from ..model.potentials import ForceField
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

    Examples
    --------
    >>> import beadsim as bs
    >>> system = bs.build_chains(32, seed=1)
    >>> sim = bs.Simulation(system, bs.ForceField(bs.WCA(), bs.FENE()), bs.BAOABLangevin(0.005), seed=1)
    >>> sim.minimize()                                  # doctest: +SKIP
    >>> sim.run(1000)                                   # doctest: +SKIP
    """

    def __init__(self, system, forcefield, integrator, seed=0, skin=0.4):
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
        does not conserve momentum). Pressure is (2 K + W) / (3 V) with W the
        virial sum of r_ij . f_ij (no tail correction).

        Returns
        -------
        dict of float
        """
        s = self.system
        e_pair, e_bond, e_bend, virial = (float(x) for x in self.raw_energies)
        kinetic = s.kinetic_energy()
        potential = e_pair + e_bond + e_bend
        out = {
            "pair_energy": e_pair,
            "bond_energy": e_bond,
            "bending_energy": e_bend,
            "potential_energy": potential,
            "kinetic_energy": kinetic,
            "total_energy": potential + kinetic,
            "kinetic_temperature": 2.0 * kinetic / (3.0 * s.n_beads),
            "virial": virial,
        }
        if s.box.periodic:
            out["pressure"] = (2.0 * kinetic + virial) / (3.0 * s.box.volume)
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
