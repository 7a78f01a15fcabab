"""Conditioned Latin hypercube sampling (Minasny & McBratney 2006) over grid cells.

The cells of the covariate grid inside the blocks are the population. A sample of ``n``
cells is sought whose covariates form a Latin hypercube of the population's marginal
distributions: each covariate is cut at its ``n`` quantiles into ``n`` strata and the
sample should hit every stratum exactly once. The objective (Minasny & McBratney 2006,
eqs. 3-5) is::

    O = w1 * sum_j sum_i |eta_ij - 1|              continuous covariates, quantile strata
      + w2 * sum_j sum_c |eta_jc / n - kappa_jc|   categorical covariates, class proportions
      + w3 * sum_ij |C_ij - T_ij|                  correlation matrix of population vs sample

and is minimised by simulated annealing: at each step one sampled cell is swapped for a
random unsampled cell (with probability ``p`` a random sampled cell, otherwise one of the
cells sitting in the most over-filled strata), a worse sample is kept with probability
``exp(-dO / T)``, and ``T`` falls by a factor every ``cycle`` steps.

With a cost per cell (walking distance from a track, say) the costed variant of Roudier
et al. (2012) adds a second Metropolis test on the change of total cost (in units of the
mean cell cost), so that cheaper samples of similar quality are preferred.

The annealing loop is one numba kernel (compiled on first use) with incremental counts and sums (a step costs
O(k^2), whatever the number of cells); all random numbers are drawn beforehand from the
caller's ``rng``, so the same seed gives the same sample.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fieldplan.design.jit import kernel
from fieldplan.errors import DesignError, OptionError

__all__ = ["ClhsSample", "clhs", "objective", "quantile_edges", "strata_of"]


@dataclass(frozen=True)
class ClhsSample:
    """A conditioned Latin hypercube sample.

    Attributes
    ----------
    index : numpy.ndarray
        Rows of the population table chosen, in the order they are reported (ascending).
    objective : float
        Final objective ``O``.
    terms : tuple of float
        ``(O1, O2, O3)`` before weighting.
    strata_hit : numpy.ndarray
        Per continuous covariate, the number of its ``n`` quantile strata holding exactly one
        sampled cell (``n`` everywhere means a perfect Latin hypercube).
    cost : float
        Total cost of the sample (0 without a cost).
    iterations : int
    """

    index: np.ndarray
    objective: float
    terms: tuple[float, float, float]
    strata_hit: np.ndarray
    cost: float
    iterations: int


def quantile_edges(table: np.ndarray, n: int) -> np.ndarray:
    """``(n + 1, k)`` quantile edges cutting each column into ``n`` equal-count strata."""
    return np.quantile(table, np.linspace(0.0, 1.0, n + 1), axis=0)


def strata_of(table: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Stratum (0..n-1) of every value; strata are ``[q_i, q_i+1)``, the last one closed."""
    n = edges.shape[0] - 1
    out = np.empty(table.shape, dtype=np.int64)
    for j in range(table.shape[1]):
        out[:, j] = np.clip(np.searchsorted(edges[1:-1, j], table[:, j], side="right"), 0, n - 1)
    return out


def _corr(x: np.ndarray) -> np.ndarray:
    if x.shape[1] < 2:
        return np.ones((1, 1))
    with np.errstate(invalid="ignore", divide="ignore"):
        c = np.corrcoef(x, rowvar=False)
    return np.nan_to_num(c, nan=0.0)


def objective(
    table: np.ndarray,
    index: np.ndarray,
    *,
    categorical: np.ndarray | None = None,
    weights: tuple[float, float, float] = (1.0, 1.0, 1.0),
    edges: np.ndarray | None = None,
) -> tuple[float, tuple[float, float, float], np.ndarray]:
    """The cLHS objective of a sample (Minasny & McBratney 2006), computed directly.

    Returns
    -------
    total : float
    terms : tuple
        ``(O1, O2, O3)``.
    strata_hit : numpy.ndarray
        Per continuous covariate, strata holding exactly one sampled cell.
    """
    table = np.asarray(table, dtype="float64")
    n = len(index)
    if edges is None:
        edges = quantile_edges(table, n)
    s = strata_of(table[index], edges)
    counts = np.zeros((n, table.shape[1]), dtype=np.int64)
    for j in range(table.shape[1]):
        counts[:, j] = np.bincount(s[:, j], minlength=n)
    o1 = float(np.abs(counts - 1).sum())
    o2 = 0.0
    if categorical is not None and categorical.size:
        for j in range(categorical.shape[1]):
            classes, pop = np.unique(categorical[:, j], return_counts=True)
            sample = np.array([(categorical[index, j] == c).sum() for c in classes])
            o2 += float(np.abs(sample / n - pop / len(categorical)).sum())
    o3 = float(np.abs(_corr(table) - _corr(table[index])).sum())
    w1, w2, w3 = weights
    return w1 * o1 + w2 * o2 + w3 * o3, (o1, o2, o3), (counts == 1).sum(axis=0)


