"""Moved to :mod:`fieldplan.planning.engine` (the in-process and Dask engines); this import path stays for one release."""

from __future__ import annotations

import importlib
from typing import Any

from fieldplan.planning.engine import *  # noqa: F403
from fieldplan.planning.engine import __all__  # noqa: F401

_MOVED = importlib.import_module("fieldplan.planning.engine")


def __getattr__(name: str) -> Any:
    # Private names too (tests and older callers reach into the module).
    return getattr(_MOVED, name)
