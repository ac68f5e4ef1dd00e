"""Theta-point estimators for a table of runs over chain length and solvent quality.

Input: a tidy :class:`pandas.DataFrame`, one row per run (N, control, replica), with
columns ``n_beads`` (int), ``control`` (float; temperature in epsilon/k_B or attraction
depth in epsilon), ``replica`` (int), ``rg2``, ``rg2_error``, ``re2``, ``re2_error``
(mean-square radius of gyration and end-to-end distance of the run and their standard
errors, sigma^2) and optionally ``nu_internal``, ``nu_internal_error`` (effective exponent
from the run's internal distances). Runs of one (N, control) point are averaged; the
error of the average is ``sqrt(sum e_i^2) / n_replicas`` (independent runs).

Solvent-quality variable (``control_kind``):

* ``"temperature"``: ``tau = (T - theta) / T``; higher T is the better solvent;
* ``"depth"``: ``tau = (theta - d) / theta`` with d the attraction depth; a deeper
  attraction is the poorer solvent.

Either way tau > 0 is the good-solvent side, so every fitted amplitude is positive.

Finite-N ideal values are used throughout, so that an ideal chain of any N meets the
criterion exactly (Gaussian chain of N beads, bond b: ``<Re^2> = (N-1) b^2``,
``<Rg^2> = b^2 (N^2-1)/(6N)``, ratio ``6N/(N+1)``; exact):

* the size per bond ``<Re^2>/(N-1)`` and ``<Rg^2>/(N-1) * 6N/(N+1) = 6N <Rg^2>/(N^2-1)``;
  both equal b^2 for ideal chains of every N;
* nu_eff from ``<Rg^2> ~ [(N^2-1)/N]^(2 nu)``, which is exactly 1/2 for ideal chains;
* the ratio ``<Re^2>/<Rg^2>`` is compared with ``6N/(N+1)``, not with 6.

Estimators (each returns an :class:`Estimate`; a case that lacks data gives
``value=None`` with a note instead of raising):

1. :func:`crossing_theta`: the curves of the size per bond of consecutive chain
   lengths cross at theta (ideal chains have the same size per bond at every N);
   error by bootstrap over replicas.
2. :func:`nu_scaling_theta` and :func:`nu_internal_theta`: where nu_eff passes 1/2.
3. :func:`ratio_theta`: where ``<Re^2>/<Rg^2>`` passes ``6N/(N+1)``.
4. :func:`boyle_theta`: where the second virial coefficient B2 of two N-bead chains
   vanishes (the chain Boyle point), per N.
5. :func:`collapse_theta`: theta that best collapses ``6N <Rg^2>/(N^2-1)`` versus
   ``tau N^(1/2)`` (quality function of Houdayer and Hartmann, Phys. Rev. B 70,
   014418, 2004; after Kawashima and Ito, J. Phys. Soc. Jpn. 62, 435, 1993) [memory].

Level crossings (estimators 1-3) are located by a weighted polynomial fit (default
quadratic) to the ``window`` control values nearest the first sign change of the data
(linearly interpolated), and the root of the fit inside that window; the delta method
gives ``sigma_c^2 = g^T C g / p'(c)^2`` with C the coefficient covariance and g the
gradient of p(c) with respect to the coefficients.

Point errors and the parametric bootstrap: each run carries its own standard error
(from its statistical inefficiency), so a point's mean over its replicas has the error
``sqrt(sum e_i^2) / n``; when the replicas scatter about their mean more than their
errors allow (chi2/dof > 1 with n - 1 degrees of freedom) that error is widened by the
Birge ratio. A resampling of two or three replicas alone says little about the spread,
so the crossing estimators draw every point mean from a normal distribution with this
error (a parametric bootstrap; Efron and Tibshirani, An Introduction to the Bootstrap,
1993, section 6.5 [memory]).

The finite-N estimators 1-4 give one value per chain length or per pair of lengths
(``details["pairs"]`` or ``details["per_length"]``); their combined ``value`` is the
inverse-variance mean over N, which carries the finite-N bias. The long-chain value is
their extrapolation in N (:mod:`beadsim.studies.extrapolation`). The Rg crossing of a
pair is also where nu_eff between the two lengths equals 1/2, so the pairwise nu_eff
criterion is not a separate estimator; :func:`nu_scaling_theta` fits all N at once.
"""

import logging
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.optimize import minimize_scalar

from .._validate import positive_int
from ..analysis.scaling import fit_power_law
from ..errors import InputError

logger = logging.getLogger(__name__)

CONTROL_KINDS = ("temperature", "depth")
"""Allowed values of ``control_kind``."""

REQUIRED_COLUMNS = ("n_beads", "control", "replica", "rg2", "rg2_error", "re2", "re2_error")
"""Columns every estimator needs."""

SIGNED_COLUMNS = ("replica", "nu_internal", "b2")
"""Columns that may hold zero or negative values (every other checked column must be > 0)."""

W_CRITICAL = 729.0 / 32000.0
"""Smallest three-body coefficient w for which ``alpha^5 - alpha^3 - w/alpha^3`` increases
monotonically in alpha (so the mean-field collapse is continuous): ``w_c = max_u (u^3 - 5u^4/3)``
at ``u = alpha^2 = 9/20`` (exact, from the derivative ``5 alpha^4 - 3 alpha^2 + 3 w alpha^-4``)."""


