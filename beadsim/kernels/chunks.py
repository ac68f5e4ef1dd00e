"""Fixed work chunks for deterministic parallel loops.

Parallel loops run over ``N_CHUNKS`` contiguous blocks of beads (fewer for tiny
systems) whatever the thread count; each block writes its own partial sum and
the partials are added serially in block order. Sums therefore round the same
way on any number of threads, which keeps runs bit-identical when resumed.
"""

from numba import njit

N_CHUNKS = 256


@njit(cache=True, inline="always")
def chunk_count(n):
    """Number of blocks for ``n`` items (at least 1)."""
    return max(1, min(n, N_CHUNKS))


@njit(cache=True, inline="always")
def chunk_bounds(n, n_chunks, c):
    """Half-open item range ``(lo, hi)`` of block ``c`` of ``n_chunks`` over ``n`` items."""
    return (c * n) // n_chunks, ((c + 1) * n) // n_chunks

