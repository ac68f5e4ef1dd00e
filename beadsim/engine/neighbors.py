"""Verlet-list state kept between kernel calls."""

import numpy as np

from ..errors import InputError
from ..kernels.integrate import refresh_list
from ..kernels.neighbors import MAX_BLOCKS
from .threads import threads_for


class NeighborList:
    """Half Verlet list built from cells, rebuilt when a bead moves more than skin / 2.

    The list numbers beads in cell order (see :mod:`beadsim.kernels.neighbors`);
    ``order`` maps that numbering to the user's, which every other array keeps.

    Parameters
    ----------
    types : int64 (n,)
        Bead types.
    cutoff : float
        Largest pair cutoff, sigma.
    skin : float
        Extra list radius, sigma.
    excl_start, excl : int64 arrays
        Excluded pairs in compressed rows.
    box_lengths : float64 (3,) or None
        Periodic box edges; the list radius must not exceed half of any.
    """

    def __init__(self, types, cutoff, skin, excl_start, excl, box_lengths=None):
        n_beads = len(types)
        self.cutoff = float(cutoff)
        # without pair interactions the list stays empty and is never rebuilt
        self.active = self.cutoff > 0
        self.skin = float(skin) if self.active else np.inf
        self.r_list = self.cutoff + float(skin)
        if box_lengths is not None and self.r_list > 0.5 * float(np.min(box_lengths)):
            raise InputError(f"cutoff + skin = {self.r_list:.3f} sigma exceeds half the smallest box edge "
                             f"({0.5 * float(np.min(box_lengths)):.3f} sigma); use a larger box or shorter cutoff")
        self.types = types
        self.excl_start = excl_start
        self.excl = excl
        # the list tuple of beadsim.kernels.integrate.refresh_list; nbr grows on demand
        self.arrays = (np.arange(n_beads, dtype=np.int64), np.zeros(n_beads + 1, dtype=np.int64),
                       np.zeros(max(4096, 8 * n_beads), dtype=np.int32), np.zeros((n_beads, 3)),
                       np.zeros((n_beads, 3)), np.array(types, dtype=np.int64),
                       np.array([0] + [n_beads] * MAX_BLOCKS, dtype=np.int64), np.zeros(MAX_BLOCKS, dtype=np.int64), np.array([0, 1] + [1] * MAX_BLOCKS, dtype=np.int64),
                       np.array([1, 1], dtype=np.int64))
        self.ref = np.zeros((n_beads, 3))

    def build(self, positions, box_lengths, periodic):
        """Rebuild the list around ``positions`` (float64 (n, 3), sigma)."""
        if not self.active:
            return
        with threads_for(len(positions)):
            self.arrays = refresh_list(positions, box_lengths, periodic, self.r_list, self.excl_start, self.excl,
                                       self.types, self.arrays, self.ref)

    @property
    def n_pairs(self):
        """Number of listed pairs."""
        return int(self.arrays[1][-1])
