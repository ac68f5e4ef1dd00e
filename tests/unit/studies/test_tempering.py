"""Replica exchange across a temperature ladder and MBAR reweighting, checked against exact results.

Exact references:

* ideal harmonic chain (harmonic bonds of rest length 0, stiffness k, no other forces): the N - 1
  bond vectors are independent Gaussians, so the potential energy is Gamma distributed with shape
  3(N-1)/2 and scale kT, <U> = 3(N-1) kT/2 (equipartition) and <Re^2> = 3(N-1) kT/k (textbook
  results; e.g. Rubinstein and Colby, Polymer Physics, 2003, ch. 2);
* the expected acceptance of a swap between independent equilibrium configurations at T_i and T_j,
  E[min(1, exp((1/T_i - 1/T_j)(U_i - U_j)))], integrated with scipy.stats Gamma distributions;
* BAOAB samples a harmonic potential's configurations without timestep error (Leimkuhler and
  Matthews, Appl. Math. Res. Express 2013, 34), so the harmonic ladder has no discretisation bias.

Statistical checks use the standard errors of :func:`beadsim.analysis.stats.summarize` (statistical
inefficiency) and MBAR's asymptotic errors; tolerances are 3.5 standard errors, because each test
makes up to a dozen comparisons (a false alarm in about 0.5 % of runs for the family).
"""

import json
import math

import numpy as np
import pytest
from scipy import integrate, stats

from beadsim.analysis.reweight import heat_capacity_peak, pool_samples, reweighted_curves
from beadsim.analysis.stats import summarize
from beadsim.errors import AnalysisError, InputError
from beadsim.io import read_table
from beadsim.studies.tempering import (EXCHANGE_FILE, SAMPLE_FILE, LadderState, exchange, ladder_temperatures,
                                       read_ladder, read_rungs, rung_folder, run_ladder)

Z = 3.5
N_BEADS, STIFFNESS = 8, 10.0

HARMONIC_MODEL = f"""
[chains]
length = {N_BEADS}
[bonds]
potential = "harmonic"
stiffness = {STIFFNESS}
rest_length = 0.0
bond_length = 0.5
[nonbonded]
potential = "none"
[box]
min_distance = 0.1
[dynamics]
timestep = 0.01
friction = 1.0
[run]
seed = 3
minimize = false
"""


def write_ladder(folder, body, model=HARMONIC_MODEL):
    (folder / "model.toml").write_text(model)
    path = folder / "ladder.toml"
    path.write_text('[ladder]\nbase = "model.toml"\n' + body)
    return path


HARMONIC_LADDER = """lowest_temperature = 1.0
highest_temperature = 2.0
count = 4
exchange_interval = 50
sample_interval = 10
rounds = {rounds}
equilibration_rounds = 20
seed = {seed}
"""


@pytest.fixture(scope="module")
def harmonic_ladder(tmp_path_factory):
    """Seed 11: 4 rungs T = 1..2 (geometric), 8-bead harmonic chain, 1200 rounds of 50 steps, samples every 10 steps."""
    folder = tmp_path_factory.mktemp("harmonic")
    ladder, model = read_ladder(write_ladder(folder, HARMONIC_LADDER.format(rounds=1200, seed=11)))
    summary = run_ladder(ladder, model, folder / "out", progress=False, analyze=False)
    return folder / "out", ladder, model, summary


def expected_acceptance(t_i, t_j, shape):
    """E[min(1, exp((1/t_i - 1/t_j)(U_i - U_j)))] for independent U ~ Gamma(shape, scale t) (scipy.stats)."""
    d_beta = 1.0 / t_i - 1.0 / t_j
    u_i, u_j = stats.gamma(shape, scale=t_i), stats.gamma(shape, scale=t_j)
    # given U_i = x: P(U_j <= x) + exp(d_beta x) E[exp(-d_beta U_j); U_j > x], the last a scaled Gamma tail
    tilt = 1.0 + d_beta * t_j
    tail = stats.gamma(shape, scale=t_j / tilt)

    def given(x):
        return u_j.cdf(x) + math.exp(d_beta * x - shape * math.log(tilt) + tail.logsf(x))

    return integrate.quad(lambda x: given(x) * u_i.pdf(x), 0, u_i.isf(1e-14), limit=200)[0]


def test_geometric_ladder_has_constant_ratio():
    t = ladder_temperatures(1.5, 3.0, 6)
    assert t[0] == 1.5 and math.isclose(t[-1], 3.0)
    np.testing.assert_allclose(t[1:] / t[:-1], 2 ** (1 / 5), rtol=1e-12)


