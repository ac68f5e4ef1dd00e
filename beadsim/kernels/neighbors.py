"""Cell-list construction of Verlet lists, for open and periodic boxes.

Beads are binned into cubic cells at least ``r_list`` wide. In a periodic box the
cells tile the box and are indexed directly. In an open box the cell coordinates
are unbounded, so the list's cells are indexed directly along z only, over the
beads' extent, and hashed within each z layer into ``2**k`` buckets, at least
twice the mean layer population (spatial hashing: Teschner et al., VMV 2003):
memory stays O(n) however swollen the chain, a hash collision only adds
candidates that the distance test then rejects, and slots still come in whole
z layers, so open boxes get the same parallel force-loop blocks as periodic ones.
(Beads spread over more than 2 n layers, such as chains that drifted far apart,
have all three coordinates hashed instead, and one block.)
Neighbour buckets of a cell are de-duplicated so small periodic grids and
collisions never double-count. (:func:`_bucket` with cell counts of ones hashes
all three coordinates; the chain builders and the pivot moves use that form.)

The list lives in its own numbering: beads sorted by bucket ("slots"), with
``order[slot]`` the user's index. Rows are compressed (``start[s]:start[s+1]``
indexes ``nbr``) and hold partner slots, so the force loop reads positions
copied into slot order (:func:`gather_rows`) from nearby memory, while the
state itself, and everything written from it, stays in the user's order.
The list is "half": each pair is stored once, under one of its slots. The
force loop runs blocks of slots in phases in which no two blocks write one
slot (:func:`colour_blocks`), so it is parallel and its sums do not depend
on the thread count.
"""

import math

import numpy as np
from numba import njit, prange

from .chunks import chunk_bounds, chunk_count

#: Most blocks the phased half-list force loop uses.
MAX_BLOCKS = 64

_HASH_X = 73856093
_HASH_Y = 19349663
_HASH_Z = 83492791


@njit(cache=True, inline="always")
def nearest_image(d, length, inv_length, periodic):
    """Nearest periodic image of a coordinate difference, given 1/length (identity if not periodic).

    Multiplying by the stored inverse picks the same image as dividing (ties
    at exactly half a box are farther apart than any list radius).
    """
    if periodic:
        return d - length * np.rint(d * inv_length)
    return d


@njit(cache=True, inline="always")
def minimum_image(d, length, periodic):
    """Nearest periodic image of a coordinate difference (identity if not periodic)."""
    return nearest_image(d, length, 1.0 / length, periodic)


@njit(cache=True)
def _cell_layout(pos, box, periodic, r_list):
    """Integer cell coordinates (n, 3), cells per side (3,) and bucket count."""
    n = pos.shape[0]
    coords = np.empty((n, 3), dtype=np.int64)
    ncell = np.ones(3, dtype=np.int64)
    if periodic:
        # cells at least r_list wide, and no more cells than about 2 n (dilute boxes)
        width = max(r_list, (box[0] * box[1] * box[2] / (2.0 * n)) ** (1.0 / 3.0))
        for d in range(3):
            ncell[d] = max(1, int(math.floor(box[d] / width)))
        for i in range(n):
            for d in range(3):
                x = pos[i, d] - box[d] * math.floor(pos[i, d] / box[d])
                c = int(x * ncell[d] / box[d])
                coords[i, d] = min(c, ncell[d] - 1)
        n_buckets = ncell[0] * ncell[1] * ncell[2]
    else:
        lo = np.empty(3)
        for d in range(3):
            lo[d] = pos[:, d].min()
        for i in range(n):
            for d in range(3):
                coords[i, d] = int(math.floor((pos[i, d] - lo[d]) / r_list))
        layers = coords[:, 2].max() + 1 if n else 1
        if layers <= 2 * n:
            # hashed z layers: ncell = (0, buckets per layer, layers); ncell[0] == 0 marks the layout
            per_layer = 8
            while per_layer * layers < 2 * n:
                per_layer *= 2
            ncell[0] = 0
            ncell[1] = per_layer
            ncell[2] = layers
            n_buckets = per_layer * layers
        else:
            # beads spread far apart along z (chains drifted apart): hash all three coordinates, one block
            n_buckets = 1
            while n_buckets < 2 * n:
                n_buckets *= 2
    return coords, ncell, n_buckets


