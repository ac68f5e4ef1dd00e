"""Cell-list construction of full Verlet lists, for open and periodic boxes.

Beads are binned into cubic cells at least ``r_list`` wide. In a periodic box the
cells tile the box and are indexed directly. In an open box the cell coordinates
are unbounded, so cells are hashed into ``2**k >= 2 n`` buckets (Teschner et al.,
VMV 2003): memory stays O(n) however swollen the chain, and a hash collision only
adds candidates that the distance test then rejects. Neighbour buckets of a cell
are de-duplicated so small periodic grids and collisions never double-count.

The list is "full": every pair is stored under both of its beads, in compressed
rows (``start[i]:start[i+1]`` indexes ``nbr``), so that forces can be summed
bead by bead in parallel without two threads ever writing the same bead.
"""

import math

import numpy as np
from numba import njit, prange

from .chunks import chunk_bounds, chunk_count

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
        n_buckets = 1
        while n_buckets < 2 * n:
            n_buckets *= 2
    return coords, ncell, n_buckets


@njit(cache=True, inline="always")
def _bucket(cx, cy, cz, ncell, periodic, n_buckets):
    if periodic:
        cx = cx % ncell[0]
        cy = cy % ncell[1]
        cz = cz % ncell[2]
        return cx + ncell[0] * (cy + ncell[1] * cz)
    h = (cx * _HASH_X) ^ (cy * _HASH_Y) ^ (cz * _HASH_Z)
    return h & (n_buckets - 1)


@njit(cache=True)
def _is_excluded(i, j, excl_start, excl):
    for k in range(excl_start[i], excl_start[i + 1]):
        if excl[k] == j:
            return True
    return False


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


@njit(cache=True)
def _scan_row(i, pos, box, inv_box, periodic, r2_list, coords, ncell, n_buckets, offsets, order,
              excl_start, excl, near, nbr, first):
    """Neighbours of bead ``i`` within the list radius: count them, and store them from ``nbr[first]``
    unless ``first`` is negative. Candidates come bucket by bucket in a fixed order."""
    n_near = 0
    for ox in range(-1, 2):
        for oy in range(-1, 2):
            for oz in range(-1, 2):
                b = _bucket(coords[i, 0] + ox, coords[i, 1] + oy, coords[i, 2] + oz, ncell, periodic, n_buckets)
                seen = False
                for m in range(n_near):
                    if near[m] == b:
                        seen = True
                        break
                if not seen:
                    near[n_near] = b
                    n_near += 1
    has_excl = excl_start[i + 1] > excl_start[i]
    xi = pos[i, 0]
    yi = pos[i, 1]
    zi = pos[i, 2]
    found = 0
    for m in range(n_near):
        b = near[m]
        for k in range(offsets[b], offsets[b + 1]):
            j = order[k]
            if j == i:
                continue
            dx = nearest_image(pos[j, 0] - xi, box[0], inv_box[0], periodic)
            dy = nearest_image(pos[j, 1] - yi, box[1], inv_box[1], periodic)
            dz = nearest_image(pos[j, 2] - zi, box[2], inv_box[2], periodic)
            if dx * dx + dy * dy + dz * dz < r2_list and not (has_excl and _is_excluded(i, j, excl_start, excl)):
                if first >= 0:
                    nbr[first + found] = j
                found += 1
    return found


@njit(cache=True, parallel=True)
def build_full_list(pos, box, periodic, r_list, excl_start, excl, start, nbr):
    """Fill a full Verlet list of all pairs closer than ``r_list`` (each pair under both beads).

    Bead ``i``'s partners are ``nbr[start[i]:start[i+1]]``, in an order fixed by
    the positions alone (never by the thread count), so every bead can sum its
    own force in parallel and reproducibly. Rows are counted in one parallel
    pass and filled in a second.

    Parameters
    ----------
    pos : float64 (n, 3)
        Positions (unwrapped are fine in periodic boxes).
    box : float64 (3,)
        Box edge lengths (ignored when not periodic).
    periodic : bool
    r_list : float
        List radius = cutoff + skin.
    excl_start, excl : int64 (n+1,), (n_excl,)
        Compressed rows of excluded partners of each bead (both directions).
    start : int64 (n+1,)
        Output row offsets.
    nbr : int32 (capacity,)
        Output neighbour indices.

    Returns
    -------
    int
        Number of entries (twice the number of pairs). If larger than
        ``len(nbr)``, ``nbr`` was left unfilled and the caller must retry with
        a larger array.
    """
    n = pos.shape[0]
    coords, ncell, n_buckets, offsets, order = _bin_beads(pos, box, periodic, r_list)
    inv_box = 1.0 / box
    r2_list = r_list * r_list
    n_chunks = chunk_count(n)
    for c in prange(n_chunks):
        lo, hi = chunk_bounds(n, n_chunks, c)
        near = np.empty(27, dtype=np.int64)
        for i in range(lo, hi):
            start[i + 1] = _scan_row(i, pos, box, inv_box, periodic, r2_list, coords, ncell, n_buckets, offsets,
                                     order, excl_start, excl, near, nbr, -1)
    start[0] = 0
    for i in range(n):
        start[i + 1] += start[i]
    found = start[n]
    if found <= nbr.shape[0]:
        for c in prange(n_chunks):
            lo, hi = chunk_bounds(n, n_chunks, c)
            near = np.empty(27, dtype=np.int64)
            for i in range(lo, hi):
                _scan_row(i, pos, box, inv_box, periodic, r2_list, coords, ncell, n_buckets, offsets, order,
                          excl_start, excl, near, nbr, start[i])
    return found


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
