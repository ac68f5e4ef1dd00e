"""Shared pytest configuration: the ``slow`` marker and its ``--runslow`` flag; ``--faults-long`` and
``--fault-record`` for the fault-injection suite in ``tests/faults/``."""

import pytest


def pytest_addoption(parser):
    parser.addoption("--runslow", action="store_true", default=False,
                     help="also run the long physics checks marked 'slow'")
    parser.addoption("--faults-long", action="store_true", default=False,
                     help="run the fault-injection suite (tests/faults) at full length: more kills, more fuzzing")
    parser.addoption("--fault-record", default=None,
                     help="write the fault-injection counts (faults injected, survived, frames lost, bad inputs, "
                          "uncaught exceptions) to this JSON file")


def pytest_collection_modifyitems(config, items):
    if config.getoption("--runslow"):
        return
    skip = pytest.mark.skip(reason="slow physics check: run with --runslow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)
