"""Reweighting across temperatures with MBAR: smooth averages and heat capacity between sampled temperatures.

Method: the multistate Bennett acceptance ratio (MBAR; Shirts and Chodera,
J. Chem. Phys. 129, 124105, 2008) through :class:`pymbar.MBAR`. Samples from K
canonical ensembles at temperatures T_k (one model, so the reduced potential of
configuration x at temperature T is ``u(x; T) = U(x) / T`` with k_B = 1; kinetic
terms cancel because only configurations are reweighted) are pooled; the
K series may come from replica exchange or from independent runs, several of
which may share a temperature (each run is then its own MBAR state); the
average of an observable A at any temperature T inside the sampled range is

    <A>_T = sum_n w_n(T) A_n,   w_n(T) ∝ exp(-U_n / T) / sum_k N_k exp(f_k - U_n / T_k),

with f_k the dimensionless free energies MBAR solves for. Error bars are MBAR's
asymptotic standard errors, enlarged for residual correlation (below). MBAR
needs uncorrelated samples: each temperature's series is first cut at its
detected equilibration (Chodera, J. Chem. Theory Comput. 12, 1799, 2016) and
then subsampled every g samples, g the largest
statistical inefficiency of its energy and observables
(:func:`pymbar.timeseries.subsample_correlated_data`).

Samples kept every g steps are still slightly correlated (for an exponential
autocorrelation, ``rho(g) = exp(-g / tau)`` is about 0.14 for g = 2 tau + 1), so
MBAR's errors, which treat them as independent, come out too small (by 15 to
40 % for synthetic AR(1) series with correlation 0.8 to 0.95 per sample, our
calibration over 40 seeds; with the correction below the root-mean-square
deviation in errors is 0.9 to 1.1, checked by a slow test). Each series'
*residual* inefficiency ``g_r = 1 + 2 sum_m rho(m g)`` (its normalised
autocorrelation at multiples of g, summed up to the first non-positive value) is
therefore estimated from the full series, and every MBAR error (and the
bootstrap error of the peak) is multiplied by ``sqrt(max g_r)`` over series and
observables, which errs on the safe side away from the worst-correlated series.

The configurational heat capacity per bead is
``C/N = (<U^2> - <U>^2) / (N T^2)`` (k_B), the quantity direct runs report in
the sweep's results table; its error follows from the MBAR covariance of
``<U>`` and ``<U^2>`` by linear propagation. The transition temperature is
the maximum of C(T) on a fine grid refined by a parabola through the three
highest grid points; its error is the standard deviation over bootstrap
resamples of the decorrelated samples (each resample solved again by MBAR).

Overlap: between two neighbouring sampled temperatures a and b, the overlap is
``O_ab = mean_{i in a} sum_{j in b} O_ij`` from MBAR's overlap matrix ``O``
(its rows sum to 1; runs sharing a temperature are grouped), taken as the
smaller of ``O_ab`` and ``O_ba``. Below :data:`MIN_NEIGHBOUR_OVERLAP` the
samples of the two temperatures say too little about the temperatures between
them, and the curves are left out there (NaN) instead of being drawn.
"""

import itertools
import logging
from dataclasses import dataclass, field

import numpy as np
from scipy.special import logsumexp

from .._validate import as_array, positive_int
from ..errors import AnalysisError, InputError
from .stats import MIN_SAMPLES, detect_equilibration, statistical_inefficiency, timeseries

logger = logging.getLogger(__name__)

#: Smallest neighbour overlap (module notes) over which curves are drawn. Common practice: Klimovich,
#: Shirts and Mobley, J. Comput.-Aided Mol. Des. 29, 397 (2015) ask for off-diagonal overlap-matrix
#: elements of at least 0.03 between neighbouring states (from memory).
MIN_NEIGHBOUR_OVERLAP = 0.03


