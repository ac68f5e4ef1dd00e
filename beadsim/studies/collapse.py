"""Coil-globule transition: sigmoid midpoint and width, heat-capacity peak, globule scaling.

Input: the results table of :mod:`beadsim.studies.theta` (one row per run), plus for
:func:`heat_capacity_peaks` the columns ``heat_capacity`` and ``heat_capacity_error``
(per bead, from energy fluctuations, ``C = (<E^2> - <E>^2) / (N T^2)``, units of k_B).
Replicas are averaged per (N, control) with :func:`beadsim.studies.theta.point_means`.
Each function returns one :class:`beadsim.studies.theta.Estimate` per chain length (or
per control value); a case that lacks data gives ``value=None`` with a note.

* Sigmoid (:func:`transition_sigmoids`): for each N a logistic curve in the control c,
  ``Rg(c) = Rg_glob + (Rg_coil - Rg_glob) / (1 + exp(-s (c - c_m) / w))``, s = +1 for
  temperature and -1 for attraction depth (the coil is on the good-solvent side). Fitted by
  weighted least squares (``scipy.optimize.curve_fit``, errors absolute) to
  ``Rg = sqrt(<Rg^2>)`` with error ``rg2_error / (2 Rg)``. The midpoint c_m and the scale w
  describe the crossover; the 10-90 % width is ``2 ln 9 w ≈ 4.39 w``. The midpoint is reported only
  when the sampled range reaches one width w past it on both sides and its error is below the
  range; otherwise it reads "not determined" with the reason (a logistic fitted to one side of
  a crossover places its midpoint anywhere). Above the transition Rg
  keeps growing slowly, so the plateaus are effective values, not the swollen-coil limit.
* Heat-capacity peak (:func:`heat_capacity_peaks`): weighted parabola
  ``C = a u^2 + b u + c0`` (u = control minus the control of the largest C) through the
  ``n_points`` control values nearest the maximum; the peak is at ``-b/(2a)`` with the
  delta-method error ``sigma^2 = J C J^T``, ``J = (b/(2a^2), -1/(2a))``.
* Globule regime (:func:`globule_scaling`): ``Rg ~ N^nu`` at the poorest control values
  (lowest temperatures or deepest attractions), fitted with
  :func:`beadsim.analysis.scaling.nu_from_chain_size`; compact globules give nu = 1/3
  (de Gennes 1979; Rubinstein and Colby 2003) [memory]. The globule density assumes a
  uniform sphere, ``Rg^2 = 3 R^2 / 5``: ``rho = N / ((4 pi / 3) (5 Rg^2 / 3)^(3/2))`` (sigma^-3).
* Long-chain limit of the globule exponent (:func:`globule_extrapolation`): short globules are
  mostly surface, so a plain power law over accessible N gives nu below 1/3. A compact globule
  with a surface layer of fixed width has ``Rg = a N^(1/3) + c``, whose local exponent
  ``nu(N) = d ln Rg / d ln N = 1/3 - (c / 3a) N^(-1/3) + O(N^(-2/3))`` is linear in the
  surface-to-volume ratio ``N^(-1/3)``. The local exponents between successive chain lengths
  are fitted by generalised least squares (their covariance follows from the errors of
  ``ln Rg``, so neighbours sharing a length are correlated) to ``nu_inf + b N^(-1/3)``.
"""

import logging

import numpy as np
from scipy.optimize import curve_fit

from .._validate import positive_int
from ..analysis.scaling import nu_from_chain_size
from ..errors import InputError
from .theta import REQUIRED_COLUMNS, Estimate, _describe, check_table, point_means, usable_runs

logger = logging.getLogger(__name__)


def logistic(control, midpoint, width, rg_globule, rg_coil, sign=1.0):
    """Logistic crossover ``rg_globule + (rg_coil - rg_globule) / (1 + exp(-sign (c - midpoint) / width))``.

    Parameters
    ----------
    control : array_like, float64
        Control values (epsilon/k_B or epsilon).
    midpoint, width : float
        c_m and w (control units, width > 0).
    rg_globule, rg_coil : float
        Plateaus (sigma).
    sign : float
        +1 for temperature, -1 for attraction depth.

    Returns
    -------
    ndarray, float64, shape of ``control``
        Rg in sigma.
    """
    c = np.asarray(control, dtype=np.float64)
    arg = np.clip(-sign * (c - midpoint) / width, -700.0, 700.0)
    return rg_globule + (rg_coil - rg_globule) / (1.0 + np.exp(arg))


