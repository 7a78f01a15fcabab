"""Route construction and improvement checked against TSPLIB optima and exact DP."""

from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np
import pytest

from fieldplan.errors import OptionError
from fieldplan.route import Metric, euc2d_length, held_karp, read_tsplib, route_cost, solve_route
from fieldplan.route.tsp import hilbert_order

TSPLIB = Path(__file__).parent / "data" / "tsplib"

# reference: TSPLIB list of optimal tour lengths (Reinelt 1991), from memory
OPTIMA = {"berlin52": 7542, "st70": 675, "pr76": 108159}


@pytest.mark.parametrize("name", sorted(OPTIMA))
def test_tsplib_within_five_percent(name):
    xy = read_tsplib(TSPLIB / f"{name}.tsp")
    order = solve_route(Metric(xy), rng=np.random.default_rng(1), kicks=300)
    assert sorted(order.tolist()) == list(range(len(xy)))
    length = euc2d_length(xy, order)
    # reference: TSPLIB optimum (EUC_2D, nint distances); bound of the route module
    assert OPTIMA[name] <= length <= 1.05 * OPTIMA[name]


def test_tsplib_sizes():
    # reference: TSPLIB instance names give the number of cities
    assert [len(read_tsplib(TSPLIB / f"{n}.tsp")) for n in ("berlin52", "st70", "pr76")] == [52, 70, 76]


def _brute_force(dist: np.ndarray, closed: bool) -> float:
    n = len(dist)
    best = np.inf
    for perm in itertools.permutations(range(1, n)):
        path = (0, *perm)
        cost = sum(dist[a, b] for a, b in itertools.pairwise(path))
        if closed:
            cost += dist[path[-1], 0]
        best = min(best, cost)
    return best


@pytest.mark.parametrize("n", range(2, 8))
@pytest.mark.parametrize("closed", [True, False])
def test_held_karp_matches_brute_force(n, closed):
    rng = np.random.default_rng(100 + n)
    dist = rng.uniform(1, 50, size=(n, n))  # asymmetric on purpose
    length, order = held_karp(dist, closed=closed)
    # reference: exhaustive enumeration of all (n-1)! orders (definition of the optimum)
    assert length == pytest.approx(_brute_force(dist, closed))
    assert order[0] == 0 and sorted(order.tolist()) == list(range(n))
    legs = dist[order[:-1], order[1:]].sum() + (dist[order[-1], order[0]] if closed else 0)
    assert legs == pytest.approx(length)


def _hk_reference(metric: Metric, start, closed) -> float:
    n = metric.n
    d = metric.many(np.arange(n)[:, None], np.arange(n)[None, :])
    if start is None and not closed:
        return held_karp(np.pad(d, ((1, 0), (1, 0))), closed=False)[0]
    s = start or 0
    idx = np.r_[s, np.delete(np.arange(n), s)]
    return held_karp(d[np.ix_(idx, idx)], closed=closed)[0]


@pytest.mark.parametrize("n", range(3, 10))
@pytest.mark.parametrize(("start", "closed"), [(None, True), (1, False), (None, False)])
def test_solver_exact_small(n, start, closed):
    rng = np.random.default_rng(n)
    xy = rng.uniform(0, 100, size=(n, 2))
    metric = Metric(xy, group=np.zeros(n, int), bearing_deg=np.full(n, 35.0))
    order = solve_route(metric, rng=np.random.default_rng(0), start=start, closed=closed)
    if start is not None:
        assert order[0] == start
    # reference: Held & Karp (1962) dynamic programme = exact optimum
    assert route_cost(metric, order, closed=closed) == pytest.approx(_hk_reference(metric, start, closed))


@pytest.mark.parametrize("seed", range(4))
def test_local_search_reaches_optimum_small(seed):
    # The heuristic alone (exact solver switched off) on 9 points.
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 100, size=(9, 2))
    metric = Metric(xy)
    order = solve_route(metric, rng=np.random.default_rng(seed), exact_max=0, kicks=500)
    # reference: Held & Karp (1962) exact optimum
    assert route_cost(metric, order, closed=True) == pytest.approx(_hk_reference(metric, None, True))


def test_open_path_from_start_uniform_line():
    # Points on a line, start at one end: the best open path walks straight along it.
    xy = np.column_stack([np.arange(40.0), np.zeros(40)])
    order = solve_route(Metric(xy), rng=np.random.default_rng(0), start=0, closed=False)
    # reference: geometry, a straight line is the shortest path through collinear points
    assert route_cost(Metric(xy), order, closed=False) == pytest.approx(39.0)


def test_grid_tour_is_optimal_length():
    # An even m x m grid at unit spacing has an optimal tour of length m*m.
    m = 10
    xy = np.stack(np.meshgrid(np.arange(m), np.arange(m)), -1).reshape(-1, 2).astype(float)
    order = solve_route(Metric(xy), rng=np.random.default_rng(3), kicks=500)
    # reference: grid graph with an even number of nodes has a Hamiltonian cycle of unit steps
    # (common knowledge in graph theory, from memory); allow 2 % for the heuristic
    assert route_cost(Metric(xy), order, closed=True) <= 1.02 * m * m


def test_deterministic():
    xy = np.random.default_rng(9).uniform(0, 500, size=(300, 2))
    a = solve_route(Metric(xy), rng=np.random.default_rng(4), kicks=200)
    b = solve_route(Metric(xy), rng=np.random.default_rng(4), kicks=200)
    assert np.array_equal(a, b)


def test_hilbert_order_is_permutation_and_local():
    xy = np.stack(np.meshgrid(np.arange(16), np.arange(16)), -1).reshape(-1, 2).astype(float)
    order = hilbert_order(xy)
    assert sorted(order.tolist()) == list(range(256))
    steps = np.hypot(*np.diff(xy[order], axis=0).T)
    # reference: a Hilbert curve on a 2^k grid moves one cell per step (Hilbert 1891)
    assert np.allclose(steps, 1.0)


def test_bad_start():
    with pytest.raises(OptionError):
        solve_route(Metric(np.zeros((4, 2))), rng=np.random.default_rng(0), start=7)