@dataclass(frozen=True)
class Estimate:
    """One estimate with its error, or the reason there is none.

    Attributes
    ----------
    method : str
        Short name of the estimator, e.g. ``"crossing of 6N<Rg^2>/(N^2-1)"``.
    value : float or None
        The estimate (control units: epsilon/k_B or epsilon); None if it could not be made.
    error : float or None
        Its standard error (same units).
    fitted_on : str
        What the estimate was computed from (chain lengths, control range, run count).
    notes : tuple of str
        Why ``value`` is None, or caveats (fit quality, failed bootstrap draws).
    details : dict
        Estimator-specific intermediate results (per-pair or per-N values, curves, parameters).
    """

    method: str
    value: float | None
    error: float | None
    fitted_on: str
    notes: tuple = ()
    details: dict = field(default_factory=dict)

    def as_dict(self):
        """Flat JSON-ready dict: method, value, error, fitted_on and ``note`` (the notes joined by "; ")."""
        return {"method": self.method, "value": self.value, "error": self.error,
                "fitted_on": self.fitted_on, "note": "; ".join(self.notes)}


class _NoEstimate(Exception):
    """Internal: the data do not allow this estimate; the message becomes the note."""


def check_table(df, control_kind, columns=REQUIRED_COLUMNS):
    """Validate a results table and the control kind at the public boundary.

    Parameters
    ----------
    df : pandas.DataFrame
        One row per run (see the module notes).
    control_kind : {"temperature", "depth"}
        What ``control`` holds.
    columns : sequence of str
        Columns that must be present.

    Returns
    -------
    pandas.DataFrame
        A copy sorted by (n_beads, control, replica), ``n_beads`` as int64.

    Raises
    ------
    InputError
        Not a DataFrame, empty, a missing column (named), non-numeric or infinite values,
        NaN in n_beads, control or replica, N < 2, a non-positive control, size or error, or an
        unknown ``control_kind``. NaN in an observable means "not measured" (a run too short for
        an error bar); estimators leave such runs out with a note (:func:`usable_runs`).
    """
    if control_kind not in CONTROL_KINDS:
        raise InputError(f"control_kind: expected one of {CONTROL_KINDS}, got {control_kind!r}")
    if not isinstance(df, pd.DataFrame):
        raise InputError(f"df: expected a pandas DataFrame, got {type(df).__name__}")
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise InputError(f"df: missing column(s) {', '.join(missing)}; need {', '.join(columns)}")
    if len(df) == 0:
        raise InputError("df: the table is empty (no runs)")
    out = df.copy()
    for name in columns:
        try:
            values = pd.to_numeric(out[name]).to_numpy(dtype=np.float64)
        except (TypeError, ValueError):
            raise InputError(f"df: column {name} holds non-numeric values") from None
        if name in ("n_beads", "control", "replica") and np.any(np.isnan(values)):
            raise InputError(f"df: column {name} has missing values")
        if np.any(np.isinf(values)):
            raise InputError(f"df: column {name} has infinite values")
        if name not in SIGNED_COLUMNS and np.any(values <= 0):
            raise InputError(f"df: column {name} must be > 0 (or NaN for not measured) in every row")
    n = out["n_beads"].to_numpy(dtype=np.float64)
    if np.any(n != np.round(n)) or np.any(n < 2):
        raise InputError("df: column n_beads must hold integers >= 2")
    out["n_beads"] = out["n_beads"].astype(np.int64)
    return out.sort_values(["n_beads", "control", "replica"], ignore_index=True)


def usable_runs(df, columns):
    """Runs with every one of ``columns`` measured (not NaN), and a note on those left out.

    Parameters
    ----------
    df : pandas.DataFrame
        A table passed through :func:`check_table`.
    columns : sequence of str
        Columns the estimator uses.

    Returns
    -------
    pandas.DataFrame
        The complete rows.
    list of str
        Empty, or one note naming how many runs were left out and why.
    """
    missing = df[list(columns)].isna().any(axis=1)
    if not missing.any():
        return df, []
    return (df[~missing].reset_index(drop=True),
            [f"{int(missing.sum())} of {len(df)} runs left out: no value for {' or '.join(columns)}"])


def tau_from_control(control, theta, control_kind):
    """Reduced distance from theta, positive on the good-solvent side.

    Parameters
    ----------
    control : array_like, float64
        Temperatures (epsilon/k_B) or attraction depths (epsilon).
    theta : float
        Theta temperature or theta depth, same unit.
    control_kind : {"temperature", "depth"}

    Returns
    -------
    ndarray, float64
        ``(T - theta)/T`` or ``(theta - d)/theta`` (dimensionless).
    """
    c = np.asarray(control, dtype=np.float64)
    return (c - theta) / c if control_kind == "temperature" else (theta - c) / theta


def ideal_rg2_factor(n_beads):
    """``(N^2 - 1) / (6N)``: ``<Rg^2>`` of an ideal N-bead chain in units of b^2 (exact)."""
    n = np.asarray(n_beads, dtype=np.float64)
    return (n * n - 1.0) / (6.0 * n)


