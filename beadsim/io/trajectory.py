"""Trajectory output through mdtraj, one frame at a time, with truncation for resumed runs.

The file format follows the file name's extension:

========  ==============================  ======================================
suffix    format                          stored per frame
========  ==============================  ======================================
``.h5``   mdtraj's HDF5 format (default)  positions, time, unit cell; topology
                                          with bonds in the file
``.dcd``  DCD                             positions, unit cell
``.xtc``  XTC (compressed, 0.001 nm)      positions, time, step, unit cell
``.pdb``  PDB (one MODEL per frame)       positions (0.001 Angstrom), unit cell
                                          in the header; topology with bonds
========  ==============================  ======================================

Formats that hold no topology (DCD, XTC) get a ``topology.pdb`` written beside
them (see :func:`topology_path`), so ``mdtraj.load(path, top=topology_path(path))``
or simply :func:`load_trajectory` restores chains and bonds.

Units: positions are given in sigma and written in nm, multiplied by the
writer's ``length_scale_nm`` (the size of sigma in nm). The time is written as
given, in tau, into the file's time field (which mdtraj labels picoseconds);
mdtraj's HDF5 and XTC store it as float32, so the scalar table, not the
trajectory, is the exact record of time. Coordinates are float32 in every
format.
"""

import logging
import os

import mdtraj
import numpy as np
import tables
from mdtraj.formats import DCDTrajectoryFile, HDF5TrajectoryFile, PDBTrajectoryFile, XTCTrajectoryFile

from .._validate import as_array, positive
from ..errors import InputError, OutputError
from ._atomic import fsync_path, replacing_path
from .safety import refusing_pickles

__all__ = ["TrajectoryWriter", "truncate_trajectory", "count_frames", "load_trajectory", "topology_path",
           "SUPPORTED_SUFFIXES"]

logger = logging.getLogger(__name__)

#: Largest atom serial number a PDB file can hold (five digits); chain ends use one each.
_PDB_MAX_SERIAL = 99999
_RIGHT_ANGLES = np.array([90.0, 90.0, 90.0])

#: Errors a trajectory library raises when the disk is full or the file cannot be written.
WRITE_ERRORS = (OSError, tables.exceptions.HDF5ExtError)


def _write_failed(path, exc):
    """OutputError naming ``path`` and the cause of a failed write."""
    reason = getattr(exc, "strerror", None) or str(exc) or type(exc).__name__
    return OutputError(f"{path}: cannot write the trajectory ({reason}); frames covered by the last checkpoint "
                       "are intact: free space (or remove the cause) and continue with --resume")


def topology_path(path):
    """Return the path of the ``topology.pdb`` written beside a trajectory without topology.

    Parameters
    ----------
    path : str or os.PathLike
        Trajectory file.

    Returns
    -------
    str
        ``topology.pdb`` in the same folder as ``path``.
    """
    return os.path.join(os.path.dirname(os.path.abspath(path)), "topology.pdb")


class _Frames:
    """Frames in a format's own units: positions, times, steps and box edges.

    Attributes
    ----------
    xyz : numpy.ndarray, shape (n_frames, n_beads, 3), float32 or float64 (cast by the writer)
    time : numpy.ndarray or None, shape (n_frames,), float32, tau
    step : numpy.ndarray or None, shape (n_frames,), int32
    cell_lengths : numpy.ndarray or None, shape (n_frames, 3), float32
    """

    def __init__(self, xyz, time=None, step=None, cell_lengths=None):
        self.xyz = xyz
        self.time = time
        self.step = step
        self.cell_lengths = cell_lengths

    def __len__(self):
        return len(self.xyz)

    def head(self, n_frames):
        """Return the first ``n_frames`` frames."""
        return _Frames(*(None if a is None else a[:n_frames] for a in (self.xyz, self.time, self.step,
                                                                        self.cell_lengths)))


