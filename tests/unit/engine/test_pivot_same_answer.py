"""Hybrid sampling (Langevin + pivot and crankshaft moves) gives the same equilibrium <Rg^2> as plain
Langevin dynamics, for a chain in good solvent (WCA) and one below the theta point (LJ 2.5 at kT = 2.0;
its theta temperature is about 3.0, beadsim/data/theta_points.toml).

Both samplers target the Boltzmann distribution of the same potential, so the means must agree within
their combined standard errors: |a - b| < 4 sqrt(e_a^2 + e_b^2) (4 standard errors, common practice;
errors from the statistical inefficiency after equilibration detection, beadsim.analysis.stats).
Note both runs share the BAOAB configurational bias at dt = 0.005 (O(dt^2)), which the comparison
does not test.
"""

import math

import numpy as np
import pytest

import beadsim as bs
from beadsim.analysis.stats import summarize
from beadsim.engine.hybrid import HybridSampler

Z_TOLERANCE = 4.0
PAIRS = {"wca": (bs.WCA, 1.0), "lj_below_theta": (lambda: bs.LennardJones(cutoff=2.5), 2.0)}


def _rg2(n, pair, method, steps, seed):
    """<Rg^2> summary of one run: minimise, 20 % of ``steps`` to equilibrate, then Rg^2 every 100 steps."""
    make_pair, kT = PAIRS[pair]
    sim = bs.Simulation(bs.build_chains(n, seed=seed), bs.ForceField(make_pair(), bs.FENE()),
                        bs.BAOABLangevin(0.005, temperature=kT, friction=0.5), seed=seed)
    sim.minimize()
    if method == "hybrid":
        HybridSampler(sim, segment_steps=500, pivot_moves=n, crankshaft_moves=n, crankshaft_max_angle=90.0)
    sim.advance(steps // 5)
    series = []
    for snap in bs.iterate(sim, steps, 100):
        x = snap.positions
        series.append(np.mean(np.sum((x - x.mean(axis=0)) ** 2, axis=1)))
    return summarize(np.array(series))


def _check(n, pair, plain_steps, hybrid_steps):
    plain = _rg2(n, pair, "dynamics", plain_steps, seed=11)
    hybrid = _rg2(n, pair, "hybrid", hybrid_steps, seed=12)
    assert plain.error is not None and hybrid.error is not None, (plain.reason, hybrid.reason)
    combined = math.hypot(plain.error, hybrid.error)
    assert abs(plain.mean - hybrid.mean) < Z_TOLERANCE * combined, (plain, hybrid)


@pytest.mark.parametrize("pair", list(PAIRS))
def test_hybrid_and_langevin_agree_for_short_chains(pair):
    """16-bead chains; seeds 11 (plain) and 12 (hybrid); 200,000 plain steps and 50,000 hybrid steps
    (16 pivots and 16 crankshafts every 500 steps), Rg^2 sampled every 100 steps."""
    _check(16, pair, 200_000, 50_000)


@pytest.mark.slow
@pytest.mark.parametrize("pair", list(PAIRS))
def test_hybrid_and_langevin_agree_for_64_bead_chains(pair):
    """64-bead chains (the issue's case); seeds 11 and 12; 4,000,000 plain steps and 400,000 hybrid steps
    (64 pivots and 64 crankshafts every 500 steps), Rg^2 sampled every 100 steps."""
    _check(64, pair, 4_000_000, 400_000)
