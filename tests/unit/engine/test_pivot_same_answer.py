"""Hybrid sampling (Langevin + pivot moves) gives the same equilibrium statics as plain Langevin dynamics,
with the current moves (factorized Metropolis rule, pair sums over the bounding-sphere tree) and with the
previous ones (plain Metropolis rule, every pair through cells); plus detailed balance of the factorized
rule against an exact result.

Every sampler targets the Boltzmann distribution of the same potential, so <Rg^2>, <Re^2> and the mean
potential energy must agree between any two within their combined standard errors:
|a - b| < 4 sqrt(e_a^2 + e_b^2) (4 standard errors, common practice: a correct pair fails one comparison
by chance with probability about 6e-5; errors from the statistical inefficiency after equilibration
detection, beadsim.analysis.stats, after pymbar). Chains: FENE + Lennard-Jones cut and shifted at 2.5 sigma
at kT = 3.3 (a little above the theta temperature of beadsim/data/theta_points.toml) and kT = 2.4 (a
collapsed chain). All runs share the BAOAB configurational bias at dt = 0.005 (O(dt^2)), which the
comparison does not test.
"""

import itertools
import math

import numpy as np
import pytest

import beadsim as bs
from beadsim.analysis.stats import statistical_inefficiency, summarize
from beadsim.engine.hybrid import HybridSampler

Z_TOLERANCE = 4.0
QUANTITIES = ("rg2", "re2", "potential_energy")
SAMPLERS = {
    "dynamics": None,
    "previous_moves": {"overlap_energy": None, "tree_min_beads": None},
    "current_moves": {},  # the shipped defaults: factorized rule, every pivot summed over the tree
}


