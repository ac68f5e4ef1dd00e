"""Fault-injection suite: shared switches, the tally of faults and bad inputs, and subprocess helpers.

Every test here is marked ``faults``. By default each runs a short version (a few kills, a small
fuzzing budget); ``--faults-long`` runs the full one. ``--fault-record FILE`` writes the tally
(:class:`Tally`) as JSON when the session ends; ``analysis/reliability.py`` turns it into
``analysis/reliability.md``.
"""

import json
import os
import sys
from collections import defaultdict
from pathlib import Path

import pytest

import beadsim
from beadsim import cli

#: Folder holding the ``beadsim`` package, for the ``PYTHONPATH`` of subprocesses.
PACKAGE_ROOT = str(Path(beadsim.__file__).resolve().parents[1])
#: Seconds a subprocess may take to import beadsim (numba loads or compiles its kernels) and start working.
STARTUP_TIMEOUT = 240.0


#: Modules not yet run to completion on this project's machines (written while the shared machine was
#: saturated): they run only with --faults-long until a default-suite run has been measured.
NOT_YET_MEASURED = {"test_kill_study.py"}


def pytest_collection_modifyitems(config, items):
    long = config.getoption("--faults-long")
    skip = pytest.mark.skip(reason="fault test not yet measured in the default suite: run with --faults-long")
    for item in items:
        path = Path(str(item.fspath))
        if path.parent == Path(__file__).parent:
            item.add_marker(pytest.mark.faults)
            if path.name in NOT_YET_MEASURED and not long:
                item.add_marker(skip)


class Tally:
    """Counts per fault kind: injected, survived, frames lost and duplicated, bad inputs, uncaught exceptions."""

    FIELDS = ("injected", "survived", "frames_lost", "frames_duplicated", "bad_inputs", "uncaught")

    def __init__(self):
        self.rows = defaultdict(lambda: dict.fromkeys(self.FIELDS, 0))

    def add(self, kind, **counts):
        for key, value in counts.items():
            self.rows[kind][key] += int(value)

    def as_dict(self):
        return {kind: dict(row) for kind, row in sorted(self.rows.items())}


_TALLY = Tally()


@pytest.fixture(scope="session")
def tally():
    """The session's :class:`Tally` (written to ``--fault-record`` at the end)."""
    return _TALLY


@pytest.fixture(scope="session")
def long_faults(request):
    """True when the suite runs at full length (``--faults-long``)."""
    return bool(request.config.getoption("--faults-long"))


def pytest_sessionfinish(session, exitstatus):
    path = session.config.getoption("--fault-record")
    if path and _TALLY.rows:
        Path(path).write_text(json.dumps({"long": bool(session.config.getoption("--faults-long")),
                                          "exit_status": int(exitstatus), "faults": _TALLY.as_dict()}, indent=2)
                              + "\n", encoding="utf-8")


@pytest.fixture(scope="module")
def reference(request, tmp_path_factory):
    """Output folder of the requesting module's input ``RUN`` (TOML text) run to its end without a fault."""
    folder = tmp_path_factory.mktemp("reference")
    (folder / "chain.toml").write_text(request.module.RUN, encoding="utf-8")
    assert cli.main(["run", str(folder / "chain.toml"), "--out", str(folder / "out"), "--quiet"]) == 0
    return folder / "out"


@pytest.fixture(scope="session")
def subprocess_env():
    """Environment for subprocesses: this checkout first on ``PYTHONPATH``."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (PACKAGE_ROOT, env.get("PYTHONPATH")) if p)
    return env


@pytest.fixture(scope="session")
def python():
    """The interpreter running the tests, for subprocesses."""
    return sys.executable