def test_equipartition_energy_at_every_rung(harmonic_ladder):
    # exact: <U> = 3 (N - 1) T / 2 for the ideal harmonic chain (module notes); tolerance Z standard errors
    out, ladder, _, _ = harmonic_ladder
    for k, table in enumerate(read_rungs(out, ladder)):
        s = summarize(table["potential_energy"].to_numpy())
        exact = 1.5 * (N_BEADS - 1) * ladder["temperatures"][k]
        assert s.error is not None and abs(s.mean - exact) < Z * s.error, (k, s.mean, s.error, exact)


def test_exchange_acceptance_matches_its_exact_expectation(harmonic_ladder):
    # mean acceptance probability per pair vs the Gamma-distribution integral; error of the mean from the
    # statistical inefficiency of the per-attempt probabilities (production rounds only)
    out, ladder, _, summary = harmonic_ladder
    table = read_table(out / EXCHANGE_FILE)
    table = table[table["step"] > ladder["equilibration_rounds"] * ladder["exchange_interval"]]
    t = ladder["temperatures"]
    for i in range(len(t) - 1):
        p = table.loc[table["lower_rung"] == i, "probability"].to_numpy()
        s = summarize(p, detect=False)
        exact = expected_acceptance(t[i], t[i + 1], 1.5 * (N_BEADS - 1))
        assert abs(s.mean - exact) < Z * s.error, (i, s.mean, s.error, exact)
        swapped = table.loc[table["lower_rung"] == i, "accepted"].to_numpy()
        # the swap frequency is a Bernoulli mean of the same probabilities: within Z binomial errors
        assert abs(swapped.mean() - exact) < Z * math.sqrt(exact * (1 - exact) / swapped.size * s.statistical_inefficiency)
    assert summary["round_trips"]["total"] > 0


def test_mbar_between_rungs_gives_the_exact_end_to_end_distance(harmonic_ladder):
    # MBAR <Re^2> at temperatures between the rungs vs exact 3 (N - 1) T / k; tolerance Z MBAR errors
    out, ladder, _, _ = harmonic_ladder
    tables = read_rungs(out, ladder)
    pooled = pool_samples(ladder["temperatures"], [t["potential_energy"].to_numpy() for t in tables],
                          {"re2": [t["end_to_end_squared"].to_numpy() for t in tables]})
    grid = np.array([1.1, 1.45, 1.8])
    curves = reweighted_curves(pooled, grid, N_BEADS)
    exact_re2 = 3 * (N_BEADS - 1) * grid / STIFFNESS
    assert np.all(np.abs(curves.means["re2"] - exact_re2) < Z * curves.errors["re2"])
    # heat capacity of the harmonic chain is constant: C/N = 3 (N - 1) / (2 N) (Gamma variance shape T^2)
    exact_c = 1.5 * (N_BEADS - 1) / N_BEADS
    assert np.all(np.abs(curves.means["heat_capacity"] - exact_c) < Z * curves.errors["heat_capacity"])
    assert 0 < curves.overlap <= 1


def test_exchange_rule_probability_rescaling_and_swap():
    temps = np.array([1.0, 2.0, 4.0])
    state = LadderState(3)
    state.states = [{"velocities": np.full((2, 3), float(r + 1))} for r in range(3)]
    state.round = 2  # even round: the pair (0, 1) is tried
    u = np.array([5.0, 1.0, 0.0])
    records = exchange(state, temps, u, seed=0)
    # (1/1 - 1/2)(5 - 1) = 2 > 0: the colder rung holds the higher energy, so the swap is always accepted
    assert records == [(0, 1.0, True)]
    assert state.replica_at.tolist() == [1, 0, 2]
    np.testing.assert_allclose(state.states[0]["velocities"], 1.0 * math.sqrt(2.0))   # 1 -> 2
    np.testing.assert_allclose(state.states[1]["velocities"], 2.0 * math.sqrt(0.5))   # 2 -> 1
    state.round = 3  # odd round: the pair (1, 2); the hotter rung holds the higher energy
    records = exchange(state, temps, np.array([1.0, 0.0, 5.0]), seed=0)
    assert records[0][0] == 1 and math.isclose(records[0][1], math.exp((0.5 - 0.25) * (0.0 - 5.0)))


def test_round_trip_counted_once_per_bottom_top_bottom_walk():
    state = LadderState(2)
    state.states = [{"velocities": np.ones((1, 3))} for _ in range(2)]
    temps = np.array([1.0, 2.0])
    for r in range(1, 5):  # energies that always swap: replicas 0 and 1 alternate ends every even round
        state.round = 2 * r
        exchange(state, temps, np.array([1.0, 0.0]), seed=0)
    # replica 0: bottom (round 0) -> top (2) -> bottom (4) -> top (6) -> bottom (8): two round trips of 4 rounds
    assert state.trips.tolist() == [2, 1]
    assert state.trip_rounds[0] == 8


