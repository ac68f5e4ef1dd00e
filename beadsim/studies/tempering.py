"""Replica exchange (parallel tempering) of one model across a ladder of temperatures.

Method (Swendsen and Wang, Phys. Rev. Lett. 57, 2607, 1986; Hukushima and Nemoto,
J. Phys. Soc. Jpn. 65, 1604, 1996): K copies (*replicas*) of the system run Langevin
dynamics, each at one temperature of the ladder T_0 < T_1 < ... < T_{K-1} (the *rungs*).
After every ``exchange_interval`` steps (one *round*) neighbouring rungs try to swap
their configurations; rungs i and j = i + 1 holding potential energies U_i and U_j swap
with probability

    min(1, exp[(beta_i - beta_j)(U_i - U_j)]),   beta = 1 / T  (k_B = 1),

which keeps the product of the K canonical distributions stationary (detailed balance
of the extended ensemble). Even rounds try the pairs (0, 1), (2, 3), ..., odd rounds
(1, 2), (3, 4), ... A swapped replica's velocities are scaled by sqrt(T_new / T_old),
so they are Maxwell-Boltzmann distributed at the new temperature at once. Each
replica keeps its own thermostat noise stream (its seed and step count), and the
swap decisions draw from ``numpy.random.default_rng([seed, round])``, so a resumed
ladder repeats an uninterrupted one exactly.

A *round trip* of a replica is its walk from the lowest rung to the highest and back
to the lowest (the time measure of Katzgraber, Trebst, Huse and Troyer, J. Stat.
Mech. P03018, 2006 [from memory]); few round trips mean the ladder does not carry
configurations between the cold and hot ends.

Ladder file (TOML, one section ``[ladder]``, keys in :data:`LADDER_SCHEMA`)::

    [ladder]
    base = "model.toml"            # run input describing the model (its temperature is replaced)
    lowest_temperature = 1.8
    highest_temperature = 3.2
    count = 8                      # rungs, geometric spacing unless spacing = "linear"
    exchange_interval = 1000       # steps between exchange attempts
    rounds = 2000                  # rounds after equilibration_rounds
    seed = 7

Output folder (names fixed here): ``ladder.json`` (the resolved ladder and model),
``rung_KK/samples.csv`` (step, replica holding the rung, potential energy, Rg^2, Re^2 every
``sample_interval`` steps), ``rung_KK/trajectory.h5`` with ``rung_KK/frames.csv`` (the
replica that held the rung at each frame): every rung's records are continuous in
temperature; ``exchanges.csv`` (one row per attempt: step, lower rung, acceptance
probability, accepted); ``checkpoint.npz`` (all replica states, the ladder's bookkeeping;
never pickle); ``summary.json`` (exchange statistics, round trips, ladder advice and the
MBAR analysis, :func:`analyze_ladder`).

Execution: every replica's segment of one round is one task. With no backend the
segments run in this process one after another (small systems); with a backend
(:mod:`beadsim.studies.backends`) they run on its workers, the replica state travelling
with each task, and the coordinator makes the exchange decisions between rounds.
"""

import copy
import itertools
import json
import logging
import math
import time
from pathlib import Path

import numpy as np

from ..config import (AT_LEAST_ONE, REQUIRED, check_only_section, check_section, choice, load_toml, read_settings,
                      settings_hash)
from ..errors import InputError

log = logging.getLogger(__name__)

LADDER_FILE = "ladder.json"
EXCHANGE_FILE = "exchanges.csv"
CHECKPOINT_FILE = "checkpoint.npz"
SUMMARY_FILE = "summary.json"
CURVES_FILE = "reweighted.csv"
SAMPLE_FILE = "samples.csv"
FRAME_FILE = "frames.csv"
TRAJECTORY_FILE = "trajectory.h5"
FIGURE_STEM = "reweighted"

#: Columns of ``rung_KK/samples.csv`` (after ``step``).
SAMPLE_COLUMNS = ("replica", "potential_energy", "radius_of_gyration_squared", "end_to_end_squared")
#: Columns of ``exchanges.csv`` (after ``step``).
EXCHANGE_COLUMNS = ("lower_rung", "probability", "accepted")

#: Acceptance below which a pair is reported as a bottleneck (common practice: about 0.1 or more
#: keeps configurations moving along the ladder).
LOW_ACCEPTANCE = 0.1

_INT0 = ("an integer >= 0", lambda v: v >= 0)

