"""Exact shortest tour or path by the Held-Karp dynamic programme.

Reference: Held, M. and Karp, R. M. (1962), "A dynamic programming approach to
sequencing problems", J. SIAM 10(1), 196-210. Time O(2**n * n**2), so it is
only for small ``n`` (the route solver uses it up to 9 points by default and
the tests use it as the exact answer).
"""

from __future__ import annotations

import numpy as np

from fieldplan.errors import OptionError

__all__ = ["MAX_EXACT", "held_karp"]

#: Largest number of nodes accepted (memory 2**(n-1) * (n-1) floats).
MAX_EXACT = 16


def held_karp(dist: np.ndarray, *, closed: bool = True) -> tuple[float, np.ndarray]:
    """Optimal route over all nodes of a cost matrix, starting at node 0.

    Parameters
    ----------
    dist : (n, n) array
        ``dist[i, j]`` is the cost of going from ``i`` to ``j`` (need not be
        symmetric).
    closed : bool
        True for a tour returning to node 0; False for a path from node 0 that
        may end anywhere.

    Returns
    -------
    length : float
        Optimal cost.
    order : (n,) int array
        Node order, starting with 0.
    """
    dist = np.asarray(dist, dtype=float)
    n = dist.shape[0]
    if dist.shape != (n, n) or n < 1:
        raise OptionError(f"held_karp needs a square cost matrix, got shape {dist.shape}")
    if n > MAX_EXACT:
        raise OptionError(f"held_karp is exponential; {n} nodes is above {MAX_EXACT}")
    if n == 1:
        return 0.0, np.zeros(1, dtype=np.int64)
    m = n - 1  # nodes 1..n-1 are bit 0..m-1
    full = (1 << m) - 1
    cost = np.full((1 << m, m), np.inf)
    parent = np.full((1 << m, m), -1, dtype=np.int64)
    bits = np.arange(m)
    cost[1 << bits, bits] = dist[0, 1:]
    inner = dist[1:, 1:]
    # Masks in increasing order: every sub-mask is finished before it is used.
    for mask in range(1, full + 1):
        members = bits[(mask >> bits) & 1 == 1]
        if len(members) < 2:
            continue
        for j in members:
            prev = mask ^ (1 << j)
            cand = cost[prev, members] + inner[members, j]
            best = int(np.argmin(cand))
            cost[mask, j] = cand[best]
            parent[mask, j] = members[best]
    final = cost[full] + (dist[1:, 0] if closed else 0.0)
    last = int(np.argmin(final))
    length = float(final[last])
    order = []
    mask, j = full, last
    while j >= 0:
        order.append(j + 1)
        mask, j = mask ^ (1 << j), int(parent[mask, j])
    order.append(0)
    return length, np.asarray(order[::-1], dtype=np.int64)
