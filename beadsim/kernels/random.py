"""Counter-based random numbers for the thermostat and the chain builders.

The n-th number of a stream is a pure function of ``(seed, n)``: the SplitMix64
generator (Steele, Lea and Flood, OOPSLA 2014) evaluated at position ``n``.
A run's random state is therefore just its seed and step count, which makes
checkpoints exact, results independent of thread count, and the thermostat
free of any Python work per step.
"""

import math

import numpy as np
from numba import njit

_GAMMA = np.uint64(0x9E3779B97F4A7C15)
_M1 = np.uint64(0xBF58476D1CE4E5B9)
_M2 = np.uint64(0x94D049BB133111EB)
_S30 = np.uint64(30)
_S27 = np.uint64(27)
_S31 = np.uint64(31)
_S11 = np.uint64(11)
_TWO_M53 = 1.0 / 9007199254740992.0  # 2**-53


@njit(cache=True, inline="always")
def splitmix64(seed, counter):
    """Return the ``counter``-th 64-bit output of the SplitMix64 stream ``seed``."""
    z = np.uint64(seed) + (np.uint64(counter) + np.uint64(1)) * _GAMMA
    z = (z ^ (z >> _S30)) * _M1
    z = (z ^ (z >> _S27)) * _M2
    return z ^ (z >> _S31)


@njit(cache=True, inline="always")
def uniform_open(seed, counter):
    """Uniform double in (0, 1) from stream position ``counter`` (never exactly 0)."""
    return ((splitmix64(seed, counter) >> _S11) + 0.5) * _TWO_M53


@njit(cache=True, inline="always")
def normal_pair(seed, counter):
    """Two independent standard normal deviates (Box-Muller) from positions 2*counter, 2*counter+1."""
    u1 = uniform_open(seed, 2 * counter)
    u2 = uniform_open(seed, 2 * counter + 1)
    rad = math.sqrt(-2.0 * math.log(u1))
    ang = 2.0 * math.pi * u2
    return rad * math.cos(ang), rad * math.sin(ang)


@njit(cache=True)
def fill_normal(seed, first, out):
    """Fill the flat float64 array ``out`` with standard normals from stream position ``first``.

    Consumes ``ceil(len(out) / 2)`` Box-Muller pairs starting at pair index ``first``.
    """
    n = out.shape[0]
    for k in range((n + 1) // 2):
        a, b = normal_pair(seed, first + k)
        out[2 * k] = a
        if 2 * k + 1 < n:
            out[2 * k + 1] = b


def normal_reference(seed, first, n):
    """Plain-NumPy twin of :func:`fill_normal` (same stream, same order)."""
    seed = np.uint64(seed)
    k = np.arange((n + 1) // 2, dtype=np.uint64) + np.uint64(first)

    def mix(c):
        with np.errstate(over="ignore"):
            z = seed + (c + np.uint64(1)) * _GAMMA
            z = (z ^ (z >> _S30)) * _M1
            z = (z ^ (z >> _S27)) * _M2
        return z ^ (z >> _S31)

    u1 = ((mix(np.uint64(2) * k) >> _S11) + 0.5) * _TWO_M53
    u2 = ((mix(np.uint64(2) * k + np.uint64(1)) >> _S11) + 0.5) * _TWO_M53
    rad = np.sqrt(-2.0 * np.log(u1))
    out = np.empty(2 * len(k))
    out[0::2] = rad * np.cos(2 * np.pi * u2)
    out[1::2] = rad * np.sin(2 * np.pi * u2)
    return out[:n]