LADDER_SCHEMA = {
    "base": (str, REQUIRED, ("a run input file", None), "run input describing the model, relative to this file"),
    "lowest_temperature": (float, None, ("a number > 0", lambda v: v > 0), "kT of the coldest rung, epsilon"),
    "highest_temperature": (float, None, ("a number > 0", lambda v: v > 0), "kT of the hottest rung, epsilon"),
    "count": (int, None, ("an integer >= 2", lambda v: v >= 2), "number of rungs"),
    "spacing": (str, "geometric", choice("geometric", "linear"),
                "geometric: constant ratio between neighbours (the default); linear: constant difference"),
    "temperatures": (list, None, ("a list of two or more increasing numbers > 0", None),
                     "explicit rung temperatures instead of lowest/highest/count"),
    "exchange_interval": (int, 1000, AT_LEAST_ONE, "steps every replica runs between exchange attempts"),
    "rounds": (int, REQUIRED, AT_LEAST_ONE, "exchange rounds recorded (after equilibration_rounds)"),
    "equilibration_rounds": (int, 0, _INT0, "rounds run before frames are saved; samples are still tabled"),
    "sample_interval": (int, 100, AT_LEAST_ONE, "steps between rows of samples.csv; divides exchange_interval"),
    "frame_interval": (int, None, AT_LEAST_ONE,
                       "steps between saved frames per rung, a multiple of sample_interval (default: exchange_interval)"),
    "checkpoint_rounds": (int, 20, AT_LEAST_ONE, "rounds between checkpoints"),
    "seed": (int, REQUIRED, _INT0, "seed of the start structures, the noise and the exchange decisions"),
}


def ladder_temperatures(lowest, highest, count, spacing="geometric"):
    """Temperatures of a ladder, ends included.

    Geometric spacing, ``T_k = T_0 (T_{K-1}/T_0)^(k/(K-1))``, gives equal acceptance between
    neighbours when the heat capacity does not depend on temperature (Kofke, J. Chem. Phys.
    117, 6911, 2002 [from memory]).

    Parameters
    ----------
    lowest, highest : float
        End temperatures, epsilon/k_B, ``0 < lowest < highest``.
    count : int
        Rungs, >= 2.
    spacing : {"geometric", "linear"}

    Returns
    -------
    ndarray, shape (count,), float64
    """
    if not 0 < lowest < highest or count < 2:
        raise InputError(f"ladder: need 0 < lowest < highest and count >= 2, got {lowest}, {highest}, {count}")
    if spacing == "geometric":
        return lowest * (highest / lowest) ** (np.arange(count) / (count - 1))
    if spacing == "linear":
        return np.linspace(lowest, highest, count)
    raise InputError(f"spacing: expected 'geometric' or 'linear', got {spacing!r}")


def read_ladder(path):
    """Read and validate a ladder file; return ``(ladder, model)``.

    ``ladder`` holds every key of :data:`LADDER_SCHEMA` resolved (``temperatures`` as a list,
    ``base`` as an absolute path); ``model`` the validated base run settings.

    Raises
    ------
    InputError
        Naming the file, the key and what is allowed.
    """
    path = Path(path)
    raw = load_toml(path)
    src = str(path)
    check_only_section(src, raw, "ladder", "ladder")
    if not isinstance(raw.get("ladder"), dict):
        raise InputError(f"{src}: a ladder file needs a section [ladder] (keys: {', '.join(LADDER_SCHEMA)})")
    ladder = check_section(src, "ladder", LADDER_SCHEMA, raw["ladder"])
    ladder["temperatures"] = _rung_temperatures(ladder, src)
    ex, si = ladder["exchange_interval"], ladder["sample_interval"]
    if ex % si:
        raise InputError(f"{src}: [ladder] sample_interval: {si} must divide exchange_interval = {ex}")
    fi = ladder["frame_interval"] = ladder["frame_interval"] or ex
    if fi % si:
        raise InputError(f"{src}: [ladder] frame_interval: {fi} must be a multiple of sample_interval = {si}")
    base = (path.parent / ladder["base"]).resolve()
    ladder["base"] = str(base)
    model = read_settings(base)
    if model["dynamics"]["integrator"] == "verlet":
        raise InputError(f"{src}: [ladder] base: the model in {base} uses the 'verlet' integrator, which holds no "
                         "temperature; set [dynamics] integrator = 'baoab' (or 'brownian') there")
    if model["dynamics"]["integrator"] == "brownian":
        raise InputError(f"{src}: [ladder] base: the model in {base} uses 'brownian' dynamics, which has no "
                         "velocities to rescale on a swap; use integrator = 'baoab'")
    model["dynamics"]["temperature"] = ladder["temperatures"][0]
    return ladder, model


def _rung_temperatures(ladder, src):
    ends = [ladder[k] for k in ("lowest_temperature", "highest_temperature", "count")]
    given = ladder["temperatures"]
    where = f"{src}: [ladder]"
    if given is not None:
        if any(v is not None for v in ends):
            raise InputError(f"{where} give either temperatures = [...] or lowest_temperature, highest_temperature "
                             "and count, not both")
        ok = (len(given) >= 2 and all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
                                      and v > 0 for v in given) and all(b > a for a, b in itertools.pairwise(given)))
        if not ok:
            raise InputError(f"{where} temperatures: must be two or more strictly increasing numbers > 0, got {given!r}")
        return [float(v) for v in given]
    if any(v is None for v in ends):
        missing = [k for k, v in zip(("lowest_temperature", "highest_temperature", "count"), ends) if v is None]
        raise InputError(f"{where} {', '.join(missing)}: required (or give temperatures = [...])")
    if ends[0] >= ends[1]:
        raise InputError(f"{where} highest_temperature: must exceed lowest_temperature = {ends[0]}, got {ends[1]}")
    return [float(v) for v in ladder_temperatures(*ends, ladder["spacing"])]