def _sign(control_kind):
    return 1.0 if control_kind == "temperature" else -1.0


def _root_mean_square(df):
    """Point means of rg2 turned into Rg = sqrt(<Rg^2>) and its propagated error."""
    m = point_means(df, "rg2")
    rg = np.sqrt(m["mean"].to_numpy())
    return m, rg, m["error"].to_numpy() / (2.0 * rg)


def transition_sigmoids(df, control_kind):
    """Logistic fit of Rg versus control for each chain length (module notes).

    Parameters
    ----------
    df : pandas.DataFrame
        Results table.
    control_kind : {"temperature", "depth"}

    Returns
    -------
    list of Estimate
        One per N: ``value`` = midpoint c_m; ``details``: ``n_beads``, ``width`` (w),
        ``width_error``, ``rg_globule``, ``rg_coil`` (and errors), ``covariance`` (order c_m, w,
        Rg_glob, Rg_coil), ``chi2_reduced``, ``sign``.
    """
    df, notes = usable_runs(check_table(df, control_kind), ("rg2", "rg2_error"))
    sign = _sign(control_kind)
    out = []
    for n, group in df.groupby("n_beads", sort=True):
        method = f"logistic midpoint of Rg, N = {n}"
        m, rg, err = _root_mean_square(group)
        c = m["control"].to_numpy()
        if c.size < 5:
            out.append(Estimate(method, None, None, _describe(group),
                                tuple(notes + [f"needs 5 or more control values for 4 parameters, has {c.size}"])))
            continue
        span = c.max() - c.min()
        order = np.argsort(c)
        start_mid = float(c[np.argmin(np.abs(rg - 0.5 * (rg.min() + rg.max())))])
        start = [start_mid, span / 10.0, rg.min(), rg.max()]
        try:
            p, cov = curve_fit(lambda x, *q: logistic(x, *q, sign=sign), c[order], rg[order], p0=start,
                               sigma=err[order], absolute_sigma=True,
                               bounds=([c.min() - span, span * 1e-4, 0.0, 0.0], [c.max() + span, 10 * span,
                                                                                  np.inf, np.inf]))
        except RuntimeError as exc:
            out.append(Estimate(method, None, None, _describe(group), tuple(notes + [f"fit did not converge ({exc})"])))
            continue
        resid = (logistic(c, *p, sign=sign) - rg) / err
        chi2 = float(np.sum(resid ** 2) / (c.size - 4)) if c.size > 4 else float("nan")
        e = np.sqrt(np.diag(cov))
        fit_notes = list(notes)
        if not c.min() <= p[0] <= c.max():
            out.append(Estimate(method, None, None, _describe(group), tuple(fit_notes + [
                f"not determined: the fitted midpoint ({p[0]:.3g}) lies outside the sampled range "
                f"[{c.min():g}, {c.max():g}]; extend the control values past the collapse"])))
            continue
        if not (c.min() <= p[0] - p[1] and p[0] + p[1] <= c.max()):
            out.append(Estimate(method, None, None, _describe(group), tuple(fit_notes + [
                f"not determined: the sampled range [{c.min():g}, {c.max():g}] does not reach one logistic width "
                f"({p[1]:.2g}) past the fitted midpoint ({p[0]:.3g}) on both sides, so neither plateau is pinned "
                "down"])))
            continue
        if not np.isfinite(e[0]) or e[0] > span:
            out.append(Estimate(method, None, None, _describe(group), tuple(fit_notes + [
                f"not determined: the midpoint's error ({e[0]:.2g}) exceeds the sampled range"])))
            continue
        if chi2 > 2.0:
            fit_notes.append(f"chi2/dof = {chi2:.2f}: the logistic form misses the data")
        out.append(Estimate(method, float(p[0]), float(e[0]), _describe(group), tuple(fit_notes),
                            {"n_beads": int(n), "width": float(p[1]), "width_error": float(e[1]),
                             "rg_globule": float(p[2]), "rg_globule_error": float(e[2]),
                             "rg_coil": float(p[3]), "rg_coil_error": float(e[3]), "covariance": cov,
                             "chi2_reduced": chi2, "sign": sign}))
    return out


