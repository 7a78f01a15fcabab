"""Stratified allocation: Cochran ch. 5 shares, Hamilton rounding, bounds."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fieldplan.design.allocation import allocate, largest_remainder
from fieldplan.errors import DesignError, OptionError

N_H = np.array([400.0, 300.0, 200.0, 100.0])
S_H = np.array([10.0, 15.0, 20.0, 30.0])
C_H = np.array([1.0, 2.0, 3.0, 4.0])


def test_proportional_share():
    a = allocate(100, sizes=N_H, method="proportional", min_per_stratum=0)
    # reference: Cochran (1977) section 5.3, proportional allocation n_h = n N_h / N
    np.testing.assert_allclose(a.exact, 100 * N_H / N_H.sum())
    assert a.n.tolist() == [40, 30, 20, 10]


def test_neyman_share():
    a = allocate(100, sizes=N_H, sds=S_H, method="neyman", min_per_stratum=0)
    # reference: Cochran (1977) section 5.5, Neyman allocation n_h = n N_h S_h / sum N_h S_h
    np.testing.assert_allclose(a.exact, 100 * N_H * S_H / (N_H * S_H).sum())
    assert a.n.sum() == 100


def test_optimal_share_with_costs():
    a = allocate(100, sizes=N_H, sds=S_H, costs=C_H, method="optimal", min_per_stratum=0)
    w = N_H * S_H / np.sqrt(C_H)
    # reference: Cochran (1977) section 5.5, n_h = n (N_h S_h / sqrt c_h) / sum(N_h S_h / sqrt c_h)
    np.testing.assert_allclose(a.exact, 100 * w / w.sum())
    assert a.n.sum() == 100
    assert np.all(np.abs(a.n - a.exact) < 1)


def test_optimal_with_equal_costs_is_neyman_and_equal_sds_is_proportional():
    ney = allocate(57, sizes=N_H, sds=S_H, method="neyman", min_per_stratum=0)
    opt = allocate(57, sizes=N_H, sds=S_H, costs=[3, 3, 3, 3], method="optimal", min_per_stratum=0)
    # reference: Cochran (1977) section 5.5: with equal c_h optimum allocation is Neyman's
    np.testing.assert_allclose(opt.exact, ney.exact)
    same = allocate(57, sizes=N_H, sds=[2, 2, 2, 2], method="neyman", min_per_stratum=0)
    prop = allocate(57, sizes=N_H, method="proportional", min_per_stratum=0)
    # reference: Cochran (1977) section 5.5: with equal S_h Neyman reduces to proportional
    np.testing.assert_allclose(same.exact, prop.exact)


def test_equal_share():
    a = allocate(12, sizes=N_H, method="equal", min_per_stratum=0)
    assert a.n.tolist() == [3, 3, 3, 3]  # common practice, no source: n / L per stratum


def test_hamilton_hand_worked_case():
    # Quotas 10 * [41, 33, 26] / 100 = 4.1, 3.3, 2.6 -> floors 4, 3, 2 (9 seats), the one
    # left goes to the largest remainder (0.6).
    # reference: largest-remainder (Hamilton) apportionment, Balinski & Young,
    # Fair Representation (1982), ch. 2 (from memory)
    assert largest_remainder([4.1, 3.3, 2.6]).tolist() == [4, 3, 3]
    assert allocate(10, sizes=[41, 33, 26], min_per_stratum=0).n.tolist() == [4, 3, 3]


def test_hamilton_shows_the_alabama_paradox():
    # Hamilton's method is known to show the Alabama paradox: raising the house size can take
    # a seat away from a state. Sizes 6, 6, 2: n = 10 -> 4, 4, 2 but n = 11 -> 5, 5, 1.
    # reference: Balinski & Young, Fair Representation (1982) (from memory); quotas by hand:
    # 10*[6,6,2]/14 = 4.29, 4.29, 1.43 ; 11*[6,6,2]/14 = 4.71, 4.71, 1.57
    assert allocate(10, sizes=[6, 6, 2], min_per_stratum=0).n.tolist() == [4, 4, 2]
    assert allocate(11, sizes=[6, 6, 2], min_per_stratum=0).n.tolist() == [5, 5, 1]


def test_ties_are_broken_by_rng_evenly():
    wins = np.zeros(4)
    for seed in range(400):
        a = allocate(1, sizes=[1, 1, 1, 1], min_per_stratum=0, rng=np.random.default_rng(seed))
        wins += a.n
    # reference: scipy-free binomial bound; each stratum should win ~100 of 400 ties
    # (common practice, no source: a fair tie-break is uniform)
    assert wins.sum() == 400
    assert np.all(np.abs(wins - 100) < 40)


def test_minimum_binds_and_rest_is_reallocated():
    a = allocate(20, sizes=[1000, 10, 1], min_per_stratum=2)
    # Both small strata are lifted to the minimum; the rest (16) goes to the large one.
    # common practice, no source: a floor per stratum so each can be estimated;
    # 20 - 2 - 2 = 16 by hand
    np.testing.assert_allclose(a.exact, [16, 2, 2])
    assert a.at_bound.tolist() == [False, True, True]


def test_capacity_binds_and_excess_moves_on():
    a = allocate(30, sizes=[10, 10, 10], min_per_stratum=0, max_per_stratum=[4, 100, 100])
    # 30/3 = 10 > 4: stratum 1 takes 4, the other two share 26 equally (hand computation).
    # reference: Cochran (1977) ch. 5, allocation requiring more than 100 per cent sampling:
    # take the capped stratum whole and re-allocate the rest (section 5.8, from memory)
    np.testing.assert_allclose(a.exact, [4, 13, 13])
    assert a.n.tolist() == [4, 13, 13]


def test_errors_for_impossible_totals():
    with pytest.raises(OptionError, match="below the sum"):
        allocate(2, sizes=[1, 1, 1], min_per_stratum=1)
    with pytest.raises(DesignError, match="capacity"):
        allocate(10, sizes=[1, 1], max_per_stratum=[3, 3])
    with pytest.raises(OptionError, match="standard deviation"):
        allocate(10, sizes=[1, 1], method="neyman")
    with pytest.raises(OptionError, match="unknown allocation"):
        allocate(10, sizes=[1, 1], method="square-root")


def _check(a, n, lo, hi, w):
    # Plain numpy comparisons keep 10 000 cases within a few seconds.
    assert a.n.sum() == n  # Hamilton: integers sum exactly to n
    assert abs(a.exact.sum() - n) < 1e-6 * max(1, n)
    assert np.all(np.abs(a.n - a.exact) < 1 + 1e-9)
    assert np.all(a.n >= lo) and np.all(a.n <= hi)
    # reference: Cochran (1977) section 5.5 shares, i.e. exact = lam * w for strata off
    # their bounds, with one lam; bound strata would get less (min) or more (max) from lam * w
    free = (a.exact > lo + 1e-9) & (a.exact < hi - 1e-9) & (w > 0)
    if free.sum() >= 2:
        lam = a.exact[free] / w[free]
        assert np.all(np.abs(lam - lam[0]) <= 1e-7 * lam[0])
        lam0 = lam[0]
        pinned = lo == hi  # a stratum whose minimum equals its capacity has no choice
        at_lo = (np.abs(a.exact - lo) < 1e-7) & ~free & ~pinned
        at_hi = (np.abs(a.exact - hi) < 1e-7) & ~free & ~pinned
        assert np.all(lam0 * w[at_lo] <= lo[at_lo] + 1e-7)
        assert np.all(lam0 * w[at_hi] >= hi[at_hi] - 1e-7)


def _random_case(rng):
    k = int(rng.integers(1, 12))
    sizes = rng.gamma(1.0, 50.0, k)
    sds = rng.uniform(0.1, 5, k)
    costs = rng.uniform(0.5, 4, k)
    lo = rng.integers(0, 4, k)
    hi = lo + rng.integers(0, 60, k) if rng.random() < 0.5 else np.full(k, np.inf)
    cap = hi.sum()
    top = int(min(cap, lo.sum() + 200))
    n = int(rng.integers(lo.sum(), top + 1))
    method = rng.choice(["proportional", "equal", "neyman", "optimal"])
    return n, sizes, sds, costs, lo, hi, str(method)


@pytest.mark.slow
def test_ten_thousand_seeded_cases_sum_exactly():
    rng = np.random.default_rng(2024)
    for _ in range(10_000):
        n, sizes, sds, costs, lo, hi, method = _random_case(rng)
        a = allocate(
            n,
            sizes=sizes,
            sds=sds,
            costs=costs,
            method=method,
            min_per_stratum=lo,
            max_per_stratum=None if np.isinf(hi).all() else hi,
            rng=rng,
        )
        _check(a, n, lo, hi, a.weights)


@settings(max_examples=300, deadline=None)
@given(
    sizes=st.lists(st.floats(0.01, 1e4), min_size=1, max_size=15),
    extra=st.integers(0, 500),
    min_each=st.integers(0, 3),
    seed=st.integers(0, 2**32 - 1),
)
def test_hypothesis_integers_sum_to_n(sizes, extra, min_each, seed):
    lo = np.full(len(sizes), min_each)
    n = int(lo.sum()) + extra
    a = allocate(n, sizes=sizes, min_per_stratum=min_each, rng=np.random.default_rng(seed))
    _check(a, n, lo, np.full(len(sizes), np.inf), np.asarray(sizes))


def test_zero_weight_strata_keep_their_minimum():
    a = allocate(9, sizes=[0.0, 3.0, 6.0], min_per_stratum=1)
    # common practice, no source: a stratum of zero size gets only its floor (1); the other
    # 8 are shared 3 : 6 as Cochran's proportional shares, 8/3 and 16/3 (hand computation)
    np.testing.assert_allclose(a.exact, [1.0, 8 / 3, 16 / 3])
    assert a.n.tolist() == [1, 3, 5]
    with pytest.raises(DesignError, match="cannot be reached"):
        allocate(10, sizes=[0, 1], max_per_stratum=[20, 3], min_per_stratum=1)