def replica_seed(seed, replica):
    """Seed of one replica's start structure and noise (NumPy SeedSequence of the ladder seed and the index)."""
    return int(np.random.SeedSequence([seed, replica]).generate_state(1)[0])


# ---------------------------------------------------------------------------------------------------------------
# One replica segment: runs in a worker (or in this process)

#: Simulations kept per process between segments, keyed by the model's hash: a segment restores
#: the replica's state into it instead of building the system again.
_SIMULATIONS = {}


def start_simulation(model, seed, start=None):
    """A replica's (or any run's) Simulation at step 0: the model built with ``seed``, then its start structure.

    Parameters
    ----------
    model : dict
        Run settings (:func:`beadsim.config.read_settings`).
    seed : int
        Seed of the grown chain and of the thermostat noise.
    start : tuple of ndarray, optional
        ``(positions, velocities)``, float64 (n_beads, 3), sigma and sigma/tau: a given start
        conformation that replaces the grown chain (not minimised: it is taken as it is, for instance
        an equilibrated chain of another temperature). None: the grown chain, minimised when
        ``[run] minimize`` is on.

    Returns
    -------
    Simulation
    """
    from ..runner import build_simulation

    settings = copy.deepcopy(model)
    settings["run"]["seed"] = int(seed)
    sim = build_simulation(settings)
    if start is not None:
        sim.system.positions[:], sim.system.velocities[:] = start
        sim.refresh_neighbors()
    elif model["run"]["minimize"]:
        sim.minimize()
    return sim


def advance_replica(task):
    """Run one replica for one round at one temperature; executed in a worker.

    Parameters
    ----------
    task : dict
        ``model`` (run settings), ``seed`` (the replica's), ``state`` (arrays of
        :meth:`Simulation.state_arrays`, or None to start the replica: :func:`start_simulation`
        with the optional ``start`` conformation of the task),
        ``temperature`` (epsilon/k_B), ``steps``, ``sample_interval``, ``frame_interval``,
        ``frames`` (bool: keep frames this round).

    Returns
    -------
    dict
        ``state`` (arrays), ``samples`` (float64 (n_samples, 4): step, potential energy, Rg^2, Re^2),
        ``frames`` (float64 (n_frames, n_beads, 3), sigma), ``frame_steps`` (int64 (n_frames,)) and
        ``cpu_seconds`` (processor time of the dynamics, s).
    """
    from ..engine.threads import threads_for

    with threads_for(sum(task["model"]["chains"]["length"])):  # restore's force call too, not only the steps
        return _advance_replica(task)


def _advance_replica(task):
    from ..engine.loop import iterate
    from ..runner import build_simulation, chain_sizes

    model = task["model"]
    key = settings_hash(model)
    if task["state"] is None:
        sim = start_simulation(model, task["seed"], task.get("start"))
        _SIMULATIONS[key] = sim
    else:
        sim = _SIMULATIONS.get(key) or build_simulation(model)
        _SIMULATIONS[key] = sim
        sim.restore(task["state"])
    sim.integrator.temperature = float(task["temperature"])
    cpu = time.process_time()
    samples, frames, frame_steps = [], [], []
    offsets = sim.system.chain_offsets
    for snap in iterate(sim, task["steps"], task["sample_interval"]):
        rg, re = chain_sizes(snap.positions, offsets)
        samples.append((snap.step, snap.observables["potential_energy"], rg * rg, re * re))
        if task["frames"] and snap.step % task["frame_interval"] == 0:
            frames.append(snap.positions.copy())
            frame_steps.append(snap.step)
    n = sim.system.n_beads
    return {"state": sim.state_arrays(), "samples": np.array(samples, dtype=np.float64).reshape(-1, 4),
            "frames": np.array(frames, dtype=np.float64).reshape(-1, n, 3),
            "frame_steps": np.array(frame_steps, dtype=np.int64), "cpu_seconds": time.process_time() - cpu}


# ---------------------------------------------------------------------------------------------------------------
# Bookkeeping of the ladder


#: Prefix of the checkpoint arrays holding the replicas' states (stacked over replicas).
_REPLICA = "replica_"


