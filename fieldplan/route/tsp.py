"""Short walking routes: construction, 2-opt, Or-opt and iterated local search.

A route visits every node once. Three shapes are supported through one solver:

* ``closed=True``: a tour back to the first node (rotated to begin at ``start``);
* ``closed=False, start=s``: a path that begins at ``s`` and may end anywhere;
* ``closed=False, start=None``: a path free at both ends.

Open paths are solved as tours through one extra "dummy" node. For a free path
the dummy costs 0 to every node. For a path from ``s`` it costs 0 to ``s`` and a
constant ``M`` to every other node; every tour then pays ``M`` exactly once (the
dummy sits between ``s`` and the last node), so minimising the tour minimises
the path. ``M`` is larger than any gain a single move can make, so local search
never detaches the dummy from ``s``.

Method: a Hilbert space-filling-curve order as the start (vectorised), then
2-opt and Or-opt (segments of 1-3 nodes, either orientation) on candidate
neighbour lists with a work queue ("don't look bits"), then iterated local
search with segment-local double-bridge kicks, accepted only when the route
gets shorter. References: Croes (1958) for 2-opt; Or (1976) for Or-opt;
Bentley (1992), ORSA J. Computing 4(4), for neighbour lists and don't-look bits;
Martin, Otto & Felten (1991) for double-bridge kicks. Small instances
(``n <= exact_max``) are solved exactly by Held-Karp.

Everything is deterministic given ``rng``: the number of kicks is fixed, never
a time limit.
"""

from __future__ import annotations

from collections import deque

import numpy as np

from fieldplan.errors import OptionError
from fieldplan.route.heldkarp import held_karp
from fieldplan.route.metric import Metric

__all__ = ["hilbert_order", "route_cost", "solve_route"]

_EPS = 1e-7


def hilbert_order(xy: np.ndarray, *, bits: int = 16) -> np.ndarray:
    """Indices of ``xy`` sorted along a Hilbert curve over their bounding box.

    Parameters
    ----------
    xy : (n, 2) array
        Coordinates.
    bits : int
        Curve resolution: the box is divided into ``2**bits`` cells a side.

    Returns
    -------
    (n,) int array
        A permutation; ties keep input order.
    """
    xy = np.asarray(xy, dtype=float).reshape(-1, 2)
    if len(xy) == 0:
        return np.zeros(0, dtype=np.int64)
    side = (1 << bits) - 1
    lo = xy.min(axis=0)
    span = float(max(np.ptp(xy, axis=0).max(), 1e-12))
    x = np.floor((xy[:, 0] - lo[0]) / span * side).astype(np.int64)
    y = np.floor((xy[:, 1] - lo[1]) / span * side).astype(np.int64)
    d = np.zeros(len(xy), dtype=np.int64)
    s = 1 << (bits - 1)
    while s > 0:
        rx = (x & s) > 0
        ry = (y & s) > 0
        d += s * s * ((3 * rx.astype(np.int64)) ^ ry.astype(np.int64))
        flip = ~ry & rx
        x = np.where(flip, side - x, x)
        y = np.where(flip, side - y, y)
        x, y = np.where(~ry, y, x), np.where(~ry, x, y)
        s >>= 1
    return np.argsort(d, kind="stable")


def route_cost(metric: Metric, order: np.ndarray, *, closed: bool) -> float:
    """Total cost of visiting ``order`` (and returning to its first node if ``closed``)."""
    order = np.asarray(order, dtype=np.int64)
    if len(order) < 2:
        return 0.0
    nxt = np.roll(order, -1) if closed else order[1:]
    return float(metric.many(order[: len(nxt)], nxt).sum())


class _Nodes:
    """A metric plus an optional dummy node with given costs to every node."""

    def __init__(self, metric: Metric, dummy_cost: np.ndarray | None) -> None:
        self.metric = metric
        self.n = metric.n + (dummy_cost is not None)
        self.dummy = metric.n if dummy_cost is not None else -1
        self.dummy_cost = dummy_cost
        base = metric.pair_function()
        if dummy_cost is None:
            self.pair = base
            return
        dummy, dc = self.dummy, dummy_cost.tolist()

        def pair(i: int, j: int) -> float:
            if i == dummy:
                return dc[j]
            if j == dummy:
                return dc[i]
            return base(i, j)

        self.pair = pair

    def many(self, i: np.ndarray, j: np.ndarray) -> np.ndarray:
        i, j = np.broadcast_arrays(np.asarray(i), np.asarray(j))
        if self.dummy < 0:
            return self.metric.many(i, j)
        dc = np.append(self.dummy_cost, 0.0)
        ii, jj = np.minimum(i, self.dummy - 1), np.minimum(j, self.dummy - 1)
        out = self.metric.many(ii, jj)
        out = np.where(i == self.dummy, dc[j], out)
        return np.where(j == self.dummy, dc[i], out)

    def candidates(self, k: int) -> list[list[int]]:
        cand = self.metric.candidates(k)
        if self.dummy >= 0:
            m = self.metric.n
            cand = np.column_stack([cand, np.full(m, self.dummy)])
            first = np.argsort(self.dummy_cost, kind="stable")[: cand.shape[1]]
            cand = np.vstack([cand, first[None, :]]) if len(first) == cand.shape[1] else cand
        costs = self.many(np.arange(len(cand))[:, None], cand)
        order = np.argsort(costs, axis=1, kind="stable")
        rows = np.take_along_axis(cand, order, axis=1).tolist()
        if len(rows) < self.n:  # dummy row shorter than the others (tiny n)
            rows.append(np.argsort(self.dummy_cost, kind="stable").tolist())
        return rows


