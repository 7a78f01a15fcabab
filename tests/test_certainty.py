"""Certainty units in size-proportional selection."""

from __future__ import annotations

import numpy as np
import pytest

from fieldplan.errors import DesignError
from fieldplan.field.certainty import pps_inclusion


def test_hand_worked_case():
    # reference: certainty-unit procedure of Särndal, Swensson & Wretman (1992) §3.6 (from memory) and Lohr,
    # Sampling: Design and Analysis ch. 6, worked by hand: sizes 50,30,10,5,5 and n=3 give
    # 1.5 for the first unit (certain); then 2·30/50 = 1.2 (certain); then 1·(10,5,5)/20.
    pi, sure = pps_inclusion([50, 30, 10, 5, 5], 3)
    np.testing.assert_allclose(pi, [1.0, 1.0, 0.5, 0.25, 0.25])
    assert sure.tolist() == [True, True, False, False, False]


def test_no_certainty_when_all_below_one():
    # reference: PPS without replacement, pi_i = n x_i / sum x (Lohr ch. 6).
    pi, sure = pps_inclusion([1, 2, 3, 4], 2)
    np.testing.assert_allclose(pi, [0.2, 0.4, 0.6, 0.8])
    assert not sure.any()


def test_random_sizes_sum_to_n_and_stay_proportional():
    # reference: sum of inclusion probabilities equals the fixed sample size (Särndal et al.
    # 1992, result 2.6.2, from memory); non-certainty units keep pi proportional to size.
    rng = np.random.default_rng(5)
    for _ in range(50):
        sizes = rng.lognormal(0, 1.5, size=40)
        n = int(rng.integers(1, 30))
        pi, sure = pps_inclusion(sizes, n)
        assert pi.sum() == pytest.approx(n)
        assert (pi <= 1 + 1e-12).all() and (pi >= 0).all()
        ratio = pi[~sure] / sizes[~sure]
        np.testing.assert_allclose(ratio, ratio[0])
        if sure.any() and (~sure).any():
            assert sizes[sure].min() >= sizes[~sure].max()


def test_zero_sizes_and_bad_input():
    # reference: a unit of size zero has zero probability under PPS (Lohr ch. 6).
    pi, _ = pps_inclusion([0, 1, 1], 2)
    np.testing.assert_allclose(pi, [0, 1, 1])
    with pytest.raises(DesignError):
        pps_inclusion([0, 1], 2)
    with pytest.raises(DesignError):
        pps_inclusion([1, -1], 1)
