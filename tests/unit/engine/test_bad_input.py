"""Impossible parameters stop with a beadsim exception whose message names the parameter and the fix.

Every user-caused error derives from ``bs.BeadsimError`` (see ``beadsim/errors.py``), so the command
line can map it to exit status 2; these tests pin the type and the key words of each message, not
its exact wording.
"""

import math

import numpy as np
import pytest

import beadsim as bs


def _two_beads(distance, chain_lengths=(1, 1), box=None):
    positions = np.zeros((2, 3))
    positions[1, 0] = distance
    return bs.System(positions, list(chain_lengths), box=bs.Box(box) if box is not None else bs.Box())


# --- integrator settings -------------------------------------------------------------------------

@pytest.mark.parametrize("integrator", [bs.BAOABLangevin, bs.Brownian])
@pytest.mark.parametrize("temperature", [-1.0, 0.0, math.nan])
def test_thermostat_rejects_non_positive_temperature(integrator, temperature):
    with pytest.raises(bs.InputError, match=r"temperature: must be a finite number > 0"):
        integrator(timestep=0.005, temperature=temperature, friction=1.0)


@pytest.mark.parametrize("integrator", [bs.BAOABLangevin, bs.Brownian])
@pytest.mark.parametrize("friction", [-0.5, 0.0])
def test_thermostat_rejects_non_positive_friction(integrator, friction):
    with pytest.raises(bs.InputError, match=r"friction: must be a finite number > 0"):
        integrator(timestep=0.005, temperature=1.0, friction=friction)


@pytest.mark.parametrize("integrator", [bs.BAOABLangevin, bs.VelocityVerlet, bs.Brownian])
@pytest.mark.parametrize("timestep", [0.0, -0.005, math.inf])
def test_every_integrator_rejects_non_positive_timestep(integrator, timestep):
    with pytest.raises(bs.InputError, match=r"timestep: must be a finite number > 0"):
        integrator(timestep=timestep)


def test_unknown_integrator_name_lists_the_choices():
    with pytest.raises(bs.InputError, match=r"unknown integrator 'nonsense'.*choose one of: baoab, verlet, brownian"):
        bs.make_integrator("nonsense")


def test_misspelt_integrator_name_suggests_the_closest():
    with pytest.raises(bs.InputError, match=r"did you mean 'baoab'"):
        bs.make_integrator("baoa")


# --- potentials and force field ------------------------------------------------------------------

@pytest.mark.parametrize("cutoff", [1.0, 2.0 ** (1.0 / 6.0) - 1e-6])
def test_lennard_jones_cutoff_below_potential_minimum(cutoff):
    """A cutoff inside the well would leave only part of the repulsion; the message points to WCA."""
    with pytest.raises(bs.InputError, match=r"lennard_jones cutoff: .* below the potential minimum 2\^\(1/6\) sigma.*WCA"):
        bs.LennardJones(cutoff=cutoff)


def test_fene_max_extension_not_above_initial_bond_length():
    """Chains grown with bond_length 0.97 cannot carry FENE bonds with R0 = 0.9: rejected at Simulation()."""
    system = bs.build_chains(10, bond_length=0.97, seed=3)
    with pytest.raises(bs.InputError, match=r"bond 0 .* 0\.9700 sigma long.*raise FENE max_extension \(R0\)"):
        bs.Simulation(system, bs.ForceField(bond=bs.FENE(max_extension=0.9)), bs.BAOABLangevin(), seed=3)


def test_fene_max_extension_equal_to_bond_length_is_rejected():
    """R0 must be strictly larger: at r = R0 the FENE energy is infinite."""
    system = _two_beads(1.2, chain_lengths=(2,))
    with pytest.raises(bs.InputError, match=r"max_extension \(R0\)"):
        bs.Simulation(system, bs.ForceField(bond=bs.FENE(max_extension=1.2)), bs.BAOABLangevin(), seed=1)


def test_cutoff_plus_skin_larger_than_half_the_box():
    """Minimum-image pairs need cutoff + skin <= L/2: LJ at 3 sigma + skin 0.4 does not fit a 5 sigma box."""
    system = bs.build_chains([1] * 20, box_lengths=[5.0, 5.0, 5.0], seed=4)
    with pytest.raises(bs.InputError, match=r"cutoff \+ skin = 3\.400 sigma exceeds half the smallest box edge.*larger box"):
        bs.Simulation(system, bs.ForceField(bs.LennardJones(cutoff=3.0)), bs.BAOABLangevin(), seed=4)


# --- state -----------------------------------------------------------------------------------------

def test_nan_in_positions_is_rejected_by_system():
    positions = np.zeros((3, 3))
    positions[1, 0] = 1.0
    positions[2, 1] = np.nan
    with pytest.raises(bs.InputError, match=r"positions: contains NaN or infinity \(first at index \(2, 1\)\)"):
        bs.System(positions, [3])


@pytest.mark.parametrize("box", [None, [6.0, 6.0, 6.0]], ids=["open", "periodic"])
def test_identical_bead_positions_cannot_be_minimised(box):
    """Two beads at one point: the pair force has no direction, so no minimiser can separate them."""
    system = _two_beads(0.0, box=box)
    with pytest.raises(bs.MinimizationError, match=r"beads 0 and 1 sit at exactly the same place.*min_distance"):
        sim = bs.Simulation(system, bs.ForceField(bs.WCA()), bs.BAOABLangevin(), seed=1)
        sim.minimize()


def test_overlap_too_deep_for_finite_forces_cannot_be_minimised():
    """At 1e-30 sigma the LJ r^-12 term overflows to infinity: FIRE stops and names the remedy."""
    system = _two_beads(1e-30)
    sim = bs.Simulation(system, bs.ForceField(bs.WCA()), bs.BAOABLangevin(), seed=1)
    with pytest.raises(bs.MinimizationError, match=r"non-finite forces.*larger min_distance"):
        sim.minimize()


def test_fene_bond_overstretched_during_run_names_step_and_advice():
    """dt = 0.5 tau is 50-100 times the usual bead-spring timestep (common practice 0.005-0.01): the first
    steps throw a bond past R0, and the run stops with the step, the bond and the remedy."""
    system = bs.build_chains(32, seed=2)
    sim = bs.Simulation(system, bs.ForceField(bs.WCA(), bs.FENE()), bs.BAOABLangevin(0.5, 1.0, 0.5), seed=2)
    sim.minimize()
    with pytest.raises(bs.InstabilityError, match=r"FENE bond \d+ .* at step \d+.*lower the timestep") as caught:
        sim.run(1000)
    err = caught.value
    assert isinstance(err.step, int) and 1 <= err.step <= 1000
    assert f"at step {err.step}" in str(err)
    assert err.step == sim.step_count
