"""Shared pytest set-up: the ``slow`` marker runs only when asked for."""

import os

import pytest


def pytest_collection_modifyitems(config, items):
    if os.environ.get("SIMWAVE_SLOW") == "1" or "slow" in (config.getoption("-m") or ""):
        return
    skip = pytest.mark.skip(reason="slow check: set SIMWAVE_SLOW=1 or pass -m slow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)
