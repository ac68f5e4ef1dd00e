"""Figures of analysis results, written as PNG or SVG (chosen by the file extension).

Every function takes plain arrays and an output path, draws one figure with
matplotlib's object interface (no pyplot state, no display needed) and returns
the path written. Lengths are in whatever unit the arrays carry; pass ``unit``
for the axis labels.
"""

import logging
import os

import numpy as np
from matplotlib.figure import Figure

from .analysis.scattering import debye_function
from .errors import InputError

logger = logging.getLogger(__name__)

_FORMATS = (".png", ".svg")


def _save(fig, path):
    path = os.fspath(path)
    if not path.lower().endswith(_FORMATS):
        raise InputError(f"{path}: figure files must end in .png or .svg")
    fig.tight_layout()
    fig.savefig(path, dpi=150)
    logger.info("wrote figure %s", path)
    return path


def _axes(figsize=(5.0, 3.6)):
    fig = Figure(figsize=figsize)
    return fig, fig.add_subplot(1, 1, 1)


def time_series(times, values, path, equilibration_index=None, label="Rg", unit="nm", time_unit="tau"):
    """Time series with the detected start of equilibrium marked.

    Parameters
    ----------
    times : array_like, shape (n,), float64
        Sample times.
    values : array_like, shape (n,), float64
        Samples (e.g. Rg averaged over chains per frame).
    path : str or os.PathLike
        Output file, ``.png`` or ``.svg``.
    equilibration_index : int, optional
        First equilibrated sample; drawn as a vertical line, the discarded part shaded.
    label, unit, time_unit : str
        Axis labelling.

    Returns
    -------
    str
        The path written.
    """
    times = np.asarray(times, dtype=np.float64)
    fig, ax = _axes((6.0, 3.4))
    ax.plot(times, values, lw=0.8, color="C0")
    if equilibration_index is not None and 0 < equilibration_index < times.size:
        t0 = times[equilibration_index]
        ax.axvspan(times[0], t0, color="0.85", label="discarded")
        ax.axvline(t0, color="C3", lw=1.0, label="equilibrated from here")
        ax.legend(frameon=False, fontsize="small")
    ax.set_xlabel(f"time [{time_unit}]")
    ax.set_ylabel(f"{label} [{unit}]")
    return _save(fig, path)


def form_factor(q, p, path, rg=None, unit="nm"):
    """Form factor on log-log axes, with the Debye function of the same Rg for comparison.

    Parameters
    ----------
    q : array_like, shape (n_q,), float64
        Scattering vector magnitudes, unit 1/``unit``.
    p : array_like, shape (n_q,), float64
        Form factor.
    path : str or os.PathLike
        Output file.
    rg : float, optional
        Radius of gyration; draws ``2 (exp(-x) + x - 1) / x^2``, ``x = (q Rg)^2`` (Debye 1947).
    unit : str
        Length unit.

    Returns
    -------
    str
    """
    q = np.asarray(q, dtype=np.float64)
    fig, ax = _axes()
    ax.loglog(q, p, "o", ms=3, label="chains")
    if rg is not None:
        ax.loglog(q, debye_function((q * rg) ** 2), "-", lw=1.0, label="Debye function, same Rg")
    ax.set_xlabel(f"q [1/{unit}]")
    ax.set_ylabel("P(q)")
    ax.legend(frameon=False, fontsize="small")
    return _save(fig, path)


def kratky(q, p, rg, path):
    """Dimensionless Kratky plot ``(q Rg)^2 P(q)`` against ``q Rg``, with the Debye function.

    A Gaussian coil levels off at 2, a swollen coil decreases, a globule shows a peak.

    Parameters
    ----------
    q : array_like, shape (n_q,), float64
    p : array_like, shape (n_q,), float64
    rg : float
        Radius of gyration, in the inverse unit of q.
    path : str or os.PathLike

    Returns
    -------
    str
    """
    x = np.asarray(q, dtype=np.float64) * rg
    fig, ax = _axes()
    ax.plot(x, x * x * np.asarray(p), "o", ms=3, label="chains")
    ax.plot(x, x * x * debye_function(x * x), "-", lw=1.0, label="Debye function")
    ax.set_xlabel("q Rg")
    ax.set_ylabel("(q Rg)$^2$ P(q)")
    ax.legend(frameon=False, fontsize="small")
    return _save(fig, path)


def structure_factor(q, s, path, unit="nm"):
    """Total structure factor S(q) of a periodic system, shell-averaged on the reciprocal lattice.

    Parameters
    ----------
    q : array_like, shape (n_q,), float64
        Shell-mean |k|, unit 1/``unit``.
    s : array_like, shape (n_q,), float64
        S(q); 1 is drawn for reference (uncorrelated beads).
    path : str or os.PathLike
    unit : str

    Returns
    -------
    str
    """
    fig, ax = _axes()
    ax.plot(q, s, "o-", ms=3, lw=0.8, label="S(q)")
    ax.axhline(1.0, color="0.6", lw=0.8, ls="--", label="uncorrelated beads")
    ax.set_xlabel(f"q [1/{unit}]")
    ax.set_ylabel("S(q)")
    ax.legend(frameon=False, fontsize="small")
    return _save(fig, path)


def internal_distances(s, r2, path, unit="nm"):
    """``<R^2(s)> / s`` against s on a logarithmic s axis (flat for ideal chains).

    Parameters
    ----------
    s : array_like, shape (m,), float64
        Backbone separations > 0.
    r2 : array_like, shape (m,), float64
        Mean-square internal distances.
    path : str or os.PathLike
    unit : str
        Length unit.

    Returns
    -------
    str
    """
    s = np.asarray(s, dtype=np.float64)
    fig, ax = _axes()
    ax.semilogx(s, np.asarray(r2) / s, "-", lw=1.2)
    ax.set_xlabel("backbone separation s")
    ax.set_ylabel(f"<R$^2$(s)> / s [{unit}$^2$]")
    return _save(fig, path)


def histogram(centres, density, path, xlabel):
    """Probability density drawn as steps (bond lengths, bond angles).

    Parameters
    ----------
    centres : array_like, shape (m,), float64
        Bin centres.
    density : array_like, shape (m,), float64
        Density per unit of ``centres``.
    path : str or os.PathLike
    xlabel : str
        Quantity and unit, e.g. ``"bond length [nm]"``.

    Returns
    -------
    str
    """
    fig, ax = _axes()
    ax.step(centres, density, where="mid", lw=1.0)
    ax.set_xlabel(xlabel)
    ax.set_ylabel("probability density")
    return _save(fig, path)
