"""The error bars of the analysis are tested, not only the means.

Many independent synthetic trajectories with known exact answers are generated in memory; the analysis
(:func:`beadsim.analysis.report.measure`, the function behind ``beadsim analyze``) runs on each, and the
errors must match the scatter of the values about the exact answers.

The test: the mean squared deviation (value - exact)^2 over K files estimates the variance of the value;
the mean squared reported error must estimate the same variance. Their ratio must be 1 within three of
its standard errors, found from the K files by the delta method (about sqrt(2 / K), 0.1 at K = 200): errors
25 % too large (ratio 0.64) or 20 % too small (ratio 1.56) fail. This is the z-score variance of the issue
with the reported errors' own scatter averaged out: a mean of z^2 would exceed 1 for any unbiased but noisy
error (E[1/e^2] > 1/E[e^2]), by (B - 1)/(B - 3) for a jackknife over B blocks. Where no exact value
is known (the shape descriptors) the grand mean of all files stands in for it.

Exact results used (bond vectors with <b^2> = 1):

* Gaussian and freely-jointed chains of N beads: <Re^2> = N - 1, <Rg^2> = (N^2 - 1) / (6 N),
  <Re^2>/<Rg^2> = 6 N / (N + 1), <R^2(s)> = s so nu = 1/2 (Rubinstein and Colby, Polymer Physics, 2003,
  ch. 2); form factors P(q) = (1/N^2) [N + 2 sum_s (N - s) f(q)^s] with f = exp(-q^2/6) (Gaussian bonds)
  or sin(q)/q (bonds of unit length with random directions), the Debye sum over independent bonds;
  <1/r(s)> = sqrt(6 / (pi s)) for a Gaussian segment and (2/pi) int (sin k / k)^s dk for s unit steps
  (by quadrature), hence the Kirkwood 1/R_h; the mean length of a
  Gaussian bond sqrt(8 / (3 pi)) (Maxwell distribution).
* Freely rotating chain with bond angle cosine c: <b_k . b_(k+s)> = c^s (Flory, Statistical Mechanics of
  Chain Molecules, 1969, ch. 1), so the persistence length is -1 / ln c bonds.
* Rigid rods of N beads at unit spacing: Rg^2 = (N^2 - 1) / 12, Re^2 = (N - 1)^2, no fluctuations.
* AR(1) series x_t = phi x_(t-1) + e_t: Var(mean of n) = sigma^2 / n [(1 + phi) / (1 - phi)
  - 2 phi (1 - phi^n) / (n (1 - phi)^2)], sigma^2 = 1 / (1 - phi^2) (Priestley, Spectral Analysis and
  Time Series, 1981, ch. 5).
* Brownian centre of mass with diffusion coefficient D: MSD = 6 D t exactly.

Default run: K = 200 files per ensemble (small chains, a few hundred frames); ``--runslow`` repeats the
chain ensembles with K = 1,000 and checks the form-factor exponent on longer chains.
"""

import numpy as np
import pytest
from scipy.integrate import quad

from beadsim.analysis import scattering, summarize
from beadsim.analysis.report import measure
from test_analysis_bonds import freely_rotating_chain

N_Q = 20


def _check_z(values, errors, exact, what=""):
    """The spread of the values about the exact answer matches the reported errors (module notes)."""
    values = np.asarray(values, dtype=float)
    errors = np.array([np.nan if e is None else e for e in errors], dtype=float)
    given = np.isfinite(errors)
    # a file may withhold an error with a reason (checked by the callers); a few per cent at most, since
    # leaving files out selects on their data
    assert given.mean() > 0.95, f"{what}: only {given.sum()} of {given.size} files report an error"
    assert np.all(errors[given] > 0), f"{what}: errors must be > 0"
    d2 = (np.broadcast_to(values - exact, values.shape)[given]) ** 2
    e2 = errors[given] ** 2
    ratio = d2.mean() / e2.mean()
    # delta method for the ratio of two sample means, moments from the files themselves
    k, md, me = d2.size, d2.mean(), e2.mean()
    cov = np.cov(d2, e2)
    sd = np.sqrt((cov[0, 0] / me ** 2 + md ** 2 * cov[1, 1] / me ** 4 - 2 * md * cov[0, 1] / me ** 3) / k)
    assert abs(ratio - 1.0) < 3.0 * sd, (f"{what}: mean squared deviation / mean squared error = {ratio:.3f}, "
                                        f"expected 1 +- {3 * sd:.3f} (3 sd) over {k} files")


