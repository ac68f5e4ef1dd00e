"""MBAR across the independent points of a temperature sweep, checked against exact results.

Method: Shirts and Chodera, J. Chem. Phys. 129, 124105 (2008), through pymbar. The study-level test runs
the same ideal chain through ``run_study``; BAOAB samples a harmonic potential's configurations without
timestep error (Leimkuhler and Matthews, Appl. Math. Res. Express 2013, 34), so its exact values hold there too.

Exact references (ideal harmonic chain: N beads, harmonic bonds of rest length 0 and stiffness k,
no other forces; the N - 1 bond vectors are independent Gaussians of variance kT/k per component,
textbook results, e.g. Rubinstein and Colby, Polymer Physics, 2003, ch. 2):

* <U> = 3 (N - 1) kT / 2 (equipartition) and, U being Gamma distributed with shape 3 (N - 1)/2 and
  scale kT, the configurational heat capacity C/N = 3 (N - 1) / (2 N) at every temperature;
* <Re^2> = 3 (N - 1) kT / k;
* <Rg^2> = N^-2 sum_{i<j} <r_ij^2> = b^2 (N^2 - 1) / (6 N) with b^2 = 3 kT / k (the sum of |j - i|
  over pairs is N (N^2 - 1) / 6).

The chain samples are drawn exactly: each bond vector follows a stationary AR(1) process in time
(correlation 0.8 per sample, Gaussian marginals of the exact variance), so the series are
correlated like simulation output and exercise the decorrelation. Tolerances are Z = 4 standard
errors: each test makes up to 40 comparisons, a false alarm in well under 1 % of seeds. Where an MBAR
value is compared with the average of a point at the same temperature, the two come from largely the
same samples, so their difference varies less than sqrt(s_mbar^2 + s_point^2): that bound is conservative.
"""

import json


import numpy as np
import pandas as pd
import pytest

from beadsim.analysis.reweight import heat_capacity_peak, pool_samples, reweighted_curves
from beadsim.config import read_settings
from beadsim.io import ScalarTable
from beadsim.runner import INPUT_FILE, TABLE_FILE
from beadsim.studies.sweep import RESULTS_CSV, SUMMARY_FILE, analyze_point, estimate_everything, run_study
from beadsim.studies.sweep_mbar import CURVES_CSV, curves_table, sweep_curves
from test_tempering import HARMONIC_MODEL, N_BEADS, STIFFNESS

Z = 4.0
TEMPERATURES = (1.0, 1.25, 1.5, 1.75, 2.0)
REPLICAS, SAMPLES, CORRELATION = 2, 3000, 0.8


def harmonic_chain(rng, temperature, n_samples=SAMPLES, rho=CORRELATION):
    """Exact, time-correlated samples of the ideal harmonic chain: U (epsilon), Rg^2 and Re^2 (sigma^2)."""
    sd = np.sqrt(temperature / STIFFNESS)
    noise = rng.normal(0.0, sd * np.sqrt(1 - rho * rho), (n_samples, N_BEADS - 1, 3))
    bonds = np.empty_like(noise)
    bonds[0] = rng.normal(0.0, sd, (N_BEADS - 1, 3))
    for t in range(1, n_samples):
        bonds[t] = rho * bonds[t - 1] + noise[t]
    positions = np.concatenate([np.zeros((n_samples, 1, 3)), np.cumsum(bonds, axis=1)], axis=1)
    centred = positions - positions.mean(axis=1, keepdims=True)
    return {"potential_energy": 0.5 * STIFFNESS * np.sum(bonds ** 2, axis=(1, 2)),
            "rg2": np.mean(np.sum(centred ** 2, axis=2), axis=1),
            "re2": np.sum((positions[:, -1] - positions[:, 0]) ** 2, axis=1)}


def write_point(folder, samples, temperature, columns=("potential_energy", "radius_of_gyration",
                                                       "end_to_end_distance")):
    """A point folder as a sweep leaves it: input (at ``temperature``, no equilibration) and scalar table, no
    trajectory."""
    folder.mkdir(parents=True)
    model = HARMONIC_MODEL.replace("[dynamics]\n", f"[dynamics]\ntemperature = {temperature}\n")
    (folder / INPUT_FILE).write_text(model + "equilibration_steps = 0\n")  # it ends inside [run]
    table = ScalarTable(folder / TABLE_FILE, columns)
    values = {"potential_energy": samples["potential_energy"], "radius_of_gyration": np.sqrt(samples["rg2"]),
              "end_to_end_distance": np.sqrt(samples["re2"])}
    for i in range(samples["rg2"].size):
        table.append(i + 1, {c: float(values[c][i]) for c in columns})
    table.close()


