"""Monte Carlo chain moves (pivot, crankshaft) and hybrid sampling: kernel against its NumPy twin,
energy changes against full recomputation, exact ideal-chain results, resumability and bad input.

Statistical checks state seed, sample size and a tolerance of 4 standard errors (common practice:
a correct sampler fails it by chance with probability about 6e-5); the standard error comes from
the statistical inefficiency of the series (beadsim.analysis.stats, after pymbar).
"""

import math

import numpy as np
import pytest

import beadsim as bs
from beadsim.analysis.stats import statistical_inefficiency
from beadsim.engine.hybrid import HybridSampler
from beadsim.engine.moves_reference import (
    interior_beads,
    reference_energy,
    reference_moves,
    reference_split_energy,
)
from beadsim.kernels import pivot as KP

Z_TOLERANCE = 4.0


def _systems():
    """(name, System, ForceField): every pair kind the moves use, bending, exclusions, two chains."""
    chain = bs.build_chains(40, seed=3, min_distance=0.85)
    pair = bs.build_chains([24, 24], seed=5, min_distance=0.85)
    pair.types[::3] = 1
    return [
        ("wca_fene", chain, bs.ForceField(bs.WCA(), bs.FENE())),
        ("lj_fene_bending", chain, bs.ForceField(bs.LennardJones(cutoff=2.5), bs.FENE(), bending=bs.Bending(1.5))),
        ("cos2_harmonic_excl", chain, bs.ForceField(bs.CosineSquared(depth=1.3), bs.HarmonicBond(50.0, 0.97),
                                                    bending=bs.Bending(2.0), exclude="bonded_and_angles")),
        ("two_chains_two_types", pair, bs.ForceField({(0, 0): bs.WCA(), (0, 1): bs.LennardJones(cutoff=2.5),
                                                      (1, 1): bs.CosineSquared(depth=0.5)}, bs.FENE())),
    ]


def _sampler(system, ff, kT=1.0, **moves):
    sim = bs.Simulation(system.copy(), ff, bs.BAOABLangevin(0.005, temperature=kT), seed=7)
    return sim, HybridSampler(sim, **({"segment_steps": 100} | moves))


def _trial_changes(sim, s, kind, move, g, origin, cap, r_hard):
    """Overlap barrier and rest change of one trial move from the compiled kernels: through the cells and,
    for a pivot, over the bounding-sphere tree. Returns (lo, hi, barrier, rest by cells, rest by tree)."""
    pos = sim.system.positions
    c, o = s.cells, s.overlap_cells
    args = (pos, sim.system.types, sim.compiled.arrays, sim.compiled.excl_start, sim.compiled.excl)
    lo, hi = KP.propose(kind, s.seed, move, s.max_angle, pos, s.candidates, s.chain_lo, s.chain_hi, s.trial, g)
    below = lo == s.chain_lo[lo]
    pivot = hi if below else lo - 1
    origin[:] = pos[pivot]
    span = KP.term_span(sim.compiled.arrays)
    rest_cells, ok = KP.trial_energy_change(lo, hi, s.trial, *args, span, s.bond_start, s.bond_of, s.angle_start,
                                            s.angle_of, c.width, c.head, c.nxt, s.seen, cap, r_hard ** 2)
    assert ok
    rest_tree = None
    if kind == KP.PIVOT:
        rest_tree, ok = KP.tree_energy_change(lo, hi, hi if below else lo, s.trial, *args, span, s.bond_start,
                                              s.bond_of, s.angle_start, s.angle_of, c.width, cap, r_hard ** 2, g,
                                              origin, s.tree.arrays())
        assert ok
    barrier = 0.0
    if r_hard > 0:
        barrier = KP.overlap_barrier(lo, hi, hi if below else lo, s.trial, *args, o.width, o.head, o.nxt, s.seen,
                                     cap, math.inf, False, kind == KP.PIVOT, g, origin, s.tree.arrays())
    return lo, hi, barrier, rest_cells, rest_tree


