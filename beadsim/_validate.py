"""One place for argument checks at the public boundary.

Each helper names the argument, what was expected and what was received, and
raises :class:`beadsim.errors.InputError`.
"""

import math

import numpy as np

from .errors import InputError


def as_array(value, name, *, shape=None, dtype=np.float64, finite=True):
    """Convert ``value`` to a C-contiguous array and check its shape and values.

    Parameters
    ----------
    value : array_like
        The user's value.
    name : str
        Argument name used in the error message.
    shape : tuple of (int or None), optional
        Expected shape; ``None`` entries match any length.
    dtype : numpy dtype
        Target dtype (float64 or an integer type).
    finite : bool
        Reject NaN and infinity (floating dtypes only).

    Returns
    -------
    numpy.ndarray
    """
    try:
        arr = np.ascontiguousarray(value, dtype=dtype)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name}: expected an array of {np.dtype(dtype).name}, got {type(value).__name__} ({exc})") from None
    if shape is not None:
        ok = arr.ndim == len(shape) and all(s is None or s == a for s, a in zip(shape, arr.shape))
        if not ok:
            want = "(" + ", ".join("any" if s is None else str(s) for s in shape) + ")"
            raise InputError(f"{name}: expected shape {want}, got {arr.shape}")
    if finite and np.issubdtype(arr.dtype, np.floating) and not np.all(np.isfinite(arr)):
        bad = np.argwhere(~np.isfinite(arr))[0]
        raise InputError(f"{name}: contains NaN or infinity (first at index {tuple(int(i) for i in bad)})")
    return arr


def positive(value, name, *, allow_zero=False):
    """Return ``float(value)`` if it is a finite positive number, else raise InputError."""
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected a number, got {value!r}") from None
    if not math.isfinite(x) or x < 0 or (x == 0 and not allow_zero):
        rule = ">= 0" if allow_zero else "> 0"
        raise InputError(f"{name}: must be a finite number {rule}, got {value!r}")
    return x


def positive_int(value, name, *, allow_zero=False):
    """Return ``int(value)`` if it is a positive integer (not a bool), else raise InputError."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise InputError(f"{name}: expected an integer, got {value!r}")
    if value < 0 or (value == 0 and not allow_zero):
        rule = ">= 0" if allow_zero else ">= 1"
        raise InputError(f"{name}: must be an integer {rule}, got {value!r}")
    return int(value)


def interval(value, name):
    """Return ``(lo, hi)`` as floats if ``value`` is a pair of numbers, neither NaN (infinite ends allowed).

    Used for inclusive windows such as fit ranges. ``lo > hi`` is accepted: the
    window is then empty and the caller reports too few points in it.
    """
    wrong = InputError(f"{name}: expected a pair of numbers (low, high), got {value!r}")
    if not isinstance(value, (tuple, list, np.ndarray)):
        raise wrong
    try:
        lo, hi = (float(v) for v in value)
    except (TypeError, ValueError):
        raise wrong from None
    if math.isnan(lo) or math.isnan(hi):
        raise InputError(f"{name}: expected (low, high) without NaN, got {value!r}")
    return lo, hi
