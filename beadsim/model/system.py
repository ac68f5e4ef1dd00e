"""The simulated state: beads, their connectivity and the box."""

from dataclasses import dataclass, field

import numpy as np

from .._validate import as_array, positive
from ..errors import InputError


@dataclass
class Box:
    """Simulation box: open (isolated chains, no images) or periodic orthorhombic.

    Parameters
    ----------
    lengths : float64 (3,) or None
        Edge lengths in sigma for a periodic box; ``None`` for an open box.
    """

    lengths: np.ndarray | None = None

    def __post_init__(self):
        if self.lengths is not None:
            self.lengths = as_array(self.lengths, "box lengths", shape=(3,))
            for d, value in enumerate(self.lengths):
                positive(value, f"box lengths[{d}]")

    @property
    def periodic(self):
        """True for a periodic box."""
        return self.lengths is not None

    @property
    def volume(self):
        """Box volume in sigma^3 (``inf`` for an open box)."""
        return float(np.prod(self.lengths)) if self.periodic else float("inf")

    def kernel_lengths(self):
        """Edge lengths as the kernels take them (ones for an open box, where they are unused)."""
        return self.lengths.copy() if self.periodic else np.ones(3)


@dataclass
class System:
    """Positions, velocities and topology of a set of bead-spring chains.

    Beads are numbered chain after chain: chain ``c`` holds beads
    ``offsets[c]:offsets[c + 1]`` with ``offsets = cumsum([0] + chain_lengths)``.

    Parameters
    ----------
    positions : float64 (n, 3)
        Unwrapped positions, sigma.
    chain_lengths : int sequence (n_chains,)
        Beads per chain; must sum to n.
    velocities : float64 (n, 3), optional
        Velocities, sigma/tau (zeros if omitted).
    masses : float64 (n,), optional
        Bead masses, m (ones if omitted).
    types : int64 (n,), optional
        Bead type indices into the force field's type table (zeros if omitted).
    bonds : int64 (n_bonds, 2), optional
        Bonded bead pairs (consecutive beads of each chain if omitted).
    bond_types : int64 (n_bonds,), optional
    angles : int64 (n_angles, 3), optional
        Bead triples for bending (consecutive triples of each chain if omitted).
    angle_types : int64 (n_angles,), optional
    box : Box, optional
        Open box if omitted.
    """

    positions: np.ndarray
    chain_lengths: np.ndarray
    velocities: np.ndarray | None = None
    masses: np.ndarray | None = None
    types: np.ndarray | None = None
    bonds: np.ndarray | None = None
    bond_types: np.ndarray | None = None
    angles: np.ndarray | None = None
    angle_types: np.ndarray | None = None
    box: Box = field(default_factory=Box)

    def __post_init__(self):
        self.positions = as_array(self.positions, "positions", shape=(None, 3))
        n = self.positions.shape[0]
        self.chain_lengths = as_array(self.chain_lengths, "chain_lengths", shape=(None,), dtype=np.int64)
        if np.any(self.chain_lengths < 1) or self.chain_lengths.sum() != n:
            raise InputError(f"chain_lengths: must be positive and sum to the number of beads ({n}), "
                             f"got {self.chain_lengths.tolist()[:10]}")
        self.velocities = (np.zeros((n, 3)) if self.velocities is None
                           else as_array(self.velocities, "velocities", shape=(n, 3)))
        self.masses = np.ones(n) if self.masses is None else as_array(self.masses, "masses", shape=(n,))
        if np.any(self.masses <= 0):
            raise InputError("masses: every bead mass must be > 0")
        self.types = (np.zeros(n, dtype=np.int64) if self.types is None
                      else as_array(self.types, "types", shape=(n,), dtype=np.int64))
        if np.any(self.types < 0):
            raise InputError("types: bead type indices must be >= 0")
        self.bonds = (self._chain_tuples(2) if self.bonds is None
                      else self._index_array(self.bonds, "bonds", 2))
        self.bond_types = (np.zeros(len(self.bonds), dtype=np.int64) if self.bond_types is None
                           else as_array(self.bond_types, "bond_types", shape=(len(self.bonds),), dtype=np.int64))
        self.angles = (self._chain_tuples(3) if self.angles is None
                       else self._index_array(self.angles, "angles", 3))
        self.angle_types = (np.zeros(len(self.angles), dtype=np.int64) if self.angle_types is None
                            else as_array(self.angle_types, "angle_types", shape=(len(self.angles),), dtype=np.int64))
        if not isinstance(self.box, Box):
            raise InputError(f"box: expected a beadsim Box, got {type(self.box).__name__}")

    @property
    def n_beads(self):
        """Number of beads."""
        return self.positions.shape[0]

    @property
    def chain_offsets(self):
        """int64 (n_chains + 1,): first bead of each chain, then n."""
        return np.concatenate([[0], np.cumsum(self.chain_lengths)])

    def chain_slices(self):
        """List of ``slice`` objects, one per chain."""
        off = self.chain_offsets
        return [slice(int(a), int(b)) for a, b in zip(off[:-1], off[1:])]

    def _chain_tuples(self, size):
        """Consecutive runs of ``size`` beads within each chain, int64 (m, size)."""
        rows = [np.arange(s.start, s.stop - size + 1)[:, None] + np.arange(size)
                for s in self.chain_slices() if s.stop - s.start >= size]
        return np.concatenate(rows).astype(np.int64) if rows else np.zeros((0, size), dtype=np.int64)

    def _index_array(self, value, name, size):
        arr = as_array(value, name, shape=(None, size), dtype=np.int64)
        if arr.size and (arr.min() < 0 or arr.max() >= self.n_beads):
            raise InputError(f"{name}: bead indices must lie in [0, {self.n_beads - 1}]")
        return arr

    def kinetic_energy(self):
        """Total kinetic energy, epsilon."""
        return 0.5 * float(np.sum(self.masses[:, None] * self.velocities ** 2))

    def copy(self):
        """Deep copy of the state."""
        return System(self.positions.copy(), self.chain_lengths.copy(), self.velocities.copy(),
                      self.masses.copy(), self.types.copy(), self.bonds.copy(), self.bond_types.copy(),
                      self.angles.copy(), self.angle_types.copy(),
                      Box(None if self.box.lengths is None else self.box.lengths.copy()))