@pytest.mark.parametrize("overlap_energy", [None, 0.5], ids=["plain", "split"])
@pytest.mark.parametrize("kind", [KP.PIVOT, KP.CRANKSHAFT], ids=["pivot", "crankshaft"])
@pytest.mark.parametrize("case", range(4), ids=[c[0] for c in _systems()])
def test_energy_changes_equal_full_recomputation(case, kind, overlap_energy):
    """For 40 trial moves, the kernels' energy changes equal the NumPy reference's, recomputed in full from
    every pair (cKDTree; beadsim.engine.moves_reference), to 1e-10 relative to max(|dU|, 1 epsilon):
    the full dU (plain rule), or the positive part of the overlap change and the rest change of the split
    at a cap of 0.5 kT, where many pairs overlap. The rest change is checked both through the cells and,
    for pivots, over the bounding-sphere tree."""
    name, system, ff = _systems()[case]
    sim, s = _sampler(system, ff, overlap_energy=overlap_energy)
    pos = sim.system.positions
    s._set_overlap_radius(1.0)
    cap, r_hard = s._cap(1.0), s.overlap_cells.width
    for cells in (s.cells, s.overlap_cells):
        cells.build(pos)
    s.tree.build(pos)
    start = (0.0, reference_energy(sim.system, ff)) if overlap_energy is None else \
        reference_split_energy(sim.system, ff, cap, r_hard)
    g, origin = np.empty((3, 3)), np.empty(3)
    trial_system = sim.system.copy()
    checked = 0
    for move in range(40):
        lo, hi, barrier, rest_cells, rest_tree = _trial_changes(sim, s, kind, move, g, origin, cap, r_hard)
        trial_system.positions[:] = pos
        trial_system.positions[lo:hi] = s.trial[lo:hi]
        end = (0.0, reference_energy(trial_system, ff)) if overlap_energy is None else \
            reference_split_energy(trial_system, ff, cap, r_hard)
        d_overlap, d_rest = end[0] - start[0], end[1] - start[1]
        checked += d_overlap > 0
        for value, expected in ((barrier, max(d_overlap, 0.0)), (rest_cells, d_rest), (rest_tree, d_rest)):
            if value is not None:
                assert abs(value - expected) <= 1e-10 * max(abs(expected), 1.0), (name, move, value, expected)
    if overlap_energy is not None and case != 0:
        assert checked > 0  # the split was exercised


@pytest.mark.parametrize("overlap_energy, tree_min_beads", [(None, None), (0.5, 2), (8.0, 1)],
                         ids=["plain_cells", "split_tree_low_cap", "split_tree_default_cap"])
@pytest.mark.parametrize("kind", [KP.PIVOT, KP.CRANKSHAFT], ids=["pivot", "crankshaft"])
def test_metropolis_kernel_matches_numpy_twin(kind, overlap_energy, tree_min_beads):
    """300 moves on a 40-bead LJ-2.5 chain with bending at kT = 1.5 (seed 7): the compiled kernel accepts
    the same moves as the NumPy twin (scipy Rotation, energies recomputed in full from every pair) and ends
    at the same positions to 1e-9 sigma; with the plain rule, and with the factorized rule at caps of 0.5
    and 8 kT with the pivots of 2 or more beads, or all of them, summed over the tree (early stops, lazy old
    sums, the tree's upkeep after accepted moves and the cells left stale by pivots all take part)."""
    system = bs.build_chains(40, seed=9, min_distance=0.85)
    ff = bs.ForceField(bs.LennardJones(cutoff=2.5), bs.FENE(), bending=bs.Bending(1.0))
    sim, s = _sampler(system, ff, kT=1.5, pivot_moves=1, crankshaft_moves=1, crankshaft_max_angle=90.0,
                      overlap_energy=overlap_energy, tree_min_beads=tree_min_beads)
    start = sim.system.copy()
    name = "pivot" if kind == KP.PIVOT else "crankshaft"
    s.monte_carlo(**{f"{k}_moves": (300 if k == name else 0) for k in ("pivot", "crankshaft")})
    split = None if overlap_energy is None else (s._cap(1.5), s.overlap_cells.width)
    expected, accepted, _ = reference_moves(start, ff, kind, 300, 0, s.seed, 1.5, s.max_angle, split=split)
    assert s.counts[name][0] == 300
    assert s.counts[name][1] == accepted
    assert 0 < accepted < 300
    np.testing.assert_allclose(sim.system.positions, expected, rtol=0, atol=1e-9)


def test_interior_beads_are_the_move_candidates():
    system = bs.build_chains([5, 3, 4], seed=1)
    _, s = _sampler(system, bs.ForceField(bs.WCA(), bs.FENE()))
    np.testing.assert_array_equal(s.candidates, interior_beads(system))
    np.testing.assert_array_equal(s.candidates, [1, 2, 3, 6, 9, 10])