def _reverse(tour: np.ndarray, pos: np.ndarray, i: int, j: int) -> None:
    """Reverse the cyclic stretch of positions i..j (or, equivalently, its complement)."""
    n = len(tour)
    length = (j - i) % n + 1
    if 2 * length > n:
        i, length = (j + 1) % n, n - length
    if length <= 1:
        return
    idx = (i + np.arange(length)) % n if i + length > n else np.arange(i, i + length)
    seg = tour[idx][::-1]
    tour[idx] = seg
    pos[seg] = idx


def _move_segment(tour: np.ndarray, pos: np.ndarray, i: int, length: int, after: int, reverse: bool) -> None:
    """Cut positions i..i+length-1 out and put them back right after node ``after``."""
    n = len(tour)
    rot = np.roll(tour, -i)
    seg, rest = rot[:length], rot[length:]
    q = (int(pos[after]) - i - length) % n
    new = np.concatenate([rest[: q + 1], seg[::-1] if reverse else seg, rest[q + 1 :]])
    tour[:] = new
    pos[new] = np.arange(n)


def _local_search(tour: np.ndarray, pos: np.ndarray, d, cand: list[list[int]], queue: deque) -> float:
    """2-opt and Or-opt from the queued nodes until no move improves; return the gain."""
    n = len(tour)
    in_queue = np.zeros(n, dtype=bool)
    in_queue[list(queue)] = True
    gain = 0.0

    def push(*nodes: int) -> None:
        for v in nodes:
            if not in_queue[v]:
                in_queue[v] = True
                queue.append(v)

    while queue:
        a = queue.popleft()
        in_queue[a] = False
        moved = False
        pa = int(pos[a])
        # 2-opt, both tour directions.
        for step in (1, -1):
            b = int(tour[(pa + step) % n])
            d_ab = d(a, b)
            for c in cand[a]:
                g1 = d_ab - d(a, c)
                if g1 <= _EPS:
                    break
                pc = int(pos[c])
                e = int(tour[(pc + step) % n])
                if c == b or e == a:
                    continue
                delta = g1 + d(c, e) - d(b, e)
                if delta > _EPS:
                    if step == 1:
                        _reverse(tour, pos, (pa + 1) % n, pc)
                    else:
                        _reverse(tour, pos, pa, (pc - 1) % n)
                    gain += delta
                    push(a, b, c, e)
                    moved = True
                    break
            if moved:
                break
        if moved or n < 5:
            continue
        # Or-opt: move a segment of 1-3 nodes that starts or ends at a.
        for length in (1, 2, 3):
            if length + 2 >= n:
                break
            for i in {pa, (pa - length + 1) % n}:
                s0, s1 = int(tour[i]), int(tour[(i + length - 1) % n])
                p, q = int(tour[(i - 1) % n]), int(tour[(i + length) % n])
                removed = d(p, s0) + d(s1, q) - d(p, q)
                if removed <= _EPS:
                    continue
                inside = {int(tour[(i + k) % n]) for k in range(length)}
                best = (_EPS, None)
                for end, other in ((s0, s1), (s1, s0)):
                    for c in cand[end]:
                        d_ce = d(c, end)
                        if d_ce >= removed:
                            break
                        if c in inside or c == p or c == q:
                            continue
                        pc = int(pos[c])
                        for nb, after_c in (
                            (int(tour[(pc + 1) % n]), True),
                            (int(tour[(pc - 1) % n]), False),
                        ):
                            if nb in inside:
                                continue
                            delta = removed - (d_ce + d(other, nb) - d(c, nb))
                            if delta > best[0]:
                                best = (delta, (c, nb, end, after_c))
                if best[1] is not None:
                    c, nb, end, after_c = best[1]
                    # Forward order s0..s1 is kept when s0 follows the left-hand node.
                    left = c if after_c else nb
                    first = end if after_c else (s1 if end == s0 else s0)
                    _move_segment(tour, pos, i, length, left, reverse=first != s0)
                    gain += best[0]
                    push(a, s0, s1, p, q, c, nb)
                    moved = True
                    break
            if moved:
                break
    return gain


