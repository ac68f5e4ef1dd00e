"""Inter-molecular energy of two rigid molecules and ball averages of the Mayer function.

Both molecules are given in their own frame, centred on their centre of mass
(positions float64 (n, 3), sigma; bead types int64 (n,)). Molecule B is placed
by a rotation ``g`` about its centre followed by a shift ``d`` of its centre,
``b -> g b + d``, while A stays put; the inter-molecular energy is

    U_12 = sum_{a in A} sum_{b in B} u_{t_a t_b}(|g b + d - a|),

with the pair potentials of :mod:`beadsim.kernels.forces` (no periodic images;
a pair at or beyond its cutoff adds zero). A pair at zero distance, or a table
pair closer than its first tabulated distance, counts as a full overlap:
U_12 = +inf, so that the Mayer function ``f = 1 - exp(-U_12 / kT)`` is 1.

Pruning: with ``reach_a = max |a|`` and ``reach_b = max |b|``, only beads of A
within ``reach_b + r_cut`` of B's centre and beads of B within
``reach_a + r_cut`` of A's centre can interact, so only those enter the double
loop (placements far apart cost O(n_a + n_b), not O(n_a n_b)).

Random placements (:func:`mayer_ball_average`): sample ``m`` of a call
reads the counter-based stream (:mod:`beadsim.kernels.random`) at counter
``c = first + m``: the rotation is :func:`beadsim.kernels.pivot.random_orthogonal`
of move ``c`` (uniform positions ``8 c + 1 .. 8 c + 5``) times its determinant,
which maps the Haar measure of O(3) = SO(3) x {I, -I} onto that of SO(3), so B
is rotated, never mirrored; uniform position ``8 c`` places the radius in its
stratum, ``8 c + 6`` and ``8 c + 7`` give the direction of the shift.

Each kernel has a plain-NumPy twin named ``*_reference`` that the tests compare
against; the twins evaluate every pair (no pruning) through the potentials'
own NumPy ``energy_force`` and are meant for small inputs.
"""

import math

import numpy as np
from numba import njit

from .forces import PAIR_NONE, PAIR_TABLE, pair_energy_force
from .pivot import UNIFORMS_PER_MOVE, random_orthogonal
from .random import uniform_open


@njit(cache=True)
def centred_reach(pos):
    """Largest distance of a bead from the origin, sigma (0 for no beads)."""
    reach2 = 0.0
    for i in range(pos.shape[0]):
        r2 = pos[i, 0] * pos[i, 0] + pos[i, 1] * pos[i, 1] + pos[i, 2] * pos[i, 2]
        reach2 = max(reach2, r2)
    return math.sqrt(reach2)


@njit(cache=True)
def _placed_energy(pos_a, types_a, placed_b, types_b, dx, dy, dz, reach_a, reach_b, kinds, params, tables,
                   cutoff, near_a, near_b):
    """U_12 with B already at ``placed_b`` (its centre at (dx, dy, dz)); ``near_a``, ``near_b`` are scratch."""
    reach_a2 = (reach_b + cutoff) ** 2
    n_near_a = 0
    for i in range(pos_a.shape[0]):
        ex = pos_a[i, 0] - dx
        ey = pos_a[i, 1] - dy
        ez = pos_a[i, 2] - dz
        if ex * ex + ey * ey + ez * ez <= reach_a2:
            near_a[n_near_a] = i
            n_near_a += 1
    if n_near_a == 0:
        return 0.0
    reach_b2 = (reach_a + cutoff) ** 2
    n_near_b = 0
    for j in range(placed_b.shape[0]):
        if placed_b[j, 0] ** 2 + placed_b[j, 1] ** 2 + placed_b[j, 2] ** 2 <= reach_b2:
            near_b[n_near_b] = j
            n_near_b += 1
    cutoff2 = cutoff * cutoff
    energy = 0.0
    for m in range(n_near_a):
        i = near_a[m]
        ti = types_a[i]
        xi = pos_a[i, 0]
        yi = pos_a[i, 1]
        zi = pos_a[i, 2]
        for k in range(n_near_b):
            j = near_b[k]
            ex = placed_b[j, 0] - xi
            ey = placed_b[j, 1] - yi
            ez = placed_b[j, 2] - zi
            r2 = ex * ex + ey * ey + ez * ez
            if r2 >= cutoff2:
                continue
            tj = types_b[j]
            kind = kinds[ti, tj]
            if kind == PAIR_NONE:
                continue
            if r2 == 0.0:
                return math.inf
            u, _, inside = pair_energy_force(kind, params[ti, tj], r2, tables)
            if not inside:
                return math.inf
            energy += u
    return energy


