"""Extrapolation of finite-N theta estimates to infinite chain length, and the quoted value.

Model
-----
Estimators such as the crossing of the size-per-bond curves of two chain lengths, the
chain Boyle point (second virial coefficient of two N-chains equal to zero) or
nu_eff = 1/2 give one value theta(N) per chain length or per pair of chain lengths.
These approach the theta temperature with a leading correction of order N^(-1/2)
(Grassberger and Hegger, J. Chem. Phys. 102, 6881, 1995; Frauenkron and Grassberger,
J. Chem. Phys. 107, 9599, 1997; from memory, mean-field three-body logarithms aside):

    theta(N) = theta_inf + a * N^(-x),    x = 1/2 by default.

:func:`extrapolate` fits this line in the variable ``N^(-x)`` by weighted least squares.

Effective length of a pair
--------------------------
A pair estimate (N1 < N2) is given one effective length N_eff, so that it enters the
same model as ``theta_inf + a * N_eff^(-x)``. Two rules (:func:`pair_length`):

* ``"geometric"``: ``N_eff = sqrt(N1 N2)`` (common practice).
* ``"crossing"`` (default), derived here for the crossing of two curves. Near theta write
  the size per bond of chain length N as ``y_N(T) = Y(T) + A N^phi (T - theta) + c N^(-w)``:
  an N-independent part, the two-body term in the crossover variable ``(T - theta) N^phi``
  with phi = 1/2 (theta crossover exponent, mean field; from memory), and a correction at
  theta. The curves of N1 and N2 cross at

      T - theta = (c / A) (N1^(-w) - N2^(-w)) / (N2^phi - N1^phi).

  For N2 -> N1 = N this is ``(c w / (A phi)) N^(-(w + phi))``, so a single-N correction
  exponent x means ``w = x - phi``. Matching the pair to ``a N_eff^(-x)`` with the same
  amplitude ``a = c w / (A phi)`` gives

      N_eff^(-x) = (phi / w) (N1^(-w) - N2^(-w)) / (N2^phi - N1^phi),

  and, for w = 0 (x = phi = 1/2: a logarithmic correction ``-c ln N`` at theta),
  ``N_eff^(-1/2) = phi ln(N2/N1) / (N2^phi - N1^phi)``, i.e. N_eff is the square of the
  logarithmic mean of sqrt(N1) and sqrt(N2). The rule reduces to the geometric mean when
  w = phi (x = 1) and lies close to it otherwise (N2 = 2 N1, x = 1/2: 1.428 N1 instead of
  1.414 N1). A pair with nu_eff = 1/2 is the same condition as equal size per bond,
  so the rule applies to those pairs too.

Error rules of :func:`extrapolate`
----------------------------------
* Points whose value or error is not finite are left out with a note.
* Three or more points: chi2, dof = m - 2 and the p-value ``scipy.stats.chi2.sf``. If
  chi2/dof > 1 the covariance is multiplied by chi2/dof (errors by the Birge ratio
  sqrt(chi2/dof); Birge, Phys. Rev. 40, 207, 1932) and a note says so; if the p-value is
  below :data:`POOR_FIT_P` a note says the correction form may not describe the data.
* Two points: the line passes through both (dof = 0); the errors are the propagated ones
  (the least-squares covariance is exactly the propagation through the two-point solution)
  and a note says that the fit quality cannot be judged.
* One point: no value; note "one chain length (or pair): no extrapolation possible".
* A singular fit (all points at one N) or a non-finite error gives ``value=None`` with a reason.
* Pair values sharing a chain length are correlated; the fit treats them as independent and
  says so in a note, so chi2 and the errors are then approximate.

Rules of :func:`combine`
------------------------
For k estimators with values v_i and errors e_i (weights w_i = 1/e_i^2):

* value: the inverse-variance weighted mean m = sum w_i v_i / sum w_i; statistical error
  ``1/sqrt(sum w_i)``;
* consistency: ``chi2 = sum w_i (v_i - m)^2`` with k - 1 degrees of freedom and its p-value;
  the set is called consistent if that p-value is at least :data:`POOR_FIT_P`;
* systematic error: the between-estimator standard deviation tau of DerSimonian and Laird
  (Controlled Clinical Trials 7, 177, 1986), ``tau^2 = max(0, (chi2 - (k - 1)) /
  (S1 - S2/S1))`` with ``S1 = sum w_i``, ``S2 = sum w_i^2``. It is the part of the spread
  between estimators that their statistical errors do not explain: zero when the scatter is
  no larger than the errors predict, growing with a disagreeing estimator. A plain weighted
  standard deviation or half the range would count the statistical scatter a second time
  and would not vanish for estimators that agree. tau is quoted as it stands (not divided by
  sqrt(k)), because method biases need not average out;
* total error: statistical and systematic in quadrature;
* agreement: estimator i agrees if ``|v_i - m| <= z sqrt(e_i^2 - 1/S1)`` with z =
  ``agreement_sigmas`` (default 2). ``e_i^2 - 1/S1`` is the exact variance of the residual
  v_i - m for independent Gaussian estimates about their inverse-variance mean (the mean
  contains v_i, so the residual is narrower than e_i). The rule is identical to comparing
  v_i with the weighted mean m_(-i) of the others: ``(v_i - m) / sqrt(e_i^2 - 1/S1) =
  (v_i - m_(-i)) / sqrt(e_i^2 + 1/(S1 - w_i))`` (exact). A precise outlier pulls m towards
  itself, so the others can then be listed as disagreeing too; the note on mutual
  consistency is the test of the set as a whole.

Estimators computed from the same simulation runs are correlated; the statistical error and
chi2 above assume independence, so for such sets ``1/sqrt(S1)`` is a lower bound. With
``same_data=True`` the statistical error is instead ``sum_i (w_i / S1) e_i``, the error of the
weighted mean if all estimators were fully correlated; by the Cauchy-Schwarz inequality it
bounds the standard deviation of the weighted mean from above for any correlation between them
(exact). The systematic error then carries the method dependence as before.
"""

