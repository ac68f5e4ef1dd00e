"""Execution backends for studies: submit a task, get a future, cancel.

Every backend runs ``fn(arg)`` somewhere and returns an object with the
:class:`concurrent.futures.Future` interface (``done``, ``result``,
``exception``, ``cancel``). ``BACKENDS`` maps names to classes; a user's own
class with the same methods may be passed instead of a name.

The contract of a backend:

1. ``with backend:`` starts (or connects to) the workers and stops them on exit,
   cancelling tasks not yet finished when the block ends with an exception.
2. ``submit(fn, arg)`` schedules ``fn(arg)`` and returns a future; ``fn`` must
   be importable on the workers and safe to run again (a point resumes from
   its checkpoint).
3. ``wait_any(futures)`` blocks until at least one future is done and returns
   the done ones.
4. ``slots`` is the number of tasks that can run at the same time.
5. ``broken_errors`` are the exception types after which the backend needs
   ``restart()`` before it can take new tasks.
"""

import concurrent.futures as cf
from concurrent.futures.process import BrokenProcessPool
import importlib.util
import logging
import multiprocessing
import os
import threading
import time
import weakref

from .._validate import positive_int
from ..errors import InputError

log = logging.getLogger(__name__)

#: Environment of a worker: one numba thread (numba reads NUMBA_NUM_THREADS when it is imported and ignores
#: the thread variables dask sets) and one BLAS/OpenMP thread.
ONE_THREAD = {"NUMBA_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}


def _pin_one_thread():
    """One numba thread in this worker process.

    numba is already imported here (unpickling this function imports beadsim), so the
    thread count is set through numba itself: changing ``NUMBA_NUM_THREADS`` in the
    environment after import makes numba refuse to compile later ("cannot set
    NUMBA_NUM_THREADS to a different value once the threads have been launched").
    """
    import numba
    numba.set_num_threads(1)


#: Seconds between a local worker's checks that its coordinator is still alive.
PARENT_CHECK_SECONDS = 1.0


def _start_worker(coordinator):
    """Initialise a local-pool worker: one numba thread, and exit when the coordinator is gone.

    A coordinator killed outright (kill -9, an out-of-memory kill) cannot stop its
    workers, and a worker only notices the broken pipe after its current point, which
    may run for hours while a resumed sweep runs the same point again. A daemon
    thread therefore checks every :data:`PARENT_CHECK_SECONDS` whether the worker
    has been re-parented and then ends the process at once; the point resumes from
    its last checkpoint in the next sweep.
    """
    _pin_one_thread()

    def watch():
        while os.getppid() == coordinator:
            time.sleep(PARENT_CHECK_SECONDS)
        log.warning("coordinator %d is gone; worker %d stops", coordinator, os.getpid())
        os._exit(3)

    threading.Thread(target=watch, name="beadsim-coordinator-watch", daemon=True).start()


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
                                            initializer=_start_worker, initargs=(os.getpid(),))
        return self

    def __exit__(self, *exc):
        self.shutdown(cancel=exc[0] is not None)

    @property
    def slots(self):
        """Tasks running at the same time: one per worker process."""
        return self.workers

    def submit(self, fn, arg):
        """Schedule ``fn(arg)`` with numba on one thread; return a Future."""
        return self._pool.submit(_run_one_thread, fn, arg)

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


def _run_one_thread(fn, arg):
    """Task wrapper: ``fn(arg)`` with numba on one thread, also on workers started without NUMBA_NUM_THREADS=1."""
    _pin_one_thread()
    return fn(arg)


CLUSTER_FORMS = "'local', 'local:N' (N >= 1 worker processes on this machine) or the address of a running " \
                "scheduler, 'tcp://HOST:PORT' or 'tls://HOST:PORT'"


def parse_cluster(cluster, workers=None):
    """Check a ``--cluster`` value against ``--workers``; return ``(address, n_local_workers)``.

    Parameters
    ----------
    cluster : str
        ``"local"``, ``"local:N"``, ``"tcp://HOST:PORT"`` or ``"tls://HOST:PORT"``.
    workers : int, optional
        Worker count asked for separately; sets N of ``"local"``, must equal N of ``"local:N"``
        and cannot be combined with a scheduler address (its workers are started with ``dask worker``).

    Returns
    -------
    tuple
        ``(None, n)`` for a local cluster of ``n`` workers, ``(address, None)`` for a scheduler.

    Raises
    ------
    InputError
        Naming the option and the allowed forms.
    """
    text = str(cluster).strip()
    kind, _, rest = text.partition(":")
    if kind == "local":
        if rest and not (rest.isdigit() and int(rest) >= 1):
            raise InputError(f"--cluster: '{cluster}' has no valid worker count; use {CLUSTER_FORMS}")
        n = int(rest) if rest else None
        if workers is not None:
            workers = positive_int(workers, "--workers")
            if n is not None and n != workers:
                raise InputError(f"--workers {workers} contradicts --cluster {cluster}; give the worker count once")
        return None, n or workers or os.cpu_count() or 1
    host, _, port = rest.removeprefix("//").rpartition(":")
    if kind not in ("tcp", "tls") or not rest.startswith("//") or not host or not port.isdigit():
        raise InputError(f"--cluster: '{cluster}' is not understood; use {CLUSTER_FORMS}")
    if workers is not None:
        raise InputError(f"--workers applies to this machine's workers, not to the scheduler at {cluster} "
                         "(start its workers with 'dask worker'); drop --workers")
    return text, None