def test_resumed_ladder_repeats_an_uninterrupted_one(tmp_path):
    whole = tmp_path / "whole"
    ladder, model = read_ladder(write_ladder(tmp_path, HARMONIC_LADDER.format(rounds=30, seed=5)))
    run_ladder(ladder, model, whole, progress=False, analyze=False)
    parts = tmp_path / "parts"
    run_ladder({**ladder, "rounds": 10}, model, parts, progress=False, analyze=False)
    run_ladder(ladder, model, parts, progress=False, analyze=False)
    for k in range(4):
        a = (whole / rung_folder(k) / SAMPLE_FILE).read_text()
        assert a == (parts / rung_folder(k) / SAMPLE_FILE).read_text()
    assert (whole / EXCHANGE_FILE).read_text() == (parts / EXCHANGE_FILE).read_text()


def test_every_replica_starts_from_the_given_conformation(tmp_path):
    """A straight 8-bead chain (bond 0.5, so Re^2 = 3.5^2) given as start: after the first step every rung's
    end-to-end distance is that of the straight chain to within the first step's motion (speeds of order
    sqrt(kT) = 1 to 1.4 sigma/tau over dt = 0.01 move each end by about 0.02 sigma; bound 0.1 sigma on Re), far
    from a grown random walk (Re^2 about 7 x 0.25 = 1.75), and the replicas differ (each its own noise)."""
    ladder, model = read_ladder(write_ladder(tmp_path, HARMONIC_LADDER.format(rounds=1, seed=4).replace(
        "exchange_interval = 50\nsample_interval = 10", "exchange_interval = 1\nsample_interval = 1")))
    positions = np.zeros((N_BEADS, 3))
    positions[:, 0] = 0.5 * np.arange(N_BEADS)
    velocities = np.random.default_rng(4).normal(size=(N_BEADS, 3))
    run_ladder({**ladder, "equilibration_rounds": 0}, model, tmp_path / "out", progress=False, analyze=False,
               start=(positions, velocities))
    re = [math.sqrt(read_table(tmp_path / "out" / rung_folder(k) / SAMPLE_FILE)["end_to_end_squared"].iloc[0])
          for k in range(4)]
    assert np.all(np.abs(np.array(re) - 3.5) < 0.1), re
    assert len(set(re)) == 4


def test_start_conformation_of_the_wrong_shape_is_refused(tmp_path):
    ladder, model = read_ladder(write_ladder(tmp_path, HARMONIC_LADDER.format(rounds=1, seed=4)))
    with pytest.raises(InputError, match="start positions"):
        run_ladder(ladder, model, tmp_path / "out", progress=False, analyze=False,
                   start=(np.zeros((N_BEADS + 1, 3)), np.zeros((N_BEADS + 1, 3))))


def test_local_pool_gives_the_same_ladder_as_one_process(tmp_path):
    from beadsim.studies.backends import LocalPool

    ladder, model = read_ladder(write_ladder(tmp_path, HARMONIC_LADDER.format(rounds=4, seed=9)))
    run_ladder(ladder, model, tmp_path / "one", progress=False, analyze=False)
    summary = run_ladder(ladder, model, tmp_path / "pool", backend=LocalPool(2), progress=False, analyze=False)
    assert summary["workers"] == 2
    for name in [EXCHANGE_FILE] + [f"{rung_folder(k)}/{SAMPLE_FILE}" for k in range(4)]:
        assert (tmp_path / "one" / name).read_text() == (tmp_path / "pool" / name).read_text()


def test_ladder_on_dask_writes_results_and_summary_when_the_shutdown_times_out(tmp_path, monkeypatch, caplog):
    """A local dask cluster whose closing stops the workers but then reports a timeout (as one did under heavy
    load): the ladder's files equal a one-process run, summary.json is written, and the timeout is logged."""
    from distributed import LocalCluster

    from beadsim.studies.backends import DaskCluster

    real_close = LocalCluster.close

    def close_then_time_out(self, *args, **kwargs):
        real_close(self, *args, **kwargs)
        raise TimeoutError("simulated slow shutdown")

    monkeypatch.setattr(LocalCluster, "close", close_then_time_out)
    ladder, model = read_ladder(write_ladder(tmp_path, HARMONIC_LADDER.format(rounds=4, seed=9)))
    run_ladder(ladder, model, tmp_path / "one", progress=False, analyze=False)
    with caplog.at_level("WARNING", logger="beadsim.studies.backends"):
        summary = run_ladder(ladder, model, tmp_path / "dask", backend=DaskCluster(1, cluster="local"),
                             progress=False, analyze=False)
    assert summary["workers"] == 1
    assert json.loads((tmp_path / "dask" / "summary.json").read_text())["rounds_completed"] == 24
    assert "simulated slow shutdown" in caplog.text
    for name in [EXCHANGE_FILE] + [f"{rung_folder(k)}/{SAMPLE_FILE}" for k in range(4)]:
        assert (tmp_path / "one" / name).read_text() == (tmp_path / "dask" / name).read_text()


