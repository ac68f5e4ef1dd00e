"""Pair, bond and bending forces over plain arrays.

Potential kinds are integer codes so that one kernel serves every combination
of bead types; the parameter layout of each code is documented on the Python
side in :mod:`beadsim.model.potentials`, which is the only place that fills it.

Pair codes (row ``params[ti, tj, :]``):

* ``PAIR_NONE``  no interaction.
* ``PAIR_LJ``    ``[eps, sigma, r_cut**2, u_shift]``:
  U = 4 eps [(sigma/r)^12 - (sigma/r)^6] - u_shift for r < r_cut.
* ``PAIR_COS2``  ``[eps, sigma, r_cut**2, phi, alpha, beta, r_min**2]``:
  Soddemann, Duenweg and Kremer, Eur. Phys. J. E 6, 409 (2001):
  U = 4 eps [(sigma/r)^12 - (sigma/r)^6 + 1/4] - phi for r < r_min = 2^(1/6) sigma,
  U = (phi/2) [cos(alpha r^2 + beta) - 1] for r_min <= r < r_cut.
* ``PAIR_TABLE`` ``[table, r_first, dr, n_points, r_cut**2]``: cubic Hermite
  interpolation of tabulated U and dU/dr on a uniform grid.

Bond codes (row ``bond_params[type, :]``):

* ``BOND_FENE``     ``[k, r0]``: U = -(k r0^2 / 2) ln(1 - (r/r0)^2) (Kremer and
  Grest, J. Chem. Phys. 92, 5057, 1990).
* ``BOND_HARMONIC`` ``[k, r_rest]``: U = (k/2) (r - r_rest)^2.
* ``BOND_TABLE``    ``[table, r_first, dr, n_points]``.

Bending (row ``angle_params[type, :]``): ``[kappa]``,
U = kappa (1 - cos theta), theta the angle between consecutive bond vectors.

Status codes returned in ``info[0]`` (``info[1]`` holds the offending index):
``OK``, ``FENE_OVERSTRETCH`` (bond index), ``OUTSIDE_TABLE`` (bond index, or
-1 - i for a pair at bead i), ``NOT_FINITE``.
"""

import math

import numpy as np
from numba import njit, prange

from .chunks import chunk_bounds, chunk_count
from .neighbors import gather_rows, minimum_image, nearest_image

PAIR_NONE, PAIR_LJ, PAIR_COS2, PAIR_TABLE = 0, 1, 2, 3
BOND_FENE, BOND_HARMONIC, BOND_TABLE = 0, 1, 2
OK, FENE_OVERSTRETCH, OUTSIDE_TABLE, NOT_FINITE = 0, 1, 2, 3
N_PAIR_PARAMS = 8
N_BOND_PARAMS = 4


@njit(cache=True, inline="always")
def hermite_table(table, r_first, dr, n_points, r):
    """Cubic Hermite value U(r) and slope dU/dr from a uniform table.

    ``table`` is float64 (n_points, 2) holding U and dU/dr at r_first + k dr.
    Returns ``(u, du_dr, inside)``; outside the grid ``inside`` is False.
    """
    x = (r - r_first) / dr
    k = int(math.floor(x))
    if k < 0 or k >= n_points - 1:
        if k == n_points - 1 and x - k == 0.0:
            return table[k, 0], table[k, 1], True
        return 0.0, 0.0, False
    t = x - k
    t2 = t * t
    t3 = t2 * t
    u0 = table[k, 0]
    m0 = table[k, 1] * dr
    u1 = table[k + 1, 0]
    m1 = table[k + 1, 1] * dr
    u = (2 * t3 - 3 * t2 + 1) * u0 + (t3 - 2 * t2 + t) * m0 + (-2 * t3 + 3 * t2) * u1 + (t3 - t2) * m1
    du = (6 * t2 - 6 * t) * u0 + (3 * t2 - 4 * t + 1) * m0 + (-6 * t2 + 6 * t) * u1 + (3 * t2 - 2 * t) * m1
    return u, du / dr, True


