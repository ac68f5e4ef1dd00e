"""Bounding-sphere tree over the beads in index order: pair energies between a moved block and the rest
that skip whole sub-chains too far apart to interact.

A rigid pivot of a block of ``m`` beads changes only the pairs that join the block to the fixed beads.
Summing them bead by bead through cells costs O(m) cell scans, although in a coil few of the block's
beads come within the cutoff of a fixed bead. A binary tree over runs of consecutive beads, each node
with a sphere that holds its beads, lets the sum skip every pair of nodes whose spheres lie farther
apart than the cutoff: a dual-tree traversal (Gray and Moore, Adv. Neural Inf. Process. Syst. 13, 521,
2001) over bounding spheres of chain segments, the structure pivot algorithms for long chains use to
find overlaps and contacts (Clisby, J. Stat. Phys. 140, 349, 2010, on lattices). A sphere maps rigidly with its beads,
so the trial state needs no new tree: a moved node's centre is mapped by the pivot's orthogonal map.

Layout: node 0 covers beads ``[0, n)``; a node of more than ``leaf_size`` beads splits at the middle
into children ``left[k]`` and ``left[k] + 1`` (breadth first, so children follow their parents);
``left[k] = -1`` marks a leaf. The last :data:`SPARE_NODES` slots hold the pieces of the at most two
leaves a block boundary cuts.
"""

import math

import numpy as np
from numba import njit

from .forces import pair_energy_force
from .neighbors import _is_excluded

SPARE_NODES = 8
"""Node slots for the moved and fixed pieces of the (at most two) leaves cut by a block's ends."""

PRUNE_MARGIN = 1e-9
"""Added to the cutoff in the pruning test, sigma: covers rounding in spheres moved by many pivots."""

STACK_SIZE = 512
"""Node pairs the traversal may hold pending (depth of the tree times two suffices)."""