@dataclass(frozen=True)
class Pooled:
    """Decorrelated samples of K temperatures, ready for MBAR.

    Attributes
    ----------
    temperatures : ndarray, shape (K,), float64
        epsilon/k_B, non-decreasing (runs sharing a temperature are separate states).
    energies : ndarray, shape (n,), float64
        Potential energy of every kept sample, epsilon (all series, one after the other).
    observables : dict of str to ndarray, shape (n,)
        The observables of the same samples.
    counts : ndarray, shape (K,), int64
        Samples kept per temperature.
    inefficiencies : ndarray, shape (K,), float64
        Statistical inefficiency g used to subsample each temperature, in samples.
    equilibration : ndarray, shape (K,), int64
        First sample counted as equilibrated at each temperature.
    residual_inefficiencies : ndarray, shape (K,), float64
        Largest residual inefficiency g_r (module notes) of each series' kept samples, >= 1.
    energy_reference : float
        Subtracted from every energy before it is divided by T, epsilon (the mean of the kept
        energies). It adds a constant to each state's reduced potentials, which shifts MBAR's free
        energies but not its weights, and keeps the reduced potentials of chains whose bond energy
        is thousands of epsilon small enough for pymbar's weight checks.
    """

    temperatures: np.ndarray
    energies: np.ndarray
    observables: dict
    counts: np.ndarray
    inefficiencies: np.ndarray
    equilibration: np.ndarray
    energy_reference: float
    residual_inefficiencies: np.ndarray

    @property
    def error_scale(self):
        """Factor ``sqrt(max g_r)`` applied to MBAR's errors (module notes)."""
        return float(np.sqrt(np.max(self.residual_inefficiencies)))


def pool_samples(temperatures, energies, observables=None, detect=True):
    """Cut each temperature's series at equilibration and subsample it to uncorrelated samples.

    Parameters
    ----------
    temperatures : array_like, shape (K,), float64
        Temperature of each series, epsilon/k_B, non-decreasing (independent runs at one temperature
        are given as separate series), with at least two different values.
    energies : sequence of K array_like, shape (n_k,)
        Potential energy time series of each run, epsilon.
    observables : dict of str to sequence of K array_like, shape (n_k,), optional
        Further time series sampled with the energies (e.g. ``rg2``).
    detect : bool
        Discard an equilibration period found by Chodera's method.

    Returns
    -------
    Pooled
    """
    t = as_array(temperatures, "temperatures", shape=(None,))
    if np.unique(t).size < 2 or np.any(t <= 0) or np.any(np.diff(t) < 0):
        raise InputError(f"temperatures: need values > 0 in increasing order, at least two of them different, "
                         f"got {t.tolist()}")
    observables = dict(observables or {})
    if len(energies) != t.size or any(len(v) != t.size for v in observables.values()):
        raise InputError(f"energies and observables: need one series per temperature given ({t.size})")
    kept_u, kept_obs = [], {name: [] for name in observables}
    counts, gs, starts, residuals = [], [], [], []
    for k in range(t.size):
        u = as_array(energies[k], f"energies[{k}]", shape=(None,))
        series = {name: as_array(v[k], f"observables[{name!r}][{k}]", shape=(u.size,))
                  for name, v in observables.items()}
        if u.size < MIN_SAMPLES:
            raise AnalysisError(f"temperature {t[k]:g}: only {u.size} samples; MBAR needs {MIN_SAMPLES} or more "
                                "per temperature (sample for longer)")
        t0 = detect_equilibration(u)[0] if detect else 0
        g = max([_inefficiency(u[t0:])] + [_inefficiency(x[t0:]) for x in series.values()])
        index = np.asarray(timeseries.subsample_correlated_data(u[t0:], g=g), dtype=np.int64) + t0
        residuals.append(max(_residual_inefficiency(x[t0:], g) for x in [u, *series.values()]))
        kept_u.append(u[index])
        for name, x in series.items():
            kept_obs[name].append(x[index])
        counts.append(index.size)
        gs.append(g)
        starts.append(t0)
    energies = np.concatenate(kept_u)
    return Pooled(temperatures=t, energies=energies,
                  observables={name: np.concatenate(v) for name, v in kept_obs.items()},
                  counts=np.array(counts, dtype=np.int64), inefficiencies=np.array(gs),
                  equilibration=np.array(starts, dtype=np.int64), energy_reference=float(energies.mean()),
                  residual_inefficiencies=np.array(residuals))


def _inefficiency(x):
    """g of a series, 1 for a constant one (nothing to decorrelate)."""
    return 1.0 if np.ptp(x) == 0 else statistical_inefficiency(x)


def _residual_inefficiency(x, g):
    """``1 + 2 sum_m rho(m g)`` of a series thinned every g samples, from its full autocorrelation (module notes)."""
    d = x - x.mean()
    var = d @ d / d.size
    total = 1.0
    if var == 0:
        return total
    for m in itertools.count(1):
        lag = int(round(m * g))
        if lag >= d.size - 1:
            break
        rho = (d[:-lag] @ d[lag:]) / ((d.size - lag) * var)
        if rho <= 0:
            break
        total += 2.0 * rho
    return total


