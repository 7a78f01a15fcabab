"""Certainty units in size-proportional (PPS) selection.

With inclusion probabilities ``pi_i = n x_i / sum(x)``, a unit larger than
``sum(x) / n`` would get ``pi_i > 1``. Such units are taken with certainty,
removed, and the remaining sample size is spread over the rest in proportion to
size again, repeating until no probability exceeds 1 (Särndal, Swensson &
Wretman 1992, *Model Assisted Survey Sampling*, §3.6; Lohr, *Sampling: Design
and Analysis*, ch. 6).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from fieldplan.errors import DesignError

__all__ = ["pps_inclusion"]


def pps_inclusion(sizes: ArrayLike, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Inclusion probabilities proportional to size, capped at 1 by certainty selection.

    Parameters
    ----------
    sizes : array_like
        Non-negative size measure of each unit (area, number of plants...).
    n : int
        Sample size; at most the number of units with positive size.

    Returns
    -------
    pi : numpy.ndarray
        Inclusion probabilities; they sum to ``n`` and none exceeds 1.
    certainty : numpy.ndarray
        Boolean mask of the units taken with certainty.

    Examples
    --------
    >>> pi, sure = pps_inclusion([50, 30, 10, 5, 5], 3)
    >>> pi.tolist(), sure.tolist()
    ([1.0, 1.0, 0.5, 0.25, 0.25], [True, True, False, False, False])
    """
    x = np.asarray(sizes, dtype=float).ravel()
    if not np.all(np.isfinite(x)) or np.any(x < 0):
        bad = int(np.flatnonzero(~np.isfinite(x) | (x < 0))[0])
        raise DesignError(f"unit {bad}: size must be a finite number >= 0, got {x[bad]}; fix the size column")
    if int(n) != n or n < 0:
        raise DesignError(f"sample size must be a whole number >= 0, got {n}")
    n = int(n)
    positive = x > 0
    if n > int(positive.sum()):
        raise DesignError(
            f"cannot select {n} units with probability proportional to size: only "
            f"{int(positive.sum())} have a positive size; lower n"
        )
    certainty = np.zeros(len(x), dtype=bool)
    pi = np.zeros(len(x))
    # Each pass removes at least one unit, so the loop ends within len(x) passes.
    for _ in range(len(x) + 1):
        rest = ~certainty & positive
        left = n - int(certainty.sum())
        total = x[rest].sum()
        pi = np.where(certainty, 1.0, np.where(rest, left * x / total if total > 0 else 0.0, 0.0))
        over = rest & (pi >= 1.0)
        if left == 0 or not over.any():
            break
        certainty |= over
    pi = np.where(certainty, 1.0, pi)
    return pi, certainty