@pytest.fixture(scope="module")
def harmonic_sweep(tmp_path_factory):
    """Five temperatures, two replicas each (seed 21, 3000 correlated samples per point), each row from the
    sweep's own per-point analysis (beadsim.studies.sweep.analyze_point) of the point folder."""
    root = tmp_path_factory.mktemp("sweep")
    rng = np.random.default_rng(21)
    rows = []
    for t in TEMPERATURES:
        for r in range(REPLICAS):
            folder = root / f"t{t}_r{r}"
            samples = harmonic_chain(rng, t)
            write_point(folder, samples, t)
            rows.append({"n_beads": N_BEADS, "control": t, "replica": r, "folder": str(folder),
                         **analyze_point(folder, read_settings(folder / INPUT_FILE))})
    return pd.DataFrame(rows)


def test_points_without_frames_or_pivot_moves_carry_every_column_as_nan(harmonic_sweep):
    """results.csv keeps one schema: these points saved no frames and made no pivot moves, and still carry
    the frame and pivot columns, as NaN (a missing column would make the study's tables disagree)."""
    for column in ("nu_internal", "nu_internal_error", "b2", "b2_error", "psi_star", "psi_star_error",
                   "pivot_acceptance", "pivot_moves_per_segment"):
        assert harmonic_sweep[column].isna().all(), column


def test_mbar_over_independent_points_gives_the_exact_harmonic_chain(harmonic_sweep):
    (result,) = sweep_curves(harmonic_sweep, n_grid=51, n_bootstrap=10, seed=1)
    table = curves_table([result])
    between = table[np.isclose(table["temperature"].to_numpy()[:, None], [1.1, 1.4, 1.6, 1.9]).any(axis=1)]
    assert len(between) == 4
    t = between["temperature"].to_numpy()
    b2 = 3 * t / STIFFNESS
    exact = {"re2": 3 * (N_BEADS - 1) * t / STIFFNESS, "rg2": b2 * (N_BEADS ** 2 - 1) / (6 * N_BEADS),
             "potential_energy": 1.5 * (N_BEADS - 1) * t / N_BEADS,
             "heat_capacity": np.full(t.size, 1.5 * (N_BEADS - 1) / N_BEADS)}
    for name, value in exact.items():
        deviation = np.abs(between[name].to_numpy() - value) / between[f"{name}_error"].to_numpy()
        assert np.all(deviation < Z), (name, deviation)
    # both replicas of each temperature are used, each its own MBAR state; every neighbour pair overlaps
    assert result.curves.pooled.temperatures.size == len(TEMPERATURES) * REPLICAS
    assert result.curves.gaps == [] and np.all(np.isfinite(table["heat_capacity"]))


def test_curves_are_left_out_between_temperatures_that_do_not_overlap():
    # harmonic chain energies (Gamma, shape 3 (N - 1)/2 = 10.5, scale T; seed 3, 400 each): T = 1.1 and
    # T = 6 share no energies (means 11.6 and 63, standard deviations 3.6 and 19)
    rng = np.random.default_rng(3)
    temps = [1.0, 1.1, 6.0, 6.6]
    pooled = pool_samples(temps, [rng.gamma(10.5, t, 400) for t in temps], detect=False)
    curves = reweighted_curves(pooled, np.linspace(1.0, 6.6, 57), N_BEADS)
    assert curves.gaps == [(1.1, 6.0)]
    t = curves.temperatures
    inside = (t > 1.1) & (t < 6.0)
    assert np.all(np.isnan(curves.means["heat_capacity"][inside]))
    assert np.all(np.isfinite(curves.means["heat_capacity"][~inside]))


def test_heat_capacity_rising_to_the_edge_has_no_peak_inside_the_range():
    # two-state system (energies 0 and 10, degeneracies 1 and e^10): C(T) = (dE/T)^2 p (1 - p) with
    # p = 1 / (1 + exp(dE/T - 10)) rises up to its maximum near T = 0.95 (exact, found numerically in
    # test_tempering), so on 0.5 <= T <= 0.75 its largest value is at the upper edge; seed 5, 2000 each
    temps = np.linspace(0.5, 0.75, 6)
    rng = np.random.default_rng(5)
    energies = [10.0 * (rng.random(2000) < 1.0 / (1.0 + np.exp(10.0 / t - 10.0))) for t in temps]
    peak = heat_capacity_peak(pool_samples(temps, energies, detect=False), 1, n_bootstrap=10)
    assert peak.value is None and peak.note.startswith("no peak inside the range")


