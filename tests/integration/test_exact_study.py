"""One exact study end to end: ideal harmonic chains swept over temperature through the real `beadsim sweep` path
(workers, per-point analysis, results.csv, MBAR curves), against exact results written out here.

Model: harmonic bonds U = (k/2) r^2 (rest length 0, k = 3), no pair potential, so every bond vector is Gaussian
with <r^2> = 3 kT / k, independently of the others (equipartition; e.g. Rubinstein and Colby, Polymer Physics,
2003, ch. 2). Hence, for N beads:

* <Re^2> = (N - 1) 3 kT / k and <Rg^2> = (N^2 - 1) / (6 N) 3 kT / k, so <Re^2>/<Rg^2> = 6 N / (N + 1);
* potential energy per bead U/N = (3/2) (N - 1) kT / N and heat capacity per bead
  C/N = (<U^2> - <U>^2) / (N kT^2) = (3/2) (N - 1) / N (in k_B), at every temperature.

Every number is compared with its own reported error: |z| < 3.5 each (24 point values and 18 MBAR values: a false
alarm about once in 50 runs of the whole test), and the point values' chi-square must lie inside the two-sided
0.1 %-99.9 % band of chi-square with as many degrees of freedom, so errors far too large fail as well as errors too
small. Seeds fixed (study seed 5); 100,000 production steps per point.
"""

import numpy as np
import pandas as pd
from scipy.stats import chi2

from beadsim import cli

K = 3.0
MODEL = """
[chains]
length = 8
[bonds]
potential = "harmonic"
stiffness = 3.0
rest_length = 0.0
[nonbonded]
potential = "none"
[run]
seed = 1
equilibration_steps = 2000
production_steps = 100000
[output]
frame_interval = 500
table_interval = 20
checkpoint_interval = 20000
"""
STUDY = """
[study]
base = "model.toml"
control = "temperature"
values = [1.0, 1.5]
chain_lengths = [4, 8, 16]
replicas = 1
seed = 5
"""


def _exact(n, kT):
    bond2 = 3.0 * kT / K
    return {"rg2": (n * n - 1) / (6.0 * n) * bond2, "re2": (n - 1) * bond2,
            "potential_energy": 1.5 * (n - 1) / n * kT, "heat_capacity": 1.5 * (n - 1) / n}


def test_ideal_harmonic_chains_give_the_exact_sizes_and_heat_capacity(tmp_path):
    (tmp_path / "model.toml").write_text(MODEL)
    (tmp_path / "study.toml").write_text(STUDY)
    out = tmp_path / "out"
    assert cli.main(["sweep", str(tmp_path / "study.toml"), "--out", str(out), "--workers", "2", "--quiet"]) == 0
    points = pd.read_csv(out / "results.csv")
    assert len(points) == 6
    z = []
    for _, row in points.iterrows():
        exact = _exact(int(row["n_beads"]), float(row["control"]))
        for name, value in exact.items():
            z.append((row[name] - value) / row[f"{name}_error"])
    z = np.array(z)
    assert np.all(np.abs(z) < 3.5), z
    assert chi2.ppf(0.001, z.size) < np.sum(z ** 2) < chi2.ppf(0.999, z.size), np.sum(z ** 2)

    curves = pd.read_csv(out / "mbar_curves.csv")
    assert set(curves["n_beads"]) == {4, 8, 16}
    for n, group in curves.groupby("n_beads"):
        for temperature in (1.0, 1.25, 1.5):
            row = group.iloc[int(np.argmin(np.abs(group["temperature"] - temperature)))]
            exact = _exact(int(n), float(row["temperature"]))
            for name in ("potential_energy", "heat_capacity"):
                assert abs(row[name] - exact[name]) < 3.5 * row[f"{name}_error"], (n, temperature, name)
