"""Plain Langevin at N = 512, measured: a lower bound on the Rg correlation time from runs started in equilibrium.

A plain-Langevin run of a 512-bead good-solvent chain (the model of ``hybrid_sampling.py``) long enough to
measure the correlation time of Rg the usual way would take CPU-hours. A lower bound needs far less:

1. one hybrid run (pivots every 20 steps) gives the equilibrium mean and variance of Rg precisely, the
   hybrid rate of independent samples per CPU-second, and M start states spread over the run;
2. M plain-Langevin runs of L steps start from those states with their own noise seeds, Rg sampled
   every ``interval`` steps;
3. the autocorrelation rho(t) is estimated from the lagged products of deviations from the *hybrid*
   mean, divided by the hybrid variance, averaged over time origins and runs
   (:func:`beadsim.analysis.efficiency.autocorrelation_from_starts`), so it is not pulled down by each
   short run's own mean; for reversible dynamics rho(t) >= 0 and the partial sums of
   g = 1 + 2 sum rho bound g from below.

The runs advance in rounds of ``round_steps`` steps, one run after the other, and the JSON is rewritten
after every round, so a stopped measurement leaves M equally long runs.

Usage::

    PYTHONPATH=. NUMBA_NUM_THREADS=1 nice -n 19 python analysis/plain_tau_512.py run [--quick]
    PYTHONPATH=. python analysis/plain_tau_512.py analyse [--quick]
"""

import argparse
import json
import sys
import time
from datetime import datetime, timezone
from pathlib import Path

import numba
import numpy as np
from scipy.stats import t as student_t

import beadsim as bs
from beadsim.analysis.efficiency import (autocorrelation_from_starts, correlation_from_starts,
                                         inefficiency_partial_sums)
from beadsim.analysis.stats import statistical_inefficiency, summarize

HERE = Path(__file__).parent
sys.path.insert(0, str(HERE))
from hybrid_sampling import HYBRID_512, chain_rg, chain_simulation, machine_record, measure, uptime  # noqa: E402

N = 512
HYBRID_SEED = 31
PLAIN_SEEDS = 1001  # run r uses noise seed PLAIN_SEEDS + r
FULL = {"runs": 16, "run_steps": 2_000_000, "interval": 1000, "round_steps": 50_000,
        "hybrid_steps": 60_000, "hybrid_interval": 20, "equilibration": 10_000, "retime_steps": 10_000}
QUICK = {"runs": 3, "run_steps": 20_000, "interval": 1000, "round_steps": 10_000,
         "hybrid_steps": 6_000, "hybrid_interval": 20, "equilibration": 2_000, "retime_steps": 2_000}


FIGURE = HERE / "figures" / "plain_tau_512" / "rg_autocorrelation"
TARGET_RATIO = 1000.0
"""Issue 8: hybrid sampling must give at least this many times the plain rate."""


def _path(quick):
    return HERE / f"plain_tau_512{'_quick' if quick else ''}.json"