class LadderState:
    """Which replica holds which rung, the replica states and the exchange statistics.

    Attributes
    ----------
    round : int
        Rounds completed.
    replica_at : ndarray, shape (K,), int64
        Replica holding each rung.
    states : list of dict or None
        Per replica, the arrays of :meth:`Simulation.state_arrays` (None before its first segment).
    attempts, accepted : ndarray, shape (K-1,), int64
        Exchange attempts and swaps of each neighbour pair (lower rung index).
    probability_sum : ndarray, shape (K-1,), float64
        Sum of the acceptance probabilities of each pair's attempts.
    heading : ndarray, shape (K,), int64
        Per replica: +1 after it last touched the lowest rung, -1 after the highest, 0 before either.
    trip_start : ndarray, shape (K,), int64
        Round at which the replica's current round trip began (-1: none under way).
    trips, trip_rounds : ndarray, shape (K,), int64
        Round trips completed per replica and the rounds they took in total.
    frames : ndarray, shape (K,), int64
        Frames written per rung.
    cpu_seconds : ndarray, shape (), float64
        Processor time spent in the dynamics of all replicas, s.
    """

    def __init__(self, n_rungs):
        k = int(n_rungs)
        self.round = 0
        self.replica_at = np.arange(k, dtype=np.int64)
        self.states = [None] * k
        self.attempts = np.zeros(k - 1, dtype=np.int64)
        self.accepted = np.zeros(k - 1, dtype=np.int64)
        self.probability_sum = np.zeros(k - 1)
        self.heading = np.zeros(k, dtype=np.int64)
        self.trip_start = np.full(k, -1, dtype=np.int64)
        self.trips = np.zeros(k, dtype=np.int64)
        self.trip_rounds = np.zeros(k, dtype=np.int64)
        self.frames = np.zeros(k, dtype=np.int64)
        self.cpu_seconds = np.zeros(())
        self.note_ends()

    _COUNTERS = ("replica_at", "attempts", "accepted", "probability_sum", "heading", "trip_start", "trips",
                 "trip_rounds", "frames", "cpu_seconds")

    def note_ends(self):
        """Update round-trip bookkeeping for the replicas now at the lowest and highest rungs."""
        bottom, top = self.replica_at[0], self.replica_at[-1]
        if self.heading[bottom] == -1 and self.trip_start[bottom] >= 0:
            self.trips[bottom] += 1
            self.trip_rounds[bottom] += self.round - self.trip_start[bottom]
        if self.heading[bottom] != 1:
            self.trip_start[bottom] = self.round
        self.heading[bottom] = 1
        if self.heading[top] == 1:
            self.heading[top] = -1

    def arrays(self):
        """Everything as named plain arrays for a checkpoint."""
        out = {name: getattr(self, name) for name in self._COUNTERS}
        for key in self.states[0]:
            out[f"{_REPLICA}{key}"] = np.stack([np.asarray(s[key]) for s in self.states])
        return out

    @classmethod
    def from_arrays(cls, arrays, round_):
        """Inverse of :meth:`arrays`."""
        state = cls(len(arrays["replica_at"]))
        state.round = int(round_)
        for name in cls._COUNTERS:
            setattr(state, name, np.array(arrays[name]))
        keys = [name.removeprefix(_REPLICA) for name in arrays if name.startswith(_REPLICA)]
        state.states = [{key: arrays[f"{_REPLICA}{key}"][r] for key in keys} for r in range(len(state.replica_at))]
        return state


def exchange(state, temperatures, energies, seed):
    """Attempt the exchanges of one round and apply the accepted ones.

    Parameters
    ----------
    state : LadderState
        Updated in place (``round`` is advanced by the caller before the call).
    temperatures : ndarray, shape (K,), float64
        epsilon/k_B.
    energies : ndarray, shape (K,), float64
        Potential energy of the configuration on each rung, epsilon.
    seed : int
        Ladder seed; the round's decisions draw from ``default_rng([seed, round])``.

    Returns
    -------
    list of tuple
        ``(lower_rung, probability, accepted)`` per attempt.
    """
    rng = np.random.default_rng([seed, state.round])
    beta = 1.0 / temperatures
    u = np.array(energies, dtype=np.float64)
    records = []
    for i in range(state.round % 2, len(temperatures) - 1, 2):
        j = i + 1
        probability = math.exp(min(0.0, (beta[i] - beta[j]) * (u[i] - u[j])))
        accepted = bool(rng.random() < probability)
        state.attempts[i] += 1
        state.probability_sum[i] += probability
        if accepted:
            state.accepted[i] += 1
            a, b = state.replica_at[i], state.replica_at[j]
            for replica, t_old, t_new in ((a, temperatures[i], temperatures[j]), (b, temperatures[j], temperatures[i])):
                s = dict(state.states[replica])
                s["velocities"] = s["velocities"] * math.sqrt(t_new / t_old)
                state.states[replica] = s
            state.replica_at[i], state.replica_at[j] = b, a
            u[i], u[j] = u[j], u[i]
        records.append((i, probability, accepted))
    state.note_ends()
    return records


# ---------------------------------------------------------------------------------------------------------------
# Running a ladder


