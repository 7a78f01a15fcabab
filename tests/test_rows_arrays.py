"""The array row model (all blocks at once, numpy) against the compiled per-block one it replaced.

reference: the earlier per-block row model and draw (``tests/reference_rows``: numba kernels, one
block at a time), itself checked against GEOS line-polygon intersection in ``tests/test_clusters.py``.
Same blocks, spacings, bearings, clips and seeds must give the same rows, plants and plant positions
(positions to 1e-9 m where the order of float operations could differ; ids identical).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import shapely
import shapely.affinity

from fieldplan.design import clusters as new
from fieldplan.planning.plan import sample_areas
from fieldplan.planning.stratum_designs import STRATIFIED_DESIGNS, check_design_options, strata_labels
from tests import geoms as g
from tests.reference_rows import cluster_picks
from tests.reference_rows import clusters as old

_ROTATED = shapely.affinity.rotate(g.concave, 23.0, origin="centroid")
_STRIP = shapely.box(g.E0, g.N0, g.E0 + 1.0, g.N0 + 80)  # narrower than a row spacing: no row
_SLIVER = shapely.Polygon([(g.E0, g.N0), (g.E0 + 60, g.N0), (g.E0 + 60, g.N0 + 0.7)])  # rows under a plant
_HOLED_PARTS = shapely.MultiPolygon(
    [
        shapely.box(g.E0, g.N0, g.E0 + 90, g.N0 + 70).difference(
            shapely.box(g.E0 + 30, g.N0 + 20, g.E0 + 50, g.N0 + 40)
        ),
        shapely.box(g.E0 + 120, g.N0 + 10, g.E0 + 180, g.N0 + 55),
    ]
)
CASES = {
    "square": g.square,
    "concave": g.concave,
    "hole": g.with_hole,
    "multipart": g.multipart,
    "multipart-hole": _HOLED_PARTS,
    "tiny": g.tiny,
    "bowtie": g.bowtie,
    "rotated": _ROTATED,
    "strip": _STRIP,
    "sliver": _SLIVER,
}
BEARINGS = (0.0, 33.0, 90.0, 147.5, 271.25)


def _clip(block):
    # a headland and a patch taken out, as an edge buffer and an exclusion would
    inner = shapely.buffer(block, -3.0, join_style="mitre")
    c = block.centroid
    return shapely.difference(inner, shapely.box(c.x - 10, c.y - 6, c.x + 12, c.y + 9))


def _assert_same_segments(got, ref):
    assert got.row.tolist() == ref.row.tolist()
    assert got.parts.tolist() == ref.parts.tolist()
    assert got.plants.tolist() == ref.plants.tolist()
    assert got.first_plant.tolist() == ref.first_plant.tolist()
    np.testing.assert_allclose(got.length, ref.length, atol=1e-9, rtol=0)
    np.testing.assert_allclose(got.offset, ref.offset, atol=1e-9, rtol=0)
    got_ends = (
        shapely.get_coordinates(got.geometry).reshape(-1, 2, 2)
        if got.lines is not None
        else got.ends_at(slice(None))
    )
    ref_ends = shapely.get_coordinates(ref.geometry).reshape(-1, 2, 2) if ref.ends is None else ref.ends
    np.testing.assert_allclose(got_ends, ref_ends, atol=1e-9, rtol=0)


@pytest.mark.parametrize("name", list(CASES))
@pytest.mark.parametrize("clipped", [False, True])
def test_row_model_matches_the_per_block_kernels(name, clipped):
    block = CASES[name]
    clip = _clip(block) if clipped else None
    for bearing in BEARINGS:
        for rs, ps in ((2.5, 1.0), (3.1, 1.7)):
            kw = {"row_spacing_m": rs, "plant_spacing_m": ps, "row_bearing_deg": bearing, "clip": clip}
            ref = old.row_segments(block, **kw)
            got = new.row_segments(block, **kw)
            _assert_same_segments(got, ref)
            for skips in ((0, 0), (1, 1), (2, 0)):
                kw_skip = {"skip_row_ends": skips[0], "skip_border_rows": skips[1]}
                elig = old.eligible_plants(ref, **kw_skip)
                assert new.eligible_plants(got, **kw_skip).tolist() == elig.tolist()
                n = int(min(40, elig.sum()))
                if n == 0:
                    continue
                a = old.pick_plants(ref, n, rng=np.random.default_rng(7), **kw_skip)
                b = new.pick_plants(got, n, rng=np.random.default_rng(7), **kw_skip)
                assert b.row.tolist() == a.row.tolist() and b.plant.tolist() == a.plant.tolist()
                assert b.segment.tolist() == a.segment.tolist() and b.eligible == a.eligible
                np.testing.assert_allclose(np.c_[b.x, b.y], np.c_[a.x, a.y], atol=1e-9, rtol=0)


def test_many_blocks_at_once_equal_each_block_alone():
    blocks = [CASES[k] for k in CASES if k != "bowtie"] * 2
    rng = np.random.default_rng(5)
    rs = rng.uniform(1.5, 4.0, len(blocks))
    ps = rng.uniform(0.6, 2.5, len(blocks))
    bearing = rng.uniform(0, 360, len(blocks))
    clips = [_clip(b) if i % 2 else b for i, b in enumerate(blocks)]
    seg, owner = new.block_row_segments(
        blocks, row_spacing_m=rs, plant_spacing_m=ps, row_bearing_deg=bearing, clips=clips
    )
    for i, block in enumerate(blocks):
        ref = old.row_segments(
            block, row_spacing_m=rs[i], plant_spacing_m=ps[i], row_bearing_deg=bearing[i], clip=clips[i]
        )
        mine = owner == i
        got = new.RowSegments(
            row=seg.row[mine],
            length=seg.length[mine],
            plants=seg.plants[mine],
            first_plant=seg.first_plant[mine],
            offset=seg.offset[mine],
            plant_spacing=ps[i],
            ends=seg.ends_at(mine),
            part=seg.part[mine] if ref.part is not None else None,
        )
        _assert_same_segments(got, ref)
    # and the draws of all blocks at once equal each block's own draw from its own generator
    eligible = new.eligible_plants(seg, skip_row_ends=1, groups=owner * 10 + seg.parts)
    totals = np.bincount(owner, weights=eligible, minlength=len(blocks)).astype(int)
    ns = np.minimum(25, totals)
    picks, which = new.pick_plants_many(
        seg,
        owner,
        ns,
        [np.random.default_rng(i) for i in range(len(blocks))],
        eligible=eligible,
        skip_row_ends=1,
    )
    assert np.bincount(which, minlength=len(blocks)).tolist() == ns.tolist()
    for i, block in enumerate(blocks):
        if not ns[i]:
            continue
        ref_seg = old.row_segments(
            block, row_spacing_m=rs[i], plant_spacing_m=ps[i], row_bearing_deg=bearing[i], clip=clips[i]
        )
        ref = old.pick_plants(ref_seg, int(ns[i]), rng=np.random.default_rng(i), skip_row_ends=1)
        mine = which == i
        assert (
            picks.row[mine].tolist() == ref.row.tolist() and picks.plant[mine].tolist() == ref.plant.tolist()
        )
        np.testing.assert_allclose(
            np.c_[picks.x[mine], picks.y[mine]], np.c_[ref.x, ref.y], atol=1e-9, rtol=0
        )


def _estate():
    names = [k for k in CASES if k not in ("bowtie",)]
    # spread the blocks out so none overlaps another
    geoms = [shapely.affinity.translate(CASES[k], 700.0 * i, 0.0) for i, k in enumerate(names)]
    frame = g.blocks_frame(
        dict(zip([n.upper() for n in names], geoms, strict=True)),
        row_spacing_m=[2.5, 3.0, 2.2, 2.5, 2.8, 2.0, 2.5, 2.5, 2.5],
        plant_spacing_m=[1.0, 1.5, 1.2, 1.0, 0.9, 1.0, 1.1, 1.0, 1.0],
        row_bearing_deg=[0.0, 12.0, 90.0, 45.0, 301.0, 0.0, 23.0, 0.0, 90.0],
        variety=["a", "a", "b", "b", "a", "b", "a", "b", "a"],
    )
    # an arable field in the same file: no plants, left out with a flag
    arable = g.blocks_frame({"ARABLE": shapely.box(g.E0 - 900, g.N0, g.E0 - 700, g.N0 + 200)}, variety=["a"])
    return pd.concat([frame, arable], ignore_index=True)


def _plan_both(
    blocks, options, *, seed=3, edge_buffer=0.0, exclusions=None, strata_by=None, spares=0, rows=None
):
    blocks = blocks.copy()
    blocks["stratum"] = strata_labels(blocks, strata_by)
    ex = g.blocks_frame({"X": exclusions}) if exclusions is not None else None
    areas = sample_areas(blocks, edge_buffer=edge_buffer, exclusions=ex)
    union = exclusions if exclusions is not None else None
    params = {
        "design_options": check_design_options("clusters", options),
        "seed": seed,
        "spares": spares,
        "rows_frame": rows,
    }
    table, _ = STRATIFIED_DESIGNS["clusters"](blocks, areas, params, union, None)
    return table, cluster_picks(blocks, areas, params, union)


def _assert_same_picks(table, ref, spares):
    assert len(table) == len(ref) > 0
    for col in ("block", "row", "plant", "units"):
        assert table[col].tolist() == ref[col].tolist(), col
    np.testing.assert_allclose(
        table[["x", "y"]].to_numpy(float), ref[["x", "y"]].to_numpy(float), atol=1e-9, rtol=0
    )
    if spares:
        assert table["spare_rank"].tolist() == ref["spare_rank"].tolist()


@pytest.mark.parametrize(
    "case",
    [
        {"options": {"per_block": 12}},
        {"options": {"per_block": 9, "skip_row_ends": 1, "skip_border_rows": 1}, "seed": 11},
        {"options": {"per_block": 7}, "edge_buffer": 4.0, "spares": 3},
        {"options": {"target_units": 40, "units_per_cluster": 3}, "strata_by": "variety", "spares": 2},
        {"options": {"per_block": 6}, "exclusions": "across", "seed": 5},
        {"options": {"per_block": 30, "skip_row_ends": 2}, "edge_buffer": 7.5, "seed": 2},
    ],
)
def test_cluster_plans_match_the_per_block_design(case):
    blocks = _estate()
    case = dict(case)
    if case.pop("exclusions", None):
        # a track across the first three blocks
        case["exclusions"] = shapely.box(g.E0 - 50, g.N0 + 40, g.E0 + 2200, g.N0 + 52)
    table, ref = _plan_both(blocks, case.pop("options"), **case)
    _assert_same_picks(table, ref, case.get("spares"))


def test_mapped_row_plans_match_the_per_block_design():
    blocks = _estate().iloc[:4].reset_index(drop=True)
    # rows mapped with a GPS: slightly bent lines, some crossing two blocks, one crossing none
    lines = []
    for k in range(120):
        x = g.E0 - 20 + 12.5 * k
        lines.append(shapely.LineString([(x, g.N0 - 10), (x + 3, g.N0 + 150), (x + 1, g.N0 + 420)]))
    lines.append(shapely.LineString([(g.E0 - 5000, g.N0), (g.E0 - 4000, g.N0)]))
    rows = g.blocks_frame({f"r{i}": line for i, line in enumerate(lines)})
    for options, extra in (
        ({"per_block": 10}, {}),
        ({"per_block": 8, "skip_row_ends": 1}, {"edge_buffer": 3.0, "spares": 2}),
    ):
        table, ref = _plan_both(blocks, options, rows=rows, seed=9, **extra)
        _assert_same_picks(table, ref, extra.get("spares"))


def test_ranks_for_many_populations_equal_each_population_alone():
    # reference: the per-population sample_ranks of the per-block design, same generators.
    rng = np.random.default_rng(2)
    totals = np.r_[rng.integers(1, 400, 150), 10**12, 100, 100, 7, 1]
    ns = np.minimum(np.r_[rng.integers(0, 120, 150), 1000, 49, 48, 7, 1], totals)
    seeds = np.arange(totals.size) + 100
    ranks, which = new.sample_ranks_many(totals, ns, [np.random.default_rng(s) for s in seeds])
    short = 0
    for j, (t, n, s) in enumerate(zip(totals, ns, seeds, strict=True)):
        ref = old.sample_ranks(int(t), int(n), rng=np.random.default_rng(s))
        assert ranks[which == j].tolist() == ref.tolist()
        if 2 * n < t:
            first = np.random.default_rng(s).integers(0, t, size=n + n // 8 + 8)
            short += np.unique(first).size < n
    # the rare path (a population's first batch holds too few distinct ranks) was taken
    assert short > 0


_TOUCHING = shapely.MultiPolygon(  # two parts meeting at one corner: envelopes touch
    [shapely.box(g.E0, g.N0, g.E0 + 60, g.N0 + 50), shapely.box(g.E0 + 60, g.N0 + 50, g.E0 + 130, g.N0 + 95)]
)
_WRAPPED = shapely.MultiPolygon(  # a part inside the bay of a U-shaped one: envelopes overlap
    [
        shapely.Polygon(
            [
                (g.E0, g.N0),
                (g.E0 + 120, g.N0),
                (g.E0 + 120, g.N0 + 90),
                (g.E0 + 90, g.N0 + 90),
                (g.E0 + 90, g.N0 + 30),
                (g.E0 + 30, g.N0 + 30),
                (g.E0 + 30, g.N0 + 90),
                (g.E0, g.N0 + 90),
            ]
        ),
        shapely.box(g.E0 + 45, g.N0 + 45, g.E0 + 75, g.N0 + 85),
    ]
)


def test_multi_part_block_clipped_by_itself_equals_the_general_cut_bit_for_bit():
    # reference: the general clip (each part's rows cut by every ring of the whole outline),
    # reached by clipping with an equal geometry that is not the block's own object
    blocks = [g.multipart, _HOLED_PARTS, _TOUCHING, _WRAPPED, g.square, _ROTATED] * 3
    rng = np.random.default_rng(3)
    rs = rng.uniform(1.5, 4.0, len(blocks))
    ps = rng.uniform(0.6, 2.5, len(blocks))
    bearing = rng.uniform(0, 360, len(blocks))
    kw = {"row_spacing_m": rs, "plant_spacing_m": ps, "row_bearing_deg": bearing}
    own, own_block = new.block_row_segments(blocks, clips=blocks, **kw)
    copies = [shapely.from_wkb(shapely.to_wkb(b)) for b in blocks]
    ref, ref_block = new.block_row_segments(blocks, clips=copies, **kw)
    assert own_block.tolist() == ref_block.tolist()
    for name in ("row", "part", "plants", "first_plant", "length", "offset", "plant_spacing"):
        assert np.array_equal(getattr(own, name), getattr(ref, name)), name
    assert np.array_equal(own.ends_at(slice(None)), ref.ends_at(slice(None)))
