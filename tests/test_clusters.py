"""Random plants from the row model, without listing plants."""

from __future__ import annotations

import tracemalloc

import numpy as np
import pytest
import shapely
import shapely.affinity
from scipy import stats
from shapely.geometry import LineString, Polygon, box

from fieldplan.design.clusters import (
    cluster_count,
    cluster_sizes,
    eligible_plants,
    pick_plants,
    row_segments,
    rows_from_lines,
    sample_ranks,
)
from fieldplan.errors import DesignError


def _block() -> Polygon:
    # A trapezoid with a hole: rows of different lengths, some split in two.
    outer = [(0, 0), (60, 0), (60, 40), (0, 70)]
    return Polygon(outer, holes=[[(20, 10), (35, 10), (35, 25), (20, 25)]])


def _segments(**kw):
    return row_segments(
        _block(), row_spacing_m=3.0, plant_spacing_m=1.2, row_bearing_deg=kw.get("bearing", 0.0)
    )


def test_rectangle_counts_by_hand():
    seg = row_segments(box(0, 0, 30, 100), row_spacing_m=2.5, plant_spacing_m=1.0, row_bearing_deg=0)
    # common practice, no source: 30 m / 2.5 m = 12 rows (first half a spacing in from the
    # edge), 100 m / 1 m = 100 plants per row
    assert seg.row.tolist() == list(range(1, 13))
    assert np.all(seg.plants == 100)
    np.testing.assert_allclose(shapely.get_coordinates(seg.geometry[0])[:, 0], 1.25)
    # Row 1 is on the left facing along the bearing (west for north), starting at the south.
    assert shapely.get_coordinates(seg.geometry[0])[0].tolist() == [1.25, 0.0]


def test_picks_are_uniform_over_plants_chi_square():
    seg = _segments()
    elig = eligible_plants(seg, skip_row_ends=1, skip_border_rows=1)
    rows = np.unique(seg.row)
    per_row = np.array([elig[seg.row == r].sum() for r in rows])
    counts = np.zeros(rows.size)
    for seed in range(300):
        p = pick_plants(seg, 40, rng=np.random.default_rng(seed), skip_row_ends=1, skip_border_rows=1)
        counts += np.bincount(np.searchsorted(rows, p.row), minlength=rows.size)
    keep = per_row > 0
    assert counts[~keep].sum() == 0
    expected = counts.sum() * per_row[keep] / per_row[keep].sum()
    # reference: scipy.stats.chisquare; uniform over plants means picks per row are
    # proportional to the row's eligible plants
    assert stats.chisquare(counts[keep], expected).pvalue > 0.001


def test_no_duplicates_and_picks_on_rows_inside_block():
    poly = _block()
    seg = _segments(bearing=33.0)
    k_end = 2
    for n, seed in [(50, 1), (int(eligible_plants(seg, skip_row_ends=k_end).sum()) - 3, 2)]:
        p = pick_plants(seg, n, rng=np.random.default_rng(seed), skip_row_ends=k_end)
        pairs = set(zip(p.row.tolist(), p.plant.tolist(), strict=True))
        assert len(pairs) == n  # no plant drawn twice
        # reference: shapely (GEOS) point-in-polygon and point-line distance
        assert shapely.contains_xy(poly, p.x, p.y).all()
        pts = shapely.points(p.x, p.y)
        lines = seg.geometry[p.segment]
        assert np.all(shapely.distance(pts, lines) < 1e-6)
        along = shapely.line_locate_point(lines, pts)
        length = seg.length[p.segment]
        edge = seg.offset[p.segment] + k_end * seg.plant_spacing
        # the skipped end plants lie within `edge` of either segment end
        assert np.all(along >= edge - 1e-6)
        assert np.all(along <= length - edge + 1e-6)


def test_border_rows_are_skipped():
    seg = _segments()
    planted = np.unique(seg.row[seg.plants > 0])
    p = pick_plants(seg, 400, rng=np.random.default_rng(5), skip_border_rows=2)
    assert not np.isin(p.row, np.r_[planted[:2], planted[-2:]]).any()
    assert np.isin(p.row, planted[2:-2]).all()


def test_plant_numbers_continue_across_a_split_row():
    seg = _segments()
    split = np.flatnonzero(np.bincount(seg.row) == 2)[0]
    parts = np.flatnonzero(seg.row == split)
    assert seg.first_plant[parts[0]] == 1
    assert seg.first_plant[parts[1]] == seg.plants[parts[0]] + 1


