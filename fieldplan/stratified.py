"""Moved to :mod:`fieldplan.planning.stratum_designs` (the random, balanced and clusters designs); this import path stays for one release."""

from __future__ import annotations

import importlib
from typing import Any

from fieldplan.planning.stratum_designs import *  # noqa: F403
from fieldplan.planning.stratum_designs import __all__  # noqa: F401

_MOVED = importlib.import_module("fieldplan.planning.stratum_designs")


def __getattr__(name: str) -> Any:
    # Private names too (tests and older callers reach into the module).
    return getattr(_MOVED, name)
