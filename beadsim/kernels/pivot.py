"""Monte Carlo chain moves (pivot and crankshaft) accepted by the Metropolis rule.

Moves
-----
* ``PIVOT`` (Lal, Mol. Phys. 17, 57, 1969; Madras and Sokal, J. Stat. Phys. 50,
  109, 1988, in the continuum): pick an interior bead ``p`` of a chain and apply
  a random orthogonal map ``g`` about it to the beads on its shorter side,
  ``r -> r_p + g (r - r_p)``. ``g`` is uniform (Haar) on O(3): a rotation from a
  unit quaternion drawn uniformly on the 3-sphere (normalised 4D Gaussian
  vector; Shoemake, Graphics Gems III, 1992), times -1 (a point reflection) with
  probability 1/2. The Haar measure is invariant under ``g -> g^-1``, so the
  proposal is symmetric.
* ``CRANKSHAFT``: rotate one interior bead ``i`` about the axis through beads
  ``i - 1`` and ``i + 1`` by an angle uniform in ``[-max_angle, max_angle]``
  (symmetric: the reverse move is the opposite angle).

Which side a pivot moves depends only on the chosen bead, so the choice keeps
the proposal symmetric; with it the Metropolis rule ``accept with probability
min(1, exp(-dU / kT))`` leaves the Boltzmann distribution of positions
invariant (Metropolis et al., J. Chem. Phys. 21, 1087, 1953).

Energy change
-------------
Only terms joining a moved bead to a fixed one change: the moved beads' pairs
with every fixed bead (found through hashed cells at least one pair cutoff
wide, kept up to date as moves are accepted, so a move costs O(moved beads)
and never O(N^2)), and the bonds and angles with members on both sides (for a
pivot, the bending angle at the pivot). Pairs inside the moved block keep
their distances under a rigid map and are not evaluated.

Random numbers
--------------
Move ``m`` (counted over the whole run) reads the counter-based stream
(:mod:`beadsim.kernels.random`) at uniform positions ``8 m .. 8 m + 7``:
0 bead, 1 reflection, 2..5 the quaternion (two Box-Muller pairs, pair indices
``4 m + 1`` and ``4 m + 2``), 6 the Metropolis test, 7 the crankshaft angle.
The state of the move sequence is therefore ``(seed, m)`` alone.
"""

import math

import numpy as np
from numba import njit

from .forces import BOND_FENE, BOND_HARMONIC, hermite_table, pair_energy_force
from .neighbors import _bucket, _is_excluded, cell_stencil
from .random import normal_pair, uniform_open

PIVOT, CRANKSHAFT = 0, 1
UNIFORMS_PER_MOVE = 8
_NO_CELLS = np.ones(3, dtype=np.int64)  # unused cell counts (open-box hashing ignores them)


@njit(cache=True)
def bucket_count(n):
    """Hash buckets for ``n`` beads: the smallest power of two >= 2 n."""
    b = 1
    while b < 2 * n:
        b *= 2
    return b


@njit(cache=True, inline="always")
def _bucket_of(x, y, z, width, n_buckets):
    return _bucket(math.floor(x / width), math.floor(y / width), math.floor(z / width),
                   _NO_CELLS, False, n_buckets)


@njit(cache=True)
def build_cells(pos, width, head, nxt, prv, bucket):
    """Fill hashed linked cells of edge ``width`` with every bead (open box).

    Parameters
    ----------
    pos : float64 (n, 3)
        Positions, sigma.
    width : float
        Cell edge, sigma (at least the largest pair cutoff).
    head : int64 (n_buckets,)
        Output: first bead of each bucket, -1 if empty (n_buckets a power of two).
    nxt, prv : int64 (n,)
        Output: doubly linked bucket lists (-1 ends).
    bucket : int64 (n,)
        Output: bucket of each bead.
    """
    head[:] = -1
    for i in range(pos.shape[0]):
        b = _bucket_of(pos[i, 0], pos[i, 1], pos[i, 2], width, head.shape[0])
        bucket[i] = b
        prv[i] = -1
        nxt[i] = head[b]
        if head[b] >= 0:
            prv[head[b]] = i
        head[b] = i


@njit(cache=True)
def _relink(i, b, head, nxt, prv, bucket):
    """Move bead ``i`` from its bucket to bucket ``b``."""
    old = bucket[i]
    if old == b:
        return
    if prv[i] >= 0:
        nxt[prv[i]] = nxt[i]
    else:
        head[old] = nxt[i]
    if nxt[i] >= 0:
        prv[nxt[i]] = prv[i]
    prv[i] = -1
    nxt[i] = head[b]
    if head[b] >= 0:
        prv[head[b]] = i
    head[b] = i
    bucket[i] = b