def test_points_of_an_older_folder_without_the_energy_column_are_left_out_with_a_note(tmp_path):
    rng = np.random.default_rng(8)
    rows = []
    for k, t in enumerate(TEMPERATURES[:3]):
        folder = tmp_path / f"p{k}"
        columns = ("radius_of_gyration", "end_to_end_distance") if k == 0 else \
            ("potential_energy", "radius_of_gyration", "end_to_end_distance")
        write_point(folder, harmonic_chain(rng, t, n_samples=400), t, columns)
        rows.append({"n_beads": N_BEADS, "control": t, "replica": 0, "folder": str(folder)})
    (result,) = sweep_curves(pd.DataFrame(rows), n_bootstrap=10)
    assert any("T = 1 left out" in note and "potential_energy" in note for note in result.peak.notes)
    assert result.curves.sampled.tolist() == [1.25, 1.5]
    (alone,) = sweep_curves(pd.DataFrame(rows[:2]), n_bootstrap=10)
    assert alone.curves is None and "two or more temperatures" in alone.peak.notes[-1]


def _mbar_pulls(seed, n_samples):
    """(MBAR value - exact) / MBAR error of <U> and <Re^2> at T = 1.3, 1.6, 1.9, shape (2, 3), from five temperatures
    of the ideal harmonic chain with correlation 0.95 per sample (exact: U = 1.5 (N - 1) T, Re^2 = 3 (N - 1) T / k)."""
    grid = np.array([1.3, 1.6, 1.9])
    rng = np.random.default_rng(seed)
    samples = [harmonic_chain(rng, t, n_samples=n_samples, rho=0.95) for t in TEMPERATURES]
    pooled = pool_samples(TEMPERATURES, [s["potential_energy"] for s in samples],
                          {name: [s[name] for s in samples] for name in ("rg2", "re2")})
    curves = reweighted_curves(pooled, grid, N_BEADS)
    exact = {"potential_energy": 1.5 * (N_BEADS - 1) * grid / N_BEADS, "re2": 3 * (N_BEADS - 1) * grid / STIFFNESS}
    return np.array([(curves.means[k] - v) / curves.errors[k] for k, v in exact.items()])


@pytest.mark.slow
def test_mbar_errors_of_strongly_correlated_series_are_calibrated():
    # 40 seeds (1000-1039) of five temperatures with correlation 0.95 per sample (g about 39), 2000
    # samples each: the deviations from the exact <U> and <Re^2> at T = 1.3, 1.6 and 1.9, in MBAR
    # errors, have a root-mean-square near 1 when the errors are right. For 40 standard normal
    # deviations the rms has a standard error of about 1/sqrt(2 x 40) = 0.11, so it must lie in
    # 1 +- 3 x 0.11 (without the residual-correlation factor it came out 1.3 to 1.4)
    deviations = [_mbar_pulls(seed, n_samples=2000) for seed in range(1000, 1040)]
    rms = np.sqrt(np.mean(np.square(deviations), axis=0))
    assert np.all(np.abs(rms - 1) < 3 * 0.11), rms


def test_mbar_errors_are_calibrated_two_sided():
    """Seeds 2000-2079: five temperatures of an ideal harmonic chain with correlation 0.95 per sample (g about 39),
    1,000 samples each; the MBAR deviations from the exact <U> and <Re^2> at T = 1.3, 1.6 and 1.9, in MBAR errors,
    pooled per seed. With right errors the mean square deviation is 1; the band is three standard errors of that
    mean over the 80 independent seeds (about 0.2), so errors 25 % too large (mean square 0.64) or too small
    (1.56), or an error factor that lost its square root, fail."""
    per_seed = np.array([np.mean(np.square(_mbar_pulls(seed, n_samples=1000))) for seed in range(2000, 2080)])
    assert abs(per_seed.mean() - 1.0) < 3 * per_seed.std(ddof=1) / np.sqrt(per_seed.size), per_seed.mean()