def heat_capacity_peaks(df, control_kind, n_points=5):
    """Location of the heat-capacity maximum for each chain length (module notes).

    Parameters
    ----------
    df : pandas.DataFrame
        Results table with ``heat_capacity`` and ``heat_capacity_error`` (per bead, k_B).
    control_kind : {"temperature", "depth"}
    n_points : int
        Control values fitted around the maximum (>= 3).

    Returns
    -------
    list of Estimate
        One per N (``value`` = peak control, ``details``: ``n_beads``, ``peak_height``); a single
        value-None estimate when the columns are absent.
    """
    n_points = positive_int(n_points, "n_points")
    if n_points < 3:
        raise InputError(f"n_points: a parabola needs 3 or more points, got {n_points}")
    df = check_table(df, control_kind)
    columns = ("heat_capacity", "heat_capacity_error")
    if any(col not in df.columns for col in columns):
        return [Estimate("heat-capacity peak", None, None, _describe(df), ("table has no heat_capacity column",))]
    df, notes = usable_runs(check_table(df, control_kind, REQUIRED_COLUMNS + columns), columns)
    out = []
    for n, group in df.groupby("n_beads", sort=True):
        method = f"heat-capacity peak, N = {n}"
        m = point_means(group, "heat_capacity")
        c, h, err = (m[k].to_numpy() for k in ("control", "mean", "error"))
        top = int(np.argmax(h))
        sel = np.sort(np.argsort(np.abs(c - c[top]), kind="stable")[:n_points])
        if sel.size < 3:
            out.append(Estimate(method, None, None, _describe(group), tuple(notes + ["fewer than 3 control values"])))
            continue
        u = c[sel] - c[top]
        design = np.vander(u, 3) / err[sel, None]
        cov = np.linalg.inv(design.T @ design)
        a, b, c0 = cov @ (design.T @ (h[sel] / err[sel]))
        peak = -b / (2.0 * a)
        if a >= 0 or not u.min() <= peak <= u.max():
            out.append(Estimate(method, None, None, _describe(group),
                                tuple(notes + [f"no maximum inside the fitted window around control {c[top]:g}"
                                               + (" (the largest C is at the edge of the range)"
                                                  if top in (0, c.size - 1) else "")])))
            continue
        jac = np.array([b / (2 * a * a), -1.0 / (2 * a)])
        error = float(np.sqrt(jac @ cov[:2, :2] @ jac))
        out.append(Estimate(method, float(c[top] + peak), error, _describe(group), tuple(notes),
                            {"n_beads": int(n), "peak_height": float(c0 - b * b / (4 * a))}))
    return out


def _poorest_controls(df, control_kind, n_controls):
    """Checked runs, notes, point means with Rg and its error, and the ``n_controls`` poorest control values."""
    n_controls = positive_int(n_controls, "n_controls")
    df, notes = usable_runs(check_table(df, control_kind), ("rg2", "rg2_error"))
    m, rg, err = _root_mean_square(df)
    controls = np.unique(m["control"].to_numpy())
    poorest = controls[:n_controls] if control_kind == "temperature" else controls[::-1][:n_controls]
    return df, notes, m, rg, err, poorest


def globule_scaling(df, control_kind, n_controls=1):
    """Exponent of ``Rg ~ N^nu`` at the poorest control values, with the globule density.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table.
    control_kind : {"temperature", "depth"}
    n_controls : int
        How many of the poorest control values to fit (each separately).

    Returns
    -------
    list of Estimate
        One per control value, poorest first: ``value`` = nu (1/3 expected for compact globules);
        ``details``: ``control``, ``chi2_reduced``, ``n_beads`` and ``density`` (sigma^-3) arrays.
    """
    df, notes, m, rg, err, poorest = _poorest_controls(df, control_kind, n_controls)
    out = []
    for control in poorest:
        sel = m["control"].to_numpy() == control
        n = m["n_beads"].to_numpy()[sel].astype(np.float64)
        method = f"globule exponent nu at control {control:g}"
        if n.size < 2:
            out.append(Estimate(method, None, None, _describe(df[df["control"] == control]),
                                tuple(notes + [f"needs at least 2 chain lengths at this control value, has {n.size}"])))
            continue
        fit = nu_from_chain_size(n, rg[sel], err[sel])
        density = n / (4.0 * np.pi / 3.0 * (5.0 * rg[sel] ** 2 / 3.0) ** 1.5)
        deviation = (fit.nu - 1.0 / 3.0) / fit.nu_error
        fit_notes = list(notes) + [f"nu - 1/3 = {deviation:+.1f} standard errors"]
        out.append(Estimate(method, fit.nu, fit.nu_error, _describe(df[df["control"] == control]), tuple(fit_notes),
                            {"control": float(control), "chi2_reduced": fit.fit.chi2_reduced, "n_beads": n,
                             "density": density}))
    return out