def _gaussian_debye(q, n):
    s = np.arange(1, n)
    return (n + 2.0 * np.sum((n - s) * np.exp(-np.outer(q ** 2, s) / 6.0), axis=1)) / n ** 2


def _jointed_debye(q, n):
    s = np.arange(1, n)
    return (n + 2.0 * np.sum((n - s) * (np.sin(q) / q)[:, None] ** s, axis=1)) / n ** 2


def _gaussian_inverse_rh(n):
    s = np.arange(1, n)
    return 2.0 * np.sum((n - s) * np.sqrt(6.0 / (np.pi * s))) / n ** 2


def _jointed_inverse_rh(n):
    # <1/R> of s unit steps in random directions: (2 / pi) int_0^inf (sin k / k)^s dk, from
    # 1/r = (2 pi^2)^-1 int d^3k exp(i k.r) / k^2 and <exp(i k.R)> = (sin k / k)^s; exactly 1 for s = 1, 2
    # (int (sin k / k) dk = int (sin k / k)^2 dk = pi / 2), by quadrature beyond (integrand below k^-3)
    inverse = [1.0, 1.0] + [2.0 / np.pi * quad(lambda k, s=s: np.sinc(k / np.pi) ** s, 0.0, np.inf, limit=400)[0]
                            for s in range(3, n)]
    return 2.0 * np.sum((n - np.arange(1, n)) * np.array(inverse)) / n ** 2


def _chains(bonds):
    return np.concatenate([np.zeros(bonds.shape[:1] + (1, 3)), np.cumsum(bonds, axis=1)], axis=1)


def _gaussian_bonds(rng, frames, n, phi=0.0):
    """Bond vectors (frames, n - 1, 3) with <b^2> = 1; with phi > 0 each evolves as an AR(1) in time."""
    noise = rng.normal(scale=1.0 / np.sqrt(3.0), size=(frames, n - 1, 3))
    if phi == 0.0:
        return noise
    bonds = np.empty_like(noise)
    bonds[0] = noise[0]
    for t in range(1, frames):
        bonds[t] = phi * bonds[t - 1] + np.sqrt(1.0 - phi ** 2) * noise[t]
    return bonds


