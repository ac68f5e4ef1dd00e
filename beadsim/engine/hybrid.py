"""Hybrid sampling of equilibrium statics: Langevin segments interleaved with Monte Carlo chain moves.

Every ``segment_steps`` integrator steps (counted on the simulation's step
count, so resumed runs meet the same boundaries) the sampler attempts
``pivot_moves`` pivot moves and ``crankshaft_moves`` crankshaft moves
(:mod:`beadsim.kernels.pivot`), each accepted by the factorized Metropolis rule
on the full potential at the thermostat temperature (or the plain rule, with
``overlap_energy=None``). Each move leaves the Boltzmann distribution of
positions invariant and the Langevin steps leave the joint distribution of
positions and velocities invariant; velocities are independent of positions in
that distribution, so they are kept as they are across a move. After the moves
the Verlet list is rebuilt and the forces recomputed.

Tuned pivot count: with ``accepted_pivots_per_bead`` set, the pivot moves per
round are chosen once, at the first round at or after step ``tune_until`` (the
end of equilibration), from the pivot acceptance ``a`` measured over the rounds
after ``tune_until / 2``: ``ceil(accepted_pivots_per_bead * n / a)`` for ``n``
beads, clipped to [:data:`MIN_TUNED_PIVOTS`, :data:`MAX_TUNED_PIVOTS`] when
``a`` is at least :data:`MIN_PIVOT_ACCEPTANCE`, and :data:`FEW_PIVOTS` below it.
Rounds after that use the fixed count, so production is an ordinary Markov
chain with a Boltzmann-invariant kernel; the adaptation touches equilibration
only.

Why a count per bead (measured in analysis/statics_speed.md, LJ chains near
theta, rounds of 20 steps, one run of 120 CPU-seconds per entry): the
statistical inefficiency of Rg^2 falls with the pivot count until about two
rounds, where the Langevin part of the round sets the pace; past that, pivots
only cost. That happens at about 0.25-0.6 accepted pivots per bead per round:
at N = 256, 200 / 500 / 1,000 pivots gave 67 / 95 / 59 independent samples per
CPU-second; at N = 512, 500 / 1,000 / 2,000 gave 24 / 27 / 39; at N = 1,024,
500 / 1,000 / 2,000 / 4,000 gave 7.6 / 10.5 / 17 / 10. A fixed count per round is
too many for short chains and too few for long ones. Past about 2,000 pivots per
round more only cost: at N = 2,048 the Rg^2 inefficiency stayed at 13-19 rounds
from 400 to 8,192 pivots per round (:data:`MAX_TUNED_PIVOTS`). In the globule
(1.4 % accepted) 20 to 1,000 pivots per round gave the same rate within errors,
so the cheapest round, with few pivots, is kept there. The Langevin part of the
round may be shorter: at N = 512 with about 1,200 pivots per round, rounds of
20 / 10 / 5 steps cost 14.4 / 12.6 / 11.6 ms and gave 28 +- 3 / 32 +- 2 /
31 +- 3 independent samples per CPU-second (three runs each), so studies use 10
for long chains (:data:`beadsim.studies.sweep.LONG_CHAIN_BEADS`).
"""

import logging
import math

import numpy as np

from .._validate import positive, positive_int
from ..errors import InputError
from ..kernels import pivot as KP
from ..kernels import spheretree as KT
from ..model.build import stream_seed
from .threads import threads_for

log = logging.getLogger(__name__)

_MOVE_STREAM = 0x3C6EF372  # distinct from the thermostat's and the builders' streams

MOVE_KINDS = {"pivot": KP.PIVOT, "crankshaft": KP.CRANKSHAFT}

MIN_PIVOT_ACCEPTANCE = 0.04
"""Pivot acceptance below which a tuned count drops to :data:`FEW_PIVOTS` (measured break-even; module notes)."""

FEW_PIVOTS = 2
"""Pivot moves per round of a tuned count when pivots are rarely accepted (globules): the Langevin steps do
the sampling and a few pivots still move chain ends (the fastest mix measured there; module notes)."""

MIN_TUNED_PIVOTS = 5
"""Fewest pivot moves per round a tuned count may take (our choice: keeps chain-scale moves in every round)."""

