"""Fixtures for the run-pipeline tests: small input files written into ``tmp_path`` and the command line in-process."""

import os
import sys
from pathlib import Path

import pytest

import beadsim
from beadsim import cli

#: Folder holding the ``beadsim`` package, for the ``PYTHONPATH`` of subprocesses.
PACKAGE_ROOT = str(Path(beadsim.__file__).resolve().parents[1])


@pytest.fixture
def write_input(tmp_path):
    """Factory ``(text, name="chain.toml") -> Path`` writing an input file into ``tmp_path``."""
    def write(text, name="chain.toml"):
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return path
    return write


@pytest.fixture
def run_cli(capsys):
    """Factory ``(*args) -> (exit_status, stdout, stderr)`` calling ``beadsim.cli.main`` in this process."""
    def call(*args):
        status = cli.main([str(a) for a in args])
        captured = capsys.readouterr()
        return status, captured.out, captured.err
    return call


@pytest.fixture
def subprocess_env():
    """Environment for ``python -m beadsim`` subprocesses: this checkout first on ``PYTHONPATH``."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (PACKAGE_ROOT, env.get("PYTHONPATH")) if p)
    return env


@pytest.fixture
def beadsim_command():
    """Argument list starting the command line in a fresh interpreter (the same one running the tests)."""
    return [sys.executable, "-m", "beadsim"]