def ladder_identity(ladder, model):
    """Hash of what makes two ladders the same run (everything but the number of recorded rounds)."""
    fixed = {k: v for k, v in ladder.items() if k not in ("rounds", "checkpoint_rounds")}
    return settings_hash({"ladder": fixed, "model": model})


class _Outputs:
    """Per-rung sample tables, trajectories and frame tables, and the exchange table."""

    def __init__(self, out, ladder, model, mode):
        from ..io import ScalarTable, TrajectoryWriter, make_topology

        lengths = model["chains"]["length"]
        starts = np.cumsum([0] + lengths[:-1])
        bonds = np.array([(a + i, a + i + 1) for a, n in zip(starts, lengths) for i in range(n - 1)], dtype=np.int64)
        topology = make_topology(lengths, bonds)
        o, box = model["output"], model["box"]
        box_lengths = np.full(3, (sum(lengths) / box["density"]) ** (1 / 3)) if box["kind"] == "periodic" else None
        self.samples, self.trajectories, self.frame_tables = [], [], []
        for k in range(len(ladder["temperatures"])):
            folder = out / rung_folder(k)
            folder.mkdir(exist_ok=True)
            self.samples.append(ScalarTable(folder / SAMPLE_FILE, SAMPLE_COLUMNS, mode=mode))
            self.trajectories.append(TrajectoryWriter(folder / TRAJECTORY_FILE, topology, o["length_scale_nm"],
                                                      box_lengths, mode=mode))
            self.frame_tables.append(ScalarTable(folder / FRAME_FILE, ("replica",), mode=mode))
        self.exchanges = ScalarTable(out / EXCHANGE_FILE, EXCHANGE_COLUMNS, mode=mode)
        self.timestep = model["dynamics"]["timestep"]

    def record(self, rung, replica, result):
        for step, u, rg2, re2 in result["samples"]:
            self.samples[rung].append(int(step), (replica, u, rg2, re2))
        for step, x in zip(result["frame_steps"], result["frames"]):
            self.trajectories[rung].append(int(step), int(step) * self.timestep, x)
            self.frame_tables[rung].append(int(step), (replica,))

    def writers(self):
        return self.samples + self.trajectories + self.frame_tables + [self.exchanges]

    def flush(self):
        for w in self.writers():
            w.flush()

    def close(self):
        for w in self.writers():
            w.close()


def rung_folder(k):
    """Name of the folder of rung ``k``."""
    return f"rung_{k:02d}"


def _prepare(out, ladder, model, identity):
    """Create the folder or check that it holds this ladder; return the LadderState to continue from, or None."""
    from ..io import read_checkpoint, truncate_table, truncate_trajectory

    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{out}: cannot create the output folder ({exc.strerror or exc}); choose another "
                         "with --out") from None
    record = out / LADDER_FILE
    if not record.exists():
        record.write_text(json.dumps({"identity": identity, "ladder": ladder, "model": model}, indent=2) + "\n")
        return None
    known = json.loads(record.read_text())
    if known.get("identity") != identity:
        raise InputError(f"{out}: the folder holds a ladder of another model or other settings (only 'rounds' "
                         "may change to extend a run); use another --out")
    if not (out / CHECKPOINT_FILE).exists():
        return None
    arrays, meta = read_checkpoint(out / CHECKPOINT_FILE)
    state = LadderState.from_arrays(arrays, meta["round"])
    step = state.round * ladder["exchange_interval"]
    for k in range(len(ladder["temperatures"])):
        folder = out / rung_folder(k)
        for name in (SAMPLE_FILE, FRAME_FILE):
            if (folder / name).exists():
                truncate_table(folder / name, step)
        if (folder / TRAJECTORY_FILE).exists():
            truncate_trajectory(folder / TRAJECTORY_FILE, int(state.frames[k]))
    if (out / EXCHANGE_FILE).exists():
        truncate_table(out / EXCHANGE_FILE, step)
    log.info("resuming the ladder in %s after round %d", out, state.round)
    return state