MAX_TUNED_PIVOTS = 2000
"""Most pivot moves per round a tuned count may take (measured near theta, analysis/statics_speed.md: at
N = 1,024, 2,000 pivots per round were faster than 4,000; at N = 2,048, 8,192 gave a quarter of the rate of
400, because there the Langevin part of the round sets the pace whatever the pivot count; near the collapse,
where 4-10 % of pivots are accepted, an uncapped count would also make those points the slowest of a study)."""

OVERLAP_GRID = 4096
"""Distances in (0, cutoff] at which the pair potentials are evaluated to find the overlap radius (our choice:
a grid step of about 6e-4 sigma at a 2.5 sigma cutoff)."""

TREE_LEAF_BEADS = 8
"""Most beads in a leaf of the bounding-sphere tree."""

TREE_MIN_BEADS = 1
"""Pivots of at least this many beads sum their pair energies over the tree, smaller ones through cells. With
every pivot on the tree the cells need no upkeep during the pivots (measured at N = 512, T = 3.3: 8.5 us per
pivot against 10.5 with the cells kept and 11.0 with the threshold at 16; analysis/statics_speed.md)."""

OVERLAP_ENERGY = 8.0
"""Pair energy, in kT, above which a pair counts as overlapping in the factorized Metropolis rule (module
notes; measured: 1-16 kT give the same speed within 10 % at N = 512, T = 3.3, and at 8 kT not one move of
5,000 was decided differently from the plain rule)."""

DYNAMICS_CAUTION = ("hybrid sampling moves chains by Monte Carlo jumps between Langevin segments: "
                    "static averages (Rg, Re, shape, scattering, energies) are valid, but dynamics-derived "
                    "quantities (diffusion coefficients, relaxation and autocorrelation times in tau, "
                    "mean-square displacements) are meaningless for this run")


class MoveCells:
    """Hashed linked cells of one edge over every bead, for the Monte Carlo moves (:func:`~beadsim.kernels.pivot.build_cells`).

    Parameters
    ----------
    n : int
        Beads.
    width : float
        Cell edge, sigma; 0 means no cells (nothing is built).
    """

    def __init__(self, n, width):
        self.width = width
        self.head = np.full(int(KP.bucket_count(n)), -1, dtype=np.int64)
        self.nxt = np.full(n, -1, dtype=np.int64)
        self.prv = np.full(n, -1, dtype=np.int64)
        self.bucket = np.zeros(n, dtype=np.int64)

    def build(self, pos):
        """Bin ``pos`` (float64 (n, 3), sigma) afresh."""
        if self.width > 0.0:
            KP.build_cells(pos, self.width, self.head, self.nxt, self.prv, self.bucket)

    def arrays(self):
        """``(width, head, nxt, prv, bucket)`` as the kernels take them."""
        return self.width, self.head, self.nxt, self.prv, self.bucket


class SphereTree:
    """Bounding-sphere tree over the beads for the pair sums of large pivots (:mod:`beadsim.kernels.spheretree`).

    Parameters
    ----------
    n : int
        Beads.
    leaf_size : int
        Most beads in a leaf.
    """

    def __init__(self, n, leaf_size):
        capacity = KT.node_capacity(n, leaf_size)
        self.n = n
        self.node_lo = np.zeros(capacity, dtype=np.int64)
        self.node_hi = np.zeros(capacity, dtype=np.int64)
        self.left = np.full(capacity, -1, dtype=np.int64)
        self.n_nodes = int(KT.build_tree(n, leaf_size, self.node_lo, self.node_hi, self.left))
        self.center = np.zeros((capacity, 3))
        self.radius = np.zeros(capacity)
        self.moved = np.zeros(capacity, dtype=np.int64)
        self.fixed = np.zeros(capacity, dtype=np.int64)
        self.stack = np.zeros(KT.STACK_SIZE, dtype=np.int64)
        self.pairs = np.zeros((KT.STACK_SIZE, 2), dtype=np.int64)

    def build(self, pos):
        """Fit every sphere to ``pos`` (float64 (n, 3), sigma)."""
        KT.update_spheres(pos, self.n_nodes, self.node_lo, self.node_hi, self.left, self.center, self.radius, 0,
                          self.n, np.eye(3), np.zeros(3), False)

    def arrays(self):
        """The tree as the kernels take it."""
        return (self.n_nodes, self.node_lo, self.node_hi, self.left, self.center, self.radius, self.moved,
                self.fixed, self.stack, self.pairs)


