"""Stratified allocation of a total sample size over strata.

The exact (real-valued) share of each stratum follows Cochran, *Sampling
Techniques*, 3rd ed. (1977), chapter 5:

* ``proportional``: :math:`n_h \\propto N_h`;
* ``equal``: the same share for every stratum;
* ``neyman``: :math:`n_h \\propto N_h S_h` (Neyman allocation);
* ``optimal``: :math:`n_h \\propto N_h S_h / \\sqrt{c_h}` (optimum allocation for a
  linear cost function ``C = c_0 + sum(c_h n_h)``).

(Sections 5.3 and 5.5 of the book; section and equation numbers are recalled,
not checked against a copy.)

``N_h`` may be a count of units or a size measure such as area. Lower and upper
bounds (at least ``min_per_stratum`` points; no more than a stratum's capacity)
are honoured by water filling: the bounded share is
``clip(lambda * w_h, lo_h, hi_h)`` with ``lambda`` chosen so the shares sum to
``n``. This is the fixed point of the usual "fix the strata that hit a bound
and re-allocate the rest in proportion" iteration, found exactly rather than by
repetition.

Integers come from the largest-remainder (Hamilton) method: every stratum gets
the floor of its exact share, and the points left over go to the largest
fractional parts, ties broken at random. The integers therefore sum exactly to
``n`` and each lies within one of its exact share.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike

from fieldplan.errors import DesignError, OptionError

__all__ = ["ALLOCATION_METHODS", "Allocation", "allocate", "largest_remainder", "weights_for"]

ALLOCATION_METHODS = ("proportional", "equal", "neyman", "optimal")

Method = Literal["proportional", "equal", "neyman", "optimal"]

# Fractional parts closer than this are treated as ties, so that float noise
# does not decide which stratum receives a left-over point.
_TIE_DECIMALS = 9


@dataclass(frozen=True)
class Allocation:
    """Result of :func:`allocate`.

    Attributes
    ----------
    method : str
        Allocation method used.
    weights : numpy.ndarray
        Unnormalised weight of each stratum (``N_h``, ``N_h S_h``, ...).
    exact : numpy.ndarray
        Exact real-valued targets after bounds; they sum to ``n``.
    n : numpy.ndarray
        Integer sample sizes; they sum to ``n``.
    at_bound : numpy.ndarray
        True where a minimum or capacity bound binds the exact target.
    """

    method: str
    weights: np.ndarray
    exact: np.ndarray
    n: np.ndarray
    at_bound: np.ndarray

    @property
    def total(self) -> int:
        """Total number of sampling units allocated."""
        return int(self.n.sum())


def _as_vector(values: ArrayLike, name: str, size: int | None = None) -> np.ndarray:
    arr = np.asarray(values, dtype=float)
    if arr.ndim == 0 and size is not None:
        arr = np.full(size, float(arr))
    if arr.ndim != 1:
        raise OptionError(f"{name} must be a one-dimensional sequence, one value per stratum")
    if size is not None and arr.shape[0] != size:
        raise OptionError(f"{name} has {arr.shape[0]} values but there are {size} strata")
    if not np.all(np.isfinite(arr)):
        raise OptionError(f"{name} must be finite numbers; check for blanks or NaN")
    return arr


def weights_for(
    method: Method,
    *,
    sizes: ArrayLike,
    sds: ArrayLike | None = None,
    costs: ArrayLike | None = None,
) -> np.ndarray:
    """Return the allocation weight of each stratum for ``method``.

    Parameters
    ----------
    method : {"proportional", "equal", "neyman", "optimal"}
        Allocation rule.
    sizes : array_like
        Stratum sizes ``N_h`` (unit counts, or a size measure such as area).
    sds : array_like, optional
        Stratum standard deviations ``S_h``; needed by ``neyman`` and ``optimal``.
    costs : array_like, optional
        Cost per sampling unit ``c_h``; needed by ``optimal``.
    """
    size = _as_vector(sizes, "sizes")
    if np.any(size < 0):
        raise OptionError("sizes must be zero or positive (a count or an area per stratum)")
    if method == "proportional":
        return size
    if method == "equal":
        return np.ones_like(size)
    if method in ("neyman", "optimal"):
        if sds is None:
            raise OptionError(f"allocation '{method}' needs a standard deviation per stratum")
        sd = _as_vector(sds, "sds", size.shape[0])
        if np.any(sd < 0):
            raise OptionError("standard deviations must be zero or positive")
        w = size * sd
        if method == "optimal":
            if costs is None:
                raise OptionError("allocation 'optimal' needs a cost per sampling unit per stratum")
            cost = _as_vector(costs, "costs", size.shape[0])
            if np.any(cost <= 0):
                raise OptionError("costs per sampling unit must be positive")
            w = w / np.sqrt(cost)
        return w
    raise OptionError(f"unknown allocation method '{method}'; choose one of {', '.join(ALLOCATION_METHODS)}")


def _water_fill(n: float, w: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Return ``clip(lam * w, lo, hi)`` with ``lam`` chosen so the sum is ``n``."""
    positive = w > 0
    if not positive.any():
        return lo.copy()
    # The sum is piecewise linear and non-decreasing in lam, with kinks where a
    # stratum leaves its lower bound or reaches its upper bound.
    kinks = np.concatenate([lo[positive] / w[positive], hi[positive] / w[positive]])
    kinks = np.unique(kinks[np.isfinite(kinks)])
    totals = np.clip(kinks[:, None] * w[None, :], lo[None, :], hi[None, :]).sum(axis=1)
    # The tolerance keeps float noise at a kink (3.9999999996 for 4) off the last segment.
    j = int(np.searchsorted(totals, n - 1e-9 * max(1.0, n), side="left"))
    if j == 0:
        # Below the first kink every stratum sits at its minimum.
        lam = kinks[0]
    elif j == kinks.size:
        slope = w[positive & ~np.isfinite(hi)].sum()
        if slope <= 0:
            room = hi[positive].sum() + lo[~positive].sum()
            raise DesignError(
                f"n={n:g} cannot be reached: strata with zero size or standard deviation take only "
                f"their minimum, and all strata together then hold at most {room:g}; lower n"
            )
        lam = kinks[-1] + (n - totals[-1]) / slope
    else:
        step = (kinks[j] - kinks[j - 1]) / (totals[j] - totals[j - 1])
        lam = kinks[j - 1] + (n - totals[j - 1]) * step
    exact = np.clip(lam * w, lo, hi)
    # Remove the rounding residue so that the exact targets sum to n.
    free = (exact > lo) & (exact < hi)
    if free.any():
        exact[free] += (n - exact.sum()) * w[free] / w[free].sum()
    return exact