class _Format:
    """How one file format is written, flushed, counted, truncated and continued.

    Contract for subclasses:

    1. Set ``suffix`` (lower case, with dot), ``nm_to_native`` (length unit
       factor from nm to the format's unit) and ``stores_topology``.
    2. Implement ``open_new(path, topology)`` returning a handle open for
       writing, ``write(handle, frames, topology, first_index)`` writing
       :class:`_Frames` given in native units, ``read(path)`` returning all
       frames in native units, and ``flush_handle(handle)``.
    3. Continuing and truncating default to rewriting the kept frames into a
       temporary file that atomically replaces the original
       (:meth:`open_continued` checks the bead count and unit cell first,
       :meth:`truncate`); formats that can append in place override both.
    """

    suffix = ""
    nm_to_native = 1.0
    stores_topology = False

    def open_new(self, path, topology):
        raise NotImplementedError

    def write(self, handle, frames, topology, first_index):
        raise NotImplementedError

    def read(self, path):
        raise NotImplementedError

    def flush_handle(self, handle):
        raise NotImplementedError

    def count(self, path):
        """Number of frames in the file at ``path``."""
        return len(self._read_or_empty(path))

    def _read_or_empty(self, path):
        """Read all frames; an empty file (a trajectory cut back to zero frames) has none."""
        if os.path.getsize(path) == 0:
            return _Frames(np.zeros((0, 0, 3), dtype=np.float32))
        return self.read(path)

    def _rewrite(self, path, topology, n_keep, keep_open):
        """Replace ``path`` by its first ``n_keep`` frames (all if None); return ``(handle or None, n_kept)``.

        With ``keep_open`` the returned handle stays open on the new file, so
        further frames follow the kept ones.
        """
        frames = self._read_or_empty(path)
        if n_keep is None:
            n_keep = len(frames)
        elif n_keep > len(frames):
            raise InputError(f"{path}: cannot keep {n_keep} frames, the file has only {len(frames)}")
        handle = None
        with replacing_path(path) as tmp:
            if n_keep:
                handle = self.open_new(tmp, topology)
                self.write(handle, frames.head(n_keep), topology, 0)
                self.flush_handle(handle)
                if not keep_open:
                    handle.close()
        if keep_open and handle is None:
            handle = self.open_new(path, topology)
        return handle, n_keep

    def open_continued(self, path, topology, periodic):
        """Open an existing file so new frames follow its last one; return ``(handle, n_frames_present)``."""
        frames = self._read_or_empty(path)
        if len(frames):
            _check_continuable(path, frames.xyz.shape[1], frames.cell_lengths is not None, topology, periodic)
        return self._rewrite(path, topology, None, keep_open=True)

    def truncate(self, path, n_frames, topology):
        """Cut the file at ``path`` back to its first ``n_frames`` frames."""
        self._rewrite(path, topology, n_frames, keep_open=False)


def _check_continuable(path, n_beads_found, has_cell, topology, periodic):
    """Raise InputError unless frames of ``topology`` (periodic or not) can follow those in ``path``."""
    if n_beads_found != topology.n_atoms:
        raise InputError(f"{path}: cannot continue, the file has {n_beads_found} beads per frame "
                         f"but the topology has {topology.n_atoms}")
    if has_cell != periodic:
        raise InputError(f"{path}: cannot continue, the file {'has a' if has_cell else 'has no'} unit cell "
                         f"but the run is {'periodic' if periodic else 'in an open box'}")


class _HDF5Format(_Format):
    """mdtraj's HDF5 format: topology in the file, appends in place, truncates by an atomic rewrite."""

    suffix = ".h5"
    stores_topology = True

    def open_new(self, path, topology):
        handle = HDF5TrajectoryFile(path, "w")
        handle.topology = topology
        return handle

    def write(self, handle, frames, topology, first_index):
        cell = frames.cell_lengths
        handle.write(frames.xyz, time=frames.time, cell_lengths=cell,
                     cell_angles=None if cell is None else np.broadcast_to(_RIGHT_ANGLES, cell.shape))

    def read(self, path):
        with refusing_pickles(path), HDF5TrajectoryFile(path) as handle:
            data = handle.read()
        return _Frames(data.coordinates, data.time, None, data.cell_lengths)

    def flush_handle(self, handle):
        handle.flush()

    def count(self, path):
        if os.path.getsize(path) == 0:  # cut back to zero frames
            return 0
        with refusing_pickles(path), tables.open_file(path, "r") as h5:
            return h5.root.coordinates.nrows if "/coordinates" in h5 else 0

    def open_continued(self, path, topology, periodic):
        if os.path.getsize(path) == 0:  # cut back to zero frames
            return self.open_new(path, topology), 0
        with refusing_pickles(path), tables.open_file(path, "r") as h5:
            present = h5.root.coordinates.nrows if "/coordinates" in h5 else 0
            if present:
                _check_continuable(path, h5.root.coordinates.shape[1], "/cell_lengths" in h5, topology, periodic)
        with refusing_pickles(path):
            handle = HDF5TrajectoryFile(path, "a")
            if handle.topology is None:
                handle.topology = topology
        return handle, present


