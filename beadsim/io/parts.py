"""A trajectory that survives being killed at any moment: one part file per checkpoint interval.

HDF5 (like most binary trajectory formats) is not crash-safe: a process killed
while appending can leave a file that no longer opens, taking every earlier
frame with it. :class:`PartedTrajectory` therefore never appends to a file that
already holds frames a checkpoint relies on:

* frames go to a *part* file in ``<stem>_parts/`` beside the trajectory (same
  format as the trajectory); at each checkpoint the open part is flushed,
  ``fsync``-ed and closed (*sealed*), and the checkpoint records the
  :class:`manifest <PartedTrajectory.manifest>`: the frames of the *base* file
  (the trajectory itself, holding the frames of earlier invocations) and the
  name and frame count of every sealed part;
* when the run ends, base and parts are joined into a new base that replaces
  the old one atomically (:mod:`beadsim.io._atomic`); a second checkpoint
  records the joined base, and only then are the parts deleted;
* on resume, :meth:`PartedTrajectory.resume` keeps exactly what the
  checkpoint's manifest names: parts written after it (sealed or half
  written) are deleted, a base holding more frames than recorded (a kill
  between the join and the checkpoint that records it) is cut back with an
  atomic rewrite, and a trajectory file the manifest names no frames of is
  deleted unread (it may be broken beyond opening).

So a kill at any moment loses no frame the checkpoint covers and the resumed
run duplicates none. The frame order on disk is base, then parts in order.
"""

import logging
import os
import re
import shutil

import mdtraj

from ..errors import CheckpointError, OutputError
from ._atomic import fsync_directory, replacing_path
from .safety import refusing_pickles
from .trajectory import WRITE_ERRORS, TrajectoryWriter, _format_for, count_frames, topology_path, truncate_trajectory

__all__ = ["PartedTrajectory", "parts_folder", "EMPTY_MANIFEST"]

logger = logging.getLogger(__name__)

#: Manifest of a trajectory with no frames yet.
EMPTY_MANIFEST = {"base_frames": 0, "parts": []}

_PART = re.compile(r"part_(\d{6})\.\w+")

def parts_folder(path):
    """Folder of the part files of the trajectory at ``path``: ``<stem>_parts`` beside it."""
    path = os.fspath(path)
    stem = os.path.splitext(os.path.basename(path))[0]
    return os.path.join(os.path.dirname(os.path.abspath(path)), f"{stem}_parts")


def _check_manifest(manifest, where):
    """Validate a manifest read from a checkpoint; return it as ``(base_frames, [(name, n), ...])``."""
    try:
        base = manifest["base_frames"]
        parts = [(str(name), n) for name, n in manifest["parts"]]
    except (KeyError, TypeError, ValueError):
        raise CheckpointError(f"{where}: the trajectory record of the checkpoint is malformed: {manifest!r}") from None
    counts = [base] + [n for _, n in parts]
    if not all(isinstance(n, int) and not isinstance(n, bool) and n >= 0 for n in counts) or \
            not all(_PART.fullmatch(name) for name, _ in parts):
        raise CheckpointError(f"{where}: the trajectory record of the checkpoint is malformed: {manifest!r}")
    return base, parts


