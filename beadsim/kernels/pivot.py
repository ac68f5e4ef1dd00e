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
the proposal symmetric.

Acceptance: the factorized Metropolis rule
------------------------------------------
Each pair energy ``u`` is split at a cap ``c``: a pair closer than the overlap
radius with ``u > c`` has the overlap part ``u - c`` and the rest ``c``; any
other pair has no overlap part and the rest ``u``. The bonds and angles belong
to the rest. A move changing the overlap energy by ``dO`` and the rest by ``dR``
is accepted with probability ``min(1, exp(-dO / kT)) min(1, exp(-dR / kT))``.
The ratio of forward to reverse probabilities is ``exp(-(dO + dR) / kT)``, so
detailed balance with the Boltzmann distribution holds for any split (the
factorized Metropolis filter: Michel, Kapfer and Krauth, J. Chem. Phys. 140,
054116, 2014; the Metropolis rule itself: Metropolis et al., J. Chem. Phys. 21,
1087, 1953). With no overlap radius (``dO = 0``) it is the plain Metropolis rule.

Why: in an attractive chain most pivots are rejected because the rotated block
lands inside the rest of the chain. Overlap parts are never negative, so the
overlap change is summed first, from the pivot outwards, and the move is
rejected as soon as the overlap factor alone falls below the move's uniform
number, usually after a few beads; only the moves that pass pay for the rest.
The cap (several kT) makes the two rules disagree only for moves that create an
overlapping pair while lowering the rest by as much, which are rare.

Energy change
-------------
Only terms joining a moved bead to a fixed one change: the moved beads' pairs
with every fixed bead, and the bonds and angles with members on both sides
(for a pivot, the bending angle at the pivot). Pairs inside the moved block
keep their distances under a rigid map and are not evaluated. Small moves sum
the pairs bead by bead through hashed cells at least one cutoff wide (overlap
parts through cells one overlap radius wide), kept current as moves are
accepted, so a move costs O(moved beads) and never O(N^2). Pivots of many beads
sum them over a bounding-sphere tree of chain segments
(:mod:`beadsim.kernels.spheretree`), which skips the parts of the block that
are far from every fixed bead. Both give the same pairs.

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
from .neighbors import _bucket, _is_excluded
from .random import normal_pair, uniform_open
from .spheretree import block_pair_energy, split_pair_energy, update_spheres

PIVOT, CRANKSHAFT = 0, 1
OVERLAP, REST = 0, 1  # the two parts of the pair energy (_pair_energy_with_fixed)
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
                            width, head, nxt, seen, cap, r2_hard, part):
    """One part of the pair energy of bead ``i`` placed at (x, y, z) with every bead outside ``[lo, hi)``.

    A pair closer than ``sqrt(r2_hard)`` whose energy ``u`` exceeds ``cap`` has the overlap part
    ``u - cap``; every other pair has none. ``part`` is ``OVERLAP`` (the sum of overlap parts, over pairs
    found in cells of edge ``width >= sqrt(r2_hard)``) or ``REST`` (the sum of ``u`` minus overlap parts).
    Returns ``(energy, ok)``; ``ok`` is False if a pair sits at zero distance or outside its table (an
    impossible state: the move is rejected).
    """
    n_buckets = head.shape[0]
    cx = math.floor(x / width)
    cy = math.floor(y / width)
    cz = math.floor(z / width)
    tick = seen[n_buckets] + 1  # buckets stamped with this scan's tick are visited once (hash collisions)
    seen[n_buckets] = tick
    has_excl = excl_start[i + 1] > excl_start[i]
    ti = types[i]
    energy = 0.0
    for ox in range(-1, 2):
        for oy in range(-1, 2):
            for oz in range(-1, 2):
                b = _bucket(cx + ox, cy + oy, cz + oz, _NO_CELLS, False, n_buckets)
                if seen[b] == tick:
                    continue
                seen[b] = tick
                j = head[b]
                while j >= 0:
                    if j < lo or j >= hi:
                        kind = kinds[ti, types[j]]
                        if kind != 0 and not (has_excl and _is_excluded(i, j, excl_start, excl)):
                            dx = pos[j, 0] - x
                            dy = pos[j, 1] - y
                            dz = pos[j, 2] - z
                            r2 = dx * dx + dy * dy + dz * dz
                            if part == REST or r2 < r2_hard:
                                u, ok = split_pair_energy(kind, params[ti, types[j]], r2, tables, cap, r2_hard,
                                                          part == OVERLAP)
                                if not ok:
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
def term_span(ff):
    """Largest index distance between two members of one bond or angle of ``ff`` (0 without any).

    A term with members inside and outside a range of beads ``[lo, hi)`` has its inside members within
    this distance of ``lo`` or of ``hi - 1``, so the bonded energy change of a move scans only those.
    """
    span = 0
    for terms in (ff[3], ff[7]):
        for t in range(terms.shape[0]):
            a = terms[t, 0]
            b = terms[t, 0]
            for k in range(1, terms.shape[1]):
                a = min(a, terms[t, k])
                b = max(b, terms[t, k])
            span = max(span, b - a)
    return span