@kernel
def _sample_corr_term(sx, sxx, sxy, n, pop_corr):
    k = sx.shape[0]
    total = 0.0
    for a in range(k):
        for b in range(k):
            if a == b:
                c = 1.0
            else:
                va = sxx[a] - sx[a] * sx[a] / n
                vb = sxx[b] - sx[b] * sx[b] / n
                cov = sxy[a, b] - sx[a] * sx[b] / n
                c = cov / np.sqrt(va * vb) if va > 0 and vb > 0 else 0.0
            total += abs(pop_corr[a, b] - c)
    return total


@kernel
def _o2(ccounts, kappa, n):
    t = 0.0
    for j in range(kappa.shape[0]):
        for q in range(kappa.shape[1]):
            if kappa[j, q] >= 0:
                t += abs(ccounts[j, q] / n - kappa[j, q])
    return t


@kernel
def _anneal(
    x, strata, cats, kappa, cost, pop_corr, start, u_kind, u_pick, u_cand, u_accept, u_accept_cost,
    w1, w2, w3, temp0, cooling, cycle, p_random, use_cost,
):
    n_cells, k = x.shape
    n = start.shape[0]
    kc = cats.shape[1]
    n_classes = kappa.shape[1]
    sample = start.copy()
    taken = np.zeros(n_cells, dtype=np.bool_)
    counts = np.zeros((n, k), dtype=np.int64)
    ccounts = np.zeros((max(kc, 1), max(n_classes, 1)), dtype=np.int64)
    sx = np.zeros(k)
    sxx = np.zeros(k)
    sxy = np.zeros((k, k))
    total_cost = 0.0
    for i in range(n):
        c = sample[i]
        taken[c] = True
        total_cost += cost[c]
        for j in range(k):
            counts[strata[c, j], j] += 1
            sx[j] += x[c, j]
            sxx[j] += x[c, j] * x[c, j]
            for b in range(k):
                sxy[j, b] += x[c, j] * x[c, b]
        for j in range(kc):
            ccounts[j, cats[c, j]] += 1

    o1 = 0.0
    for i in range(n):
        for j in range(k):
            o1 += abs(counts[i, j] - 1)
    o2 = _o2(ccounts, kappa, n)
    o3 = _sample_corr_term(sx, sxx, sxy, n, pop_corr)
    current = w1 * o1 + w2 * o2 + w3 * o3
    temp = temp0
    iterations = u_kind.shape[0]
    for it in range(iterations):
        # Which sampled cell leaves.
        if u_kind[it] < p_random:
            slot = int(u_pick[it] * n)
        else:
            worst = -1
            tie = 0
            best_slot = 0
            for i in range(n):
                score = 0
                for j in range(k):
                    score += counts[strata[sample[i], j], j] - 1
                if score > worst:
                    worst = score
                    best_slot = i
                    tie = 1
                elif score == worst:
                    tie += 1
            # Ties are broken by the same uniform: the m-th tied slot.
            target = int(u_pick[it] * tie)
            if tie > 1:
                seen = 0
                for i in range(n):
                    score = 0
                    for j in range(k):
                        score += counts[strata[sample[i], j], j] - 1
                    if score == worst:
                        if seen == target:
                            best_slot = i
                            break
                        seen += 1
            slot = best_slot
        if slot >= n:
            slot = n - 1
        old = sample[slot]
        new = int(u_cand[it] * n_cells)
        if new >= n_cells:
            new = n_cells - 1
        while taken[new]:
            new = (new + 1) % n_cells
        # Change in O1 from moving one count per covariate.
        d1 = 0.0
        for j in range(k):
            so = strata[old, j]
            sn = strata[new, j]
            if so != sn:
                d1 += abs(counts[so, j] - 2) - abs(counts[so, j] - 1)
                d1 += abs(counts[sn, j]) - abs(counts[sn, j] - 1)
        # O2 and O3 on the updated counts and sums (undone if rejected).
        for j in range(kc):
            ccounts[j, cats[old, j]] -= 1
            ccounts[j, cats[new, j]] += 1
        new_o2 = _o2(ccounts, kappa, n) if kc > 0 else 0.0
        for j in range(k):
            sx[j] += x[new, j] - x[old, j]
            sxx[j] += x[new, j] * x[new, j] - x[old, j] * x[old, j]
            for b in range(k):
                sxy[j, b] += x[new, j] * x[new, b] - x[old, j] * x[old, b]
        new_o3 = _sample_corr_term(sx, sxx, sxy, n, pop_corr)
        candidate = w1 * (o1 + d1) + w2 * new_o2 + w3 * new_o3
        delta = candidate - current
        accept = delta <= 0 or u_accept[it] < np.exp(-delta / temp)
        if accept and use_cost:
            dc = cost[new] - cost[old]
            accept = dc <= 0 or u_accept_cost[it] < np.exp(-dc / temp)
        if accept:
            for j in range(k):
                counts[strata[old, j], j] -= 1
                counts[strata[new, j], j] += 1
            o1 += d1
            o2 = new_o2
            o3 = new_o3
            current = candidate
            taken[old] = False
            taken[new] = True
            sample[slot] = new
            total_cost += cost[new] - cost[old]
        else:
            for j in range(kc):
                ccounts[j, cats[old, j]] += 1
                ccounts[j, cats[new, j]] -= 1
            for j in range(k):
                sx[j] -= x[new, j] - x[old, j]
                sxx[j] -= x[new, j] * x[new, j] - x[old, j] * x[old, j]
                for b in range(k):
                    sxy[j, b] -= x[new, j] * x[new, b] - x[old, j] * x[old, b]
        if (it + 1) % cycle == 0:
            temp *= cooling
        if current <= 0.0:
            return sample, current, o1, o2, o3, total_cost, it + 1
    return sample, current, o1, o2, o3, total_cost, iterations


