"""Figures of a solvent-quality study: size crossing, nu_eff, scaling collapse, Rg(N), coil-globule sigmoids.

Every function takes the results table (see :mod:`beadsim.studies.theta`) and, where
relevant, estimates, draws one figure with matplotlib's object interface (Agg canvas, no
display) and writes it. ``path`` ending in ``.png`` or ``.svg`` writes that file; a path
without a suffix writes both ``path.png`` and ``path.svg``. Lengths are in sigma, controls
in epsilon/k_B (temperature) or epsilon (attraction depth). Error bars are one standard
error of the replica mean.
"""

import logging
import os

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import NullFormatter

from ..errors import InputError
from .collapse import logistic
from .theta import (Estimate, size_per_bond, check_table, nu_eff_from_scaling, point_means, tau_from_control,
                    usable_runs)

logger = logging.getLogger(__name__)

NU_SAW = 0.587597
"""Self-avoiding walk exponent in 3D, Clisby, Phys. Rev. Lett. 104, 055702 (2010)."""


def _control_label(control_kind):
    return "temperature T [epsilon/k_B]" if control_kind == "temperature" else "attraction depth [epsilon]"


def _save(fig, path):
    """Write ``fig`` as PNG and/or SVG (module notes); return the list of paths written."""
    path = os.fspath(path)
    stem, suffix = os.path.splitext(path)
    if suffix.lower() in (".png", ".svg"):
        targets = [path]
    elif suffix == "":
        targets = [stem + ".png", stem + ".svg"]
    else:
        raise InputError(f"path: figure files end in .png or .svg (or give no suffix for both), got {path}")
    FigureCanvasAgg(fig)
    fig.tight_layout()
    for target in targets:
        fig.savefig(target, dpi=150)
        logger.info("wrote figure %s", target)
    return targets


def _axes(figsize=(5.2, 3.8)):
    fig = Figure(figsize=figsize)
    return fig, fig.add_subplot(1, 1, 1)


def _mark_estimate(ax, estimate, label="theta"):
    """Vertical line at an estimate with a one-standard-error band, if it has a value."""
    if isinstance(estimate, Estimate) and estimate.value is not None:
        ax.axvline(estimate.value, color="k", lw=0.8, ls="--", label=f"{label} = {estimate.value:.3g}")
        if estimate.error:
            ax.axvspan(estimate.value - estimate.error, estimate.value + estimate.error, color="0.85", zorder=0)


def size_crossing_figure(df, control_kind, path, quantity="rg2", estimate=None):
    """Size per bond versus control for every N; the curves cross at theta.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table.
    control_kind : {"temperature", "depth"}
    path : str or os.PathLike
        Output (module notes).
    quantity : {"rg2", "re2"}
        ``6N<Rg^2>/(N^2-1) = <Rg^2>/(N-1) * 6N/(N+1)`` or ``<Re^2>/(N-1)`` (sigma^2), both b^2 for ideal chains.
    estimate : Estimate, optional
        Theta estimate to mark.

    Returns
    -------
    list of str
        Paths written.
    """
    if quantity not in ("rg2", "re2"):
        raise InputError(f"quantity: expected 'rg2' or 're2', got {quantity!r}")
    df, _ = usable_runs(check_table(df, control_kind), (quantity, quantity + "_error"))
    means = point_means(df, quantity)
    y, err, _ = size_per_bond(means, quantity)
    fig, ax = _axes()
    for n in np.unique(means["n_beads"]):
        sel = means["n_beads"].to_numpy() == n
        ax.errorbar(means["control"][sel], y[sel], err[sel], marker="o", ms=3, lw=1, capsize=2, label=f"N = {n}")
    _mark_estimate(ax, estimate)
    ax.set_xlabel(_control_label(control_kind))
    ax.set_ylabel("6N<Rg^2>/(N^2-1) [sigma^2]" if quantity == "rg2" else "<Re^2>/(N-1) [sigma^2]")
    ax.legend(frameon=False, fontsize="small")
    return _save(fig, path)


