"""The fused step loop: integrator updates, neighbour-list upkeep and forces.

One call advances the state by up to ``n_steps`` without returning to Python.
It stops early, with the step count done, when the force kernel reports a
problem (see :mod:`beadsim.kernels.forces` status codes).

Schemes (integer codes):

* ``BAOAB`` Langevin splitting of Leimkuhler and Matthews, Appl. Math. Res.
  Express 2013, 34 (arXiv:1203.5428): B (half kick), A (half drift),
  O (exact Ornstein-Uhlenbeck update v <- c1 v + sqrt((1 - c1^2) kT/m) R,
  c1 = exp(-gamma dt)), A, force, B.
* ``VERLET`` velocity Verlet (no thermostat).
* ``BROWNIAN`` overdamped Euler-Maruyama:
  x <- x + dt F/(m gamma) + sqrt(2 kT dt/(m gamma)) R; velocities are set to zero.

The Gaussian numbers of step ``s`` are read from the counter-based stream
(:mod:`beadsim.kernels.random`) at pair index ``s * ceil(3 n / 2)``, so a run
restarted at step ``s`` continues the same sequence.
"""

import numpy as np
from numba import njit, prange

from .forces import OK, total_forces
from .chunks import chunk_bounds, chunk_count
from .neighbors import build_list, colour_blocks
from .random import fill_normal

BAOAB, VERLET, BROWNIAN = 0, 1, 2


@njit(cache=True)
def refresh_list(pos, box, periodic, r_list, excl_start, excl, types, nlist, ref):
    """Rebuild the half Verlet list and its block phases, growing the neighbour array if needed.

    Parameters
    ----------
    pos, box, periodic, r_list, excl_start, excl, types
        As for :func:`beadsim.kernels.neighbors.build_list`.
    nlist : tuple
        ``(order, start, nbr, sorted_pos, sorted_force, sorted_types,
        block_start, schedule, phase_start, layout)``, filled in place:
        ``order`` int64 (n,), ``start`` int64 (n+1,), ``nbr`` int32,
        ``sorted_pos`` and ``sorted_force`` float64 (n, 3) scratch,
        ``sorted_types`` int64 (n,), ``block_start`` int64 (MAX_BLOCKS + 1,),
        ``schedule`` int64 (MAX_BLOCKS,), ``phase_start`` int64
        (MAX_BLOCKS + 1,), ``layout`` int64 (2,) = (blocks, phases).
    ref : float64 (n, 3)
        Output: positions at this build, sigma.

    Returns
    -------
    tuple
        ``nlist``, with a new ``nbr`` if it had to grow.
    """
    order, start, nbr, sorted_pos, sorted_force, sorted_types, block_start, schedule, phase_start, layout = nlist
    n_chunks = chunk_count(pos.shape[0])
    need, n_blocks = build_list(pos, box, periodic, r_list, excl_start, excl, types, order, start, nbr,
                                sorted_pos, sorted_types, block_start)
    if need > nbr.shape[0] // n_chunks:
        nbr = np.empty(n_chunks * (int(need * 1.25) + 16), dtype=np.int32)
        build_list(pos, box, periodic, r_list, excl_start, excl, types, order, start, nbr, sorted_pos,
                   sorted_types, block_start)
    layout[0] = n_blocks
    layout[1] = colour_blocks(start, nbr, block_start, n_blocks, schedule, phase_start)
    ref[:, :] = pos
    return order, start, nbr, sorted_pos, sorted_force, sorted_types, block_start, schedule, phase_start, layout