@njit(cache=True)
def _pair_energy_with_fixed(i, x, y, z, lo, hi, pos, types, kinds, params, tables, excl_start, excl,
                            width, head, nxt, near):
    """Pair energy of bead ``i`` placed at (x, y, z) with every bead outside ``[lo, hi)``.

    Returns ``(energy, ok)``; ``ok`` is False if a pair sits at zero distance or
    outside its table (an impossible state: the move is rejected).
    """
    n_buckets = head.shape[0]
    cx = math.floor(x / width)
    cy = math.floor(y / width)
    cz = math.floor(z / width)
    n_near = cell_stencil(cx, cy, cz, _NO_CELLS, False, n_buckets, near)
    has_excl = excl_start[i + 1] > excl_start[i]
    ti = types[i]
    energy = 0.0
    for m in range(n_near):
        j = head[near[m]]
        while j >= 0:
            if j < lo or j >= hi:
                kind = kinds[ti, types[j]]
                if kind != 0 and not (has_excl and _is_excluded(i, j, excl_start, excl)):
                    dx = pos[j, 0] - x
                    dy = pos[j, 1] - y
                    dz = pos[j, 2] - z
                    r2 = dx * dx + dy * dy + dz * dz
                    if r2 == 0.0:
                        return 0.0, False
                    u, _, inside = pair_energy_force(kind, params[ti, types[j]], r2, tables)
                    if not inside:
                        return 0.0, False
                    energy += u
            j = nxt[j]
    return energy, True


@njit(cache=True)
def bond_energy(kind, p, r2, tables):
    """Energy of one bond at squared length ``r2`` (codes as :func:`beadsim.kernels.forces.bond_forces`).

    Returns ``(u, ok)``; ``ok`` is False beyond the FENE limit or outside a table.
    """
    if kind == BOND_FENE:
        x = r2 / (p[1] * p[1])
        if x >= 1.0:
            return 0.0, False
        return -0.5 * p[0] * p[1] * p[1] * math.log(1.0 - x), True
    r = math.sqrt(r2)
    if kind == BOND_HARMONIC:
        return 0.5 * p[0] * (r - p[1]) ** 2, True
    u, _, inside = hermite_table(tables[int(p[0])], p[1], p[2], int(p[3]), r)
    return u, inside


@njit(cache=True, inline="always")
def _coord(j, d, lo, hi, pos, trial, use_trial):
    if use_trial and lo <= j < hi:
        return trial[j, d]
    return pos[j, d]


@njit(cache=True)
def _bonded_energy(lo, hi, pos, trial, use_trial, ff, bond_start, bond_of, angle_start, angle_of):
    """Energy of the bonds and angles with members both inside and outside ``[lo, hi)``.

    Moved beads are read from ``trial`` if ``use_trial``, else from ``pos``.
    Returns ``(energy, ok)``.
    """
    tables = ff[2]
    bonds, bond_type, bond_kinds, bond_params = ff[3], ff[4], ff[5], ff[6]
    angles, angle_type, angle_params = ff[7], ff[8], ff[9]
    energy = 0.0
    for i in range(lo, hi):
        for k in range(bond_start[i], bond_start[i + 1]):
            b = bond_of[k]
            other = bonds[b, 0] + bonds[b, 1] - i
            if lo <= other < hi:
                continue
            r2 = 0.0
            for d in range(3):
                dd = _coord(other, d, lo, hi, pos, trial, use_trial) - _coord(i, d, lo, hi, pos, trial, use_trial)
                r2 += dd * dd
            t = bond_type[b]
            u, ok = bond_energy(bond_kinds[t], bond_params[t], r2, tables)
            if not ok:
                return 0.0, False
            energy += u
        for k in range(angle_start[i], angle_start[i + 1]):
            m = angle_of[k]
            p, q, r = angles[m, 0], angles[m, 1], angles[m, 2]
            inside = (lo <= p < hi) + (lo <= q < hi) + (lo <= r < hi)
            first = p if lo <= p < hi else (q if lo <= q < hi else r)
            if inside == 3 or first != i:  # unchanged, or counted from its first moved member
                continue
            aa = 0.0
            cc = 0.0
            ac = 0.0
            for d in range(3):
                xq = _coord(q, d, lo, hi, pos, trial, use_trial)
                a_d = xq - _coord(p, d, lo, hi, pos, trial, use_trial)
                c_d = _coord(r, d, lo, hi, pos, trial, use_trial) - xq
                aa += a_d * a_d
                cc += c_d * c_d
                ac += a_d * c_d
            if aa == 0.0 or cc == 0.0:
                return 0.0, False
            cos_t = ac / math.sqrt(aa * cc)
            energy += angle_params[angle_type[m], 0] * (1.0 - cos_t)
    return energy, True


