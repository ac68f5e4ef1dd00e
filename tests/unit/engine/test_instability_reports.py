"""What a run says when its dynamics breaks: the step, the term and the beads, exactly.

Each case is a two-bead motion solved by hand: velocity Verlet with no force on the beads moves each by
dt v per step (x' = x + dt v + dt^2 F / 2m with F = 0), so the step at which they meet, or leave a
table's range, is known in advance. Distances are multiples of 0.25 and exact in binary floating point.
Mutation testing (analysis/mutation_testing.md) found these paths untested by the unit suite: the step
count an instability reports and which term and index the message names.
"""

import numpy as np
import pytest

import beadsim as bs
from beadsim.model.tables import Table


def _pair(distance, speed, chain_lengths, ff, dt=0.5):
    """Two beads on the x axis approaching (speed > 0) or parting (speed < 0), each at ``speed`` sigma/tau."""
    positions = np.zeros((2, 3))
    positions[1, 0] = distance
    sim = bs.Simulation(bs.System(positions, list(chain_lengths)), ff, bs.VelocityVerlet(timestep=dt), seed=1)
    sim.system.velocities[:] = 0.0
    sim.system.velocities[0, 0] = speed
    sim.system.velocities[1, 0] = -speed
    return sim


def _flat_table(r_first, r_last):
    r = np.linspace(r_first, r_last, 8)
    return Table(r, np.zeros_like(r), np.zeros_like(r))


def test_beads_meeting_report_the_step_they_met():
    """6 sigma apart, closing at 2 x 1 sigma per step: 4 and 2 sigma apart after steps 1 and 2 (beyond the WCA
    cutoff, so no force), one point after step 3."""
    sim = _pair(6.0, 2.0, (1, 1), bs.ForceField(bs.WCA()))
    with pytest.raises(bs.InstabilityError, match=r"same position at step 3 \(pair term\).*lower the timestep") as err:
        sim.run(10)
    assert err.value.step == 3 == sim.step_count


def test_a_pair_leaving_its_table_names_a_bead_and_the_step():
    """Flat table on [0.9, 2.0] sigma, beads closing at 2 x 0.5 sigma per step from 3.5 sigma: 2.5 (beyond it)
    after step 1, 1.5 (inside) after step 2, 0.5 (below its grid) after step 3."""
    sim = _pair(3.5, 1.0, (1, 1), bs.ForceField(bs.TabulatedPair(_flat_table(0.9, 2.0))))
    with pytest.raises(bs.InstabilityError,
                       match=r"^a pair at bead [01] left the range of its tabulated potential at step 3; extend"):
        sim.run(10)
    assert sim.step_count == 3


def test_a_bond_leaving_its_table_names_the_bond_and_the_step():
    """A bonded dimer with a flat bond table on [0.5, 1.6] sigma, parting at 2 x 0.25 sigma per step:
    1.5 sigma after step 1, 2.0 after step 2 (beyond the table)."""
    ff = bs.ForceField(bs.NoPair(), bs.TabulatedBond(_flat_table(0.5, 1.6)))
    sim = _pair(1.0, -0.5, (2,), ff)
    with pytest.raises(bs.InstabilityError, match=r"^bond 0 left the range of its tabulated potential at step 2;"):
        sim.run(10)
    assert sim.step_count == 2