def run_ladder(ladder, model, out, *, backend=None, progress=True, analyze=True, start=None):
    """Run (or continue) a replica-exchange ladder into ``out``; return its summary.

    Parameters
    ----------
    ladder, model : dict
        From :func:`read_ladder`.
    out : path-like
        Output folder (module notes). If it holds a checkpoint of the same ladder the run
        continues from it; a larger ``rounds`` extends a finished run.
    backend : backend instance, optional
        A backend of :mod:`beadsim.studies.backends` (not yet entered); None runs every
        segment in this process.
    progress : bool
        Show a progress bar over rounds.
    analyze : bool
        Analyse the finished ladder (:func:`analyze_ladder`) and write ``summary.json``.
    start : tuple of array_like, optional
        ``(positions, velocities)``, float64 (n_beads, 3), sigma and sigma/tau: one conformation
        every replica starts from (taken as it is, not minimised), instead of each replica's own
        grown chain. Each replica still has its own noise seed. Used only when the folder holds no
        checkpoint; it is not part of the ladder's identity.

    Returns
    -------
    dict
    """
    from tqdm import tqdm

    from .. import __version__
    from .._validate import as_array
    from ..io import write_checkpoint

    out = Path(out)
    if start is not None:
        shape = (int(sum(model["chains"]["length"])), 3)
        if not isinstance(start, (tuple, list)) or len(start) != 2:
            raise InputError(f"start: expected (positions, velocities), got {type(start).__name__}")
        start = tuple(as_array(x, f"start {name}", shape=shape) for x, name in zip(start, ("positions", "velocities")))
    identity = ladder_identity(ladder, model)
    temps = np.array(ladder["temperatures"])
    state = _prepare(out, ladder, model, identity)
    resumed = state is not None
    state = state or LadderState(len(temps))
    total = ladder["equilibration_rounds"] + ladder["rounds"]
    outputs = _Outputs(out, ladder, model, "a" if resumed else "w")
    started, first_round = time.perf_counter(), state.round
    bar = tqdm(total=total, initial=state.round, unit="round", disable=not progress, desc="beadsim temper")
    runner = _Segments(backend)
    try:
        with runner:
            while state.round < total:
                frames = state.round >= ladder["equilibration_rounds"]
                tasks = [{"model": model, "seed": replica_seed(ladder["seed"], int(r)), "state": state.states[r],
                          "start": start if state.states[r] is None else None,
                          "temperature": temps[k], "steps": ladder["exchange_interval"],
                          "sample_interval": ladder["sample_interval"], "frame_interval": ladder["frame_interval"],
                          "frames": frames} for k, r in enumerate(state.replica_at)]
                results = runner.run_all(tasks)
                energies = np.empty(len(temps))
                for k, (r, result) in enumerate(zip(state.replica_at, results)):
                    state.states[r] = result["state"]
                    energies[k] = result["samples"][-1, 1]
                    outputs.record(k, int(r), result)
                    state.frames[k] += len(result["frame_steps"])
                    state.cpu_seconds += result["cpu_seconds"]
                state.round += 1
                step = state.round * ladder["exchange_interval"]
                for i, p, accepted in exchange(state, temps, energies, ladder["seed"]):
                    outputs.exchanges.append(step, (i, p, int(accepted)))
                if state.round % ladder["checkpoint_rounds"] == 0 or state.round == total:
                    outputs.flush()
                    write_checkpoint(out / CHECKPOINT_FILE, state.arrays(),
                                     {"round": state.round, "identity": identity, "beadsim": __version__})
                bar.update(1)
            # everything is written before the workers are stopped: a slow or failing shutdown (a dask
            # timeout on a loaded machine) can then cost no result and no summary
            bar.close()
            outputs.close()
            summary = _write_summary(out, ladder, model, state, analyze,
                                     {"rounds_this_invocation": int(state.round - first_round),
                                      "wall_seconds_this_invocation": round(time.perf_counter() - started, 2),
                                      "workers": runner.slots})
    finally:
        bar.close()
        outputs.close()
    return summary


def _write_summary(out, ladder, model, state, analyze, invocation):
    """Exchange statistics (and, with ``analyze``, :func:`analyze_ladder`) into ``summary.json``; return them."""
    temps = np.array(ladder["temperatures"])
    summary = {"rounds_completed": int(state.round), "cpu_seconds": round(float(state.cpu_seconds), 2), **invocation,
               "temperatures": temps.tolist()}
    summary.update(exchange_statistics(state, temps))
    if analyze:
        summary.update(analyze_ladder(out, ladder, model, cpu_seconds=float(state.cpu_seconds)))
    (out / SUMMARY_FILE).write_text(json.dumps(summary, indent=2, default=_plain) + "\n")
    return summary


def _plain(value):
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    return str(value)


class _Segments:
    """Runs the segments of one round: in this process, or on a backend's workers."""

    def __init__(self, backend):
        self.backend = backend

    def __enter__(self):
        if self.backend is not None:
            self.backend.__enter__()
        return self

    def __exit__(self, *exc):
        if self.backend is not None:
            self.backend.__exit__(*exc)

    @property
    def slots(self):
        return 1 if self.backend is None else self.backend.slots

    def run_all(self, tasks):
        """Results of ``advance_replica`` for every task, in task order.

        A task lost with a broken pool is submitted again after a restart: its state is
        still the one held here, so the rerun gives the same result.
        """
        if self.backend is None:
            return [advance_replica(t) for t in tasks]
        results = [None] * len(tasks)
        waiting = list(range(len(tasks)))
        running = {}
        while waiting or running:
            while waiting and len(running) < self.backend.slots:
                i = waiting.pop(0)
                running[self.backend.submit(advance_replica, tasks[i])] = i
            broken = False
            for fut in self.backend.wait_any(list(running)):
                i = running.pop(fut)
                err = fut.exception()
                if err is None:
                    results[i] = fut.result()
                elif isinstance(err, self.backend.broken_errors):
                    broken = True
                    waiting.append(i)
                else:
                    raise err
            if broken:
                log.warning("a worker died; restarting the pool and repeating the lost segments")
                waiting.extend(running.values())
                running = {}
                self.backend.restart()
        return results