def largest_remainder(
    exact: ArrayLike,
    *,
    upper: ArrayLike | None = None,
    rng: np.random.Generator | None = None,
) -> np.ndarray:
    """Round real targets to integers by the largest-remainder (Hamilton) method.

    Parameters
    ----------
    exact : array_like
        Non-negative real targets whose sum is an integer.
    upper : array_like, optional
        Integer ceilings no stratum may exceed (for example a capacity).
    rng : numpy.random.Generator, optional
        Breaks ties between equal fractional parts. Without it, ties go to the
        earlier stratum.

    Returns
    -------
    numpy.ndarray
        Integers that sum to ``round(sum(exact))``, each ``floor`` or ``ceil``
        of its target.
    """
    x = np.asarray(exact, dtype=float)
    near = np.round(x)
    x = np.where(np.abs(x - near) < 1e-9, near, x)
    base = np.floor(x).astype(np.int64)
    total = int(np.round(x.sum()))
    left = total - int(base.sum())
    if left <= 0:
        return base
    frac = np.round(x - base, _TIE_DECIMALS)
    eligible = frac > 0
    if upper is not None:
        eligible &= base < np.asarray(upper)
    tiebreak = rng.random(x.shape[0]) if rng is not None else np.arange(x.shape[0], dtype=float)
    # lexsort sorts by the last key first: largest fraction, then tie-break.
    order = np.lexsort((tiebreak, -frac, ~eligible))
    base[order[:left]] += 1
    return base


