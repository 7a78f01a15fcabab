"""The design registry: every design the planner can run, by name.

A new design is one :func:`register_design` call naming its runner
(``"module:function"``, imported when a plan runs); its name then is a valid
``design`` everywhere: the spec, the CLI's choices, recipes and the web form.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

__all__ = ["DesignInfo", "DESIGNS", "register_design"]




@dataclass(frozen=True)
class DesignInfo:
    """A design the planner can run.

    Attributes
    ----------
    name : str
        The choice users type (``grid``, ``random``...).
    help : str
        One line for help texts and forms.
    runner : str
        ``"module:function"`` of the design function (imported when a plan runs).
    sizes : tuple of str
        Parameters that can set its sample size; exactly one is given
        (the grid takes ``spacing`` or ``per_ha``).
    spares : bool
        Whether it draws spares (extra points in use order).
    stratified : bool
        Whether it samples strata (``strata_by``, allocation options).
    """

    name: str
    help: str
    runner: str
    sizes: tuple[str, ...] = ("per_block", "per_ha", "n")
    spares: bool = True
    stratified: bool = True

    def load(self) -> Callable:
        """Import and return the design function."""
        import importlib

        module, _, func = self.runner.partition(":")
        return getattr(importlib.import_module(module), func)


#: Registered designs, in the order help texts list them.
DESIGNS: dict[str, DesignInfo] = {}


def register_design(info: DesignInfo) -> DesignInfo:
    """Add (or replace) a design; its name becomes a valid ``design`` choice everywhere."""
    DESIGNS[info.name] = info
    return info


register_design(
    DesignInfo(
        "grid",
        "systematic square or triangular grid with a random start",
        "fieldplan.planning.grid:grid_design",
        sizes=("spacing", "per_ha"),
        spares=False,
        stratified=False,
    )
)
register_design(DesignInfo("random", "simple random points in each stratum", "fieldplan.planning.stratum_designs:_random"))
register_design(
    DesignInfo(
        "balanced",
        "spatially balanced points in each stratum (local pivotal method)",
        "fieldplan.planning.stratum_designs:_balanced",
    )
)
register_design(
    DesignInfo(
        "clusters",
        "random plants from the rows, several units at each",
        "fieldplan.planning.stratum_designs:_clusters",
        sizes=("per_block", "per_ha", "n", "target_units"),
    )
)
register_design(
    DesignInfo(
        "clhs",
        "conditioned Latin hypercube over covariate cells (needs covariates)",
        "fieldplan.zones_plan:clhs_design",
        sizes=("n",),
        spares=False,
        stratified=False,
    )
)