def point_means(df, column):
    """Average over replicas at each (N, control) point.

    Parameters
    ----------
    df : pandas.DataFrame
        A table passed through :func:`check_table`; must hold ``column`` and ``column + "_error"``.
    column : str
        Observable to average.

    Returns
    -------
    pandas.DataFrame
        Columns ``n_beads``, ``control``, ``mean``, ``error`` (``sqrt(sum e^2)/n``, widened by the
        Birge ratio of the replicas' scatter when it exceeds 1; module notes), ``n_replicas``;
        sorted by (n_beads, control).
    """
    rows = []
    for (n, c), group in df.groupby(["n_beads", "control"], sort=True):
        values = group[column].to_numpy(dtype=np.float64)
        errors = group[column + "_error"].to_numpy(dtype=np.float64)
        mean = float(values.mean())
        error = float(np.sqrt(np.sum(errors ** 2)) / values.size)
        if values.size > 1 and np.all(errors > 0):
            chi2 = float(np.sum((values - mean) ** 2 / errors ** 2) / (values.size - 1))
            error *= np.sqrt(max(chi2, 1.0))
        rows.append({"n_beads": n, "control": c, "mean": mean, "error": error, "n_replicas": values.size})
    return pd.DataFrame(rows, columns=["n_beads", "control", "mean", "error", "n_replicas"])


def _bootstrap_point_means(df, column, n_bootstrap, rng):
    """Point means drawn from normal distributions with their errors (module notes), shape
    (n_bootstrap, n_points), in :func:`point_means` order."""
    means = point_means(df, column)
    return means["mean"].to_numpy() + means["error"].to_numpy() * rng.standard_normal((n_bootstrap, len(means)))


def _describe(df):
    if len(df) == 0:
        return "no usable runs"
    ns = sorted(df["n_beads"].unique())
    c = df["control"]
    return (f"N = {', '.join(str(n) for n in ns)}; {c.nunique()} control values in "
            f"[{c.min():g}, {c.max():g}]; {len(df)} runs")


def _start(df, control_kind, method, columns, min_lengths=2):
    """Common start of an estimator: validate, keep measured runs, check the number of chain lengths.

    Returns
    -------
    df : pandas.DataFrame
        Validated table of usable runs.
    notes : list of str
        Notes so far (runs left out).
    skipped : Estimate or None
        A value-None estimate when the data cannot support this estimator.
    """
    df = check_table(df, control_kind)
    absent = [c for c in columns if c not in df.columns]
    if absent:
        return df, [], Estimate(method, None, None, _describe(df), (f"table has no {', '.join(absent)} column",))
    df, notes = usable_runs(check_table(df, control_kind, tuple(dict.fromkeys(REQUIRED_COLUMNS + tuple(columns)))),
                            columns)
    ns = sorted(df["n_beads"].unique())
    if len(ns) < min_lengths:
        what = f"{min_lengths} chain lengths" if min_lengths > 1 else "one chain length"
        notes.append(f"needs at least {what} with usable runs; the table has {len(ns)}"
                     + (f" (N = {', '.join(str(n) for n in ns)})" if ns else ""))
        return df, notes, Estimate(method, None, None, _describe(df), tuple(notes))
    return df, notes, None


