"""Write the tables of the test-drive model "soft_polyether" (a scenario of our own invention).

The story: a group coarse-grained an imaginary water-soluble polyether, three monomers per bead, and
Boltzmann-inverted invented reference distributions into a bond table and a pair table. Two flaws are
planted on purpose, for ``beadsim vet`` to find:

1. the bond is stiff (spring constant 600 epsilon/sigma^2 around 0.9 sigma), yet the model's input
   asks for a timestep of 0.04 tau, far above what velocity Verlet integrates stably for it;
2. the pair repulsion is a soft Gaussian core of height 4 kT, so two bonds can pass through each other
   (the crossing barrier is a few kT, not tens).

Everything else is sound: smooth tables with a force column that is exactly -dU/dr, ranges that keep
bonds inside the bond table and a pair energy that goes smoothly to zero at the cutoff. The reference
distributions the tables were inverted from are written beside them (bond_target.dat, angle_target.dat).

Run from this folder: ``python write_tables.py`` (NumPy only). Units: sigma, epsilon, kT = 1 epsilon.
"""

from pathlib import Path

import numpy as np

KT = 1.0
HERE = Path(__file__).resolve().parent

# Invented reference bond-length distribution P(r) ~ r^2 exp(-k (r - b0)^2 / (2 kT)).
BOND_STIFFNESS = 600.0   # epsilon / sigma^2
BOND_LENGTH = 0.9        # sigma
# Bending U = kappa (1 - cos theta), theta between bond vectors (the model's [bending] stiffness).
BENDING = 2.0            # epsilon
# Pair: soft Gaussian core of height CORE at r = 0 minus a shallow well, switched off smoothly at CUTOFF.
CORE, CORE_WIDTH = 4.0, 0.5          # epsilon, sigma
WELL, WELL_AT, WELL_WIDTH = 0.35, 1.15, 0.25   # epsilon, sigma, sigma
CUTOFF = 2.0                          # sigma


def bond_reference(r):
    """Invented reference bond-length density, normalised on the grid r (sigma^-1)."""
    p = r ** 2 * np.exp(-BOND_STIFFNESS * (r - BOND_LENGTH) ** 2 / (2 * KT))
    return p / np.trapezoid(p, r)


def bond_table(r):
    """Boltzmann inversion of :func:`bond_reference` in closed form: U = -kT ln(P / r^2) + const (epsilon), F = -dU/dr."""
    u = 0.5 * BOND_STIFFNESS * (r - BOND_LENGTH) ** 2
    return u, -BOND_STIFFNESS * (r - BOND_LENGTH)


def pair_table(r):
    """Soft core plus shallow well times the switch S(r) = (1 - (r/rc)^2)^2; U (epsilon) and F = -dU/dr."""
    g = CORE * np.exp(-r ** 2 / (2 * CORE_WIDTH ** 2))
    dg = -r / CORE_WIDTH ** 2 * g
    w = -WELL * np.exp(-(r - WELL_AT) ** 2 / (2 * WELL_WIDTH ** 2))
    dw = -(r - WELL_AT) / WELL_WIDTH ** 2 * w
    s = (1 - (r / CUTOFF) ** 2) ** 2
    ds = -4 * r / CUTOFF ** 2 * (1 - (r / CUTOFF) ** 2)
    u = (g + w) * s
    return u, -((dg + dw) * s + (g + w) * ds)


def angle_reference(phi):
    """Reference density of the bead angle phi (radians, pi = straight): sin(phi) exp(-kappa (1 + cos phi) / kT)."""
    p = np.sin(phi) * np.exp(-BENDING * (1 + np.cos(phi)) / KT)
    return p / np.trapezoid(p, phi)


def main():
    header = "soft_polyether (invented): written by write_tables.py\n"
    r = np.linspace(0.5, 1.4, 901)
    u, f = bond_table(r)
    np.savetxt(HERE / "bond_table.dat", np.column_stack([r, u, f]), fmt="%.10g",
               header=header + "r [sigma]  U [epsilon]  F [epsilon/sigma]")
    np.savetxt(HERE / "bond_target.dat", np.column_stack([r, bond_reference(r)]), fmt="%.10g",
               header=header + "r [sigma]  P(r) [1/sigma], reference bond-length density")
    r = np.linspace(0.002, CUTOFF, 1000)
    u, f = pair_table(r)
    np.savetxt(HERE / "pair_table.dat", np.column_stack([r, u, f]), fmt="%.10g",
               header=header + "r [sigma]  U [epsilon]  F [epsilon/sigma]")
    phi = np.linspace(0.0, np.pi, 361)
    np.savetxt(HERE / "angle_target.dat", np.column_stack([np.degrees(phi), angle_reference(phi) * np.pi / 180]),
               fmt="%.10g", header=header + "bead angle [degrees, 180 = straight]  P [1/degree], reference density")


if __name__ == "__main__":
    main()
