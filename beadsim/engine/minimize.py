"""FIRE energy minimisation (Bitzek, Koskinen, Gaehler, Moseler and Gumbsch, PRL 97, 170201, 2006)."""

import logging

import numpy as np

from .._validate import positive, positive_int
from ..errors import MinimizationError
from ..kernels.neighbors import max_displacement_sq

log = logging.getLogger(__name__)

# Parameters recommended in the FIRE paper.
N_MIN, F_INC, F_DEC, ALPHA_START, F_ALPHA = 5, 1.1, 0.5, 0.1, 0.99


def fire(sim, force_tolerance=1.0, max_iterations=20000, max_move=0.1):
    """Minimise the potential energy until the largest force is below ``force_tolerance``.

    Velocities are zeroed at the end. Bead moves are capped at ``max_move`` per
    iteration so overlapping beads are separated without blowing up bonds.

    Parameters
    ----------
    sim : Simulation
    force_tolerance : float
        Target largest force magnitude on any bead, epsilon/sigma.
    max_iterations : int
    max_move : float
        Largest displacement of a bead in one iteration, sigma.

    Returns
    -------
    dict
        ``iterations``, ``max_force`` and ``potential_energy`` at the end.

    Raises
    ------
    MinimizationError
        If the tolerance is not reached, naming the bead with the largest force.
    """
    tol = positive(force_tolerance, "force_tolerance")
    max_iterations = positive_int(max_iterations, "max_iterations")
    s = sim.system
    x, f = s.positions, sim.forces
    inv_m = 1.0 / s.masses[:, None]
    v = np.zeros_like(x)
    dt = sim.integrator.timestep
    dt_max = 10.0 * dt
    alpha, since_negative = ALPHA_START, 0
    trigger = 0.25 * sim.neighbors.skin ** 2
    sim.refresh_neighbors()
    for iteration in range(max_iterations + 1):
        fmag = np.sqrt(np.einsum("ij,ij->i", f, f))
        if not np.all(np.isfinite(fmag)) or sim.info[0] != 0:
            raise MinimizationError("minimisation produced non-finite forces or a broken bond; the start "
                                    "structure overlaps too much: build it with a larger min_distance")
        if fmag.max() < tol:
            break
        power = float(np.sum(f * v))
        if power > 0:
            vnorm = np.sqrt(np.sum(v * v))
            v = (1 - alpha) * v + alpha * vnorm * f / max(float(np.sqrt(np.sum(f * f))), 1e-300)
            since_negative += 1
            if since_negative > N_MIN:
                dt = min(dt * F_INC, dt_max)
                alpha *= F_ALPHA
        else:
            v[:] = 0.0
            dt *= F_DEC
            alpha, since_negative = ALPHA_START, 0
        v += dt * f * inv_m
        step = dt * v
        longest = np.sqrt(np.einsum("ij,ij->i", step, step)).max()
        if longest > max_move:
            step *= max_move / longest
        x += step
        if max_displacement_sq(x, sim.neighbors.ref) > trigger:
            sim.refresh_neighbors()
        else:
            sim.compute_forces()
    else:
        worst = int(np.argmax(fmag))
        raise MinimizationError(f"FIRE did not reach force_tolerance={tol} in {max_iterations} iterations: "
                                f"largest force {fmag[worst]:.3g} epsilon/sigma on bead {worst}; raise "
                                "max_iterations or build the start structure with fewer overlaps")
    s.velocities[:] = 0.0
    sim.refresh_neighbors()
    log.info("FIRE converged in %d iterations, max force %.3g", iteration, fmag.max())
    return {"iterations": iteration, "max_force": float(fmag.max()),
            "potential_energy": float(sim.raw_energies[:3].sum())}