def _unit_bonds(rng, frames, n):
    v = rng.normal(size=(frames, n - 1, 3))
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def _ensemble(make, files, seed, chains=None, **options):
    """``measure`` on ``files`` trajectories from ``make(rng) -> positions`` (one chain unless ``chains``)."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(files):
        x = make(rng)
        out.append(measure(x, np.arange(x.shape[0], dtype=float), chains or [np.arange(x.shape[1])], n_q=N_Q,
                           **options))
    return out


def _fit(results, name):
    # a file that skips the quantity gives its reason under "skipped": counted as a withheld error
    entries = [r["fits"].get(name, {"value": np.nan, "error": None, "reason": r["skipped"].get(name)})
               for r in results]
    assert all(e["error"] is not None or e["reason"] for e in entries), f"{name}: no error and no reason"
    return [e["value"] for e in entries], [e["error"] for e in entries]


def _quantity(results, name):
    entries = [r["quantities"][name] for r in results]
    assert all(e["error"] is not None or e["reason"] for e in entries), f"{name}: no error and no reason"
    return [e["mean"] for e in entries], [e["error"] for e in entries]


def _check_ideal_chain(results, n, debye, inverse_rh):
    """Every error-carrying output of an ideal-chain ensemble against the exact values (module notes)."""
    _check_z(*_quantity(results, "rg_squared"), (n * n - 1) / (6.0 * n), what="rg_squared")
    _check_z(*_quantity(results, "re_squared"), n - 1.0, what="re_squared")
    for name in ("asphericity", "relative_shape_anisotropy"):
        values, errors = _quantity(results, name)
        _check_z(values, errors, np.mean(values), what=name)
    values, errors = _fit(results, "re2_over_rg2")
    _check_z(values, errors, 6.0 * n / (n + 1.0), what="re2_over_rg2")
    values, errors = _fit(results, "nu_internal_distances")
    _check_z(values, errors, 0.5, what="nu_internal_distances")
    values, errors = _fit(results, "hydrodynamic_radius")
    _check_z(values, errors, 1.0 / inverse_rh(n), what="hydrodynamic_radius")
    guinier_exact = []
    for r in results:  # the estimator on the exact P(q) of the file's own q grid and window
        q = r["tables"]["form_factor"]["q"].to_numpy()
        window = (q >= r["fits"]["guinier_rg"]["q_min"]) & (q <= r["fits"]["guinier_rg"]["q_max"])
        guinier_exact.append(scattering.guinier_fit(q[window], debye(q[window], n)).rg)
    values, errors = _fit(results, "guinier_rg")
    _check_z(values, errors, np.array(guinier_exact), what="guinier_rg")
    for q_rg in (1.0, 4.0):  # P(q) near the end of the Guinier range and in the intermediate range
        rows = []
        for r in results:
            table = r["tables"]["form_factor"]
            k = int(np.argmin(np.abs(table["q"] * np.sqrt((n * n - 1) / (6.0 * n)) - q_rg)))
            rows.append((table["p"][k], table["p_error"][k], debye(np.array([table["q"][k]]), n)[0]))
        values, errors, exact = np.array(rows).T
        _check_z(values, errors, exact, what=f"P(q) at q Rg = {q_rg}")


@pytest.mark.parametrize("files", [pytest.param(200, id="K=200"), pytest.param(1000, id="K=1000", marks=pytest.mark.slow)])
def test_errors_of_independent_gaussian_chains(files):
    """Seed 301; K files of 320 independent frames of one 16-bead Gaussian chain."""
    n = 16
    results = _ensemble(lambda rng: _chains(_gaussian_bonds(rng, 320, n)), files, seed=301, with_dynamics=False)
    _check_ideal_chain(results, n, _gaussian_debye, _gaussian_inverse_rh)
    values, errors = _quantity(results, "bond_length")
    _check_z(values, errors, np.sqrt(8.0 / (3.0 * np.pi)), what="bond_length")
    assert all("no bending stiffness" in r["skipped"]["persistence_length"] for r in results)


@pytest.mark.parametrize("files", [pytest.param(200, id="K=200"), pytest.param(1000, id="K=1000", marks=pytest.mark.slow)])
def test_errors_of_gaussian_chains_correlated_in_time(files):
    """Seed 302; K files of 640 frames of a 16-bead Gaussian chain whose bond vectors follow an AR(1) in time
    (phi = 0.8, so Rg^2 has g of about (1 + phi^2) / (1 - phi^2) = 4.6 frames): the time-correlation path of
    every error."""
    n = 16
    results = _ensemble(lambda rng: _chains(_gaussian_bonds(rng, 640, n, phi=0.8)), files, seed=302,
                        with_dynamics=False)
    # the ensemble is as correlated as intended: Rg^2 is a sum of quadratic forms of the bond vectors, each
    # correlated as phi^(2 t), so g = (1 + phi^2) / (1 - phi^2) = 4.56 exactly. The windowed estimate is low
    # by about (2 M + 1) / n from the subtracted sample mean (Madras and Sokal 1988), M ~ 11 lags of n = 640:
    # 4 %; the mean over the files must lie within 8 % (the bias twice over) of the exact value
    g = np.array([r["quantities"]["rg_squared"]["statistical_inefficiency"] for r in results])
    assert abs(g.mean() / (1.64 / 0.36) - 1.0) < 0.08
    _check_ideal_chain(results, n, _gaussian_debye, _gaussian_inverse_rh)


@pytest.mark.parametrize("files", [pytest.param(200, id="K=200"), pytest.param(1000, id="K=1000", marks=pytest.mark.slow)])
def test_errors_of_freely_jointed_chains(files):
    """Seed 303; K files of 320 independent frames of one 16-bead chain of unit bonds in random directions."""
    n = 16
    results = _ensemble(lambda rng: _chains(_unit_bonds(rng, 320, n)), files, seed=303, with_dynamics=False)
    _check_ideal_chain(results, n, _jointed_debye, _jointed_inverse_rh)
    assert all(r["quantities"]["bond_length"]["error"] is None and r["quantities"]["bond_length"]["reason"]
               for r in results)  # every bond has length 1: a constant series has no error, and says so


@pytest.mark.parametrize("files", [pytest.param(200, id="K=200"), pytest.param(1000, id="K=1000", marks=pytest.mark.slow)])
def test_errors_of_the_persistence_length_of_freely_rotating_chains(files):
    """Seed 304; K files of 320 independent frames of a 24-bead freely rotating chain with cos(theta) = 0.8:
    persistence length -1 / ln 0.8 = 4.48 bonds (the correlation falls below exp(-2) at s = 9 of 22)."""
    n, c = 24, 0.8
    results = _ensemble(lambda rng: freely_rotating_chain(rng, 320, n, c)[0].reshape(320, n, 3), files, seed=304,
                        with_dynamics=False)
    _check_z(*_fit(results, "persistence_length"), -1.0 / np.log(c), what="persistence_length")


@pytest.mark.parametrize("files", [pytest.param(200, id="K=200"), pytest.param(1000, id="K=1000", marks=pytest.mark.slow)])
def test_errors_of_the_structure_factor_of_an_ideal_gas(files):
    """Seed 310; K files of 160 frames (S(q) from 64 of them) of 50 pairs of beads placed uniformly and independently
    in a periodic cube of edge 5: S(k) = <|sum_j exp(i k.r_j)|^2> / n = 1 exactly at every reciprocal lattice vector k != 0
    (independent uniform positions; e.g. Hansen and McDonald, Theory of Simple Liquids, 2013, ch. 4)."""
    frames, beads, edge = 160, 100, 5.0
    box = np.full((frames, 3), edge)
    results = _ensemble(lambda rng: rng.uniform(0.0, edge, size=(frames, beads, 3)), files, seed=310,
                        with_dynamics=False, box=box, chains=[np.array([2 * k, 2 * k + 1]) for k in range(beads // 2)],
                        structure_frames=64)
    for shell in (0, 1):
        rows = np.array([(r["tables"]["structure_factor"]["s"][shell], r["tables"]["structure_factor"]["s_error"][shell])
                         for r in results])
        _check_z(rows[:, 0], rows[:, 1], 1.0, what=f"S(q), shell {shell}")


def test_rigid_rods_give_exact_values_and_no_spread():
    """Rods of 20 beads at unit spacing, 64 random orientations (seed 305): the values are exact and every
    error is zero or withheld with a reason; the persistence length is refused (no decay along the rod)."""
    n, frames = 20, 64
    rng = np.random.default_rng(305)
    axis = _unit_bonds(rng, frames, 2)[:, 0]
    x = np.arange(n)[None, :, None] * axis[:, None, :] + rng.normal(size=(frames, 1, 3))
    r = measure(x, np.arange(frames, dtype=float), [np.arange(n)], n_q=N_Q, with_dynamics=False)
    for name, exact in (("rg_squared", (n * n - 1) / 12.0), ("re_squared", (n - 1.0) ** 2)):
        q = r["quantities"][name]
        assert abs(q["mean"] - exact) < 1e-9 * exact and q["error"] is None and "constant" in q["reason"]
    ratio = r["fits"]["re2_over_rg2"]
    assert abs(ratio["value"] - 12.0 * (n - 1.0) / (n + 1.0)) < 1e-9 and ratio["error"] < 1e-9
    assert "stays above" in r["skipped"]["persistence_length"]


def test_errors_of_the_mean_of_an_ar1_series():
    """Seed 306; 400 AR(1) series (phi = 0.8, g = 9) of 1,000 samples started in the stationary state: the
    errors of ``summarize``'s mean match the scatter of the means about the exact 0, and the reported
    variances scatter about the exact variance of the mean (module notes)."""
    phi, n, files = 0.8, 1000, 400
    rng = np.random.default_rng(306)
    noise = rng.normal(size=(files, n))
    x = np.empty_like(noise)
    x[:, 0] = noise[:, 0] / np.sqrt(1.0 - phi ** 2)
    for t in range(1, n):
        x[:, t] = phi * x[:, t - 1] + noise[:, t]
    results = [summarize(row) for row in x]
    assert all(r.error is not None or r.reason for r in results)
    _check_z([r.mean for r in results], [r.error for r in results], 0.0, what="AR(1) mean")
    exact = ((1 + phi) / (1 - phi) - 2 * phi * (1 - phi ** n) / (n * (1 - phi) ** 2)) / (n * (1 - phi ** 2))
    squares = np.array([r.error ** 2 for r in results if r.error is not None])
    # the reported variances scatter about the exact variance of the mean: within three standard errors
    # of their own mean over the files
    assert abs(squares.mean() / exact - 1.0) < 3.0 * squares.std(ddof=1) / np.sqrt(squares.size) / exact


@pytest.mark.parametrize("files", [pytest.param(100, id="K=100"), pytest.param(500, id="K=500", marks=pytest.mark.slow)])
def test_errors_of_the_diffusion_coefficient(files):
    """Seed 307; K files of 1,000 frames (time step 1) of an 8-bead Gaussian chain whose bonds follow an AR(1)
    (phi = 0.8: end-to-end relaxation time -1 / ln 0.8 = 4.5 frames, so 16 segments of 10 relaxation times
    fit) and whose centre of mass is a Brownian path with D = 0.05 (exact MSD 6 D t); then the same chains
    with independent frames are refused."""
    n, frames, d = 8, 1000, 0.05

    def make(rng, phi=0.8):
        x = _chains(_gaussian_bonds(rng, frames, n, phi=phi))
        x -= x.mean(axis=1, keepdims=True)
        return x + np.cumsum(rng.normal(scale=np.sqrt(2.0 * d), size=(frames, 1, 3)), axis=0)

    results = _ensemble(make, files, seed=307)
    entries = [r["fits"]["diffusion_coefficient"] for r in results]
    _check_z([e["value"] for e in entries], [e["error"] for e in entries], d, what="diffusion")
    refused = _ensemble(lambda rng: make(rng, phi=0.0), 3, seed=308)
    assert all("frames further apart than the relaxation time" in r["skipped"]["diffusion_coefficient"]
               for r in refused)


@pytest.mark.slow
def test_errors_of_the_form_factor_exponent():
    """Seed 309; 200 files of 160 independent frames of a 300-bead Gaussian chain (window 3/Rg .. 1/b spans a
    factor 2.4): nu from P(q) against the same fit on the exact Debye sum of each file's q grid."""
    n = 300
    results = _ensemble(lambda rng: _chains(_gaussian_bonds(rng, 160, n)), 200, seed=309, with_dynamics=False)
    exact = []
    for r in results:
        q = r["tables"]["form_factor"]["q"].to_numpy()
        e = r["fits"]["nu_form_factor"]
        use = (q >= e["q_min"]) & (q <= e["q_max"])
        slope = np.polyfit(np.log(q[use]), np.log(_gaussian_debye(q[use], n)), 1)[0]
        exact.append(-1.0 / slope)
    _check_z(*_fit(results, "nu_form_factor"), np.array(exact), what="nu_form_factor")