def _reduced(pooled, temperatures):
    """Reduced potentials u_kn = (U_n - U_ref) / T_k, shape (K, n) (see ``Pooled.energy_reference``)."""
    return (pooled.energies - pooled.energy_reference)[None, :] / temperatures[:, None]


def _solve(pooled, initial_f_k=None):
    from pymbar import MBAR  # after .stats, which quiets pymbar's import-time log
    from pymbar.utils import ParameterError

    try:
        return MBAR(_reduced(pooled, pooled.temperatures), pooled.counts, initial_f_k=initial_f_k)
    except ParameterError as exc:
        raise AnalysisError(f"MBAR did not converge ({exc}); check that neighbouring temperatures overlap "
                            "(swap acceptance well above zero)") from None


@dataclass(frozen=True)
class Curves:
    """MBAR averages on a temperature grid.

    Attributes
    ----------
    temperatures : ndarray, shape (L,), float64
        Grid, epsilon/k_B.
    means, errors : dict of str to ndarray, shape (L,)
        ``potential_energy`` (epsilon, per bead), ``heat_capacity`` (k_B per bead) and every pooled
        observable, with their standard errors.
        Grid points between two neighbouring sampled temperatures that overlap too little are NaN.
    n_beads : int
        Beads the per-bead quantities are divided by.
    overlap : float
        Second-largest eigenvalue gap of MBAR's overlap matrix (``1 - lambda_2``): near 0 means the
        sampled temperatures do not overlap and the curves between them are not to be trusted.
    sampled : ndarray, shape (M,), float64
        The distinct sampled temperatures, epsilon/k_B.
    neighbour_overlap : ndarray, shape (M - 1,), float64
        Overlap of each pair of neighbouring sampled temperatures (module notes).
    min_overlap : float
        Neighbour overlap below which the curves between the pair were left out.
    pooled : Pooled
        The samples used.
    """

    temperatures: np.ndarray
    means: dict
    errors: dict
    n_beads: int
    overlap: float
    sampled: np.ndarray
    neighbour_overlap: np.ndarray
    min_overlap: float
    pooled: Pooled = field(repr=False)

    @property
    def gaps(self):
        """Pairs ``(T_low, T_high)`` of neighbouring sampled temperatures whose overlap is below ``min_overlap``."""
        return [(float(a), float(b)) for a, b, o in zip(self.sampled[:-1], self.sampled[1:], self.neighbour_overlap)
                if o < self.min_overlap]

    def table(self):
        """The curves as a pandas DataFrame: ``temperature``, then each quantity and its ``_error``."""
        import pandas as pd
        data = {"temperature": self.temperatures}
        for name in self.means:
            data[name] = self.means[name]
            data[f"{name}_error"] = self.errors[name]
        return pd.DataFrame(data)


def _check_grid(grid, pooled):
    g = as_array(grid, "grid", shape=(None,))
    lo, hi = pooled.temperatures[0], pooled.temperatures[-1]
    outside = g[(g < lo * (1 - 1e-12)) | (g > hi * (1 + 1e-12))]
    if g.size == 0 or outside.size:
        raise InputError(f"grid: temperatures must lie inside the sampled range [{lo:g}, {hi:g}]; "
                         f"got {outside.tolist() or 'an empty grid'} (MBAR does not extrapolate)")
    return g


def reweighted_curves(pooled, grid, n_beads, min_overlap=MIN_NEIGHBOUR_OVERLAP):
    """MBAR averages, errors and heat capacity at every temperature of ``grid``.

    Parameters
    ----------
    pooled : Pooled
        From :func:`pool_samples`.
    grid : array_like, shape (L,), float64
        Temperatures inside the sampled range, epsilon/k_B.
    n_beads : int
        Beads in the system (per-bead energy and heat capacity).
    min_overlap : float
        Leave the curves out (NaN) between neighbouring sampled temperatures that overlap less
        (module notes); 0 keeps every grid point.

    Returns
    -------
    Curves
    """
    from pymbar.utils import ParameterError

    grid = _check_grid(grid, pooled)
    n_beads = positive_int(n_beads, "n_beads")
    min_overlap = _overlap_threshold(min_overlap)
    mbar = _solve(pooled)
    try:
        return _curves(mbar, pooled, grid, n_beads, min_overlap)
    except ParameterError as exc:
        raise AnalysisError(f"MBAR expectations failed ({exc})") from None


def _overlap_threshold(value):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 <= value < 1:
        raise InputError(f"min_overlap: expected a number in [0, 1), got {value!r}")
    return float(value)