@njit(cache=True, inline="always")
def _bucket(cx, cy, cz, ncell, periodic, n_buckets):
    """Bucket of cell (cx, cy, cz); -1 for a cell outside the hashed layers of an open-box list.

    Periodic: the cell index on an ``ncell`` grid. Open, ``ncell[0] == 0``: z
    layer ``cz`` (of ``ncell[2]``) times ``ncell[1]`` plus a hash of (cx, cy).
    Open otherwise: a hash of all three coordinates into ``n_buckets``.
    """
    if periodic:
        cx = cx % ncell[0]
        cy = cy % ncell[1]
        cz = cz % ncell[2]
        return cx + ncell[0] * (cy + ncell[1] * cz)
    if ncell[0] == 0:
        if cz < 0 or cz >= ncell[2]:
            return -1
        return cz * ncell[1] + (((cx * _HASH_X) ^ (cy * _HASH_Y)) & (ncell[1] - 1))
    h = (cx * _HASH_X) ^ (cy * _HASH_Y) ^ (cz * _HASH_Z)
    return h & (n_buckets - 1)


@njit(cache=True)
def _is_excluded(i, j, excl_start, excl):
    for k in range(excl_start[i], excl_start[i + 1]):
        if excl[k] == j:
            return True
    return False


@njit(cache=True)
def cell_stencil(cx, cy, cz, ncell, periodic, n_buckets, near):
    """Distinct buckets of cell (cx, cy, cz) and its 26 neighbours, in a fixed order.

    Writes them to ``near`` (int64 (27,)) and returns how many there are: fewer
    than 27 on small periodic grids, on hash collisions and at the first and
    last layer of an open-box list.
    """
    n_near = 0
    for ox in range(-1, 2):
        for oy in range(-1, 2):
            for oz in range(-1, 2):
                b = _bucket(cx + ox, cy + oy, cz + oz, ncell, periodic, n_buckets)
                seen = b < 0
                for m in range(n_near):
                    if near[m] == b:
                        seen = True
                        break
                if not seen:
                    near[n_near] = b
                    n_near += 1
    return n_near


@njit(cache=True)
def _bin_beads(pos, box, periodic, r_list):
    """Counting sort of beads by bucket: cell coordinates, layout, bucket offsets and bead order."""
    n = pos.shape[0]
    coords, ncell, n_buckets = _cell_layout(pos, box, periodic, r_list)
    key = np.empty(n, dtype=np.int64)
    offsets = np.zeros(n_buckets + 1, dtype=np.int64)
    for i in range(n):
        key[i] = _bucket(coords[i, 0], coords[i, 1], coords[i, 2], ncell, periodic, n_buckets)
        offsets[key[i] + 1] += 1
    for b in range(n_buckets):
        offsets[b + 1] += offsets[b]
    order = np.empty(n, dtype=np.int64)
    fill = offsets[:-1].copy()
    for i in range(n):
        order[fill[key[i]]] = i
        fill[key[i]] += 1
    return coords, ncell, n_buckets, offsets, order


@njit(cache=True, parallel=True)
def gather_rows(pos, order, sorted_pos):
    """``sorted_pos[s] = pos[order[s]]``: positions (float64 (n, 3)) copied into list order."""
    for s in prange(order.shape[0]):
        i = order[s]
        sorted_pos[s, 0] = pos[i, 0]
        sorted_pos[s, 1] = pos[i, 1]
        sorted_pos[s, 2] = pos[i, 2]


@njit(cache=True)
def _phase_makespan(layers, blocks, threads):
    """Cell layers done by the busiest thread, summed over the two phases, for a split as in :func:`_layer_blocks`.

    Block ``c`` holds layers ``c * layers // blocks`` up to ``(c + 1) * layers // blocks``;
    phase ``p`` runs blocks ``p, p + 2, ...``, dealt to ``threads`` threads in contiguous runs,
    the first runs one block longer when they do not divide evenly (numba's static schedule).
    """
    total = 0
    for phase in range(2):
        k = (blocks - phase + 1) // 2
        worst = 0
        first = 0
        for t in range(threads):
            count = k // threads + (1 if t < k % threads else 0)
            load = 0
            for j in range(first, first + count):
                c = phase + 2 * j
                load += ((c + 1) * layers) // blocks - (c * layers) // blocks
            first += count
            worst = max(worst, load)
        total += worst
    return total