@njit(cache=True, inline="always")
def pair_energy_force(kind, p, r2, tables):
    """Energy and f/r (force divided by distance) of one pair at squared distance r2.

    Returns ``(u, f_over_r, inside)``; ``inside`` is False only for a table
    pair closer than its first tabulated distance.
    """
    if kind == PAIR_LJ:
        # branch-free: a third or more of the listed pairs lie beyond the cutoff in no predictable order,
        # and a mispredicted branch costs more than the arithmetic (pair loop 1.6 x faster, analysis/
        # benchmarks.md); the factor is exactly 1.0 or 0.0.
        inv_r2 = 1.0 / r2
        s2 = p[1] * p[1] * inv_r2
        s6 = s2 * s2 * s2
        inside = 1.0 if r2 < p[2] else 0.0
        u = inside * (4.0 * p[0] * (s6 * s6 - s6) - p[3])
        return u, inside * (24.0 * p[0] * (2.0 * s6 * s6 - s6) * inv_r2), True
    if kind == PAIR_COS2:
        if r2 >= p[2]:
            return 0.0, 0.0, True
        if r2 < p[6]:
            s2 = p[1] * p[1] / r2
            s6 = s2 * s2 * s2
            return 4.0 * p[0] * (s6 * s6 - s6 + 0.25) - p[3], 24.0 * p[0] * (2.0 * s6 * s6 - s6) / r2, True
        arg = p[4] * r2 + p[5]
        # dU/dr = -(phi/2) sin(arg) 2 alpha r, so f/r = phi alpha sin(arg)
        return 0.5 * p[3] * (math.cos(arg) - 1.0), p[3] * p[4] * math.sin(arg), True
    if kind == PAIR_TABLE:
        if r2 >= p[4]:
            return 0.0, 0.0, True
        r = math.sqrt(r2)
        u, du, inside = hermite_table(tables[int(p[0])], p[1], p[2], int(p[3]), r)
        return u, -du / r, inside
    return 0.0, 0.0, True