def run(plan, path, stop_at=None):
    """Hybrid reference run, then the plain runs in rounds until ``plan["run_steps"]`` or the first round
    ending after ``stop_at`` (a datetime, UTC), then a short hybrid re-timing; the JSON is rewritten after
    every round."""
    numba.set_num_threads(1)
    out = {"machine": machine_record(), "plan": plan, "hybrid_seed": HYBRID_SEED, "plain_seeds":
           [PLAIN_SEEDS + r for r in range(plan["runs"])], "rg": "radius of gyration, sigma (not Rg^2)"}
    n_samples = plan["hybrid_steps"] // plan["hybrid_interval"]
    keep_at = {(r + 1) * n_samples // plan["runs"] - 1 for r in range(plan["runs"])}
    hybrid_rg, starts = [], []

    def observe(snap):
        if len(hybrid_rg) in keep_at:
            starts.append((snap.step, snap.positions.copy(), snap.velocities.copy()))
        hybrid_rg.append(chain_rg(snap.positions))

    out["hybrid"] = measure(N, plan["hybrid_steps"], plan["hybrid_interval"], seed=HYBRID_SEED, hybrid=HYBRID_512,
                            equilibration=plan["equilibration"], observe=observe)
    out["hybrid"]["rg_series"] = [round(x, 5) for x in hybrid_rg]
    out["start_steps"] = [int(step) for step, _, _ in starts]
    sims = []
    for r, (_, positions, velocities) in enumerate(starts):
        sim = chain_simulation(N, PLAIN_SEEDS + r)
        sim.system.positions[:] = positions
        sim.system.velocities[:] = velocities
        sim.refresh_neighbors()
        sims.append(sim)
    plain = out["plain"] = [{"seed": PLAIN_SEEDS + r, "steps": 0, "cpu_seconds": 0.0,
                             "rg_series": [round(chain_rg(sim.system.positions), 5)]} for r, sim in enumerate(sims)]
    while plain[0]["steps"] < plan["run_steps"]:
        for sim, rec in zip(sims, plain):
            cpu0 = time.process_time()
            rg = [chain_rg(snap.positions) for snap in bs.iterate(sim, plan["round_steps"], plan["interval"])]
            rec["cpu_seconds"] += time.process_time() - cpu0
            rec["steps"] += plan["round_steps"]
            rec["rg_series"] += [round(x, 5) for x in rg]
        out["machine"]["uptime_last_round"] = uptime()
        path.write_text(json.dumps(out) + "\n")
        print(f"round done: {plain[0]['steps']} steps per run, {uptime()}", flush=True)
        if stop_at is not None and datetime.now(timezone.utc) >= stop_at:
            out["stopped_early"] = f"stopped at {stop_at:%H:%M} UTC after {plain[0]['steps']} steps per run"
            break
    out["hybrid_retimed"] = measure(N, plan["retime_steps"], plan["hybrid_interval"], seed=HYBRID_SEED + 1,
                                    hybrid=HYBRID_512, equilibration=plan["equilibration"])
    out["machine"]["uptime_after"] = uptime()
    path.write_text(json.dumps(out) + "\n")


def _hybrid_reference(rec):
    """Equilibrium mean and variance of Rg from the hybrid series, and g with its spread over quarters.

    The whole series is used: it starts after ``plan["equilibration"]`` steps of hybrid sampling; the
    start that equilibration detection would cut is recorded as a check.
    """
    x = np.array(rec["rg_series"])
    s = summarize(x, min_independent=1, detect=False)
    second = summarize((x - s.mean) ** 2, min_independent=1, detect=False)
    quarters = [statistical_inefficiency(q) for q in np.array_split(x, 4)]
    return {"mean": s.mean, "mean_error": s.error, "variance": second.mean, "variance_error": second.error,
            "equilibration_index_detected": summarize(x).equilibration_index, "samples_used": int(x.size),
            "statistical_inefficiency": s.statistical_inefficiency,
            "statistical_inefficiency_quarters": quarters,
            "statistical_inefficiency_error": float(np.std(quarters, ddof=1) / 2.0)}


JACKKNIFE_CALIBRATION = 1.2
"""Factor applied to the jackknife errors of the self-normalised estimator: on AR(1) runs far shorter than
the correlation time (16 runs per study, 300 studies, tests/unit/analysis/test_analysis_efficiency.py) its
z-scores scatter with standard deviation 1.18."""

ESTIMATORS = ("variance_normalised", "self_normalised")
"""Products about the hybrid mean over the hybrid variance (errors across runs), and the correlation
coefficient about the hybrid mean (jackknife errors times JACKKNIFE_CALIBRATION); see
beadsim.analysis.efficiency."""


def _estimate(name, runs, mean, variance):
    """rho, its error, partial sums and their error (samples) of one estimator."""
    if name == "variance_normalised":
        rho = autocorrelation_from_starts(runs, mean, variance)
        _, sums, error = inefficiency_partial_sums(rho)
        return rho.mean(axis=0), rho.std(axis=0, ddof=1) / np.sqrt(len(runs)), sums, error, np.zeros_like(sums)
    c = correlation_from_starts(runs, mean)
    return (c.rho, JACKKNIFE_CALIBRATION * c.rho_error, c.partial_sums, JACKKNIFE_CALIBRATION * c.partial_sums_error,
            c.partial_sums_bias)


def _estimators(runs, ref):
    """Both estimators, with the partial sums' error from the runs and from the reference's mean and variance
    (the largest change when either moves by one standard error)."""
    out = {}
    for name in ESTIMATORS:
        rho, rho_err, sums, err, bias = _estimate(name, runs, ref["mean"], ref["variance"])
        moved = [_estimate(name, runs, m, v)[2] - sums for m, v in (
            (ref["mean"] + ref["mean_error"], ref["variance"]), (ref["mean"] - ref["mean_error"], ref["variance"]),
            (ref["mean"], ref["variance"] + ref["variance_error"]),
            (ref["mean"], ref["variance"] - ref["variance_error"]))]
        ref_err = np.hypot(np.max(np.abs(moved[:2]), axis=0), np.max(np.abs(moved[2:]), axis=0))
        out[name] = {"rho": rho, "rho_error": rho_err, "sums": sums, "sums_error_runs": err,
                     "sums_error_reference": ref_err, "sums_error": np.hypot(err, ref_err), "sums_bias": bias}
    return out


def analyse(path, quick):
    """Autocorrelation about the hybrid mean, partial-sum bounds, rates and ratio; figure; results into the JSON."""
    data = json.loads(path.read_text())
    interval = data["plan"]["interval"]
    ref = _hybrid_reference(data["hybrid"])
    runs = np.array([rec["rg_series"] for rec in data["plain"]])
    n_runs, n = runs.shape
    est = _estimators(runs, ref)
    own = autocorrelation_from_starts(runs - runs.mean(axis=1, keepdims=True), 0.0, ref["variance"]).mean(axis=0)

    steps = np.array([rec["steps"] for rec in data["plain"]])
    cpu = np.array([rec["cpu_seconds"] for rec in data["plain"]])
    per_step_runs = cpu / steps
    plain_per_step = float(cpu.sum() / steps.sum())
    plain_per_step_err = float(per_step_runs.std(ddof=1) / np.sqrt(n_runs))
    hybrid = data["hybrid"]
    hybrid_g_rel = ref["statistical_inefficiency_error"] / hybrid["statistical_inefficiency"]
    t95 = float(student_t.ppf(0.95, n_runs - 1))

    def at(e, k):
        """Bound, plain rate and ratio with the partial sum of estimator ``e`` cut at lag k (samples, odd)."""
        g_steps = float(e["sums"][k] * interval)
        err_steps = float(e["sums_error"][k] * interval)
        plain_rate = 1.0 / (g_steps * plain_per_step)
        ratio = hybrid["per_cpu_second"] / plain_rate
        rel = np.sqrt((err_steps / g_steps) ** 2 + hybrid_g_rel ** 2 + (plain_per_step_err / plain_per_step) ** 2)
        one_sided = g_steps - t95 * err_steps
        return {"lag_steps": int(k * interval), "steps_per_independent_sample_at_least": g_steps,
                "error_steps": err_steps, "error_across_runs_steps": float(e["sums_error_runs"][k] * interval),
                "error_from_reference_steps": float(e["sums_error_reference"][k] * interval),
                "jackknife_bias_steps": float(e["sums_bias"][k] * interval), "one_sided_95_steps": one_sided,
                "plain_per_cpu_second_at_most": plain_rate, "ratio_at_least": ratio, "ratio_error": float(ratio * rel),
                "ratio_at_least_one_sided_95": float(ratio * (1.0 - t95 * rel))}

    run_steps = int(steps[0])
    primary = (3 * run_steps // 4) // interval
    primary -= 1 - primary % 2  # the largest odd lag within 3/4 of a run (fixed before looking at the data)
    odd = sorted({k for k in (1, 5, 11, 25, 51, 101, 151, 201, 301, 401, 501, 751, 999, 1499) if k < n} | {primary})
    result = {
        "observable": "Rg (sigma), deviations from the hybrid mean",
        "runs": n_runs, "run_steps": run_steps, "samples_per_run": n, "interval_steps": interval,
        "reference": ref, "primary_lag_steps": int(primary * interval),
        "primary": {name: at(est[name], primary) for name in ESTIMATORS},
        # a plain (BAOAB) equilibrium mean differing from the hybrid one by 1 % of Rg (time-step error) moves
        # the bound by this much, steps (largest change of the two signs)
        "primary_change_mean_off_by_1_percent": {name: float(interval * max(
            abs(_estimate(name, runs, ref["mean"] * f, ref["variance"])[2][primary] - est[name]["sums"][primary])
            for f in (0.99, 1.01))) for name in ESTIMATORS},
        "bounds": {name: {str(k * interval): at(est[name], k) for k in odd} for name in ESTIMATORS},
        "plain_cpu_seconds": float(cpu.sum()), "plain_steps": int(steps.sum()),
        "plain_cpu_seconds_per_step": plain_per_step, "plain_cpu_seconds_per_step_error": plain_per_step_err,
        "plain_cpu_seconds_per_step_runs": per_step_runs.tolist(),
        "hybrid_per_cpu_second": hybrid["per_cpu_second"],
        "hybrid_statistical_inefficiency_relative_error": hybrid_g_rel,
        "hybrid_retimed_cpu_seconds_per_step": data.get("hybrid_retimed", {}).get("cpu_seconds_per_step"),
        "steps_needed_for_target": TARGET_RATIO / (hybrid["per_cpu_second"] * plain_per_step),
        "student_t_95": t95, "jackknife_calibration": JACKKNIFE_CALIBRATION,
        "curves": {name: {key: est[name][key].tolist() for key in ("rho", "rho_error", "sums", "sums_error")}
                   for name in ESTIMATORS},
        "rho_own_mean_subtracted": own.tolist(),
        "run_means": runs.mean(axis=1).tolist(),
    }
    data["analysis"] = result
    path.write_text(json.dumps(data) + "\n")
    _figure(result, FIGURE.with_name(FIGURE.name + "_quick") if quick else FIGURE)
    print(json.dumps({k: v for k, v in result.items() if k not in ("curves", "bounds", "rho_own_mean_subtracted")},
                     indent=1))


def _figure(result, stem):
    from matplotlib.figure import Figure

    from beadsim.plots import _save

    interval = result["interval_steps"]
    labels = {"variance_normalised": "over the hybrid variance (s.e. across runs)",
              "self_normalised": "correlation coefficient (jackknife s.e. x 1.2)"}
    fig = Figure(figsize=(11, 4.4))
    left, right = fig.add_subplot(1, 2, 1), fig.add_subplot(1, 2, 2)
    for colour, name in zip(("C0", "C2"), ESTIMATORS):
        curve = {key: np.array(value) for key, value in result["curves"][name].items()}
        lags = np.arange(curve["rho"].size) * interval / 1e6
        left.fill_between(lags, curve["rho"] - curve["rho_error"], curve["rho"] + curve["rho_error"], color=colour,
                          alpha=0.25, lw=0)
        left.plot(lags, curve["rho"], color=colour, lw=1, label=labels[name])
        sums, err = curve["sums"] * interval / 1e3, curve["sums_error"] * interval / 1e3
        right.fill_between(lags, sums - err, sums + err, color=colour, alpha=0.25, lw=0)
        right.plot(lags, sums, color=colour, lw=1, label=labels[name])
    left.plot(lags, result["rho_own_mean_subtracted"], color="C1", lw=0.8, ls="--",
              label="each run's own mean subtracted (biased low)")
    left.axhline(0, color="k", lw=0.5)
    left.set_xlabel("lag [10^6 steps]")
    left.set_ylabel(f"rho(t) of Rg about the hybrid mean ({result['runs']} runs, +- 1 s.e.)")
    left.set_title("plain Langevin, N = 512, good solvent", fontsize="medium")
    right.axhline(result["steps_needed_for_target"] / 1e3, color="C3", lw=1, ls=":",
                  label=f"needed for {TARGET_RATIO:,.0f} x at the measured rates")
    right.axvline(result["primary_lag_steps"] / 1e6, color="k", lw=0.5, ls="--",
                  label="cut fixed in advance (3/4 of a run)")
    right.set_xlabel("cut K [10^6 steps]")
    right.set_ylabel("interval x (1 + 2 sum_{t<=K} rho(t)) [10^3 steps]")
    right.set_title("lower bound on steps per independent Rg sample", fontsize="medium")
    for ax in (left, right):
        ax.legend(frameon=False, fontsize="small")
    stem.parent.mkdir(parents=True, exist_ok=True)
    _save(fig, str(stem) + ".png")


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("stage", choices=["run", "analyse"])
    parser.add_argument("--quick", action="store_true", help="a few short runs, to try the script")
    parser.add_argument("--stop-at", metavar="HH:MM", help="run: end the plain runs after the first round "
                        "that finishes after this time of day (UTC, today)")
    args = parser.parse_args()
    if args.stage == "run":
        stop_at = None
        if args.stop_at:
            hour, minute = (int(x) for x in args.stop_at.split(":"))
            stop_at = datetime.now(timezone.utc).replace(hour=hour, minute=minute, second=0, microsecond=0)
        run(QUICK if args.quick else FULL, _path(args.quick), stop_at)
    else:
        analyse(_path(args.quick), args.quick)


if __name__ == "__main__":
    main()