def clhs(
    table: np.ndarray,
    n: int,
    *,
    rng: np.random.Generator,
    categorical: np.ndarray | None = None,
    cost: np.ndarray | None = None,
    iterations: int = 10_000,
    temperature: float = 1.0,
    cooling: float = 0.95,
    cycle: int = 10,
    p_random: float = 0.5,
    weights: tuple[float, float, float] = (1.0, 1.0, 1.0),
) -> ClhsSample:
    """Choose ``n`` rows of ``table`` by conditioned Latin hypercube sampling.

    Parameters
    ----------
    table : numpy.ndarray
        ``(N, k)`` continuous covariates of the population cells (no NaN).
    n : int
        Sample size (2 <= n < N).
    rng : numpy.random.Generator
    categorical : numpy.ndarray, optional
        ``(N, c)`` integer class codes of categorical covariates.
    cost : numpy.ndarray, optional
        ``(N,)`` cost of sampling each cell (e.g. metres from a track); enables the costed
        variant (Roudier et al. 2012).
    iterations : int
        Annealing steps (fewer when the objective reaches 0).
    temperature, cooling, cycle : float, float, int
        Start temperature, factor by which it falls, and steps between falls (the defaults
        of Minasny & McBratney's and the R package's examples: 1, 0.95, 10).
    p_random : float
        Share of steps that swap a random sampled cell rather than a worst-placed one.
    weights : tuple
        ``(w1, w2, w3)`` of the objective terms.
    """
    x = np.ascontiguousarray(table, dtype="float64")
    if x.ndim != 2 or not np.isfinite(x).all():
        raise DesignError("cLHS needs a table of finite covariate values, one row per cell")
    n_cells, k = x.shape
    if not 2 <= n < n_cells:
        raise OptionError(f"cLHS sample size must be from 2 to {n_cells - 1} (cells available), got {n}")
    if iterations < 1:
        raise OptionError(f"cLHS iterations must be at least 1, got {iterations}")
    if not 0 < cooling < 1 or not 0 <= p_random <= 1 or temperature <= 0 or cycle < 1:
        raise OptionError("cLHS annealing needs 0 < cooling < 1, 0 <= p <= 1, temperature > 0, cycle >= 1")
    edges = quantile_edges(x, n)
    strata = strata_of(x, edges)
    pop_corr = _corr(x)
    if categorical is not None and np.size(categorical):
        cats_in = np.asarray(categorical).reshape(n_cells, -1)
        cats = np.empty(cats_in.shape, dtype=np.int64)
        levels = []
        for j in range(cats_in.shape[1]):
            classes, cats[:, j] = np.unique(cats_in[:, j], return_inverse=True)
            levels.append(np.bincount(cats[:, j]) / n_cells)
        kappa = np.full((len(levels), max(len(v) for v in levels)), -1.0)
        for j, v in enumerate(levels):
            kappa[j, : len(v)] = v
    else:
        cats = np.zeros((n_cells, 0), dtype=np.int64)
        kappa = np.zeros((0, 0))
    if cost is not None:
        cost_in = np.asarray(cost, dtype="float64").reshape(-1)
        if cost_in.shape[0] != n_cells or not np.isfinite(cost_in).all() or (cost_in < 0).any():
            raise DesignError("the cost surface needs a finite, non-negative cost for every cell")
        scale = cost_in.mean()
        cost_arr = cost_in / scale if scale > 0 else np.zeros(n_cells)
    else:
        cost_arr = np.zeros(n_cells)
    start = np.sort(rng.choice(n_cells, size=n, replace=False)).astype(np.int64)
    u = rng.random((5, iterations))
    sample, total, o1, o2, o3, total_cost, done = _anneal(
        x, strata, cats, kappa, cost_arr, pop_corr, start, u[0], u[1], u[2], u[3], u[4],
        float(weights[0]), float(weights[1]), float(weights[2]), float(temperature), float(cooling), int(cycle),
        float(p_random), cost is not None,
    )
    index = np.sort(sample)
    # Recompute from scratch: the kernel's running sums must agree, and this is what is reported.
    final, terms, hit = objective(x, index, categorical=categorical, weights=weights, edges=edges)
    real_cost = float(np.asarray(cost, dtype="float64")[index].sum()) if cost is not None else 0.0
    return ClhsSample(index, float(final), terms, hit, real_cost, int(done))
