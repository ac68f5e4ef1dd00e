"""The model-vetting battery (beadsim vet): its checks, its verdicts on the two example models, its report.

Sources named beside each check. The example models are inputs/vet_example/reference_model.toml
(FENE + Lennard-Jones 2.5 at kT = 3, the standard bead-spring chain) and flawed_vet.toml (an invented
tabulated model with two planted flaws: a timestep too large for its stiff bond and a soft core).
The default tests run the numerical checks only (about 20 s per model); the full fast-mode battery
is marked slow.
"""

import json
import math
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize, stats

from beadsim.cli import main
from beadsim.errors import InputError
from beadsim.model.potentials import (
    FENE,
    WCA,
    CosineSquared,
    ForceField,
    HarmonicBond,
    LennardJones,
    NoPair,
    TabulatedPair,
)
from beadsim.model.tables import Table
from beadsim.studies.vet import (
    CROSSING_BARRIER,
    JUMP_LIMIT,
    NU_BAND,
    TABLE_FORCE_TOLERANCE,
    classify_quality,
    crossing_barrier,
    energy_drift,
    has_attraction,
    lagrange_residual,
    read_plan,
    stability_limits,
    table_report,
    vet,
)
from beadsim.studies.vet_report import REPORT_JSON

EXAMPLES = Path(__file__).resolve().parents[3] / "inputs" / "vet_example"
CHROMIUM = Path("/usr/bin/chromium")
PLANTED = {"timestep", "crossing_barrier"}


# ----------------------------------------------------------------------------------- crossing barrier

def _fene(r, k=30.0, r0=1.5):
    """FENE bond energy, Kremer and Grest, J. Chem. Phys. 92, 5057 (1990), eq. for U_FENE."""
    return -0.5 * k * r0 ** 2 * np.log(1 - (r / r0) ** 2)


def _wca(r):
    """WCA energy, Weeks, Chandler and Andersen, J. Chem. Phys. 54, 5237 (1971), epsilon = sigma = 1."""
    return np.where(r < 2 ** (1 / 6), 4 * (r ** -12 - r ** -6) + 1.0, 0.0)


def test_crossing_barrier_of_fene_wca_matches_an_independent_minimisation_and_is_uncrossable():
    # Independent evaluation: the same crossing geometry written out from the published formulas and
    # minimised with scipy; at kT = 1 Kremer and Grest (1990) chose FENE + WCA so that bonds cannot cross,
    # i.e. the barrier must clear the 20 kT rule of thumb (common practice) by far.
    def bond(length):
        return _fene(length) + _wca(length)

    rest = optimize.minimize_scalar(bond, bounds=(0.8, 1.2), method="bounded", options={"xatol": 1e-10}).fun

    def cross(length):
        return 2 * (bond(length) - rest) + 4 * _wca(length / math.sqrt(2))

    best = optimize.minimize_scalar(cross, bounds=(1.1, 1.45), method="bounded", options={"xatol": 1e-10})
    got = crossing_barrier(ForceField(WCA(), FENE()), 1.0, n_grid=20001)
    # the grid spacing 5.5e-5 sigma limits the agreement to about |dE/dl| * h ~ 1e-3 kT near the minimum
    assert got["barrier"] == pytest.approx(best.fun, abs=2e-3)
    assert got["bond_length"] == pytest.approx(best.x, abs=1e-3)
    assert got["barrier"] > CROSSING_BARRIER


