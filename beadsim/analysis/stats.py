"""Errors of time averages: equilibration detection, statistical inefficiency, blocking, summaries.

* Statistical inefficiency ``g = 1 + 2 sum_t (1 - t/n) C(t)`` with the sum cut at
  the first non-positive normalised autocorrelation C(t), as implemented in
  :func:`pymbar.timeseries.statistical_inefficiency`; the number of effectively
  independent samples is ``n / g`` and the standard error of the mean is
  ``s * sqrt(g / n)``.
* Equilibration detection: the start t0 that maximises the number of
  independent samples in ``x[t0:]`` (Chodera, J. Chem. Theory Comput. 12, 1799,
  2016), via :func:`pymbar.timeseries.detect_equilibration`.
* Blocking: Flyvbjerg and Petersen, J. Chem. Phys. 91, 461 (1989). The series
  is halved repeatedly by averaging neighbours; the plateau level is chosen with
  the automated test of Jonsson, Phys. Rev. E 98, 043304 (2018) [rule from
  memory]: the first level j where
  ``M_j = sum_{k>=j} n_k (gamma_k / sigma_k^2)^2`` (gamma_k the lag-one
  autocovariance and sigma_k^2 the variance at level k) falls below the 99 %
  quantile of chi-square with (number of levels - j) degrees of freedom.
* Statistical inefficiency from both (:func:`inefficiency_estimate`): the larger
  of the autocorrelation estimate and the blocking estimate
  ``g_b = (e_j / e_0)^2`` (plateau error over the error of uncorrelated samples),
  so that the error of a mean, or the number of independent samples, errs on the
  cautious side. Standard errors: for the autocorrelation sum cut after lag M,
  ``var(g) ~ 2 (2 M + 1) g^2 / n`` (Madras and Sokal, J. Stat. Phys. 50, 109,
  1988, appendix, for tau_int = g / 2; from memory, checked on AR(1) series in
  the tests); for blocking, the plateau error has relative standard
  error ``1 / sqrt(2 (n_j - 1))`` (Flyvbjerg and Petersen 1989), so g_b has
  ``sqrt(2 / (n_j - 1))``. Neither estimate is a bound: both are low when the
  series is not much longer than its correlation time. The blocking estimate is
  also low by more than its standard error when the plateau test stops early: for
  AR(1) with g = 9 and 2^16 samples it picks blocks of 32-64 samples, where the
  exact blocked ratio 1 + 2 sum_{t<b} (1 - t/b) phi^t is 7.75-8.38. It earns its
  place by catching slow components that the autocorrelation sum, cut at its first
  zero, misses.
"""

import logging
import math
from dataclasses import dataclass

import numpy as np
# pymbar logs an installation banner (no JAX) and a general caution at import; both are noise
# for beadsim users (the caution is covered by reporting n_independent with every error).
logging.getLogger("pymbar").setLevel(logging.ERROR)
from pymbar import timeseries  # noqa: E402
from pymbar.utils import ParameterError
from scipy.stats import chi2

from .._validate import as_array, positive_int
from ..errors import AnalysisError
from ._common import autocorrelation_sum

logger = logging.getLogger(__name__)

MIN_SAMPLES = 32
"""Shorter series are not analysed for equilibration or errors."""

CONSTANT_SPREAD = 1e-12
"""Relative spread (range over the largest magnitude) below which a series counts as constant: rounding only."""

MIN_INDEPENDENT = 20
"""Fewest effectively independent samples for which :func:`summarize` reports an error (common practice)."""


def _series(series, name="series", min_length=2):
    x = as_array(series, name, shape=(None,))
    if x.size < min_length:
        raise AnalysisError(f"{name}: need at least {min_length} samples, got {x.size}")
    return x


def is_constant(series):
    """True if the samples differ by rounding only (:data:`CONSTANT_SPREAD`)."""
    x = np.asarray(series, dtype=np.float64)
    return bool(np.ptp(x) <= CONSTANT_SPREAD * np.max(np.abs(x)))


