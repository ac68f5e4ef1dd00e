"""Verlet-list state kept between kernel calls."""

import numpy as np

from ..errors import InputError
from ..kernels.integrate import refresh_list
from .threads import threads_for


class NeighborList:
    """Full Verlet list built from cells, rebuilt when a bead moves more than skin / 2.

    Parameters
    ----------
    n_beads : int
    cutoff : float
        Largest pair cutoff, sigma.
    skin : float
        Extra list radius, sigma.
    excl_start, excl : int64 arrays
        Excluded pairs in compressed rows.
    box_lengths : float64 (3,) or None
        Periodic box edges; the list radius must not exceed half of any.
    """

    def __init__(self, n_beads, cutoff, skin, excl_start, excl, box_lengths=None):
        self.cutoff = float(cutoff)
        # without pair interactions the list stays empty and is never rebuilt
        self.active = self.cutoff > 0
        self.skin = float(skin) if self.active else np.inf
        self.r_list = self.cutoff + float(skin)
        if box_lengths is not None and self.r_list > 0.5 * float(np.min(box_lengths)):
            raise InputError(f"cutoff + skin = {self.r_list:.3f} sigma exceeds half the smallest box edge "
                             f"({0.5 * float(np.min(box_lengths)):.3f} sigma); use a larger box or shorter cutoff")
        self.excl_start = excl_start
        self.excl = excl
        self.start = np.zeros(n_beads + 1, dtype=np.int64)
        self.nbr = np.zeros(max(64, 16 * n_beads), dtype=np.int32)  # grows on demand
        self.ref = np.zeros((n_beads, 3))

    def build(self, positions, box_lengths, periodic):
        """Rebuild the list around ``positions`` (float64 (n, 3), sigma)."""
        if not self.active:
            return
        with threads_for(len(positions)):
            self.nbr = refresh_list(positions, box_lengths, periodic, self.r_list, self.excl_start, self.excl,
                                    self.start, self.nbr, self.ref)

    @property
    def n_pairs(self):
        """Number of listed pairs (each is stored under both beads)."""
        return int(self.start[-1]) // 2
