"""Sampling efficiency: effectively independent samples of a quantity per CPU-second.

With samples ``interval`` steps apart and statistical inefficiency ``g``
(``g = 2 tau_int`` in sampling intervals, tau_int the integrated autocorrelation
time), one independent sample costs ``g * interval`` steps, so

    independent samples per CPU-second = (steps per CPU-second) / (g * interval).

This is the figure of merit for choosing between samplers of the same
equilibrium distribution (e.g. Janke, in Quantum Simulations of Complex
Many-Body Systems, NIC Series 10, 423, 2002). g is the larger of the
autocorrelation and blocking estimates (:func:`beadsim.analysis.stats.inefficiency_estimate`),
so the rate leans low, but it is an estimate, not a bound: both estimates of g
are low when the series is not much longer than its correlation time. Its
standard error is that of g (the rate is proportional to 1/g). When g < 2 the
samples are further apart than about the correlation time: the series cannot
tell how many more independent samples the sampler would give if sampled more
often, so the figure then understates the sampler.

Lower bound on g from runs shorter than the correlation time
------------------------------------------------------------
For a quantity of a reversible Markov chain at equilibrium the sums of adjacent
autocovariances ``gamma_{2k} + gamma_{2k+1}`` are positive, decreasing and convex
(Geyer, Statist. Sci. 7, 473, 1992, theorem 3.1; see also Sokal 1997, Monte Carlo
methods in statistical mechanics: foundations and new algorithms, for the
spectral representation behind it). Hence every partial sum ending at an odd lag
K bounds g from below:

    g = 1 + 2 sum_{t>=1} rho(t)  >=  1 + 2 sum_{t=1}^{K} rho(t),   K odd.

:func:`autocorrelation_from_starts` estimates rho(t) from several runs started
from independent equilibrium states, about a mean and variance known from
elsewhere (for example a sampler of the same distribution that decorrelates
much faster), so the estimate is not pulled down by each short run's own mean,
which is what makes mean-subtracted autocorrelations of runs shorter than the
correlation time useless. :func:`inefficiency_partial_sums` gives the bounds.
:func:`correlation_from_starts` normalises by the runs' own second moments about
the known mean instead of a known variance, which is much less noisy when the
runs are shorter than the correlation time.
"""

import math
from dataclasses import dataclass

import numpy as np

from .._validate import as_array, positive, positive_int
from ..errors import AnalysisError, InputError
from ._common import autocorrelation_sum
from .stats import inefficiency_estimate, summarize

RESOLVED_INEFFICIENCY = 2.0
"""Below this g the correlation time is not resolved by the sampling interval (common practice)."""


def independent_samples_rate(series, interval_steps, steps_per_cpu_second):
    """Effectively independent samples of ``series`` per CPU-second, an estimate with its standard error.

    Parameters
    ----------
    series : array_like, shape (n,), float64
        Equally spaced samples of the quantity (e.g. Rg every table row), production part.
    interval_steps : int
        Steps between two samples.
    steps_per_cpu_second : float
        Cost of the sampler: steps (with any Monte Carlo work between them) per CPU-second.

    Returns
    -------
    dict
        ``samples``, ``equilibration_index`` (first sample used, by
        :func:`~beadsim.analysis.stats.summarize`), ``statistical_inefficiency`` and
        ``statistical_inefficiency_error`` (g in samples, the larger estimate, and its
        standard error), ``inefficiency_source`` (``"autocorrelation"`` or
        ``"blocking"``), ``g_autocorrelation``, ``g_blocking`` (None without a
        blocking plateau), ``autocorrelation_steps`` (``g * interval / 2``, the
        integrated autocorrelation time in steps), ``independent_samples``,
        ``per_cpu_second`` and ``per_cpu_second_error`` (the estimate and its
        standard error, from g's), ``correlation_resolved`` (False when g < 2, see
        the module notes) and ``reason`` (why entries are None, or a caution); the
        rate entries are None when the series cannot be analysed.
    """
    interval = positive(interval_steps, "interval_steps")
    speed = positive(steps_per_cpu_second, "steps_per_cpu_second")
    out = {"samples": None, "equilibration_index": None, "statistical_inefficiency": None,
           "statistical_inefficiency_error": None, "inefficiency_source": None, "g_autocorrelation": None,
           "g_blocking": None, "autocorrelation_steps": None, "independent_samples": None, "per_cpu_second": None,
           "per_cpu_second_error": None, "correlation_resolved": None, "reason": None}
    try:
        s = summarize(series, min_independent=1)
    except AnalysisError as exc:
        out["reason"] = str(exc)
        return out
    out.update(samples=s.n_samples, equilibration_index=s.equilibration_index)
    if s.statistical_inefficiency is None:
        out["reason"] = s.reason
        return out
    used = np.asarray(series, dtype=np.float64)[s.equilibration_index:]
    g = inefficiency_estimate(used)
    rate = speed / (g.value * interval)
    notes = [s.reason] if s.reason else []
    if g.blocking is None:
        notes.append("blocking found no plateau (series short for its correlation time): g may be low")
    finite = math.isfinite(rate)
    out.update(statistical_inefficiency=g.value, statistical_inefficiency_error=g.error,
               inefficiency_source=g.source, g_autocorrelation=g.autocorrelation, g_blocking=g.blocking,
               autocorrelation_steps=0.5 * g.value * interval, independent_samples=used.size / g.value,
               per_cpu_second=rate if finite else None,
               per_cpu_second_error=rate * g.error / g.value if finite else None,
               correlation_resolved=bool(g.value >= RESOLVED_INEFFICIENCY), reason="; ".join(notes) or None)
    return out


