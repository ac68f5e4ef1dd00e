"""MBAR across the points of a temperature sweep: smooth size, energy and heat-capacity curves per chain length.

Every point of a temperature sweep samples the Boltzmann distribution of one
model at its own temperature, so the points of one chain length are valid input
to the multistate Bennett acceptance ratio (MBAR; Shirts and Chodera, J. Chem.
Phys. 129, 124105, 2008) exactly as replica-exchange samples are: the reduced
potential of a configuration x at temperature T is ``U(x) / T`` (k_B = 1). Each
point's production rows of its scalar table (potential energy, Rg and Re of its
one chain) are cut at their detected equilibration and subsampled by their
statistical inefficiency, and every replica is its own MBAR state
(:func:`beadsim.analysis.reweight.pool_samples`). The result per chain length:

* ``<Rg^2>(T)``, ``<Re^2>(T)`` (sigma^2), ``<U>/N`` (epsilon) and the configurational
  heat capacity ``C/N`` (k_B) with MBAR's standard errors on :data:`N_GRID`
  temperatures across the sampled range and at the sampled temperatures themselves (:func:`beadsim.analysis.reweight.reweighted_curves`);
  between neighbouring temperatures whose samples overlap too little the curves are
  left out (NaN) and the pair is named in the notes;
* the transition temperature from the maximum of ``C(T)`` with a bootstrap error
  (:func:`beadsim.analysis.reweight.heat_capacity_peak`), or "no peak inside the
  range" when the maximum is at an edge.

Attraction-depth sweeps change the potential itself, not just its weight, and are not
combined here. Points whose folders lack a readable scalar table with the needed
columns (moved or older study folders) are left out with a note.
"""

import logging
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..analysis.stats import MIN_SAMPLES
from ..errors import AnalysisError, InputError
from .theta import Estimate, _describe

log = logging.getLogger(__name__)

#: The study's MBAR curves, in the study folder.
CURVES_CSV = "mbar_curves.csv"

#: Temperatures of the curves, evenly spaced across each chain length's sampled range.
N_GRID = 201

#: Bootstrap resamples for the error of the heat-capacity maximum.
N_BOOTSTRAP = 100

#: Scalar-table columns a point needs.
POINT_COLUMNS = ("step", "potential_energy", "radius_of_gyration", "end_to_end_distance")


@dataclass(frozen=True)
class ChainLengthCurves:
    """MBAR result of one chain length.

    Attributes
    ----------
    n_beads : int
    curves : beadsim.analysis.reweight.Curves or None
        None when the points could not be combined (see ``peak.notes``).
    peak : Estimate
        Heat-capacity maximum (``value`` None with the reason when there is none).
    """

    n_beads: int
    curves: object
    peak: Estimate


def point_series(folder):
    """Production series of one sweep point: potential energy, Rg^2 and Re^2 per table row.

    Parameters
    ----------
    folder : path-like
        Point folder holding the run's resolved input and scalar table.

    Returns
    -------
    dict
        ``potential_energy`` (epsilon, whole chain), ``rg2``, ``re2`` (sigma^2): ndarray, shape (n,),
        rows after the run's equilibration steps.

    Raises
    ------
    InputError
        Naming the file and what is missing.
    """
    from ..config import load_toml
    from ..io import read_table
    from ..runner import INPUT_FILE, TABLE_FILE

    folder = Path(folder)
    steps = load_toml(folder / INPUT_FILE).get("run", {}).get("equilibration_steps")
    if not isinstance(steps, int):
        raise InputError(f"{folder / INPUT_FILE}: [run] equilibration_steps: missing or not an integer")
    table = read_table(folder / TABLE_FILE)
    missing = [c for c in POINT_COLUMNS if c not in table.columns]
    if missing:
        raise InputError(f"{folder / TABLE_FILE}: no column {', '.join(missing)} (a folder from an older version; "
                         "run the point again to combine it)")
    prod = table[table["step"] > steps]
    return {"potential_energy": prod["potential_energy"].to_numpy(),
            "rg2": prod["radius_of_gyration"].to_numpy() ** 2,
            "re2": prod["end_to_end_distance"].to_numpy() ** 2}