@njit(cache=True)
def _bonded_energy(lo, hi, span, pos, trial, use_trial, ff, bond_start, bond_of, angle_start, angle_of):
    """Energy of the bonds and angles with members both inside and outside ``[lo, hi)``.

    Moved beads are read from ``trial`` if ``use_trial``, else from ``pos``; ``span`` is
    :func:`term_span` (only beads that near an end of the range are scanned).
    Returns ``(energy, ok)``.
    """
    tables = ff[2]
    bonds, bond_type, bond_kinds, bond_params = ff[3], ff[4], ff[5], ff[6]
    angles, angle_type, angle_params = ff[7], ff[8], ff[9]
    energy = 0.0
    first_end = min(hi, lo + span)  # beads farther than span from both ends join no outside bead
    for start, stop in ((lo, first_end), (max(first_end, hi - span), hi)):
        for i in range(start, stop):
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
def trial_energy_change(lo, hi, trial, pos, types, ff, excl_start, excl, span, bond_start, bond_of, angle_start,
                        angle_of, width, head, nxt, seen, cap, r2_hard):
    """Change of the rest energy (epsilon) if beads ``lo .. hi-1`` moved from ``pos`` to ``trial``.

    The rest energy is the pair energy less its overlap parts (:func:`_pair_energy_with_fixed`), plus
    the bonds and angles; with ``r2_hard = 0`` there are no overlap parts and this is the full dU.

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
    seen : int64 (n_buckets + 1,)
        Scratch: visit stamps of the buckets, and the last stamp used (start with zeros).
    cap, r2_hard : float
        Overlap split: pairs closer than ``sqrt(r2_hard)`` (sigma) count at most ``cap`` (epsilon).

    Returns
    -------
    (float, bool)
        The change and whether the trial state is allowed (finite energy).
    """
    kinds, params, tables = ff[0], ff[1], ff[2]
    d_energy = 0.0
    if width > 0.0:
        for i in range(lo, hi):
            u_new, ok = _pair_energy_with_fixed(i, trial[i, 0], trial[i, 1], trial[i, 2], lo, hi, pos, types,
                                                kinds, params, tables, excl_start, excl, width, head, nxt, seen,
                                                cap, r2_hard, REST)
            if not ok:
                return 0.0, False
            u_old, ok = _pair_energy_with_fixed(i, pos[i, 0], pos[i, 1], pos[i, 2], lo, hi, pos, types,
                                                kinds, params, tables, excl_start, excl, width, head, nxt, seen,
                                                cap, r2_hard, REST)
            d_energy += u_new - u_old
    d_bonded, ok = _bonded_change(lo, hi, span, trial, pos, ff, bond_start, bond_of, angle_start, angle_of)
    return d_energy + d_bonded, ok