import logging
import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from scipy import stats

from .._validate import as_array, positive
from ..errors import AnalysisError, InputError

logger = logging.getLogger(__name__)

PAIR_RULES = ("crossing", "geometric")
"""Allowed values of ``pair_rule`` (module notes)."""

CROSSOVER_EXPONENT = 0.5
"""phi of the theta crossover variable (T - theta) N^phi, used by the ``"crossing"`` pair rule (mean field;
from memory)."""

POOR_FIT_P = 0.01
"""p-value below which a fit or a set of estimators is flagged as inconsistent (common practice)."""

ONE_POINT_NOTE = "one chain length (or pair): no extrapolation possible"
"""Note given when a single usable point remains."""

_SINGULAR_RCOND = 1e-12
"""Smallest ratio of singular values of the weighted design matrix accepted as non-singular."""


def pair_length(n_small, n_large, exponent=0.5, rule="crossing"):
    """Effective chain length of an estimate made from two chain lengths.

    Parameters
    ----------
    n_small, n_large : array_like, shape (m,), float64
        The two chain lengths of each pair (beads); positive and different within a pair
        (their order does not matter).
    exponent : float
        Correction exponent x of ``theta(N) = theta_inf + a N^(-x)`` (> 0).
    rule : {"crossing", "geometric"}
        ``"crossing"``: derived for the crossing of two curves (module notes);
        ``"geometric"``: ``sqrt(N1 N2)``.

    Returns
    -------
    ndarray, shape (m,), float64
        N_eff (beads), between N1 and N2; scalar lengths give shape (1,).

    Raises
    ------
    InputError
        Unknown rule, non-positive exponent, non-positive, non-finite, mismatched or equal lengths.
    """
    if rule not in PAIR_RULES:
        raise InputError(f"rule: expected one of {PAIR_RULES}, got {rule!r}")
    x = positive(exponent, "exponent")
    n1 = as_array(n_small, "n_small").reshape(-1)
    n2 = as_array(n_large, "n_large").reshape(-1)
    if n1.size != n2.size:
        raise InputError(f"n_large: expected {n1.size} lengths like n_small, got {n2.size}")
    if np.any(n1 <= 0) or np.any(n2 <= 0):
        raise InputError("n_small, n_large: chain lengths must be > 0")
    if np.any(n1 == n2):
        raise InputError(f"n_small, n_large: a pair needs two different chain lengths, got equal ones at index "
                         f"{int(np.flatnonzero(n1 == n2)[0])}")
    lo, hi = np.minimum(n1, n2), np.maximum(n1, n2)
    if rule == "geometric":
        return np.sqrt(lo * hi)
    phi = CROSSOVER_EXPONENT
    w = x - phi
    l1, l2 = np.log(lo), np.log(hi)
    # (N1^-w - N2^-w) / w, written with expm1 so that it stays accurate as w -> 0 (limit ln(N2/N1))
    if w == 0.0:
        diff = l2 - l1
    else:
        diff = np.exp(-w * l1) * (-np.expm1(-w * (l2 - l1))) / w
    inverse_power = phi * diff / (hi ** phi - lo ** phi)
    return inverse_power ** (-1.0 / x)


