"""Scaling regimes measured end to end with `beadsim sweep` (slow): good solvent and compact globules.

Facts of the trade checked here:
- a good-solvent (athermal, WCA) chain is a self-avoiding walk, nu = 0.587597(7) (Clisby, Phys. Rev. Lett.
  104, 055702, 2010), not the ideal 1/2; bead-spring chains of 16-128 beads need the leading correction to
  scaling, exponent 0.528 (same paper), before the value can be compared;
- a compact globule in poor solvent has Rg ~ N^(1/3) (de Gennes, Scaling Concepts in Polymer Physics, 1979;
  Rubinstein and Colby, Polymer Physics, 2003), approached from below because short globules are mostly surface.
"""

import numpy as np
import pytest

from beadsim.studies.collapse import globule_extrapolation
from beadsim.studies.exponents import size_exponents
from beadsim.studies.sweep import results_frame, run_study
from beadsim.studies.store import StudyStore

NU_SAW = 0.587597  # Clisby 2010

GOOD_SOLVENT = """
[chains]
length = 16
[nonbonded]
potential = "wca"
[sampling]
method = "hybrid"
segment_steps = 20
pivot_moves_per_segment = 20
[run]
seed = 1
equilibration_steps = 20000
production_steps = 200000
[output]
frame_interval = 2000
table_interval = 20
checkpoint_interval = 100000
"""

GLOBULE = """
[chains]
length = 32
[nonbonded]
potential = "lennard_jones"
cutoff = 2.5
[dynamics]
temperature = 1.0
[run]
seed = 1
equilibration_steps = 600000
production_steps = 600000
[output]
frame_interval = 2000
table_interval = 200
checkpoint_interval = 300000
"""


def _study(tmp_path, model, lengths, seed):
    (tmp_path / "model.toml").write_text(model)
    path = tmp_path / "study.toml"
    path.write_text(f'[study]\nbase = "model.toml"\ncontrol = "temperature"\nvalues = [1.0]\n'
                    f"chain_lengths = {lengths}\nreplicas = 2\nseed = {seed}\n")
    out = tmp_path / "out"
    run_study(path, out, workers=2, progress=False)
    store = StudyStore(out / "study.sqlite")
    try:
        return results_frame(store)
    finally:
        store.close()


@pytest.mark.slow
def test_good_solvent_chain_is_a_self_avoiding_walk(tmp_path):
    # seed 41, N = 16, 32, 64, 128, 2 replicas of 200,000 hybrid steps (10,000 rounds of 20 pivot moves):
    # <Rg^2> to about 1 %; tolerances are 3 reported standard errors
    frame = _study(tmp_path, GOOD_SOLVENT, [16, 32, 64, 128], seed=41)
    assert len(frame) == 8 and np.all(np.isfinite(frame["rg2_error"]))
    fits = {e.method.split(" at control")[0]: e for e in size_exponents(frame, "temperature")}
    corrected = fits["nu with N^-0.528 correction"]
    assert abs(corrected.value - NU_SAW) < 3 * corrected.error
    assert corrected.value - 0.5 > 3 * corrected.error
    # internal distances of the longest chains: swollen well beyond 1/2 and nearer the SAW value than to 1/2
    # (short-range swelling makes the effective exponent overshoot slightly at this length)
    longest = frame[frame["n_beads"] == 128]
    nu_int = longest["nu_internal"].mean()
    nu_int_error = np.sqrt(np.sum(longest["nu_internal_error"] ** 2)) / len(longest)
    assert nu_int - 0.5 > 3 * nu_int_error
    assert abs(nu_int - NU_SAW) < abs(nu_int - 0.5)


@pytest.mark.slow
def test_compact_globule_approaches_one_third(tmp_path):
    # LJ 2.5 chains at kT = 1.0 (about a third of their theta temperature), N = 32, 64, 128, 2 replicas of
    # 600,000 steps after 600,000 of equilibration, seed 42. The local exponents rise with N towards 1/3;
    # extrapolated linearly in N^(-1/3), the limit lies within 3 standard errors of 1/3 and far below 1/2.
    frame = _study(tmp_path, GLOBULE, [32, 64, 128], seed=42)
    result = globule_extrapolation(frame, "temperature")[0]
    local = result.details["local_nu"]
    assert np.all(local < 1 / 3) and local[1] > local[0]
    assert abs(result.value - 1 / 3) < 3 * result.error
    assert 0.5 - result.value > 3 * result.error
