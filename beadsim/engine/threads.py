"""How many threads the compiled kernels use.

The force, list and update kernels split their beads into fixed blocks
(:mod:`beadsim.kernels.chunks`), so results do not depend on the thread count;
only the speed does.
"""

from contextlib import contextmanager

import numba

from .._validate import positive_int

#: Systems smaller than this run on one thread. Measured on the idle 2-core development machine
#: (analysis/benchmarks.md, commits 16ca0b8-91fb1d0), two threads ran 1.4 times faster than one at 1,000 beads and
#: 1.2-1.3 times at 250-500; under heavy oversubscription (commit ed5e1f8, load 12-19 on 2 cores) one
#: thread had been 1.7-2.4 times faster at 1,000-2,000 beads. From 1,000 beads on, threads pay on an
#: idle machine; smaller chains, the usual single-chain study, stay on one thread.
PARALLEL_MIN_BEADS = 1000


def set_threads(threads):
    """Use ``threads`` threads (at most the ``NUMBA_NUM_THREADS`` numba started with) for the kernels.

    Parameters
    ----------
    threads : int
        Number of threads, >= 1.

    Returns
    -------
    int
        The previous thread count.
    """
    threads = positive_int(threads, "threads")
    previous = numba.get_num_threads()
    numba.set_num_threads(min(threads, numba.config.NUMBA_NUM_THREADS))
    return previous


@contextmanager
def threads_for(n_beads):
    """Run the kernels of an ``n_beads`` system on one thread if it is below ``PARALLEL_MIN_BEADS``."""
    threads = numba.get_num_threads()
    if n_beads < PARALLEL_MIN_BEADS:
        numba.set_num_threads(1)
    try:
        yield
    finally:
        numba.set_num_threads(threads)