def _incidence(n, terms):
    """Terms (rows of bead indices) each bead belongs to, in compressed rows: int64 (n+1,), (m,)."""
    terms = np.asarray(terms, dtype=np.int64)
    beads = terms.ravel()
    owner = np.repeat(np.arange(len(terms), dtype=np.int64), terms.shape[1])
    order = np.argsort(beads, kind="stable")
    start = np.zeros(n + 1, dtype=np.int64)
    np.add.at(start, beads + 1, 1)
    return np.cumsum(start), np.ascontiguousarray(owner[order])


class HybridSampler:
    """Monte Carlo pivot and crankshaft moves interleaved with the Langevin steps of a Simulation.

    Parameters
    ----------
    sim : beadsim.engine.simulation.Simulation
        Open box, thermostatted integrator; any number of chains of >= 3 beads.
    segment_steps : int
        Integrator steps between two rounds of moves.
    pivot_moves, crankshaft_moves : int
        Moves of each kind per round (>= 0, not both 0).
    crankshaft_max_angle : float
        Largest crankshaft rotation, degrees (0 < angle <= 180).
    accepted_pivots_per_bead : float, optional
        Tune the pivot moves per round so that about this many per bead of the system are accepted
        per round, or use :data:`FEW_PIVOTS` when pivots are rarely accepted (module notes);
        ``pivot_moves`` is the count used until the tuning.
    tune_until : int
        Step at or after which the pivot count is tuned (the end of equilibration).
    overlap_energy : float or None
        Pair energy (kT) above which a pair overlaps: moves are accepted by the factorized Metropolis
        rule, and most rejected ones are found from their overlaps alone (module notes). None: the
        plain Metropolis rule on the full energy change.
    tree_min_beads : int or None
        Pivots of at least this many beads sum their pair energies over a bounding-sphere tree; None sums
        every move through cells.
    attach : bool
        Make ``sim.advance`` (hence ``sim.run`` and :func:`~beadsim.engine.loop.iterate`)
        interleave the moves, and checkpoints carry the sampler's state.

    Attributes
    ----------
    move_count : int
        Moves attempted over the run (all kinds); it selects the random numbers,
        so the run's random state is (seed, step count, move_count).
    counts : dict of str -> int64 (2,)
        Attempted and accepted moves of each kind.
    tuning : int64 (3,)
        Pivots attempted and accepted in the tuning window, and 1 once the count is tuned.

    Examples
    --------
    >>> import beadsim as bs
    >>> from beadsim.engine.hybrid import HybridSampler
    >>> sim = bs.Simulation(bs.build_chains(64, seed=1), bs.ForceField(bs.WCA(), bs.FENE()),
    ...                     bs.BAOABLangevin(0.005), seed=1)
    >>> sampler = HybridSampler(sim, segment_steps=200, pivot_moves=64)   # doctest: +SKIP
    >>> sim.run(20_000)                                                   # doctest: +SKIP
    >>> sampler.acceptance()                                              # doctest: +SKIP
    """

    def __init__(self, sim, segment_steps=1000, pivot_moves=100, crankshaft_moves=0, crankshaft_max_angle=180.0,
                 accepted_pivots_per_bead=None, tune_until=0, overlap_energy=OVERLAP_ENERGY,
                 tree_min_beads=TREE_MIN_BEADS, attach=True):
        system = sim.system
        if system.box.periodic:
            raise InputError("hybrid sampling: pivot and crankshaft moves are implemented for open boxes only "
                             "([box] kind = 'open'); in a periodic box use method = 'dynamics'")
        if not sim.integrator.thermostatted:
            raise InputError(f"hybrid sampling: the integrator {type(sim.integrator).__name__} holds no "
                             "temperature for the Metropolis rule; use a thermostatted one (baoab or brownian)")
        self.sim = sim
        self.segment_steps = positive_int(segment_steps, "segment_steps")
        self.moves = {"pivot": positive_int(pivot_moves, "pivot_moves", allow_zero=True),
                      "crankshaft": positive_int(crankshaft_moves, "crankshaft_moves", allow_zero=True)}
        if not any(self.moves.values()):
            raise InputError("hybrid sampling: pivot_moves and crankshaft_moves are both 0; ask for moves of at "
                             "least one kind, or use method = 'dynamics'")
        self.accepted_pivots = (None if accepted_pivots_per_bead is None else
                                positive(accepted_pivots_per_bead, "accepted_pivots_per_bead") * system.n_beads)
        self.tune_until = positive_int(tune_until, "tune_until", allow_zero=True)
        if self.accepted_pivots is not None and self.moves["pivot"] == 0:
            raise InputError("hybrid sampling: accepted_pivots_per_bead tunes the pivot count, so pivot_moves must "
                             "be > 0 (the count used before the tuning)")
        angle = positive(crankshaft_max_angle, "crankshaft_max_angle")
        if angle > 180.0:
            raise InputError(f"crankshaft_max_angle: must lie in (0, 180] degrees, got {crankshaft_max_angle!r}")
        self.max_angle = math.radians(angle)
        n = system.n_beads
        offsets = system.chain_offsets
        lengths = np.asarray(system.chain_lengths)
        self.chain_lo = np.repeat(offsets[:-1], lengths).astype(np.int64)
        self.chain_hi = np.repeat(offsets[1:], lengths).astype(np.int64)
        idx = np.arange(n, dtype=np.int64)
        self.candidates = idx[(idx > self.chain_lo) & (idx < self.chain_hi - 1)]
        if self.candidates.size == 0:
            raise InputError("hybrid sampling: no chain has an interior bead (chains of 3 or more beads are "
                             "needed for pivot and crankshaft moves)")
        ff = sim.compiled.arrays
        self.bond_start, self.bond_of = _incidence(n, ff[3])
        self.angle_start, self.angle_of = _incidence(n, ff[7])
        self.cells = MoveCells(n, float(sim.compiled.cutoff))
        self.overlap_energy = None if overlap_energy is None else positive(overlap_energy, "overlap_energy")
        self.overlap_cells = MoveCells(n, 0.0)
        self.tree = SphereTree(n, TREE_LEAF_BEADS)
        if tree_min_beads is not None:
            tree_min_beads = positive_int(tree_min_beads, "tree_min_beads")
        self.tree_min_beads = n + 1 if tree_min_beads is None or self.cells.width == 0 else tree_min_beads
        self._overlap_temperature = None
        self.trial = np.zeros((n, 3))
        self.seen = np.zeros(int(KP.bucket_count(n)) + 1, dtype=np.int64)
        self.seed = stream_seed(sim.seed, _MOVE_STREAM)
        self.move_count = 0
        self.counts = {kind: np.zeros(2, dtype=np.int64) for kind in MOVE_KINDS}
        self.tuning = np.zeros(3, dtype=np.int64)
        if attach:
            sim.hybrid = self

    def monte_carlo(self, pivot_moves=None, crankshaft_moves=None, refresh=True):
        """One round of moves (pivots first, then crankshafts), then rebuild the list and the forces.

        Parameters
        ----------
        pivot_moves, crankshaft_moves : int, optional
            Override the per-round numbers given to the constructor.
        refresh : bool
            Rebuild the Verlet list and recompute the forces afterwards. Only a
            caller doing nothing but Monte Carlo may pass False, and must call
            ``sim.refresh_neighbors()`` before any dynamics.
        """
        sim = self.sim
        wanted = {"pivot": self.moves["pivot"] if pivot_moves is None
                  else positive_int(pivot_moves, "pivot_moves", allow_zero=True),
                  "crankshaft": self.moves["crankshaft"] if crankshaft_moves is None
                  else positive_int(crankshaft_moves, "crankshaft_moves", allow_zero=True)}
        before = self.counts["pivot"].copy()
        pos = sim.system.positions
        n = pos.shape[0]
        kT = sim.integrator.temperature
        self._set_overlap_radius(kT)
        if self.tree_min_beads <= n:
            self.tree.build(pos)
        for kind, n_moves in wanted.items():
            if n_moves == 0:
                continue
            self.cells.build(pos)  # pivots summed over the tree alone leave the cells stale
            self.overlap_cells.build(pos)
            KP.metropolis_moves(MOVE_KINDS[kind], n_moves, self.move_count, self.seed, kT, self.max_angle, pos,
                                sim.system.types, sim.compiled.arrays, sim.compiled.excl_start, sim.compiled.excl,
                                self.bond_start, self.bond_of, self.angle_start, self.angle_of, self.candidates,
                                self.chain_lo, self.chain_hi, self.cells.arrays(), self.overlap_cells.arrays(),
                                self._cap(kT), self.tree.arrays(), self.tree_min_beads, self.trial, self.seen,
                                self.counts[kind])
            self.move_count += n_moves
        if self.accepted_pivots is not None and not self.tuning[2]:
            self._tune(before)
        if refresh:
            with threads_for(sim.system.n_beads):
                sim.refresh_neighbors()

    def _cap(self, kT):
        """Pair energy above which a pair overlaps, epsilon (infinite without the overlap split)."""
        return math.inf if self.overlap_energy is None else self.overlap_energy * kT

    def _set_overlap_radius(self, kT):
        """Overlap cells of the radius at which pair energies exceed the cap at ``kT`` (computed once per kT)."""
        if self.overlap_energy is None or kT == self._overlap_temperature or self.cells.width == 0.0:
            return
        kinds, params, tables = self.sim.compiled.arrays[:3]
        self.overlap_cells.width = float(KP.overlap_radius(kinds, params, tables, self._cap(kT), self.cells.width,
                                                           OVERLAP_GRID))
        self._overlap_temperature = kT

    def _tune(self, before):
        """Count this round's pivots in the tuning window; set the pivot count for good once ``tune_until`` is reached."""
        step = self.sim.step_count
        if 2 * step > self.tune_until:
            self.tuning[:2] += self.counts["pivot"] - before
        if step < self.tune_until:
            return
        tried, took = self.tuning[:2]
        if took < MIN_PIVOT_ACCEPTANCE * tried or tried == 0:
            self.moves["pivot"] = FEW_PIVOTS
        else:
            wanted = math.ceil(self.accepted_pivots * tried / took)
            self.moves["pivot"] = int(min(MAX_TUNED_PIVOTS, max(MIN_TUNED_PIVOTS, wanted)))
        self.tuning[2] = 1
        log.info("hybrid sampling: pivot acceptance %.3g over the tuning window; %d pivot moves per round from "
                 "step %d", took / tried if tried else float("nan"), self.moves["pivot"], step)

    def advance(self, n_steps):
        """Take ``n_steps`` integrator steps, with a round of moves whenever the step count reaches a
        multiple of ``segment_steps``."""
        sim = self.sim
        end = sim.step_count + positive_int(n_steps, "n_steps", allow_zero=True)
        while sim.step_count < end:
            target = min(end, (sim.step_count // self.segment_steps + 1) * self.segment_steps)
            sim.integrator.step(sim, target - sim.step_count)
            if sim.step_count % self.segment_steps == 0:
                self.monte_carlo()

    def acceptance(self):
        """Attempted and accepted moves and the acceptance rate of each kind asked for.

        Returns
        -------
        dict
            ``{kind: {"attempted": int, "accepted": int, "rate": float or None}}``.
        """
        out = {}
        for kind, (tried, took) in self.counts.items():
            if self.moves[kind] or tried:
                out[kind] = {"attempted": int(tried), "accepted": int(took),
                             "rate": float(took) / float(tried) if tried else None}
        if self.accepted_pivots is not None and "pivot" in out:
            out["pivot"]["tuned_moves_per_segment"] = int(self.moves["pivot"]) if self.tuning[2] else None
        return out

    def state_arrays(self):
        """The sampler's part of a checkpoint (plain arrays)."""
        return {"hybrid_move_count": np.array(self.move_count, dtype=np.int64),
                "hybrid_counts": np.array([self.counts[k] for k in MOVE_KINDS], dtype=np.int64),
                "hybrid_tuning": np.append(self.tuning, self.moves["pivot"]).astype(np.int64)}

    def restore(self, arrays):
        """Restore :meth:`state_arrays` (a checkpoint without them starts the move count at 0)."""
        if "hybrid_move_count" not in arrays:
            return
        self.move_count = int(arrays["hybrid_move_count"])
        counts = np.asarray(arrays["hybrid_counts"], dtype=np.int64).reshape(len(MOVE_KINDS), 2)
        for k, kind in enumerate(MOVE_KINDS):
            self.counts[kind][:] = counts[k]
        if "hybrid_tuning" in arrays:
            tuning = np.asarray(arrays["hybrid_tuning"], dtype=np.int64)
            self.tuning[:] = tuning[:3]
            self.moves["pivot"] = int(tuning[3])
