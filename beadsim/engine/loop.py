"""The run loop as a generator of snapshots; outputs hook in as observers.

An observer is any object with ``append(snapshot)``; it may also have
``flush()`` and ``close()``, called at the end of :func:`run`.
"""

from dataclasses import dataclass

import numpy as np

from .._validate import positive_int


@dataclass
class Snapshot:
    """The state after a step.

    Attributes
    ----------
    step : int
    time : float
        tau.
    positions, velocities : float64 (n, 3)
        Views into the live state: copy them to keep them.
    observables : dict of float
        As :meth:`Simulation.observables`.
    """

    step: int
    time: float
    positions: np.ndarray
    velocities: np.ndarray
    observables: dict


def snapshot(sim):
    """Snapshot of the simulation's current state."""
    return Snapshot(sim.step_count, sim.time, sim.system.positions, sim.system.velocities, sim.observables())


def iterate(sim, n_steps, every):
    """Advance ``sim`` by ``n_steps`` steps, yielding a snapshot whenever the step count is a multiple of ``every``.

    Steps are counted from the simulation's current step, so resumed runs
    yield the same steps an uninterrupted run would.

    Parameters
    ----------
    sim : beadsim.engine.simulation.Simulation
    n_steps : int
    every : int or sequence of int
        Snapshot interval(s) in steps: with several, a snapshot comes at every
        multiple of any of them, and the compiled loop runs uninterrupted up to
        the next such step (never in strides of their greatest common divisor,
        which for intervals such as 597 and 2987 would be one step).
    """
    n_steps = positive_int(n_steps, "n_steps", allow_zero=True)
    intervals = [positive_int(e, "every") for e in np.atleast_1d(every).tolist()]
    end = sim.step_count + n_steps
    while sim.step_count < end:
        target = min(end, *((sim.step_count // e + 1) * e for e in intervals))
        sim.advance(target - sim.step_count)
        if any(sim.step_count % e == 0 for e in intervals):
            yield snapshot(sim)


def run(sim, n_steps, every=None, observers=()):
    """Drain :func:`iterate`, handing each snapshot to every observer; return the last snapshot."""
    every = every or max(int(n_steps), 1)
    try:
        for snap in iterate(sim, n_steps, every):
            for obs in observers:
                obs.append(snap)
    finally:
        for obs in observers:
            if hasattr(obs, "flush"):
                obs.flush()
    return snapshot(sim)
