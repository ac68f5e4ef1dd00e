"""Numba kernels: plain arrays in, plain arrays out; no classes, validation or I/O.

Each kernel is named after its mathematics and has a plain-NumPy twin
(in :mod:`beadsim.engine.reference` or beside the analysis that uses it) that
the tests compare against.
"""
