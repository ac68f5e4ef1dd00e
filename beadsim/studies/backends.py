"""Execution backends for studies: submit a task, get a future, cancel.

Every backend runs ``fn(arg)`` somewhere and returns an object with the
:class:`concurrent.futures.Future` interface (``done``, ``result``,
``exception``, ``cancel``). ``BACKENDS`` maps names to classes; a user's own
class with the same methods may be passed instead of a name.
"""

import concurrent.futures as cf
from concurrent.futures.process import BrokenProcessPool
import multiprocessing
import os

from .._validate import positive_int


def _pin_one_thread():
    """Worker initialiser: one numba thread per worker process (set before numba is imported)."""
    os.environ["NUMBA_NUM_THREADS"] = "1"
    os.environ["OMP_NUM_THREADS"] = "1"


class LocalPool:
    """A pool of worker processes on this machine (the default backend).

    Parameters
    ----------
    workers : int, optional
        Number of processes; defaults to the number of cores.
    """

    name = "local"

    def __init__(self, workers=None):
        self.workers = positive_int(workers, "workers") if workers else (os.cpu_count() or 1)
        self._pool = None

    def __enter__(self):
        self._pool = cf.ProcessPoolExecutor(max_workers=self.workers, mp_context=multiprocessing.get_context("spawn"),
                                            initializer=_pin_one_thread)
        return self

    def __exit__(self, *exc):
        self.shutdown(cancel=exc[0] is not None)

    def submit(self, fn, arg):
        """Schedule ``fn(arg)``; return a Future."""
        return self._pool.submit(fn, arg)

    def shutdown(self, cancel=False):
        """Stop the workers; with ``cancel`` drop tasks not yet started."""
        if self._pool is not None:
            self._pool.shutdown(wait=not cancel, cancel_futures=cancel)
            self._pool = None

    def restart(self):
        """Replace a pool whose worker died."""
        self.shutdown(cancel=True)
        self.__enter__()

    @staticmethod
    def wait_any(futures):
        """Block until at least one future is done; return the done ones."""
        done, _ = cf.wait(futures, return_when=cf.FIRST_COMPLETED)
        return done

    broken_errors = (BrokenProcessPool,)


BACKENDS = {"local": LocalPool}