@njit(cache=True)
def _bonded_change(lo, hi, span, trial, pos, ff, bond_start, bond_of, angle_start, angle_of):
    """Change of the bond and angle energy if beads ``lo .. hi-1`` moved to ``trial``; ``(change, ok)``."""
    u_new, ok = _bonded_energy(lo, hi, span, pos, trial, True, ff, bond_start, bond_of, angle_start, angle_of)
    if not ok:
        return 0.0, False
    u_old, _ = _bonded_energy(lo, hi, span, pos, trial, False, ff, bond_start, bond_of, angle_start, angle_of)
    return u_new - u_old, True


@njit(cache=True)
def tree_energy_change(lo, hi, near, trial, pos, types, ff, excl_start, excl, span, bond_start, bond_of,
                       angle_start, angle_of, reach, cap, r2_hard, g, origin, tree):
    """:func:`trial_energy_change` of a pivot move (``trial`` = ``pos`` of the block mapped by ``g`` about
    ``origin``, float64 (3,): the pivot bead's position), with the pair sums taken over the bounding-sphere
    tree (:mod:`beadsim.kernels.spheretree`).

    ``reach`` is the largest pair cutoff (sigma), ``near`` and ``tree`` as
    :func:`~beadsim.kernels.spheretree.block_pair_energy`; the other arguments as :func:`trial_energy_change`.
    """
    u_new, ok = block_pair_energy(lo, hi, near, trial, True, g, origin, pos, types, ff, excl_start, excl, reach, cap,
                                  r2_hard, False, math.inf, tree)
    if not ok:
        return 0.0, False
    u_old, _ = block_pair_energy(lo, hi, near, pos, False, g, origin, pos, types, ff, excl_start, excl, reach, cap,
                                 r2_hard, False, math.inf, tree)
    d_bonded, ok = _bonded_change(lo, hi, span, trial, pos, ff, bond_start, bond_of, angle_start, angle_of)
    return u_new - u_old + d_bonded, ok


@njit(cache=True)
def _overlap_sum(lo, hi, near, coords, mapped, pos, types, ff, excl_start, excl, width, head, nxt, seen, cap, limit,
                 use_tree, g, origin, tree):
    """Overlap energy of beads ``lo .. hi-1`` placed at ``coords`` with the beads outside; ``inf`` as soon as it
    exceeds ``limit`` or a pair is impossible. Summed over the tree (``use_tree``; ``near``, ``coords`` and
    ``mapped`` as :func:`~beadsim.kernels.spheretree.block_pair_energy`) or through the cells bead by bead from
    the block's end at ``near``."""
    if use_tree:
        total, ok = block_pair_energy(lo, hi, near, coords, mapped, g, origin, pos, types, ff, excl_start, excl, width,
                                      cap, width * width, True, limit, tree)
        return total if ok else math.inf
    step = -1 if near == hi else 1
    total = 0.0
    i = hi - 1 if near == hi else lo
    for _ in range(hi - lo):
        u, ok = _pair_energy_with_fixed(i, coords[i, 0], coords[i, 1], coords[i, 2], lo, hi, pos, types, ff[0],
                                        ff[1], ff[2], excl_start, excl, width, head, nxt, seen, cap, width * width,
                                        OVERLAP)
        total += u
        if not ok or total > limit:
            return math.inf
        i += step
    return total


@njit(cache=True)
def overlap_free(pos, types, ff, excl_start, excl, width, head, nxt, seen, cap):
    """True if no pair of ``pos`` has a pair energy above ``cap`` within the overlap radius ``width``."""
    n = pos.shape[0]
    for i in range(n):
        u, ok = _pair_energy_with_fixed(i, pos[i, 0], pos[i, 1], pos[i, 2], i, i + 1, pos, types, ff[0], ff[1],
                                        ff[2], excl_start, excl, width, head, nxt, seen, cap, width * width, OVERLAP)
        if u > 0.0 or not ok:
            return False
    return True


