"""Checks that the dynamics has not blown up, and where it did: the step, the bead, the term, advice.

The compiled step loop already stops at the exact step when a FENE bond
reaches its maximum extension, a distance leaves a tabulated potential's range
or an energy stops being finite. What it cannot see is a state that is broken
but still finite: a bead thrown metres away by an overlap, a force so large
that one step moves a bead by more than a bead diameter. :func:`diagnose`
checks for both between calls of the step loop; :func:`guarded` runs the loop
with these checks and, when one fails, replays the last stretch one step at a
time from the last state that passed, so the error names the first step at
which the state was broken.

Limits (common practice for bead-spring models in reduced units, where a
bead moves about 0.01 sigma per step): no bead may move, from its velocity
or from its force alone, by more than :data:`MAX_MOVE` sigma in one step.
"""

from dataclasses import dataclass

import numpy as np

from ..errors import InstabilityError
from ..kernels.integrate import BROWNIAN
from ..model.potentials import BondPotential, PairPotential
from .loop import iterate

#: Largest distance (sigma) a bead may move in one step, from its velocity or its force alone.
MAX_MOVE = 1.0

ADVICE = {
    "pair": "two beads came too close: lower the timestep (common practice: at most 0.01 tau with "
            "Lennard-Jones-type beads), minimise the start structure, or, with a tabulated pair potential, "
            "check the table for a hole (a range where U drops instead of rising at short distance)",
    "bond": "lower the timestep or the bond stiffness, or check a tabulated bond potential for a hole",
    "bending": "lower the timestep or the bending stiffness",
}


@dataclass
class Problem:
    """What is wrong with a state.

    Attributes
    ----------
    step : int
        Step count of the state.
    bead : int
        Index of the bead concerned (0-based, chain after chain).
    term : str
        ``"pair"``, ``"bond"`` or ``"bending"``: the force term dominating on that bead.
    what : str
        What was found.
    """

    step: int
    bead: int
    term: str
    what: str

    def message(self):
        """One paragraph: step, bead, term and advice."""
        return (f"the dynamics blew up at step {self.step}: {self.what} (bead {self.bead}, {self.term} term); "
                f"{ADVICE[self.term]}")


def _term_forces(sim, bead):
    """The force term with the largest force on ``bead``: ``"pair"``, ``"bond"`` or ``"bending"``.

    Pair and bond forces are recomputed in NumPy from the potentials' own
    ``energy_force`` (every bead within the cutoff counts, exclusions aside);
    bending is what remains of the total force.
    """
    s, ff = sim.system, sim.forcefield
    x = s.positions

    def force_from(potential, others):
        d = x[others] - x[bead]
        if s.box.periodic:
            d -= s.box.lengths * np.rint(d / s.box.lengths)
        r2 = np.einsum("ij,ij->i", d, d)
        near = r2 < potential.cutoff ** 2 if isinstance(potential, PairPotential) else np.ones(len(r2), bool)
        _, f_r = potential.energy_force(r2[near])
        return -(f_r[:, None] * d[near]).sum(axis=0)  # as in the kernels: f_r is the force over the distance

    forces = {"pair": np.zeros(3), "bond": np.zeros(3)}
    with np.errstate(all="ignore"):
        if isinstance(ff.pair, PairPotential) and ff.pair.cutoff > 0:
            forces["pair"] = force_from(ff.pair, np.delete(np.arange(s.n_beads), bead))
        if isinstance(ff.bond, BondPotential) and len(s.bonds):
            mine = s.bonds[(s.bonds == bead).any(axis=1)]
            forces["bond"] = force_from(ff.bond, np.where(mine[:, 0] == bead, mine[:, 1], mine[:, 0]))
        forces["bending"] = (sim.forces[bead] - forces["pair"] - forces["bond"] if ff.bending is not None
                             else np.zeros(3))
        sizes = {name: float(np.linalg.norm(f)) for name, f in forces.items()}
    broken = [name for name, size in sizes.items() if not np.isfinite(size)]
    return broken[0] if broken else max(sizes, key=sizes.get)


def non_finite_term(sim):
    """``(bead, term)`` of a state whose energy or forces are not finite; bead is -1 if none is found."""
    bad = ~np.isfinite(sim.forces).all(axis=1) | ~np.isfinite(sim.system.positions).all(axis=1)
    bead = int(np.argmax(bad)) if bad.any() else -1
    names = ("pair", "bond", "bending")
    broken = [name for name, e in zip(names, sim.raw_energies[:3]) if not np.isfinite(e)]
    if broken:
        return bead, broken[0]
    return bead, (_term_forces(sim, bead) if bead >= 0 else "pair")


def diagnose(sim):
    """Check the current state of ``sim``; return a :class:`Problem` or None.

    Checks, in order: positions, velocities, forces and energies are finite;
    no bead's velocity moves it by more than :data:`MAX_MOVE` sigma in one step
    (``|v| dt``); no bead's force alone does (``|F| dt^2 / m``, or
    ``|F| dt / (m gamma)`` for Brownian dynamics).
    """
    s, integ = sim.system, sim.integrator
    dt = integ.timestep
    with np.errstate(all="ignore"):
        v_move = np.sqrt(np.einsum("ij,ij->i", s.velocities, s.velocities)) * dt
        scale = dt / (s.masses * integ.friction) if integ.scheme == BROWNIAN else dt * dt / s.masses
        f_move = np.sqrt(np.einsum("ij,ij->i", sim.forces, sim.forces)) * scale
    finite = (np.isfinite(s.positions).all() and np.isfinite(v_move).all() and np.isfinite(f_move).all()
              and np.isfinite(sim.raw_energies).all())
    if not finite:
        bead, term = non_finite_term(sim)
        return Problem(sim.step_count, bead, term, "positions, forces or energies are no longer finite numbers")
    if v_move.max() > MAX_MOVE:
        bead = int(np.argmax(v_move))
        return Problem(sim.step_count, bead, _term_forces(sim, bead),
                       f"a bead moves {v_move[bead]:.3g} sigma per step (limit {MAX_MOVE})")
    if f_move.max() > MAX_MOVE:
        bead = int(np.argmax(f_move))
        return Problem(sim.step_count, bead, _term_forces(sim, bead),
                       f"the force on a bead, {np.sqrt(sim.forces[bead] @ sim.forces[bead]):.3g} epsilon/sigma, "
                       f"moves it {f_move[bead]:.3g} sigma in one step (limit {MAX_MOVE})")
    return None


def guarded(sim, n_steps, every):
    """:func:`beadsim.engine.loop.iterate` with :func:`diagnose` after every stretch of steps.

    Yields the same snapshots as ``iterate``; each yielded state has passed the
    checks, so an observer that writes checkpoints never stores a broken state.

    Raises
    ------
    beadsim.errors.InstabilityError
        With the first broken step (found by replaying the stretch one step at a
        time from the last state that passed), the bead, the term and advice.
    """
    good = sim.state_arrays()
    for snap in iterate(sim, n_steps, every):
        problem = diagnose(sim)
        if problem is not None:
            problem = _first_broken_step(sim, good, problem)
            raise InstabilityError(problem.message(), step=problem.step)
        good = sim.state_arrays()
        yield snap


def _first_broken_step(sim, good, found):
    """Replay from the state ``good`` one step at a time until :func:`diagnose` fails; that problem, else ``found``."""
    end = sim.step_count
    sim.restore(good)
    while sim.step_count < end:
        sim.advance(1)  # the step loop's own checks may stop here first, naming the exact step
        problem = diagnose(sim)
        if problem is not None:
            return problem
    return found