def _wormlike_re2(bond_lengths, t):
    """<Re^2> = sum_i b_i^2 + 2 sum_{i<j} b_i b_j t^(j-i) for bond directions forming a Markov chain with
    <u_j . u_i> = t^(j-i) (fixed bond lengths, independent bending angles, free torsions)."""
    b = np.asarray(bond_lengths)
    k = np.arange(len(b))
    return float(b @ (t ** np.abs(k[:, None] - k[None, :])) @ b)


@pytest.mark.parametrize("moves", [{"pivot_moves": 14}, {"crankshaft_moves": 14}], ids=["pivot", "crankshaft"])
def test_moves_alone_sample_the_discrete_wormlike_chain_exactly(moves):
    """Detailed balance with a non-trivial energy change: a 16-bead phantom chain (no pair potential)
    with bending U = kappa (1 - cos theta), kappa = 2 kT, sampled by Monte Carlo moves alone.

    Exact result: each bending angle is independent with density ~ exp(kappa cos theta / kT) on the
    sphere, so <cos theta> = coth(kappa/kT) - kT/kappa (the Langevin function) and bond directions form
    a Markov chain with <u_i . u_j> = t^|i-j| (Flory, Statistical Mechanics of Chain Molecules, 1969,
    ch. I; the discrete Kratky-Porod chain). The moves keep the bond lengths, so <Re^2> follows from
    the actual lengths. Seed 7; 20,000 rounds of 14 moves, one sample per round; tolerance 4 standard
    errors.
    """
    kappa, kT = 2.0, 1.0
    system = bs.build_chains(16, seed=2, bond_length=1.0)
    ff = bs.ForceField(bs.NoPair(), bs.HarmonicBond(100.0, 1.0), bending=bs.Bending(kappa))
    sim, s = _sampler(system, ff, kT=kT, **moves)
    x = sim.system.positions
    lengths = np.linalg.norm(np.diff(x, axis=0), axis=1)
    t = 1.0 / math.tanh(kappa / kT) - kT / kappa
    re2, cos_mean = [], []
    for _ in range(20_000):
        s.monte_carlo(refresh=False)  # Monte Carlo only: forces are never used
        d = np.diff(x, axis=0)
        re2.append(np.sum((x[-1] - x[0]) ** 2))
        u = d / np.linalg.norm(d, axis=1)[:, None]
        cos_mean.append(np.mean(np.sum(u[:-1] * u[1:], axis=1)))
    np.testing.assert_allclose(np.linalg.norm(np.diff(x, axis=0), axis=1), lengths, rtol=1e-9)
    for series, exact in ((np.array(re2), _wormlike_re2(lengths, t)), (np.array(cos_mean), t)):
        err = series.std(ddof=1) * math.sqrt(statistical_inefficiency(series) / series.size)
        assert abs(series.mean() - exact) < Z_TOLERANCE * err, (series.mean(), exact, err)


def test_hybrid_gaussian_chain_gives_exact_end_to_end_distance():
    """Ideal harmonic chain (no pair potential, harmonic bonds of rest length 0, k_s = 10): the exact
    Gaussian-chain result <Re^2> = 3 (N - 1) kT / k_s (e.g. Doi and Edwards, The Theory of Polymer
    Dynamics, 1986, ch. 2). Pivot moves cannot change bond lengths, so here they are interleaved with
    BAOAB segments, which sample a quadratic potential's configurations exactly (Leimkuhler and
    Matthews 2013). N = 16, kT = 1.3, dt = 0.01, seed 7; 2,400 segments of 25 steps each followed by 14
    pivots, one sample per segment; tolerance 4 standard errors."""
    n, k_s, kT = 16, 10.0, 1.3
    system = bs.build_chains(n, seed=4, bond_length=0.5, min_distance=0.3)
    ff = bs.ForceField(bs.NoPair(), bs.HarmonicBond(k_s, 0.0))
    sim = bs.Simulation(system, ff, bs.BAOABLangevin(0.01, temperature=kT, friction=1.0), seed=7)
    s = HybridSampler(sim, segment_steps=25, pivot_moves=14)
    sim.run(2_000)
    re2 = np.array([np.sum((snap.positions[-1] - snap.positions[0]) ** 2) for snap in bs.iterate(sim, 60_000, 25)])
    err = re2.std(ddof=1) * math.sqrt(statistical_inefficiency(re2) / re2.size)
    assert abs(re2.mean() - 3 * (n - 1) * kT / k_s) < Z_TOLERANCE * err
    assert s.acceptance()["pivot"]["rate"] == 1.0  # no energy changes under a pivot of a phantom chain


