"""Run one simulation from validated settings into an output folder, resumable at any moment.

Folder contents (names fixed here, documented in the README):

``input.toml``          the fully resolved input
``trajectory.h5``       frames of the production phase (name and format from ``[output] trajectory``)
``trajectory_parts/``   while the run goes on: frames since the last join, one part per checkpoint interval
``observables.csv``     scalar table, one row every ``table_interval`` steps, equilibration rows
                        included (column ``production`` tells them apart)
``checkpoint.npz``      last checkpoint (atomic; no pickle)
``summary.json``        versions, seed, threads, input hashes, wall time, throughput

Crash safety: every output a checkpoint covers is on disk before the
checkpoint (table flushed, trajectory part sealed, see
:mod:`beadsim.io.parts`), and the checkpoint records the trajectory's parts and
frame counts. Resuming cuts the table back to the checkpoint's step and the
trajectory back to the checkpoint's parts, so a run killed at any moment
(``kill -9`` included) loses and duplicates no frame; because the thermostat
noise is a function of (seed, step) and the Verlet list is rebuilt from its
saved reference positions, a resumed run reproduces an uninterrupted one bit
for bit. Ctrl-C or SIGTERM makes the run write a checkpoint at the current
step before it stops. Every state is checked (:mod:`beadsim.engine.health`)
before it is written, so a checkpoint never holds a blown-up state.
"""

import hashlib
import json
import logging
import math
import os
import platform
import signal
import shutil
import sys
import threading
import time
from pathlib import Path

import numpy as np

from . import __version__
from .config import load_toml, non_default_settings, settings_hash, to_toml
from .engine.health import diagnose, guarded
from .engine.hybrid import DYNAMICS_CAUTION, HybridSampler
from .engine.integrators import make_integrator
from .engine.loop import snapshot
from .engine.simulation import Simulation
from .errors import BeadsimError, InputError, InstabilityError
from .io import ScalarTable, make_topology, read_checkpoint, truncate_table, write_checkpoint
from .io._atomic import remove_leftovers
from .io.parts import PartedTrajectory, parts_folder
from .model.build import build_chains
from .model.potentials import (FENE, WCA, Bending, CosineSquared, ForceField, HarmonicBond, LennardJones, NoPair,
                               TabulatedBond, TabulatedPair)

log = logging.getLogger(__name__)

INPUT_FILE = "input.toml"
TABLE_FILE = "observables.csv"
CHECKPOINT_FILE = "checkpoint.npz"
SUMMARY_FILE = "summary.json"

#: Scalar table columns: name -> unit (or meaning).
COLUMNS = {
    "time": "tau",
    "production": "1 for production rows (step > equilibration_steps, the steps with frames), 0 for "
                  "equilibration rows (the start state included)",
    "pair_energy": "epsilon",
    "bond_energy": "epsilon",
    "bending_energy": "epsilon",
    "potential_energy": "epsilon",
    "kinetic_energy": "epsilon",
    "total_energy": "epsilon",
    "kinetic_temperature": "epsilon/k_B",
    "pressure": "epsilon/sigma^3 (periodic boxes; nan in open boxes)",
    "radius_of_gyration": "sigma (root-mean-square over chains)",
    "end_to_end_distance": "sigma (root-mean-square over chains)",
}


def build_forcefield(settings):
    """ForceField from the ``[bonds]``, ``[nonbonded]`` and ``[bending]`` sections."""
    b, nb = settings["bonds"], settings["nonbonded"]
    bond = {"fene": lambda: FENE(b["stiffness"], b["max_extension"]),
            "harmonic": lambda: HarmonicBond(b["stiffness"], b["rest_length"]),
            "table": lambda: TabulatedBond(b["table"])}
    pair = {"none": NoPair,
            "wca": lambda: WCA(nb["epsilon"], nb["sigma"]),
            "lennard_jones": lambda: LennardJones(nb["epsilon"], nb["sigma"], nb["cutoff"], nb["shift"]),
            "cosine_squared": lambda: CosineSquared(nb["depth"], nb["epsilon"], nb["sigma"]),
            "table": lambda: TabulatedPair(nb["table"])}
    stiff = settings["bending"]["stiffness"]
    return ForceField(pair[nb["potential"]](), bond[b["potential"]](),
                      bending=Bending(stiff) if stiff > 0 else None, exclude=nb["exclude"])


