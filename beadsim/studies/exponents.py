"""Size exponents from chain-length scaling at every control value, with and without a finite-N correction.

The plain fit is ``<Rg^2>^(1/2) ~ N^nu`` over all chain lengths (weighted, in log-log;
:func:`beadsim.analysis.scaling.nu_from_chain_size`). Short chains bias it: in good
solvent the leading correction to scaling is ``<Rg^2> = A N^(2 nu) (1 + B N^(-Delta))``
with Delta = 0.528(12) for self-avoiding walks (Clisby, Phys. Rev. Lett. 104, 055702,
2010). With four or more chain lengths the corrected form is fitted too (A, nu, B free,
Delta fixed); the correction exponent belongs to the good-solvent universality class, so
the corrected value is meaningful on the good-solvent side only.
"""

import numpy as np
from scipy.optimize import curve_fit

from ..analysis.scaling import nu_from_chain_size
from .theta import Estimate, check_table, point_means, usable_runs

#: Leading correction-to-scaling exponent of self-avoiding walks (Clisby 2010).
SAW_CORRECTION_EXPONENT = 0.528


def size_exponents(df, control_kind):
    """nu from N-scaling of Rg at each control value.

    Parameters
    ----------
    df : pandas.DataFrame
        Results table (see :mod:`beadsim.studies.theta`).
    control_kind : {"temperature", "depth"}

    Returns
    -------
    list of Estimate
        Per control value: the plain power-law exponent and, with four or more chain
        lengths, the exponent with the correction-to-scaling term.
    """
    df, notes = usable_runs(check_table(df, control_kind), ("rg2", "rg2_error"))
    means = point_means(df, "rg2")
    out = []
    for control, group in means.groupby("control"):
        n = group["n_beads"].to_numpy(dtype=np.float64)
        rg2, err2 = group["mean"].to_numpy(), group["error"].to_numpy()
        where = f"N = {', '.join(str(int(v)) for v in n)} at control {control:g}"
        if n.size < 2:
            continue
        fit = nu_from_chain_size(n, np.sqrt(rg2), err2 / (2 * np.sqrt(rg2)))
        out.append(Estimate(f"nu from Rg vs N at control {control:g}", fit.nu, fit.nu_error, where, tuple(notes),
                            {"control": float(control), "chi2_reduced": fit.fit.chi2_reduced}))
        if n.size >= 4:
            out.append(_corrected(n, rg2, err2, control, where, notes))
    return out


def _corrected(n, rg2, err2, control, where, notes):
    method = f"nu with N^-{SAW_CORRECTION_EXPONENT} correction at control {control:g}"

    def model(x, a, nu, b):
        return a * x ** (2 * nu) * (1 + b * x ** -SAW_CORRECTION_EXPONENT)

    try:
        p, cov = curve_fit(model, n, rg2, p0=(rg2[0] / n[0] ** 1.2, 0.6, 0.0), sigma=err2, absolute_sigma=True,
                           maxfev=20000)
    except RuntimeError as exc:
        return Estimate(method, None, None, where, tuple(notes) + (f"fit did not converge ({exc})",))
    error = float(np.sqrt(cov[1, 1])) if np.isfinite(cov[1, 1]) else None
    return Estimate(method, float(p[1]), error, where,
                    tuple(notes) + ("correction exponent of the good-solvent class (Clisby 2010)",),
                    {"control": float(control), "amplitude": float(p[0]), "correction": float(p[2])})
