"""beadsim: coarse-grained bead-spring polymer chains under Langevin dynamics.

The small public API::

    import beadsim as bs
    system = bs.build_chains(64, seed=1)                       # one chain, open box
    ff = bs.ForceField(pair=bs.LennardJones(cutoff=2.5), bond=bs.FENE())
    sim = bs.Simulation(system, ff, bs.BAOABLangevin(timestep=0.005, temperature=3.0, friction=0.5), seed=1)
    sim.minimize()
    sim.run(10_000)
    sim.system.positions, sim.observables()
"""

from .engine.integrators import INTEGRATORS, BAOABLangevin, Brownian, Integrator, VelocityVerlet, make_integrator
from .engine.loop import Snapshot, iterate
from .engine.simulation import Simulation
from .errors import AnalysisError, BeadsimError, InputError, InstabilityError, MinimizationError
from .model.build import build_chains, maxwell_boltzmann_velocities
from .model.potentials import (BOND_POTENTIALS, FENE, PAIR_POTENTIALS, WCA, Bending, CosineSquared, ForceField,
                               HarmonicBond, LennardJones, NoPair, TabulatedBond, TabulatedPair)
from .model.system import Box, System
from .model.tables import Table

__version__ = "0.1.0"

__all__ = [
    "AnalysisError", "BAOABLangevin", "BOND_POTENTIALS", "Bending", "BeadsimError", "Box", "Brownian",
    "CosineSquared", "FENE", "ForceField", "HarmonicBond", "INTEGRATORS", "InputError", "InstabilityError",
    "Integrator", "LennardJones", "MinimizationError", "NoPair", "PAIR_POTENTIALS", "Simulation", "Snapshot",
    "System", "Table", "TabulatedBond", "TabulatedPair", "VelocityVerlet", "WCA", "build_chains", "iterate",
    "make_integrator", "maxwell_boltzmann_velocities",
]