def statistical_inefficiency(series):
    """Statistical inefficiency g of a time series (see the module notes).

    Parameters
    ----------
    series : array_like, shape (n,), float64
        Equally spaced samples, n >= 2.

    Returns
    -------
    float
        g >= 1, in units of the sampling interval.

    Raises
    ------
    AnalysisError
        The series is constant or too short.
    """
    x = _series(series)
    if np.ptp(x) == 0:
        raise AnalysisError("series: constant, so its statistical inefficiency is undefined")
    try:
        return float(timeseries.statistical_inefficiency(x, fast=False))
    except ParameterError as exc:
        raise AnalysisError(f"series: statistical inefficiency undefined ({exc})") from None


SOKAL_WINDOW = 5.0
"""Window constant c of :func:`windowed_inefficiency` (Sokal recommends 4-6 for nearly exponential decay)."""


def windowed_inefficiency(series, c=SOKAL_WINDOW):
    """Statistical inefficiency with Sokal's automatic window: g = 2 tau, tau = 1/2 + sum_{t=1}^{M} rho(t),
    M the smallest lag with M >= c tau(M) (Madras and Sokal, J. Stat. Phys. 50, 109, 1988; Sokal, in
    Functional Integration, NATO ASI B 361, 1997).

    Unlike the sum cut at the first non-positive correlation (:func:`statistical_inefficiency`), which
    keeps every positive noise term and so averages about 1.13 on 320 independent samples, the window
    is not chosen by the sign of the noise, and g is not clipped at 1: the estimate is unbiased for
    independent samples, which the error calibration of :func:`summarize` needs.

    Parameters
    ----------
    series : array_like, shape (n,), float64
        Equally spaced samples, not constant, n >= 2.
    c : float
        Window constant.

    Returns
    -------
    float
        g > 0, in sampling intervals.
    """
    x = _series(series)
    if is_constant(x):
        raise AnalysisError("series: constant, so its statistical inefficiency is undefined")
    sums = autocorrelation_sum((x - x.mean())[:, None])
    rho = sums / sums[0]
    n = x.size
    tau = 0.5
    for m in range(1, n):
        tau += rho[m]
        if m >= c * tau:
            break
    return float(max(2.0 * tau, 1.0 / n))


def effective_sample_count(series):
    """Number of effectively independent samples ``n / g`` of a time series (float)."""
    x = _series(series)
    return x.size / statistical_inefficiency(x)