def node_capacity(n, leaf_size):
    """Node slots needed for ``n`` beads and leaves of ``leaf_size`` beads (tree plus spare slots)."""
    return 4 * (n // leaf_size + 1) + SPARE_NODES


@njit(cache=True)
def build_tree(n, leaf_size, node_lo, node_hi, left):
    """Lay out the tree over beads ``[0, n)``; return the number of nodes (spare slots follow it).

    Parameters
    ----------
    n, leaf_size : int
    node_lo, node_hi, left : int64 (capacity,)
        Output: bead range of each node and its first child (-1 for a leaf).
    """
    node_lo[0] = 0
    node_hi[0] = n
    count = 1
    k = 0
    while k < count:
        a, b = node_lo[k], node_hi[k]
        if b - a > leaf_size:
            mid = (a + b) // 2
            left[k] = count
            node_lo[count], node_hi[count] = a, mid
            node_lo[count + 1], node_hi[count + 1] = mid, b
            count += 2
        else:
            left[k] = -1
        k += 1
    return count


@njit(cache=True)
def _fit(pos, a, b, center, radius, k):
    """Sphere of node ``k`` around beads ``a .. b-1``: centre of their bounding box, radius to the farthest."""
    for d in range(3):
        lo_d = pos[a, d]
        hi_d = pos[a, d]
        for i in range(a + 1, b):
            lo_d = min(lo_d, pos[i, d])
            hi_d = max(hi_d, pos[i, d])
        center[k, d] = 0.5 * (lo_d + hi_d)
    r2 = 0.0
    for i in range(a, b):
        dx = pos[i, 0] - center[k, 0]
        dy = pos[i, 1] - center[k, 1]
        dz = pos[i, 2] - center[k, 2]
        r2 = max(r2, dx * dx + dy * dy + dz * dz)
    radius[k] = math.sqrt(r2)


@njit(cache=True)
def _merge(k, c1, c2, center, radius):
    """Sphere of node ``k`` holding the spheres of nodes ``c1`` and ``c2``."""
    dx = center[c2, 0] - center[c1, 0]
    dy = center[c2, 1] - center[c1, 1]
    dz = center[c2, 2] - center[c1, 2]
    dist = math.sqrt(dx * dx + dy * dy + dz * dz)
    r1, r2 = radius[c1], radius[c2]
    if dist + r2 <= r1:
        src, r = c1, r1
    elif dist + r1 <= r2:
        src, r = c2, r2
    else:
        r = 0.5 * (dist + r1 + r2)
        t = (r - r1) / dist
        center[k, 0] = center[c1, 0] + t * dx
        center[k, 1] = center[c1, 1] + t * dy
        center[k, 2] = center[c1, 2] + t * dz
        radius[k] = r
        return
    for d in range(3):
        center[k, d] = center[src, d]
    radius[k] = r


@njit(cache=True)
def update_spheres(pos, n_nodes, node_lo, node_hi, left, center, radius, lo, hi, g, origin, rigid):
    """Refresh the spheres of the nodes that hold beads ``lo .. hi-1`` after those beads moved.

    With ``rigid`` the beads moved by ``x -> origin + g (x - origin)`` (``g`` orthogonal) and nodes
    wholly inside the range are mapped the same way; other touched leaves are refitted and other touched
    internal nodes merged from their children. ``lo = 0, hi = n, rigid = False`` builds every sphere.
    """
    for k in range(n_nodes - 1, -1, -1):  # children before parents
        a, b = node_lo[k], node_hi[k]
        if b <= lo or a >= hi:
            continue
        if rigid and lo <= a and b <= hi:
            dx = center[k, 0] - origin[0]
            dy = center[k, 1] - origin[1]
            dz = center[k, 2] - origin[2]
            for d in range(3):
                center[k, d] = origin[d] + g[d, 0] * dx + g[d, 1] * dy + g[d, 2] * dz
        elif left[k] < 0:
            _fit(pos, a, b, center, radius, k)
        else:
            _merge(k, left[k], left[k] + 1, center, radius)


@njit(cache=True, inline="always")
def _near_child_last(k, near, left, node_hi):
    """Children of node ``k`` as (pushed first, pushed last): the one nearer bead index ``near`` last, so a
    stack pops it first."""
    c = left[k]
    if near < node_hi[c]:  # ``near`` lies in (or before) the lower child: it is the nearer one
        return c + 1, c
    return c, c + 1


@njit(cache=True)
def _pieces(lo, hi, near, pos, n_nodes, node_lo, node_hi, left, center, radius, moved, fixed, stack):
    """Cover ``[lo, hi)`` and its complement with whole nodes, cutting the leaves at the ends into spare
    nodes; return (moved pieces, fixed pieces) counts written to ``moved`` and ``fixed``.

    The descent enters the child nearer bead index ``near`` first, so each list starts with the pieces
    nearest ``near`` (the block's end at the pivot), the smallest ones, and grows outwards.
    """
    n_moved = 0
    n_fixed = 0
    spare = n_nodes
    top = 1
    stack[0] = 0
    while top > 0:
        top -= 1
        k = stack[top]
        a, b = node_lo[k], node_hi[k]
        if b <= lo or a >= hi:
            fixed[n_fixed] = k
            n_fixed += 1
        elif lo <= a and b <= hi:
            moved[n_moved] = k
            n_moved += 1
        elif left[k] >= 0:
            stack[top], stack[top + 1] = _near_child_last(k, near, left, node_hi)
            top += 2
        else:
            for s, e, is_moved in ((a, lo, False), (max(a, lo), min(b, hi), True), (hi, b, False)):
                if e > s:
                    node_lo[spare], node_hi[spare], left[spare] = s, e, -1
                    _fit(pos, s, e, center, radius, spare)
                    if is_moved:
                        moved[n_moved] = spare
                        n_moved += 1
                    else:
                        fixed[n_fixed] = spare
                        n_fixed += 1
                    spare += 1
    return n_moved, n_fixed


@njit(cache=True, inline="always")
def split_pair_energy(kind, p, r2, tables, cap, r2_hard, overlap):
    """The overlap part (``overlap``) or the rest of one pair's energy at squared distance ``r2``.

    A pair closer than ``sqrt(r2_hard)`` with energy ``u > cap`` has the overlap part ``u - cap`` and
    the rest ``cap``; any other pair none and ``u``. Returns ``(part, ok)``; ``ok`` is False for a pair at
    zero distance or outside its table.
    """
    if r2 == 0.0:
        return 0.0, False
    u, _, inside = pair_energy_force(kind, p, r2, tables)
    if not inside:
        return 0.0, False
    overlaps = r2 < r2_hard and u > cap
    if overlap:
        return (u - cap if overlaps else 0.0), True
    return (cap if overlaps else u), True  # cap itself: u - (u - cap) loses the cap's digits when u is huge


@njit(cache=True)
def _leaf_pairs(a0, a1, b0, b1, b_center, b_radius, coords, pos, types, kinds, params, tables, excl_start, excl,
                reach, cap, r2_hard, overlap):
    """Overlap or rest energy (:func:`block_pair_energy`) of beads ``a0 .. a1-1`` at ``coords`` with beads
    ``b0 .. b1-1`` at ``pos``, whose sphere has centre ``b_center`` (float64 (3,)) and radius ``b_radius``;
    ``(energy, ok)``. A bead of the first group farther than ``reach`` from that sphere is skipped whole."""
    energy = 0.0
    reach2 = reach * reach
    gap = b_radius + reach + PRUNE_MARGIN
    for i in range(a0, a1):
        cx = b_center[0] - coords[i, 0]
        cy = b_center[1] - coords[i, 1]
        cz = b_center[2] - coords[i, 2]
        if cx * cx + cy * cy + cz * cz > gap * gap:
            continue
        ti = types[i]
        has_excl = excl_start[i + 1] > excl_start[i]
        for j in range(b0, b1):
            dx = pos[j, 0] - coords[i, 0]
            dy = pos[j, 1] - coords[i, 1]
            dz = pos[j, 2] - coords[i, 2]
            r2 = dx * dx + dy * dy + dz * dz
            if r2 >= reach2:
                continue
            kind = kinds[ti, types[j]]
            if kind == 0 or (has_excl and _is_excluded(i, j, excl_start, excl)):
                continue
            part, ok = split_pair_energy(kind, params[ti, types[j]], r2, tables, cap, r2_hard, overlap)
            if not ok:
                return 0.0, False
            energy += part
    return energy, True


@njit(cache=True)
def block_pair_energy(lo, hi, near, coords, mapped, g, origin, pos, types, ff, excl_start, excl, reach, cap,
                      r2_hard, overlap, limit, tree):
    """Overlap or rest energy of the pairs joining beads ``lo .. hi-1`` (at ``coords``) to every other bead
    (at ``pos``); ``inf`` once an overlap sum exceeds ``limit``.

    A pair closer than ``sqrt(r2_hard)`` whose energy exceeds ``cap`` has the overlap part ``u - cap``
    and the rest ``cap``; any other pair has no overlap part and the rest ``u``
    (:mod:`beadsim.kernels.pivot`). The sums equal the cell scans of :mod:`beadsim.kernels.pivot`
    pair for pair.

    Parameters
    ----------
    lo, hi : int
        The block.
    near : int
        Bead index where the block meets the pivot (``hi`` for a block below its pivot bead, else ``lo``).
        Pairs of pieces nearer it are summed first, so an overlap sum meets the overlaps a pivot makes
        (next to the pivot, where the rotated block and the rest are closest) soonest; the sum does not
        depend on it beyond rounding.
    coords : float64 (n, 3)
        Positions of the block's beads (rows ``lo:hi``), sigma.
    mapped : bool
        ``coords`` are the beads' ``pos`` mapped by ``x -> origin + g (x - origin)``; the block's node
        spheres (fitted to ``pos``) are mapped likewise. False: ``coords`` is ``pos``.
    g : float64 (3, 3)
    origin : float64 (3,)
    pos, types, ff, excl_start, excl
        As :func:`beadsim.kernels.pivot.trial_energy_change`.
    reach : float
        Pairs farther apart have no part, sigma: the largest pair cutoff for the rest, the overlap radius
        ``sqrt(r2_hard)`` for overlaps.
    cap, r2_hard : float
        The overlap split.
    overlap : bool
        Sum the overlap parts (True) or the rest.
    limit : float
        The overlap sum's largest value of interest (``inf`` for the rest).
    tree : tuple
        ``(n_nodes, node_lo, node_hi, left, center, radius, moved, fixed, stack, pairs)``: the tree
        (:func:`build_tree`, :func:`update_spheres` on ``pos``) and scratch arrays (int64 ``moved``,
        ``fixed`` of the node capacity, ``stack`` and ``pairs`` (:data:`STACK_SIZE`, 2)).

    Returns
    -------
    (float, bool)
        The energy, epsilon (``inf`` past ``limit``), and False if a pair is impossible (zero distance,
        outside a table).
    """
    n_nodes, node_lo, node_hi, left, center, radius, moved, fixed, stack, pairs = tree
    kinds, params, tables = ff[0], ff[1], ff[2]
    n_moved, n_fixed = _pieces(lo, hi, near, pos, n_nodes, node_lo, node_hi, left, center, radius, moved, fixed,
                               stack)
    energy = 0.0
    for ring in range(n_moved + n_fixed - 1):  # piece pairs by their rank in distance from ``near``, nearest first
        for p in range(max(0, ring - n_fixed + 1), min(ring, n_moved - 1) + 1):
            pairs[0, 0] = moved[p]
            pairs[0, 1] = fixed[ring - p]
            top = 1
            while top > 0:
                top -= 1
                a, b = pairs[top, 0], pairs[top, 1]
                dx = center[b, 0] - origin[0]
                dy = center[b, 1] - origin[1]
                dz = center[b, 2] - origin[2]
                if mapped:  # the moved node's centre in the trial state, relative to the origin
                    ax = center[a, 0] - origin[0]
                    ay = center[a, 1] - origin[1]
                    az = center[a, 2] - origin[2]
                    dx -= g[0, 0] * ax + g[0, 1] * ay + g[0, 2] * az
                    dy -= g[1, 0] * ax + g[1, 1] * ay + g[1, 2] * az
                    dz -= g[2, 0] * ax + g[2, 1] * ay + g[2, 2] * az
                else:
                    dx -= center[a, 0] - origin[0]
                    dy -= center[a, 1] - origin[1]
                    dz -= center[a, 2] - origin[2]
                gap = radius[a] + radius[b] + reach + PRUNE_MARGIN
                if dx * dx + dy * dy + dz * dz > gap * gap:
                    continue
                leaf_a = left[a] < 0
                leaf_b = left[b] < 0
                if leaf_a and leaf_b:
                    u, ok = _leaf_pairs(node_lo[a], node_hi[a], node_lo[b], node_hi[b], center[b], radius[b], coords,
                                        pos, types, kinds, params, tables, excl_start, excl, reach, cap, r2_hard,
                                        overlap)
                    if not ok:
                        return 0.0, False
                    energy += u
                    if energy > limit:
                        return math.inf, True
                elif leaf_b or (not leaf_a and radius[a] >= radius[b]):
                    far, nearer = _near_child_last(a, near, left, node_hi)
                    pairs[top, 0], pairs[top, 1] = far, b
                    pairs[top + 1, 0], pairs[top + 1, 1] = nearer, b
                    top += 2
                else:
                    far, nearer = _near_child_last(b, near, left, node_hi)
                    pairs[top, 0], pairs[top, 1] = a, far
                    pairs[top + 1, 0], pairs[top + 1, 1] = a, nearer
                    top += 2
    return energy, True
