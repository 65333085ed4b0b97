"""Test configuration.

Guidelines: one ``test_<module>.py`` per module; every test has a one-line
docstring naming what it checks and, for a known value, where the value comes
from (paper title, year and arXiv id, "common knowledge", or a derivation in the
docstring).  Tests marked ``slow`` run only with ``--runslow``.
"""

import os

import pytest

os.environ.setdefault("OMP_NUM_THREADS", "1")


def pytest_addoption(parser):
    parser.addoption("--runslow", action="store_true", default=False, help="also run tests marked slow")


def pytest_collection_modifyitems(config, items):
    if config.getoption("--runslow"):
        return
    skip = pytest.mark.skip(reason="slow; use --runslow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)
