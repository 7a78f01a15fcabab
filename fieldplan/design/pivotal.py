"""The local pivotal method's steps, compiled with numba.

:func:`fieldplan.design.balanced.local_pivotal` keeps the parts that need
Python (the nearest-neighbour lists from :class:`scipy.spatial.cKDTree`, fresh
random numbers from the plan's generator) and hands the loop over candidates to
:func:`pivotal_steps`, which runs steps until it is done or needs one of those.
One step is a few array reads and writes; as a Python loop it costs a
microsecond or two per candidate, compiled some tens of nanoseconds.
"""

from __future__ import annotations

import numpy as np

from fieldplan.design.jit import kernel

__all__ = ["DONE", "NEED_DRAWS", "NEED_REBUILD", "pivotal_steps"]

DONE, NEED_DRAWS, NEED_REBUILD = 0, 1, 2
# state: [count, step, built_at, pending_i]; pending_i >= 0 resumes a step that
# stopped for a rebuild, with its random numbers in pending_u.
COUNT, STEP, BUILT_AT, PENDING = 0, 1, 2, 3


@kernel
def _fight(p: np.ndarray, i: int, j: int, u: float) -> None:
    """Update the pair (i, j) as in Grafström et al. (2012), section 2."""
    pi, pj = p[i], p[j]
    s = pi + pj
    if s < 1:
        if u < pj / s:
            p[i], p[j] = 0.0, s
        else:
            p[i], p[j] = s, 0.0
    else:
        if u < (1 - pj) / (2 - s):
            p[i], p[j] = 1.0, s - 1
        else:
            p[i], p[j] = s - 1, 1.0


@kernel
def _remove(i: int, alive: np.ndarray, pos: np.ndarray, state: np.ndarray) -> None:
    # alive[pos[i]] == i for undecided i: O(1) removal by swapping with the last.
    count = state[COUNT]
    at = pos[i]
    last = alive[count - 1]
    alive[at] = last
    pos[last] = at
    pos[i] = -1
    state[COUNT] = count - 1


@kernel
def _settle(p: np.ndarray, i: int, j: int, u: float, alive, pos, state, eps: float) -> None:
    _fight(p, i, j, u)
    for unit in (i, j):
        if p[unit] <= eps or p[unit] >= 1 - eps:
            _remove(unit, alive, pos, state)


@kernel
def pivotal_steps(
    xy: np.ndarray,
    p: np.ndarray,
    alive: np.ndarray,
    pos: np.ndarray,
    state: np.ndarray,
    pending_u: np.ndarray,
    row: np.ndarray,
    nn_dist: np.ndarray,
    nn_idx: np.ndarray,
    draws: np.ndarray,
    brute: int,
    eps: float,
) -> int:
    """Run LPM2 steps until done (``DONE``), out of draws or in need of new neighbour lists.

    Each step takes an undecided candidate ``i`` at random, its nearest
    undecided neighbour ``j`` (ties broken at random) and lets them fight. The
    neighbour lists ``nn_idx`` / ``nn_dist`` (rows indexed by ``row``) may hold
    decided candidates, which are skipped; when a list holds none undecided,
    the lists are rebuilt (``NEED_REBUILD``) if enough candidates were decided
    since the last build and many remain, else the neighbour is found by a
    direct scan. ``NEED_DRAWS`` asks for a fresh ``draws`` array of the same
    shape after its last row was used.
    """
    m = draws.shape[0]
    while True:
        i = state[PENDING]
        if i >= 0:
            u0, u1, u2 = pending_u[0], pending_u[1], pending_u[2]
            state[PENDING] = -1
            resumed = True
        else:
            if state[COUNT] <= 1:
                return DONE
            step = state[STEP]
            u0, u1, u2 = draws[step % m, 0], draws[step % m, 1], draws[step % m, 2]
            state[STEP] = step + 1
            i = alive[int(u0 * state[COUNT])]
            resumed = False
        r = row[i]
        j = -1
        best = np.inf
        for c in range(nn_idx.shape[1]):
            if pos[nn_idx[r, c]] >= 0:
                best = nn_dist[r, c]
                break
        if best == np.inf:
            count = state[COUNT]
            if not resumed and count < state[BUILT_AT] * 0.9 and count > brute:
                state[PENDING] = i
                pending_u[0], pending_u[1], pending_u[2] = u0, u1, u2
                return NEED_REBUILD
            # Few candidates decided since the last rebuild, or few left: a
            # direct distance scan for this one unit is cheaper than a rebuild.
            d = np.empty(count)
            for k in range(count):
                a = alive[k]
                total = 0.0
                for axis in range(xy.shape[1]):
                    diff = xy[a, axis] - xy[i, axis]
                    total += diff * diff
                d[k] = np.sqrt(total)
            d[pos[i]] = np.inf
            low = d.min()
            ties = 0
            for k in range(count):
                if d[k] <= low * (1 + 1e-9):
                    ties += 1
            pick = int(u1 * ties)
            for k in range(count):
                if d[k] <= low * (1 + 1e-9):
                    if pick == 0:
                        j = alive[k]
                        break
                    pick -= 1
        else:
            limit = best * (1 + 1e-9)
            ties = 0
            for c in range(nn_idx.shape[1]):
                if pos[nn_idx[r, c]] >= 0 and nn_dist[r, c] <= limit:
                    ties += 1
            pick = int(u1 * ties)
            for c in range(nn_idx.shape[1]):
                if pos[nn_idx[r, c]] >= 0 and nn_dist[r, c] <= limit:
                    if pick == 0:
                        j = nn_idx[r, c]
                        break
                    pick -= 1
        _settle(p, i, j, u2, alive, pos, state, eps)
        # The step that used the last row of draws (a resumed step included) asks for more.
        if state[STEP] % m == 0:
            return NEED_DRAWS
