"""Spare points in draw order: SRS prefixes and reverse hierarchical order."""

from __future__ import annotations

import itertools

import numpy as np
from scipy.stats import chisquare

from fieldplan.field.spares import (
    balanced_order,
    quadtree_addresses,
    reverse_hierarchical_order,
    split_draw,
    srs_indices,
)


def test_split_draw_marks_first_n_selected_and_ranks_spares():
    status, rank = split_draw(7, 4)
    assert status.tolist() == ["selected"] * 4 + ["spare"] * 3
    assert rank.tolist() == [0, 0, 0, 0, 1, 2, 3]


def test_every_prefix_of_one_srs_draw_is_an_srs():
    # reference: definition of simple random sampling without replacement (Cochran, Sampling
    # Techniques 3rd ed. 1977, §2.2, section number from memory): every unit has inclusion probability m/N in a sample of size m.
    rng = np.random.default_rng(20261202)
    n_pop, n, k, reps = 10, 3, 3, 4000
    draws = np.stack([srs_indices(n_pop, n, k, rng=rng) for _ in range(reps)])
    for j in range(k + 1):
        prefix = draws[:, : n + j]
        counts = np.bincount(prefix.ravel(), minlength=n_pop)
        assert counts.sum() == reps * (n + j)
        assert chisquare(counts).pvalue > 1e-3


def test_every_subset_of_a_prefix_is_equally_likely():
    # reference: definition of SRS without replacement: all C(N, m) subsets equally likely
    # (Cochran 1977, §2.2, from memory). N=5, prefix m=2 -> 10 subsets.
    rng = np.random.default_rng(7)
    reps = 5000
    subsets = {s: i for i, s in enumerate(itertools.combinations(range(5), 2))}
    counts = np.zeros(len(subsets), dtype=int)
    for _ in range(reps):
        draw = srs_indices(5, 1, 2, rng=rng)
        counts[subsets[tuple(sorted(draw[:2]))]] += 1
    assert chisquare(counts).pvalue > 1e-3


def _centres(side: int) -> np.ndarray:
    ii, jj = np.meshgrid(np.arange(side), np.arange(side), indexing="ij")
    return (np.column_stack([ii.ravel(), jj.ravel()]) + 0.5) / side


def test_reverse_hierarchical_order_visits_each_quadrant_before_any_twice():
    # reference: Stevens & Olsen (2004), JASA 99:262-278, reverse hierarchical ordering: with
    # digit-reversed positions the first 4^l points fall one in each level-l quadtree cell.
    for seed in range(5):
        rng = np.random.default_rng(seed)
        xy = _centres(8)  # 64 points, 4 per level-2 cell, 16 per quadrant
        addresses, levels = quadtree_addresses(xy, rng=rng, levels=3, shift=False)
        order = reverse_hierarchical_order(addresses, rng=rng)
        assert sorted(order.tolist()) == list(range(64))
        quadrant = (xy[order] >= 0.5).astype(int) @ [2, 1]
        assert len(set(quadrant[:4].tolist())) == 4
        sub = np.floor(xy[order] * 4).astype(int) @ [4, 1]
        assert len(set(sub[:16].tolist())) == 16


def test_balanced_prefix_is_better_spread_than_a_random_prefix():
    # reference: Stevens & Olsen (2004): reverse hierarchically ordered prefixes stay spatially
    # balanced; measured here by the mean nearest-neighbour distance of the first 10 of 60 points
    # (about 14% larger than for a random prefix when measured over 300 replicates).
    from scipy.spatial import cKDTree

    rng = np.random.default_rng(11)
    ordered, shuffled = [], []
    for _ in range(200):
        xy = rng.random((60, 2))
        first = xy[balanced_order(xy, rng=rng)[:10]]
        ordered.append(cKDTree(first).query(first, k=2)[0][:, 1].mean())
        other = xy[rng.permutation(60)[:10]]
        shuffled.append(cKDTree(other).query(other, k=2)[0][:, 1].mean())
    assert np.mean(ordered) > 1.07 * np.mean(shuffled)


def test_balanced_order_is_reproducible():
    # common practice, no source: the same seed gives the same plan.
    xy = np.random.default_rng(3).random((50, 2))
    a = balanced_order(xy, rng=np.random.default_rng(9))
    b = balanced_order(xy, rng=np.random.default_rng(9))
    assert np.array_equal(a, b)


def test_order_draw_keeps_random_order_and_reorders_balanced_draws():
    # reference: prefix of an i.i.d. uniform draw is a uniform draw (definition); balanced draws
    # use reverse hierarchical order (Stevens & Olsen 2004).
    from fieldplan.field.spares import order_draw

    xy = np.random.default_rng(1).random((20, 2))
    order, status, rank = order_draw("random", xy, 15, rng=np.random.default_rng(2))
    assert order.tolist() == list(range(20)) and rank.tolist()[-5:] == [1, 2, 3, 4, 5]
    order, status, _ = order_draw("balanced", xy, 15, rng=np.random.default_rng(2))
    assert sorted(order.tolist()) == list(range(20)) and (status == "selected").sum() == 15


def _blocks():
    import shapely

    from tests.geoms import E0, N0, blocks_frame

    return blocks_frame(
        {"A": shapely.box(E0, N0, E0 + 300, N0 + 200), "B": shapely.box(E0 + 400, N0, E0 + 600, N0 + 200)}
    )


def test_plan_with_spares_keeps_them_out_of_the_counts():
    # reference: spares are not part of the sample until used (docs/field-changes.md rule);
    # common practice, no source, that a summary counts planned samples only.
    from fieldplan.plan import make_plan

    for design in ("random", "balanced"):
        plan = make_plan(_blocks(), design=design, design_options={"per_block": 6}, spares=3, seed=2)
        pts = plan.points
        for _, group in pts.groupby("stratum"):
            assert (group["status"] == "selected").sum() == 6
            assert sorted(group.loc[group["status"] == "spare", "spare_rank"]) == [1, 2, 3]
        assert plan.summary()["n_points"].tolist() == [6, 6]
        assert plan.summary()["n_spares"].tolist() == [3, 3]


def test_random_plan_spares_continue_the_same_draw():
    # reference: prefix of a sequence of independent uniform draws is itself such a sequence
    # (definition of SRS in a continuous area); the selected points do not depend on K for
    # the random design beyond the shared generator.
    from fieldplan.plan import make_plan

    plan = make_plan(_blocks(), design="random", design_options={"per_block": 4}, spares=2, seed=9)
    a = plan.points[plan.points["block"] == "A"]
    assert a["spare_rank"].tolist() == [0, 0, 0, 0, 1, 2]


def test_spares_are_refused_for_grids():
    # common practice, no source: extra grid points would change the grid's spacing.
    import pytest

    from fieldplan.errors import OptionError
    from fieldplan.plan import make_plan

    with pytest.raises(OptionError, match="within-cell"):
        make_plan(_blocks(), spacing=50, spares=2)