def globule_extrapolation(df, control_kind, n_controls=1):
    """Globule exponent extrapolated to long chains, linearly in N^(-1/3) (module notes).

    Parameters
    ----------
    df : pandas.DataFrame
        Results table.
    control_kind : {"temperature", "depth"}
    n_controls : int
        How many of the poorest control values to treat (each separately).

    Returns
    -------
    list of Estimate
        One per control value, poorest first: ``value`` = nu_inf (1/3 expected); ``details``:
        ``control``, ``slope`` (b), ``chi2``, ``n_beads``, ``local_nu`` and ``local_nu_error``
        (the local exponents between successive lengths and their standard errors).
    """
    df, notes, m, rg, err, poorest = _poorest_controls(df, control_kind, n_controls)
    out = []
    for control in poorest:
        sel = m["control"].to_numpy() == control
        order = np.argsort(m["n_beads"].to_numpy()[sel])
        n = m["n_beads"].to_numpy()[sel][order].astype(np.float64)
        log_rg, log_err = np.log(rg[sel][order]), (err[sel] / rg[sel])[order]
        method = f"globule exponent extrapolated in N^(-1/3) at control {control:g}"
        described = _describe(df[df["control"] == control])
        if n.size < 3:
            out.append(Estimate(method, None, None, described,
                                tuple(notes + [f"needs at least 3 chain lengths at this control value, has {n.size}"])))
            continue
        # local exponents nu_k = (ln Rg_{k+1} - ln Rg_k) / (ln N_{k+1} - ln N_k) = D ln Rg
        step = np.diff(np.log(n))
        d = (np.eye(n.size, k=1)[:-1] - np.eye(n.size)[:-1]) / step[:, None]
        local = d @ log_rg
        cov = d @ np.diag(log_err ** 2) @ d.T
        x = np.sqrt(n[1:] * n[:-1]) ** (-1.0 / 3.0)  # (N_k N_{k+1})^(-1/6): geometric-mean length
        design = np.column_stack([np.ones_like(x), x])
        weight = np.linalg.inv(cov)
        fit_cov = np.linalg.inv(design.T @ weight @ design)
        coef = fit_cov @ design.T @ weight @ local
        residual = local - design @ coef
        nu_inf, nu_err = float(coef[0]), float(np.sqrt(fit_cov[0, 0]))
        if not 0.0 <= nu_inf <= 1.0:
            out.append(Estimate(method, None, None, described, tuple(notes + [
                f"not determined: the extrapolation gives {nu_inf:.3g} +- {nu_err:.2g}, outside [0, 1]; these "
                "chains are not compact globules at this control value"])))
            continue
        fit_notes = list(notes) + [f"nu_inf - 1/3 = {(nu_inf - 1.0 / 3.0) / nu_err:+.1f} standard errors, "
                                   f"1/2 - nu_inf = {(0.5 - nu_inf) / nu_err:+.1f}"]
        chi2 = float(residual @ weight @ residual)
        if n.size == 3:
            fit_notes.append("3 chain lengths: the line passes through both local exponents (no check of the form)")
        else:
            fit_notes.append(f"chi2 = {chi2:.2g} for {n.size - 3} degrees of freedom")
        out.append(Estimate(method, nu_inf, nu_err, described, tuple(fit_notes),
                            {"control": float(control), "slope": float(coef[1]),
                             "chi2": chi2, "n_beads": n,
                             "local_nu": local, "local_nu_error": np.sqrt(np.diag(cov))}))
    return out
