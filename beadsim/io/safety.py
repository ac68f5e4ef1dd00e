"""Reading users' files without running their code.

Every file beadsim reads is parsed as data: TOML (``tomllib``), CSV, text
tables (``numpy.loadtxt``), checkpoints (``numpy.load(allow_pickle=False)``),
SQLite and trajectories through mdtraj. One library on that path would
unpickle: PyTables, which mdtraj's HDF5 reader uses, turns every byte-string
attribute that ends in ``"."`` into a Python object with :func:`pickle.loads`
when the attribute is read, so a crafted ``.h5`` file could run code when it is
opened. :func:`refusing_pickles` wraps such reads: while it is active,
PyTables' unpickling raises instead, and the read fails with an
:class:`~beadsim.errors.InputError` naming the file.
"""

import contextlib
import os
import pickle
import threading
import types

import tables.attributeset

from ..errors import InputError

__all__ = ["refusing_pickles"]

_lock = threading.RLock()


class _PickleRefused(Exception):
    """Raised in place of unpickling an HDF5 attribute."""


_refused = threading.local()


def _refuse(*args, **kwargs):
    # PyTables may swallow this exception and keep the raw bytes; the flag makes the refusal stick
    _refused.seen = True
    raise _PickleRefused("an HDF5 attribute holds a pickled Python object")


#: Stands in for the ``pickle`` module inside PyTables' attribute reader: writing works, reading refuses.
_NO_UNPICKLING = types.SimpleNamespace(loads=_refuse, dumps=pickle.dumps, UnpicklingError=pickle.UnpicklingError,
                                       HIGHEST_PROTOCOL=pickle.HIGHEST_PROTOCOL)


@contextlib.contextmanager
def refusing_pickles(path):
    """Context manager: HDF5 reads inside it refuse pickled attributes instead of unpickling them.

    Parameters
    ----------
    path : str or os.PathLike
        The file being read, named in the error.

    Raises
    ------
    beadsim.errors.InputError
        The file holds a pickled attribute; nothing was unpickled.

    Notes
    -----
    The guard replaces the module-level ``pickle`` name of
    ``tables.attributeset`` for the duration of the block (under a lock, so
    threads reading at the same time wait for each other) and restores it
    afterwards, also when the block raises.
    """
    message = (f"{os.fspath(path)}: holds a pickled Python object in an HDF5 attribute; refused, because "
               "loading it could run arbitrary code (beadsim and mdtraj never write such attributes)")
    with _lock:
        saved = tables.attributeset.pickle
        tables.attributeset.pickle = _NO_UNPICKLING
        _refused.seen = False
        try:
            yield
        except _PickleRefused:
            raise InputError(message) from None
        finally:
            tables.attributeset.pickle = saved
        if _refused.seen:
            raise InputError(message)
