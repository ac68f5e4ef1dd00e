"""Chain builders: random-walk growth with overlap rejection, reproducible from a seed."""

import numpy as np

from .._validate import as_array, positive, positive_int
from ..errors import InputError
from ..kernels.growth import grow_chains
from ..kernels.random import splitmix64
from .system import Box, System

#: Mean FENE+WCA bond length at T = 1 (Kremer and Grest, J. Chem. Phys. 92, 5057, 1990).
FENE_BOND_LENGTH = 0.97
_GROWTH_STREAM = 0x6A09E667  # distinct stream from the thermostat's
_VELOCITY_STREAM = 0xBB67AE85


def stream_seed(seed, stream):
    """A 64-bit seed for an independent random stream derived from the user's ``seed``."""
    return np.uint64(splitmix64(np.uint64(int(seed) % 2 ** 64), np.uint64(stream)))


def build_chains(chain_lengths, *, density=None, box_lengths=None, bond_length=FENE_BOND_LENGTH,
                 min_distance=0.8, seed=0, max_tries=200):
    """Grow chains as self-avoiding random walks, in an open box or a periodic one.

    Parameters
    ----------
    chain_lengths : int or sequence of int
        Beads per chain (one int for a single chain).
    density : float, optional
        Bead number density, sigma^-3, for a cubic periodic box.
    box_lengths : float64 (3,), optional
        Periodic box edges, sigma (instead of ``density``). With neither, the box is open.
    bond_length : float
        Bond length of the walk, sigma (0.97 suits FENE+WCA at T = 1).
    min_distance : float
        No two beads closer than this, sigma; minimisation removes the rest of the overlap.
    seed : int
        Seed; the same seed gives the same chains.
    max_tries : int
        Directions tried per bead before a chain restarts.

    Returns
    -------
    System
        Beads numbered chain after chain, bonds between consecutive beads, zero velocities.
    """
    lengths = np.atleast_1d(np.asarray(chain_lengths, dtype=np.int64))
    for k, v in enumerate(lengths):
        positive_int(int(v), f"chain_lengths[{k}]")
    bond_length = positive(bond_length, "bond_length")
    min_distance = positive(min_distance, "min_distance")
    n = int(lengths.sum())
    if density is not None and box_lengths is not None:
        raise InputError("give either density or box_lengths for a periodic box, not both")
    if density is not None:
        density = positive(density, "density")
        box_lengths = np.full(3, (n / density) ** (1.0 / 3.0))
    box = Box(box_lengths)
    origin = box.lengths if box.periodic else np.full(3, (len(lengths) > 1) * (n / 0.01) ** (1 / 3) + 1e-9)
    pos, restarts = grow_chains(lengths, bond_length, min_distance, box.kernel_lengths(), box.periodic,
                                origin, stream_seed(seed, _GROWTH_STREAM), int(max_tries))
    if restarts < 0:
        raise InputError(f"could not grow {len(lengths)} chain(s) without beads closer than min_distance="
                         f"{min_distance} sigma; lower min_distance or the density")
    return System(pos, lengths, box=box)


def maxwell_boltzmann_velocities(masses, temperature, seed, remove_drift=True):
    """Velocities drawn from the Maxwell-Boltzmann distribution, by default with centre-of-mass motion removed.

    Each Cartesian component of bead i is Gaussian with mean 0 and variance
    kT / m_i, so the kinetic energy of the 3 n independent components is
    (kT / 2) times a chi-square variable with 3 n degrees of freedom (3 n - 3
    once the mass-weighted mean velocity is subtracted).

    Parameters
    ----------
    masses : float64 (n,)
        Bead masses, m (each > 0).
    temperature : float
        kT, epsilon (>= 0; 0 gives zero velocities).
    seed : int
        Seed; the velocities come from their own stream of it (distinct from the
        start structure's and the thermostat's), so the same seed gives the same velocities.
    remove_drift : bool
        Subtract the mass-weighted mean velocity (no effect for a single bead).

    Returns
    -------
    float64 (n, 3)
        Velocities, sigma / tau.
    """
    masses = as_array(masses, "masses", shape=(None,))
    if np.any(masses <= 0):
        raise InputError("masses: every bead mass must be > 0")
    temperature = positive(temperature, "temperature", allow_zero=True)
    rng = np.random.default_rng(stream_seed(seed, _VELOCITY_STREAM))
    v = rng.standard_normal((len(masses), 3)) * np.sqrt(temperature / masses)[:, None]
    if remove_drift and len(masses) > 1:
        v -= np.average(v, axis=0, weights=masses)
    return v