def nu_eff_figure(df, control_kind, path, estimate=None):
    """Effective exponent versus control with the theta value 1/2 (and 1/3, 0.588 for reference).

    Shows nu_eff from N-scaling (:func:`beadsim.studies.theta.nu_eff_from_scaling`) and, when the
    table has it, the replica-averaged ``nu_internal`` of each N.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table.
    control_kind : {"temperature", "depth"}
    path : str or os.PathLike
        Output (module notes).
    estimate : Estimate, optional
        Theta estimate to mark.

    Returns
    -------
    list of str
    """
    df = check_table(df, control_kind)
    table = nu_eff_from_scaling(df, control_kind)
    fig, ax = _axes()
    ax.errorbar(table["control"], table["nu"], table["nu_error"], color="k", marker="s", ms=4, lw=1.2, capsize=2,
                label="from N-scaling of <Rg^2>")
    if "nu_internal" in df.columns and "nu_internal_error" in df.columns:
        internal, _ = usable_runs(df, ("nu_internal", "nu_internal_error"))
        for n, group in internal.groupby("n_beads", sort=True):
            m = point_means(group, "nu_internal")
            ax.errorbar(m["control"], m["mean"], m["error"], marker="o", ms=3, lw=0.8, capsize=2, alpha=0.7,
                        label=f"internal distances, N = {n}")
    for level, style, text in ((0.5, "-", "1/2 (theta)"), (1 / 3, ":", "1/3 (globule)"),
                               (NU_SAW, ":", "0.588 (good solvent)")):
        ax.axhline(level, color="C3" if level == 0.5 else "0.5", lw=0.9, ls=style)
        ax.annotate(text, (1.0, level), xycoords=("axes fraction", "data"), ha="right", va="bottom", fontsize="x-small")
    _mark_estimate(ax, estimate)
    ax.set_xlabel(_control_label(control_kind))
    ax.set_ylabel("effective exponent nu_eff")
    ax.legend(frameon=False, fontsize="x-small")
    return _save(fig, path)


#: Interpenetration ratio of long self-avoiding walks (Li, Madras and Sokal, J. Stat. Phys. 80, 661, 1995;
#: from memory), drawn for reference.
PSI_SAW = 0.247


def second_virial_figure(df, control_kind, path, estimate=None):
    """Interpenetration ratio Psi* = B2 / (4 pi^(3/2) <Rg^2>^(3/2)) versus control for every N.

    Psi* is zero where B2 changes sign (the chain Boyle point) and tends to about 0.247 in good
    solvent (:data:`PSI_SAW`).

    Parameters
    ----------
    df : pandas.DataFrame
        Results table with ``psi_star`` and ``psi_star_error``; runs without them are left out.
    control_kind : {"temperature", "depth"}
    path : str or os.PathLike
        Output (module notes).
    estimate : Estimate, optional
        Theta estimate to mark.

    Returns
    -------
    list of str
    """
    df = check_table(df, control_kind)
    fig, ax = _axes()
    if {"psi_star", "psi_star_error"} <= set(df.columns):
        measured, _ = usable_runs(df, ("psi_star", "psi_star_error"))
        for n, group in measured.groupby("n_beads", sort=True):
            m = group.groupby("control", sort=True).agg(psi=("psi_star", "mean"), err=("psi_star_error", "mean"),
                                                         runs=("psi_star", "size")).reset_index()
            ax.errorbar(m["control"], m["psi"], m["err"] / np.sqrt(m["runs"]), marker="o", ms=3, lw=0.8, capsize=2,
                        label=f"N = {n}")
    ax.axhline(0.0, color="C3", lw=0.9)
    ax.axhline(PSI_SAW, color="0.5", lw=0.9, ls=":")
    ax.annotate("0.247 (self-avoiding walk)", (1.0, PSI_SAW), xycoords=("axes fraction", "data"), ha="right",
                va="bottom", fontsize="x-small")
    _mark_estimate(ax, estimate)
    ax.set_xlabel(_control_label(control_kind))
    ax.set_ylabel("Psi* = B2 / (4 pi^(3/2) <Rg^2>^(3/2))")
    ax.legend(frameon=False, fontsize="x-small")
    return _save(fig, path)