def test_crossing_barrier_of_a_gaussian_core_on_harmonic_bonds_is_the_closed_form():
    # Soft core U = A exp(-r^2/(2 s^2)), bonded pairs excluded, harmonic bond at rest length b: the barrier
    # 2 * k (l - b)^2 / 2 + 4 A exp(-l^2/(4 s^2)) is minimised with scipy (exact for this model).
    a, s, k, b = 4.0, 0.5, 600.0, 0.9
    r = np.linspace(0.002, 2.0, 4001)
    table = Table(r, a * np.exp(-r ** 2 / (2 * s * s)), a * r / (s * s) * np.exp(-r ** 2 / (2 * s * s)))
    ff = ForceField(TabulatedPair(table), HarmonicBond(k, b), exclude="bonded")
    best = optimize.minimize_scalar(lambda x: k * (x - b) ** 2 + 4 * a * np.exp(-x * x / (4 * s * s)),
                                    bounds=(0.5, 1.4), method="bounded", options={"xatol": 1e-10})
    got = crossing_barrier(ff, 1.0, n_grid=20001)
    assert got["barrier"] == pytest.approx(best.fun, abs=1e-3)
    assert got["barrier"] < CROSSING_BARRIER


# ----------------------------------------------------------------------------------- tables

def test_cubic_rows_leave_no_residual_and_a_step_is_found():
    # Four-point Lagrange interpolation reproduces cubics exactly (numerical-analysis textbook result).
    x = np.linspace(0.5, 2.0, 61)
    assert np.max(np.abs(lagrange_residual(x, 3 * x ** 3 - x + 2))) < 1e-10
    y = np.where(x > 1.2, 1.0, 0.0)
    res = lagrange_residual(x, y)
    assert abs(x[np.argmax(np.abs(res))] - 1.2) < 2 * (x[1] - x[0])


def _write_table(path, r, u, f):
    np.savetxt(path, np.column_stack([r, u, f]))
    return path


@pytest.mark.parametrize("flaw", ["none", "jump", "force"])
def test_table_report_flags_a_planted_jump_or_wrong_force_column(tmp_path, flaw):
    # Smooth reference: U = 50 (r - 1)^2, F = -100 (r - 1), exact derivative.
    r = np.linspace(0.6, 1.4, 401)
    u, f = 50 * (r - 1) ** 2, -100 * (r - 1)
    if flaw == "jump":
        u = u + np.where(r > 1.1, 0.5, 0.0)          # a 0.5 kT step: ten times the jump limit
    if flaw == "force":
        f = 1.1 * f                                   # exact mismatch |0.1 F| / |1.1 F|max = 0.1/1.1
    rep = table_report(_write_table(tmp_path / "t.dat", r, u, f), "bond", 1.0)
    if flaw == "force":
        assert rep["force_mismatch"] == pytest.approx(0.1 / 1.1, rel=1e-3)
    elif flaw == "jump":  # the step in U has no force behind it: -dU/dr and F disagree there too
        assert rep["force_mismatch"] > TABLE_FORCE_TOLERANCE
    else:
        assert rep["force_mismatch"] < TABLE_FORCE_TOLERANCE
    if flaw == "jump":
        assert rep["largest_jump"] > JUMP_LIMIT and abs(rep["jump_at"] - 1.1) < 0.01
    else:
        assert rep["largest_jump"] < JUMP_LIMIT
    step = 0.5 if flaw == "jump" else 0.0          # U(0.6) = U(1.4) = 50 * 0.4^2 = 8 kT above U(1) = 0
    assert rep["end_walls"] == pytest.approx([8.0, 8.0 + step], rel=1e-9)


@pytest.mark.parametrize("pair, attracts", [(WCA(), False), (LennardJones(cutoff=2.5), True),
                                             (CosineSquared(depth=0.5), True), (NoPair(), False)])
def test_only_potentials_with_a_negative_part_get_a_theta_sweep(pair, attracts):
    # WCA is the LJ potential cut at its minimum and shifted up by epsilon, so U >= 0 (Weeks, Chandler and
    # Andersen 1971); LJ cut and shifted at 2.5 sigma and the cosine-squared tail are negative beyond the core;
    # no pair potential (an ideal chain) has no attraction.
    assert has_attraction(ForceField(pair, FENE())) is attracts


def test_stability_limits_take_the_last_timestep_before_the_first_unstable_one():
    rows = [{"timestep": dt, "stable": ok} for dt, ok in
            ((0.001, True), (0.002, True), (0.005, True), (0.01, True), (0.014, False), (0.02, True))]
    # a stable timestep above an unstable one does not count; suggested = largest tried <= 0.01 / 2
    assert stability_limits(rows) == (0.01, 0.014, 0.005)
    assert stability_limits([{"timestep": 0.001, "stable": False}]) == (None, 0.001, None)