@njit(cache=True, parallel=True)
def pair_forces(pos, box, periodic, nlist, kinds, params, tables, force, info):
    """Set ``force`` to the non-bonded forces over a half Verlet list; return (energy, virial, coincident).

    Positions are first copied into the list's slot order
    (:mod:`beadsim.kernels.neighbors`), so that partners are read from nearby
    memory, and each pair is evaluated once, its force added to both beads.
    Blocks of slots run in phases (:func:`beadsim.kernels.neighbors.colour_blocks`):
    the blocks of one phase write disjoint slots and run in parallel, so every
    force, and the energy and virial summed per block in block order, is the
    same on any number of threads. The third value tells whether two
    interacting beads sit at one point (parallel loops do not raise on that
    division by zero). The virial is sum over pairs of r_ij . f_ij (energy
    units); pressure follows as (2 K + virial) / (3 V).

    Parameters
    ----------
    pos : float64 (n, 3)
        Positions in the user's order, sigma.
    box : float64 (3,)
    periodic : bool
    nlist : tuple
        The list tuple kept by :func:`beadsim.kernels.integrate.refresh_list`.
    kinds : int64 (n_types, n_types)
    params : float64 (n_types, n_types, N_PAIR_PARAMS)
    tables : float64 (n_tables, n_points, 2)
    force : float64 (n, 3)
        Output, user's order, epsilon/sigma.
    info : int64 (2,)
        Status, set to ``OUTSIDE_TABLE`` if a table pair fell below its grid.
    """
    order, start, nbr, sorted_pos, sorted_force, sorted_types, block_start, schedule, phase_start, layout = nlist
    gather_rows(pos, order, sorted_pos)
    n = pos.shape[0]
    n_blocks = layout[0]
    inv_box = 1.0 / box
    part = np.zeros((n_blocks, 2))
    outside = np.full(n_blocks, -1)
    coincident = np.zeros(n_blocks, dtype=np.bool_)
    sorted_force[:, :] = 0.0
    for phase in range(layout[1]):
        for m in prange(phase_start[phase], phase_start[phase + 1]):
            c = schedule[m]
            lo = block_start[c]
            hi = block_start[c + 1]
            energy = 0.0
            virial = 0.0
            close = False
            for s in range(lo, hi):
                ti = sorted_types[s]
                kind_row = kinds[ti]
                param_rows = params[ti]
                xi = sorted_pos[s, 0]
                yi = sorted_pos[s, 1]
                zi = sorted_pos[s, 2]
                fx = 0.0
                fy = 0.0
                fz = 0.0
                for k in range(start[s], start[s + 1]):
                    t = nbr[k]
                    tj = sorted_types[t]
                    kind = kind_row[tj]
                    if kind == PAIR_NONE:
                        continue
                    dx = nearest_image(sorted_pos[t, 0] - xi, box[0], inv_box[0], periodic)
                    dy = nearest_image(sorted_pos[t, 1] - yi, box[1], inv_box[1], periodic)
                    dz = nearest_image(sorted_pos[t, 2] - zi, box[2], inv_box[2], periodic)
                    r2 = dx * dx + dy * dy + dz * dz
                    close |= r2 == 0.0
                    u, f_r, inside = pair_energy_force(kind, param_rows[tj], r2, tables)
                    if not inside:
                        outside[c] = order[s]
                    energy += u
                    virial += f_r * r2
                    # d points from i to j: the force on i is -f_r * d, on j +f_r * d
                    fx -= f_r * dx
                    fy -= f_r * dy
                    fz -= f_r * dz
                    sorted_force[t, 0] += f_r * dx
                    sorted_force[t, 1] += f_r * dy
                    sorted_force[t, 2] += f_r * dz
                sorted_force[s, 0] += fx
                sorted_force[s, 1] += fy
                sorted_force[s, 2] += fz
            part[c, 0] = energy
            part[c, 1] = virial
            coincident[c] = close
    for s in prange(n):
        i = order[s]
        force[i, 0] = sorted_force[s, 0]
        force[i, 1] = sorted_force[s, 1]
        force[i, 2] = sorted_force[s, 2]
    energy = 0.0
    virial = 0.0
    for c in range(n_blocks):
        energy += part[c, 0]
        virial += part[c, 1]
        if outside[c] >= 0 and info[0] == OK:
            info[0] = OUTSIDE_TABLE
            info[1] = -1 - outside[c]
    return energy, virial, coincident.any()


#: Below this many bonds, all bonds form one group summed on one thread: two fork-joins would cost more.
PARALLEL_MIN_BONDS = 2000


@njit(cache=True)
def bond_chunks(bonds, n):
    """Group bonds by the work chunk (:mod:`beadsim.kernels.chunks`) of their lower bead, for :func:`bond_forces`.

    A bond whose beads lie in one chunk or in two neighbouring chunks belongs
    to the chunk of its lower bead; the rest (ring closures, cross-links
    between distant beads) form a last group. With fewer than
    ``PARALLEL_MIN_BONDS`` bonds every bond is in the last group.

    Parameters
    ----------
    bonds : int64 (n_bonds, 2)
    n : int
        Number of beads.

    Returns
    -------
    bond_order : int64 (n_bonds,)
        Bond indices, by group, in increasing index within a group.
    bond_start : int64 (chunk_count(n) + 2,)
        Group ``c`` is ``bond_order[bond_start[c]:bond_start[c + 1]]``; group ``chunk_count(n)`` is the last one.
    """
    n_chunks = chunk_count(n)
    chunk_of = np.empty(max(n, 1), dtype=np.int64)
    for c in range(n_chunks):
        lo, hi = chunk_bounds(n, n_chunks, c)
        chunk_of[lo:hi] = c
    group = np.full(bonds.shape[0], n_chunks)
    bond_start = np.zeros(n_chunks + 2, dtype=np.int64)
    for b in range(bonds.shape[0]):
        lo_chunk = chunk_of[min(bonds[b, 0], bonds[b, 1])]
        if bonds.shape[0] >= PARALLEL_MIN_BONDS and chunk_of[max(bonds[b, 0], bonds[b, 1])] - lo_chunk <= 1:
            group[b] = lo_chunk
        bond_start[group[b] + 1] += 1
    for c in range(n_chunks + 1):
        bond_start[c + 1] += bond_start[c]
    fill = bond_start[:-1].copy()
    bond_order = np.empty(bonds.shape[0], dtype=np.int64)
    for b in range(bonds.shape[0]):
        bond_order[fill[group[b]]] = b
        fill[group[b]] += 1
    return bond_order, bond_start


