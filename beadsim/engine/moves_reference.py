"""Plain-NumPy twin of the Monte Carlo chain moves in :mod:`beadsim.kernels.pivot`.

The twin draws the same random numbers, builds the trial positions with
:class:`scipy.spatial.transform.Rotation` (an independent implementation of the
quaternion and axis-angle maps) and gets every energy change by recomputing the
whole energy: with :func:`beadsim.engine.reference.reference_forces`, or, for
the factorized rule, from every pair found by :class:`scipy.spatial.cKDTree`
(no cells, no tree, no early stop). It is the oracle of the tests, never a
production path.
"""

from itertools import pairwise

import numpy as np
from scipy.spatial.transform import Rotation

from scipy.spatial import cKDTree

from ..kernels import pivot as KP
from ..kernels.random import normal_reference, uniform_open
from ..model.potentials import NoPair
from .reference import reference_forces


def reference_energy(system, forcefield):
    """Total potential energy (pair + bond + bending), epsilon, recomputed from scratch."""
    return float(np.sum(reference_forces(system, forcefield)[1][:3]))


def reference_split_energy(system, forcefield, cap, r_hard):
    """Overlap and rest energy of ``system`` (open box), epsilon, from every pair in full.

    A pair closer than ``r_hard`` (sigma) with energy ``u > cap`` (epsilon) contributes ``u - cap`` to
    the overlap energy and ``cap`` to the rest; any other pair ``u`` to the rest, which also holds the
    bond and bending energy (:mod:`beadsim.kernels.pivot`).
    """
    pos = system.positions
    n_types = int(system.types.max()) + 1
    table = forcefield.pair_table(n_types)
    cutoff = max(p.cutoff for row in table for p in row)
    overlap = rest = 0.0
    pairs = cKDTree(pos).query_pairs(cutoff, output_type="ndarray") if cutoff > 0 else np.zeros((0, 2), int)
    excl_start, excl = forcefield.exclusions(system)
    for a, b in pairs:
        pot = table[system.types[a]][system.types[b]]
        if isinstance(pot, NoPair) or b in excl[excl_start[a]:excl_start[a + 1]]:
            continue
        r2 = float(np.sum((pos[b] - pos[a]) ** 2))
        u = float(pot.energy_force(np.array([r2]))[0][0])
        if r2 < r_hard * r_hard and u > cap:
            overlap += u - cap
            rest += cap
        else:
            rest += u
    bonded = reference_forces(system, forcefield)[1][1:3]  # bond and bending energy
    return overlap, rest + float(np.sum(bonded))


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


def reference_moves(system, forcefield, kind, n_moves, first_move, seed, temperature, max_angle, split=None):
    """Attempt ``n_moves`` Metropolis moves on a copy of ``system``; twin of
    :func:`~beadsim.kernels.pivot.metropolis_moves`.

    ``split = (cap, r_hard)`` (epsilon, sigma) applies the factorized rule: accept when the move's
    uniform is below ``min(1, exp(-dO / kT)) min(1, exp(-dR / kT))`` (:func:`reference_split_energy`);
    None the plain rule on the full energy change.

    Returns
    -------
    positions : float64 (n, 3)
        Final positions, sigma.
    accepted : int
    energy_changes : float64 (n_moves,)
        dU of each trial, epsilon (full recomputation).
    """
    def energies():
        if split is None:
            return 0.0, reference_energy(state, forcefield)
        return reference_split_energy(state, forcefield, *split)

    state = system.copy()
    energy = energies()
    accepted = 0
    changes = np.zeros(n_moves)
    for k in range(n_moves):
        move = first_move + k
        trial, _, _ = reference_trial(state, kind, seed, move, max_angle)
        old = state.positions
        state.positions = trial
        new_energy = energies()
        d_overlap, d_rest = new_energy[0] - energy[0], new_energy[1] - energy[1]
        changes[k] = d_overlap + d_rest
        barrier = max(d_overlap, 0.0) + max(d_rest, 0.0)
        u = uniform_open(seed, KP.UNIFORMS_PER_MOVE * move + 6)
        if barrier <= 0.0 or u < np.exp(-barrier / temperature):
            energy = new_energy
            accepted += 1
        else:
            state.positions = old
    return state.positions, accepted, changes
