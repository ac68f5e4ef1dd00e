"""Numba kernels: plain arrays in, plain arrays out; no classes, validation or I/O.

Each kernel is named after its mathematics and has a plain-NumPy twin
(in :mod:`beadsim.engine.reference` or beside the analysis that uses it) that
the tests compare against.

Numba's on-disk cache keys each compiled function on the content of its own
source file only. A kernel that calls kernels of another file (the step loop
calls the forces and the list build) would keep their old machine code after
they change, in a working copy or after an upgrade installed over an old
version. So, on import, :func:`beadsim.kernels.cache_guard.clear_stale_cache`
compares a stamp in the cache folder with a hash of every kernel source and the
numba version, and removes the kernels' cache files when they differ.
"""

from . import chunks, forces, growth, integrate, neighbors, pivot, random, scattering, virial
from .cache_guard import guard_kernel_cache

guard_kernel_cache((chunks, forces, growth, integrate, neighbors, pivot, random, scattering, virial))