class DaskCluster:
    """Dask distributed: a scheduler already running, or a LocalCluster started on 127.0.0.1.

    A worker that dies while running a point is noticed by the scheduler, which
    runs the point again on another worker (up to the scheduler's
    ``distributed.scheduler.allowed-failures`` deaths per task, then the future
    fails with ``KilledWorker`` and the study counts a failed attempt); the point
    resumes from its own checkpoint. An exception raised by a point is not
    retried by dask: the study store counts it and retries up to
    ``max_attempts``.

    Parameters
    ----------
    workers : int, optional
        Worker processes of a local cluster (see :func:`parse_cluster`).
    cluster : str
        ``"local"``, ``"local:N"`` or a scheduler address ``"tcp://HOST:PORT"`` / ``"tls://HOST:PORT"``.
    security : distributed.Security, optional
        TLS certificates for a ``tls://`` scheduler (default: dask's configuration).
    """

    name = "dask"

    def __init__(self, workers=None, cluster="local", security=None):
        self.address, self.workers = parse_cluster(cluster, workers)
        self.security = security
        self._cluster = None
        self._client = None
        self._futures = weakref.WeakSet()  # submitted and still referenced by the caller

    def __enter__(self):
        from distributed import Client, LocalCluster

        # distributed sets its loggers to INFO when imported; follow beadsim's level instead (-v shows both)
        logging.getLogger("distributed").setLevel(logging.INFO if log.isEnabledFor(logging.INFO) else logging.WARNING)
        if self.address is None:
            # loopback only and no dashboard: nothing listens on a network other programs can reach; the
            # scheduler's small HTTP server (health, metrics) takes a free loopback port instead of 8787
            self._cluster = LocalCluster(n_workers=self.workers, threads_per_worker=1, processes=True,
                                         host="127.0.0.1", dashboard_address=None, env=ONE_THREAD,
                                         scheduler_kwargs={"dashboard_address": "127.0.0.1:0"})
            self._client = Client(self._cluster)
        else:
            try:
                self._client = Client(self.address, security=self.security, timeout="20s")
            except OSError as exc:
                raise InputError(f"--cluster: cannot reach a dask scheduler at {self.address} ({exc})") from None
        self._check_workers()
        return self

    def _check_workers(self):
        """Raise InputError if a worker cannot import beadsim (points are shipped by reference, not by value)."""
        specs = self._client.run(importlib.util.find_spec, "beadsim")
        missing = [worker for worker, spec in specs.items() if spec is None]
        if missing:
            self.shutdown(cancel=True)
            raise InputError(f"--cluster: worker(s) {', '.join(missing)} cannot import beadsim; install the package "
                             "in the environment the workers run in")

    def __exit__(self, *exc):
        self.shutdown(cancel=exc[0] is not None)

    @property
    def scheduler_address(self):
        """Address of the scheduler in use, e.g. ``tcp://127.0.0.1:40321``."""
        return self._client.scheduler.address

    @property
    def slots(self):
        """Tasks running at the same time: the worker threads the scheduler knows now (at least one).

        With no worker connected (a scheduler started before its workers, or every worker
        restarting) this waits for one, rather than reporting no room to run anything.
        """
        threads = self._client.nthreads()
        if not threads:
            log.warning("waiting for a dask worker to connect to %s", self.scheduler_address)
            self._client.wait_for_workers(1)
            threads = self._client.nthreads()
        return sum(threads.values())

    def submit(self, fn, arg):
        """Schedule ``fn(arg)`` with numba on one thread; return a distributed Future.

        ``pure=False`` gives every submission its own key: a point retried after a
        failure runs again instead of returning the failed result.
        """
        future = self._client.submit(_run_one_thread, fn, arg, pure=False)
        self._futures.add(future)
        return future

    def shutdown(self, cancel=False):
        """Disconnect (and stop a local cluster); with ``cancel`` drop this client's unfinished tasks.

        A step that times out or finds its connection gone (on a heavily loaded machine closing
        can take longer than dask waits) is logged, not raised, and the next step is still taken:
        callers write their results before shutting down, so nothing is lost.
        """
        client, self._client = self._client, None
        cluster, self._cluster = self._cluster, None
        if client is not None:
            if cancel:
                _close_step("cancelling the unfinished tasks", client.cancel, list(self._futures))
            _close_step("closing the client", client.close)
        if cluster is not None:
            _close_step("stopping the local cluster", cluster.close)

    def restart(self):
        """Restart every worker process (not needed after a worker dies: dask replaces it and reruns its task)."""
        self._client.restart()

    @staticmethod
    def wait_any(futures):
        """Block until at least one future is done; return the done ones."""
        from distributed import wait
        return wait(futures, return_when="FIRST_COMPLETED").done

    broken_errors = ()


def _close_step(what, fn, *args):
    """Run one step of a dask shutdown; log a timeout or a lost connection instead of raising it."""
    try:
        fn(*args)
    except (TimeoutError, OSError) as exc:  # dask's CommClosedError is an OSError
        log.warning("dask shutdown: %s failed (%s: %s); carrying on, the finished tasks' results are in hand", what,
                    type(exc).__name__, exc)


BACKENDS = {"local": LocalPool, "dask": DaskCluster}


def make_backend(backend="local", *, workers=None, cluster=None):
    """A backend instance from a name (or class), a worker count and a ``cluster`` for dask.

    Parameters
    ----------
    backend : str or class
        A key of :data:`BACKENDS` or a class with the backend interface.
    workers : int, optional
        Worker processes on this machine.
    cluster : str, optional
        Only for ``"dask"``: see :func:`parse_cluster`.

    Raises
    ------
    InputError
        For an unknown backend or a ``cluster`` given to a backend without one.
    """
    from ..model.potentials import lookup

    cls = lookup(BACKENDS, backend, "backend")
    if cluster is None:
        return cls(workers)
    if not issubclass(cls, DaskCluster):
        raise InputError(f"cluster: only the 'dask' backend connects to a cluster, not '{backend}'")
    return cls(workers, cluster=cluster)
