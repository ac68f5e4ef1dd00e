"""Thread count changes speed only: the same run on one and on two threads ends in the same state, bit for bit.

The kernels split beads into fixed blocks and sum in block order (beadsim.kernels.chunks), and the
half list's force loop runs in conflict-free phases, so no result may depend on the thread count.
This is a property of our own design, checked exactly (no tolerance).
"""

import numba
import numpy as np
import pytest

import beadsim as bs
from beadsim.engine.threads import PARALLEL_MIN_BEADS, set_threads
from beadsim.kernels.chunks import N_CHUNKS

pytestmark = pytest.mark.skipif(numba.config.NUMBA_NUM_THREADS < 2, reason="numba was started with one thread")


def _final_state(threads, make_simulation, steps):
    """Positions, velocities, energies, list rebuilds and force-loop blocks after ``steps`` on ``threads``."""
    previous = set_threads(threads)
    try:
        sim = make_simulation()
        sim.advance(steps)
        return (sim.system.positions.copy(), sim.system.velocities.copy(), sim.raw_energies.copy(), sim.rebuilds,
                int(sim.neighbors.arrays[9][0]))
    finally:
        set_threads(previous)


def _assert_same_on_one_and_two_threads(make_simulation, steps, min_blocks):
    one, two = _final_state(1, make_simulation, steps), _final_state(2, make_simulation, steps)
    assert one[4] == two[4] >= min_blocks  # the force loop ran in several blocks
    assert one[3] == two[3] > 0  # the same list rebuilds happened
    for a, b in zip(one[:3], two[:3]):
        assert np.array_equal(a, b)


def test_one_and_two_threads_end_in_the_same_state():
    # large enough to run threaded, with enough cell layers (LJ 2.5 at density 0.85) for several
    # force-loop blocks, and over 2,000 bonds so the bond groups run in parallel too
    n_beads = max(PARALLEL_MIN_BEADS, 4 * N_CHUNKS, 4000)

    def melt():
        system = bs.build_chains([50] * (n_beads // 50), density=0.85, seed=5)
        bs.Simulation(system, bs.ForceField(bs.WCA(), bs.FENE()), bs.BAOABLangevin(0.005), seed=5).minimize()
        return bs.Simulation(system, bs.ForceField(bs.LennardJones(cutoff=2.5), bs.FENE()),
                             bs.BAOABLangevin(0.005, temperature=1.0), seed=5)

    _assert_same_on_one_and_two_threads(melt, 200, min_blocks=4)


def test_open_box_chain_same_state_on_one_and_two_threads():
    """An open-box chain's list has z-layer blocks too; the state must not depend on the thread count."""
    n_beads = max(PARALLEL_MIN_BEADS, 2000)

    def chain():
        return bs.Simulation(bs.build_chains(n_beads, seed=6), bs.ForceField(bs.LennardJones(cutoff=2.5), bs.FENE()),
                             bs.BAOABLangevin(0.005, temperature=1.5), seed=6)

    _assert_same_on_one_and_two_threads(chain, 300, min_blocks=4)