@dataclass(frozen=True)
class Extrapolation:
    """Weighted least-squares fit of ``theta(N) = theta_inf + a N^(-x)``, or the reason there is none.

    Attributes
    ----------
    method : str
        Name of the finite-N estimator that was extrapolated.
    value : float or None
        theta_inf (units of the input values, e.g. epsilon/k_B); None if it could not be made.
    error : float or None
        Its standard error (Birge-scaled if chi2/dof > 1).
    slope : float or None
        Amplitude a of the correction (same units as ``value``).
    slope_error : float or None
        Its standard error (scaled like ``error``).
    covariance : tuple of tuple of float, or None
        2 x 2 covariance of (theta_inf, a), as scaled.
    exponent : float
        Correction exponent x.
    chi2 : float or None
        Weighted sum of squared residuals before any scaling (0 for two points).
    dof : int or None
        Points used minus 2.
    p_value : float or None
        ``scipy.stats.chi2.sf(chi2, dof)``; None for dof = 0.
    birge_ratio : float or None
        Factor applied to the errors: sqrt(chi2/dof) if that exceeds 1, else 1.
    n_used : tuple of float
        Chain lengths (effective lengths for pairs) of the points used, beads.
    pairs_used : tuple of tuple of float, or None
        (N1, N2) of each point used when the input was pairs.
    values_used, errors_used : tuple of float
        The finite-N values and errors used.
    notes : tuple of str
        Points left out, fit-quality remarks, or why ``value`` is None.
    """

    method: str
    value: float | None
    error: float | None
    slope: float | None
    slope_error: float | None
    covariance: tuple | None
    exponent: float
    chi2: float | None
    dof: int | None
    p_value: float | None
    birge_ratio: float | None
    n_used: tuple
    pairs_used: tuple | None
    values_used: tuple
    errors_used: tuple
    notes: tuple = ()

    @property
    def chi2_per_dof(self):
        """chi2/dof (before scaling), or None for dof = 0 or no fit."""
        return self.chi2 / self.dof if self.dof else None

    def curve(self, n_values):
        """Fitted line and its standard error at given chain lengths, for drawing.

        Parameters
        ----------
        n_values : array_like, shape (k,), float64
            Chain lengths (beads), > 0; ``numpy.inf`` gives theta_inf.

        Returns
        -------
        fit, fit_error : ndarray, shape (k,), float64
            ``theta_inf + a N^(-x)`` and ``sqrt(g^T C g)`` with ``g = (1, N^(-x))``.

        Raises
        ------
        InputError
            Non-positive or NaN lengths.
        AnalysisError
            No fit was made (``value`` is None).
        """
        if self.value is None:
            raise AnalysisError(f"{self.method}: no extrapolation to draw ({'; '.join(self.notes)})")
        n = as_array(n_values, "n_values", finite=False).ravel()
        if np.any(np.isnan(n)) or np.any(n <= 0):
            raise InputError("n_values: chain lengths must be > 0 (infinity allowed)")
        g = n ** (-self.exponent)
        c = np.asarray(self.covariance)
        return self.value + self.slope * g, np.sqrt(c[0, 0] + 2 * g * c[0, 1] + g * g * c[1, 1])

    def as_dict(self):
        """JSON-ready dict of every field and ``chi2_per_dof``; ``note`` joins the notes with "; "."""
        return {"method": self.method, "value": self.value, "error": self.error, "slope": self.slope,
                "slope_error": self.slope_error,
                "covariance": None if self.covariance is None else [list(r) for r in self.covariance],
                "exponent": self.exponent, "chi2": self.chi2, "dof": self.dof, "chi2_per_dof": self.chi2_per_dof,
                "p_value": self.p_value,
                "birge_ratio": self.birge_ratio, "n_used": list(self.n_used),
                "pairs_used": None if self.pairs_used is None else [list(p) for p in self.pairs_used],
                "values_used": list(self.values_used), "errors_used": list(self.errors_used),
                "note": "; ".join(self.notes)}