@njit(cache=True)
def _bond_group(g, pos, box, periodic, bonds, bond_type, kinds, params, tables, bond_order, bond_start, force, part,
                flag):
    """Add the forces of bond group ``g``; its energy and virial go to ``part[g]``, its last bad bond to ``flag[g]``."""
    energy = 0.0
    virial = 0.0
    for k in range(bond_start[g], bond_start[g + 1]):
        b = bond_order[k]
        i = bonds[b, 0]
        j = bonds[b, 1]
        t = bond_type[b]
        kind = kinds[t]
        p = params[t]
        dx = minimum_image(pos[j, 0] - pos[i, 0], box[0], periodic)
        dy = minimum_image(pos[j, 1] - pos[i, 1], box[1], periodic)
        dz = minimum_image(pos[j, 2] - pos[i, 2], box[2], periodic)
        r2 = dx * dx + dy * dy + dz * dz
        if kind == BOND_FENE:
            x = r2 / (p[1] * p[1])
            if x >= 1.0:
                flag[g, 0] = FENE_OVERSTRETCH
                flag[g, 1] = b
                continue
            u = -0.5 * p[0] * p[1] * p[1] * math.log(1.0 - x)
            f_r = -p[0] / (1.0 - x)
        elif kind == BOND_HARMONIC:
            r = math.sqrt(r2)
            u = 0.5 * p[0] * (r - p[1]) ** 2
            f_r = -p[0] * (r - p[1]) / r
        else:
            r = math.sqrt(r2)
            u, du, inside = hermite_table(tables[int(p[0])], p[1], p[2], int(p[3]), r)
            if not inside:
                flag[g, 0] = OUTSIDE_TABLE
                flag[g, 1] = b
                continue
            f_r = -du / r
        energy += u
        virial += f_r * r2
        force[i, 0] -= f_r * dx
        force[i, 1] -= f_r * dy
        force[i, 2] -= f_r * dz
        force[j, 0] += f_r * dx
        force[j, 1] += f_r * dy
        force[j, 2] += f_r * dz
    part[g, 0] = energy
    part[g, 1] = virial