def _neighbour_overlap(matrix, temperatures):
    """Overlap of each pair of neighbouring sampled temperatures (module notes).

    Parameters
    ----------
    matrix : ndarray, shape (K, K), float64
        MBAR's overlap matrix (``pymbar.MBAR.compute_overlap()["matrix"]``).
    temperatures : ndarray, shape (K,), float64
        Temperature of each state, non-decreasing, epsilon/k_B.

    Returns
    -------
    sampled : ndarray, shape (M,), float64
        Distinct temperatures.
    overlap : ndarray, shape (M - 1,), float64
        ``min(O_ab, O_ba)`` of each neighbouring pair.
    """
    matrix = np.asarray(matrix)
    sampled, group = np.unique(temperatures, return_inverse=True)
    members = [group == m for m in range(sampled.size)]

    def between(a, b):
        return float(matrix[np.ix_(members[a], members[b])].sum(axis=1).mean())

    return sampled, np.array([min(between(m, m + 1), between(m + 1, m)) for m in range(sampled.size - 1)])


def _in_gaps(values, sampled, overlap, min_overlap):
    """Boolean mask: which of ``values`` lie strictly between two neighbours overlapping less than ``min_overlap``."""
    values = np.asarray(values, dtype=np.float64)
    inside = np.zeros(values.shape, dtype=bool)
    for a, b, o in zip(sampled[:-1], sampled[1:], overlap):
        if o < min_overlap:
            inside |= (values > a) & (values < b)
    return inside


def _curves(mbar, pooled, grid, n_beads, min_overlap):
    u_ln = _reduced(pooled, grid)
    means, errors = {}, {}
    for name, values in pooled.observables.items():
        out = mbar.compute_expectations(values, u_kn=u_ln)
        means[name], errors[name] = np.asarray(out["mu"]), np.asarray(out["sigma"])
    shift = pooled.energy_reference
    du = pooled.energies - shift
    u_mean, u_err, cv, cv_err = (np.empty(grid.size) for _ in range(4))
    for i, temp in enumerate(grid):
        mu, cov = _two_moments(mbar, du, u_ln[i])
        u_mean[i], u_err[i] = mu[0] + shift, np.sqrt(max(cov[0, 0], 0.0))
        scale = 1.0 / (n_beads * temp * temp)
        cv[i] = (mu[1] - mu[0] ** 2) * scale
        jac = np.array([-2.0 * mu[0], 1.0]) * scale
        cv_err[i] = np.sqrt(max(jac @ cov @ jac, 0.0))
    means["potential_energy"], errors["potential_energy"] = u_mean / n_beads, u_err / n_beads
    means["heat_capacity"], errors["heat_capacity"] = cv, cv_err
    overlap = mbar.compute_overlap()
    for values in errors.values():
        values *= pooled.error_scale
    sampled, pairs = _neighbour_overlap(overlap["matrix"], pooled.temperatures)
    hidden = _in_gaps(grid, sampled, pairs, min_overlap)
    for values in itertools.chain(means.values(), errors.values()):
        values[hidden] = np.nan
    if hidden.any():
        logger.info("MBAR curves left out at %d of %d temperatures: neighbouring sampled temperatures overlap "
                    "less than %g", hidden.sum(), grid.size, min_overlap)
    eigenvalues = np.sort(np.real(overlap["eigenvalues"]))[::-1]
    return Curves(temperatures=grid, means=means, errors=errors, n_beads=n_beads,
                  overlap=float(1.0 - eigenvalues[1]), sampled=sampled, neighbour_overlap=pairs,
                  min_overlap=min_overlap, pooled=pooled)


def _two_moments(mbar, du, u_n):
    """MBAR estimates of <dU> and <dU^2> at the state with reduced potentials ``u_n``, and their covariance.

    The covariance is built from pymbar's Theta matrix of the augmented states exactly as pymbar
    builds the standard errors it returns (their squares are its diagonal).
    """
    out = mbar.compute_multiple_expectations(np.vstack([du, du * du]), u_n, return_theta=True)
    theta = np.asarray(out["Theta"])
    cov = theta[:2, :2] + theta[2:, 2:] - theta[:2, 2:] - theta[2:, :2]
    return np.asarray(out["mu"]), cov


