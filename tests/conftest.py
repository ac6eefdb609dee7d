"""Shared fixtures: a per-session cache of fits so that test files can reuse them.

Example
-------
A test asks for ``cached_fit`` and calls ``cached_fit("name", lambda: bz.fit(...))``; the
second caller with the same name gets the same fitted model without sampling again.
"""

from __future__ import annotations

import os
import sys
import warnings
from collections.abc import Callable

import matplotlib
import pytest

matplotlib.use("Agg")
sys.path.insert(0, os.path.dirname(__file__))

_CACHE: dict[str, object] = {}


@pytest.fixture(scope="session")
def cached_fit() -> Callable[[str, Callable[[], object]], object]:
    """Return ``get(name, make)``: ``make()`` runs once per session per name."""

    def get(name: str, make: Callable[[], object]) -> object:
        if name not in _CACHE:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                _CACHE[name] = make()
        return _CACHE[name]

    return get