@njit(cache=True, inline="always")
def _place(pos_b, g, dx, dy, dz, placed_b):
    """``placed_b = g pos_b + d`` row by row."""
    for j in range(pos_b.shape[0]):
        x = pos_b[j, 0]
        y = pos_b[j, 1]
        z = pos_b[j, 2]
        placed_b[j, 0] = g[0, 0] * x + g[0, 1] * y + g[0, 2] * z + dx
        placed_b[j, 1] = g[1, 0] * x + g[1, 1] * y + g[1, 2] * z + dy
        placed_b[j, 2] = g[2, 0] * x + g[2, 1] * y + g[2, 2] * z + dz


@njit(cache=True)
def intermolecular_energies(pos_a, types_a, pos_b, types_b, rotation, shifts, kinds, params, tables, cutoff):
    """U_12 of B rotated by ``rotation`` and shifted by each row of ``shifts``.

    Parameters
    ----------
    pos_a : float64 (n_a, 3)
        Molecule A about its centre of mass, sigma.
    types_a : int64 (n_a,)
    pos_b : float64 (n_b, 3)
        Molecule B about its centre of mass, sigma.
    types_b : int64 (n_b,)
    rotation : float64 (3, 3)
        Orthogonal matrix applied to B about its centre.
    shifts : float64 (n_shifts, 3)
        Positions of B's centre relative to A's, sigma.
    kinds : int64 (n_types, n_types)
    params : float64 (n_types, n_types, N_PAIR_PARAMS)
    tables : float64 (n_tables, n_points, 2)
        Pair kinds, parameter rows and tables as in :mod:`beadsim.kernels.forces`.
    cutoff : float
        Largest pair cutoff, sigma.

    Returns
    -------
    float64 (n_shifts,)
        U_12, epsilon; +inf for an overlap (see the module docstring).
    """
    reach_a = centred_reach(pos_a)
    reach_b = centred_reach(pos_b)
    placed = np.empty_like(pos_b)
    near_a = np.empty(pos_a.shape[0], dtype=np.int64)
    near_b = np.empty(pos_b.shape[0], dtype=np.int64)
    out = np.empty(shifts.shape[0])
    for s in range(shifts.shape[0]):
        dx = shifts[s, 0]
        dy = shifts[s, 1]
        dz = shifts[s, 2]
        _place(pos_b, rotation, dx, dy, dz, placed)
        out[s] = _placed_energy(pos_a, types_a, placed, types_b, dx, dy, dz, reach_a, reach_b, kinds, params,
                                tables, cutoff, near_a, near_b)
    return out


@njit(cache=True, inline="always")
def _ball_placement(seed, counter, stratum, n_strata, radius, g):
    """Rotation (into ``g``) and shift of one placement; returns the shift (dx, dy, dz).

    The shift's radius is ``radius * ((stratum + u) / n_strata)^(1/3)``, u uniform
    in (0, 1): uniform in volume within the spherical shell of the stratum.
    """
    random_orthogonal(seed, counter, g)
    det = (g[0, 0] * (g[1, 1] * g[2, 2] - g[1, 2] * g[2, 1]) - g[0, 1] * (g[1, 0] * g[2, 2] - g[1, 2] * g[2, 0])
           + g[0, 2] * (g[1, 0] * g[2, 1] - g[1, 1] * g[2, 0]))
    if det < 0.0:
        for r in range(3):
            for s in range(3):
                g[r, s] = -g[r, s]
    base = UNIFORMS_PER_MOVE * counter
    r = radius * ((stratum + uniform_open(seed, base)) / n_strata) ** (1.0 / 3.0)
    cos_t = 2.0 * uniform_open(seed, base + 6) - 1.0
    sin_t = math.sqrt(max(0.0, 1.0 - cos_t * cos_t))
    phi = 2.0 * math.pi * uniform_open(seed, base + 7)
    return r * sin_t * math.cos(phi), r * sin_t * math.sin(phi), r * cos_t