def collapse_figure(df, control_kind, theta, path):
    """Scaling collapse: ``6N<Rg^2>/(N^2-1)`` versus ``tau N^(1/2)`` for the given theta.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table.
    control_kind : {"temperature", "depth"}
    theta : float or Estimate
        Theta used for tau (an Estimate without a value is refused).
    path : str or os.PathLike
        Output (module notes).

    Returns
    -------
    list of str
    """
    value = theta.value if isinstance(theta, Estimate) else theta
    if value is None or not np.isfinite(value) or value <= 0:
        raise InputError(f"theta: expected a positive number or an Estimate with a value, got {theta!r}")
    df, _ = usable_runs(check_table(df, control_kind), ("rg2", "rg2_error"))
    means = point_means(df, "rg2")
    y, err, _ = size_per_bond(means, "rg2")
    n = means["n_beads"].to_numpy()
    x = tau_from_control(means["control"].to_numpy(), value, control_kind) * np.sqrt(n)
    fig, ax = _axes()
    for ni in np.unique(n):
        sel = n == ni
        order = np.argsort(x[sel])
        ax.errorbar(x[sel][order], y[sel][order], err[sel][order], marker="o", ms=3, lw=0.8, capsize=2,
                    label=f"N = {ni}")
    ax.axvline(0.0, color="k", lw=0.6, ls="--")
    tau_definition = "(T - theta)/T" if control_kind == "temperature" else "(theta - depth)/theta"
    ax.set_xlabel(f"tau N^(1/2), tau = {tau_definition}, theta = {value:.4g}")
    ax.set_ylabel("6N<Rg^2>/(N^2-1) [sigma^2]")
    ax.legend(frameon=False, fontsize="small")
    return _save(fig, path)


def size_scaling_figure(df, control_kind, controls, path):
    """Log-log Rg versus N at chosen control values, with reference slopes 1/3, 1/2 and 0.588.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table.
    control_kind : {"temperature", "depth"}
    controls : sequence of float
        Control values to show (each must occur in the table).
    path : str or os.PathLike
        Output (module notes).

    Returns
    -------
    list of str
    """
    df, _ = usable_runs(check_table(df, control_kind), ("rg2", "rg2_error"))
    means = point_means(df, "rg2")
    available = np.unique(means["control"].to_numpy())
    chosen = np.atleast_1d(np.asarray(controls, dtype=np.float64))
    absent = [c for c in chosen if not np.any(np.isclose(available, c))]
    if chosen.size == 0 or absent:
        raise InputError(f"controls: each must be one of the table's control values {available.tolist()}, "
                         f"missing {absent or 'all (empty list)'}")
    fig, ax = _axes()
    for c in chosen:
        sel = np.isclose(means["control"].to_numpy(), c)
        n = means["n_beads"].to_numpy()[sel]
        rg = np.sqrt(means["mean"].to_numpy()[sel])
        ax.errorbar(n, rg, means["error"].to_numpy()[sel] / (2 * rg), marker="o", ms=4, lw=1, capsize=2,
                    label=f"control = {c:g}")
    n_all = np.unique(means["n_beads"].to_numpy()).astype(float)
    rg_all = np.sqrt(means["mean"].to_numpy())
    anchor = np.exp(np.mean(np.log(rg_all)))
    n_mid = np.exp(np.mean(np.log(n_all)))
    for slope, style in ((1 / 3, ":"), (0.5, "--"), (NU_SAW, "-.")):
        ax.plot(n_all, anchor * (n_all / n_mid) ** slope, color="0.4", ls=style, lw=0.9, label=f"slope {slope:.3g}")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xticks(n_all, [f"{n:g}" for n in n_all])  # the chain lengths themselves, not crowded minor labels
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("chain length N [beads]")
    ax.set_ylabel("Rg = <Rg^2>^(1/2) [sigma]")
    ax.legend(frameon=False, fontsize="x-small")
    return _save(fig, path)