@pytest.fixture(scope="module")
def harmonic_study(tmp_path_factory):
    """The ideal chain of N = 6 and 8 at the five temperatures (study seed 7), 2,000 production rows per point."""
    root = tmp_path_factory.mktemp("mbar_study")
    # HARMONIC_MODEL ends inside its [run] table
    (root / "model.toml").write_text(HARMONIC_MODEL + "equilibration_steps = 2000\n"
                                     "[output]\ntable_interval = 10\nframe_interval = 2000\n")
    (root / "study.toml").write_text(f'[study]\nbase = "model.toml"\ncontrol = "temperature"\n'
                                     f"values = {list(TEMPERATURES)}\nchain_lengths = [6, 8]\nseed = 7\n"
                                     "production_steps = 20000\n")
    run_study(root / "study.toml", root / "out", workers=1, progress=False)
    return root / "out"


def check_study_outputs(curves, summary, figures, lengths):
    """The curves file, the per-N figures and the MBAR estimate beside the Rg midpoint, for every N."""
    assert set(curves["n_beads"]) == set(lengths)
    for name in ("rg2", "re2", "potential_energy", "heat_capacity"):
        assert np.all(np.isfinite(curves[name])) and np.all(curves[f"{name}_error"] > 0)
    assert np.all(curves["neighbour_overlap"] >= 0.03)
    for stem in [f"mbar_n{n}" for n in lengths] + ["transition"]:
        assert (figures / f"{stem}.png").stat().st_size > 0
    for n in lengths:
        line = next(x for x in summary["collapse"] if x.startswith(f"heat-capacity peak (MBAR), N = {n} "))
        # the ideal chain's C/N is flat: either a maximum with its bootstrap error or the edge note
        assert "+-" in line or "no peak inside the range" in line, line
        assert any(x.startswith(f"logistic midpoint of Rg, N = {n} ") for x in summary["collapse"])


def check_curves_match_points(curves, points):
    """At every sampled temperature the MBAR value agrees with the point average within Z combined errors."""
    for _, p in points.iterrows():
        row = curves[(curves["n_beads"] == p["n_beads"]) & np.isclose(curves["temperature"], p["control"])]
        assert len(row) == 1, (p["n_beads"], p["control"])
        for name in ("rg2", "re2", "potential_energy", "heat_capacity"):
            bound = Z * np.hypot(row[f"{name}_error"].iloc[0], p[f"{name}_error"])
            assert abs(row[name].iloc[0] - p[name]) < bound, (name, p["n_beads"], p["control"])


def test_estimates_write_the_curves_and_figures_consistent_with_the_points(harmonic_sweep, tmp_path):
    summary = estimate_everything(harmonic_sweep, "temperature", tmp_path / "figures", seed=2,
                                  curves_csv=tmp_path / CURVES_CSV)
    curves = pd.read_csv(tmp_path / CURVES_CSV)
    check_study_outputs(curves, summary, tmp_path / "figures", [N_BEADS])
    assert summary["mbar"]["curves_csv"] == str(tmp_path / CURVES_CSV)
    check_curves_match_points(curves, harmonic_sweep)


def test_attraction_depth_sweeps_are_not_combined(harmonic_sweep, tmp_path):
    summary = estimate_everything(harmonic_sweep, "depth", tmp_path / "figures", curves_csv=tmp_path / CURVES_CSV)
    assert "temperature sweeps only" in summary["mbar"]["note"] and not (tmp_path / CURVES_CSV).exists()


@pytest.mark.slow
def test_simulated_study_writes_curves_figures_and_the_estimate(harmonic_study):
    summary = json.loads((harmonic_study / SUMMARY_FILE).read_text())
    check_study_outputs(pd.read_csv(harmonic_study / CURVES_CSV), summary, harmonic_study / "figures", [6, 8])


@pytest.mark.slow
def test_simulated_study_curves_agree_with_its_points_and_with_the_exact_chain(harmonic_study):
    curves = pd.read_csv(harmonic_study / CURVES_CSV)
    check_curves_match_points(curves, pd.read_csv(harmonic_study / RESULTS_CSV))
    between = curves[np.isclose(curves["temperature"].to_numpy()[:, None], [1.125, 1.625, 1.875]).any(axis=1)]
    assert len(between) == 6
    n, t = between["n_beads"].to_numpy(), between["temperature"].to_numpy()
    for name, exact in (("re2", 3 * (n - 1) * t / STIFFNESS), ("potential_energy", 1.5 * (n - 1) * t / n)):
        deviation = np.abs(between[name].to_numpy() - exact) / between[f"{name}_error"].to_numpy()
        assert np.all(deviation < Z), (name, deviation)