@njit(cache=True)
def overlap_barrier(lo, hi, near, trial, pos, types, ff, excl_start, excl, width, head, nxt, seen, cap, limit,
                    clean, use_tree, g, origin, tree):
    """Positive part of the overlap energy change if beads ``lo .. hi-1`` moved; ``inf`` once it exceeds ``limit``.

    The new overlap sum is taken from the block's end next to the pivot outwards, where a rotated
    block meets the rest soonest. Overlap parts are never negative, so the
    scan stops as soon as the sum so far, less the old sum, exceeds ``limit``, and a new sum of zero
    has no positive change whatever the old one was. The old sum is zero when the current state has no
    overlapping pair at all (``clean``), and is otherwise taken in full when the new sum is positive.

    Parameters
    ----------
    lo, hi, near : int
        Moved beads, and the block's end at the pivot (``hi`` for a block below its pivot bead, else ``lo``).
    trial, pos, types, ff, excl_start, excl, seen
        As :func:`trial_energy_change`.
    width : float
        Edge of the overlap cells, sigma: the overlap radius (pairs closer than it may have overlap parts).
    head, nxt : int64 arrays
        Hashed cells of ``pos`` of edge ``width``.
    cap : float
        Pair energy above which a pair overlaps, epsilon.
    limit : float
        Largest barrier that may still be accepted, epsilon.
    clean : bool
        True if no pair of the current state overlaps (then the old sum is zero).
    use_tree : bool
        Sum over the bounding-sphere tree (a pivot: ``trial`` is ``pos`` mapped by ``g`` about ``origin``,
        float64 (3, 3) and (3,)) instead of through the cells.
    g, origin, tree
        As :func:`~beadsim.kernels.spheretree.block_pair_energy`.

    Returns
    -------
    float
        ``max(0, new - old)``, or ``inf`` when the change exceeds ``limit`` or the trial state is impossible.
    """
    new = _overlap_sum(lo, hi, near, trial, True, pos, types, ff, excl_start, excl, width, head, nxt, seen, cap,
                       limit, use_tree, g, origin, tree)
    if new == 0.0 or clean:
        return new
    old = _overlap_sum(lo, hi, near, pos, False, pos, types, ff, excl_start, excl, width, head, nxt, seen, cap,
                       math.inf, use_tree, g, origin, tree)
    if old > 0.0:
        new = _overlap_sum(lo, hi, near, trial, True, pos, types, ff, excl_start, excl, width, head, nxt, seen, cap,
                           limit + old, use_tree, g, origin, tree)
    return max(new - old, 0.0)


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
                     bond_start, bond_of, angle_start, angle_of, candidates, chain_lo, chain_hi, cells,
                     overlap_cells, cap, tree, tree_min_beads, trial, seen, counts):
    """Attempt ``n_moves`` moves of one kind, each accepted by the factorized Metropolis rule; update ``pos``.

    A move is accepted when the uniform ``v`` of the move is below
    ``min(1, exp(-dO / kT)) * min(1, exp(-dR / kT))``, dO the change of the overlap energy and dR that
    of the rest (module notes); the overlap change is found first, and a move whose overlap factor alone
    falls below ``v`` is rejected before the rest is summed. Without overlap cells (edge 0) dO = 0 and
    this is the plain Metropolis rule.

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
    cells, overlap_cells : tuple (width, head, nxt, prv, bucket)
        Hashed cells of ``pos`` (:func:`build_cells`) of edge the pair cutoff and the overlap radius
        (width 0: none), kept current as moves are accepted, except by pivots that all use the tree
        (``kind == PIVOT`` and ``tree_min_beads <= 1``), which leave them stale: rebuild them before
        using them again. Keeping them cost a fifth of the time of a pivot at N = 512, T = 3.3.
    cap : float
        Pair energy above which a pair overlaps, epsilon.
    tree : tuple
        Bounding-sphere tree of ``pos`` (:func:`~beadsim.kernels.spheretree.block_pair_energy`), kept
        current as moves are accepted.
    tree_min_beads : int
        Pivots of at least this many beads sum their pairs over the tree, smaller moves through the cells
        (both give the same pairs; set it above the bead count to leave the tree out).
    trial : float64 (n, 3)
        Scratch.
    seen : int64 (n_buckets + 1,)
        Scratch of the bucket scans (:func:`trial_energy_change`).
    counts : int64 (2,)
        Incremented in place: (attempted, accepted).
    """
    g = np.empty((3, 3))
    origin = np.empty(3)
    width, head, nxt, prv, bucket = cells
    o_width, o_head, o_nxt, o_prv, o_bucket = overlap_cells
    r2_hard = o_width * o_width
    clean = o_width > 0.0 and overlap_free(pos, types, ff, excl_start, excl, o_width, o_head, o_nxt, seen, cap)
    keep_cells = kind != PIVOT or tree_min_beads > 1  # pivots all summed over the tree read no cells
    span = term_span(ff)
    for k in range(n_moves):
        move = first_move + k
        counts[0] += 1
        lo, hi = propose(kind, seed, move, max_angle, pos, candidates, chain_lo, chain_hi, trial, g)
        if hi <= lo:
            continue
        v = uniform_open(seed, UNIFORMS_PER_MOVE * move + 6)
        below = lo == chain_lo[lo]  # the block lies below its pivot bead
        pivot = hi if below else lo - 1
        near = hi if below else lo
        use_tree = kind == PIVOT and tree_min_beads <= hi - lo
        for d in range(3):
            origin[d] = pos[pivot, d]
        d_overlap = 0.0
        if o_width > 0.0:
            d_overlap = overlap_barrier(lo, hi, near, trial, pos, types, ff, excl_start, excl,
                                        o_width, o_head, o_nxt, seen, cap, -temperature * math.log(v), clean,
                                        use_tree, g, origin, tree)
            if d_overlap == math.inf:
                continue
        if use_tree:
            d_rest, ok = tree_energy_change(lo, hi, near, trial, pos, types, ff, excl_start, excl, span, bond_start,
                                            bond_of, angle_start, angle_of, width, cap, r2_hard, g, origin, tree)
        else:
            d_rest, ok = trial_energy_change(lo, hi, trial, pos, types, ff, excl_start, excl, span, bond_start,
                                             bond_of, angle_start, angle_of, width, head, nxt, seen, cap, r2_hard)
        if not ok:
            continue
        barrier = d_overlap + max(d_rest, 0.0)
        if barrier > 0.0 and v >= math.exp(-barrier / temperature):
            continue
        counts[1] += 1
        clean = clean and d_overlap == 0.0  # a positive barrier from a clean state means a new overlapping pair
        for i in range(lo, hi):
            for d in range(3):
                pos[i, d] = trial[i, d]
            if width > 0.0 and keep_cells:
                _relink(i, _bucket_of(pos[i, 0], pos[i, 1], pos[i, 2], width, head.shape[0]), head, nxt, prv,
                        bucket)
            if o_width > 0.0 and keep_cells:
                _relink(i, _bucket_of(pos[i, 0], pos[i, 1], pos[i, 2], o_width, o_head.shape[0]), o_head, o_nxt,
                        o_prv, o_bucket)
        if tree_min_beads < pos.shape[0]:
            update_spheres(pos, tree[0], tree[1], tree[2], tree[3], tree[4], tree[5], lo, hi, g, origin,
                           kind == PIVOT)


@njit(cache=True)
def overlap_radius(kinds, params, tables, cap, r_max, n_grid):
    """Overlap radius for :func:`metropolis_moves`: one grid step beyond the largest distance at which a pair
    energy exceeds ``cap`` or leaves its table (0.0 if none does).

    Any radius keeps the factorized rule exact (the overlap parts are defined with it); this one makes
    the overlap cells as small as they can be while catching the overlaps of the potentials on a grid of
    ``n_grid`` distances in (0, ``r_max``] sigma.
    """
    step = r_max / n_grid
    for k in range(n_grid, 0, -1):
        r = k * step
        for a in range(kinds.shape[0]):
            for b in range(kinds.shape[1]):
                if kinds[a, b] != 0:
                    u, _, inside = pair_energy_force(kinds[a, b], params[a, b], r * r, tables)
                    if u > cap or not inside:
                        return min(r + step, r_max)
    return 0.0