def build_simulation(settings):
    """System, force field and integrator from settings, as a ready Simulation (not minimised)."""
    c, box, dyn = settings["chains"], settings["box"], settings["dynamics"]
    system = build_chains(c["length"], density=box["density"] if box["kind"] == "periodic" else None,
                          bond_length=settings["bonds"]["bond_length"], min_distance=box["min_distance"],
                          seed=settings["run"]["seed"])
    integrator = make_integrator(dyn["integrator"], timestep=dyn["timestep"], temperature=dyn["temperature"],
                                 friction=dyn["friction"])
    sim = Simulation(system, build_forcefield(settings), integrator, seed=settings["run"]["seed"], skin=dyn["skin"],
                     tail_correction=settings["nonbonded"]["tail_correction"])
    sm = settings["sampling"]
    if sm["method"] == "hybrid":
        HybridSampler(sim, segment_steps=sm["segment_steps"], pivot_moves=sm["pivot_moves_per_segment"],
                      crankshaft_moves=sm["crankshaft_moves_per_segment"],
                      crankshaft_max_angle=sm["crankshaft_max_angle"],
                      accepted_pivots_per_bead=sm["accepted_pivots_per_bead"],
                      tune_until=settings["run"]["equilibration_steps"])
    return sim


def chain_sizes(positions, offsets):
    """Root-mean-square radius of gyration and end-to-end distance over chains.

    Parameters
    ----------
    positions : float64 (n, 3)
        Unwrapped positions, sigma.
    offsets : int64 (n_chains + 1,)
        Chain boundaries.

    Returns
    -------
    (float, float)
        Rg and Re, sigma.
    """
    rg2, re2 = [], []
    for a, b in zip(offsets[:-1], offsets[1:]):
        x = positions[a:b]
        rg2.append(np.mean(np.sum((x - x.mean(axis=0)) ** 2, axis=1)))
        re2.append(np.sum((x[-1] - x[0]) ** 2))
    return math.sqrt(np.mean(rg2)), math.sqrt(np.mean(re2))


def is_production(step, settings):
    """True for a step of the production phase (after ``equilibration_steps``): frames are saved there."""
    return step > settings["run"]["equilibration_steps"]


