"""Shared pytest configuration.

Tests marked ``slow`` (long accuracy runs) are opt-in: ``pytest --run-slow``.
The ``live`` and ``postgres`` tests run by default and skip themselves, with
the reason, where a virtual audio device or a PostgreSQL server cannot be had.
"""

from __future__ import annotations

import pytest


def pytest_addoption(parser: pytest.Parser) -> None:
    parser.addoption("--run-slow", action="store_true", default=False,
                     help="also run the long tests marked 'slow'")


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    if config.getoption("--run-slow"):
        return
    skip_slow = pytest.mark.skip(reason="long test: run with --run-slow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip_slow)