def sigmoid_figure(df, control_kind, fits, path, mbar=None):
    """Rg versus control for every N with the fitted logistic curves and midpoints, and MBAR curves if given.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table.
    control_kind : {"temperature", "depth"}
    fits : sequence of Estimate
        From :func:`beadsim.studies.collapse.transition_sigmoids`; those without a value are skipped.
    path : str or os.PathLike
        Output (module notes).
    mbar : dict of int to beadsim.analysis.reweight.Curves, optional
        MBAR curves by chain length (temperature sweeps): ``Rg = <Rg^2>^(1/2)`` drawn dash-dotted with
        a one-standard-error band, left out where the curves are NaN.

    Returns
    -------
    list of str
    """
    df, _ = usable_runs(check_table(df, control_kind), ("rg2", "rg2_error"))
    mbar = mbar or {}
    means = point_means(df, "rg2")
    by_n = {e.details["n_beads"]: e for e in fits if isinstance(e, Estimate) and e.value is not None}
    fig, ax = _axes()
    grid = np.linspace(means["control"].min(), means["control"].max(), 300)
    for k, n in enumerate(np.unique(means["n_beads"])):
        sel = means["n_beads"].to_numpy() == n
        rg = np.sqrt(means["mean"].to_numpy()[sel])
        ax.errorbar(means["control"][sel], rg, means["error"].to_numpy()[sel] / (2 * rg), color=f"C{k}", marker="o",
                    ms=3, lw=0, elinewidth=1, capsize=2, label=f"N = {n}")
        fit = by_n.get(int(n))
        if fit is not None:
            d = fit.details
            ax.plot(grid, logistic(grid, fit.value, d["width"], d["rg_globule"], d["rg_coil"], d["sign"]),
                    color=f"C{k}", lw=1)
            ax.axvline(fit.value, color=f"C{k}", lw=0.6, ls=":")
        curves = mbar.get(int(n))
        if curves is not None:
            rg = np.sqrt(curves.means["rg2"])
            err = curves.errors["rg2"] / (2 * rg)
            ax.plot(curves.temperatures, rg, color=f"C{k}", lw=1, ls="-.", label="MBAR" if not k else None)
            ax.fill_between(curves.temperatures, rg - err, rg + err, color=f"C{k}", alpha=0.2, lw=0)
    ax.set_xlabel(_control_label(control_kind))
    ax.set_ylabel("Rg = <Rg^2>^(1/2) [sigma]")
    ax.legend(frameon=False, fontsize="small")
    return _save(fig, path)


