"""Fixtures for the analysis tests: sampled Gaussian chains and small mdtraj trajectories."""

import mdtraj
import numpy as np
import pytest


def _gaussian_chains(rng, n_samples, n_beads, bond_rms=1.0):
    """Ideal chains: bond vectors with independent normal components of variance bond_rms^2 / 3."""
    steps = rng.normal(scale=bond_rms / np.sqrt(3.0), size=(n_samples, n_beads - 1, 3))
    return np.concatenate([np.zeros((n_samples, 1, 3)), np.cumsum(steps, axis=1)], axis=1)


@pytest.fixture
def gaussian_chains():
    """Factory ``(seed, n_samples, n_beads, bond_rms=1) -> (n_samples, n_beads, 3)`` of ideal chains."""
    return lambda seed, n_samples, n_beads, bond_rms=1.0: _gaussian_chains(
        np.random.default_rng(seed), n_samples, n_beads, bond_rms)


def _chain_topology(chain_lengths):
    top = mdtraj.Topology()
    for n in chain_lengths:
        chain = top.add_chain()
        previous = None
        for _ in range(n):
            atom = top.add_atom("B", mdtraj.element.carbon, top.add_residue("MON", chain))
            if previous is not None:
                top.add_bond(previous, atom)
            previous = atom
    return top


@pytest.fixture
def chain_topology():
    """Factory ``(chain_lengths) -> mdtraj.Topology`` of linear chains, beads numbered chain after chain."""
    return _chain_topology


@pytest.fixture
def periodic_walks():
    """Factory ``(seed, n_frames, chain_lengths, box) -> (unwrapped positions, trajectory of wrapped positions)``.

    Each chain is a Gaussian walk (bond rms 0.3 nm) whose shape and position drift slowly
    from frame to frame, so chains cross the box faces; the trajectory stores the
    positions wrapped into the box, with times 0, 1, 2, ...
    """
    def make(seed, n_frames, chain_lengths, box):
        rng = np.random.default_rng(seed)
        n_beads = sum(chain_lengths)
        bonds = rng.normal(scale=0.3 / np.sqrt(3.0), size=(n_beads, 3))
        drift = np.cumsum(rng.normal(scale=0.05, size=(n_frames, len(chain_lengths), 3)), axis=0)
        x = np.empty((n_frames, n_beads, 3))
        start = 0
        for c, n in enumerate(chain_lengths):
            wiggle = 0.02 * np.cumsum(rng.normal(size=(n_frames, n, 3)), axis=0)
            walk = np.cumsum(bonds[start:start + n], axis=0) + wiggle
            x[:, start:start + n] = walk + drift[:, c, None, :] + rng.uniform(0, box, 3)
            start += n
        traj = mdtraj.Trajectory((x % box).astype(np.float32), _chain_topology(chain_lengths),
                                 time=np.arange(n_frames, dtype=np.float64),
                                 unitcell_lengths=np.full((n_frames, 3), box),
                                 unitcell_angles=np.full((n_frames, 3), 90.0))
        return x, traj
    return make