class _DCDFormat(_Format):
    """DCD: positions and unit cell in Angstrom; no time, no topology."""

    suffix = ".dcd"
    nm_to_native = 10.0

    def open_new(self, path, topology):
        return DCDTrajectoryFile(path, "w")

    def write(self, handle, frames, topology, first_index):
        cell = frames.cell_lengths
        handle.write(np.asarray(frames.xyz, dtype=np.float32), cell_lengths=cell,
                     cell_angles=None if cell is None else np.broadcast_to(_RIGHT_ANGLES, cell.shape))

    def read(self, path):
        with DCDTrajectoryFile(path) as handle:
            xyz, cell_lengths, _ = handle.read()
        return _Frames(xyz, None, None, cell_lengths)

    def flush_handle(self, handle):
        """The DCD writer hands every frame to the operating system at once; nothing to flush."""


class _XTCFormat(_Format):
    """XTC: compressed positions in nm, time, step, box; no topology. A box of zeros marks an open system."""

    suffix = ".xtc"

    def open_new(self, path, topology):
        return XTCTrajectoryFile(path, "w")

    def write(self, handle, frames, topology, first_index):
        n = len(frames)
        box = np.zeros((n, 3, 3), dtype=np.float32)
        if frames.cell_lengths is not None:
            box[:, [0, 1, 2], [0, 1, 2]] = frames.cell_lengths
        handle.write(frames.xyz, time=frames.time, step=frames.step, box=box)

    def read(self, path):
        with XTCTrajectoryFile(path) as handle:
            xyz, time, step, box = handle.read()
        cell = None if box is None else np.ascontiguousarray(box[:, [0, 1, 2], [0, 1, 2]])
        return _Frames(xyz, time, step, cell)

    def flush_handle(self, handle):
        handle.flush()


class _PDBFormat(_Format):
    """PDB: one MODEL per frame, positions in Angstrom, unit cell in the header, bonds as CONECT records."""

    suffix = ".pdb"
    nm_to_native = 10.0
    stores_topology = True

    def open_new(self, path, topology):
        return PDBTrajectoryFile(path, "w")

    def write(self, handle, frames, topology, first_index):
        for k in range(len(frames)):
            cell = None if frames.cell_lengths is None else frames.cell_lengths[k]
            handle.write(frames.xyz[k], topology, modelIndex=first_index + k + 1, unitcell_lengths=cell,
                         unitcell_angles=None if cell is None else _RIGHT_ANGLES)

    def read(self, path):
        handle = PDBTrajectoryFile(path)
        try:
            xyz = np.asarray(handle.positions, dtype=np.float64)
            lengths = handle.unitcell_lengths
        finally:
            handle.close()
        cell = None if lengths is None else np.tile(np.asarray(lengths, dtype=np.float32), (len(xyz), 1))
        return _Frames(xyz, None, None, cell)

    def flush_handle(self, handle):
        # mdtraj's PDB writer has no flush of its own; its text file object is ``_file``.
        handle._file.flush()


_FORMATS = {fmt.suffix: fmt for fmt in (_HDF5Format(), _DCDFormat(), _XTCFormat(), _PDBFormat())}

#: File name extensions the trajectory writer understands.
SUPPORTED_SUFFIXES = tuple(_FORMATS)


def _format_for(path):
    suffix = os.path.splitext(os.fspath(path))[1].lower()
    try:
        return _FORMATS[suffix]
    except KeyError:
        raise InputError(f"{os.fspath(path)}: unknown trajectory format {suffix!r}; "
                         f"choose one of {', '.join(SUPPORTED_SUFFIXES)}") from None