@njit(cache=True)
def trial_energy_change(lo, hi, trial, pos, types, ff, excl_start, excl, bond_start, bond_of, angle_start,
                        angle_of, width, head, nxt, near):
    """Energy change (epsilon) if beads ``lo .. hi-1`` moved from ``pos`` to ``trial``.

    Parameters
    ----------
    lo, hi : int
        The moved beads are ``lo <= i < hi``.
    trial : float64 (n, 3)
        Trial positions; only rows ``lo:hi`` are read.
    pos : float64 (n, 3)
        Current positions, sigma.
    types : int64 (n,)
    ff : tuple
        As :func:`beadsim.kernels.forces.total_forces`.
    excl_start, excl : int64 arrays
        Excluded pair partners in compressed rows.
    bond_start, bond_of, angle_start, angle_of : int64 arrays
        Bonds and angles each bead belongs to, in compressed rows.
    width : float
        Cell edge of the hashed cells (0 when there is no pair interaction).
    head, nxt : int64 arrays
        Hashed cells of ``pos`` (:func:`build_cells`).
    near : int64 (27,)
        Scratch.

    Returns
    -------
    (float, bool)
        dU and whether the trial state is allowed (finite energy).
    """
    kinds, params, tables = ff[0], ff[1], ff[2]
    d_energy = 0.0
    if width > 0.0:
        for i in range(lo, hi):
            u_new, ok = _pair_energy_with_fixed(i, trial[i, 0], trial[i, 1], trial[i, 2], lo, hi, pos, types,
                                                kinds, params, tables, excl_start, excl, width, head, nxt, near)
            if not ok:
                return 0.0, False
            u_old, ok = _pair_energy_with_fixed(i, pos[i, 0], pos[i, 1], pos[i, 2], lo, hi, pos, types,
                                                kinds, params, tables, excl_start, excl, width, head, nxt, near)
            d_energy += u_new - u_old
    u_new, ok = _bonded_energy(lo, hi, pos, trial, True, ff, bond_start, bond_of, angle_start, angle_of)
    if not ok:
        return 0.0, False
    u_old, _ = _bonded_energy(lo, hi, pos, trial, False, ff, bond_start, bond_of, angle_start, angle_of)
    return d_energy + u_new - u_old, True


@njit(cache=True)
def random_orthogonal(seed, move, g):
    """Fill ``g`` (float64 (3, 3)) with the Haar-random element of O(3) of move ``move``."""
    q0, q1 = normal_pair(seed, 4 * move + 1)
    q2, q3 = normal_pair(seed, 4 * move + 2)
    norm = math.sqrt(q0 * q0 + q1 * q1 + q2 * q2 + q3 * q3)
    w, x, y, z = q0 / norm, q1 / norm, q2 / norm, q3 / norm
    g[0, 0] = 1.0 - 2.0 * (y * y + z * z)
    g[0, 1] = 2.0 * (x * y - z * w)
    g[0, 2] = 2.0 * (x * z + y * w)
    g[1, 0] = 2.0 * (x * y + z * w)
    g[1, 1] = 1.0 - 2.0 * (x * x + z * z)
    g[1, 2] = 2.0 * (y * z - x * w)
    g[2, 0] = 2.0 * (x * z - y * w)
    g[2, 1] = 2.0 * (y * z + x * w)
    g[2, 2] = 1.0 - 2.0 * (x * x + y * y)
    if uniform_open(seed, UNIFORMS_PER_MOVE * move + 1) < 0.5:
        for r in range(3):
            for s in range(3):
                g[r, s] = -g[r, s]


