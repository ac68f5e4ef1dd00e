"""Shared pytest configuration: the ``slow`` marker and its ``--runslow`` flag."""

import pytest


def pytest_addoption(parser):
    parser.addoption("--runslow", action="store_true", default=False,
                     help="also run the long physics checks marked 'slow'")


def pytest_collection_modifyitems(config, items):
    if config.getoption("--runslow"):
        return
    skip = pytest.mark.skip(reason="slow physics check: run with --runslow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)