# ---------------------------------------------------------------------------------------------------------------
# Analysis


def exchange_statistics(state, temperatures):
    """Acceptance per neighbour pair, round trips and ladder advice.

    Returns
    -------
    dict
        ``pairs`` (list of dicts: lower and upper temperature, attempts, accepted fraction, mean acceptance
        probability), ``round_trips`` (total, per replica, mean rounds per trip or None) and ``advice``
        (list of sentences; empty when nothing stands out).
    """
    pairs, advice = [], []
    for i in range(len(temperatures) - 1):
        n = int(state.attempts[i])
        rate = state.accepted[i] / n if n else float("nan")
        pairs.append({"lower_temperature": float(temperatures[i]), "upper_temperature": float(temperatures[i + 1]),
                      "attempts": n, "acceptance": float(rate),
                      "mean_probability": float(state.probability_sum[i] / n) if n else float("nan")})
        if n and rate < LOW_ACCEPTANCE:
            middle = math.sqrt(temperatures[i] * temperatures[i + 1])
            advice.append(f"rungs {i} and {i + 1} (T = {temperatures[i]:.4g}, {temperatures[i + 1]:.4g}) swap in "
                          f"{rate:.1%} of attempts, below {LOW_ACCEPTANCE:.0%}: add a rung near T = {middle:.4g} "
                          "(a bottleneck, often where the heat capacity peaks)")
    trips = int(state.trips.sum())
    if trips == 0:
        advice.append("no replica has yet walked from the lowest rung to the highest and back: run more rounds, "
                      "or add rungs where the acceptance is lowest")
    return {"pairs": pairs, "advice": advice,
            "round_trips": {"total": trips, "per_replica": state.trips.tolist(),
                            "mean_rounds": float(state.trip_rounds.sum() / trips) if trips else None}}


def read_rungs(out, ladder):
    """Sample tables of every rung, production part only (after ``equilibration_rounds``).

    Returns
    -------
    list of pandas.DataFrame
        One per rung, columns ``step`` and :data:`SAMPLE_COLUMNS`.
    """
    from ..io import read_table

    first = ladder["equilibration_rounds"] * ladder["exchange_interval"]
    tables = []
    for k in range(len(ladder["temperatures"])):
        table = read_table(Path(out) / rung_folder(k) / SAMPLE_FILE)
        tables.append(table[table["step"] > first].reset_index(drop=True))
    return tables


#: Observables reweighted by MBAR: name in the curves -> column of samples.csv.
REWEIGHTED = {"rg2": "radius_of_gyration_squared", "re2": "end_to_end_squared"}


def analyze_ladder(out, ladder, model, cpu_seconds=None, n_grid=101, n_bootstrap=100):
    """Per-rung averages, MBAR curves, the heat-capacity peak and the figure of a finished ladder.

    Writes ``reweighted.csv`` (MBAR curves on ``n_grid`` temperatures) and
    ``reweighted.png``/``.svg`` into ``out``.

    Parameters
    ----------
    out : path-like
        The ladder's folder.
    ladder, model : dict
        From :func:`read_ladder`.
    cpu_seconds : float, optional
        Processor time of all replicas' dynamics, s: gives each rung's effective independent
        Rg^2 samples per CPU-second of the whole ladder.
    n_grid : int
        Temperatures of the MBAR curves.
    n_bootstrap : int
        Resamples for the error of the heat-capacity peak.

    Returns
    -------
    dict
        ``rungs`` (per rung: temperature, <Rg^2>, <Re^2>, potential energy per bead with errors,
        effective independent Rg^2 samples, and per CPU-second), ``mbar`` (overlap, samples used per rung, ``peak``)
        or ``mbar_note`` when reweighting was not possible.
    """
    from ..analysis.reweight import heat_capacity_peak, pool_samples, reweighted_curves
    from ..analysis.stats import summarize
    from ..errors import AnalysisError
    from . import figures
    from .theta import Estimate

    out = Path(out)
    n_beads = int(sum(model["chains"]["length"]))
    temps = np.array(ladder["temperatures"])
    tables = read_rungs(out, ladder)
    rungs = []
    for k, table in enumerate(tables):
        row = {"rung": k, "temperature": float(temps[k]), "samples": len(table)}
        for name, column in (("rg2", "radius_of_gyration_squared"), ("re2", "end_to_end_squared"),
                             ("potential_energy", "potential_energy")):
            x = table[column].to_numpy() / (n_beads if name == "potential_energy" else 1)
            s = summarize(x)
            row[name] = s.mean
            row[f"{name}_error"] = s.error if s.error is not None else float("nan")
            if name == "rg2":
                row["n_independent"] = s.n_independent if s.n_independent is not None else float("nan")
                row.update(_rate(x, ladder, cpu_seconds, int(table["step"].max()) if len(table) else 0))
                row["note"] = s.reason or ""
        rungs.append(row)
    result = {"rungs": rungs}
    try:
        pooled = pool_samples(temps, [t["potential_energy"].to_numpy() for t in tables],
                              {name: [t[col].to_numpy() for t in tables] for name, col in REWEIGHTED.items()})
        curves = reweighted_curves(pooled, np.linspace(temps[0], temps[-1], n_grid), n_beads)
        peak = heat_capacity_peak(pooled, n_beads, n_bootstrap=n_bootstrap, seed=ladder["seed"])
    except AnalysisError as exc:
        result["mbar_note"] = str(exc)
        return result
    curves.table().to_csv(out / CURVES_FILE, index=False)
    result["mbar"] = {"overlap_gap": curves.overlap, "samples_per_rung": pooled.counts.tolist(),
                      "statistical_inefficiency": pooled.inefficiencies.tolist(),
                      "peak": {"temperature": peak.value, "error": peak.error, "heat_capacity": peak.height,
                               "bootstrap_resamples": peak.n_bootstrap, "note": peak.note},
                      "curves": str(out / CURVES_FILE)}
    estimate = Estimate("heat-capacity peak (MBAR)", peak.value, peak.error,
                        f"{len(temps)} rungs, T = {temps[0]:.4g} to {temps[-1]:.4g}",
                        (peak.note,) if peak.note else ())
    result["figures"] = figures.reweighted_figure(curves, out / FIGURE_STEM, rungs=rungs, peak=estimate)
    return result