def _level_crossing(x, y, err, level, rising, degree=2, window=5):
    """Control value where y crosses ``level`` (see the module notes).

    Parameters
    ----------
    x, y, err : ndarray, shape (m,), float64
        Control values, data and their standard errors.
    level : float
        Level to cross.
    rising : bool
        True if ``y - level`` goes from negative to positive as x increases.
    degree, window : int
        Local polynomial degree and number of points fitted.

    Returns
    -------
    root, root_error : float
    n_changes : int
        Number of sign changes in the expected direction (more than one means noise near the level).

    Raises
    ------
    _NoEstimate
        No sign change in the expected direction, or no root of the local fit inside its window.
    """
    order = np.argsort(x)
    x, y, err = x[order], y[order], err[order]
    d = (y - level) if rising else (level - y)
    changes = np.flatnonzero((d[:-1] < 0) & (d[1:] >= 0))
    if changes.size == 0:
        side = "below" if np.all(d < 0) else "above" if np.all(d >= 0) else "on both sides, never in the expected direction,"
        raise _NoEstimate(f"stays {side} the level {level:.4g} over control [{x[0]:g}, {x[-1]:g}]")
    i = changes[changes.size // 2]
    guess = x[i] - d[i] * (x[i + 1] - x[i]) / (d[i + 1] - d[i])
    sel = np.sort(np.argsort(np.abs(x - guess), kind="stable")[:window])
    deg = min(degree, sel.size - 1)
    u = x[sel] - guess
    design = np.vander(u, deg + 1)
    weighted = design / err[sel, None]
    cov = np.linalg.inv(weighted.T @ weighted)
    coef = cov @ (weighted.T @ (y[sel] / err[sel]))
    shifted = coef.copy()
    shifted[-1] -= level
    roots = np.roots(shifted) if deg > 0 else np.array([])
    slope_coef = np.polyder(coef)
    real = roots[np.abs(roots.imag) < 1e-12].real
    real = real[(real >= u.min()) & (real <= u.max())]
    real = real[(np.polyval(slope_coef, real) > 0) == rising]
    if real.size == 0:
        raise _NoEstimate(f"the local fit near control {guess:g} does not cross {level:.4g} inside its window")
    r = real[np.argmin(np.abs(real))]
    grad = r ** np.arange(deg, -1, -1)
    root_error = float(np.sqrt(grad @ cov @ grad) / abs(np.polyval(slope_coef, r)))
    return float(guess + r), root_error, int(changes.size)


def _combine(values, errors):
    """Inverse-variance mean of independent estimates; error scaled by the Birge ratio if it exceeds 1.

    Returns
    -------
    mean, error, chi2_reduced : float
    """
    v, e = np.asarray(values), np.asarray(errors)
    w = 1.0 / e ** 2
    mean = float(np.sum(w * v) / np.sum(w))
    error = float(1.0 / np.sqrt(np.sum(w)))
    chi2 = float(np.sum(w * (v - mean) ** 2) / (v.size - 1)) if v.size > 1 else float("nan")
    if chi2 > 1.0:
        error *= np.sqrt(chi2)
    return mean, error, chi2


def size_per_bond(means, quantity):
    """Size per bond, b^2 for ideal chains of every N (module notes).

    Parameters
    ----------
    means : pandas.DataFrame
        Output of :func:`point_means` for ``quantity``.
    quantity : {"rg2", "re2"}

    Returns
    -------
    value, error : ndarray, shape (n_points,), float64
        ``6N<Rg^2>/(N^2-1)`` or ``<Re^2>/(N-1)`` and its error (sigma^2).
    factor : ndarray, shape (n_points,), float64
        The divisor used, ``(N^2-1)/(6N)`` or ``N-1``.
    """
    n = means["n_beads"].to_numpy(dtype=np.float64)
    factor = ideal_rg2_factor(n) if quantity == "rg2" else n - 1.0
    return means["mean"].to_numpy() / factor, means["error"].to_numpy() / factor, factor


def crossing_theta(df, control_kind, quantity="rg2", n_bootstrap=200, seed=0, degree=2, window=5):
    """Theta from the crossing of the size-per-bond curves of consecutive chain lengths.

    At theta chains are ideal, so ``6N<Rg^2>/(N^2-1)`` (or ``<Re^2>/(N-1)``) is the same
    (b^2) for every N; on the good-solvent side longer chains swell more and the curves
    cross. Each pair (N_i, N_i+1) gives the root of the difference of their curves at shared
    control values (local polynomial, see the module notes); the combined value is the
    inverse-variance mean of the pair values with weights from their bootstrap variances,
    and its error is the bootstrap standard deviation of that same weighted mean (so the
    correlation of pairs sharing a chain length is included).

    Parameters
    ----------
    df : pandas.DataFrame
        Results table (module notes).
    control_kind : {"temperature", "depth"}
    quantity : {"rg2", "re2"}
        Size measure.
    n_bootstrap : int
        Bootstrap draws over replicas.
    seed : int
        Seed of ``numpy.random.default_rng`` for the bootstrap.
    degree, window : int
        Local polynomial degree and number of control values fitted around each crossing.

    Returns
    -------
    Estimate
        ``details``: ``pairs`` (list of dicts: n_small, n_large, value, error, delta_error),
        ``bootstrap_failures``.
    """
    if quantity not in ("rg2", "re2"):
        raise InputError(f"quantity: expected 'rg2' or 're2', got {quantity!r}")
    n_bootstrap = positive_int(n_bootstrap, "n_bootstrap")
    label = "6N<Rg^2>/(N^2-1)" if quantity == "rg2" else "<Re^2>/(N-1)"
    method = f"crossing of {label}"
    df, notes, skipped = _start(df, control_kind, method, (quantity, quantity + "_error"))
    if skipped:
        return skipped
    means = point_means(df, quantity)
    y, err, factor = size_per_bond(means, quantity)
    draws = _bootstrap_point_means(df, quantity, n_bootstrap, np.random.default_rng(seed)) / factor
    rising = control_kind == "temperature"
    ns = sorted(means["n_beads"].unique())
    pairs, boot = [], []
    for n1, n2 in zip(ns[:-1], ns[1:]):
        a = np.flatnonzero(means["n_beads"].to_numpy() == n1)
        b = np.flatnonzero(means["n_beads"].to_numpy() == n2)
        ca, cb = means["control"].to_numpy()[a], means["control"].to_numpy()[b]
        shared, ia, ib = np.intersect1d(ca, cb, return_indices=True)
        ia, ib = a[ia], b[ib]
        if shared.size < 3:
            notes.append(f"N = {n1}, {n2}: only {shared.size} shared control values; pair skipped")
            continue
        diff_err = np.hypot(err[ia], err[ib])
        try:
            value, delta_error, n_changes = _level_crossing(shared, y[ib] - y[ia], diff_err, 0.0, rising,
                                                            degree, window)
        except _NoEstimate as exc:
            notes.append(f"N = {n1}, {n2}: curves do not cross ({exc}); pair skipped")
            continue
        if n_changes > 1:
            notes.append(f"N = {n1}, {n2}: {n_changes} sign changes (noise near theta); the middle one is used")
        samples = np.full(n_bootstrap, np.nan)
        for k in range(n_bootstrap):
            try:
                samples[k] = _level_crossing(shared, draws[k, ib] - draws[k, ia], diff_err, 0.0, rising,
                                             degree, window)[0]
            except _NoEstimate:
                pass
        pairs.append({"n_small": int(n1), "n_large": int(n2), "value": value,
                      "error": float(np.nanstd(samples, ddof=1)), "delta_error": delta_error})
        boot.append(samples)
    if not pairs:
        return Estimate(method, None, None, _describe(df), tuple(notes + ["no pair of chain lengths crosses"]))
    boot = np.array(boot)
    ok = np.all(np.isfinite(boot), axis=0)
    failures = int(n_bootstrap - ok.sum())
    if failures > 0.1 * n_bootstrap:
        notes.append(f"{failures} of {n_bootstrap} bootstrap draws found no crossing; the error may be too small")
    if ok.sum() < 2:
        return Estimate(method, None, None, _describe(df), tuple(notes + ["bootstrap draws found no crossing"]))
    values = np.array([p["value"] for p in pairs])
    weights = 1.0 / np.array([p["error"] for p in pairs]) ** 2
    weights /= weights.sum()
    combined = weights @ boot[:, ok]
    return Estimate(method, float(weights @ values), float(np.std(combined, ddof=1)), _describe(df),
                    tuple(notes), {"pairs": pairs, "bootstrap_failures": failures})


def nu_eff_from_scaling(df, control_kind):
    """Effective exponent nu_eff at each control value from ``<Rg^2> ~ [(N^2-1)/N]^(2 nu)``.

    The power law is fitted with :func:`beadsim.analysis.scaling.fit_power_law` (weighted,
    absolute errors) over all chain lengths at that control value; nu = slope / 2. The
    abscissa ``(N^2-1)/N`` makes the exponent exactly 1/2 for ideal chains of any N.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table (module notes).
    control_kind : {"temperature", "depth"}

    Returns
    -------
    pandas.DataFrame
        Columns ``control``, ``nu``, ``nu_error``, ``n_lengths``, ``chi2_reduced`` for every
        control value with at least two chain lengths.
    """
    df, _ = usable_runs(check_table(df, control_kind), ("rg2", "rg2_error"))
    means = point_means(df, "rg2")
    rows = []
    for control, group in means.groupby("control", sort=True):
        if len(group) < 2:
            continue
        n = group["n_beads"].to_numpy(dtype=np.float64)
        fit = fit_power_law((n * n - 1.0) / n, group["mean"].to_numpy(), group["error"].to_numpy())
        rows.append({"control": float(control), "nu": fit.exponent / 2.0, "nu_error": fit.exponent_error / 2.0,
                     "n_lengths": len(group), "chi2_reduced": fit.chi2_reduced})
    return pd.DataFrame(rows, columns=["control", "nu", "nu_error", "n_lengths", "chi2_reduced"])


def nu_scaling_theta(df, control_kind, degree=2, window=5):
    """Theta where nu_eff from N-scaling (:func:`nu_eff_from_scaling`) passes 1/2.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table (module notes).
    control_kind : {"temperature", "depth"}
    degree, window : int
        Local polynomial degree and number of control values fitted around the crossing.

    Returns
    -------
    Estimate
        Error by the delta method; ``details["nu_eff"]`` is the nu_eff table.
    """
    method = "nu_eff(N-scaling) = 1/2"
    df, notes, skipped = _start(df, control_kind, method, ("rg2", "rg2_error"))
    if skipped:
        return skipped
    table = nu_eff_from_scaling(df, control_kind)
    details = {"nu_eff": table}
    if len(table) < 2:
        return Estimate(method, None, None, _describe(df),
                        tuple(notes + ["fewer than two control values with two or more chain lengths"]), details)
    try:
        value, error, n_changes = _level_crossing(table["control"].to_numpy(), table["nu"].to_numpy(),
                                                  table["nu_error"].to_numpy(), 0.5,
                                                  control_kind == "temperature", degree, window)
    except _NoEstimate as exc:
        return Estimate(method, None, None, _describe(df), tuple(notes + [f"nu_eff {exc}"]), details)
    if n_changes > 1:
        notes.append(f"{n_changes} sign changes of nu_eff - 1/2; the middle one is used")
    return Estimate(method, value, error, _describe(df), tuple(notes), details)


def _per_length_crossing(df, control_kind, method, notes, column_of, level_of, degree, window):
    """Level crossing for each N separately, combined by :func:`_combine`."""
    per_n = []
    for n, group in df.groupby("n_beads", sort=True):
        x, y, err = column_of(group)
        if x.size < 2:
            notes.append(f"N = {n}: fewer than two control values")
            continue
        try:
            value, error, _ = _level_crossing(x, y, err, level_of(n), control_kind == "temperature", degree, window)
        except _NoEstimate as exc:
            notes.append(f"N = {n}: {exc}")
            continue
        per_n.append({"n_beads": int(n), "value": value, "error": error})
    if not per_n:
        return Estimate(method, None, None, _describe(df), tuple(notes))
    value, error, chi2 = _combine([p["value"] for p in per_n], [p["error"] for p in per_n])
    if chi2 > 1.0:
        notes.append(f"per-N values scatter more than their errors (chi2/dof = {chi2:.2f}); error scaled by "
                     "the Birge ratio; finite-N drift is likely")
    return Estimate(method, value, error, _describe(df), tuple(notes), {"per_length": per_n, "chi2_reduced": chi2})


def _column_crossing(df, control_kind, method, column, level, degree, window):
    """Per-N crossing of one measured column (its replica means) through a fixed level."""
    df, notes, skipped = _start(df, control_kind, method, (column, column + "_error"), 1)
    if skipped:
        return skipped

    def column_of(group):
        m = point_means(group, column)
        return m["control"].to_numpy(), m["mean"].to_numpy(), m["error"].to_numpy()

    return _per_length_crossing(df, control_kind, method, notes, column_of, lambda n: level, degree, window)


def nu_internal_theta(df, control_kind, degree=2, window=5):
    """Theta where the internal-distance exponent ``nu_internal`` passes 1/2, per N then combined.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table with ``nu_internal`` and ``nu_internal_error`` columns; without them the
        estimate is None with a note.
    control_kind : {"temperature", "depth"}
    degree, window : int
        Local polynomial degree and number of control values fitted.

    Returns
    -------
    Estimate
        Inverse-variance mean over N of the per-N crossings (delta-method errors; Birge-scaled if
        they scatter); ``details["per_length"]``.
    """
    return _column_crossing(df, control_kind, "nu_eff(internal) = 1/2", "nu_internal", 0.5, degree, window)


def ratio_theta(df, control_kind, degree=2, window=5):
    """Theta where ``<Re^2>/<Rg^2>`` passes its finite-N ideal value ``6N/(N+1)``, per N then combined.

    The error of the ratio at each point is propagated from ``rg2_error`` and ``re2_error`` as if
    independent; Re and Rg of one run are positively correlated, so this overstates it.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table (module notes).
    control_kind : {"temperature", "depth"}
    degree, window : int
        Local polynomial degree and number of control values fitted.

    Returns
    -------
    Estimate
        As :func:`nu_internal_theta`.
    """
    method = "<Re^2>/<Rg^2> = 6N/(N+1)"
    df, notes, skipped = _start(df, control_kind, method, ("rg2", "rg2_error", "re2", "re2_error"), 1)
    if skipped:
        return skipped

    def column_of(group):
        g, e = point_means(group, "rg2"), point_means(group, "re2")
        ratio = e["mean"].to_numpy() / g["mean"].to_numpy()
        err = ratio * np.hypot(e["error"] / e["mean"], g["error"] / g["mean"]).to_numpy()
        return g["control"].to_numpy(), ratio, err

    return _per_length_crossing(df, control_kind, method, notes, column_of, lambda n: 6.0 * n / (n + 1.0),
                                degree, window)


def boyle_theta(df, control_kind, degree=2, window=5):
    """Chain Boyle point: where the second virial coefficient B2 of two N-bead chains vanishes, per N.

    Two chains repel each other on the good-solvent side (B2 > 0) and attract on the poor side;
    for chains of N beads B2 passes zero at the Boyle point T_B(N), which approaches theta as N
    grows (Grassberger and Hegger, J. Chem. Phys. 102, 6881, 1995 [memory]).

    Parameters
    ----------
    df : pandas.DataFrame
        Results table with ``b2`` and ``b2_error`` columns (sigma^3); without them the estimate is
        None with a note.
    control_kind : {"temperature", "depth"}
    degree, window : int
        Local polynomial degree and number of control values fitted.

    Returns
    -------
    Estimate
        As :func:`nu_internal_theta`.
    """
    return _column_crossing(df, control_kind, "B2 = 0 (chain Boyle point)", "b2", 0.0, degree, window)


def flory_alpha(z, w):
    """Expansion factor alpha solving ``alpha^5 - alpha^3 - w / alpha^3 = z``.

    The equation follows from minimising the Flory free energy with a three-body term,
    ``F/kT = (3/2) alpha^2 - 3 ln alpha + v' N^(1/2) alpha^-3 + w' alpha^-6``
    (elastic part as in Flory, J. Chem. Phys. 17, 303, 1949; Flory, Principles of Polymer
    Chemistry, 1953; three-body term as in de Gennes, Scaling Concepts in Polymer Physics,
    1979, and Grosberg and Khokhlov, Statistical Physics of Macromolecules, 1994, where it
    reads ``alpha^5 - alpha^3 - y/alpha^3 = x``) [memory]: ``dF/dalpha = 0`` times
    ``alpha^4 / 3`` gives the equation with ``z = v' N^(1/2)`` and ``w = 2 w'``. For
    ``w >= W_CRITICAL`` the left side increases monotonically and the root is unique; it is
    found by bisection in ln alpha on [-12, 6] (80 halvings).

    Parameters
    ----------
    z : array_like, float64
        Two-body (excluded-volume) parameter, any shape; ``z > 0`` swells, ``z < 0`` shrinks.
    w : float
        Three-body coefficient, ``>= W_CRITICAL``.

    Returns
    -------
    ndarray, float64, shape of ``z``
        alpha = R / R_ideal.
    """
    z = np.asarray(z, dtype=np.float64)
    lo, hi = np.full(z.shape, -12.0), np.full(z.shape, 6.0)
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        a = np.exp(mid)
        above = a ** 5 - a ** 3 - w / a ** 3 > z
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    return np.exp(0.5 * (lo + hi))


def flory_nu_local(z, w):
    """Local exponent ``d ln R / d ln N`` of the model of :func:`flory_alpha` with ``z ∝ N^(1/2)``.

    ``nu = 1/2 + z / (2 alpha g'(alpha))`` with ``g'(alpha) = 5 alpha^4 - 3 alpha^2 + 3 w alpha^-4``
    (implicit differentiation of the equation; exact for the model).

    Parameters
    ----------
    z : array_like, float64
        Two-body parameter.
    w : float
        Three-body coefficient, ``>= W_CRITICAL``.

    Returns
    -------
    ndarray, float64, shape of ``z``
    """
    z = np.asarray(z, dtype=np.float64)
    a = flory_alpha(z, w)
    return 0.5 + z / (2.0 * a * (5 * a ** 4 - 3 * a ** 2 + 3 * w / a ** 4))


def _collapse_quality(theta, sets, control_kind):
    """Houdayer-Hartmann quality S(theta) of the collapse; inf without overlapping points."""
    xs = [tau_from_control(c, theta, control_kind) * np.sqrt(n) for n, c, _, _ in sets]
    total, count = 0.0, 0
    for j, (_, _, y, e) in enumerate(sets):
        for k, (_, _, yk, ek) in enumerate(sets):
            if j == k:
                continue
            order = np.argsort(xs[k])
            xk, yk, ek = xs[k][order], yk[order], ek[order]
            inside = (xs[j] >= xk[0]) & (xs[j] <= xk[-1])
            if not np.any(inside):
                continue
            x = xs[j][inside]
            i = np.clip(np.searchsorted(xk, x, side="right") - 1, 0, xk.size - 2)
            t = (x - xk[i]) / (xk[i + 1] - xk[i])
            interp = (1 - t) * yk[i] + t * yk[i + 1]
            var = (1 - t) ** 2 * ek[i] ** 2 + t ** 2 * ek[i + 1] ** 2
            total += float(np.sum((y[inside] - interp) ** 2 / (e[inside] ** 2 + var)))
            count += int(inside.sum())
    return total / count if count else np.inf


def _best_collapse(sets, control_kind, lo, hi, n_grid):
    grid = np.linspace(lo, hi, n_grid)
    quality = np.array([_collapse_quality(t, sets, control_kind) for t in grid])
    k = int(np.argmin(quality))
    bracket = (grid[max(k - 1, 0)], grid[min(k + 1, n_grid - 1)])
    res = minimize_scalar(_collapse_quality, bounds=bracket, args=(sets, control_kind), method="bounded",
                          options={"xatol": 1e-6 * (hi - lo)})
    return float(res.x), float(res.fun)


def collapse_theta(df, control_kind, n_bootstrap=100, seed=0, n_grid=61):
    """Theta that best collapses ``6N<Rg^2>/(N^2-1)`` against ``tau N^(1/2)`` for all N.

    Quality ``S(theta) = (1/M) sum (y_i - Y_i)^2 / (dy_i^2 + dY_i^2)`` over every point i of
    each chain length that lies inside the x range of another chain length, with Y_i, dY_i
    the linear interpolation of that other curve and its error (Houdayer and Hartmann 2004,
    module notes); ``S ≈ 1`` for a collapse consistent with the errors. Theta minimises S:
    grid search over the control range, then bounded Brent refinement. Error: standard
    deviation over bootstrap draws of replicas (module notes), each minimised again.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table (module notes).
    control_kind : {"temperature", "depth"}
    n_bootstrap : int
        Bootstrap draws.
    seed : int
        Seed of ``numpy.random.default_rng``.
    n_grid : int
        Grid points for the initial search.

    Returns
    -------
    Estimate
        ``details``: ``quality`` (S at the minimum), ``bootstrap`` (theta of each draw).
    """
    n_bootstrap = positive_int(n_bootstrap, "n_bootstrap")
    method = "scaling collapse of 6N<Rg^2>/(N^2-1) vs tau N^(1/2)"
    df, notes, skipped = _start(df, control_kind, method, ("rg2", "rg2_error"))
    if skipped:
        return skipped
    means = point_means(df, "rg2")
    y, err, _ = size_per_bond(means, "rg2")
    n = means["n_beads"].to_numpy()
    lengths = [ni for ni in np.unique(n) if np.sum(n == ni) >= 2]
    if len(lengths) < 2:
        return Estimate(method, None, None, _describe(df),
                        tuple(notes + ["needs two chain lengths with two or more control values"]))
    c = means["control"].to_numpy()
    lo, hi = float(c.min()), float(c.max())

    def sets_of(values):
        return [(ni, c[n == ni], values[n == ni], err[n == ni]) for ni in lengths]

    theta, quality = _best_collapse(sets_of(y), control_kind, lo, hi, n_grid)
    if not np.isfinite(quality):
        return Estimate(method, None, None, _describe(df), tuple(notes + ["no overlap between the collapsed curves"]))
    draws = _bootstrap_point_means(df, "rg2", n_bootstrap, np.random.default_rng(seed)) / ideal_rg2_factor(n)
    step = (hi - lo) / (n_grid - 1)
    boot = np.array([_best_collapse(sets_of(d), control_kind, max(lo, theta - 4 * step),
                                    min(hi, theta + 4 * step), 9)[0] for d in draws])
    if quality > 2.0:
        notes.append(f"collapse quality S = {quality:.3g} (about 1 for a collapse within the errors): corrections "
                     "to scaling, or control values too sparse for linear interpolation")
    if min(theta - lo, hi - theta) < step:
        notes.append("theta at the edge of the control range; it may lie outside")
    return Estimate(method, theta, float(np.std(boot, ddof=1)), _describe(df), tuple(notes),
                    {"quality": quality, "bootstrap": boot})


def summarize_theta(df, control_kind, seed=0, n_bootstrap=200):
    """Run every theta estimator on one table, side by side.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table (module notes).
    control_kind : {"temperature", "depth"}
    seed : int
        Seed of the bootstrap estimators.
    n_bootstrap : int
        Bootstrap draws for the crossing estimators (half as many for the collapse, which
        minimises once per draw).

    Returns
    -------
    list of Estimate
        In the order: crossing (Rg, Re), nu_eff (N-scaling, internal), ratio, Boyle point, collapse.
        Use :func:`estimates_table` for a DataFrame.
    """
    df = check_table(df, control_kind)
    n_bootstrap = positive_int(n_bootstrap, "n_bootstrap")
    estimates = [
        crossing_theta(df, control_kind, "rg2", n_bootstrap, seed),
        crossing_theta(df, control_kind, "re2", n_bootstrap, seed),
        nu_scaling_theta(df, control_kind),
        nu_internal_theta(df, control_kind),
        ratio_theta(df, control_kind),
        boyle_theta(df, control_kind),
        collapse_theta(df, control_kind, max(2, n_bootstrap // 2), seed),
    ]
    for e in estimates:
        if e.value is None:
            logger.info("%s: no estimate (%s)", e.method, "; ".join(e.notes))
        else:
            logger.info("%s: theta = %.4g +- %.2g", e.method, e.value, e.error)
    return estimates


def estimates_table(estimates):
    """Estimates as a DataFrame with columns method, value, error, fitted_on, note.

    Parameters
    ----------
    estimates : sequence of Estimate

    Returns
    -------
    pandas.DataFrame, shape (len(estimates), 5)
    """
    if any(not isinstance(e, Estimate) for e in estimates):
        raise InputError("estimates: expected a sequence of Estimate objects")
    return pd.DataFrame([e.as_dict() for e in estimates], columns=["method", "value", "error", "fitted_on", "note"])


def flory_model_table(n_beads, controls, theta, amplitude, w, b2=1.0, control_kind="temperature",
                      n_replicas=4, relative_error=0.01, nu_error=0.005, seed=0):
    """Synthetic results table with a known theta, from the expansion-factor model of :func:`flory_alpha`.

    ``rg2 = b2 (N^2-1)/(6N) alpha^2``, ``re2 = b2 (N-1) alpha^2`` (so the ratio is the ideal
    ``6N/(N+1)`` everywhere), ``nu_internal`` = :func:`flory_nu_local`; every run adds independent
    Gaussian noise of standard deviation ``relative_error`` times the true value (``nu_error``
    for nu_internal) and reports exactly that as its error. Useful for checking estimators
    and the study pipeline against a known answer.

    Parameters
    ----------
    n_beads : sequence of int
        Chain lengths (>= 2).
    controls : sequence of float
        Control values (> 0).
    theta, amplitude, w, b2 : float
        Model parameters (amplitude > 0, ``w >= W_CRITICAL``, b2 in sigma^2).
    control_kind : {"temperature", "depth"}
    n_replicas : int
        Runs per (N, control).
    relative_error, nu_error : float
        Noise levels (>= 0).
    seed : int
        Seed of ``numpy.random.default_rng``.

    Returns
    -------
    pandas.DataFrame
        Columns of :data:`REQUIRED_COLUMNS` plus ``nu_internal``, ``nu_internal_error``.
    """
    if control_kind not in CONTROL_KINDS:
        raise InputError(f"control_kind: expected one of {CONTROL_KINDS}, got {control_kind!r}")
    if w < W_CRITICAL:
        raise InputError(f"w: must be >= W_CRITICAL = {W_CRITICAL:.5f} for a unique root, got {w!r}")
    n_replicas = positive_int(n_replicas, "n_replicas")
    rng = np.random.default_rng(seed)
    n, c, r = (a.ravel() for a in np.meshgrid(np.asarray(n_beads, dtype=np.int64), np.asarray(controls, float),
                                              np.arange(n_replicas), indexing="ij"))
    z = amplitude * tau_from_control(c, theta, control_kind) * np.sqrt(n)
    alpha2 = flory_alpha(z, w) ** 2
    rg2 = b2 * ideal_rg2_factor(n) * alpha2
    re2 = b2 * (n - 1.0) * alpha2
    nu = flory_nu_local(z, w)
    return pd.DataFrame({
        "n_beads": n, "control": c, "replica": r,
        "rg2": rg2 * (1 + relative_error * rng.standard_normal(n.size)), "rg2_error": relative_error * rg2,
        "re2": re2 * (1 + relative_error * rng.standard_normal(n.size)), "re2_error": relative_error * re2,
        "nu_internal": nu + nu_error * rng.standard_normal(n.size), "nu_internal_error": np.full(n.size, nu_error),
    })
