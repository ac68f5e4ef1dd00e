"""Crash-safe file replacement shared by the checkpoint, table and trajectory writers.

A file is never rewritten in place: the new content goes to a temporary file in
the same folder, which is flushed and ``fsync``-ed, then moved over the target
with :func:`os.replace` (atomic on POSIX and Windows), and finally the folder
itself is ``fsync``-ed so that the rename survives a power cut.  If anything
fails before the rename, the temporary file is removed and the old file at the
target path is left untouched.
"""

import contextlib
import os
import tempfile


def fsync_directory(folder):
    """Make a rename or file creation inside ``folder`` durable.

    Parameters
    ----------
    folder : str or os.PathLike
        Folder whose entries changed.

    Notes
    -----
    Only POSIX systems allow opening a folder for ``fsync``; elsewhere this does
    nothing.
    """
    if os.name != "posix":
        return
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def fsync_path(path):
    """Flush the operating system's cached writes of the file at ``path`` to disk.

    Parameters
    ----------
    path : str or os.PathLike
        An existing file. Any descriptor of a file reaches the same cached
        pages, so this works while another handle (for instance one held by a
        compiled library) still has the file open for writing.
    """
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def remove_leftovers(path):
    """Delete temporary files that :func:`replacing_path` left for ``path`` when its process was killed.

    Parameters
    ----------
    path : str or os.PathLike
        A target file; only hidden files named ``.<stem>.*.tmp<ext>`` beside
        it are removed.

    Returns
    -------
    list of str
        Names of the files removed.
    """
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    base, ext = os.path.splitext(os.path.basename(path))
    prefix, suffix = "." + base + ".", ".tmp" + ext
    removed = [name for name in os.listdir(folder) if name.startswith(prefix) and name.endswith(suffix)]
    for name in removed:
        with contextlib.suppress(FileNotFoundError):
            os.remove(os.path.join(folder, name))
    return removed


@contextlib.contextmanager
def replacing_path(path):
    """Context manager yielding the name of a temporary file that replaces ``path`` on success.

    Parameters
    ----------
    path : str or os.PathLike
        Target file; its folder must exist.

    Yields
    ------
    str
        Name of an empty temporary file in the same folder, ending in the same
        extension as ``path`` (so libraries that pick a format by extension
        accept it). Write the complete new content to it and close or flush
        it. When the ``with`` block ends normally the file is ``fsync``-ed and
        moved over ``path`` and the folder is ``fsync``-ed; when the block
        raises, the temporary file is removed, ``path`` keeps its old content
        and the exception propagates.
    """
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    base, ext = os.path.splitext(os.path.basename(path))
    fd, tmp = tempfile.mkstemp(dir=folder, prefix="." + base + ".", suffix=".tmp" + ext)
    os.close(fd)
    try:
        yield tmp
        fsync_path(tmp)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.remove(tmp)
        raise
    fsync_directory(folder)


@contextlib.contextmanager
def replacing(path, *, binary=True):
    """Context manager yielding an open temporary file that replaces ``path`` on success.

    Parameters
    ----------
    path : str or os.PathLike
        Target file; its folder must exist.
    binary : bool
        Open the temporary file in binary (``True``) or UTF-8 text mode.

    Yields
    ------
    file object
        Write the complete new content to it; it is flushed and closed when
        the block ends, then handled as in :func:`replacing_path`.
    """
    with replacing_path(path) as tmp:
        with open(tmp, "wb") if binary else open(tmp, "w", encoding="utf-8", newline="") as fh:
            yield fh
