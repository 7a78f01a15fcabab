"""Split sampling points among crews and route each crew.

Goal: the slowest crew finishes as early as possible, each crew keeps to
neighbouring ground, and the split is balanced by estimated time (walking plus
handling minutes per point), not by point count.

Method ("route first, cluster second"; tour splitting after Frederickson, Hecht
& Kim (1978), SIAM J. Computing 7(2), 178-193):

1. One short tour through the drop-off point and all points.
2. The tour is cut into ``K`` contiguous stretches; the largest allowed crew
   time is found by bisection, trying several rotations of the tour. A crew's
   estimated time counts the walk from the drop-off to its stretch (and back
   when ``return_to_start``), the walk along the stretch and the handling.
3. Each crew is routed on its own points (:func:`~fieldplan.route.tsp.solve_route`).
4. Local rebalancing: the slowest crew hands points at the end of its stretch
   to the quicker neighbouring stretch while that lowers the slower of the two.
   Then a cut that falls inside a block moves to that block's edge, so one crew
   samples the whole block, where the longest day grows by at most
   :data:`BLOCK_SLACK`, or, with ``max_hours``, wherever the block fits in the day.
5. If ``max_hours`` is given, points at the end of a route that would push the
   crew past it are left out and reported.

Walking speed default 4 km/h (common practice, no source). Costs use the
row-aware metric of :mod:`fieldplan.route.metric`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fieldplan.errors import OptionError
from fieldplan.route.metric import DEFAULT_ACROSS_FACTOR, Metric
from fieldplan.route.tsp import route_cost, solve_route

__all__ = [
    "DEFAULT_MINUTES_PER_POINT",
    "DEFAULT_WALK_KMH",
    "CrewPlan",
    "assign_crews",
    "split_tour",
]

#: Walking speed in the field, km/h (common practice, no source).
DEFAULT_WALK_KMH = 4.0
#: Minutes spent at each point taking and labelling a sample (common practice, no source).
DEFAULT_MINUTES_PER_POINT = 5.0
#: How much longer the longest crew day may get so that a block is not split between crews
#: (without ``max_hours``; with it, a block is kept whole wherever it fits in the day):
#: one crew per block keeps a block's samples consistent and saves a second drive (common
#: practice, no source).
BLOCK_SLACK = 0.10


@dataclass(frozen=True)
class CrewPlan:
    """Crew assignment and routes for ``n`` points.

    Attributes
    ----------
    crew : (n,) int array
        Crew number 1..K; 0 for a point that does not fit in ``max_hours``.
    visit_order : (n,) int array
        1-based position in the crew's route; 0 where ``crew`` is 0.
    routes : tuple of int arrays
        Point indices of each crew in visiting order.
    walk_m : (K,) array
        Metres walked by each crew (plain distance, drop-off legs included).
    hours : (K,) array
        Estimated hours of each crew (row-aware walking + handling).
    unfitted : int array
        Indices of points left out by ``max_hours``.
    """

    crew: np.ndarray
    visit_order: np.ndarray
    routes: tuple[np.ndarray, ...]
    walk_m: np.ndarray
    hours: np.ndarray
    unfitted: np.ndarray


def split_tour(
    leg: np.ndarray,
    handling_h: np.ndarray,
    *,
    n_parts: int,
    approach: np.ndarray | None = None,
    return_leg: bool = False,
) -> tuple[np.ndarray, float]:
    """Cut a sequence into ``n_parts`` contiguous parts minimising the longest part.

    Parameters
    ----------
    leg : (n - 1,) array
        Hours to walk from item ``i`` to item ``i + 1``.
    handling_h : (n,) array
        Hours spent at each item.
    n_parts : int
        Number of parts (crews).
    approach : (n,) array, optional
        Hours from the drop-off to each item. A part costs the cheaper approach
        of its two ends (both ends when ``return_leg``).
    return_leg : bool
        Whether a part also walks back to the drop-off.

    Returns
    -------
    bounds : (n_parts + 1,) int array
        Part ``k`` is items ``bounds[k]:bounds[k + 1]`` (some may be empty).
    longest : float
        Estimated hours of the longest part.
    """
    handling_h = np.asarray(handling_h, dtype=float)
    n = len(handling_h)
    approach = np.zeros(n) if approach is None else np.asarray(approach, dtype=float)
    walk = np.concatenate([[0.0], np.cumsum(leg)])
    work = np.concatenate([[0.0], np.cumsum(handling_h)])

    def part_times(i: int) -> np.ndarray:
        """Hours of parts i..j for every j >= i."""
        j = np.arange(i, n)
        inner = walk[j] - walk[i] + work[j + 1] - work[i]
        if return_leg:
            return inner + approach[i] + approach[j]
        return inner + np.minimum(approach[i], approach[j])

    def cut(limit: float) -> np.ndarray | None:
        bounds = [0]
        while bounds[-1] < n:
            if len(bounds) > n_parts:
                return None
            times = part_times(bounds[-1])
            over = np.flatnonzero(times > limit)
            take = over[0] if len(over) else len(times)
            if take == 0:
                return None
            bounds.append(bounds[-1] + int(take))
        return np.asarray(bounds + [n] * (n_parts + 1 - len(bounds)))

    lo = 0.0
    hi = float(part_times(0)[-1]) if n else 0.0
    best = cut(hi) if n else np.zeros(n_parts + 1, dtype=np.int64)
    for _ in range(60):
        if hi - lo <= 1e-6 * max(hi, 1e-9):
            break
        mid = 0.5 * (lo + hi)
        bounds = cut(mid)
        if bounds is None:
            lo = mid
        else:
            hi, best = mid, bounds
    longest = max(
        (float(part_times(a)[b - a - 1]) for a, b in zip(best[:-1], best[1:], strict=True) if b > a),
        default=0.0,
    )
    return best.astype(np.int64), longest


def _crew_route(
    metric: Metric,
    members: np.ndarray,
    *,
    start: int | None,
    closed: bool,
    rng: np.random.Generator,
    kicks: int | None,
) -> np.ndarray:
    """Route ``members`` (indices into ``metric``), starting at ``start`` if given."""
    if len(members) == 0:
        return members
    nodes = members if start is None else np.concatenate([[start], members])
    sub = metric.subset(nodes)
    order = solve_route(sub, rng=rng, start=None if start is None else 0, closed=closed, kicks=kicks)
    route = nodes[order]
    return route if start is None else route[1:]


def _route_figures(metric: Metric, route: np.ndarray, start: int | None, closed: bool) -> tuple[float, float]:
    """(row-aware cost, plain metres) of a crew route including drop-off legs."""
    path = route if start is None else np.concatenate([[start], route])
    if closed and start is not None:
        path = np.concatenate([path, [start]])
    if len(path) < 2:
        return 0.0, 0.0
    cost = route_cost(metric, path, closed=False)
    metres = float(metric.geometric(path[:-1], path[1:]).sum())
    return cost, metres


def assign_crews(
    xy: np.ndarray,
    *,
    n_crews: int,
    rng: np.random.Generator,
    start: tuple[float, float] | np.ndarray | None = None,
    group: np.ndarray | None = None,
    row_bearing_deg: np.ndarray | None = None,
    across_factor: float = DEFAULT_ACROSS_FACTOR,
    walk_kmh: float = DEFAULT_WALK_KMH,
    minutes_per_point: float | np.ndarray = DEFAULT_MINUTES_PER_POINT,
    max_hours: float | None = None,
    return_to_start: bool = False,
    kicks: int | None = None,
    rebalance_rounds: int | None = None,
) -> CrewPlan:
    """Assign points to ``n_crews`` crews and route each crew.

    Parameters
    ----------
    xy : (n, 2) array
        Point coordinates, metres, local metric CRS.
    n_crews : int
        Number of crews (>= 1).
    rng : numpy.random.Generator
        Drives the route search.
    start : (x, y), optional
        Drop-off point where every crew begins. Without it each crew starts at
        its first point and nothing is walked to reach it.
    group, row_bearing_deg : (n,) arrays, optional
        Block code and row bearing of each point, for the row-aware metric.
    across_factor : float
        Across-row slowdown ``k`` (>= 1).
    walk_kmh : float
        Walking speed.
    minutes_per_point : float or (n,) array
        Handling time at each point.
    max_hours : float, optional
        Longest working time of a crew; points that do not fit are reported.
    return_to_start : bool
        Crews walk back to the drop-off at the end (needs ``start``).
    kicks : int, optional
        Route search effort per crew (see :func:`solve_route`).
    rebalance_rounds : int, optional
        Rebalancing moves tried; default ``4 * n_crews``.

    Returns
    -------
    CrewPlan
    """
    xy = np.asarray(xy, dtype=float).reshape(-1, 2)
    n = len(xy)
    if int(n_crews) != n_crews or n_crews < 1:
        raise OptionError(f"--crews must be a whole number >= 1, got {n_crews}")
    if not walk_kmh > 0:
        raise OptionError(f"--walk-speed must be above 0 km/h, got {walk_kmh}")
    if not across_factor >= 1:
        raise OptionError(f"across-row factor must be >= 1, got {across_factor}")
    if max_hours is not None and not max_hours > 0:
        raise OptionError(f"--max-hours must be above 0, got {max_hours}")
    if return_to_start and start is None:
        raise OptionError("--return needs a drop-off point: give --drop-off LON,LAT")
    minutes = np.broadcast_to(np.asarray(minutes_per_point, dtype=float), (n,)).copy()
    if np.any(~np.isfinite(minutes)) or np.any(minutes < 0):
        raise OptionError("--minutes-per-point must be a number >= 0")
    n_crews = int(n_crews)

    # The drop-off becomes node n with its own block code: plain distance to everything.
    grouped = group is not None
    if group is None or row_bearing_deg is None:
        group = np.arange(n) if group is None else np.asarray(group)
        row_bearing_deg = np.full(n, np.nan)
    group = np.asarray(group, dtype=np.int64)
    bearing = np.asarray(row_bearing_deg, dtype=float)
    all_xy = xy
    depot = None
    if start is not None:
        all_xy = np.vstack([xy, np.asarray(start, dtype=float).reshape(1, 2)])
        group = np.append(group, group.max(initial=-1) + 1)
        bearing = np.append(bearing, np.nan)
        depot = n
    metric = Metric(all_xy, group=group, bearing_deg=bearing, across_factor=across_factor)
    speed = walk_kmh * 1000.0  # metres per hour
    handling_h = minutes / 60.0

    if n == 0:
        empty = np.zeros(0, dtype=np.int64)
        return CrewPlan(
            empty, empty, tuple(empty for _ in range(n_crews)), np.zeros(n_crews), np.zeros(n_crews), empty
        )

    # 1-2: giant tour, cut into stretches.
    # The giant tour only decides the split; each crew is re-routed with full effort below.
    tour = solve_route(metric, rng=rng, start=depot, closed=True, kicks=0 if kicks is None else kicks)
    if depot is not None:
        tour = tour[tour != depot]
    approach = metric.many(np.full(n, depot), np.arange(n)) / speed if depot is not None else None
    shifts = np.unique(np.linspace(0, n, num=min(n, 8), endpoint=False).astype(int))
    if grouped and n:
        # Each block's points together, blocks in the order the tour meets them on average, so
        # stretches cut between blocks where they can; tours are rotated at block starts only.
        codes = group[tour]
        at = np.arange(n, dtype=float)
        mean_at = np.bincount(codes, weights=at) / np.maximum(np.bincount(codes), 1)
        tour = tour[np.lexsort((at, mean_at[codes]))]
        starts = np.flatnonzero(np.r_[True, group[tour][1:] != group[tour][:-1]])
        shifts = np.unique(
            starts[np.linspace(0, len(starts), num=min(len(starts), 8), endpoint=False).astype(int)]
        )
    best = None
    for shift in shifts:
        seq = np.roll(tour, -int(shift))
        leg = metric.many(seq[:-1], seq[1:]) / speed
        bounds, longest = split_tour(
            leg,
            handling_h[seq],
            n_parts=n_crews,
            approach=None if approach is None else approach[seq],
            return_leg=return_to_start,
        )
        if best is None or longest < best[0] - 1e-12:
            best = (longest, seq, bounds)
    _, seq, bounds = best

    def hours_of(route: np.ndarray) -> float:
        cost, _ = _route_figures(metric, route, depot, return_to_start)
        return cost / speed + float(handling_h[route].sum())

    def route_part(k: int, b: np.ndarray, effort: int | None) -> np.ndarray:
        return _crew_route(
            metric, seq[b[k] : b[k + 1]], start=depot, closed=return_to_start, rng=rng, kicks=effort
        )

    # 3-4: route each crew cheaply, move boundary points from the slowest crew.
    quick = 0
    routes = [route_part(k, bounds, quick) for k in range(n_crews)]
    hours = np.array([hours_of(r) for r in routes])
    rounds = 4 * n_crews if rebalance_rounds is None else rebalance_rounds
    for _ in range(rounds if n_crews > 1 else 0):
        k = int(np.argmax(hours))
        sides = [s for s in (k - 1, k + 1) if 0 <= s < n_crews]
        nb = min(sides, key=lambda s: hours[s])
        size = bounds[k + 1] - bounds[k]
        if size <= 1 or hours[nb] >= hours[k]:
            break
        per_point = hours[k] / size
        move = max(1, int(round((hours[k] - hours[nb]) / 2.0 / per_point)))
        improved = False
        while move >= 1 and not improved:
            trial = bounds.copy()
            # Shift the shared boundary so the points at k's edge go to nb.
            if nb == k + 1:
                trial[k + 1] -= min(move, size - 1)
            else:
                trial[k] += min(move, size - 1)
            r_k, r_nb = route_part(k, trial, quick), route_part(nb, trial, quick)
            h_k, h_nb = hours_of(r_k), hours_of(r_nb)
            if max(h_k, h_nb) < hours[k] - 1e-9:
                bounds, improved = trial, True
                routes[k], routes[nb], hours[k], hours[nb] = r_k, r_nb, h_k, h_nb
            else:
                move //= 2
        if not improved:
            break

    # 4b: a cut inside a block moves to the block's edge, so one crew samples the whole block,
    # where that keeps the longest day within BLOCK_SLACK of what it was (and within max_hours).
    if n_crews > 1 and grouped:
        codes = group[:n][seq]
        for c in range(1, n_crews):
            b = bounds[c]
            if b <= bounds[c - 1] or b >= bounds[c + 1] or codes[b - 1] != codes[b]:
                continue
            lo, hi = b, b
            while lo > bounds[c - 1] + 1 and codes[lo - 1] == codes[b]:
                lo -= 1
            while hi < bounds[c + 1] - 1 and codes[hi] == codes[b - 1]:
                hi += 1
            # With max_hours, a whole block is kept wherever it fits in the day; without, the
            # longest day may grow by BLOCK_SLACK.
            limit = float(hours.max()) * (1.0 + BLOCK_SLACK)
            if max_hours is not None:
                limit = max(float(max_hours), float(max(hours[c - 1], hours[c])))
            best_cut = None
            for cut in (lo, hi):
                if cut == b or codes[cut - 1] == codes[cut]:
                    continue
                trial = bounds.copy()
                trial[c] = cut
                r_a, r_b = route_part(c - 1, trial, quick), route_part(c, trial, quick)
                h_a, h_b = hours_of(r_a), hours_of(r_b)
                if max(h_a, h_b) <= limit + 1e-9 and (best_cut is None or max(h_a, h_b) < best_cut[0]):
                    best_cut = (max(h_a, h_b), trial, r_a, r_b, h_a, h_b)
            if best_cut is not None:
                _, bounds, routes[c - 1], routes[c], hours[c - 1], hours[c] = best_cut

    routes = [route_part(k, bounds, kicks) for k in range(n_crews)]

    # 5: trim what does not fit in max_hours.
    unfitted: list[np.ndarray] = []
    if max_hours is not None:
        for k, route in enumerate(routes):
            if len(route) == 0:
                continue
            path = route if depot is None else np.concatenate([[depot], route])
            legs = metric.many(path[:-1], path[1:]) / speed
            if depot is None:
                legs = np.concatenate([[0.0], legs])
            done = np.cumsum(legs) + np.cumsum(handling_h[route])
            back = metric.many(route, np.full(len(route), depot)) / speed if return_to_start else 0.0
            fits = int(np.searchsorted(~(done + back <= max_hours + 1e-9), True))
            unfitted.append(route[fits:])
            routes[k] = route[:fits]

    crew = np.zeros(n, dtype=np.int64)
    visit = np.zeros(n, dtype=np.int64)
    walk_m = np.zeros(n_crews)
    hours = np.zeros(n_crews)
    for k, route in enumerate(routes):
        crew[route] = k + 1
        visit[route] = np.arange(1, len(route) + 1)
        cost, metres = _route_figures(metric, route, depot, return_to_start)
        walk_m[k] = metres
        hours[k] = cost / speed + float(handling_h[route].sum())
    left = np.sort(np.concatenate(unfitted)) if unfitted else np.zeros(0, dtype=np.int64)
    return CrewPlan(
        crew,
        visit,
        tuple(np.asarray(r, dtype=np.int64) for r in routes),
        walk_m,
        hours,
        left.astype(np.int64),
    )