def extrapolation_figure(extrapolations, combined, control_kind, path):
    """Finite-N theta estimates against N^(-x) with each estimator's fitted line to N -> infinity.

    Parameters
    ----------
    extrapolations : sequence of beadsim.studies.extrapolation.Extrapolation
        One per estimator; those without points are skipped, those without a fit show their points only.
    combined : beadsim.studies.extrapolation.CombinedEstimate or None
        The quoted value, drawn at N^(-x) = 0 with its total error; skipped when it has no value.
    control_kind : {"temperature", "depth"}
    path : str or os.PathLike
        Output (module notes).

    Returns
    -------
    list of str
    """
    fig, ax = _axes()
    x_max = 0.0
    for k, e in enumerate(extrapolations):
        if not e.values_used:
            continue
        x = np.asarray(e.n_used, dtype=np.float64) ** (-e.exponent)
        x_max = max(x_max, float(x.max()))
        ax.errorbar(x, e.values_used, e.errors_used, color=f"C{k}", marker="o", ms=3, lw=0, elinewidth=1,
                    capsize=2, label=e.method)
        if e.value is not None:
            grid = np.linspace(0.0, x.max(), 50)
            with np.errstate(divide="ignore"):
                fit, _ = e.curve(grid[1:] ** (-1.0 / e.exponent))
            ax.plot(grid, np.concatenate([[e.value], fit]), color=f"C{k}", lw=1)
    if combined is not None and combined.value is not None:
        ax.errorbar([0.0], [combined.value], [combined.total_error], color="k", marker="s", ms=5, capsize=3,
                    label="quoted (N -> infinity)")
    exponent = next((e.exponent for e in extrapolations), 0.5)
    ax.set_xlim(-0.02 * max(x_max, 0.1), 1.05 * max(x_max, 0.1))
    ax.set_xlabel(f"N^(-{exponent:g})  (pairs at their effective length)")
    ax.set_ylabel("theta(N) [epsilon/k_B]" if control_kind == "temperature" else "theta depth(N) [epsilon]")
    ax.legend(frameon=False, fontsize="x-small")
    return _save(fig, path)


KRATKY_Q_MAX = 3.0
"""Largest q drawn in the Kratky figure, 1/sigma: beyond it the curves show single beads, not the chain."""


def kratky_figure(curves, control_kind, path, n_beads):
    """Dimensionless Kratky plots (q Rg)^2 P(q) across the transition, one curve per control value.

    A Gaussian coil levels off at 2 (Debye function, drawn for reference); a swollen coil
    keeps rising slowly, as q^(2 - 1/nu) in its power-law range; a collapsing chain shows
    a peak near q Rg ~ 2 followed by a dip, and a compact globule the Porod decay of a
    sphere, q^2 P ~ q^-2, beyond it.

    Parameters
    ----------
    curves : sequence of (float, ndarray, ndarray, float)
        ``(control, q, p, rg2)`` per control value: q in 1/sigma, shape (n_q,); P(q), shape
        (n_q,); <Rg^2> of the same point in sigma^2.
    control_kind : {"temperature", "depth"}
    path : str or os.PathLike
        Output (module notes).
    n_beads : int
        Chain length of the curves, for the title.

    Returns
    -------
    list of str
    """
    from matplotlib import colormaps

    from ..analysis.scattering import debye_function

    if not curves:
        raise InputError("curves: need at least one (control, q, p, rg2) entry")
    fig, ax = _axes((5.6, 4.0))
    controls = np.array([c[0] for c in curves], dtype=np.float64)
    span = np.ptp(controls) or 1.0
    cmap = colormaps["viridis"]
    for control, q, p, rg2 in sorted(curves, key=lambda c: c[0]):
        keep = np.asarray(q) <= KRATKY_Q_MAX
        x = np.asarray(q)[keep] * np.sqrt(rg2)
        ax.plot(x, x * x * np.asarray(p)[keep], lw=1.1, color=cmap((control - controls.min()) / span),
                label=f"{'T' if control_kind == 'temperature' else 'depth'} = {control:g}")
    x_max = KRATKY_Q_MAX * np.sqrt(max(c[3] for c in curves))
    grid = np.geomspace(0.2, x_max, 200)
    ax.plot(grid, grid * grid * debye_function(grid * grid), color="k", ls="--", lw=0.9, label="Debye (Gaussian coil)")
    ax.set_xscale("log")
    ax.set_xlabel("q Rg")
    ax.set_ylabel("(q Rg)$^2$ P(q)")
    ax.set_title(f"N = {n_beads}", fontsize="small")
    ax.legend(frameon=False, fontsize="x-small", ncol=2)
    return _save(fig, path)


