"""Output of runs: trajectories (through mdtraj), scalar tables (CSV) and checkpoints (npz).

The writers are observers of the run loop with one small interface:
``reset()``, ``append(step, ...)``, ``flush()``, ``close()``. Each supports
continuing a run from a checkpoint: cut the file back to the checkpoint with
:func:`truncate_trajectory` / :func:`truncate_table`, then open the writer with
``mode="a"``. Runs write their trajectory through :class:`PartedTrajectory`,
which survives being killed at any moment (:mod:`beadsim.io.parts`). Reads of
users' HDF5 files go through :func:`refusing_pickles` (:mod:`beadsim.io.safety`).
"""

from .checkpoint import read_checkpoint, write_checkpoint
from .parts import PartedTrajectory, parts_folder
from .safety import refusing_pickles
from .table import ScalarTable, read_table, truncate_table
from .topology import make_topology
from .trajectory import (SUPPORTED_SUFFIXES, TrajectoryWriter, count_frames, load_trajectory, topology_path,
                         truncate_trajectory)

__all__ = [
    "make_topology",
    "TrajectoryWriter", "truncate_trajectory", "count_frames", "load_trajectory", "topology_path",
    "SUPPORTED_SUFFIXES",
    "ScalarTable", "truncate_table", "read_table",
    "write_checkpoint", "read_checkpoint",
    "PartedTrajectory", "parts_folder", "refusing_pickles",
]