@njit(cache=True)
def propose(kind, seed, move, max_angle, pos, candidates, chain_lo, chain_hi, trial, g):
    """Trial positions of move ``move``; return the moved range ``(lo, hi)`` (``lo == hi``: no move).

    Parameters
    ----------
    kind : int
        ``PIVOT`` or ``CRANKSHAFT``.
    seed : uint64
        Stream seed of the moves.
    move : int
        Move index over the run (selects the random numbers).
    max_angle : float
        Largest crankshaft rotation, radians.
    pos : float64 (n, 3)
    candidates : int64 (m,)
        Beads a move may pick (interior beads of the chains).
    chain_lo, chain_hi : int64 (n,)
        First bead of each bead's chain and one past its last.
    trial : float64 (n, 3)
        Output: rows ``lo:hi`` receive the trial positions.
    g : float64 (3, 3)
        Scratch: the map applied.
    """
    base = UNIFORMS_PER_MOVE * move
    m = candidates.shape[0]
    p = candidates[min(int(uniform_open(seed, base) * m), m - 1)]
    if kind == PIVOT:
        random_orthogonal(seed, move, g)
        if p - chain_lo[p] < chain_hi[p] - 1 - p:
            lo, hi = chain_lo[p], p
        else:
            lo, hi = p + 1, chain_hi[p]
        for i in range(lo, hi):
            dx = pos[i, 0] - pos[p, 0]
            dy = pos[i, 1] - pos[p, 1]
            dz = pos[i, 2] - pos[p, 2]
            for d in range(3):
                trial[i, d] = pos[p, d] + g[d, 0] * dx + g[d, 1] * dy + g[d, 2] * dz
        return lo, hi
    # crankshaft: Rodrigues rotation of bead p about the unit axis k through beads p - 1 and p + 1:
    # v -> v cos(phi) + (k x v) sin(phi) + k (k . v) (1 - cos(phi)), v = r_p - r_(p-1)
    kx = pos[p + 1, 0] - pos[p - 1, 0]
    ky = pos[p + 1, 1] - pos[p - 1, 1]
    kz = pos[p + 1, 2] - pos[p - 1, 2]
    norm = math.sqrt(kx * kx + ky * ky + kz * kz)
    if norm == 0.0:
        return p, p
    kx /= norm
    ky /= norm
    kz /= norm
    vx = pos[p, 0] - pos[p - 1, 0]
    vy = pos[p, 1] - pos[p - 1, 1]
    vz = pos[p, 2] - pos[p - 1, 2]
    phi = max_angle * (2.0 * uniform_open(seed, base + 7) - 1.0)
    cos_p = math.cos(phi)
    sin_p = math.sin(phi)
    along = (kx * vx + ky * vy + kz * vz) * (1.0 - cos_p)
    trial[p, 0] = pos[p - 1, 0] + vx * cos_p + (ky * vz - kz * vy) * sin_p + kx * along
    trial[p, 1] = pos[p - 1, 1] + vy * cos_p + (kz * vx - kx * vz) * sin_p + ky * along
    trial[p, 2] = pos[p - 1, 2] + vz * cos_p + (kx * vy - ky * vx) * sin_p + kz * along
    return p, p + 1


@njit(cache=True)
def metropolis_moves(kind, n_moves, first_move, seed, temperature, max_angle, pos, types, ff, excl_start, excl,
                     bond_start, bond_of, angle_start, angle_of, candidates, chain_lo, chain_hi, width, head,
                     nxt, prv, bucket, trial, counts):
    """Attempt ``n_moves`` moves of one kind, accepting each by the Metropolis rule; update ``pos`` in place.

    Parameters
    ----------
    kind : int
        ``PIVOT`` or ``CRANKSHAFT``.
    n_moves, first_move : int
        Moves to attempt and the run-wide index of the first (selects the random numbers).
    seed : uint64
        Stream seed of the moves.
    temperature : float
        kT, epsilon.
    max_angle : float
        Largest crankshaft rotation, radians.
    pos, types, ff, excl_start, excl, bond_start, bond_of, angle_start, angle_of
        As :func:`trial_energy_change`; ``pos`` is updated in place.
    candidates, chain_lo, chain_hi
        As :func:`propose`.
    width, head, nxt, prv, bucket
        Hashed cells of ``pos`` (:func:`build_cells`), kept current as moves are accepted.
    trial : float64 (n, 3)
        Scratch.
    counts : int64 (2,)
        Incremented in place: (attempted, accepted).
    """
    g = np.empty((3, 3))
    near = np.empty(27, dtype=np.int64)
    n_buckets = head.shape[0]
    for k in range(n_moves):
        move = first_move + k
        counts[0] += 1
        lo, hi = propose(kind, seed, move, max_angle, pos, candidates, chain_lo, chain_hi, trial, g)
        if hi <= lo:
            continue
        d_energy, ok = trial_energy_change(lo, hi, trial, pos, types, ff, excl_start, excl, bond_start, bond_of,
                                           angle_start, angle_of, width, head, nxt, near)
        if not ok:
            continue
        if d_energy > 0.0 and uniform_open(seed, UNIFORMS_PER_MOVE * move + 6) >= math.exp(-d_energy / temperature):
            continue
        counts[1] += 1
        for i in range(lo, hi):
            for d in range(3):
                pos[i, d] = trial[i, d]
            if width > 0.0:
                _relink(i, _bucket_of(pos[i, 0], pos[i, 1], pos[i, 2], width, n_buckets), head, nxt, prv, bucket)
