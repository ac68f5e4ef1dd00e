"""Scalar observables per step as a plain CSV table.

The first line names the columns, ``step`` first; every later line is one
record. Floats are written with :func:`repr`, the shortest text that reads back
to the identical float64, so a run that is stopped, truncated with
:func:`truncate_table` and continued produces the same bytes as one that never
stopped. Units are those of the quantities themselves (reduced Lennard-Jones
units: time in tau, energies in epsilon, temperatures in epsilon/k_B).
"""

import contextlib
import logging
import os
import re
from collections.abc import Mapping

import numpy as np
import pandas as pd

from ..errors import InputError, OutputError
from ._atomic import fsync_path, replacing

__all__ = ["ScalarTable", "truncate_table", "read_table"]

logger = logging.getLogger(__name__)

_SEPARATOR = ","


def _format_value(value, column):
    """Text of one table cell: integers exactly, floats by ``repr`` (round-trip exact)."""
    if isinstance(value, (bool, np.bool_)):
        raise InputError(f"values[{column!r}]: expected a number, got a bool")
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    try:
        return repr(float(value))
    except (TypeError, ValueError):
        raise InputError(f"values[{column!r}]: expected a number, got {value!r}") from None


def _write_failed(path, exc):
    """OutputError naming ``path`` and the cause of a failed write."""
    return OutputError(f"{path}: cannot write the table ({exc.strerror or exc}); rows covered by the last "
                       "checkpoint are intact: free space (or remove the cause) and continue with --resume")


def _check_columns(columns):
    """Validate the value column names; return them as a tuple."""
    if isinstance(columns, str):
        raise InputError("columns: expected a sequence of column names, got a single string")
    columns = tuple(columns)
    if not columns:
        raise InputError("columns: at least one value column is needed")
    for name in columns:
        if not isinstance(name, str) or not re.fullmatch(r"[a-z][a-z0-9_]*", name):
            raise InputError(f"columns: names must be lower_snake_case words, got {name!r}")
    if "step" in columns:
        raise InputError("columns: 'step' is always the first column and must not be listed")
    if len(set(columns)) != len(columns):
        raise InputError(f"columns: duplicate names in {columns}")
    return columns


class ScalarTable:
    """Observer writing one CSV row of scalar values per recorded step.

    Parameters
    ----------
    path : str or os.PathLike
        CSV file to write.
    columns : sequence of str
        Names of the value columns in order, e.g. ``("time",
        "potential_energy", "kinetic_energy", "temperature")``. ``step`` is
        added in front automatically.
    mode : {"w", "a"}
        ``"w"`` starts a new table (replacing any file at ``path``); ``"a"``
        continues an existing table whose header must equal these columns (or
        starts one if there is no file). To resume after a crash, first cut the
        table back with :func:`truncate_table`.

    Notes
    -----
    The constructor only stores settings; the file is opened by the first
    :meth:`reset` or :meth:`append`. The file is line buffered, so a crash
    loses at most the record being written; :meth:`flush` also forces the
    data to disk (``fsync``), which the run loop does before each checkpoint.
    """

    def __init__(self, path, columns, mode="w"):
        if mode not in ("w", "a"):
            raise InputError(f"mode: expected 'w' or 'a', got {mode!r}")
        self.path = os.fspath(path)
        self.columns = _check_columns(columns)
        self.mode = mode
        self._file = None

    @property
    def header(self):
        """str: The header line (without newline)."""
        return _SEPARATOR.join(("step",) + self.columns)

    def _open(self, mode):
        if mode == "a" and os.path.exists(self.path) and os.path.getsize(self.path) > 0:
            with open(self.path, encoding="utf-8", newline="") as fh:
                found = fh.readline().rstrip("\r\n")
            if found != self.header:
                raise InputError(f"{self.path}: cannot continue this table, its columns are {found!r} "
                                 f"but the run records {self.header!r}")
            self._file = open(self.path, "a", buffering=1, encoding="utf-8", newline="")
        else:
            self._file = open(self.path, "w", buffering=1, encoding="utf-8", newline="")
            self._file.write(self.header + "\n")
        logger.debug("scalar table %s opened (mode %s)", self.path, mode)

    def reset(self):
        """Start the table afresh: discard any existing rows and write the header."""
        self.close()
        self._open("w")

    def append(self, step, values):
        """Write one row.

        Parameters
        ----------
        step : int
            Step count of the record (>= 0).
        values : mapping of str to float, or sequence of float
            One number per value column: a mapping with exactly the column
            names as keys, or a sequence in column order. Integers are written
            as integers, everything else as float64 via ``repr``.
        """
        if isinstance(step, (bool, np.bool_)) or not isinstance(step, (int, np.integer)) or step < 0:
            raise InputError(f"step: expected an integer >= 0, got {step!r}")
        if isinstance(values, Mapping):
            if set(values) != set(self.columns):
                missing = sorted(set(self.columns) - set(values))
                extra = sorted(set(values) - set(self.columns))
                raise InputError(f"values: keys must be the table's columns; missing {missing}, unexpected {extra}")
            row = [values[name] for name in self.columns]
        else:
            row = list(values)
            if len(row) != len(self.columns):
                raise InputError(f"values: expected {len(self.columns)} numbers for columns {self.columns}, "
                                 f"got {len(row)}")
        line = _SEPARATOR.join([str(int(step))] + [_format_value(v, c) for v, c in zip(row, self.columns)])
        try:
            if self._file is None:
                self._open(self.mode)
            self._file.write(line + "\n")
        except OSError as exc:
            raise _write_failed(self.path, exc) from None

    def flush(self):
        """Push written rows to the operating system and force them to disk.

        Raises
        ------
        beadsim.errors.OutputError
            The rows could not be written (disk full, ...).
        """
        if self._file is not None:
            try:
                self._file.flush()
                fsync_path(self.path)
            except OSError as exc:
                raise _write_failed(self.path, exc) from None

    def close(self):
        """Flush and close the file; calling it again does nothing.

        The file is closed even when the final flush fails; the failure is then
        raised as :class:`~beadsim.errors.OutputError`.
        """
        if self._file is not None:
            fh, self._file = self._file, None
            try:
                fh.flush()
                fsync_path(self.path)
            except OSError as exc:
                raise _write_failed(self.path, exc) from None
            finally:
                with contextlib.suppress(OSError):  # a failed flush fails again here; reported above
                    fh.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc_info):
        self.close()