# ----------------------------------------------------------------------------------- statistics

def test_energy_drift_slope_and_error_agree_with_scipy_linregress():
    # White noise around a line: slope equals scipy.stats.linregress's; the error is its stderr times
    # sqrt(g) with g >= 1 (statistical inefficiency). Seed 5, 2000 samples; the true slope lies within
    # 4 standard errors (a 6e-5 chance to fail by bad luck).
    rng = np.random.default_rng(5)
    t = np.linspace(0.0, 20.0, 2000)
    n_beads, kT, slope = 64, 2.0, 0.3
    total = slope * t + rng.normal(0.0, 0.5, t.size)
    got = energy_drift(t, total, rng.normal(96.0, 5.0, t.size), n_beads, kT)
    ref = stats.linregress(t, total / (n_beads * kT))
    assert got["drift"] == pytest.approx(ref.slope, rel=1e-9)
    assert got["drift_error"] >= ref.stderr * (1 - 1e-9)
    assert abs(got["drift"] - slope / (n_beads * kT)) < 4 * got["drift_error"]


def test_quality_classes_follow_the_gaussian_probabilities():
    # Probabilities from scipy.stats.norm: nu = 1/2 with error NU_BAND/2 is near theta with P = 0.9545.
    label, p = classify_quality(0.5, NU_BAND / 2)
    assert label == "near_theta"
    assert p["near_theta"] == pytest.approx(stats.norm.cdf(2) - stats.norm.cdf(-2), abs=1e-9)
    assert classify_quality(0.58, 0.01)[0] == "good" and classify_quality(0.4, 0.01)[0] == "poor"


# ----------------------------------------------------------------------------------- input errors

@pytest.mark.parametrize("text, names", [
    ("[vet]\nmodel = 'reference_model.toml'\nbudget = 3\n", "budget"),
    ("[vet]\nmodel = 'reference_model.toml'\n[chains]\nlength = 4\n", "[chains]"),
    ("[vet]\nmodel = 'no_such_model.toml'\n", "model"),
    ("[vet]\nmodel = 'reference_model.toml'\nbond_target = 'missing.dat'\n", "bond_target"),
    ("[vet]\nmodel = 'reference_model.toml'\nsweep_temperatures = [2.0]\n", "sweep_temperatures"),
])
def test_a_bad_vet_file_names_the_file_and_the_key(tmp_path, text, names):
    shutil.copy(EXAMPLES / "reference_model.toml", tmp_path / "reference_model.toml")
    path = tmp_path / "plan.toml"
    path.write_text(text)
    with pytest.raises(InputError) as err:
        read_plan(path)
    assert str(path) in str(err.value) and names in str(err.value)


def test_command_line_refuses_a_folder_with_a_report_and_keeps_it(tmp_path, capsys):
    out = tmp_path / "report"
    out.mkdir()
    (out / REPORT_JSON).write_text("{}")
    assert main(["vet", str(EXAMPLES / "reference_model.toml"), "--out", str(out), "--quiet"]) == 2
    assert (out / REPORT_JSON).read_text() == "{}"
    assert "--overwrite" in capsys.readouterr().err
    assert main(["vet", str(tmp_path / "missing.toml"), "--out", str(tmp_path / "x"), "--quiet"]) == 2


# ----------------------------------------------------------------------------------- the battery

@pytest.fixture(scope="module")
def numerical_reports(tmp_path_factory):
    """Numerical checks (timestep, forces, tables, crossing) of both example models."""
    out = tmp_path_factory.mktemp("vet")
    return {name: vet(EXAMPLES / f, out / name, fast=True, stages=())
            for name, f in (("reference", "reference_model.toml"), ("flawed", "flawed_vet.toml"))}