def snapshots_figure(conformations, labels, path):
    """One chain conformation per regime, side by side on a common length scale.

    Each chain is centred on its centre of mass and viewed along its smallest
    principal axis of gyration (largest extent horizontal); beads are coloured from
    one end to the other.

    Parameters
    ----------
    conformations : sequence of ndarray, shape (n_beads, 3), float64
        Bead positions in sigma, chain order.
    labels : sequence of str
        Panel titles, one per conformation.
    path : str or os.PathLike
        Output (module notes).

    Returns
    -------
    list of str
    """
    if not conformations or len(conformations) != len(labels):
        raise InputError(f"conformations, labels: need the same non-zero number of each, got "
                         f"{len(conformations)} and {len(labels)}")
    views = []
    for x in conformations:
        x = np.asarray(x, dtype=np.float64)
        centred = x - x.mean(axis=0)
        _, vectors = np.linalg.eigh(centred.T @ centred)
        views.append(centred @ vectors[:, ::-1][:, :2])  # largest, then middle principal axis
    reach = max(np.abs(v).max() for v in views) * 1.05
    fig = Figure(figsize=(3.0 * len(views), 3.2))
    for k, (view, label) in enumerate(zip(views, labels)):
        ax = fig.add_subplot(1, len(views), k + 1)
        ax.plot(view[:, 0], view[:, 1], color="0.55", lw=0.6)
        ax.scatter(view[:, 0], view[:, 1], c=np.arange(len(view)), cmap="viridis", s=8, zorder=2)
        ax.set_xlim(-reach, reach)
        ax.set_ylim(-reach, reach)
        ax.set_aspect("equal")
        ax.set_title(label, fontsize="small")
        ax.set_xlabel("sigma")
    return _save(fig, path)


def reweighted_figure(curves, path, rungs=None, peak=None, points_label="rung averages"):
    """MBAR curves across temperatures: <Rg^2>, <Re^2>, potential energy and heat capacity per bead.

    Each panel shows the reweighted average with a one-standard-error band over the sampled
    range (left out where the curves are NaN, between temperatures that overlap too little) and,
    with ``rungs``, the direct averages at the sampled temperatures as points.

    Parameters
    ----------
    curves : beadsim.analysis.reweight.Curves
        From :func:`beadsim.analysis.reweight.reweighted_curves`.
    path : str or os.PathLike
        Output (module notes).
    rungs : sequence of dict, optional
        Per rung (or sweep temperature) ``temperature`` and, for each quantity, its mean and
        ``<quantity>_error`` (as in the ``rungs`` of :func:`beadsim.studies.tempering.analyze_ladder`);
        quantities a row lacks are not drawn for it.
    peak : Estimate, optional
        Heat-capacity maximum to mark on every panel.
    points_label : str
        Legend of the points.

    Returns
    -------
    list of str
    """
    panels = (("rg2", "<Rg^2> [sigma^2]"), ("re2", "<Re^2> [sigma^2]"),
              ("potential_energy", "<U>/N [epsilon]"), ("heat_capacity", "C/N [k_B]"))
    fig = Figure(figsize=(8.4, 6.4))
    t = curves.temperatures
    for i, (name, label) in enumerate(panels):
        ax = fig.add_subplot(2, 2, i + 1)
        if name in curves.means:
            mean, err = curves.means[name], curves.errors[name]
            ax.plot(t, mean, color="C0", lw=1.2, label="MBAR")
            ax.fill_between(t, mean - err, mean + err, color="C0", alpha=0.25, lw=0)
        shown = [r for r in rungs or () if name in r]
        if shown:
            ax.errorbar([r["temperature"] for r in shown], [r[name] for r in shown],
                        [r.get(f"{name}_error", np.nan) for r in shown], color="C1", marker="o", ms=3, lw=0,
                        elinewidth=1, capsize=2, label=points_label)
        _mark_estimate(ax, peak, label="C peak")
        ax.set_xlabel(_control_label("temperature"))
        ax.set_ylabel(label)
        if i == 0:
            ax.legend(frameon=False, fontsize="x-small")
    return _save(fig, path)