def _rate(rg2, ladder, cpu_seconds, steps):
    """Independent Rg^2 samples of one rung per CPU-second of the whole ladder (all replicas' time)."""
    from ..analysis.efficiency import independent_samples_rate

    if not cpu_seconds or not steps:
        return {"independent_per_cpu_second": None}
    rate = independent_samples_rate(rg2, ladder["sample_interval"], steps / cpu_seconds)
    return {"independent_per_cpu_second": rate["per_cpu_second"],
            "independent_per_cpu_second_error": rate["per_cpu_second_error"],
            "correlation_resolved": rate["correlation_resolved"]}


def temper(ladder_path, out, *, workers=None, cluster=None, progress=True):
    """Read a ladder file and run it (the ``beadsim temper`` command).

    Parameters
    ----------
    ladder_path : path-like
        Ladder file (TOML).
    out : path-like
        Output folder.
    workers : int, optional
        Run segments on a local pool of this many worker processes (1 or None: in this process).
    cluster : str, optional
        Run segments with dask (see :func:`beadsim.studies.backends.parse_cluster`).

    Returns
    -------
    dict
        The summary (also in ``summary.json``).
    """
    from .backends import make_backend

    ladder, model = read_ladder(ladder_path)
    if cluster is not None:
        backend = make_backend("dask", workers=workers, cluster=cluster)
    elif workers is not None and workers > 1:
        backend = make_backend("local", workers=workers)
    else:
        backend = None
    return run_ladder(ladder, model, out, backend=backend, progress=progress)


def format_summary(summary):
    """Plain-text report of a ladder's summary (the command line's output)."""
    lines = [f"rounds: {summary['rounds_completed']}   round trips: {summary['round_trips']['total']}"
             + (f" (mean {summary['round_trips']['mean_rounds']:.1f} rounds)"
                if summary['round_trips']['mean_rounds'] else ""),
             "", "neighbour pair          attempts  swapped  mean probability"]
    for p in summary["pairs"]:
        lines.append(f"T {p['lower_temperature']:7.4g} <-> {p['upper_temperature']:<7.4g}  {p['attempts']:8d}  "
                     f"{p['acceptance']:7.3f}  {p['mean_probability']:7.3f}")
    if "rungs" in summary:
        lines += ["", "rung  temperature  <Rg^2>            independent samples"]
        for r in summary["rungs"]:
            lines.append(f"{r['rung']:4d}  {r['temperature']:11.4g}  {r['rg2']:8.4g} +- {r['rg2_error']:<7.2g}"
                         f"  {r['n_independent']:.0f}")
    if "mbar" in summary:
        p = summary["mbar"]["peak"]
        text = "-" if p["temperature"] is None else (f"{p['temperature']:.4g}" + (
            f" +- {p['error']:.2g}" if p["error"] is not None else ""))
        lines += ["", f"heat-capacity peak (MBAR): T = {text}" + (f"  [{p['note']}]" if p["note"] else "")]
    elif "mbar_note" in summary:
        lines += ["", f"no MBAR curves: {summary['mbar_note']}"]
    lines += [f"advice: {a}" for a in summary["advice"]]
    return "\n".join(lines)