def frames_before(step, settings):
    """Number of trajectory frames an uninterrupted run has written once it reaches ``step``."""
    fi = settings["output"]["frame_interval"]
    eq = settings["run"]["equilibration_steps"]
    return max(0, step // fi - eq // fi)


class _Recorder:
    """Observer dispatching snapshots to the trajectory, the table and checkpoints by step.

    ``manifest`` is the trajectory record of the checkpoint a resumed run
    continues from (None for a new run).
    """

    def __init__(self, sim, settings, out, manifest=None):
        o = settings["output"]
        self.sim, self.settings, self.out = sim, settings, out
        self.offsets = sim.system.chain_offsets
        topology = make_topology(sim.system.chain_lengths, sim.system.bonds)
        args = (out / o["trajectory"], topology, o["length_scale_nm"], sim.system.box.lengths)
        self.trajectory = PartedTrajectory(*args) if manifest is None else PartedTrajectory.resume(*args, manifest)
        self.table = ScalarTable(out / TABLE_FILE, tuple(COLUMNS), mode="w" if manifest is None else "a")
        self.every = (o["frame_interval"], o["table_interval"], o["checkpoint_interval"])

    def append(self, snap):
        o = self.settings["output"]
        if snap.step % o["table_interval"] == 0:
            rg, re = chain_sizes(snap.positions, self.offsets)
            obs = snap.observables
            row = {k: obs.get(k, float("nan")) for k in COLUMNS}
            row.update(time=snap.time, production=int(is_production(snap.step, self.settings)),
                       radius_of_gyration=rg, end_to_end_distance=re)
            self.table.append(snap.step, row)
        if snap.step % o["frame_interval"] == 0 and is_production(snap.step, self.settings):
            self.trajectory.append(snap.step, snap.time, snap.positions)
        if snap.step % o["checkpoint_interval"] == 0:
            self.checkpoint()

    def checkpoint(self):
        """Flush the table and seal the trajectory part, then write the checkpoint atomically.

        Outputs never lag behind the checkpoint, and the checkpoint records the
        trajectory's parts and frame counts (see :mod:`beadsim.io.parts`).
        """
        self.table.flush()
        self._write_checkpoint(self.trajectory.seal())

    def _write_checkpoint(self, manifest):
        write_checkpoint(self.out / CHECKPOINT_FILE, self.sim.state_arrays(),
                         {"input_hash": settings_hash(self.settings), "beadsim": __version__,
                          "trajectory": manifest})

    def finish(self):
        """Join the trajectory parts into the trajectory file, record that in the checkpoint, delete the parts."""
        before = self.trajectory.manifest()
        after = self.trajectory.join()
        if after != before:
            self._write_checkpoint(after)
        self.trajectory.discard_parts()

    def close(self, failing=False):
        """Close the table and the open trajectory part.

        With ``failing`` (the run is already stopping on an error), a failure
        to close is only logged, so it does not hide the first error.
        """
        for output in (self.table, self.trajectory):
            try:
                output.close()
            except BeadsimError as exc:
                if not failing:
                    raise
                log.warning("%s", exc)


def prepare_folder(out, settings, resume, overwrite, allow_longer=False):
    """Create or check the output folder; refuse to mix two different runs.

    Two runs are the same when their settings differ from the defaults in the same
    keys and values (:func:`beadsim.config.non_default_settings`), so a folder
    written by a version that lacked a key or section added since with a default
    still resumes; its ``input.toml`` is then rewritten with every key. With
    ``allow_longer``, a resumed run may ask for more production steps than the run
    in the folder (sampling extended to reach a target precision).

    Raises
    ------
    InputError
        Folder not writable, or holding another run without ``resume``/``overwrite``.
    """
    out = Path(out)
    try:
        out.mkdir(parents=True, exist_ok=True)
        probe = out / ".write-test"
        probe.write_text("")
        probe.unlink()
    except OSError as exc:
        raise InputError(f"{out}: output folder is not writable ({exc.strerror or exc}); choose another "
                         "folder with --out") from None
    existing = out / INPUT_FILE
    if existing.exists() and not overwrite:
        if not resume:
            raise InputError(f"{out}: folder already holds a run ({INPUT_FILE}); use --resume to continue it, "
                             "--overwrite to replace it, or --out for a new folder")
        stored = load_toml(existing)
        if not (_same_run(stored, settings) or (allow_longer and _only_longer(stored, settings))):
            raise InputError(f"{out}: folder holds a run with a different input; --resume needs the same input "
                             "file (or use --overwrite or another --out)")
        if existing.read_text(encoding="utf-8") != to_toml(settings):
            existing.write_text(to_toml(settings), encoding="utf-8")
    if overwrite:
        for name in (INPUT_FILE, TABLE_FILE, CHECKPOINT_FILE, SUMMARY_FILE, settings["output"]["trajectory"]):
            (out / name).unlink(missing_ok=True)
        shutil.rmtree(parts_folder(out / settings["output"]["trajectory"]), ignore_errors=True)
    return out


def _same_run(stored, settings):
    """True if a stored resolved input (as read by ``load_toml``) describes the run of ``settings``."""
    return non_default_settings(stored) == non_default_settings(settings)


def _only_longer(stored, settings):
    """True if the stored run differs from ``settings`` only by fewer production steps."""
    old_steps = stored.get("run", {}).get("production_steps")
    if not isinstance(old_steps, int) or old_steps > settings["run"]["production_steps"]:
        return False
    return _same_run(stored, {**settings, "run": {**settings["run"], "production_steps": old_steps}})


def run(settings, out, *, resume=False, overwrite=False, progress=True, allow_longer=False):
    """Minimise, equilibrate and sample as the settings say, writing everything into ``out``.

    A new run starts, after minimisation, from the velocities of
    :meth:`beadsim.engine.integrators.Integrator.start_velocities`: Maxwell-Boltzmann
    at ``[dynamics] temperature`` drawn from the run's seed (baoab: every component;
    verlet: centre-of-mass motion removed; brownian: zero, it has no velocities).
    A resumed run takes its velocities from the checkpoint.

    Parameters
    ----------
    settings : dict
        From :func:`beadsim.config.read_settings`.
    out : path-like
        Output folder.
    resume : bool
        Continue from the folder's last checkpoint.
    overwrite : bool
        Replace a run already in the folder.
    progress : bool
        Show a progress bar with steps per second and ETA.
    allow_longer : bool
        Let ``resume`` extend the production phase of the run in the folder.

    Returns
    -------
    dict
        The run summary (also written to ``summary.json``).
    """
    out = prepare_folder(out, settings, resume, overwrite, allow_longer)
    sim = build_simulation(settings)
    if sim.hybrid is not None and progress:  # a study says it once for all its points; summary.json always does
        log.warning("%s", DYNAMICS_CAUTION)
    total = settings["run"]["equilibration_steps"] + settings["run"]["production_steps"]
    checkpoint = out / CHECKPOINT_FILE
    resuming = resume and checkpoint.exists()
    manifest = None
    if resuming:
        arrays, meta = read_checkpoint(checkpoint)
        sim.restore(arrays)
        for name in (CHECKPOINT_FILE, TABLE_FILE, settings["output"]["trajectory"], "topology.pdb"):
            remove_leftovers(out / name)  # temporary files of a write that a kill interrupted
        truncate_table(out / TABLE_FILE, sim.step_count)
        # checkpoints written before the trajectory was kept in parts hold every frame in the trajectory file
        manifest = meta.get("trajectory", {"base_frames": frames_before(sim.step_count, settings), "parts": []})
        log.info("resuming %s at step %d", out, sim.step_count)
    else:
        (out / INPUT_FILE).write_text(to_toml(settings), encoding="utf-8")
        if settings["run"]["minimize"]:
            sim.minimize()
        sim.system.velocities[:] = sim.integrator.start_velocities(sim.system.masses, settings["run"]["seed"])
        problem = diagnose(sim)  # the start state is written too, so it is checked like every later one
        if problem is not None:
            drawn = (f"; the start velocities are Maxwell-Boltzmann at kT = {sim.integrator.temperature}"
                     if sim.system.velocities.any() else "")
            raise InstabilityError(f"the start state fails the stability checks at step 0: {problem.what} (bead "
                                   f"{problem.bead}, largest force term: {problem.term}); lower the timestep "
                                   f"({sim.integrator.timestep} tau{drawn}) or minimise the start structure", step=0)
    recorder = _Recorder(sim, settings, out, manifest)
    start_step, started, cpu_started = sim.step_count, time.perf_counter(), time.process_time()
    bar = _progress(total, start_step, progress)
    try:
        with _StopRequest() as stop:
            if not resuming:
                recorder.append(snapshot(sim))
            for snap in guarded(sim, total - sim.step_count, recorder.every):
                recorder.append(snap)
                bar.update(snap.step - bar.n)
                if stop.signal is not None:
                    recorder.checkpoint()
                    log.warning("stopped by signal %d at step %d; checkpoint written (continue with --resume)",
                                stop.signal, sim.step_count)
                    raise KeyboardInterrupt
            if sim.step_count % settings["output"]["checkpoint_interval"]:
                recorder.checkpoint()
            recorder.finish()
    except BaseException:
        bar.close()
        recorder.close(failing=True)
        raise
    bar.close()
    recorder.close()
    wall = time.perf_counter() - started
    summary = _summary(settings, sim, wall, sim.step_count - start_step)
    summary["sampling"] = _sampling_summary(settings, sim, out, sim.step_count - start_step,
                                            time.process_time() - cpu_started)
    summary["input_toml_sha256"] = hashlib.sha256((out / INPUT_FILE).read_bytes()).hexdigest()
    (out / SUMMARY_FILE).write_text(json.dumps(summary, indent=2) + "\n", encoding="utf-8")
    return summary


class _StopRequest:
    """Context manager turning the first Ctrl-C (SIGINT) or SIGTERM into a request the run loop honours.

    The loop checks :attr:`signal` after each recorded snapshot, writes a
    checkpoint at that step and stops. A second signal stops at once (the
    last checkpoint is then the previous one). Handlers are installed only
    in the main thread (Python allows no other) and restored on exit, however
    the block ends. A signal the caller ignores (``SIG_IGN``, as a shell
    without job control sets SIGINT for a command started with ``&``) stays
    ignored, as Python itself leaves it; so does one whose handler was set
    outside Python (``signal.getsignal`` gives None), which could not be put back.
    """

    SIGNALS = (signal.SIGINT, signal.SIGTERM)

    def __init__(self):
        self.signal = None
        self._saved = {}

    def _handle(self, signum, frame):
        if self.signal is not None:
            raise KeyboardInterrupt
        self.signal = signum

    def __enter__(self):
        if threading.current_thread() is threading.main_thread():
            for sig in self.SIGNALS:
                previous = signal.getsignal(sig)
                if previous is not None and previous != signal.SIG_IGN:
                    self._saved[sig] = signal.signal(sig, self._handle)
        return self

    def __exit__(self, *exc):
        for sig, handler in self._saved.items():
            signal.signal(sig, handler)


def _progress(total, start, enabled):
    from tqdm import tqdm
    return tqdm(total=total, initial=start, unit="step", unit_scale=True, disable=not enabled,
                desc="beadsim run", smoothing=0.1, file=sys.stderr)


def provenance():
    """Versions, thread count and machine: what a result depends on besides its input and seed.

    Returns
    -------
    dict
        ``beadsim``, ``python``, ``numpy``, ``numba``, ``mdtraj`` versions,
        ``numba_threads`` (threads the kernels may use in this process; systems
        under 1,000 beads run on one) and ``machine``.
    """
    import mdtraj
    import numba
    return {
        "beadsim": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "numba": numba.__version__,
        "mdtraj": mdtraj.__version__,
        "numba_threads": numba.get_num_threads(),
        "machine": f"{platform.machine()} {platform.processor() or ''} ({os.cpu_count()} cores)".strip(),
    }


def _summary(settings, sim, wall, steps):
    return {
        **provenance(),
        "seed": settings["run"]["seed"],
        "input_sha256": settings_hash(settings),
        "beads": int(sim.system.n_beads),
        "final_step": int(sim.step_count),
        "steps_this_invocation": int(steps),
        "wall_seconds": round(wall, 3),
        "bead_steps_per_second": round(steps * sim.system.n_beads / wall, 1) if wall > 0 else None,
        "verlet_list_rebuilds": int(sim.rebuilds),
        "columns": COLUMNS,
    }


def _sampling_summary(settings, sim, out, steps, cpu_seconds):
    """Sampling method, Monte Carlo acceptance (hybrid) and independent Rg samples per CPU-second.

    The rate uses the production rows of the scalar table and this invocation's
    CPU time per step (Monte Carlo rounds included), so it holds for resumed runs too.
    """
    from .analysis.efficiency import independent_samples_rate
    from .io import read_table
    report = {"method": settings["sampling"]["method"]}
    if sim.hybrid is not None:
        report.update(note=DYNAMICS_CAUTION, acceptance=sim.hybrid.acceptance())
    table = read_table(out / TABLE_FILE)
    rg = table["radius_of_gyration"][table["production"] == 1].to_numpy()
    speed = steps / cpu_seconds if steps > 0 and cpu_seconds > 0 else None
    report["cpu_seconds_this_invocation"] = round(cpu_seconds, 3)
    if speed is None or rg.size < 2:
        report["rg_independent_samples"] = {"per_cpu_second": None, "reason": "no production steps in this invocation"}
    else:
        report["rg_independent_samples"] = independent_samples_rate(rg, settings["output"]["table_interval"], speed)
    return report
