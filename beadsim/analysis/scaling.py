"""Scaling exponent nu from chain size versus length, internal distances, and the form factor.

All three fit a straight line in log-log coordinates by weighted least squares:
``ln y = ln A + a ln x`` with weights ``1 / sigma_ln_y^2``, ``sigma_ln_y = sigma_y / y``.
With errors given, the parameter covariance uses them as absolute errors and
the reduced chi-square tells whether the power law fits; without them the
covariance is scaled by the residual variance. Every result reports the fit
range, so an exponent is never quoted without the window it came from.

* ``R ~ N^nu`` for R = Rg or Re (one point per run of chain length N);
* ``<R^2(s)> ~ s^(2 nu)`` for internal distances of one run (neighbouring s
  are strongly correlated, so the fit error understates the true uncertainty);
* ``P(q) ~ q^(-1/nu)`` for ``1/Rg << q << 1/b`` [memory].
"""

from dataclasses import dataclass

import numpy as np

from .._validate import as_array, interval
from ..errors import AnalysisError, InputError
from ._common import line_fit


@dataclass(frozen=True)
class PowerLawFit:
    """Power law ``y = prefactor * x**exponent`` fitted in log-log coordinates.

    Attributes
    ----------
    exponent, exponent_error : float
        Slope a and its standard error.
    prefactor, prefactor_error : float
        A and its standard error.
    x_min, x_max : float
        Fit range actually used.
    n_points : int
        Points in the fit.
    chi2_reduced : float
        Weighted residual sum of squares per degree of freedom (NaN for two points).
    """

    exponent: float
    exponent_error: float
    prefactor: float
    prefactor_error: float
    x_min: float
    x_max: float
    n_points: int
    chi2_reduced: float


@dataclass(frozen=True)
class ExponentFit:
    """Scaling exponent nu with its error, fit range and the underlying power-law fit."""

    nu: float
    nu_error: float
    x_min: float
    x_max: float
    fit: PowerLawFit


def fit_power_law(x, y, y_error=None, x_range=None):
    """Weighted least-squares power law through positive data.

    Parameters
    ----------
    x, y : array_like, shape (m,), float64
        Positive data.
    y_error : array_like, shape (m,), float64, optional
        Standard errors of y (> 0), used as absolute weights.
    x_range : (float, float), optional
        Inclusive window of x to fit; default all points.

    Returns
    -------
    PowerLawFit

    Raises
    ------
    AnalysisError
        Fewer than two points in the window (three without ``y_error``), non-positive data,
        or all x in the window equal (no slope defined).
    InputError
        Arrays of the wrong shape or with NaN or infinity, errors <= 0, or ``x_range``
        not a pair of numbers ``(low, high)``.
    """
    return _power_law(x, y, y_error, x_range, ("x", "y", "y_error", "x_range"))


def _power_law(x, y, y_error, x_range, names):
    """:func:`fit_power_law` with the caller's argument names (x, y, errors, range) in error messages."""
    x_name, y_name, error_name, range_name = names
    x = as_array(x, x_name, shape=(None,))
    y = as_array(y, y_name, shape=x.shape)
    err = None if y_error is None else as_array(y_error, error_name, shape=x.shape)
    if x_range is None:
        use = np.ones(x.size, dtype=bool)
    else:
        lo, hi = interval(x_range, range_name)
        use = (x >= lo) & (x <= hi)
    need = 3 if err is None else 2
    if use.sum() < need:
        raise AnalysisError(f"power-law fit needs {need} or more points in the range {x_range}, got {int(use.sum())}")
    if np.any(x[use] <= 0) or np.any(y[use] <= 0):
        raise AnalysisError(f"power-law fit needs positive {x_name} and {y_name} in the fit range")
    if err is not None and np.any(err[use] <= 0):
        raise InputError(f"{error_name}: every error must be > 0")
    sigma = None if err is None else err[use] / y[use]
    slope, intercept, cov, chi2 = line_fit(np.log(x[use]), np.log(y[use]), sigma, what="power-law fit")
    prefactor = np.exp(intercept)
    return PowerLawFit(exponent=slope, exponent_error=float(np.sqrt(cov[0, 0])),
                       prefactor=float(prefactor), prefactor_error=float(prefactor * np.sqrt(cov[1, 1])),
                       x_min=float(x[use].min()), x_max=float(x[use].max()), n_points=int(use.sum()),
                       chi2_reduced=chi2)


def nu_from_chain_size(n_beads, size, size_error=None, n_range=None):
    """Exponent nu of ``R ~ N^nu`` from mean sizes of runs with different chain lengths.

    Parameters
    ----------
    n_beads : array_like, shape (m,), float64
        Chain length of each run.
    size : array_like, shape (m,), float64
        Root-mean-square Rg or Re of each run (not the mean square), any length unit.
    size_error : array_like, shape (m,), float64, optional
        Standard errors of ``size`` (e.g. from :func:`beadsim.analysis.stats.summarize`).
    n_range : (float, float), optional
        Chain lengths to include.

    Returns
    -------
    ExponentFit
    """
    fit = _power_law(n_beads, size, size_error, n_range, ("n_beads", "size", "size_error", "n_range"))
    return ExponentFit(nu=fit.exponent, nu_error=fit.exponent_error, x_min=fit.x_min, x_max=fit.x_max, fit=fit)


def nu_from_internal_distances(s, r2, r2_error=None, s_range=None):
    """Exponent nu of ``<R^2(s)> ~ s^(2 nu)``.

    Parameters
    ----------
    s : array_like, shape (m,), float64
        Backbone separations (> 0).
    r2 : array_like, shape (m,), float64
        Mean-square internal distances.
    r2_error : array_like, shape (m,), float64, optional
        Their standard errors.
    s_range : (float, float), optional
        Separations to include; excluding short s (local stiffness) and s near
        the chain length (end effects) is advisable.

    Returns
    -------
    ExponentFit
    """
    fit = _power_law(s, r2, r2_error, s_range, ("s", "r2", "r2_error", "s_range"))
    return ExponentFit(nu=fit.exponent / 2.0, nu_error=fit.exponent_error / 2.0,
                       x_min=fit.x_min, x_max=fit.x_max, fit=fit)


def nu_from_form_factor(q, p, q_range, p_error=None):
    """Exponent nu from the intermediate regime ``P(q) ~ q^(-1/nu)``.

    Parameters
    ----------
    q : array_like, shape (m,), float64
        Scattering vector magnitudes.
    p : array_like, shape (m,), float64
        Form factor.
    q_range : (float, float)
        Window inside ``1/Rg << q << 1/b``; required because the power law holds
        only there (for example ``(3/Rg, 1/b)`` for long chains).
    p_error : array_like, shape (m,), float64, optional
        Standard errors of P.

    Returns
    -------
    ExponentFit
        ``nu = -1/a`` with a the fitted slope, error ``sigma_a / a^2``.
    """
    fit = _power_law(q, p, p_error, q_range, ("q", "p", "p_error", "q_range"))
    if fit.exponent >= 0:
        raise AnalysisError(f"form factor does not decrease over q in [{fit.x_min}, {fit.x_max}]: no power law")
    nu = -1.0 / fit.exponent
    return ExponentFit(nu=nu, nu_error=fit.exponent_error / fit.exponent ** 2,
                       x_min=fit.x_min, x_max=fit.x_max, fit=fit)