def test_reference_model_passes_every_numerical_check(numerical_reports):
    rep = numerical_reports["reference"]
    assert rep["problems"] == []
    assert {v["key"] for v in rep["verdicts"]} >= {"timestep", "force_gradient", "crossing_barrier"}


def test_flawed_model_fails_exactly_the_planted_checks(numerical_reports):
    rep = numerical_reports["flawed"]
    assert set(rep["problems"]) == PLANTED and len(rep["problems"]) == 2
    checked = {v["key"] for v in rep["verdicts"] if v["status"] == "pass"}
    assert {"bond_table_forces", "bond_table_smoothness", "bond_table_range", "pair_table_forces",
            "pair_table_smoothness", "pair_table_inner_end", "pair_table_cutoff", "force_gradient"} <= checked
    ts = rep["numbers"]["timestep"]
    assert ts["suggested"] < ts["largest_stable"] < ts["model_timestep"]


def test_every_verdict_states_its_number_and_threshold_and_the_json_holds_them(numerical_reports):
    for rep in numerical_reports.values():
        saved = json.loads((Path(rep["html"]).parent / REPORT_JSON).read_text())
        assert saved["verdicts"] == json.loads(json.dumps(rep["verdicts"]))
        for v in saved["verdicts"]:
            if v["status"] in ("pass", "fail"):
                assert v["value"] is not None and v["threshold"] and v["basis"]
        crossing = next(v for v in saved["verdicts"] if v["key"] == "crossing_barrier")
        assert "rule of thumb" in crossing["basis"]


def test_html_report_is_self_contained(numerical_reports):
    text = Path(numerical_reports["flawed"]["html"]).read_text()
    assert "http://" not in text and "https://" not in text and "<script" not in text and "<link" not in text
    assert text.count("data:image/png;base64,") == len(numerical_reports["flawed"]["figures"])


PROBE = """<script>
window.addEventListener('load', function () {
  var out = [];
  document.querySelectorAll('img').forEach(function (im) {
    var r = im.getBoundingClientRect();
    out.push({w: im.naturalWidth, x: r.left + scrollX, y: r.top + scrollY, width: r.width, height: r.height});
  });
  var pre = document.createElement('pre'); pre.id = 'probe';
  pre.textContent = JSON.stringify({images: out, height: document.documentElement.scrollHeight});
  document.body.appendChild(pre);
});
</script></body>"""


def _chromium(*args):
    return subprocess.run([str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
                           "--virtual-time-budget=10000", *args], check=True, capture_output=True, text=True,
                          timeout=180)


@pytest.mark.skipif(not CHROMIUM.exists(), reason="headless Chromium not installed (/usr/bin/chromium absent; "
                    "Debian: apt-get install -y chromium); the report is not rendered")
def test_report_renders_every_figure_in_headless_chromium(numerical_reports, tmp_path):
    # The page is loaded by Chromium; a probe copy (the report plus a script added here) reports where
    # each image sits and whether it decoded; the screenshot of the report itself must then show
    # drawn content (not blank paper) inside every image's box.
    from matplotlib.image import imread

    report = Path(numerical_reports["flawed"]["html"])
    probe = tmp_path / "probe.html"
    probe.write_text(report.read_text().replace("</body>", PROBE))
    dom = _chromium("--window-size=1100,900", "--dump-dom", probe.as_uri()).stdout
    found = json.loads(dom.split('<pre id="probe">')[1].split("</pre>")[0].replace("&quot;", '"'))
    images = found["images"]
    assert len(images) == len(numerical_reports["flawed"]["figures"]) >= 5
    assert all(im["w"] > 0 for im in images), "an image did not decode"
    shot = tmp_path / "report.png"
    _chromium(f"--window-size=1100,{found['height']}", f"--screenshot={shot}", report.as_uri())
    pixels = imread(shot)[..., :3]
    for im in images:
        box = pixels[int(im["y"]) + 2:int(im["y"] + im["height"]) - 2, int(im["x"]) + 2:int(im["x"] + im["width"]) - 2]
        assert box.size, "image box outside the screenshot"
        ink = np.mean(np.any(box < 0.8, axis=-1))
        colour = np.mean(np.ptp(box, axis=-1) > 0.25)   # matplotlib's coloured lines, not grey text
        assert ink > 0.005 and colour > 0.0005, f"blank image box at y = {im['y']}"