def test_hybrid_run_resumes_bit_for_bit():
    """Checkpoint arrays after 1,500 steps, restored into a fresh simulation and sampler, continue
    exactly as the uninterrupted run (the move stream is a function of the seed and move count)."""
    system = bs.build_chains(32, seed=6)
    ff = bs.ForceField(bs.LennardJones(cutoff=2.5), bs.FENE())
    sim, s = _sampler(system, ff, kT=2.0, segment_steps=200, pivot_moves=20, crankshaft_moves=20)
    sim.minimize()
    fresh = sim.system.copy()
    sim.run(1_500)
    saved = sim.state_arrays()
    sim.run(1_500)
    sim2, s2 = _sampler(fresh, ff, kT=2.0, segment_steps=200, pivot_moves=20, crankshaft_moves=20)
    sim2.restore(saved)
    sim2.run(1_500)
    np.testing.assert_array_equal(sim2.system.positions, sim.system.positions)
    np.testing.assert_array_equal(sim2.system.velocities, sim.system.velocities)
    assert s2.acceptance() == s.acceptance() and s2.move_count == s.move_count == 15 * 40


def test_tuned_pivot_count_follows_the_acceptance_of_the_second_half_of_equilibration():
    """With 1/16 accepted pivots per bead (3 for 48 beads) and tune_until = 1,000 steps (rounds of 20 steps),
    the pivot count from step 1,000 on is ceil(3 / a), a the pivot acceptance of the rounds after step 500,
    clipped to [MIN_TUNED_PIVOTS, MAX_TUNED_PIVOTS] (a is well above MIN_PIVOT_ACCEPTANCE here). Until the tuning the
    tuned sampler draws the same moves as a fixed-count one, so a is read from the fixed-count sampler's
    own counters at steps 500 and 1,000."""
    from beadsim.engine.hybrid import MAX_TUNED_PIVOTS, MIN_PIVOT_ACCEPTANCE, MIN_TUNED_PIVOTS
    system = bs.build_chains(48, seed=6)
    ff = bs.ForceField(bs.LennardJones(cutoff=2.5), bs.FENE())
    sim, fixed = _sampler(system, ff, kT=3.0, segment_steps=20, pivot_moves=10)
    sim.minimize()
    start = sim.system.copy()
    sim.run(500)
    at_half = fixed.counts["pivot"].copy()
    sim.run(500)
    tried, took = fixed.counts["pivot"] - at_half
    assert took > 2 * MIN_PIVOT_ACCEPTANCE * tried
    expected = min(MAX_TUNED_PIVOTS, max(MIN_TUNED_PIVOTS, math.ceil(3 * tried / took)))
    sim2, tuned = _sampler(start, ff, kT=3.0, segment_steps=20, pivot_moves=10, accepted_pivots_per_bead=3 / 48,
                           tune_until=1_000)
    sim2.run(980)
    assert tuned.moves["pivot"] == 10 and tuned.acceptance()["pivot"]["tuned_moves_per_segment"] is None
    sim2.run(20)
    np.testing.assert_array_equal(sim2.system.positions, sim.system.positions)
    assert tuned.moves["pivot"] == expected != 10
    assert tuned.acceptance()["pivot"]["tuned_moves_per_segment"] == expected


def test_phantom_chain_tunes_to_the_fewest_pivots():
    """A chain without pair forces accepts every pivot (a = 1), so 3 / 16 accepted per bead of 16 beads
    asks for ceil(3 / a) = 3 pivots, which is raised to MIN_TUNED_PIVOTS."""
    from beadsim.engine.hybrid import MIN_TUNED_PIVOTS
    system = bs.build_chains(16, seed=4, bond_length=0.5, min_distance=0.3)
    sim, s = _sampler(system, bs.ForceField(bs.NoPair(), bs.HarmonicBond(10.0, 0.0)), segment_steps=10,
                      pivot_moves=40, accepted_pivots_per_bead=3 / 16, tune_until=200)
    sim.run(300)
    assert s.moves["pivot"] == MIN_TUNED_PIVOTS