@njit(cache=True)
def ball_placements(seed, first, n_samples, radius):
    """The placements :func:`mayer_ball_average` visits, for tests and inspection.

    Parameters
    ----------
    seed : uint64
        Stream seed.
    first : int
        Counter of the first sample.
    n_samples : int
        Number of placements (also the number of radial strata).
    radius : float
        Ball radius, sigma.

    Returns
    -------
    rotations : float64 (n_samples, 3, 3)
        Proper rotations, uniform (Haar) on SO(3).
    shifts : float64 (n_samples, 3)
        Shifts, sigma; shift ``m`` lies in the shell of stratum ``m``.
    """
    rotations = np.empty((n_samples, 3, 3))
    shifts = np.empty((n_samples, 3))
    g = np.empty((3, 3))
    for m in range(n_samples):
        dx, dy, dz = _ball_placement(seed, first + m, m, n_samples, radius, g)
        rotations[m] = g
        shifts[m, 0] = dx
        shifts[m, 1] = dy
        shifts[m, 2] = dz
    return rotations, shifts


@njit(cache=True)
def mayer_ball_average(pos_a, types_a, pos_b, types_b, radius, n_samples, seed, first, kinds, params, tables,
                       cutoff, beta):
    """Average of the Mayer function ``1 - exp(-U_12 / kT)`` over random placements of B in a ball.

    Placement ``m`` (``m = 0 .. n_samples - 1``) rotates B uniformly at random
    and puts its centre uniformly (in volume) in the ``m``-th of ``n_samples``
    spherical shells of equal volume filling the ball of ``radius`` about A's
    centre, in a uniformly random direction (see :func:`ball_placements`). The
    shells have equal volume, so the plain mean over placements is an
    unbiased estimate of the ball average of f (stratified sampling in the
    volume coordinate).

    Parameters
    ----------
    pos_a, types_a, pos_b, types_b, kinds, params, tables, cutoff
        As for :func:`intermolecular_energies`.
    radius : float
        Ball radius, sigma; f must vanish beyond it
        (``reach_a + reach_b + cutoff`` guarantees that).
    n_samples : int
        Number of placements, >= 1.
    seed : uint64
        Stream seed.
    first : int
        Counter of the first placement (calls with disjoint counter ranges use
        independent random numbers).
    beta : float
        1 / kT, 1/epsilon.

    Returns
    -------
    float
        Mean of f over the placements (dimensionless, <= 1).
    """
    reach_a = centred_reach(pos_a)
    reach_b = centred_reach(pos_b)
    placed = np.empty_like(pos_b)
    near_a = np.empty(pos_a.shape[0], dtype=np.int64)
    near_b = np.empty(pos_b.shape[0], dtype=np.int64)
    g = np.empty((3, 3))
    total = 0.0
    for m in range(n_samples):
        dx, dy, dz = _ball_placement(seed, first + m, m, n_samples, radius, g)
        _place(pos_b, g, dx, dy, dz, placed)
        u = _placed_energy(pos_a, types_a, placed, types_b, dx, dy, dz, reach_a, reach_b, kinds, params, tables,
                           cutoff, near_a, near_b)
        total += -math.expm1(-beta * u)
    return total / n_samples


def intermolecular_energies_reference(pos_a, types_a, pos_b, types_b, rotation, shifts, pair_table):
    """NumPy twin of :func:`intermolecular_energies`, every pair evaluated.

    ``pair_table[ti][tj]`` is the pair potential object of the type pair (as
    :meth:`beadsim.model.potentials.ForceField.pair_table` returns), whose
    ``energy_force(r2)`` gives U; the other arguments and the result are as
    for the kernel (overlaps give +inf).
    """
    placed = pos_b @ rotation.T
    out = np.empty(len(shifts))
    for s, d in enumerate(shifts):
        diff = placed[None, :, :] + d - pos_a[:, None, :]
        r2 = np.einsum("abk,abk->ab", diff, diff)
        energy = 0.0
        for ti in np.unique(types_a):
            for tj in np.unique(types_b):
                pot = pair_table[ti][tj]
                if pot.kind == PAIR_NONE:
                    continue
                block = r2[np.ix_(types_a == ti, types_b == tj)]
                block = block[block < pot.cutoff ** 2]
                if np.any(block == 0.0) or (pot.kind == PAIR_TABLE and np.any(block < pot.table.r_first ** 2)):
                    energy = np.inf
                    continue
                energy += float(pot.energy_force(block)[0].sum())
        out[s] = energy
    return out


def mayer_ball_average_reference(pos_a, types_a, pos_b, types_b, radius, n_samples, seed, first, pair_table, beta):
    """NumPy twin of :func:`mayer_ball_average` over the placements of :func:`ball_placements`."""
    rotations, shifts = ball_placements(seed, first, n_samples, radius)
    u = np.array([intermolecular_energies_reference(pos_a, types_a, pos_b, types_b, g, d[None, :], pair_table)[0]
                  for g, d in zip(rotations, shifts)])
    return float(np.mean(-np.expm1(-beta * u)))