def autocorrelation_from_starts(runs, mean, variance, max_lag=None):
    """Normalised autocorrelation of a quantity from runs started in equilibrium, about a known mean.

    For run r with samples x_r[0 .. n-1] and lag k (in samples),

        rho_r(k) = sum_{s=0}^{n-1-k} (x_r[s] - mean) (x_r[s+k] - mean) / ((n - k) variance),

    an unbiased estimate of rho(k) for every run when the runs start from the
    equilibrium distribution and ``mean`` and ``variance`` are exact (see the
    module notes). Average over runs for the estimate; their spread gives its
    standard error.

    Parameters
    ----------
    runs : array_like, shape (n_runs, n), float64
        Equally spaced samples of each run, the first at the equilibrium start.
    mean, variance : float
        Equilibrium mean and variance of the quantity (variance > 0), from an
        independent and precise source.
    max_lag : int, optional
        Largest lag, samples (default and upper limit: n - 1).

    Returns
    -------
    ndarray, shape (n_runs, max_lag + 1), float64
        rho_r(k) for k = 0 .. max_lag; column 0 is each run's mean square
        deviation over ``variance`` (1 on average).
    """
    variance = positive(variance, "variance")
    return _lagged_moments(runs, mean, max_lag)[0] / variance


def _lagged_moments(runs, mean, max_lag):
    """Per run and lag k, averages over the origins s = 0 .. n-1-k of d_s d_{s+k}, d_s^2 and d_{s+k}^2,
    with d = x - mean; each (n_runs, max_lag + 1)."""
    x = as_array(runs, "runs", shape=(None, None))
    if x.shape[1] < 2:
        raise AnalysisError(f"runs: need at least 2 samples per run, got {x.shape[1]}")
    n = x.shape[1]
    max_lag = n - 1 if max_lag is None else positive_int(max_lag, "max_lag", allow_zero=True)
    if max_lag > n - 1:
        raise InputError(f"max_lag: at most n - 1 = {n - 1} for runs of {n} samples, got {max_lag}")
    dev = x - float(mean)
    lags = np.arange(max_lag + 1)
    counts = n - lags
    products = autocorrelation_sum(dev.T[:, :, None])[: max_lag + 1].T / counts
    cumulative = np.concatenate([np.zeros((x.shape[0], 1)), np.cumsum(dev * dev, axis=1)], axis=1)
    head = cumulative[:, n - lags] / counts
    tail = (cumulative[:, n:] - cumulative[:, lags]) / counts
    return products, head, tail


