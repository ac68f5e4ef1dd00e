"""Sampling efficiency: effectively independent samples of a quantity per CPU-second.

With samples ``interval`` steps apart and statistical inefficiency ``g``
(:func:`beadsim.analysis.stats.statistical_inefficiency`; ``g = 2 tau_int`` in
sampling intervals, tau_int the integrated autocorrelation time), one
independent sample costs ``g * interval`` steps, so

    independent samples per CPU-second = (steps per CPU-second) / (g * interval).

This is the figure of merit for choosing between samplers of the same
equilibrium distribution (e.g. Janke, in Quantum Simulations of Complex
Many-Body Systems, NIC Series 10, 423, 2002). When ``g`` is close to 1 the samples
are already uncorrelated and the rate is only a lower bound (sample more often
to resolve it).
"""

import math

from .._validate import positive
from ..errors import AnalysisError
from .stats import summarize

RESOLVED_INEFFICIENCY = 2.0
"""Below this g the correlation time is not resolved by the sampling interval (common practice)."""


def independent_samples_rate(series, interval_steps, steps_per_cpu_second):
    """Effectively independent samples of ``series`` per CPU-second.

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
        :func:`~beadsim.analysis.stats.summarize`), ``statistical_inefficiency``
        (in samples), ``autocorrelation_steps`` (``g * interval / 2``, the
        integrated autocorrelation time in steps), ``independent_samples``,
        ``per_cpu_second`` and ``lower_bound`` (True when g < 2); the rate entries
        are None with a ``reason`` when the series cannot be analysed.
    """
    interval = positive(interval_steps, "interval_steps")
    speed = positive(steps_per_cpu_second, "steps_per_cpu_second")
    out = {"samples": None, "equilibration_index": None, "statistical_inefficiency": None,
           "autocorrelation_steps": None, "independent_samples": None, "per_cpu_second": None,
           "lower_bound": None, "reason": None}
    try:
        s = summarize(series, min_independent=1)
    except AnalysisError as exc:
        out["reason"] = str(exc)
        return out
    out.update(samples=s.n_samples, equilibration_index=s.equilibration_index)
    if s.statistical_inefficiency is None:
        out["reason"] = s.reason
        return out
    g = s.statistical_inefficiency
    out.update(statistical_inefficiency=g, autocorrelation_steps=0.5 * g * interval,
               independent_samples=s.n_independent, per_cpu_second=speed / (g * interval),
               lower_bound=bool(g < RESOLVED_INEFFICIENCY), reason=s.reason)
    if not math.isfinite(out["per_cpu_second"]):
        out["per_cpu_second"] = None
    return out