def _lengths(n_values, m, exponent, pair_rule):
    """Effective lengths, shape (m,), and the pairs (m, 2) or None, from ``n_values`` of shape (m,) or (m, 2)."""
    n = as_array(n_values, "n_values")
    if n.ndim == 1:
        n = as_array(n, "n_values", shape=(m,))
        if np.any(n <= 0):
            raise InputError(f"n_values: chain lengths must be > 0, got {n[n <= 0][0]!r}")
        return n, None
    n = as_array(n, "n_values", shape=(m, 2))
    if np.any(n <= 0):
        raise InputError(f"n_values: chain lengths must be > 0, got {n[n <= 0][0]!r}")
    if np.any(n[:, 0] == n[:, 1]):
        raise InputError(f"n_values: a pair needs two different chain lengths, got equal ones in row "
                         f"{int(np.flatnonzero(n[:, 0] == n[:, 1])[0])}")
    return pair_length(n[:, 0], n[:, 1], exponent, pair_rule), np.sort(n, axis=1)


def extrapolate(n_values, values, errors, exponent=0.5, method="theta estimate", pair_rule="crossing"):
    """Extrapolate finite-N estimates to N -> infinity with ``theta(N) = theta_inf + a N^(-x)``.

    Parameters
    ----------
    n_values : array_like, shape (m,) or (m, 2), float64
        Chain length of each estimate (beads), or the two chain lengths of each pair
        estimate; all > 0.
    values : array_like, shape (m,), float64
        Finite-N estimates (e.g. epsilon/k_B); NaN or None means "no estimate" and is left out.
    errors : array_like, shape (m,), float64
        Their standard errors, > 0; NaN or infinity is left out with a note.
    exponent : float
        Correction exponent x (> 0); 1/2 for the theta point (module notes).
    method : str
        Name of the finite-N estimator, carried into the result.
    pair_rule : {"crossing", "geometric"}
        Effective length of a pair (:func:`pair_length`); used only for (m, 2) input.

    Returns
    -------
    Extrapolation
        ``value`` None with a note when there are fewer than two usable points, the fit is
        singular or its error is not finite.

    Raises
    ------
    InputError
        Mismatched shapes, non-positive or non-finite chain lengths, infinite values,
        non-positive errors, a non-positive exponent, an unknown pair rule or a non-string method.
    """
    if not isinstance(method, str):
        raise InputError(f"method: expected a string, got {type(method).__name__}")
    if pair_rule not in PAIR_RULES:
        raise InputError(f"pair_rule: expected one of {PAIR_RULES}, got {pair_rule!r}")
    x = positive(exponent, "exponent")
    y = as_array(values, "values", shape=(None,), finite=False)
    m = y.size
    e = as_array(errors, "errors", shape=(m,), finite=False)
    n_eff, pairs = _lengths(n_values, m, x, pair_rule)
    if np.any(np.isinf(y)):
        raise InputError(f"values: infinite value at index {int(np.flatnonzero(np.isinf(y))[0])}")
    if np.any(e <= 0):
        raise InputError(f"errors: must be > 0 (NaN or infinity for unknown), got {e[e <= 0][0]!r}")

    def label(i):
        return f"({pairs[i, 0]:g}, {pairs[i, 1]:g})" if pairs is not None else f"{n_eff[i]:g}"

    notes = []
    for bad, why in ((np.isnan(y), "no value"), (~np.isnan(y) & ~np.isfinite(e), "non-finite error")):
        if bad.any():
            notes.append(f"{int(bad.sum())} of {m} points left out ({why}): N = "
                         + ", ".join(label(i) for i in np.flatnonzero(bad)))
    keep = np.isfinite(y) & np.isfinite(e)
    n_eff, y, e = n_eff[keep], y[keep], e[keep]
    pairs = None if pairs is None else pairs[keep]
    used = {"n_used": tuple(float(v) for v in n_eff),
            "pairs_used": None if pairs is None else tuple((float(a), float(b)) for a, b in pairs),
            "values_used": tuple(float(v) for v in y), "errors_used": tuple(float(v) for v in e)}

    def no_value(reason):
        logger.info("%s: no extrapolation (%s)", method, reason)
        return Extrapolation(method, None, None, None, None, None, x, None, None, None, None,
                             notes=tuple(notes + [reason]), **used)

    if y.size == 0:
        return no_value("no point with a value and a finite error")
    if y.size == 1:
        return no_value(ONE_POINT_NOTE)
    if pairs is not None:
        shared = np.unique(pairs, return_counts=True)[1]
        if np.any(shared > 1):
            notes.append("pairs sharing a chain length are correlated; the fit treats them as independent, "
                         "so chi2 and the errors are approximate")
    g = n_eff ** (-x)
    design = np.column_stack([np.ones_like(g), g]) / e[:, None]
    u, s, vt = np.linalg.svd(design, full_matrices=False)
    if np.unique(g).size < 2 or s[-1] <= _SINGULAR_RCOND * s[0]:
        return no_value(f"fit singular: the {y.size} points do not span two distinct chain lengths")
    params = vt.T @ ((u.T @ (y / e)) / s)
    cov = (vt.T / s ** 2) @ vt
    chi2 = float(np.sum(((y - params[0] - params[1] * g) / e) ** 2))
    dof = y.size - 2
    p_value, birge = None, 1.0
    if dof == 0:
        chi2 = 0.0
        notes.append("two points: the line passes through both exactly (dof = 0); fit quality cannot be judged")
    else:
        p_value = float(stats.chi2.sf(chi2, dof))
        if chi2 / dof > 1.0:
            birge = math.sqrt(chi2 / dof)
            cov = cov * (chi2 / dof)
            notes.append(f"chi2/dof = {chi2 / dof:.3g} > 1: errors scaled by the Birge ratio {birge:.3g}")
        if p_value < POOR_FIT_P:
            notes.append(f"poor fit: p-value {p_value:.2g} < {POOR_FIT_P:g}; the N^(-{x:g}) correction may not "
                         "describe these data (other correction form, or too short chains included)")
            logger.warning("%s: poor extrapolation fit, p = %.2g", method, p_value)
    error, slope_error = math.sqrt(cov[0, 0]), math.sqrt(cov[1, 1])
    if not (math.isfinite(error) and math.isfinite(slope_error) and np.all(np.isfinite(params))):
        return no_value("the extrapolated value or its error is not finite")
    logger.info("%s: theta_inf = %.6g +- %.2g (chi2 = %.3g, dof = %d)", method, params[0], error, chi2, dof)
    return Extrapolation(method, float(params[0]), error, float(params[1]), slope_error,
                         tuple(tuple(float(c) for c in row) for row in cov), x, chi2, dof, p_value, birge,
                         notes=tuple(notes), **used)