@dataclass(frozen=True)
class StartsCorrelation:
    """Autocorrelation pooled over runs as a correlation coefficient, with delete-one-run jackknife errors.

    Attributes
    ----------
    rho, rho_error : ndarray, shape (max_lag + 1,), float64
        Estimate and jackknife standard error, lags 0 .. max_lag (samples).
    partial_sums, partial_sums_error : ndarray, shape (max_lag + 1,), float64
        ``1 + 2 sum_{t=1}^{K} rho(t)`` for K = 0 .. max_lag, and its jackknife standard error.
    partial_sums_bias : ndarray, shape (max_lag + 1,), float64
        Jackknife estimate of the bias of ``partial_sums`` (a ratio estimator's bias, of order 1/n_runs).
    """

    rho: np.ndarray
    rho_error: np.ndarray
    partial_sums: np.ndarray
    partial_sums_error: np.ndarray
    partial_sums_bias: np.ndarray


def correlation_from_starts(runs, mean, max_lag=None):
    """Autocorrelation from runs started in equilibrium, normalised by the runs' own second moments.

    With d = x - ``mean`` (the known equilibrium mean) and sums over runs r and origins s,

        rho(k) = sum d_s d_{s+k} / sqrt(sum d_s^2 * sum d_{s+k}^2),

    the correlation coefficient of the pairs (x_s, x_{s+k}) about the known mean.
    Compared with :func:`autocorrelation_from_starts` it needs no variance from
    elsewhere, and when the runs are shorter than the correlation time it is far
    less noisy: numerator and denominator share each run's slowly varying offset
    from the mean, which cancels (the standard error of a correlation coefficient
    near 1 is about ``(1 - rho^2) / sqrt(n_pairs)``). It is a ratio, so it has a
    bias of order 1/n_runs; errors and that bias come from the delete-one-run
    jackknife (Efron and Stein, Ann. Statist. 9, 586, 1981), runs being independent.

    Parameters
    ----------
    runs : array_like, shape (n_runs, n), float64
        Equally spaced samples of each run, the first at the equilibrium start; n_runs >= 2.
    mean : float
        Equilibrium mean of the quantity, from an independent and precise source.
    max_lag : int, optional
        Largest lag, samples (default and upper limit: n - 1).

    Returns
    -------
    StartsCorrelation
    """
    products, head, tail = _lagged_moments(runs, mean, max_lag)
    m = products.shape[0]
    if m < 2:
        raise AnalysisError(f"runs: need at least 2 runs for a jackknife error, got {m}")

    def estimate(p, a, b):
        rho = p / np.sqrt(a * b)
        return rho, 1.0 + 2.0 * np.concatenate([np.zeros(rho.shape[:-1] + (1,)), np.cumsum(rho[..., 1:], axis=-1)],
                                               axis=-1)

    rho, sums = estimate(products.sum(axis=0), head.sum(axis=0), tail.sum(axis=0))
    rho_j, sums_j = estimate(products.sum(axis=0) - products, head.sum(axis=0) - head, tail.sum(axis=0) - tail)
    scale = (m - 1) / m
    return StartsCorrelation(rho=rho, rho_error=np.sqrt(scale * np.sum((rho_j - rho_j.mean(axis=0)) ** 2, axis=0)),
                             partial_sums=sums,
                             partial_sums_error=np.sqrt(scale * np.sum((sums_j - sums_j.mean(axis=0)) ** 2, axis=0)),
                             partial_sums_bias=(m - 1) * (sums_j.mean(axis=0) - sums))


def inefficiency_partial_sums(rho):
    """Partial sums ``1 + 2 sum_{t=1}^{K} rho(t)`` for K = 0 .. max_lag, each run's and their mean with its error.

    For a reversible chain the sums at odd K are lower bounds on the statistical
    inefficiency g (module notes).

    Parameters
    ----------
    rho : array_like, shape (n_runs, max_lag + 1), float64
        Per-run autocorrelations from :func:`autocorrelation_from_starts`, n_runs >= 2.

    Returns
    -------
    per_run : ndarray, shape (n_runs, max_lag + 1)
    mean : ndarray, shape (max_lag + 1,)
    error : ndarray, shape (max_lag + 1,)
        Standard error of ``mean`` from the spread over runs (runs independent).
    """
    rho = as_array(rho, "rho", shape=(None, None))
    if rho.shape[0] < 2:
        raise AnalysisError(f"rho: need at least 2 runs for an error, got {rho.shape[0]}")
    per_run = 1.0 + 2.0 * np.concatenate([np.zeros((rho.shape[0], 1)), np.cumsum(rho[:, 1:], axis=1)], axis=1)
    return per_run, per_run.mean(axis=0), per_run.std(axis=0, ddof=1) / math.sqrt(rho.shape[0])
