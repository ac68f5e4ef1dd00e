"""Checkpoints: the arrays and settings needed to continue a run, as a NumPy ``.npz`` file.

A checkpoint holds named numeric arrays (positions, velocities, random
generator words, ...) and a JSON document of metadata (step count, time, the
random generator's state, frame and row counts of the outputs, ...). The JSON
text is stored inside the archive as a zero-dimensional unicode array under
the reserved name :data:`META_KEY`, never as a pickled object, and files are
read with ``allow_pickle=False``: opening a checkpoint can never run code.

Writes are atomic (see :mod:`beadsim.io._atomic`): a crash or a full disk
while writing leaves the previous checkpoint at the same path intact.
"""

import json
import logging
import os
import zipfile

import numpy as np

from ..errors import CheckpointError, InputError
from ._atomic import replacing

__all__ = ["META_KEY", "write_checkpoint", "read_checkpoint"]

logger = logging.getLogger(__name__)

#: Name of the archive member holding the metadata as JSON text.
META_KEY = "meta_json"


def _json_default(value):
    """Turn NumPy scalars and arrays in metadata into plain Python values for JSON."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


def write_checkpoint(path, arrays, meta):
    """Write a checkpoint atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Target file, conventionally ending in ``.npz``; its folder must exist.
        An existing checkpoint there is replaced only once the new one is
        completely on disk.
    arrays : dict of str to array_like
        Numeric or string arrays of any shape, e.g. ``positions`` float64
        ``(n_beads, 3)`` in sigma. Object arrays are refused. The key
        :data:`META_KEY` is reserved.
    meta : dict
        JSON-serialisable metadata (NumPy scalars and arrays are converted to
        plain numbers and lists). Floats keep their exact value.

    Raises
    ------
    beadsim.errors.InputError
        An array has object dtype, a key is reserved, or ``meta`` cannot be
        written as JSON.
    beadsim.errors.CheckpointError
        The file could not be written (for instance the disk is full); the
        previous file at ``path`` is untouched and no temporary file remains.
    """
    if not isinstance(arrays, dict):
        raise InputError(f"arrays: expected a dict of name -> array, got {type(arrays).__name__}")
    if not isinstance(meta, dict):
        raise InputError(f"meta: expected a dict, got {type(meta).__name__}")
    if META_KEY in arrays:
        raise InputError(f"arrays: the name {META_KEY!r} is reserved for the metadata")
    checked = {}
    for name, value in arrays.items():
        if not isinstance(name, str) or not name.isidentifier():
            raise InputError(f"arrays: names must be Python identifiers, got {name!r}")
        arr = np.asarray(value)
        if arr.dtype.hasobject:
            raise InputError(f"arrays[{name!r}]: object arrays cannot be stored in a checkpoint; "
                             "convert to a numeric or string dtype")
        checked[name] = arr
    try:
        meta_text = json.dumps(meta, default=_json_default, sort_keys=True)
    except (TypeError, ValueError) as exc:
        raise InputError(f"meta: cannot be written as JSON ({exc})") from None
    checked[META_KEY] = np.array(meta_text, dtype=np.str_)
    try:
        with replacing(path) as fh:
            np.savez(fh, **checked)
    except OSError as exc:
        raise CheckpointError(f"cannot write checkpoint {os.fspath(path)!r}: {exc.strerror or exc}; "
                              "the previous checkpoint (if any) is unchanged") from exc
    logger.debug("checkpoint written to %s (%d arrays)", path, len(arrays))


def read_checkpoint(path):
    """Read a checkpoint written by :func:`write_checkpoint`.

    Parameters
    ----------
    path : str or os.PathLike
        The ``.npz`` file.

    Returns
    -------
    arrays : dict of str to numpy.ndarray
        The stored arrays with their dtypes and shapes.
    meta : dict
        The metadata as decoded from JSON.

    Raises
    ------
    beadsim.errors.CheckpointError
        The file is missing, truncated or corrupt, lacks the metadata, or holds
        a pickled object (refused without being unpickled).
    """
    name = os.fspath(path)
    try:
        with np.load(name, allow_pickle=False) as archive:
            arrays = {key: archive[key] for key in archive.files}
    except FileNotFoundError:
        raise CheckpointError(f"checkpoint {name!r} does not exist") from None
    except ValueError as exc:
        if "allow_pickle" in str(exc):
            raise CheckpointError(f"checkpoint {name!r} holds a pickled Python object; refused, because "
                                  "loading it could run arbitrary code (beadsim never writes such files)") from None
        raise CheckpointError(f"checkpoint {name!r} is corrupt or not a NumPy .npz archive ({exc})") from None
    except (OSError, EOFError, zipfile.BadZipFile) as exc:
        raise CheckpointError(f"checkpoint {name!r} is truncated or corrupt ({exc})") from None
    if META_KEY not in arrays:
        raise CheckpointError(f"checkpoint {name!r} has no {META_KEY!r} entry; it was not written by beadsim")
    meta_array = arrays.pop(META_KEY)
    if meta_array.dtype.kind != "U" or meta_array.ndim != 0:
        raise CheckpointError(f"checkpoint {name!r}: {META_KEY!r} must be a unicode scalar, "
                              f"got dtype {meta_array.dtype} shape {meta_array.shape}")
    try:
        meta = json.loads(str(meta_array))
    except json.JSONDecodeError as exc:
        raise CheckpointError(f"checkpoint {name!r}: metadata is not valid JSON ({exc})") from None
    return arrays, meta