def truncate_table(path, last_step):
    """Cut a table back to the rows recorded at or before ``last_step``.

    The header and every complete row with ``step <= last_step`` are kept; an
    incomplete final line (cut short by a crash) is dropped. The file is
    rewritten atomically, so a crash during truncation leaves the old table.

    Parameters
    ----------
    path : str or os.PathLike
        A table written by :class:`ScalarTable`.
    last_step : int
        Largest step count to keep (>= 0), normally the step of the checkpoint
        the run continues from.

    Returns
    -------
    int
        Number of data rows kept.
    """
    if isinstance(last_step, (bool, np.bool_)) or not isinstance(last_step, (int, np.integer)) or last_step < 0:
        raise InputError(f"last_step: expected an integer >= 0, got {last_step!r}")
    name = os.fspath(path)
    try:
        with open(name, encoding="utf-8", newline="") as fh:
            lines = fh.readlines()
    except FileNotFoundError:
        raise InputError(f"{name}: table to truncate does not exist") from None
    if not lines or not lines[0].startswith("step" + _SEPARATOR):
        raise InputError(f"{name}: not a beadsim scalar table (the first line must start with 'step,')")
    n_fields = lines[0].count(_SEPARATOR) + 1
    kept = [lines[0]]
    for number, line in enumerate(lines[1:], start=2):
        complete = line.endswith("\n") and line.count(_SEPARATOR) + 1 == n_fields
        if not complete:
            if number == len(lines):
                logger.info("%s: dropping incomplete last line %d", name, number)
                break
            raise InputError(f"{name}, line {number}: expected {n_fields} comma-separated fields, got {line!r}")
        try:
            step = int(line.split(_SEPARATOR, 1)[0])
        except ValueError:
            raise InputError(f"{name}, line {number}: step {line.split(_SEPARATOR, 1)[0]!r} is not an integer") from None
        if step <= last_step:
            kept.append(line)
    with replacing(name, binary=False) as fh:
        fh.writelines(kept)
    return len(kept) - 1


def _column_array(texts):
    """Parse one column's cells: int64 if every cell is an integer, else float64 parsed exactly."""
    try:
        return np.array([int(t) for t in texts], dtype=np.int64)
    except ValueError:
        return np.array([float(t) for t in texts], dtype=np.float64)


def read_table(path):
    """Read a scalar table into a DataFrame.

    Parameters
    ----------
    path : str or os.PathLike
        A table written by :class:`ScalarTable`.

    Returns
    -------
    pandas.DataFrame
        One row per record; columns holding only integers (always ``step``)
        are int64, the others float64, bit-identical to the values appended
        (cells are parsed by Python's exact ``int``/``float``).
    """
    name = os.fspath(path)
    try:
        with open(name, encoding="utf-8", newline="") as fh:
            lines = fh.read().splitlines()
    except FileNotFoundError:
        raise InputError(f"{name}: table does not exist") from None
    if not lines or not lines[0].startswith("step" + _SEPARATOR):
        raise InputError(f"{name}: not a beadsim scalar table (the first line must start with 'step,')")
    header = lines[0].split(_SEPARATOR)
    rows = [line.split(_SEPARATOR) for line in lines[1:]]
    for number, row in enumerate(rows, start=2):
        if len(row) != len(header):
            raise InputError(f"{name}, line {number}: expected {len(header)} fields, got {len(row)}")
    try:
        return pd.DataFrame({col: _column_array([row[i] for row in rows]) for i, col in enumerate(header)})
    except ValueError as exc:
        raise InputError(f"{name}: a cell is not a number ({exc})") from None
