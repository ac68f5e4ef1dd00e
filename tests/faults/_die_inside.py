"""Run ``beadsim`` and SIGKILL this very process in the middle of a chosen write: the worst moments for a kill.

Usage: ``python _die_inside.py WHERE K beadsim-arguments...``, where the K-th time (1-based) the
program reaches WHERE, it kills itself:

``checkpoint``     half of a checkpoint's bytes are in its temporary file
``frame``          a frame was handed to the HDF5 library but not flushed (the part file is half written)
``sealed``         a trajectory part was sealed, its checkpoint not yet written
``table``          half of a table row is in the file
``join_written``   the joined trajectory is complete in its temporary file, not yet moved into place
``join_replaced``  the joined trajectory replaced the old one, the checkpoint recording it not yet written

If the run ends before the K-th time, it exits normally.
"""

import contextlib
import io
import os
import signal
import sys

import numpy as np

from beadsim import cli
from beadsim.io import checkpoint, parts, table
from beadsim.io.trajectory import _HDF5Format


def die():
    os.kill(os.getpid(), signal.SIGKILL)


class Counter:
    def __init__(self, k):
        self.k, self.n = k, 0

    def hit(self):
        self.n += 1
        return self.n == self.k


def main():
    where, k, args = sys.argv[1], int(sys.argv[2]), sys.argv[3:]
    count = Counter(k)
    if where == "checkpoint":
        class HalfSavez:
            def __getattr__(self, name):
                return getattr(np, name)

            def savez(self, file, **arrays):
                if not count.hit():
                    return np.savez(file, **arrays)
                buffer = io.BytesIO()
                np.savez(buffer, **arrays)
                data = buffer.getvalue()
                file.write(data[:len(data) // 2])
                file.flush()
                die()
        checkpoint.np = HalfSavez()
    elif where == "frame":
        write = _HDF5Format.write

        def frame_then_die(self, handle, frames, topology, first_index):
            write(self, handle, frames, topology, first_index)
            if count.hit():
                die()
        _HDF5Format.write = frame_then_die
    elif where == "sealed":
        seal = parts.PartedTrajectory.seal

        def seal_then_die(self):
            manifest = seal(self)
            if self.parts and count.hit():
                die()
            return manifest
        parts.PartedTrajectory.seal = seal_then_die
    elif where == "table":
        append = table.ScalarTable.append

        def half_row_then_die(self, step, values):
            if not count.hit():
                return append(self, step, values)
            append(self, step, values)
            self._file.flush()
            with open(self.path, "rb+") as fh:  # cut the row just written in half
                fh.seek(0, os.SEEK_END)
                size = fh.tell()
                fh.truncate(size - 20)
            die()
        table.ScalarTable.append = half_row_then_die
    elif where in ("join_written", "join_replaced"):
        replacing_path = parts.replacing_path

        @contextlib.contextmanager
        def replacing_then_die(path):
            if where == "join_written":
                with replacing_path(path) as tmp:
                    yield tmp
                    if count.hit():
                        die()
            else:
                with replacing_path(path) as tmp:
                    yield tmp
                if count.hit():
                    die()
        parts.replacing_path = replacing_then_die
    else:
        raise SystemExit(f"unknown place {where!r}")
    sys.exit(cli.main(args))


if __name__ == "__main__":
    main()
