"""Plain-NumPy twin of the Monte Carlo chain moves in :mod:`beadsim.kernels.pivot`.

The twin draws the same random numbers, builds the trial positions with
:class:`scipy.spatial.transform.Rotation` (an independent implementation of the
quaternion and axis-angle maps) and gets every energy change by recomputing the
whole energy with :func:`beadsim.engine.reference.reference_forces`. It is the
oracle of the tests, O(N^2) per move, never a production path.
"""

from itertools import pairwise

import numpy as np
from scipy.spatial.transform import Rotation

from ..kernels import pivot as KP
from ..kernels.random import normal_reference, uniform_open
from .reference import reference_forces


def reference_energy(system, forcefield):
    """Total potential energy (pair + bond + bending), epsilon, recomputed from scratch."""
    return float(np.sum(reference_forces(system, forcefield)[1][:3]))


def interior_beads(system):
    """Beads with a neighbour on both sides in their chain (the beads a move may pick), int64."""
    off = system.chain_offsets
    return np.concatenate([np.arange(a + 1, b - 1) for a, b in pairwise(off)]).astype(np.int64)


def reference_trial(system, kind, seed, move, max_angle):
    """Trial positions and moved range ``(lo, hi)`` of move ``move`` (twin of :func:`~beadsim.kernels.pivot.propose`)."""
    pos = system.positions
    off = system.chain_offsets
    cand = interior_beads(system)
    base = KP.UNIFORMS_PER_MOVE * move
    p = int(cand[min(int(uniform_open(seed, base) * len(cand)), len(cand) - 1)])
    c = int(np.searchsorted(off, p, side="right")) - 1
    a, b = int(off[c]), int(off[c + 1])
    trial = pos.copy()
    if kind == KP.PIVOT:
        q0, q1, q2, q3 = normal_reference(seed, 4 * move + 1, 4)
        g = Rotation.from_quat([q1, q2, q3, q0]).as_matrix()  # scipy: scalar last
        if uniform_open(seed, base + 1) < 0.5:
            g = -g
        lo, hi = (a, p) if p - a < b - 1 - p else (p + 1, b)
        trial[lo:hi] = pos[p] + (pos[lo:hi] - pos[p]) @ g.T
        return trial, lo, hi
    axis = pos[p + 1] - pos[p - 1]
    phi = max_angle * (2.0 * uniform_open(seed, base + 7) - 1.0)
    trial[p] = pos[p - 1] + Rotation.from_rotvec(phi * axis / np.linalg.norm(axis)).apply(pos[p] - pos[p - 1])
    return trial, p, p + 1


def reference_moves(system, forcefield, kind, n_moves, first_move, seed, temperature, max_angle):
    """Attempt ``n_moves`` Metropolis moves on a copy of ``system``; twin of
    :func:`~beadsim.kernels.pivot.metropolis_moves`.

    Returns
    -------
    positions : float64 (n, 3)
        Final positions, sigma.
    accepted : int
    energy_changes : float64 (n_moves,)
        dU of each trial, epsilon (full recomputation).
    """
    state = system.copy()
    energy = reference_energy(state, forcefield)
    accepted = 0
    changes = np.zeros(n_moves)
    for k in range(n_moves):
        move = first_move + k
        trial, _, _ = reference_trial(state, kind, seed, move, max_angle)
        old = state.positions
        state.positions = trial
        new_energy = reference_energy(state, forcefield)
        changes[k] = d_energy = new_energy - energy
        u = uniform_open(seed, KP.UNIFORMS_PER_MOVE * move + 6)
        if d_energy <= 0.0 or u < np.exp(-d_energy / temperature):
            energy = new_energy
            accepted += 1
        else:
            state.positions = old
    return state.positions, accepted, changes
