"""Row-aware walking metric."""

from __future__ import annotations

import numpy as np
import pytest

from fieldplan.route import Metric, route_cost, row_aware_cost, solve_route


def test_along_and_across_rows():
    # Rows running north (bearing 0): moving north is along, moving east is across.
    a = np.zeros((2, 2))
    b = np.array([[0.0, 10.0], [10.0, 0.0]])
    cost = row_aware_cost(a, b, bearing_deg=0.0, across_factor=1.5)
    # reference: model cost = sqrt(along^2 + (k*across)^2) (common practice, no source)
    assert cost == pytest.approx([10.0, 15.0])


def test_bearing_rotation_and_diagonal():
    # Rows at bearing 45 deg (north-east); a 3-4-5 step along/across.
    theta = np.radians(45.0)
    along, across = np.array([np.sin(theta), np.cos(theta)]), np.array([np.cos(theta), -np.sin(theta)])
    step = 4.0 * along + 3.0 * across
    cost = row_aware_cost(np.zeros((1, 2)), step[None, :], bearing_deg=45.0, across_factor=2.0)
    # reference: sqrt(4^2 + (2*3)^2) = sqrt(52) (arithmetic)
    assert cost[0] == pytest.approx(np.sqrt(52.0))
    plain = row_aware_cost(np.zeros((1, 2)), step[None, :], bearing_deg=np.nan)
    assert plain[0] == pytest.approx(5.0)  # reference: Pythagoras 3-4-5


def test_metric_between_blocks_is_euclidean():
    xy = np.array([[0, 0], [30, 0], [0, 40]], float)
    m = Metric(xy, group=np.array([0, 0, 1]), bearing_deg=np.array([0.0, 0.0, 90.0]), across_factor=2.0)
    assert m.pair(0, 1) == pytest.approx(60.0)  # same block, across rows: 2 x 30
    assert m.pair(0, 2) == pytest.approx(40.0)  # different blocks: plain distance
    assert m.pair(1, 2) == pytest.approx(50.0)  # reference: Pythagoras 3-4-5
    i, j = np.array([0, 0, 1]), np.array([1, 2, 2])
    assert m.many(i, j) == pytest.approx([m.pair(0, 1), m.pair(0, 2), m.pair(1, 2)])
    sub = m.subset(np.array([2, 0]))
    assert sub.pair(0, 1) == pytest.approx(40.0)


def test_candidates_prefer_along_row():
    # Points 1 m apart across rows, 1.2 m along: with k = 1.5 the along-row point is cheaper.
    xy = np.array([[0, 0], [1.0, 0], [0, 1.2]])
    m = Metric(xy, group=np.zeros(3, int), bearing_deg=np.zeros(3), across_factor=1.5)
    assert m.candidates(2)[0].tolist() == [2, 1]


def test_route_walks_along_rows():
    # 8 rows running north (bearing 0), 20 points per row 3 m apart, rows 3 m apart;
    # crossing rows costs k = 3 times more.
    xy = np.stack(np.meshgrid(np.arange(8) * 3.0, np.arange(20) * 3.0), -1).reshape(-1, 2)
    m = Metric(xy, group=np.zeros(len(xy), int), bearing_deg=np.zeros(len(xy)), across_factor=3.0)
    order = solve_route(m, rng=np.random.default_rng(0), closed=False, kicks=300)
    # reference: arithmetic lower bound for a path over 160 points in 8 rows: 152 along-row
    # steps of 3 m plus 7 row changes costing 3 x 3 m = 519, reached by walking row after row
    assert route_cost(m, order, closed=False) == pytest.approx(519.0)
    # the same path in plain metres is 159 steps of 3 m
    assert m.geometric(order[:-1], order[1:]).sum() == pytest.approx(477.0)
