"""The planning core: the design registry, the design runners, the engines, and Plan/make_plan.

- :mod:`~fieldplan.planning.registry`: :class:`DesignInfo`, ``DESIGNS``, ``register_design``
- :mod:`~fieldplan.planning.grid`: the systematic grid runner
- :mod:`~fieldplan.planning.stratum_designs`: random, balanced and clusters runners per stratum
  (sampling; the stratified *estimators* are :mod:`fieldplan.estimate.stratified`)
- :mod:`~fieldplan.planning.engine`: in-process and Dask engines
- :mod:`~fieldplan.planning.plan`: :class:`Plan`, :func:`make_plan`, :func:`sample_areas`

Names load lazily, so importing the registry (the spec does) loads no geometry.
"""

from __future__ import annotations

import importlib

__all__ = ["Plan", "make_plan", "sample_areas", "DESIGNS", "DesignInfo", "register_design"]

_LAZY = {
    "Plan": "fieldplan.planning.plan",
    "make_plan": "fieldplan.planning.plan",
    "sample_areas": "fieldplan.planning.plan",
    "DESIGNS": "fieldplan.planning.registry",
    "DesignInfo": "fieldplan.planning.registry",
    "register_design": "fieldplan.planning.registry",
}


def __getattr__(name: str):  # noqa: ANN202 - lazily any of __all__
    if name in _LAZY:
        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'fieldplan.planning' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted({*__all__, *(n for n in globals() if n.startswith("__"))})
