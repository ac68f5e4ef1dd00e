"""Cell-list construction of half Verlet lists, for open and periodic boxes.

Beads are binned into cubic cells at least ``r_list`` wide. In a periodic box the
cells tile the box and are indexed directly. In an open box the cell coordinates
are unbounded, so cells are hashed into ``2**k >= 2 n`` buckets (Teschner et al.,
VMV 2003): memory stays O(n) however swollen the chain, and a hash collision only
adds candidates that the distance test then rejects. Neighbour buckets of a cell
are de-duplicated so small periodic grids and collisions never double-count.

The list is "half": bead ``j`` is stored under bead ``i`` only for ``j > i``, in
compressed rows (``start[i]:start[i+1]`` indexes ``nbr``).
"""

import math

import numpy as np
from numba import njit

_HASH_X = 73856093
_HASH_Y = 19349663
_HASH_Z = 83492791


@njit(cache=True, inline="always")
def minimum_image(d, length, periodic):
    """Nearest periodic image of a coordinate difference (identity if not periodic)."""
    if periodic:
        return d - length * np.rint(d / length)
    return d


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
def build_half_list(pos, box, periodic, r_list, excl_start, excl, start, nbr):
    """Fill a half Verlet list of all pairs closer than ``r_list``.

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
    nbr : int64 (capacity,)
        Output neighbour indices.

    Returns
    -------
    int
        Number of pairs found. If larger than ``len(nbr)`` the list is
        incomplete and the caller must retry with a larger ``nbr``.
    """
    n = pos.shape[0]
    coords, ncell, n_buckets = _cell_layout(pos, box, periodic, r_list)
    key = np.empty(n, dtype=np.int64)
    count = np.zeros(n_buckets + 1, dtype=np.int64)
    for i in range(n):
        key[i] = _bucket(coords[i, 0], coords[i, 1], coords[i, 2], ncell, periodic, n_buckets)
        count[key[i] + 1] += 1
    for b in range(n_buckets):
        count[b + 1] += count[b]
    order = np.empty(n, dtype=np.int64)
    fill = count[:-1].copy()
    for i in range(n):
        order[fill[key[i]]] = i
        fill[key[i]] += 1

    r2_list = r_list * r_list
    capacity = nbr.shape[0]
    found = 0
    near = np.empty(27, dtype=np.int64)
    for i in range(n):
        start[i] = found
        n_near = 0
        for ox in range(-1, 2):
            for oy in range(-1, 2):
                for oz in range(-1, 2):
                    b = _bucket(coords[i, 0] + ox, coords[i, 1] + oy, coords[i, 2] + oz,
                                ncell, periodic, n_buckets)
                    seen = False
                    for m in range(n_near):
                        if near[m] == b:
                            seen = True
                            break
                    if not seen:
                        near[n_near] = b
                        n_near += 1
        for m in range(n_near):
            b = near[m]
            for k in range(count[b], count[b + 1]):
                j = order[k]
                if j <= i:
                    continue
                r2 = 0.0
                for d in range(3):
                    dd = minimum_image(pos[j, d] - pos[i, d], box[d], periodic)
                    r2 += dd * dd
                if r2 < r2_list and not _is_excluded(i, j, excl_start, excl):
                    if found < capacity:
                        nbr[found] = j
                    found += 1
    start[n] = found
    return found


@njit(cache=True)
def max_displacement_sq(pos, ref):
    """Largest squared displacement of any bead since ``ref`` (float64 (n, 3) each)."""
    best = 0.0
    for i in range(pos.shape[0]):
        d2 = 0.0
        for d in range(3):
            dd = pos[i, d] - ref[i, d]
            d2 += dd * dd
        if d2 > best:
            best = d2
    return best