class PartedTrajectory:
    """Observer writing frames into sealed parts, joined into one trajectory file at the end.

    Parameters
    ----------
    path : str or os.PathLike
        The trajectory file (its extension selects the format, as for
        :class:`~beadsim.io.trajectory.TrajectoryWriter`).
    topology : mdtraj.Topology
    length_scale_nm : float
        Size of sigma in nm.
    box_lengths : array_like of float, shape (3,), optional
        Periodic box edges in sigma; ``None`` for an open box.

    Notes
    -----
    The constructor starts a new, empty trajectory: it deletes a trajectory
    file and a parts folder left at ``path``. Use :meth:`resume` to continue
    from a checkpoint's manifest instead.
    """

    def __init__(self, path, topology, length_scale_nm=1.0, box_lengths=None, *, _manifest=None):
        self.path = os.fspath(path)
        self.folder = parts_folder(self.path)
        self._writer_args = (topology, length_scale_nm, box_lengths)
        TrajectoryWriter(self.path, *self._writer_args)  # checks the arguments; opens nothing
        self.topology = topology
        self._open_part = None
        if _manifest is None:
            if os.path.exists(self.path):
                os.remove(self.path)
            shutil.rmtree(self.folder, ignore_errors=True)
            _manifest = EMPTY_MANIFEST
        self.base_frames, self.parts = _check_manifest(_manifest, self.path)

    @classmethod
    def resume(cls, path, topology, length_scale_nm, box_lengths, manifest):
        """Continue the trajectory exactly as a checkpoint's manifest records it.

        Parts not named in the manifest (written after the checkpoint, sealed
        or not) are deleted; a base holding more frames than recorded is cut
        back atomically; a file at ``path`` when the manifest records no base
        frames is deleted without being read (whatever left it, even a file
        that no longer opens).

        Raises
        ------
        beadsim.errors.CheckpointError
            A base or part the checkpoint relies on is missing, cannot be read
            or holds fewer frames than recorded.
        """
        self = cls(path, topology, length_scale_nm, box_lengths, _manifest=manifest)
        named = {name for name, _ in self.parts}
        if os.path.isdir(self.folder):
            for entry in os.listdir(self.folder):
                if _PART.fullmatch(entry) and entry not in named or entry.startswith("."):
                    logger.info("%s: dropping %s, written after the checkpoint", self.folder, entry)
                    os.remove(os.path.join(self.folder, entry))
        for name, n in self.parts:
            part = os.path.join(self.folder, name)
            if not os.path.exists(part):
                raise CheckpointError(f"{part}: trajectory part recorded in the checkpoint is missing; "
                                      "its frames are lost (start the run again with --overwrite)")
        if not self.base_frames:
            if os.path.exists(self.path):  # never read: a broken file here must not stop the run
                logger.info("%s: dropping it, the checkpoint records no frames in it", self.path)
                os.remove(self.path)
            return self
        present = _frames_relied_on(self.path, self.base_frames)
        if present < self.base_frames:
            raise CheckpointError(f"{self.path}: holds {present} frames but the checkpoint records "
                                  f"{self.base_frames}; start the run again with --overwrite")
        if present > self.base_frames:
            logger.info("%s: cutting back from %d to %d frames (the checkpoint's count)", self.path, present,
                        self.base_frames)
            truncate_trajectory(self.path, self.base_frames, topology)
        return self

    @property
    def n_frames(self):
        """int: Frames in the base, the sealed parts and the open part."""
        open_frames = self._open_part.n_frames if self._open_part is not None else 0
        return self.base_frames + sum(n for _, n in self.parts) + open_frames

    def manifest(self):
        """dict: ``{"base_frames": int, "parts": [[name, n_frames], ...]}`` of what is sealed on disk."""
        return {"base_frames": self.base_frames, "parts": [[name, n] for name, n in self.parts]}

    def append(self, step, time, positions):
        """Write one frame into the open part (opening a new part first if none is open).

        Raises
        ------
        beadsim.errors.OutputError
            The part cannot be written (disk full, ...); frames sealed earlier are unaffected.
        """
        if self._open_part is None:
            last = max((int(_PART.fullmatch(name).group(1)) for name, _ in self.parts), default=0)
            suffix = os.path.splitext(self.path)[1]
            try:
                os.makedirs(self.folder, exist_ok=True)
            except OSError as exc:
                raise OutputError(f"{self.folder}: cannot create the trajectory parts folder "
                                  f"({exc.strerror or exc})") from None
            self._open_part = TrajectoryWriter(os.path.join(self.folder, f"part_{last + 1:06d}{suffix}"),
                                               *self._writer_args)
        self._open_part.append(step, time, positions)

    def seal(self):
        """Flush, ``fsync`` and close the open part; return the :meth:`manifest` to store in a checkpoint."""
        if self._open_part is not None:
            part, self._open_part = self._open_part, None
            part.close()
            self.parts.append((os.path.basename(part.path), part.n_frames))
            fsync_directory(self.folder)
        return self.manifest()

    def join(self):
        """Join base and sealed parts into the trajectory file (atomic replace); return the new manifest.

        The parts stay on disk until :meth:`discard_parts`, to be called once a
        checkpoint records the returned manifest.
        """
        self.seal()
        if not self.parts:
            return self.manifest()
        fmt = _format_for(self.path)
        sources = ([(self.path, self.base_frames)] if self.base_frames else []) + \
            [(os.path.join(self.folder, name), n) for name, n in self.parts]
        total, first_nm = 0, None
        try:
            with replacing_path(self.path) as tmp:
                handle = fmt.open_new(tmp, self.topology)
                for source, n in sources:
                    with refusing_pickles(source):
                        frames = fmt.read(source)
                    if len(frames) < n:
                        raise CheckpointError(f"{source}: holds {len(frames)} frames, {n} expected")
                    fmt.write(handle, frames.head(n), self.topology, total)
                    if first_nm is None:
                        first_nm = frames.xyz[:1] / fmt.nm_to_native
                    total += n
                fmt.flush_handle(handle)
                handle.close()
            if not fmt.stores_topology:
                with replacing_path(topology_path(self.path)) as tmp:
                    mdtraj.Trajectory(first_nm, self.topology).save_pdb(tmp)
        except WRITE_ERRORS as exc:
            raise OutputError(f"{self.path}: cannot join the trajectory parts ({_reason(exc)}); the parts and "
                              "the last checkpoint are intact: free space and continue with --resume") from None
        self.base_frames, self.parts = total, []
        return self.manifest()

    def discard_parts(self):
        """Delete the parts folder (after a checkpoint records the joined trajectory)."""
        shutil.rmtree(self.folder, ignore_errors=True)

    def close(self):
        """Close the open part without sealing it (its frames are not in any manifest)."""
        if self._open_part is not None:
            part, self._open_part = self._open_part, None
            part.close()


def _frames_relied_on(path, base_frames):
    """Frames in the base trajectory ``path`` that a checkpoint says holds ``base_frames`` (0 if absent).

    Raises
    ------
    beadsim.errors.CheckpointError
        The file cannot be read (cut short by a kill while a writer appended to it, or not a trajectory).
    """
    if not os.path.exists(path):
        return 0
    try:
        return count_frames(path)
    except (*WRITE_ERRORS, ValueError, EOFError) as exc:
        logger.debug("%s: unreadable: %s", path, exc)
        raise CheckpointError(f"{path}: the trajectory file cannot be read (it was cut short, or is not a "
                              f"trajectory), but the checkpoint relies on its first {base_frames} frames: start "
                              "the run again with --overwrite, or put back a good copy and --resume") from None


def _reason(exc):
    return getattr(exc, "strerror", None) or str(exc) or type(exc).__name__