def test_cluster_count_and_sizes():
    # common practice, no source: ceil(target / size) clusters, last takes the remainder
    assert cluster_count(10, 4) == 3
    assert cluster_sizes(10, 4).tolist() == [4, 4, 2]
    assert cluster_sizes(12, 4).tolist() == [4, 4, 4]
    for t in range(1, 60):
        for m in range(1, 9):
            s = cluster_sizes(t, m)
            assert s.sum() == t and s.size == -(-t // m) and s.max() <= m and s.min() >= 1


def test_five_million_plants_without_a_plant_sized_array():
    block = box(0, 0, 1000, 1000)
    tracemalloc.start()
    try:
        seg = row_segments(block, row_spacing_m=2.0, plant_spacing_m=0.1, row_bearing_deg=17)
        p = pick_plants(seg, 30, rng=np.random.default_rng(8), skip_row_ends=3)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert seg.total_plants > 4_900_000
    assert p.row.size == 30
    # reference: tracemalloc (Python standard library); one float per plant would be 8 bytes
    assert peak < seg.total_plants * 8 / 20


def test_sample_ranks_distinct_and_uniform():
    r = sample_ranks(10**12, 1000, rng=np.random.default_rng(1))
    assert np.unique(r).size == 1000 and r.min() >= 0 and r.max() < 10**12
    draws = np.concatenate([sample_ranks(50, 10, rng=np.random.default_rng(s)) for s in range(500)])
    # reference: scipy.stats.chisquare; every value equally likely
    assert stats.chisquare(np.bincount(draws, minlength=50)).pvalue > 0.001
    first = np.array([sample_ranks(1000, 5, rng=np.random.default_rng(s))[0] for s in range(2000)])
    # reference: scipy.stats.kstest; the first draw is uniform on 0..999
    assert stats.kstest((first + 0.5) / 1000, "uniform").pvalue > 0.001


def test_mapped_rows_from_lines():
    lines = np.array(
        [
            LineString([(0, 0), (0, 50)]),
            LineString([(3, 0), (3, 20), (8, 40)]),
        ],
        dtype=object,
    )
    seg = rows_from_lines(lines, plant_spacing_m=2.0)
    # common practice, no source: floor(length / spacing) plants per row
    assert seg.plants.tolist() == [25, int(np.floor((20 + np.hypot(5, 20)) / 2.0))]
    p = pick_plants(seg, 10, rng=np.random.default_rng(2))
    pts = shapely.points(p.x, p.y)
    assert np.all(shapely.distance(pts, lines[p.row - 1]) < 1e-6)
    clipped = rows_from_lines(lines, plant_spacing_m=2.0, polygon=box(-1, 10, 10, 30))
    assert clipped.plants[0] == 10
    with pytest.raises(DesignError):
        rows_from_lines(np.array([shapely.Point(0, 0)], dtype=object), plant_spacing_m=1.0)


def test_too_many_plants_is_a_design_error():
    seg = row_segments(box(0, 0, 10, 10), row_spacing_m=5, plant_spacing_m=5, row_bearing_deg=0)
    with pytest.raises(DesignError, match="eligible"):
        pick_plants(seg, 5, rng=np.random.default_rng(0))


def test_clipped_model_keeps_numbers_and_positions_of_the_whole_block():
    block = _block()
    headland = shapely.buffer(block, -4.0, join_style="mitre")
    full = row_segments(block, row_spacing_m=3.0, plant_spacing_m=1.2, row_bearing_deg=20.0)
    part = row_segments(block, row_spacing_m=3.0, plant_spacing_m=1.2, row_bearing_deg=20.0, clip=headland)
    p = pick_plants(part, part.total_plants, rng=np.random.default_rng(0))
    # Locate the same (row, plant) in the unclipped model and compare positions.
    seg_of_row = {r: np.flatnonzero(full.row == r) for r in np.unique(full.row)}
    for r, k, x, y in zip(p.row, p.plant, p.x, p.y, strict=True):
        segs = seg_of_row[int(r)]
        s = segs[np.searchsorted(full.first_plant[segs], k, side="right") - 1]
        pt = shapely.line_interpolate_point(
            full.geometry[s], full.offset[s] + (k - full.first_plant[s]) * 1.2
        )
        assert abs(pt.x - x) < 1e-6 and abs(pt.y - y) < 1e-6
    # reference: shapely (GEOS) point-in-polygon: exactly the model's plants inside the clip are kept
    every = pick_plants(full, full.total_plants, rng=np.random.default_rng(0))
    inside = shapely.contains_xy(headland, every.x, every.y)
    assert part.total_plants == int(inside.sum())


# --- Scanline rows against GEOS line-polygon intersection ---------------------
# reference: shapely/GEOS line-polygon intersection. The functions below clip each
# row line with shapely.intersection (the way rows were cut before the scanline)
# and must give the same rows, numbering, starts and lengths.


def _reference_segments(row_lines, clip, ps):
    pieces = shapely.line_merge(shapely.intersection(row_lines, clip))
    parts, which = shapely.get_parts(pieces, return_index=True)
    keep = (shapely.get_type_id(parts) == 1) & (shapely.length(parts) > 1e-9)
    parts, which = parts[keep], which[keep]
    host = row_lines[which]
    at_start = shapely.line_locate_point(host, shapely.get_point(parts, 0))
    at_end = shapely.line_locate_point(host, shapely.get_point(parts, -1))
    parts = np.where(at_end < at_start, shapely.reverse(parts), parts)
    order = np.lexsort((np.minimum(at_start, at_end), which))
    parts, which = parts[order], which[order]
    length = shapely.length(parts)
    plants = np.floor(length / ps + 1e-9).astype(np.int64)
    before = np.cumsum(plants) - plants
    first = {}
    for i, w in enumerate(which):
        first.setdefault(w, before[i])
    row_base = np.array([first[w] for w in which], dtype=np.int64)
    return {
        "row": which + 1,
        "geometry": parts,
        "length": length,
        "plants": plants,
        "first_plant": before - row_base + 1,
        "offset": (length - plants * ps) / 2.0 + ps / 2.0,
    }


def _reference_row_segments(polygon, rs, ps, bearing, clip=None):
    # A multi-part block has a row model per part, numbered within the part (rows of the
    # second part start again at 1 from that part's own edge), parts in their stored order.
    parts = shapely.get_parts(polygon)
    if len(parts) > 1:
        each = [_reference_row_segments(p, rs, ps, bearing, clip) for p in parts]
        joined = {key: np.concatenate([e[key] for e in each]) for key in each[0]}
        joined["part"] = np.concatenate([np.full(len(e["row"]), i + 1) for i, e in enumerate(each)])
        return joined
    theta = np.radians(bearing)
    u = np.array([np.sin(theta), np.cos(theta)])
    v = np.array([np.cos(theta), -np.sin(theta)])
    xy = shapely.get_coordinates(polygon)
    pu, pv = xy @ u, xy @ v
    # Row k at first + k * rs (np.arange's start + k * ((start + rs) - start) drifts
    # by micrometres at UTM magnitudes).
    first = pv.min() + rs / 2.0
    offsets = first + np.arange(max(int(np.ceil((pv.max() - first) / rs)), 0)) * rs
    lo, hi = pu.min() - 1.0, pu.max() + 1.0
    lines = shapely.linestrings(
        np.stack([offsets[:, None] * v + lo * u, offsets[:, None] * v + hi * u], axis=1)
    )
    full = _reference_segments(lines, polygon, ps)
    if clip is None:
        return full
    pieces = shapely.line_merge(shapely.intersection(full["geometry"], clip))
    parts, parent = shapely.get_parts(pieces, return_index=True)
    keep = (shapely.get_type_id(parts) == 1) & (shapely.length(parts) > 1e-9)
    parts, parent = parts[keep], parent[keep]
    host = full["geometry"][parent]
    a = shapely.line_locate_point(host, shapely.get_point(parts, 0))
    b = shapely.line_locate_point(host, shapely.get_point(parts, -1))
    parts = np.where(b < a, shapely.reverse(parts), parts)
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    off = full["offset"][parent]
    k0 = np.maximum(np.ceil((lo - off) / ps - 1e-9), 0).astype(np.int64)
    k1 = np.minimum(np.floor((hi - off) / ps + 1e-9), full["plants"][parent] - 1).astype(np.int64)
    order = np.lexsort((lo, parent))
    return {
        "row": full["row"][parent][order],
        "geometry": parts[order],
        "length": shapely.length(parts)[order],
        "plants": np.maximum(k1 - k0 + 1, 0)[order],
        "first_plant": (full["first_plant"][parent] + k0)[order],
        "offset": (off + k0 * ps - lo)[order],
    }


def _random_block(rng):
    """A star-shaped block with up to two holes, or two such blocks side by side."""

    def star(cx, cy, r, k):
        ang = np.sort(rng.uniform(0, 2 * np.pi, k))
        rad = r * rng.uniform(0.6, 1.0, k)
        return np.column_stack([cx + rad * np.cos(ang), cy + rad * np.sin(ang)])

    def one(cx, cy):
        r = rng.uniform(40, 150)
        outer = star(cx, cy, r, int(rng.integers(5, 40)))
        holes = [
            star(cx + dx, cy + dy, r * 0.12, int(rng.integers(3, 9)))
            for dx, dy in [(-0.3 * r, 0.0), (0.3 * r, 0.1 * r)][: int(rng.integers(0, 3))]
        ]
        return shapely.make_valid(Polygon(outer, holes=holes))

    poly = one(0.0, 0.0)
    if rng.random() < 0.4:
        poly = shapely.union(poly, one(400.0, rng.uniform(-50, 50)))
    # largest polygonal part(s) only: make_valid may return a collection
    parts = [p for p in shapely.get_parts(poly) if p.geom_type in ("Polygon", "MultiPolygon")]
    return shapely.union_all(parts) if len(parts) > 1 else parts[0]


def _assert_same(got, ref):
    assert got.row.tolist() == ref["row"].tolist()
    assert got.parts.tolist() == ref.get("part", np.ones(len(ref["row"]), dtype=int)).tolist()
    assert got.plants.tolist() == ref["plants"].tolist()
    assert got.first_plant.tolist() == ref["first_plant"].tolist()
    np.testing.assert_allclose(got.length, ref["length"], atol=1e-6, rtol=0)
    np.testing.assert_allclose(got.offset, ref["offset"], atol=1e-6, rtol=0)
    start_got = shapely.get_coordinates(shapely.get_point(got.geometry, 0))
    start_ref = shapely.get_coordinates(shapely.get_point(ref["geometry"], 0))
    np.testing.assert_allclose(start_got, start_ref, atol=1e-6, rtol=0)
    end_got = shapely.get_coordinates(shapely.get_point(got.geometry, -1))
    end_ref = shapely.get_coordinates(shapely.get_point(ref["geometry"], -1))
    np.testing.assert_allclose(end_got, end_ref, atol=1e-6, rtol=0)


@pytest.mark.parametrize("seed", range(40))
def test_scanline_rows_match_geos_intersection(seed):
    rng = np.random.default_rng(seed)
    block = _random_block(rng)
    # offset the block to realistic UTM coordinates
    block = shapely.affinity.translate(block, 500_000.0, 6_200_000.0)
    rs, ps = rng.uniform(1.5, 6.0), rng.uniform(0.8, 4.0)
    bearing = float(rng.choice([0.0, 90.0, 45.0, rng.uniform(0, 360)]))
    got = row_segments(block, row_spacing_m=rs, plant_spacing_m=ps, row_bearing_deg=bearing)
    _assert_same(got, _reference_row_segments(block, rs, ps, bearing))
    # clipped: a headland and a hole cut out, numbers kept from the whole block
    inner = shapely.buffer(block, -rng.uniform(2, 10), join_style="mitre")
    c = block.centroid
    clip = shapely.difference(inner, shapely.box(c.x - 15, c.y - 10, c.x + 20, c.y + 12))
    if clip.is_empty:
        return
    got = row_segments(block, row_spacing_m=rs, plant_spacing_m=ps, row_bearing_deg=bearing, clip=clip)
    _assert_same(got, _reference_row_segments(block, rs, ps, bearing, clip))


def test_scanline_row_through_a_vertex():
    # Rows at x = 1, 3, 5 (bearing 0, spacing 2) pass exactly through the diamond's
    # vertices at x = 3 (top and bottom) and the notch vertex at (3, 4).
    diamond = Polygon([(0, 5), (3, 0), (6, 5), (3, 10), (4.5, 7.5), (3, 4), (1.5, 7.5), (3, 10)])
    diamond = shapely.make_valid(diamond)
    diamond = max(shapely.get_parts(diamond), key=lambda g: g.area)
    for bearing in (0.0, 180.0):
        got = row_segments(diamond, row_spacing_m=2.0, plant_spacing_m=0.5, row_bearing_deg=bearing)
        _assert_same(got, _reference_row_segments(diamond, 2.0, 0.5, bearing))


def test_edge_buffer_leaving_no_whole_plant_samples_the_block_without_it():
    # Row model by hand: a 100 m x 20.5 m block with a 10 m edge buffer keeps a strip 0.5 m deep;
    # rows running north cross it over 0.5 m, less than the 1 m plant spacing, so no whole plant
    # (floor(0.5 / 1) = 0). As for the other designs when the buffer leaves nothing, the block is
    # sampled without the buffer and says so.
    from fieldplan.plan import make_plan
    from tests.geoms import E0, N0, blocks_frame

    blocks = blocks_frame(
        {"S": box(E0, N0, E0 + 100, N0 + 20.5)},
        row_spacing_m=[2.0],
        plant_spacing_m=[1.0],
        row_bearing_deg=[0.0],
    )
    plan = make_plan(blocks, design="clusters", edge_buffer=10.0, seed=2, design_options={"per_block": 3})
    assert len(plan.points) == 3
    assert "edge buffer leaves no whole plant" in plan.blocks["flags"].iloc[0]


def test_multi_part_block_numbers_rows_from_each_part_own_edge():
    # reference: shapely bounds of each part. Rows run north (bearing 0), so row k of a part
    # lies (k - 0.5) row spacings east of that part's western edge (common practice, no
    # source: a crew counts rows from the edge of the part it stands in).
    west = shapely.box(0, 0, 100, 200)  # 40 rows at 2.5 m
    east = shapely.box(300, 50, 402.5, 150)  # 41 rows
    block = shapely.MultiPolygon([west, east])
    seg = row_segments(block, row_spacing_m=2.5, plant_spacing_m=1.0, row_bearing_deg=0.0)
    picks = pick_plants(seg, 400, rng=np.random.default_rng(8))
    for k, part in enumerate((west, east), start=1):
        mine = picks.part == k
        assert mine.any()
        x0 = shapely.bounds(part)[0]
        np.testing.assert_allclose(picks.x[mine] - x0, (picks.row[mine] - 0.5) * 2.5, atol=1e-6)
        assert picks.row[mine].max() <= round((shapely.bounds(part)[2] - x0) / 2.5)
        # plant p sits p - 0.5 plant spacings from the part's own southern edge
        y0 = shapely.bounds(part)[1]
        np.testing.assert_allclose(picks.y[mine] - y0, picks.plant[mine] - 0.5, atol=1e-6)
    assert seg.row[seg.parts == 2].max() == 41 and seg.row[seg.parts == 1].max() == 40
    # border rows are left out on each side of every part
    elig = eligible_plants(seg, skip_border_rows=1)
    for k, last in ((1, 40), (2, 41)):
        out = (seg.parts == k) & np.isin(seg.row, [1, last])
        assert (elig[out] == 0).all() and (elig[(seg.parts == k) & ~out] > 0).all()


def test_cluster_instructions_name_the_part_of_a_multi_part_block():
    # common practice, no source: instructions tell the crew which part to go to and that rows
    # count from that part's edge; the compass word is the side of the block the part lies on
    # (reference: shapely centroids).
    from fieldplan.plan import make_plan
    from tests.geoms import E0, N0, blocks_frame

    block = shapely.MultiPolygon(
        [shapely.box(E0, N0, E0 + 100, N0 + 200), shapely.box(E0 + 300, N0 + 50, E0 + 402.5, N0 + 150)]
    )
    blocks = blocks_frame(
        {"P": block, "S": shapely.box(E0, N0 - 400, E0 + 100, N0 - 300)},
        row_spacing_m=[2.5, 2.5],
        plant_spacing_m=[1.0, 1.0],
        row_bearing_deg=[0.0, 0.0],
    )
    plan = make_plan(blocks, design="clusters", design_options={"per_block": 30}, seed=4)
    pts = plan.points
    multi = pts[pts["block"] == "P"]
    west = multi.geometry.x < E0 + 200
    assert multi.loc[west, "instructions"].str.startswith("In part 1 of 2 (west)").all()
    assert multi.loc[~west, "instructions"].str.startswith("In part 2 of 2 (east)").all()
    assert (multi.loc[~west, "row"] <= 41).all() and west.any() and (~west).any()
    assert pts.loc[pts["block"] == "S", "instructions"].str.startswith("Start at row").all()
    assert "part" not in pts.columns
