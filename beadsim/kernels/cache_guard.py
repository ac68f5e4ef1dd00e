"""Keep numba's on-disk cache of the kernels consistent across files.

Numba stores a compiled function under a key made from its own file's content
(numba 0.68: a SHA-256 of the source file) and its bytecode. When a kernel
calls kernels from another module, their machine code is compiled into the
caller's cache entry, and an edit of the callee's file does not invalidate it.
The guard stamps the cache folder with a hash over all kernel sources and the
numba version and, when the stamp differs, removes the kernels' cache files
before anything is loaded from them. Cache entries of other packages are never
touched: only files named after a kernel module in the kernels' own cache
folder are removed.
"""

import hashlib
import os
from pathlib import Path

import numba
from numba.core.caching import FunctionCache
from numba.core.registry import CPUDispatcher

#: File in the cache folder holding the hash the cached kernels were compiled from.
STAMP_NAME = "beadsim-kernels.stamp"


def source_digest(paths):
    """Hex SHA-256 over the numba version and the names and contents of ``paths`` (sorted by name)."""
    h = hashlib.sha256(numba.__version__.encode())
    for path in sorted(Path(p) for p in paths):
        h.update(path.name.encode() + b"\0" + path.read_bytes() + b"\0")
    return h.hexdigest()


def clear_stale_cache(folder, digest, module_stems):
    """Remove the cache files of ``module_stems`` in ``folder`` unless its stamp equals ``digest``.

    Parameters
    ----------
    folder : path-like
        Numba's cache folder of the kernel modules.
    digest : str
        Hash of the current kernel sources (:func:`source_digest`).
    module_stems : iterable of str
        Module file stems (``"forces"``); numba names their files ``<stem>.<function>-<line>.<tag>.nbi``
        and ``.nbc``.

    Returns
    -------
    int
        Number of files removed (0 when the stamp matched or the folder does not exist).
    """
    folder = Path(folder)
    stamp = folder / STAMP_NAME
    try:
        if stamp.read_text(encoding="ascii").strip() == digest:
            return 0
    except (OSError, UnicodeDecodeError):
        pass
    if not folder.is_dir():
        return 0
    prefixes = tuple(f"{stem}." for stem in module_stems)
    removed = 0
    for path in folder.iterdir():
        if path.name.startswith(prefixes) and path.suffix in (".nbi", ".nbc"):
            try:
                path.unlink()
                removed += 1
            except FileNotFoundError:  # another process cleared it first
                pass
    tmp = folder / f"{STAMP_NAME}.{os.getpid()}"
    tmp.write_text(digest + "\n", encoding="ascii")
    os.replace(tmp, stamp)
    return removed


def cache_folders(modules):
    """The distinct folders numba caches the compiled functions of ``modules`` in."""
    folders = set()
    for module in modules:
        for value in vars(module).values():
            if isinstance(value, CPUDispatcher) and value.__module__ == module.__name__:
                try:
                    folders.add(FunctionCache(value.py_func).cache_path)
                except RuntimeError:  # numba found no writable place: nothing is cached
                    pass
                break
    return folders


def guard_kernel_cache(modules):
    """Clear the cache of ``modules`` (the kernel modules) if any of their sources changed since it was written.

    A folder the guard cannot write to is left as it is (numba itself only
    caches in folders it can write to).
    """
    paths = [Path(m.__file__) for m in modules]
    digest = source_digest(paths)
    stems = [p.stem for p in paths]
    for folder in cache_folders(modules):
        try:
            clear_stale_cache(folder, digest, stems)
        except OSError:
            pass
