"""fieldplan: defensible sampling plans for farm fields, vineyards and orchards.

The public API is small::

    from fieldplan import read_blocks, PlanSpec, make_plan, write_plan, load_plan

    spec = PlanSpec.from_dict({"design": "random", "per_block": 5, "purpose": "soil"})
    plan = make_plan(read_blocks("blocks.geojson"), spec, seed=7)

Names load lazily so that ``fieldplan --help`` stays fast.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

_LAZY = {
    "read_blocks": "fieldplan.read",
    "read_exclusions": "fieldplan.read",
    "make_plan": "fieldplan.planning.plan",
    "Plan": "fieldplan.planning.plan",
    "write_plan": "fieldplan.store",
    "load_plan": "fieldplan.store",
    "FieldplanError": "fieldplan.errors",
    "PlanSpec": "fieldplan.spec",
    "sample_points": "fieldplan.notebook",
    "prepare_blocks": "fieldplan.notebook",
    "SpecError": "fieldplan.spec",
    "spec_schema": "fieldplan.spec",
    "explore": "fieldplan.explore",
}

__all__ = ["__version__", *_LAZY]


def __getattr__(name: str) -> object:
    if name in _LAZY:
        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'fieldplan' has no attribute {name!r}")


def __dir__() -> list[str]:
    # Lazy names show up in dir() and tab completion as if they were loaded.
    return sorted({*__all__, *(n for n in globals() if n.startswith("__"))})