@njit(cache=True)
def _layer_blocks(n, ncell, periodic, offsets, block_start):
    """Split the slots into blocks of whole layers of cells for the phased force loop; return their count.

    Slots run through the cells layer by layer in z (in an open box through
    the hashed buckets of each layer), so a row reaches forward by at most one
    layer of cells (round the seam too, in a periodic box). Blocks of
    whole layers then write only into themselves and the next block, and an
    even number of them needs two phases (:func:`colour_blocks`). Of the even
    block counts, the one whose phases split most evenly over two threads,
    then four, then eight, is taken (more blocks on a tie); it depends on the layer
    count alone, never on the threads in use, so sums do not either. With 11
    layers, for example, 10 blocks give two threads 6 layers' time against 7
    for 8 blocks.

    The layers of a chain in an open box hold very different numbers of
    beads, so there the block count is a multiple of four, at most 16 and at
    most half the layers, and each bound is the first layer boundary at or
    past an equal share of the beads. Fewer than 4 layers (8 in an open box)
    make one block. ``block_start`` (int64 (>= MAX_BLOCKS + 1,)) receives the
    block bounds.
    """
    layers = ncell[2]
    blocks = 1
    if periodic and layers >= 4:
        best = (layers + 1, layers + 1, layers + 1)
        for b in range(2, min(MAX_BLOCKS, layers) + 1, 2):
            spans = (_phase_makespan(layers, b, 2), _phase_makespan(layers, b, 4), _phase_makespan(layers, b, 8))
            if spans <= best:
                best = spans
                blocks = b
        per_layer = ncell[0] * ncell[1]
        for c in range(blocks):
            block_start[c] = offsets[per_layer * ((c * layers) // blocks)]
    elif not periodic and layers >= 8:
        blocks = min(16, layers // 2) // 4 * 4
        per_layer = ncell[1]
        layer = 0
        for c in range(blocks):
            # the first layer boundary at or past c n / blocks beads, leaving every block a layer at least
            while layer < layers and offsets[per_layer * layer] * blocks < c * n:
                layer += 1
            layer = min(layer, layers - (blocks - c))
            block_start[c] = offsets[per_layer * layer]
            layer += 1
    block_start[0] = 0
    block_start[blocks] = n
    return blocks


@njit(cache=True, parallel=True)
def build_list(pos, box, periodic, r_list, excl_start, excl, types, order, start, nbr, sorted_pos, sorted_types,
               block_start):
    """Build a half Verlet list of all pairs closer than ``r_list``, with beads sorted by cell.

    Beads are renumbered in cell order (``order[s]`` is the user's index of
    list slot ``s``), so that the partners of a bead, and the beads of one
    work block, sit close together in memory. Slot ``s``'s partners are the
    slots ``nbr[start[s]:start[s+1]]``; each pair is stored once, under the
    slot from which the other lies less than half way round the slot cycle
    (``0 < (t - s) mod n < n / 2``; the smaller slot on a tie), so that rows
    only ever reach forward, across the periodic seam too. Rows come in a
    fixed order set by the positions alone, never by the thread count.

    Each fixed block of slots (:mod:`beadsim.kernels.chunks`) scans its cells
    once, writing into its own stretch of ``nbr`` (``len(nbr) // blocks``
    entries); the stretches are then closed up.

    Parameters
    ----------
    pos : float64 (n, 3)
        Positions, sigma (unwrapped are fine in periodic boxes).
    box : float64 (3,)
        Box edge lengths, sigma (ignored when not periodic).
    periodic : bool
    r_list : float
        List radius = cutoff + skin, sigma.
    excl_start, excl : int64 (n+1,), (n_excl,)
        Compressed rows of excluded partners of each bead (user's indices, both directions).
    types : int64 (n,)
        Bead types in the user's order.
    order : int64 (n,)
        Output: user's index of each slot.
    start : int64 (n+1,)
        Output: row offsets by slot.
    nbr : int32 (capacity,)
        Output: partner slots.
    sorted_pos : float64 (n, 3)
        Output: positions in slot order.
    sorted_types : int64 (n,)
        Output: types in slot order.
    block_start : int64 (MAX_BLOCKS + 1,)
        Output: slot bounds of the force loop's blocks (:func:`colour_blocks`).

    Returns
    -------
    need : int
        The largest number of entries one block needed. If it exceeds
        ``len(nbr) // blocks`` the list is incomplete and the caller must retry
        with a larger ``nbr``.
    n_blocks : int
        Number of those blocks.
    """
    n = pos.shape[0]
    coords, ncell, n_buckets, offsets, sorted_order = _bin_beads(pos, box, periodic, r_list)
    order[:] = sorted_order
    gather_rows(pos, order, sorted_pos)
    for s in range(n):
        sorted_types[s] = types[order[s]]
    inv_box = 1.0 / box
    r2_list = r_list * r_list
    n_chunks = chunk_count(n)
    capacity = nbr.shape[0] // n_chunks
    counts = np.zeros(n_chunks, dtype=np.int64)
    for c in prange(n_chunks):
        lo, hi = chunk_bounds(n, n_chunks, c)
        near = np.empty(27, dtype=np.int64)
        n_near = 0
        base = c * capacity
        found = 0
        for s in range(lo, hi):
            i = order[s]
            if s == lo or (coords[i, 0] != coords[order[s - 1], 0] or coords[i, 1] != coords[order[s - 1], 1]
                           or coords[i, 2] != coords[order[s - 1], 2]):
                n_near = cell_stencil(coords[i, 0], coords[i, 1], coords[i, 2], ncell, periodic, n_buckets, near)
            start[s] = found
            has_excl = excl_start[i + 1] > excl_start[i]
            xi = sorted_pos[s, 0]
            yi = sorted_pos[s, 1]
            zi = sorted_pos[s, 2]
            for m in range(n_near):
                b = near[m]
                t0 = offsets[b]
                t1 = offsets[b + 1]
                g0 = t0 - s if t0 >= s else t0 - s + n
                g1 = t1 - 1 - s if t1 - 1 >= s else t1 - 1 - s + n
                if t0 == t1 or (g0 <= g1 and 2 * g0 > n):
                    continue  # empty, or wholly behind this slot: its pairs are stored by their own rows
                for t in range(t0, t1):
                    gap = t - s if t >= s else t - s + n
                    if gap == 0 or 2 * gap > n or (2 * gap == n and t < s):
                        continue
                    dx = nearest_image(sorted_pos[t, 0] - xi, box[0], inv_box[0], periodic)
                    dy = nearest_image(sorted_pos[t, 1] - yi, box[1], inv_box[1], periodic)
                    dz = nearest_image(sorted_pos[t, 2] - zi, box[2], inv_box[2], periodic)
                    if dx * dx + dy * dy + dz * dz < r2_list and not (
                            has_excl and _is_excluded(i, order[t], excl_start, excl)):
                        if found < capacity:
                            nbr[base + found] = t
                        found += 1
        counts[c] = found
    need = counts.max()
    n_blocks = _layer_blocks(n, ncell, periodic, offsets, block_start)
    if need > capacity:
        return need, n_blocks
    # close up the blocks' stretches (each moves towards the front: a forward copy is safe)
    total = 0
    for c in range(n_chunks):
        lo, hi = chunk_bounds(n, n_chunks, c)
        for s in range(lo, hi):
            start[s] += total
        base = c * capacity
        for k in range(counts[c]):
            nbr[total + k] = nbr[base + k]
        total += counts[c]
    start[n] = total
    return need, n_blocks


@njit(cache=True)
def colour_blocks(start, nbr, block_start, n_blocks, schedule, phase_start):
    """Order ``n_blocks`` blocks of slots into phases in which no two blocks write the same block.

    With a half list a block adds forces to its own slots and to its partners'
    slots. Blocks are coloured greedily in index order, so that two blocks of
    one colour never write into a common block; they can then run at the same
    time, and every slot receives its contributions in one fixed order
    whatever the thread count.

    Parameters
    ----------
    start, nbr : int64 (n+1,), int32
        Half list rows, as from :func:`build_list`.
    block_start : int64 (>= n_blocks + 1,)
        Slot bounds of the blocks.
    n_blocks : int
    schedule : int64 (>= n_blocks,)
        Output: blocks ordered by colour, then index.
    phase_start : int64 (>= n_blocks + 1,)
        Output: ``schedule[phase_start[p]:phase_start[p+1]]`` is phase ``p``.

    Returns
    -------
    int
        Number of phases (colours).
    """
    n = start.shape[0] - 1
    writes = np.zeros((n_blocks, n_blocks), dtype=np.bool_)
    block_of = np.empty(n, dtype=np.int64)
    for c in range(n_blocks):
        block_of[block_start[c]:block_start[c + 1]] = c
    for c in range(n_blocks):
        writes[c, c] = True
        for k in range(start[block_start[c]], start[block_start[c + 1]]):
            writes[c, block_of[nbr[k]]] = True
    colour = np.full(n_blocks, -1)
    n_colours = 0
    for c in range(n_blocks):
        k = 0
        while True:
            clash = False
            for d in range(c):
                if colour[d] == k:
                    for b in range(n_blocks):
                        if writes[c, b] and writes[d, b]:
                            clash = True
                            break
                    if clash:
                        break
            if not clash:
                break
            k += 1
        colour[c] = k
        n_colours = max(n_colours, k + 1)
    m = 0
    for k in range(n_colours):
        phase_start[k] = m
        for c in range(n_blocks):
            if colour[c] == k:
                schedule[m] = c
                m += 1
    phase_start[n_colours] = m
    return n_colours


@njit(cache=True, parallel=True)
def max_displacement_sq(pos, ref):
    """Largest squared displacement of any bead since ``ref`` (float64 (n, 3) each)."""
    n = pos.shape[0]
    n_chunks = chunk_count(n)
    part = np.zeros(n_chunks)
    for c in prange(n_chunks):
        lo, hi = chunk_bounds(n, n_chunks, c)
        best = 0.0
        for i in range(lo, hi):
            d2 = 0.0
            for d in range(3):
                dd = pos[i, d] - ref[i, d]
                d2 += dd * dd
            best = max(best, d2)
        part[c] = best
    return part.max()