def sweep_curves(frame, n_grid=N_GRID, n_bootstrap=N_BOOTSTRAP, seed=0):
    """Combine the points of each chain length of a temperature sweep with MBAR (module notes).

    Parameters
    ----------
    frame : pandas.DataFrame
        Results table of a temperature sweep (:func:`beadsim.studies.sweep.results_frame`), with the
        ``folder`` of every point.
    n_grid : int
        Evenly spaced temperatures of the curves (the sampled ones are added).
    n_bootstrap : int
        Resamples for the error of the heat-capacity maximum (>= 10).
    seed : int
        Seed of the bootstrap.

    Returns
    -------
    list of ChainLengthCurves
        One per chain length, shortest first.
    """
    from ..analysis.reweight import heat_capacity_peak, pool_samples, reweighted_curves

    if "folder" not in frame.columns:
        raise InputError("frame: the results table needs the 'folder' column of each point")
    out = []
    for n, group in frame.sort_values(["n_beads", "control", "replica"]).groupby("n_beads", sort=True):
        n = int(n)
        method = f"heat-capacity peak (MBAR), N = {n}"
        temps, series, notes = [], [], []
        for control, folder in zip(group["control"], group["folder"]):
            try:
                s = point_series(folder)
            except InputError as exc:
                notes.append(f"point at T = {control:g} left out: {exc}")
                continue
            if s["potential_energy"].size < MIN_SAMPLES:
                notes.append(f"point at T = {control:g} left out: {s['potential_energy'].size} production samples, "
                             f"MBAR needs {MIN_SAMPLES}")
                continue
            temps.append(float(control))
            series.append(s)
        if len(set(temps)) < 2:
            out.append(ChainLengthCurves(n, None, Estimate(method, None, None, _describe(group), tuple(
                notes + ["needs points at two or more temperatures"]), {"n_beads": n})))
            continue
        try:
            pooled = pool_samples(temps, [s["potential_energy"] for s in series],
                                  {name: [s[name] for s in series] for name in ("rg2", "re2")})
            curves = reweighted_curves(pooled, _grid(temps, n_grid), n)
            peak = heat_capacity_peak(pooled, n, n_bootstrap=n_bootstrap, seed=seed)
        except AnalysisError as exc:
            out.append(ChainLengthCurves(n, None, Estimate(method, None, None, _describe(group),
                                                           tuple(notes + [f"MBAR failed: {exc}"]), {"n_beads": n})))
            continue
        notes += [f"T = {a:g} and {b:g} overlap too little (below {curves.min_overlap:g}): curves left out between them"
                  for a, b in curves.gaps]
        if peak.note:
            notes.append(peak.note)
        fitted_on = (f"N = {n}; {curves.sampled.size} temperatures in [{min(temps):g}, {max(temps):g}]; "
                     f"{len(temps)} runs, {int(pooled.counts.sum())} decorrelated samples")
        out.append(ChainLengthCurves(n, curves, Estimate(method, peak.value, peak.error, fitted_on, tuple(notes),
                                                         {"n_beads": n, "peak_height": peak.height,
                                                          "bootstrap_resamples": peak.n_bootstrap})))
    return out


def _grid(sampled, n_grid):
    """``n_grid`` evenly spaced temperatures across ``sampled`` and the sampled ones, without near-repeats."""
    even = np.linspace(min(sampled), max(sampled), n_grid)
    return np.union1d(even[~np.isclose(even[:, None], sampled, rtol=1e-9, atol=0).any(axis=1)], sampled)


def curves_table(results):
    """The curves of every chain length as one pandas DataFrame.

    Columns: ``n_beads``, ``temperature`` (epsilon/k_B), ``rg2``, ``re2`` (sigma^2),
    ``potential_energy`` (epsilon per bead), ``heat_capacity`` (k_B per bead), each with its
    ``_error``, and ``neighbour_overlap`` (overlap of the two sampled temperatures around the
    grid point; the curves are NaN where it is below the threshold).
    """
    import pandas as pd

    frames = []
    for r in results:
        if r.curves is None:
            continue
        table = r.curves.table()
        table.insert(0, "n_beads", r.n_beads)
        t = r.curves.temperatures
        pair = np.clip(np.searchsorted(r.curves.sampled, t, side="right") - 1, 0, r.curves.sampled.size - 2)
        table["neighbour_overlap"] = r.curves.neighbour_overlap[pair]
        frames.append(table)
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()


def point_averages(frame, n_beads):
    """Replica-averaged point values of one chain length, as the figure's points.

    Returns
    -------
    list of dict
        Per temperature: ``temperature`` and, for ``rg2``, ``re2``, ``potential_energy`` and
        ``heat_capacity`` (those in the table), the mean and ``<name>_error``.
    """
    from .theta import point_means

    rows = frame[frame["n_beads"] == n_beads]
    points = {}
    for name in ("rg2", "re2", "potential_energy", "heat_capacity"):
        if name not in rows.columns or f"{name}_error" not in rows.columns:
            continue
        usable = rows[np.isfinite(rows[name]) & np.isfinite(rows[f"{name}_error"])]
        for _, m in point_means(usable, name).iterrows():
            row = points.setdefault(float(m["control"]), {"temperature": float(m["control"])})
            row[name], row[f"{name}_error"] = float(m["mean"]), float(m["error"])
    return [points[t] for t in sorted(points)]