def allocate(
    n: int,
    *,
    sizes: ArrayLike,
    sds: ArrayLike | None = None,
    costs: ArrayLike | None = None,
    method: Method = "proportional",
    min_per_stratum: int | ArrayLike = 1,
    max_per_stratum: ArrayLike | None = None,
    rng: np.random.Generator | None = None,
) -> Allocation:
    """Allocate a total sample size ``n`` over strata.

    Parameters
    ----------
    n : int
        Total number of sampling units.
    sizes : array_like
        Stratum sizes ``N_h``: unit counts or a size measure such as hectares.
    sds : array_like, optional
        Standard deviation per stratum (``neyman``, ``optimal``).
    costs : array_like, optional
        Cost per sampling unit per stratum (``optimal``).
    method : {"proportional", "equal", "neyman", "optimal"}
        Allocation rule (see module docstring).
    min_per_stratum : int or array_like
        Lower bound per stratum (default 1, so each stratum can be estimated).
    max_per_stratum : array_like, optional
        Capacity per stratum (for example the number of candidate locations).
    rng : numpy.random.Generator, optional
        Breaks ties between equal remainders.

    Returns
    -------
    Allocation

    Raises
    ------
    OptionError
        Inputs malformed, or ``n`` below the sum of minimums or above the total
        capacity.

    Examples
    --------
    >>> allocate(10, sizes=[1, 2, 3]).n.tolist()
    [2, 3, 5]
    """
    if isinstance(n, bool) or int(n) != n or n < 0:
        raise OptionError(f"total sample size must be a non-negative integer, got {n!r}")
    n = int(n)
    w = weights_for(method, sizes=sizes, sds=sds, costs=costs)
    count = w.shape[0]
    if count == 0:
        raise OptionError("there are no strata to allocate over")
    lo = _as_vector(min_per_stratum, "min_per_stratum", count)
    if np.any(lo < 0) or np.any(lo != np.floor(lo)):
        raise OptionError("min_per_stratum must be whole numbers of zero or more")
    if max_per_stratum is None:
        hi = np.full(count, np.inf)
    else:
        hi = np.floor(_as_vector(max_per_stratum, "max_per_stratum", count))
        bad = np.flatnonzero(hi < lo)
        if bad.size:
            raise DesignError(
                f"stratum {int(bad[0]) + 1} holds at most {hi[bad[0]]:.0f} units but the minimum "
                f"is {lo[bad[0]]:.0f}; lower --min-per-stratum or merge that stratum"
            )
    if n < lo.sum():
        raise OptionError(
            f"total n={n} is below the sum of per-stratum minimums ({lo.sum():.0f} over "
            f"{count} strata); raise n or lower --min-per-stratum"
        )
    if n > hi.sum():
        raise DesignError(f"total n={n} exceeds the total capacity of the strata ({hi.sum():.0f}); lower n")
    if not np.any(w > 0) and n > lo.sum():
        raise DesignError(
            f"allocation '{method}' gives every stratum zero weight (all sizes or standard "
            "deviations are zero); use 'equal' or supply non-zero values"
        )
    exact = _water_fill(float(n), w, lo, hi)
    tol = 1e-9 * max(1.0, n)
    at_bound = (np.abs(exact - lo) <= tol) | (np.abs(exact - hi) <= tol)
    upper = np.where(np.isfinite(hi), hi, np.iinfo(np.int64).max)
    ints = largest_remainder(exact, upper=upper, rng=rng)
    return Allocation(method=method, weights=w, exact=exact, n=ints, at_bound=at_bound)
