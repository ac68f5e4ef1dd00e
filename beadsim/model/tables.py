"""Tabulated potentials: read, check, spline and resample onto a uniform grid.

A table file is plain text with two or three columns ``r U [F]`` (sigma,
epsilon, epsilon/sigma; ``#`` starts a comment). Without ``F`` a cubic spline
of U is used (scipy ``CubicSpline``, not-a-knot ends); with ``F`` a cubic
Hermite spline through U with slope -F. Either way the spline is sampled on a
uniform grid (U and dU/dr at each node) that the kernels interpolate with the
same cubic Hermite form, so energy and force stay exactly consistent.
"""

from pathlib import Path

import numpy as np
from scipy.interpolate import CubicHermiteSpline, CubicSpline

from ..errors import InputError

DEFAULT_POINTS = 2001


class Table:
    """A potential U(r) on a uniform grid with its derivative.

    Parameters
    ----------
    r : float64 (m,)
        Strictly increasing distances, sigma.
    u : float64 (m,)
        Energies, epsilon.
    f : float64 (m,), optional
        Forces -dU/dr, epsilon/sigma.
    n_points : int
        Nodes of the uniform grid the spline is resampled onto.
    source : str
        Where the numbers came from, for messages.
    """

    def __init__(self, r, u, f=None, n_points=DEFAULT_POINTS, source="table"):
        r = np.asarray(r, dtype=np.float64)
        u = np.asarray(u, dtype=np.float64)
        self.source = source
        if r.ndim != 1 or r.shape != u.shape or len(r) < 4:
            raise InputError(f"{source}: need at least 4 rows of r and U with equal lengths")
        if not (np.all(np.isfinite(r)) and np.all(np.isfinite(u))):
            raise InputError(f"{source}: r and U must be finite numbers (no NaN or inf)")
        if r[0] <= 0 or np.any(np.diff(r) <= 0):
            raise InputError(f"{source}: r must be positive and strictly increasing")
        if f is None:
            spline = CubicSpline(r, u)
        else:
            f = np.asarray(f, dtype=np.float64)
            if f.shape != r.shape or not np.all(np.isfinite(f)):
                raise InputError(f"{source}: the force column must be finite and as long as r")
            spline = CubicHermiteSpline(r, u, -f)
        grid = np.linspace(r[0], r[-1], int(n_points))
        self.r_first = float(r[0])
        self.r_last = float(r[-1])
        self.dr = float(grid[1] - grid[0])
        self.values = np.ascontiguousarray(np.column_stack([spline(grid), spline(grid, 1)]))

    @classmethod
    def from_file(cls, path, n_points=DEFAULT_POINTS):
        """Read a two- or three-column text table (r, U[, F]) from ``path``."""
        r, u, f = read_columns(path)
        return cls(r, u, f, n_points=n_points, source=str(path))

    @property
    def n_points(self):
        """Number of grid nodes."""
        return self.values.shape[0]

    def evaluate(self, r):
        """U(r) and dU/dr on the grid's cubic Hermite interpolant (NumPy twin of the kernel).

        Parameters
        ----------
        r : float64 array
            Distances inside [r_first, r_last], sigma.

        Returns
        -------
        u, du_dr : float64 arrays shaped like ``r``
        """
        r = np.asarray(r, dtype=np.float64)
        x = (r - self.r_first) / self.dr
        k = np.clip(np.floor(x).astype(np.int64), 0, self.n_points - 2)
        t = x - k
        t2, t3 = t * t, t * t * t
        u0, m0 = self.values[k, 0], self.values[k, 1] * self.dr
        u1, m1 = self.values[k + 1, 0], self.values[k + 1, 1] * self.dr
        u = (2 * t3 - 3 * t2 + 1) * u0 + (t3 - 2 * t2 + t) * m0 + (-2 * t3 + 3 * t2) * u1 + (t3 - t2) * m1
        du = (6 * t2 - 6 * t) * u0 + (3 * t2 - 4 * t + 1) * m0 + (-6 * t2 + 6 * t) * u1 + (3 * t2 - 2 * t) * m1
        return u, du / self.dr


def read_columns(path):
    """The raw rows of a table file, before any spline.

    Parameters
    ----------
    path : path-like
        Text file with columns ``r U [F]`` (sigma, epsilon, epsilon/sigma).

    Returns
    -------
    r, u : float64 (m,)
    f : float64 (m,) or None
        The force column, if the file has one.
    """
    path = Path(path)
    try:
        data = np.loadtxt(path, comments="#", ndmin=2)
    except OSError as exc:
        raise InputError(f"{path}: cannot read table file ({exc.strerror or exc})") from None
    except ValueError as exc:
        raise InputError(f"{path}: not a numeric table of columns r U [F] ({exc})") from None
    if data.shape[1] not in (2, 3):
        raise InputError(f"{path}: expected 2 or 3 columns (r U [F]), found {data.shape[1]}")
    return data[:, 0], data[:, 1], (data[:, 2] if data.shape[1] == 3 else None)
