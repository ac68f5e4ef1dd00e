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
from numba import njit

from .forces import OK, total_forces
from .neighbors import build_half_list, max_displacement_sq
from .random import fill_normal

BAOAB, VERLET, BROWNIAN = 0, 1, 2


@njit(cache=True)
def refresh_list(pos, box, periodic, r_list, excl_start, excl, start, nbr, ref):
    """Rebuild the Verlet list, growing ``nbr`` if needed; return the (possibly new) ``nbr``."""
    found = build_half_list(pos, box, periodic, r_list, excl_start, excl, start, nbr)
    if found > nbr.shape[0]:
        nbr = np.empty(int(found * 1.25) + 64, dtype=np.int64)
        build_half_list(pos, box, periodic, r_list, excl_start, excl, start, nbr)
    ref[:, :] = pos
    return nbr


@njit(cache=True)
def advance(scheme, n_steps, step0, seed, dt, coeffs, pos, vel, force, inv_mass, noise_scale,
            box, periodic, types, ff, r_list, skin, excl_start, excl, start, nbr, ref,
            energies, info, counters):
    """Advance the state by up to ``n_steps`` steps in place.

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
    box, periodic, types, ff
        As for :func:`beadsim.kernels.forces.total_forces`.
    r_list, skin : float
        Verlet list radius (cutoff + skin) and skin; the list is rebuilt when a
        bead has moved more than skin / 2 since the last build.
    excl_start, excl, start, nbr, ref
        Exclusions and Verlet list state (``ref`` holds positions at the last build).
    energies : float64 (4,)
        Output of the last force evaluation.
    info : int64 (2,)
        Status of the last force evaluation.
    counters : int64 (2,)
        Incremented in place: (steps done, list rebuilds).

    Returns
    -------
    nbr : int64 array
        The neighbour array (a new one if it had to grow).
    """
    n = pos.shape[0]
    half = 0.5 * dt
    c1 = coeffs[0]
    noise = np.empty(3 * n)
    pairs_per_step = (3 * n + 1) // 2
    trigger = 0.25 * skin * skin
    for s in range(n_steps):
        step = step0 + s
        if scheme == BROWNIAN:
            fill_normal(seed, step * pairs_per_step, noise)
            mobility = coeffs[0] * dt
            for i in range(n):
                for d in range(3):
                    pos[i, d] += mobility * inv_mass[i] * force[i, d] + noise_scale[i] * noise[3 * i + d]
                    vel[i, d] = 0.0
        else:
            for i in range(n):
                for d in range(3):
                    vel[i, d] += half * inv_mass[i] * force[i, d]
            if scheme == BAOAB:
                fill_normal(seed, step * pairs_per_step, noise)
                for i in range(n):
                    for d in range(3):
                        pos[i, d] += half * vel[i, d]
                        vel[i, d] = c1 * vel[i, d] + noise_scale[i] * noise[3 * i + d]
                        pos[i, d] += half * vel[i, d]
            else:
                for i in range(n):
                    for d in range(3):
                        pos[i, d] += dt * vel[i, d]
        if max_displacement_sq(pos, ref) > trigger:
            nbr = refresh_list(pos, box, periodic, r_list, excl_start, excl, start, nbr, ref)
            counters[1] += 1
        total_forces(pos, box, periodic, types, start, nbr, ff, force, energies, info)
        if scheme != BROWNIAN:
            for i in range(n):
                for d in range(3):
                    vel[i, d] += half * inv_mass[i] * force[i, d]
        counters[0] += 1
        if info[0] != OK:
            break
    return nbr