def test_dask_shutdown_takes_every_step_when_one_times_out(caplog):
    from beadsim.studies.backends import DaskCluster

    calls = []

    class Stub:
        def __init__(self, name, error=None):
            self.name, self.error = name, error

        def cancel(self, futures):
            calls.append(f"{self.name}.cancel")

        def close(self):
            calls.append(f"{self.name}.close")
            if self.error:
                raise self.error

    backend = DaskCluster(1, cluster="local")
    backend._client, backend._cluster = Stub("client", TimeoutError("client close")), Stub("cluster", OSError("gone"))
    with caplog.at_level("WARNING", logger="beadsim.studies.backends"):
        backend.shutdown(cancel=True)
    assert calls == ["client.cancel", "client.close", "cluster.close"]
    assert "client close" in caplog.text and "gone" in caplog.text
    assert backend._client is None and backend._cluster is None


def test_output_folder_of_another_ladder_is_refused_and_kept(tmp_path):
    ladder, model = read_ladder(write_ladder(tmp_path, HARMONIC_LADDER.format(rounds=2, seed=1)))
    run_ladder(ladder, model, tmp_path / "out", progress=False, analyze=False)
    before = (tmp_path / "out" / EXCHANGE_FILE).read_text()
    with pytest.raises(InputError, match="another model or other settings"):
        run_ladder({**ladder, "seed": 2}, model, tmp_path / "out", progress=False, analyze=False)
    assert (tmp_path / "out" / EXCHANGE_FILE).read_text() == before


def test_mbar_refuses_temperatures_outside_the_sampled_range():
    rng = np.random.default_rng(0)
    pooled = pool_samples([1.0, 2.0], [rng.gamma(5, 1.0, 200), rng.gamma(5, 2.0, 200)], detect=False)
    with pytest.raises(InputError, match="inside the sampled range"):
        reweighted_curves(pooled, [0.5, 1.5], 4)
    with pytest.raises(AnalysisError, match="MBAR needs"):
        pool_samples([1.0, 2.0], [np.ones(5), np.ones(5)])


def test_heat_capacity_peak_of_a_known_two_state_model():
    # two-state system (energies 0 and 10, degeneracies 1 and e^10): exact C(T) = (dE/T)^2 p (1 - p),
    # p = 1 / (1 + exp(dE/T - 10)); its maximum is found numerically with scipy.optimize. Samples drawn
    # exactly from p at 8 temperatures (seed 4, 2000 each); tolerance Z bootstrap errors.
    from scipy.optimize import minimize_scalar

    d_e, log_g = 10.0, 10.0
    temps = np.linspace(0.7, 1.3, 8)

    def p_excited(t):
        return 1.0 / (1.0 + np.exp(d_e / t - log_g))

    rng = np.random.default_rng(4)
    energies = [d_e * (rng.random(2000) < p_excited(t)) for t in temps]
    pooled = pool_samples(temps, energies, detect=False)
    peak = heat_capacity_peak(pooled, 1, n_bootstrap=50, seed=4)
    exact = minimize_scalar(lambda t: -(d_e / t) ** 2 * p_excited(t) * (1 - p_excited(t)),
                            bounds=(0.7, 1.3), method="bounded").x
    assert peak.value is not None and peak.error is not None
    assert abs(peak.value - exact) < Z * peak.error, (peak.value, peak.error, exact)


@pytest.mark.parametrize("body, key", [
    ("lowest_temperature = 2.0\nhighest_temperature = 1.0\ncount = 4\nrounds = 5\nseed = 1\n", "highest_temperature"),
    ("temperatures = [1.0, 1.0, 2.0]\nrounds = 5\nseed = 1\n", "temperatures"),
    (("lowest_temperature = 1.0\nhighest_temperature = 2.0\ncount = 4\nrounds = 5\nseed = 1\n"
      "exchange_interval = 100\nsample_interval = 30\n"), "sample_interval"),
    ("lowest_temperature = 1.0\ncount = 4\nrounds = 5\nseed = 1\n", "highest_temperature"),
    ("lowest_temperature = 1.0\nhighest_temperature = 2.0\ncount = 4\nrounds = 5\nseed = 1\nrungs = 3\n", "rungs"),
])
def test_bad_ladder_names_the_key(tmp_path, body, key):
    with pytest.raises(InputError, match=key) as info:
        read_ladder(write_ladder(tmp_path, body))
    assert "ladder.toml" in str(info.value)


def test_ladder_record_is_written(harmonic_ladder):
    out, ladder, _, _ = harmonic_ladder
    record = json.loads((out / "ladder.json").read_text())
    assert record["ladder"]["temperatures"] == ladder["temperatures"]