@njit(cache=True, parallel=True)
def move_beads(scheme, seed, first_pair, dt, coeffs, pos, vel, force, inv_mass, noise_scale, ref, closing_kick):
    """Everything of one step before the force call, fused into one parallel pass.

    Applies the closing half kick of the previous step if ``closing_kick``
    (the same two roundings as two separate kicks), then the scheme's update,
    drawing each block's Gaussian numbers from the counter-based stream; returns
    the largest squared displacement since ``ref``.
    """
    n = pos.shape[0]
    half = 0.5 * dt
    n_chunks = chunk_count(n)
    part = np.zeros(n_chunks)
    for c in prange(n_chunks):
        lo, hi = chunk_bounds(n, n_chunks, c)
        # normals 3 lo .. 3 hi - 1 come from Box-Muller pairs p0 .. p1 - 1
        p0 = (3 * lo) // 2
        p1 = (3 * hi + 1) // 2
        noise = np.zeros(2 * (p1 - p0))
        if scheme != VERLET:
            fill_normal(seed, first_pair + p0, noise)
        offset = 2 * p0
        best = 0.0
        for i in range(lo, hi):
            d2 = 0.0
            for d in range(3):
                g = noise_scale[i] * noise[3 * i + d - offset]
                if scheme == BROWNIAN:
                    pos[i, d] += coeffs[0] * dt * inv_mass[i] * force[i, d] + g
                    vel[i, d] = 0.0
                else:
                    if closing_kick:
                        vel[i, d] += half * inv_mass[i] * force[i, d]
                    vel[i, d] += half * inv_mass[i] * force[i, d]
                    if scheme == BAOAB:
                        pos[i, d] += half * vel[i, d]
                        vel[i, d] = coeffs[0] * vel[i, d] + g
                        pos[i, d] += half * vel[i, d]
                    else:
                        pos[i, d] += dt * vel[i, d]
                dd = pos[i, d] - ref[i, d]
                d2 += dd * dd
            best = max(best, d2)
        part[c] = best
    return part.max()


@njit(cache=True, parallel=True)
def half_kick(dt, vel, force, inv_mass):
    """Closing half kick v <- v + (dt/2) F/m."""
    half = 0.5 * dt
    for i in prange(vel.shape[0]):
        for d in range(3):
            vel[i, d] += half * inv_mass[i] * force[i, d]


@njit(cache=True)
def advance(scheme, n_steps, step0, seed, dt, coeffs, pos, vel, force, inv_mass, noise_scale,
            box, periodic, types, ff, r_list, skin, excl_start, excl, nlist, ref,
            energies, info, counters):
    """Advance the state by up to ``n_steps`` steps in place.

    Each step is two parallel passes: :func:`move_beads` (with the previous step's
    closing kick fused in) and the forces; the last closing kick follows the loop.

    Parameters
    ----------
    scheme : int
        ``BAOAB``, ``VERLET`` or ``BROWNIAN``.
    n_steps, step0 : int
        Steps to take and the step count of the current state (seeds the noise).
    seed : int
        Stream seed of the thermostat noise.
    dt : float
        Timestep (tau).
    coeffs : float64 (2,)
        BAOAB: (c1, unused); BROWNIAN: (1/gamma, unused).
    pos, vel, force : float64 (n, 3)
        State; ``force`` must hold the forces of ``pos`` on entry.
    inv_mass : float64 (n,)
        1 / m.
    noise_scale : float64 (n,)
        Per-bead noise amplitude: BAOAB sqrt((1 - c1^2) kT / m); BROWNIAN
        sqrt(2 kT dt / (m gamma)).
    box, periodic, ff
        As for :func:`beadsim.kernels.forces.total_forces`.
    r_list, skin : float
        Verlet list radius (cutoff + skin) and skin; the list is rebuilt when a
        bead has moved more than skin / 2 since the last build.
    types : int64 (n,)
        Bead types.
    excl_start, excl, nlist, ref
        Exclusions and Verlet list state, as for :func:`refresh_list` (``ref``
        holds positions at the last build).
    energies : float64 (4,)
        Output of the last force evaluation.
    info : int64 (2,)
        Status of the last force evaluation.
    counters : int64 (2,)
        Incremented in place: (steps done, list rebuilds).

    Returns
    -------
    tuple
        ``nlist``, with a new neighbour array if it had to grow.
    """
    n = pos.shape[0]
    pairs_per_step = (3 * n + 1) // 2
    trigger = 0.25 * skin * skin
    done = 0
    for s in range(n_steps):
        moved = move_beads(scheme, seed, (step0 + s) * pairs_per_step, dt, coeffs, pos, vel, force, inv_mass,
                      noise_scale, ref, s > 0 and scheme != BROWNIAN)
        if moved > trigger:
            nlist = refresh_list(pos, box, periodic, r_list, excl_start, excl, types, nlist, ref)
            counters[1] += 1
        total_forces(pos, box, periodic, nlist, ff, force, energies, info)
        counters[0] += 1
        done += 1
        if info[0] != OK:
            break
    if done > 0 and scheme != BROWNIAN:
        half_kick(dt, vel, force, inv_mass)
    return nlist
