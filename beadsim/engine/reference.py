"""Plain-NumPy reference forces: the twin of :mod:`beadsim.kernels.forces`.

Pairs come from ``scipy.spatial.cKDTree`` (with periodic ``boxsize`` where the
box is periodic), so it works at any size; it is the baseline of the tests
and of the benchmark, not a production path.
"""

import numpy as np
from scipy.spatial import cKDTree

from ..model.potentials import NoPair


def _vectors(pos, i, j, box):
    d = pos[j] - pos[i]
    if box.periodic:
        d -= box.lengths * np.rint(d / box.lengths)
    return d


def _add_central(pot, i, j, d, r2, forces, energies, slot):
    """Add a central pair force (pair or bond) to ``forces``, its energy to ``energies[slot]`` and its virial."""
    u, f_r = pot.energy_force(r2)
    energies[slot] += u.sum()
    energies[3] += (f_r * r2).sum()
    fvec = f_r[:, None] * d
    np.add.at(forces, j, fvec)
    np.add.at(forces, i, -fvec)


def reference_forces(system, forcefield):
    """Forces and energies of ``system`` under ``forcefield``, computed in NumPy.

    Returns
    -------
    forces : float64 (n, 3)
        epsilon/sigma.
    energies : float64 (4,)
        Pair, bond and bending energy (epsilon) and the virial sum of r.f (epsilon).
    """
    pos, box = system.positions, system.box
    n = system.n_beads
    forces = np.zeros((n, 3))
    energies = np.zeros(4)

    n_types = int(system.types.max()) + 1
    table = forcefield.pair_table(n_types)
    cutoff = max(p.cutoff for row in table for p in row)
    if cutoff > 0:
        if box.periodic:
            tree = cKDTree(np.mod(pos, box.lengths), boxsize=box.lengths)
        else:
            tree = cKDTree(pos)
        pairs = tree.query_pairs(cutoff, output_type="ndarray")
        excl_start, excl = forcefield.exclusions(system)
        excluded = {(a, excl[k]) for a in range(n) for k in range(excl_start[a], excl_start[a + 1])}
        if excluded:
            keep = np.array([(a, b) not in excluded for a, b in pairs], dtype=bool)
            pairs = pairs[keep] if len(pairs) else pairs
        if len(pairs):
            i, j = pairs[:, 0], pairs[:, 1]
            d = _vectors(pos, i, j, box)
            r2 = np.einsum("ij,ij->i", d, d)
            ti, tj = system.types[i], system.types[j]
            for a in range(n_types):
                for b in range(n_types):
                    pot = table[a][b]
                    sel = (ti == a) & (tj == b)
                    if isinstance(pot, NoPair) or not sel.any():
                        continue
                    _add_central(pot, i[sel], j[sel], d[sel], r2[sel], forces, energies, 0)

    if len(system.bonds):
        n_bt = int(system.bond_types.max()) + 1
        pots = forcefield.bond_list(n_bt)
        i, j = system.bonds[:, 0], system.bonds[:, 1]
        d = _vectors(pos, i, j, box)
        r2 = np.einsum("ij,ij->i", d, d)
        for t, pot in enumerate(pots):
            sel = system.bond_types == t
            _add_central(pot, i[sel], j[sel], d[sel], r2[sel], forces, energies, 1)

    if forcefield.bending is not None and len(system.angles):
        n_at = int(system.angle_types.max()) + 1
        kappa = np.array([b.stiffness for b in forcefield.bending_list(n_at)])[system.angle_types][:, None]
        i, j, k = system.angles.T
        a = _vectors(pos, i, j, box)
        b = _vectors(pos, j, k, box)
        aa = np.einsum("ij,ij->i", a, a)[:, None]
        bb = np.einsum("ij,ij->i", b, b)[:, None]
        inv = 1.0 / np.sqrt(aa * bb)
        c = np.einsum("ij,ij->i", a, b)[:, None] * inv
        energies[2] = float(np.sum(kappa * (1.0 - c)))
        ga = -kappa * (b * inv - c * a / aa)
        gb = -kappa * (a * inv - c * b / bb)
        np.add.at(forces, i, ga)
        np.add.at(forces, j, gb - ga)
        np.add.at(forces, k, -gb)
        energies[3] -= float(np.sum(ga * a + gb * b))
    return forces, energies