def _kick(tour: np.ndarray, pos: np.ndarray, d, rng: np.random.Generator, window: int):
    """Segment-local double bridge: stretches B, C become C, B, each maybe reversed."""
    n = len(tour)
    p = int(rng.integers(n))
    o1, o2 = sorted(int(v) for v in rng.choice(np.arange(1, window + 1), 2, replace=False))
    rev_b, rev_c = (bool(v) for v in rng.integers(0, 2, size=2))
    idx = (p + 1 + np.arange(o2)) % n
    old = tour[idx]
    b, c = old[:o1], old[o1:]
    b, c = (b[::-1] if rev_b else b), (c[::-1] if rev_c else c)
    a_end, d0 = int(tour[p]), int(tour[(p + o2 + 1) % n])
    delta = (
        d(a_end, int(c[0]))
        + d(int(c[-1]), int(b[0]))
        + d(int(b[-1]), d0)
        - d(a_end, int(old[0]))
        - d(int(old[o1 - 1]), int(old[o1]))
        - d(int(old[-1]), d0)
    )
    sub = np.concatenate([c, b])
    tour[idx] = sub
    pos[sub] = idx
    return delta, (a_end, int(b[0]), int(b[-1]), int(c[0]), int(c[-1]), d0)


def _exact(metric: Metric, *, start: int | None, closed: bool) -> np.ndarray:
    n = metric.n
    first = 0 if start is None else start
    nodes = np.concatenate([[first], np.delete(np.arange(n), first)])
    dist = metric.many(nodes[:, None], nodes[None, :])
    if not closed and start is None:
        # A zero-cost hub in front turns "free path" into "path from the hub".
        dist = np.pad(dist, ((1, 0), (1, 0)))
        nodes = np.concatenate([[-1], nodes])
    _, order = held_karp(dist, closed=closed)
    out = nodes[order]
    return out[out >= 0]


def solve_route(
    metric: Metric,
    *,
    rng: np.random.Generator,
    start: int | None = None,
    closed: bool = True,
    kicks: int | None = None,
    neighbours: int = 10,
    exact_max: int = 9,
) -> np.ndarray:
    """Order in which to visit every node of ``metric`` for a short route.

    Parameters
    ----------
    metric : Metric
        Costs between the nodes.
    rng : numpy.random.Generator
        Drives the kicks of the iterated local search.
    start : int, optional
        Node the route must begin at.
    closed : bool
        Return to the first node at the end.
    kicks : int, optional
        Number of iterated-local-search kicks; default ``min(5 * n, 2000)``.
        0 gives plain 2-opt + Or-opt.
    neighbours : int
        Candidate neighbours per node for the local search.
    exact_max : int
        Up to this many nodes the route is exact (Held-Karp).

    Returns
    -------
    (n,) int array
        Visiting order, beginning with ``start`` when given.
    """
    n = metric.n
    if start is not None and not 0 <= start < n:
        raise OptionError(f"route start {start} is not a node index (0..{n - 1})")
    if n <= 2:
        order = np.arange(n)
        return order if start in (None, 0) else order[::-1].copy()
    if n <= min(exact_max, 16):
        return _exact(metric, start=start, closed=closed)

    dummy_cost = None
    if not closed:
        if start is None:
            dummy_cost = np.zeros(n)
        else:
            spread = max(np.ptp(metric.xy, axis=0).max(), np.ptp(metric.framed, axis=0).max())
            dummy_cost = np.full(n, 10.0 * (2.0 * spread + 1.0))
            dummy_cost[start] = 0.0
    nodes = _Nodes(metric, dummy_cost)
    d = nodes.pair
    cand = nodes.candidates(neighbours)

    tour = hilbert_order(metric.xy)
    if start is not None:
        tour = np.roll(tour, -int(np.flatnonzero(tour == start)[0]))
    if nodes.dummy >= 0:
        tour = np.append(tour, nodes.dummy)
    tour = tour.astype(np.int64)
    size = len(tour)
    pos = np.empty(size, dtype=np.int64)
    pos[tour] = np.arange(size)

    length = float(nodes.many(tour, np.roll(tour, -1)).sum())
    length -= _local_search(tour, pos, d, cand, deque(tour.tolist()))
    if kicks is None:
        kicks = min(5 * size, 2000)
    if size >= 8:
        window = min(size - 2, 50)
        for _ in range(kicks):
            saved_tour, saved_pos = tour.copy(), pos.copy()
            delta, touched = _kick(tour, pos, d, rng, window)
            delta -= _local_search(tour, pos, d, cand, deque(touched))
            if delta < _EPS:
                length += delta
            else:
                tour, pos = saved_tour, saved_pos

    if nodes.dummy >= 0:
        tour = np.roll(tour, -int(pos[nodes.dummy]))[1:]
        if start is not None and tour[0] != start:
            tour = tour[::-1]
    elif start is not None:
        tour = np.roll(tour, -int(pos[start]))
    return np.ascontiguousarray(tour)