def extrapolate_estimate(estimate, exponent=0.5, pair_rule="crossing"):
    """Extrapolate the per-pair or per-length values of a :class:`beadsim.studies.theta.Estimate`.

    Parameters
    ----------
    estimate : beadsim.studies.theta.Estimate
        An estimate whose ``details`` hold ``"pairs"`` (dicts with n_small, n_large, value,
        error; e.g. :func:`beadsim.studies.theta.crossing_theta`) or ``"per_length"`` (dicts
        with n_beads, value, error; e.g. :func:`beadsim.studies.theta.nu_internal_theta`).
    exponent : float
        Correction exponent x (> 0).
    pair_rule : {"crossing", "geometric"}
        Effective length of a pair (:func:`pair_length`).

    Returns
    -------
    Extrapolation
        Named after ``estimate.method``; ``value`` None with a note if the estimate holds no
        per-pair or per-length values.

    Raises
    ------
    InputError
        ``estimate`` lacks ``method`` or ``details``, or its values fail :func:`extrapolate`'s checks.
    """
    method, details = getattr(estimate, "method", None), getattr(estimate, "details", None)
    if not isinstance(method, str) or not isinstance(details, Mapping):
        raise InputError(f"estimate: expected a theta Estimate with method and details, got {type(estimate).__name__}")
    if details.get("pairs"):
        rows = details["pairs"]
        n_values = [[r["n_small"], r["n_large"]] for r in rows]
    elif details.get("per_length"):
        rows = details["per_length"]
        n_values = [r["n_beads"] for r in rows]
    else:
        return Extrapolation(method, None, None, None, None, None, positive(exponent, "exponent"), None, None,
                             None, None, (), None, (), (),
                             ("the estimate holds no per-pair or per-length values to extrapolate",))
    return extrapolate(n_values, [r["value"] for r in rows], [r["error"] for r in rows], exponent, method,
                       pair_rule)