def detect_equilibration(series, n_origins=200):
    """Start of the equilibrated part of a series (Chodera 2016).

    Parameters
    ----------
    series : array_like, shape (n,), float64
        Equally spaced samples, n >= :data:`MIN_SAMPLES`.
    n_origins : int
        Number of candidate start points tried (evenly spaced); bounds the cost.

    Returns
    -------
    t0 : int
        Index of the first equilibrated sample.
    g : float
        Statistical inefficiency of ``series[t0:]``.
    n_independent : float
        Effectively independent samples in ``series[t0:]``.
    """
    x = _series(series, min_length=MIN_SAMPLES)
    n_origins = positive_int(n_origins, "n_origins")
    t0, g, n_eff = timeseries.detect_equilibration(x, fast=True, nskip=max(1, x.size // n_origins))
    return int(t0), float(g), float(n_eff)


@dataclass(frozen=True)
class Blocking:
    """Flyvbjerg-Petersen blocking analysis of the mean of a series.

    Attributes
    ----------
    n_blocks : ndarray, shape (n_levels,), int64
        Samples (block averages) at each level; level 0 is the raw series.
    errors : ndarray, shape (n_levels,), float64
        Standard error of the mean estimated at each level,
        ``sqrt(sigma_k^2 / (n_k - 1))``.
    error_uncertainties : ndarray, shape (n_levels,), float64
        Their own standard errors, ``errors / sqrt(2 (n_k - 1))``.
    level : int or None
        Plateau level chosen by Jonsson's test; None if no level passes (series too short).
    error : float or None
        ``errors[level]``, or None.
    """

    n_blocks: np.ndarray
    errors: np.ndarray
    error_uncertainties: np.ndarray
    level: int | None
    error: float | None


def blocking(series):
    """Blocking analysis (Flyvbjerg and Petersen 1989) with automated plateau choice.

    Only the last ``2**floor(log2(n))`` samples are used, so every level halves exactly.

    Parameters
    ----------
    series : array_like, shape (n,), float64
        Equally spaced samples, n >= 4.

    Returns
    -------
    Blocking
    """
    x = _series(series, min_length=4)
    d = int(math.floor(math.log2(x.size)))
    x = x[x.size - 2 ** d:]
    mu = x.mean()
    n_blocks, variances, gammas = [], [], []
    for _ in range(d - 1):  # stop while two or more blocks remain
        n = x.size
        dev = x - mu
        n_blocks.append(n)
        variances.append(np.mean(dev * dev))
        gammas.append(np.mean(dev[:-1] * dev[1:]) * (n - 1) / n)
        x = 0.5 * (x[0::2] + x[1::2])
    n_blocks = np.array(n_blocks, dtype=np.int64)
    variances = np.array(variances)
    gammas = np.array(gammas)
    errors = np.sqrt(variances / (n_blocks - 1))
    uncertainties = errors / np.sqrt(2.0 * (n_blocks - 1))
    if np.all(variances == 0):
        raise AnalysisError("series: constant, so its blocking error is undefined")
    terms = n_blocks * (gammas / variances) ** 2
    m_stat = np.cumsum(terms[::-1])[::-1]
    thresholds = chi2.ppf(0.99, np.arange(len(terms), 0, -1))
    passing = np.flatnonzero(m_stat < thresholds)
    level = int(passing[0]) if passing.size else None
    return Blocking(n_blocks=n_blocks, errors=errors, error_uncertainties=uncertainties, level=level,
                    error=None if level is None else float(errors[level]))


AUTOCORRELATION_MIN_LAG = 3
"""The autocorrelation sum of :func:`statistical_inefficiency` runs at least past this lag
(pymbar's ``mintime``) before stopping where the autocorrelation first is <= 0."""


def autocorrelation_window(series):
    """Last lag M in the autocorrelation sum of :func:`statistical_inefficiency`.

    The sum runs over lags t = 1, 2, ... and stops at the first t >
    :data:`AUTOCORRELATION_MIN_LAG` whose normalised autocorrelation
    ``C(t) = sum_s d_s d_{s+t} / ((n - t) mean(d^2))`` (d the deviations from the
    mean) is <= 0, as in :func:`pymbar.timeseries.statistical_inefficiency`.

    Parameters
    ----------
    series : array_like, shape (n,), float64
        Equally spaced samples, n >= 2, not constant.

    Returns
    -------
    int
        M, the last lag summed (n - 2 when C(t) never turns <= 0).
    """
    x = _series(series)
    d = x - x.mean()
    n = x.size
    c = autocorrelation_sum(d[:, None])[: n - 1] / ((n - np.arange(n - 1)) * np.mean(d * d))
    lags = np.arange(n - 1)
    stops = np.flatnonzero((c <= 0.0) & (lags > AUTOCORRELATION_MIN_LAG))
    return int(stops[0]) - 1 if stops.size else n - 2


@dataclass(frozen=True)
class Inefficiency:
    """Statistical inefficiency of a series as the larger of two estimates, each with its standard error.

    Attributes
    ----------
    value, error : float
        g (>= 1, in sampling intervals) and its standard error: the larger estimate and its own error.
    source : {"autocorrelation", "blocking"}
        Which estimate ``value`` is.
    autocorrelation, autocorrelation_error : float
        :func:`statistical_inefficiency` and its Madras-Sokal error (module notes).
    window : int
        Last lag of the autocorrelation sum (:func:`autocorrelation_window`).
    blocking, blocking_error : float or None
        ``(e_j / e_0)^2`` from :func:`blocking` and its error; None when blocking finds no plateau.
    """

    value: float
    error: float
    source: str
    autocorrelation: float
    autocorrelation_error: float
    window: int
    blocking: float | None
    blocking_error: float | None

    def as_dict(self):
        """Plain-dict copy (JSON-ready)."""
        return dict(self.__dict__)


def inefficiency_estimate(series):
    """Statistical inefficiency as the larger of the autocorrelation and blocking estimates (module notes).

    Parameters
    ----------
    series : array_like, shape (n,), float64
        Equally spaced samples of an equilibrated series, n >= 4, not constant.

    Returns
    -------
    Inefficiency

    Raises
    ------
    AnalysisError
        The series is constant or too short.
    """
    x = _series(series, min_length=4)
    g_acf = statistical_inefficiency(x)
    window = autocorrelation_window(x)
    acf_error = g_acf * math.sqrt(2.0 * (2 * window + 1) / x.size)
    blocks = blocking(x)
    g_blk = blk_error = None
    if blocks.level is not None:
        g_blk = float((blocks.errors[blocks.level] / blocks.errors[0]) ** 2)
        blk_error = g_blk * math.sqrt(2.0 / (blocks.n_blocks[blocks.level] - 1))
    use_blocking = g_blk is not None and g_blk > g_acf
    return Inefficiency(value=g_blk if use_blocking else g_acf, error=blk_error if use_blocking else acf_error,
                        source="blocking" if use_blocking else "autocorrelation", autocorrelation=g_acf,
                        autocorrelation_error=acf_error, window=window, blocking=g_blk, blocking_error=blk_error)


TRANSIENT_SIGNIFICANCE = 5.0
"""Standard errors by which the mean of a detected start must differ from the rest for :func:`significant_start`
to drop it."""


def significant_start(series):
    """Start of the equilibrated part: :func:`detect_equilibration`'s, kept only where it marks a transient.

    The detected start is the one that maximises n / g of the rest, so on a stationary series it picks
    whatever start looks most like a transient, and dropping it selects the rest: errors of the mean were
    6-17 % too small in variance over 1,000 stationary series (tests/unit/analysis/test_error_calibration.py).
    The start is therefore dropped only when its mean differs from the rest's by more than
    :data:`TRANSIENT_SIGNIFICANCE` standard errors (the dropped part counting as at most one independent
    sample per g); a real transient passes this by far, stationary noise almost never (variance ratios
    1.01-1.06 after the test).

    Parameters
    ----------
    series : array_like, shape (n,), float64
        Equally spaced samples, n >= :data:`MIN_SAMPLES`.

    Returns
    -------
    int
        Index of the first sample kept (0: nothing dropped).
    """
    x = _series(series, min_length=MIN_SAMPLES)
    t0 = detect_equilibration(x)[0]
    rest = x[t0:]
    if t0 == 0 or rest.size < 2 or is_constant(rest):
        return t0
    g = windowed_inefficiency(rest)
    variance = rest.var(ddof=1)
    error = math.sqrt(variance * min(1.0, g / t0) + variance * g / rest.size)
    return t0 if abs(x[:t0].mean() - rest.mean()) > TRANSIENT_SIGNIFICANCE * error else 0


@dataclass(frozen=True)
class Summary:
    """Mean of a time series with its error, or the reason no error can be given.

    Attributes
    ----------
    mean : float
        Mean of the equilibrated part (of the whole series if it was too short to split).
    error : float or None
        Standard error of ``mean``; None when the run is too short (see ``reason``).
    n_samples : int
        Length of the whole series.
    equilibration_index : int
        First sample counted as equilibrated (0 if none were discarded).
    statistical_inefficiency : float or None
        g of the equilibrated part, in sampling intervals.
    n_independent : float or None
        Effectively independent samples in the equilibrated part.
    blocking_error : float or None
        Flyvbjerg-Petersen error of the equilibrated part, as a cross-check.
    reason : str or None
        Why ``error`` is None; None when the error is given.
    """

    mean: float
    error: float | None
    n_samples: int
    equilibration_index: int
    statistical_inefficiency: float | None
    n_independent: float | None
    blocking_error: float | None
    reason: str | None

    def as_dict(self):
        """Plain-dict copy (JSON-ready)."""
        return dict(self.__dict__)


def summarize(series, min_independent=MIN_INDEPENDENT, detect=True):
    """Mean, standard error and sample statistics of a time series, with a clear "too short" outcome.

    Steps: (1) series shorter than :data:`MIN_SAMPLES` -> mean only, reason given;
    (2) discard the start found by :func:`significant_start` (if ``detect``);
    (3) g of the whole series (:func:`windowed_inefficiency`; the rest's own g is biased low by the
    choice of the start) and
    ``n_independent = n / g`` of the rest; (4) if fewer than
    ``min_independent`` independent samples remain, or the equilibrated part
    starts in the second half of the run, the error is withheld with a reason;
    otherwise ``error = s * sqrt(g / n)`` with s the sample standard deviation.

    Parameters
    ----------
    series : array_like, shape (n,), float64
        Equally spaced samples (e.g. Rg per frame).
    min_independent : float
        Fewest independent samples for which an error is reported.
    detect : bool
        Detect and discard an equilibration period.

    Returns
    -------
    Summary
    """
    x = as_array(series, "series", shape=(None,))
    if x.size == 0:
        raise AnalysisError("series: empty")
    n = x.size

    def short(reason, mean, t0=0, g=None, n_eff=None):
        logger.info("no error bar: %s", reason)
        return Summary(mean=float(mean), error=None, n_samples=n, equilibration_index=t0,
                       statistical_inefficiency=g, n_independent=n_eff, blocking_error=None, reason=reason)

    if n < MIN_SAMPLES:
        return short(f"only {n} samples (need {MIN_SAMPLES} or more to estimate correlations)", x.mean())
    if is_constant(x):
        return short("the series is constant", x.mean())
    t0 = significant_start(x) if detect else 0
    prod = x[t0:]
    if prod.size < MIN_SAMPLES or is_constant(prod):
        return short(f"only {prod.size} usable samples after equilibration at sample {t0}", prod.mean(), t0)
    # the start is the one that maximises n / g of the rest, so the rest's own g is selected low (on
    # stationary AR(1) series its errors were 7 % too small); g of the whole series is not selected, and a
    # real transient can only raise it (tests/unit/analysis/test_error_calibration.py)
    g = windowed_inefficiency(x)
    n_eff = prod.size / g
    if 2 * t0 > n:
        return short(f"equilibration detected only at sample {t0} of {n}: the run looks unequilibrated",
                     prod.mean(), t0, g, n_eff)
    if n_eff < min_independent:
        return short(f"only {n_eff:.1f} independent samples (g = {g:.1f}); need {min_independent}",
                     prod.mean(), t0, g, n_eff)
    return Summary(mean=float(prod.mean()), error=float(prod.std(ddof=1) * math.sqrt(g / prod.size)),
                   n_samples=n, equilibration_index=t0, statistical_inefficiency=g, n_independent=n_eff,
                   blocking_error=blocking(prod).error, reason=None)


MAX_BLOCKS = 16
"""Most blocks of frames for :func:`block_jackknife`."""

MIN_BLOCKS = 8
"""Fewest blocks for which :func:`block_jackknife` reports an error (common practice: the error of an error
from B blocks is about 1/sqrt(2 (B - 1)), 27 % at 8)."""

BLOCK_INEFFICIENCIES = 4
"""A block spans at least this many statistical inefficiencies g, so that block means are nearly
independent (common practice; the residual correlation of neighbouring block means is about g / (2 L) for
blocks of L samples)."""


@dataclass(frozen=True)
class BlockPlan:
    """Contiguous, equal blocks of frames for a jackknife error.

    Attributes
    ----------
    blocks : list of ndarray of int
        Frame indices of each block (empty list when there are too few frames; see ``reason``).
    reason : str or None
        Why no error can be given, or None.
    """

    blocks: list
    reason: str | None


def plan_blocks(n_frames, inefficiency, max_blocks=MAX_BLOCKS, min_blocks=MIN_BLOCKS):
    """Split ``n_frames`` correlated frames into equal contiguous blocks of at least 4 g frames.

    Up to ``max_blocks`` blocks of ``L >= BLOCK_INEFFICIENCIES * g`` frames are taken from the end of the
    series (the first ``n_frames - B L`` frames, at most one block's worth, are left out).

    Parameters
    ----------
    n_frames : int
        Frames available (already past equilibration).
    inefficiency : float
        Statistical inefficiency g of the slowest quantity of interest, frames (>= 1).
    max_blocks, min_blocks : int
        Bounds on the number of blocks B.

    Returns
    -------
    BlockPlan
        With fewer than ``min_blocks`` blocks of the needed length, no blocks and the reason.
    """
    g = max(1.0, float(inefficiency))
    length = max(1, math.ceil(BLOCK_INEFFICIENCIES * g))
    count = min(max_blocks, n_frames // length)
    if count < min_blocks:
        return BlockPlan([], f"only {n_frames} frames: fewer than {min_blocks} blocks of "
                             f"{BLOCK_INEFFICIENCIES} g = {length} frames (g = {g:.3g} frames)")
    length = n_frames // count
    start = n_frames - count * length
    return BlockPlan([np.arange(start + k * length, start + (k + 1) * length) for k in range(count)], None)


@dataclass(frozen=True)
class JackknifeEstimate:
    """An estimator of frame averages with its delete-one-block jackknife error.

    Attributes
    ----------
    value : float or ndarray
        The estimator applied to the mean over all frames of the blocks.
    error : float or ndarray
        Jackknife standard error, same shape as ``value``.
    n_blocks : int
        Blocks B; ``(value - truth) / error`` follows Student's t with B - 1 degrees of freedom when the
        block means are independent and normal.
    """

    value: object
    error: object
    n_blocks: int


def block_jackknife(block_means, estimator):
    """Delete-one-block jackknife (Quenouille 1956; Efron and Stein, Ann. Stat. 9, 586, 1981; for
    correlated series with blocks longer than the correlation time, Kunsch, Ann. Stat. 17, 1217, 1989).

    With block means ``m_k`` (k = 1..B, equal blocks), the estimate is ``f(mean_k m_k)`` and the
    replicas ``f_k = f(mean_{j != k} m_j)``; the error is ``sqrt((B - 1) / B sum_k (f_k - mean f)^2)``.
    This carries correlations both in time (between frames of a block) and within a frame (between
    separations s or scattering vectors q), so it suits fits and ratios of averages.

    Parameters
    ----------
    block_means : sequence of ndarray
        Each of shape (B, ...): per-block means of one per-frame quantity.
    estimator : callable
        ``estimator(*means)`` with each mean of shape (...); returns a float or an array.

    Returns
    -------
    JackknifeEstimate
    """
    means = [np.asarray(m, dtype=np.float64) for m in block_means]
    count = means[0].shape[0]
    if count < 2 or any(m.shape[0] != count for m in means):
        raise AnalysisError("block jackknife: needs two or more blocks, the same number for every quantity")
    full = [m.mean(axis=0) for m in means]
    replicas = np.array([estimator(*[(count * f - m[k]) / (count - 1) for f, m in zip(full, means)])
                         for k in range(count)], dtype=np.float64)
    spread = replicas - replicas.mean(axis=0)
    error = np.sqrt((count - 1) / count * np.sum(spread ** 2, axis=0))
    value = estimator(*full)
    if np.ndim(value) == 0:
        return JackknifeEstimate(float(value), float(error), count)
    return JackknifeEstimate(np.asarray(value, dtype=np.float64), error, count)