def _means(n, kT, sampler, steps, seed):
    """Summaries of Rg^2, Re^2 and the potential energy of one run: minimise, 20 % of ``steps`` to
    equilibrate, then one sample every 100 steps."""
    sim = bs.Simulation(bs.build_chains(n, seed=seed), bs.ForceField(bs.LennardJones(cutoff=2.5), bs.FENE()),
                        bs.BAOABLangevin(0.005, temperature=kT, friction=0.5), seed=seed)
    sim.minimize()
    if SAMPLERS[sampler] is not None:
        HybridSampler(sim, segment_steps=100, pivot_moves=n, **SAMPLERS[sampler])
    sim.advance(steps // 5)
    series = {q: [] for q in QUANTITIES}
    for snap in bs.iterate(sim, steps, 100):
        x = snap.positions
        series["rg2"].append(np.mean(np.sum((x - x.mean(axis=0)) ** 2, axis=1)))
        series["re2"].append(np.sum((x[-1] - x[0]) ** 2))
        series["potential_energy"].append(snap.observables["potential_energy"])
    return {q: summarize(np.array(v)) for q, v in series.items()}


def _check_all_agree(n, kT, steps):
    runs = {name: _means(n, kT, name, steps[name], seed=11 + k) for k, name in enumerate(SAMPLERS)}
    for (a, ra), (b, rb) in itertools.combinations(runs.items(), 2):
        for q in QUANTITIES:
            assert ra[q].error is not None and rb[q].error is not None, (a, b, q, ra[q].reason, rb[q].reason)
            combined = math.hypot(ra[q].error, rb[q].error)
            assert abs(ra[q].mean - rb[q].mean) < Z_TOLERANCE * combined, (a, b, q, ra[q], rb[q])


@pytest.mark.parametrize("kT", [3.3, 2.4])
def test_hybrid_moves_and_langevin_agree_for_short_chains(kT):
    """16-bead chains; seeds 11 (dynamics), 12 (previous moves), 13 (current moves); 200,000 dynamics steps
    and 50,000 hybrid steps (16 pivots every 100 steps); samples every 100 steps."""
    _check_all_agree(16, kT, {"dynamics": 200_000, "previous_moves": 50_000, "current_moves": 50_000})


@pytest.mark.slow
@pytest.mark.parametrize("kT", [3.3, 2.4])
def test_hybrid_moves_and_langevin_agree_for_64_bead_chains(kT):
    """64-bead chains; seeds 11, 12, 13; 4,000,000 dynamics steps and 400,000 hybrid steps (64 pivots every
    100 steps); samples every 100 steps."""
    _check_all_agree(64, kT, {"dynamics": 4_000_000, "previous_moves": 400_000, "current_moves": 400_000})


def _exact_four_bead_averages(lengths, pair, kT, nodes=160):
    """<Re^2> and <cos> of the first bond angle of a 4-bead chain of fixed bond lengths whose beads 1-3, 2-4
    and 1-4 interact through ``pair`` (bonded pairs have fixed distances, so they only add a constant).

    With bond directions uniform on the sphere a priori, the relative conformation is given by c1 = u1.u2,
    c2 = u2.u3 (each uniform on [-1, 1]) and the torsion phi (uniform on [0, 2 pi)), weighted by
    exp(-U / kT); the integrals are Gauss-Legendre quadratures in c1 and c2 and the trapezoidal rule in phi
    (exact for periodic integrands up to the grid's Nyquist frequency).
    """
    x, w = np.polynomial.legendre.leggauss(nodes)
    phi = np.linspace(0.0, 2.0 * np.pi, nodes, endpoint=False)
    c1, c2, ph = np.meshgrid(x, x, phi, indexing="ij")
    weight = w[:, None, None] * w[None, :, None]
    s1, s2 = np.sqrt(1 - c1 ** 2), np.sqrt(1 - c2 ** 2)
    b1 = lengths[0] * np.stack([s1, np.zeros_like(c1), c1])
    b2 = lengths[1] * np.stack([np.zeros_like(c1), np.zeros_like(c1), np.ones_like(c1)])
    b3 = lengths[2] * np.stack([s2 * np.cos(ph), s2 * np.sin(ph), c2])

    def energy(v):
        return pair.energy_force(np.sum(v * v, axis=0))[0]

    boltz = np.exp(-(energy(b1 + b2) + energy(b2 + b3) + energy(b1 + b2 + b3)) / kT) * weight
    z = boltz.sum()
    return float((np.sum((b1 + b2 + b3) ** 2, axis=0) * boltz).sum() / z), float((c1 * boltz).sum() / z)


def test_factorized_rule_samples_a_four_bead_chain_exactly():
    """Detailed balance of the factorized rule with its overlap factor in play: a 4-bead chain with fixed
    bond lengths (pivots keep them) and LJ-2.5 pairs at kT = 1, sampled by pivot moves alone with the
    overlap cap at 0.3 kT, so that most moves that bring beads 1-3, 2-4 or 1-4 within 1.1 sigma are decided
    by two factors. Exact <Re^2> and <cos theta> of the first bond angle by quadrature over the two bond
    angles and the torsion (_exact_four_bead_averages). Seed 7; 20,000 rounds of 6 pivots, one sample per
    round; tolerance 4 standard errors."""
    kT = 1.0
    pair = bs.LennardJones(cutoff=2.5)
    system = bs.build_chains(4, seed=2, bond_length=1.0)
    ff = bs.ForceField(pair, bs.HarmonicBond(100.0, 1.0))
    sim = bs.Simulation(system, ff, bs.BAOABLangevin(0.005, temperature=kT), seed=7)
    sampler = HybridSampler(sim, segment_steps=100, pivot_moves=6, overlap_energy=0.3)
    x = sim.system.positions
    lengths = np.linalg.norm(np.diff(x, axis=0), axis=1)
    re2, cos1 = [], []
    for _ in range(20_000):
        sampler.monte_carlo(refresh=False)  # Monte Carlo only: forces are never used
        d = np.diff(x, axis=0)
        re2.append(np.sum((x[-1] - x[0]) ** 2))
        cos1.append(d[0] @ d[1] / (np.linalg.norm(d[0]) * np.linalg.norm(d[1])))
    np.testing.assert_allclose(np.linalg.norm(np.diff(x, axis=0), axis=1), lengths, rtol=1e-9)
    exact_re2, exact_cos = _exact_four_bead_averages(lengths, pair, kT)
    for series, exact in ((np.array(re2), exact_re2), (np.array(cos1), exact_cos)):
        err = series.std(ddof=1) * math.sqrt(statistical_inefficiency(series) / series.size)
        assert abs(series.mean() - exact) < Z_TOLERANCE * err, (series.mean(), exact, err)