@dataclass(frozen=True)
class CombinedEstimate:
    """Quoted value from several extrapolated estimators (rules in the module notes).

    Attributes
    ----------
    value : float or None
        Inverse-variance weighted mean (units of the inputs); None if no estimator had a value.
    statistical_error : float or None
        ``1/sqrt(sum 1/e_i^2)``.
    systematic_error : float or None
        DerSimonian-Laird between-estimator standard deviation; None for one estimator.
    total_error : float or None
        Statistical and systematic errors in quadrature (the statistical error alone for one estimator).
    chi2 : float or None
        ``sum (v_i - value)^2 / e_i^2``; None for one estimator.
    dof : int or None
        Estimators used minus 1; None for one estimator.
    p_value : float or None
        ``scipy.stats.chi2.sf(chi2, dof)``.
    consistent : bool or None
        ``p_value >= POOR_FIT_P``; None for one estimator.
    agreeing, disagreeing : tuple of str
        Names of the estimators inside and outside the agreement band (empty for one estimator).
    estimators : tuple of tuple
        (name, value, error) of each estimator used.
    agreement_sigmas : float
        z of the agreement band.
    notes : tuple of str
        Estimators left out, the one-estimator remark, inconsistency and disagreement remarks.
    """

    value: float | None
    statistical_error: float | None
    systematic_error: float | None
    total_error: float | None
    chi2: float | None
    dof: int | None
    p_value: float | None
    consistent: bool | None
    agreeing: tuple
    disagreeing: tuple
    estimators: tuple
    agreement_sigmas: float
    notes: tuple = ()

    def as_dict(self):
        """JSON-ready dict: every field, ``estimators`` as a list of {name, value, error}, ``note`` joined by "; "."""
        return {"value": self.value, "statistical_error": self.statistical_error,
                "systematic_error": self.systematic_error, "total_error": self.total_error, "chi2": self.chi2,
                "dof": self.dof, "p_value": self.p_value, "consistent": self.consistent,
                "agreeing": list(self.agreeing), "disagreeing": list(self.disagreeing),
                "estimators": [{"name": n, "value": v, "error": e} for n, v, e in self.estimators],
                "agreement_sigmas": self.agreement_sigmas, "note": "; ".join(self.notes)}


def _entries(extrapolations):
    """(name, value or None, error or None) triples from a mapping or a sequence (see :func:`combine`)."""
    if isinstance(extrapolations, Mapping):
        items = []
        for name, entry in extrapolations.items():
            if hasattr(entry, "value") and hasattr(entry, "error"):
                items.append((name, entry.value, entry.error))
            elif isinstance(entry, (tuple, list)) and len(entry) == 2:
                items.append((name, *entry))
            else:
                raise InputError(f"extrapolations: entry {name!r} must be an extrapolation or a (value, error) pair, "
                                 f"got {entry!r}")
    elif isinstance(extrapolations, (tuple, list)):
        items = []
        for k, entry in enumerate(extrapolations):
            if hasattr(entry, "method") and hasattr(entry, "value") and hasattr(entry, "error"):
                items.append((entry.method, entry.value, entry.error))
            elif isinstance(entry, (tuple, list)) and len(entry) == 3:
                items.append(tuple(entry))
            else:
                raise InputError(f"extrapolations: item {k} must be an extrapolation or a (name, value, error) "
                                 f"triple, got {entry!r}")
    else:
        raise InputError(f"extrapolations: expected a mapping or a list, got {type(extrapolations).__name__}")
    if not items:
        raise InputError("extrapolations: no estimators given")
    names = [n for n, _, _ in items]
    if not all(isinstance(n, str) for n in names) or len(set(names)) != len(names):
        raise InputError(f"extrapolations: names must be distinct strings, got {names!r}")
    out = []
    for name, value, error in items:
        v, e = (None if q is None else _number(q, f"extrapolations[{name!r}]") for q in (value, error))
        if v is not None and math.isinf(v):
            raise InputError(f"extrapolations[{name!r}]: infinite value")
        if e is not None and e <= 0:
            raise InputError(f"extrapolations[{name!r}]: error must be > 0, got {e!r}")
        out.append((name, v, e))
    return out