def _check_pdb_size(topology, path):
    """PDB serial numbers have five digits; refuse systems whose numbering would wrap (bonds would be lost)."""
    if topology.n_atoms + topology.n_chains > _PDB_MAX_SERIAL:
        raise InputError(f"{path}: {topology.n_atoms} beads in {topology.n_chains} chains are too many for PDB "
                         f"numbering (at most {_PDB_MAX_SERIAL} beads plus chains); write the trajectory as .h5")


class TrajectoryWriter:
    """Observer writing bead positions frame by frame through mdtraj.

    Parameters
    ----------
    path : str or os.PathLike
        Trajectory file; its extension selects the format (one of
        :data:`SUPPORTED_SUFFIXES`, default choice ``.h5``).
    topology : mdtraj.Topology
        Chains, beads and bonds, e.g. from :func:`beadsim.io.topology.make_topology`.
    length_scale_nm : float
        Size of sigma in nm (> 0); positions are multiplied by it.
    box_lengths : array_like of float, shape (3,), optional
        Edges of the periodic box in sigma, written as the unit cell (in nm,
        right angles). ``None`` for an open (non-periodic) system.
    mode : {"w", "a"}
        ``"w"`` starts a new file; ``"a"`` continues an existing one (after
        :func:`truncate_trajectory` when resuming from a checkpoint), or starts
        one if there is none.

    Notes
    -----
    The constructor only checks and stores settings; the file is opened by the
    first :meth:`append`. Continuing a DCD, XTC or PDB file rewrites its frames
    once into a new file that atomically replaces the old one, because mdtraj
    cannot append to these formats; HDF5 files are extended in place.
    """

    def __init__(self, path, topology, length_scale_nm=1.0, box_lengths=None, mode="w"):
        self.path = os.fspath(path)
        self._format = _format_for(self.path)
        if not isinstance(topology, mdtraj.Topology):
            raise InputError(f"topology: expected an mdtraj.Topology, got {type(topology).__name__}")
        if topology.n_atoms == 0:
            raise InputError("topology: has no beads")
        if mode not in ("w", "a"):
            raise InputError(f"mode: expected 'w' or 'a', got {mode!r}")
        if self._format.suffix == ".pdb" or not self._format.stores_topology:
            _check_pdb_size(topology, self.path)
        self.topology = topology
        self.length_scale_nm = positive(length_scale_nm, "length_scale_nm")
        if box_lengths is None:
            self.box_lengths = None
        else:
            self.box_lengths = as_array(box_lengths, "box_lengths", shape=(3,))
            for axis in range(3):
                positive(self.box_lengths[axis], f"box_lengths[{axis}]")
        self.mode = mode
        self._handle = None
        self._n_frames = 0

    @property
    def n_frames(self):
        """int: Frames in the file, counting those present before a continued run."""
        return self._n_frames

    def _open(self, first_xyz_nm):
        if self.mode == "a" and os.path.exists(self.path):
            self._handle, self._n_frames = self._format.open_continued(self.path, self.topology,
                                                                      self.box_lengths is not None)
        else:
            self._handle, self._n_frames = self._format.open_new(self.path, self.topology), 0
        if not self._format.stores_topology:
            with replacing_path(topology_path(self.path)) as tmp:
                mdtraj.Trajectory(first_xyz_nm[np.newaxis], self.topology).save_pdb(tmp)
        logger.debug("trajectory %s opened with %d frames present", self.path, self._n_frames)

    def reset(self):
        """Start the trajectory afresh: close it, delete the file, and create a new one at the next append."""
        self.close()
        if os.path.exists(self.path):
            os.remove(self.path)
        self._n_frames = 0
        self.mode = "w"

    def append(self, step, time, positions):
        """Write one frame.

        Parameters
        ----------
        step : int
            Step count of the frame (>= 0); stored by the XTC format only.
        time : float
            Simulated time in tau, stored as given in the file's time field
            (HDF5 and XTC).
        positions : array_like of float64, shape (n_beads, 3)
            Bead positions in sigma (unwrapped or wrapped, as the run keeps
            them); written in nm.
        """
        if isinstance(step, bool) or not isinstance(step, (int, np.integer)) or not 0 <= step <= np.iinfo(np.int32).max:
            raise InputError(f"step: expected an integer in [0, {np.iinfo(np.int32).max}], got {step!r}")
        time = positive(time, "time", allow_zero=True)
        xyz_nm = as_array(positions, "positions", shape=(self.topology.n_atoms, 3)) * self.length_scale_nm
        scale = self._format.nm_to_native
        cell = None if self.box_lengths is None else (self.box_lengths * (self.length_scale_nm * scale))[np.newaxis]
        frames = _Frames((xyz_nm * scale)[np.newaxis], np.array([time], dtype=np.float32),
                         np.array([step], dtype=np.int32), None if cell is None else cell.astype(np.float32))
        try:
            if self._handle is None:
                self._open(xyz_nm)
            self._format.write(self._handle, frames, self.topology, self._n_frames)
        except WRITE_ERRORS as exc:
            raise _write_failed(self.path, exc) from None
        self._n_frames += 1

    def flush(self):
        """Hand written frames to the operating system and force them to disk.

        Raises
        ------
        beadsim.errors.OutputError
            The data could not be written (disk full, ...).
        """
        if self._handle is not None:
            try:
                self._format.flush_handle(self._handle)
                fsync_path(self.path)
            except WRITE_ERRORS as exc:
                raise _write_failed(self.path, exc) from None

    def close(self):
        """Flush and close the file; calling it again does nothing.

        The file is closed even when the final flush fails; the failure is then
        raised as :class:`~beadsim.errors.OutputError`.
        """
        if self._handle is not None:
            handle, self._handle = self._handle, None
            try:
                self._format.flush_handle(handle)
                handle.close()
                fsync_path(self.path)
            except WRITE_ERRORS as exc:
                raise _write_failed(self.path, exc) from None

    def __enter__(self):
        return self

    def __exit__(self, *exc_info):
        self.close()


