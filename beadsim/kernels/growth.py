"""Random-walk growth of chains with overlap rejection.

Each new bead is placed one bond length from its predecessor in a uniformly
random direction and kept only if no earlier bead lies closer than
``min_distance`` (checked through a hashed cell grid, as in
:mod:`beadsim.kernels.neighbors`). A bead that finds no free spot after
``max_tries`` directions restarts its whole chain from a new origin.
"""

import math

import numpy as np
from numba import njit

from .neighbors import _bucket, minimum_image
from .random import uniform_open


@njit(cache=True)
def _too_close(p, pos, head, nxt, cell, ncell, periodic, n_buckets, box, min2):
    for ox in range(-1, 2):
        for oy in range(-1, 2):
            for oz in range(-1, 2):
                j = head[_bucket(cell[0] + ox, cell[1] + oy, cell[2] + oz, ncell, periodic, n_buckets)]
                while j >= 0:
                    r2 = 0.0
                    for d in range(3):
                        dd = minimum_image(pos[j, d] - p[d], box[d], periodic)
                        r2 += dd * dd
                    if r2 < min2:
                        return True
                    j = nxt[j]
    return False


@njit(cache=True)
def _cell_of(p, box, periodic, ncell, width, cell):
    for d in range(3):
        if periodic:
            x = p[d] - box[d] * math.floor(p[d] / box[d])
            cell[d] = min(int(x * ncell[d] / box[d]), ncell[d] - 1)
        else:
            cell[d] = int(math.floor(p[d] / width))


@njit(cache=True)
def grow_chains(chain_lengths, bond_length, min_distance, box, periodic, origin_box, seed, max_tries):
    """Grow chains one bead at a time.

    Parameters
    ----------
    chain_lengths : int64 (n_chains,)
    bond_length, min_distance : float
        Bond length and smallest allowed distance between any two beads, sigma.
    box : float64 (3,)
        Periodic box lengths (ignored when open).
    periodic : bool
    origin_box : float64 (3,)
        Chain origins are uniform in [0, origin_box).
    seed : int
        Stream seed.
    max_tries : int
        Directions tried per bead before the chain is restarted.

    Returns
    -------
    pos : float64 (n, 3)
        Unwrapped positions.
    restarts : int
        Number of chain restarts; -1 if a chain failed 1000 restarts.
    """
    n = int(chain_lengths.sum())
    pos = np.zeros((n, 3))
    ncell = np.ones(3, dtype=np.int64)
    if periodic:
        for d in range(3):
            ncell[d] = max(1, int(math.floor(box[d] / min_distance)))
        n_buckets = ncell[0] * ncell[1] * ncell[2]
    else:
        n_buckets = 1
        while n_buckets < 2 * n:
            n_buckets *= 2
    head = -np.ones(n_buckets, dtype=np.int64)
    nxt = -np.ones(n, dtype=np.int64)
    cell = np.zeros(3, dtype=np.int64)
    trial = np.zeros(3)
    min2 = min_distance * min_distance
    counter = 0
    restarts = 0
    first = 0
    for c in range(chain_lengths.shape[0]):
        length = chain_lengths[c]
        placed = 0
        while placed < length:
            i = first + placed
            ok = False
            for _ in range(max_tries):
                if placed == 0:
                    for d in range(3):
                        trial[d] = origin_box[d] * uniform_open(seed, counter)
                        counter += 1
                else:
                    cos_t = 2.0 * uniform_open(seed, counter) - 1.0
                    phi = 2.0 * math.pi * uniform_open(seed, counter + 1)
                    counter += 2
                    sin_t = math.sqrt(max(0.0, 1.0 - cos_t * cos_t))
                    trial[0] = pos[i - 1, 0] + bond_length * sin_t * math.cos(phi)
                    trial[1] = pos[i - 1, 1] + bond_length * sin_t * math.sin(phi)
                    trial[2] = pos[i - 1, 2] + bond_length * cos_t
                _cell_of(trial, box, periodic, ncell, min_distance, cell)
                if not _too_close(trial, pos, head, nxt, cell, ncell, periodic, n_buckets, box, min2):
                    ok = True
                    break
            if ok:
                pos[i] = trial
                b = _bucket(cell[0], cell[1], cell[2], ncell, periodic, n_buckets)
                nxt[i] = head[b]
                head[b] = i
                placed += 1
            else:
                # undo this chain: unlink its beads (they are the newest in every bucket list)
                for k in range(first + placed - 1, first - 1, -1):
                    _cell_of(pos[k], box, periodic, ncell, min_distance, cell)
                    b = _bucket(cell[0], cell[1], cell[2], ncell, periodic, n_buckets)
                    head[b] = nxt[k]
                    nxt[k] = -1
                placed = 0
                restarts += 1
                if restarts > 1000 * chain_lengths.shape[0]:
                    return pos, -1
        first += length
    return pos, restarts
