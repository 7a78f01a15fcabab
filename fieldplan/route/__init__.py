"""Walking routes: row-aware costs, tours and paths, crews.

Pure numpy/scipy functions, no file I/O.
"""

from fieldplan.route.crews import CrewPlan, assign_crews, split_tour
from fieldplan.route.heldkarp import held_karp
from fieldplan.route.metric import Metric, row_aware_cost, row_frame
from fieldplan.route.tsp import hilbert_order, route_cost, solve_route
from fieldplan.route.tsplib import euc2d_length, read_tsplib

__all__ = [
    "CrewPlan",
    "euc2d_length",
    "read_tsplib",
    "Metric",
    "assign_crews",
    "held_karp",
    "hilbert_order",
    "route_cost",
    "row_aware_cost",
    "row_frame",
    "solve_route",
    "split_tour",
]
