"""The kernel cache guard: an edit in one kernel file must reach the cached kernels of another.

Numba (0.68) keys a cached function on its own file's content only (numba documentation, "Cache
invalidation": changes to functions called from a cached function are not detected). These tests
first show that limitation on two throw-away modules, then show that the guard removes the stale
entries. They check our own housekeeping, exactly.
"""

import subprocess
import sys
import textwrap

import pytest

import beadsim.kernels as kernels
from beadsim.kernels.cache_guard import STAMP_NAME, cache_folders, clear_stale_cache, source_digest

CALLEE = "from numba import njit\n\n@njit(cache=True)\ndef value():\n    return {}\n"
CALLER = textwrap.dedent("""
    from numba import njit
    from callee import value

    @njit(cache=True)
    def twice():
        return 2 * value()
    """)
RUN = textwrap.dedent("""
    import sys
    sys.path.insert(0, {folder!r})
    import callee, caller
    from beadsim.kernels.cache_guard import guard_kernel_cache
    if {guard}:
        guard_kernel_cache((callee, caller))
    print(caller.twice())
    """)


def _write_modules(folder, value):
    (folder / "callee.py").write_text(CALLEE.format(value))
    (folder / "caller.py").write_text(CALLER)


def _twice(folder, guard):
    out = subprocess.run([sys.executable, "-c", RUN.format(folder=str(folder), guard=guard)],
                         capture_output=True, text=True, check=True)
    return int(out.stdout.split()[-1])


@pytest.mark.parametrize("guard, expected", [(False, 2), (True, 4)])
def test_edited_callee_reaches_cached_caller_only_with_guard(tmp_path, guard, expected):
    _write_modules(tmp_path, 1)
    assert _twice(tmp_path, guard) == 2          # compiles and caches both
    _write_modules(tmp_path, 2)                  # edit the callee only
    assert _twice(tmp_path, guard) == expected   # without the guard the caller keeps the old callee


def test_clear_stale_cache_removes_only_kernel_files(tmp_path):
    names = ["forces.pair_forces-120.py311.nbi", "forces.pair_forces-120.py311.1.nbc",
             "integrate.advance-127.py311.nbi", "other.thing-1.py311.nbi", "forces.py.keep"]
    for name in names:
        (tmp_path / name).write_text("x")
    assert clear_stale_cache(tmp_path, "abc", ["forces", "integrate"]) == 3
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(["other.thing-1.py311.nbi", "forces.py.keep",
                                                                 STAMP_NAME])
    (tmp_path / "forces.f-1.py311.nbi").write_text("x")
    assert clear_stale_cache(tmp_path, "abc", ["forces"]) == 0      # stamp matches: cache kept
    assert (tmp_path / "forces.f-1.py311.nbi").exists()
    assert clear_stale_cache(tmp_path, "abd", ["forces"]) == 1      # sources changed: cleared


def test_digest_follows_sources(tmp_path):
    a, b = tmp_path / "a.py", tmp_path / "b.py"
    a.write_text("x = 1\n")
    b.write_text("y = 2\n")
    before = source_digest([a, b])
    assert source_digest([b, a]) == before
    b.write_text("y = 3\n")
    assert source_digest([a, b]) != before


def test_guard_finds_the_kernels_cache_folder():
    modules = [kernels.forces, kernels.integrate, kernels.neighbors]
    folders = cache_folders(modules)
    assert len(folders) == 1