def _number(q, name):
    try:
        return float(q)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected a number or None, got {q!r}") from None


def combine(extrapolations, agreement_sigmas=2.0, same_data=False):
    """Quoted value from several extrapolated estimators, with statistical and systematic errors.

    Parameters
    ----------
    extrapolations : mapping or sequence
        ``{name: Extrapolation or (value, error)}``, or a list of :class:`Extrapolation` (named by
        ``method``) or of ``(name, value, error)`` triples. Values in the units of theta
        (e.g. epsilon/k_B). Entries whose value is None/NaN or whose error is None or not
        finite are left out with a note.
    agreement_sigmas : float
        z of the agreement rule ``|v_i - m| <= z sqrt(e_i^2 - 1/S1)`` (> 0; module notes).
    same_data : bool
        The estimators come from the same runs, with unknown correlations: bound the statistical
        error by the fully correlated case (module notes).

    Returns
    -------
    CombinedEstimate

    Raises
    ------
    InputError
        Nothing given, duplicate or non-string names, an infinite value, a non-positive error
        or a non-positive ``agreement_sigmas``; the message names the estimator.
    """
    z = positive(agreement_sigmas, "agreement_sigmas")
    entries = _entries(extrapolations)
    notes = []
    left_out = [n for n, v, e in entries if v is None or math.isnan(v) or e is None or not math.isfinite(e)]
    if left_out:
        notes.append(f"left out (no value or no finite error): {', '.join(left_out)}")
    used = [(n, v, e) for n, v, e in entries if n not in left_out]
    if not used:
        return CombinedEstimate(None, None, None, None, None, None, None, None, (), (), (), z,
                                tuple(notes + ["no estimator has a value with a finite error"]))
    names = [n for n, _, _ in used]
    v = np.array([u[1] for u in used])
    e = np.array([u[2] for u in used])
    if v.size == 1:
        notes.append("one estimator: no systematic error could be estimated from one estimator")
        return CombinedEstimate(float(v[0]), float(e[0]), None, float(e[0]), None, None, None, None, (), (),
                                tuple(used), z, tuple(notes))
    w = 1.0 / e ** 2
    s1, s2 = float(np.sum(w)), float(np.sum(w * w))
    mean = float(np.sum(w * v) / s1)
    stat = float(np.sum(w * e) / s1) if same_data else 1.0 / math.sqrt(s1)
    chi2 = float(np.sum(w * (v - mean) ** 2))
    dof = v.size - 1
    p_value = float(stats.chi2.sf(chi2, dof))
    tau = math.sqrt(max(0.0, (chi2 - dof) / (s1 - s2 / s1)))
    total = math.hypot(stat, tau)
    band = z * np.sqrt(np.maximum(e ** 2 - 1.0 / s1, 0.0))
    inside = np.abs(v - mean) <= band
    agreeing = tuple(n for n, ok in zip(names, inside) if ok)
    disagreeing = tuple(n for n, ok in zip(names, inside) if not ok)
    consistent = p_value >= POOR_FIT_P
    if not consistent:
        notes.append(f"estimators mutually inconsistent: chi2 = {chi2:.3g} for {dof} dof, p-value {p_value:.2g}")
    if disagreeing:
        notes.append(f"outside {z:g} standard deviations of the combined value: {', '.join(disagreeing)}")
    logger.info("combined theta = %.6g +- %.2g (stat) +- %.2g (syst)", mean, stat, tau)
    return CombinedEstimate(mean, stat, tau, total, chi2, dof, p_value, consistent, agreeing, disagreeing,
                            tuple(used), z, tuple(notes))