def test_rarely_accepted_pivots_tune_to_few_pivots():
    """A compact LJ globule at kT = 0.8 (48 beads, rounds of 20 steps) accepts far fewer than
    MIN_PIVOT_ACCEPTANCE of its pivots, so the tuned count is FEW_PIVOTS whatever the target."""
    from beadsim.engine.hybrid import FEW_PIVOTS, MIN_PIVOT_ACCEPTANCE
    system = bs.build_chains(48, seed=6)
    sim, s = _sampler(system, bs.ForceField(bs.LennardJones(cutoff=2.5), bs.FENE()), kT=0.8, segment_steps=20,
                      pivot_moves=10, accepted_pivots_per_bead=0.2, tune_until=6_000)
    sim.minimize()
    sim.run(6_000)
    tried, took = s.tuning[:2]
    assert took < MIN_PIVOT_ACCEPTANCE * tried and s.moves["pivot"] == FEW_PIVOTS


def test_tuned_hybrid_run_resumes_bit_for_bit_across_the_tuning():
    """A checkpoint taken before the pivot count is tuned, restored into a fresh sampler, continues past
    the tuning exactly as the uninterrupted run, and one taken after it keeps the tuned count."""
    system = bs.build_chains(32, seed=6)
    ff = bs.ForceField(bs.LennardJones(cutoff=2.5), bs.FENE())
    kwargs = dict(kT=2.0, segment_steps=50, pivot_moves=20, accepted_pivots_per_bead=0.0625, tune_until=1_000)
    sim, s = _sampler(system, ff, **kwargs)
    sim.minimize()
    fresh = sim.system.copy()
    sim.run(700)
    before = sim.state_arrays()
    sim.run(800)
    after = sim.state_arrays()
    sim.run(500)
    for saved, steps in ((before, 1_300), (after, 500)):
        sim2, s2 = _sampler(fresh, ff, **kwargs)
        sim2.restore(saved)
        sim2.run(steps)
        np.testing.assert_array_equal(sim2.system.positions, sim.system.positions)
        assert s2.moves["pivot"] == s.moves["pivot"] and s2.acceptance() == s.acceptance()


def test_moves_keep_velocities_and_refresh_forces():
    system = bs.build_chains(24, seed=8)
    sim, s = _sampler(system, bs.ForceField(bs.WCA(), bs.FENE()), segment_steps=10, pivot_moves=50)
    sim.run(10)
    v = sim.system.velocities.copy()
    s.monte_carlo()
    np.testing.assert_array_equal(sim.system.velocities, v)
    forces = sim.forces.copy()
    sim.compute_forces()
    np.testing.assert_array_equal(sim.forces, forces)
    assert s.counts["pivot"][1] > 0


@pytest.mark.parametrize("build, integrator, kwargs, message", [
    (lambda: bs.build_chains([16] * 4, density=0.2, seed=1), bs.BAOABLangevin(0.005), {}, "open boxes only"),
    (lambda: bs.build_chains(16, seed=1), bs.VelocityVerlet(0.005), {}, "holds no temperature"),
    (lambda: bs.build_chains(16, seed=1), bs.BAOABLangevin(0.005), {"pivot_moves": 0}, "both 0"),
    (lambda: bs.build_chains(16, seed=1), bs.BAOABLangevin(0.005), {"crankshaft_max_angle": 200.0}, "(0, 180]"),
    (lambda: bs.build_chains(16, seed=1), bs.BAOABLangevin(0.005), {"segment_steps": 0}, "segment_steps"),
    (lambda: bs.build_chains([2, 2], seed=1), bs.BAOABLangevin(0.005), {}, "interior bead"),
    (lambda: bs.build_chains(16, seed=1), bs.BAOABLangevin(0.005),
     {"pivot_moves": 0, "crankshaft_moves": 5, "accepted_pivots_per_bead": 0.1}, "pivot_moves must"),
    (lambda: bs.build_chains(16, seed=1), bs.BAOABLangevin(0.005), {"accepted_pivots_per_bead": -1.0},
     "accepted_pivots_per_bead"),
])
def test_bad_hybrid_settings_are_refused(build, integrator, kwargs, message):
    sim = bs.Simulation(build(), bs.ForceField(bs.WCA(), bs.FENE()), integrator, seed=1)
    with pytest.raises(bs.InputError, match=message.replace("(", r"\(").replace("]", r"\]")):
        HybridSampler(sim, **kwargs)