# ----------------------------------------------------------------------------------- full battery (slow)

@pytest.mark.slow
@pytest.mark.parametrize("name, path, expected", [
    ("reference", "reference_model.toml", set()),
    ("flawed", "flawed_vet.toml", PLANTED),
])
def test_fast_mode_battery_flags_exactly_the_planted_flaws(tmp_path, name, path, expected):
    rep = vet(EXAMPLES / path, tmp_path / name, fast=True)
    assert set(rep["problems"]) == expected
    keys = {v["key"]: v for v in rep["verdicts"]}
    assert keys["solvent_quality"]["status"] in ("note", "pass") and keys["solvent_quality"]["error"] > 0
    assert keys["production_time"]["value"] > 0
    assert keys["theta"]["status"] in ("note", "skipped")
    if name == "flawed":
        assert keys["bond_distribution"]["status"] == "pass" and keys["angle_distribution"]["status"] == "pass"


# ------------------------------------------------------------------------- solvent verdict, known answers

KNOWN_MODEL = """
[chains]
length = 48
[nonbonded]
potential = "{pair}"
[dynamics]
temperature = 1.0
[run]
seed = 5
equilibration_steps = 20000
production_steps = 100000
[sampling]
method = "hybrid"
segment_steps = 50
pivot_moves_per_segment = 48
"""


@pytest.mark.parametrize("pair, expected", [("none", "near_theta"), ("wca", "good")])
def test_solvent_verdict_of_models_with_a_known_answer(tmp_path, pair, expected):
    """The solvent stage of the battery (its sampling run, the sweep's point analysis and the verdict) on
    two 48-bead FENE chains at kT = 1 with a known answer, each marked with that answer as
    ``expected_quality`` so the verdict must say "pass":

    - no pair potential (an ideal chain): independent bonds give <R^2(s)> = s <b^2> exactly, so nu_eff
      from internal distances is 1/2 (random walk; Rubinstein and Colby, Polymer Physics, 2003, ch. 2):
      "near theta";
    - WCA beads (athermal): excluded volume swells the chain toward the self-avoiding-walk exponent
      0.5876 (Clisby, Phys. Rev. Lett. 104, 055702, 2010), above the near-theta band 1/2 +- NU_BAND:
      "good". Over the short distances 3 <= s <= 24 it overshoots (finite bead-spring chains with strong
      excluded volume approach the asymptotic values from above: common practice): measured 0.642 +- 0.005
      here, 22 standard errors above the band.

    Seed 5; 100,000 production steps with 48 pivots every 50 steps, frames every 500 steps (200 frames).
    The ideal chain measured 0.508 +- 0.010, within the band by 2 standard errors. The verdict's most
    probable class (Gaussian error) must also be the expected one."""
    from beadsim.studies.vet import VetContext, check_solvent, load_positions, run_intended

    model = tmp_path / "model.toml"
    model.write_text(KNOWN_MODEL.format(pair=pair))
    plan_file = tmp_path / "vet.toml"
    plan_file.write_text(f'[vet]\nmodel = "model.toml"\nexpected_quality = "{expected}"\n')
    plan, settings = read_plan(plan_file)
    ctx = VetContext(settings=settings, plan=plan, out=tmp_path / "report", fast=True, budget_seconds=60.0)
    folder, s, result = run_intended(ctx, 0.005, 20_000, 100_000, 500)
    verdict = next(v for v in check_solvent(ctx, s, result, load_positions(folder, s)) if v.key == "solvent_quality")
    assert ctx.numbers["solvent"]["verdict"] == expected, (verdict.value, verdict.error)
    assert verdict.status == "pass", verdict.message
    probabilities = ctx.numbers["solvent"]["probabilities"]
    assert max(probabilities, key=probabilities.get) == expected, probabilities