def _heat_capacity_curve(pooled, f_k, grid, n_beads):
    """MBAR heat capacity per bead on ``grid`` from solved free energies (vectorised weights, module notes)."""
    log_denominator = logsumexp(np.log(pooled.counts)[:, None] + f_k[:, None] - _reduced(pooled, pooled.temperatures),
                                axis=0)
    log_w = -_reduced(pooled, grid) - log_denominator[None, :]
    w = np.exp(log_w - logsumexp(log_w, axis=1, keepdims=True))
    du = pooled.energies - pooled.energy_reference
    first, second = w @ du, w @ (du * du)
    return (second - first ** 2) / (n_beads * grid ** 2)


def _peak(grid, curve):
    """Grid maximum refined by a parabola through it and its neighbours; None at the grid's edge."""
    top = int(np.argmax(curve))
    if top in (0, grid.size - 1):
        return None
    a, b, _ = np.polyfit(grid[top - 1:top + 2] - grid[top], curve[top - 1:top + 2], 2)
    return float(grid[top] - b / (2 * a)) if a < 0 else float(grid[top])


@dataclass(frozen=True)
class Peak:
    """Temperature of the heat-capacity maximum.

    Attributes
    ----------
    value : float or None
        epsilon/k_B; None when the maximum lies at the edge of the sampled range.
    error : float or None
        Bootstrap standard deviation, epsilon/k_B.
    height : float or None
        C/N at the maximum, k_B.
    n_bootstrap : int
        Resamples with an interior maximum (of those drawn).
    note : str
        Why ``value`` is None, or caveats.
    """

    value: float | None
    error: float | None
    height: float | None
    n_bootstrap: int
    note: str = ""


def heat_capacity_peak(pooled, n_beads, n_grid=401, n_bootstrap=100, seed=0, min_overlap=MIN_NEIGHBOUR_OVERLAP):
    """Transition temperature from the maximum of the MBAR heat capacity, with a bootstrap error.

    Parameters
    ----------
    pooled : Pooled
        From :func:`pool_samples`.
    n_beads : int
        Beads in the system.
    n_grid : int
        Grid points across the sampled range.
    n_bootstrap : int
        Resamples (within each temperature, with replacement) for the error; >= 10.
    seed : int
        Seed of the resampling.
    min_overlap : float
        A maximum between neighbouring sampled temperatures that overlap less is not reported
        (see :func:`reweighted_curves`).

    Returns
    -------
    Peak
    """
    n_beads = positive_int(n_beads, "n_beads")
    n_bootstrap = positive_int(n_bootstrap, "n_bootstrap")
    if n_bootstrap < 10:
        raise InputError(f"n_bootstrap: need 10 or more resamples for an error, got {n_bootstrap}")
    min_overlap = _overlap_threshold(min_overlap)
    grid = np.linspace(pooled.temperatures[0], pooled.temperatures[-1], positive_int(n_grid, "n_grid"))
    mbar = _solve(pooled)
    f_k = np.asarray(mbar.f_k)
    curve = _heat_capacity_curve(pooled, f_k, grid, n_beads)
    value = _peak(grid, curve)
    if value is None:
        return Peak(None, None, None, 0, f"no peak inside the range: the heat capacity is largest at its edge "
                    f"(T = {grid[np.argmax(curve)]:.4g}); extend the temperatures past the transition")
    sampled, pairs = _neighbour_overlap(mbar.compute_overlap()["matrix"], pooled.temperatures)
    if _in_gaps(value, sampled, pairs, min_overlap):
        return Peak(None, None, None, 0, f"the heat-capacity maximum (T = {value:.4g}) lies between sampled "
                    f"temperatures that overlap less than {min_overlap:g}: add temperatures there")
    rng = np.random.default_rng(seed)
    bounds = np.concatenate([[0], np.cumsum(pooled.counts)])
    found = []
    for _ in range(n_bootstrap):
        pick = np.concatenate([rng.integers(a, b, b - a) for a, b in itertools.pairwise(bounds)])
        resample = Pooled(pooled.temperatures, pooled.energies[pick], {}, pooled.counts, pooled.inefficiencies,
                          pooled.equilibration, pooled.energy_reference, pooled.residual_inefficiencies)
        f_b = np.asarray(_solve(resample, initial_f_k=f_k).f_k)
        peak = _peak(grid, _heat_capacity_curve(resample, f_b, grid, n_beads))
        if peak is not None:
            found.append(peak)
    note = "" if len(found) == n_bootstrap else (f"{n_bootstrap - len(found)} of {n_bootstrap} resamples had "
                                                 "their maximum at the edge of the range")
    error = float(np.std(found, ddof=1)) * pooled.error_scale if len(found) >= 10 else None
    return Peak(value, error, float(np.interp(value, grid, curve)), len(found), note)