@njit(cache=True, parallel=True)
def _bond_phases(pos, box, periodic, bonds, bond_type, kinds, params, tables, bond_order, bond_start, force, part,
                 flag):
    """Bond groups of even chunks in parallel, then those of odd chunks (see :func:`bond_forces`)."""
    n_chunks = bond_start.shape[0] - 2
    for phase in range(2):
        for m in prange((n_chunks - phase + 1) // 2):
            _bond_group(phase + 2 * m, pos, box, periodic, bonds, bond_type, kinds, params, tables, bond_order,
                        bond_start, force, part, flag)


@njit(cache=True)
def bond_forces(pos, box, periodic, bonds, bond_type, kinds, params, tables, bond_order, bond_start, force, info):
    """Add bond forces; return (energy, virial). Flags an overstretched FENE bond or one off its table in ``info``.

    Bond groups (:func:`bond_chunks`) of even chunks run in parallel, then
    those of odd chunks: a group writes only into its own chunk and the next,
    so no two groups of one phase touch one bead, and every bead receives its
    bond forces in one fixed order whatever the thread count. The last group
    follows on the calling thread. Energies and virials are summed in group
    order, and a bad bond of the first group that has one is reported.
    """
    n_groups = bond_start.shape[0] - 1
    part = np.zeros((n_groups, 2))
    flag = np.full((n_groups, 2), -1)
    if bond_start[n_groups - 1] > 0:  # not every bond in the last group
        _bond_phases(pos, box, periodic, bonds, bond_type, kinds, params, tables, bond_order, bond_start, force, part,
                     flag)
    _bond_group(n_groups - 1, pos, box, periodic, bonds, bond_type, kinds, params, tables, bond_order, bond_start,
                force, part, flag)
    energy = 0.0
    virial = 0.0
    flagged = False
    for g in range(n_groups):
        energy += part[g, 0]
        virial += part[g, 1]
        if flag[g, 0] >= 0 and not flagged:
            info[0] = flag[g, 0]
            info[1] = flag[g, 1]
            flagged = True
    return energy, virial


@njit(cache=True)
def bending_forces(pos, box, periodic, angles, angle_type, params, force):
    """Add bending forces U = kappa (1 - cos theta); return (energy, virial).

    For the triple (i, j, k) with bond vectors a = r_j - r_i and b = r_k - r_j,
    cos theta = a.b / (|a||b|) and dU/da = -kappa (b/(|a||b|) - cos theta a/|a|^2),
    dU/db = -kappa (a/(|a||b|) - cos theta b/|b|^2).
    """
    energy = 0.0
    virial = 0.0
    a = np.empty(3)
    b = np.empty(3)
    for m in range(angles.shape[0]):
        i = angles[m, 0]
        j = angles[m, 1]
        k = angles[m, 2]
        kappa = params[angle_type[m], 0]
        for d in range(3):
            a[d] = minimum_image(pos[j, d] - pos[i, d], box[d], periodic)
            b[d] = minimum_image(pos[k, d] - pos[j, d], box[d], periodic)
        aa = a[0] * a[0] + a[1] * a[1] + a[2] * a[2]
        bb = b[0] * b[0] + b[1] * b[1] + b[2] * b[2]
        ab = a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
        inv = 1.0 / math.sqrt(aa * bb)
        c = ab * inv
        energy += kappa * (1.0 - c)
        for d in range(3):
            # gradients of U with respect to a and b
            ga = -kappa * (b[d] * inv - c * a[d] / aa)
            gb = -kappa * (a[d] * inv - c * b[d] / bb)
            # a = r_j - r_i, b = r_k - r_j: force = -dU/dr
            force[i, d] += ga
            force[j, d] += gb - ga
            force[k, d] -= gb
            virial -= ga * a[d] + gb * b[d]
    return energy, virial


@njit(cache=True)
def total_forces(pos, box, periodic, nlist, ff, force, energies, info):
    """Overwrite ``force`` with all forces; write energies and status.

    Raises ZeroDivisionError if two interacting beads sit at one point, as
    the serial division would.

    Parameters
    ----------
    pos : float64 (n, 3)
        Positions, sigma, in the user's order.
    box : float64 (3,)
        Box edges, sigma (ignored when not periodic).
    periodic : bool
    nlist : tuple
        The Verlet list, as for :func:`pair_forces`.
    ff : tuple
        ``(pair_kinds, pair_params, tables, bonds, bond_type, bond_kinds,
        bond_params, angles, angle_type, angle_params, bond_order, bond_start)``
        (the last two from :func:`bond_chunks`) as built by
        :meth:`beadsim.model.potentials.ForceField.compile`.
    energies : float64 (4,)
        Output: pair, bond, bending energy and the total virial.
    info : int64 (2,)
        Output status code and offending index (see module docstring).
    """
    (pair_kinds, pair_params, tables, bonds, bond_type, bond_kinds, bond_params, angles, angle_type, angle_params,
     bond_order, bond_start) = ff
    info[0] = OK
    info[1] = 0
    e_pair, w_pair, coincident = pair_forces(pos, box, periodic, nlist, pair_kinds, pair_params, tables, force, info)
    if coincident:
        raise ZeroDivisionError("two interacting beads at the same position")
    e_bond, w_bond = bond_forces(pos, box, periodic, bonds, bond_type, bond_kinds, bond_params, tables, bond_order,
                                 bond_start, force, info)
    e_bend, w_bend = bending_forces(pos, box, periodic, angles, angle_type, angle_params, force)
    energies[0] = e_pair
    energies[1] = e_bond
    energies[2] = e_bend
    energies[3] = w_pair + w_bond + w_bend
    if info[0] == OK and not math.isfinite(e_pair + e_bond + e_bend):
        info[0] = NOT_FINITE