def truncate_trajectory(path, n_frames, topology=None):
    """Cut a trajectory back to its first ``n_frames`` frames.

    Parameters
    ----------
    path : str or os.PathLike
        Trajectory written by :class:`TrajectoryWriter`.
    n_frames : int
        Frames to keep (>= 0, at most the number present), normally the
        frame count recorded in the checkpoint the run continues from.
    topology : mdtraj.Topology, optional
        Needed only for PDB files, which repeat it in every frame; defaults to
        the topology read from the file itself.

    Notes
    -----
    The file is rewritten: the kept frames go to a temporary file that
    atomically replaces the original, so a crash during truncation leaves the
    old file.
    """
    if isinstance(n_frames, bool) or not isinstance(n_frames, (int, np.integer)) or n_frames < 0:
        raise InputError(f"n_frames: expected an integer >= 0, got {n_frames!r}")
    name = os.fspath(path)
    fmt = _format_for(name)
    if not os.path.exists(name):
        raise InputError(f"{name}: trajectory to truncate does not exist")
    if fmt.stores_topology and topology is None and os.path.getsize(name) > 0:
        with refusing_pickles(name):
            topology = mdtraj.load_topology(name)
    fmt.truncate(name, int(n_frames), topology)


def count_frames(path):
    """Return the number of frames in a trajectory file.

    Parameters
    ----------
    path : str or os.PathLike
        Trajectory in one of :data:`SUPPORTED_SUFFIXES`.

    Returns
    -------
    int
    """
    name = os.fspath(path)
    fmt = _format_for(name)
    if not os.path.exists(name):
        raise InputError(f"{name}: trajectory does not exist")
    return fmt.count(name)


def load_trajectory(path):
    """Load a trajectory with its topology, wherever that is stored.

    Parameters
    ----------
    path : str or os.PathLike
        Trajectory in one of :data:`SUPPORTED_SUFFIXES`; for DCD and XTC the
        ``topology.pdb`` beside it (:func:`topology_path`) is used.

    Returns
    -------
    mdtraj.Trajectory
        Positions in nm; ``time`` in tau where the format stores time.
    """
    name = os.fspath(path)
    fmt = _format_for(name)
    with refusing_pickles(name):
        if fmt.stores_topology:
            return mdtraj.load(name)
        return mdtraj.load(name, top=topology_path(name))
