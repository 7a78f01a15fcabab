"""Printed page and messages: unique legend colours, natural order, a north arrow clear of points,
plurals, and the coverage share agreeing with its note."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from matplotlib.colors import to_hex

from fieldplan.plan import make_plan
from fieldplan.read import read_blocks
from fieldplan.sorting import natural_key, natural_sorted
from fieldplan.words import plural
from fieldplan.write.png import legend_colours, plan_figure
from tests.geoms import blocks_frame, lonlat_estate_file, lonlat_square, write_geojson


def test_natural_order_of_block_ids():
    # common practice, no source: people count "Blk 2" before "Blk 10" (natural sort order).
    assert natural_sorted(["Blk 10", "Blk 2", "Blk 1", "blk 3"]) == ["Blk 1", "Blk 2", "blk 3", "Blk 10"]
    assert natural_sorted(["V10", "V9", "V01", "O2"]) == ["O2", "V01", "V9", "V10"]
    assert natural_sorted(["10", "9", "a", "A"]) == ["9", "10", "A", "a"]
    assert natural_key("B01") != natural_key("B1")  # a total order: ties broken by the text


def test_plural():
    # common practice, no source: English plurals of the nouns in messages.
    assert [plural(1, "block"), plural(2, "block"), plural(0, "point")] == ["1 block", "2 blocks", "0 points"]
    assert plural(2, "berry") == "2 berries" and plural(1, "berry") == "1 berry"
    assert plural(1200, "point") == "1,200 points"


@pytest.fixture(scope="module")
def many_strata_plan(tmp_path_factory):
    folder = tmp_path_factory.mktemp("many")
    names = [(f"Blk {i}", None) for i in (1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12)]
    path = lonlat_estate_file(folder / "blocks.geojson", names)
    return make_plan(read_blocks(path), spacing=40.0, seed=3, command=["test"])


def _legend(fig):
    return fig.legends[0]


def test_legend_lists_strata_in_natural_order_with_no_colour_twice(many_strata_plan):
    fig = plan_figure(many_strata_plan)
    legend = _legend(fig)
    labels = [t.get_text() for t in legend.get_texts()]
    strata = [label for label in labels if label.startswith("Stratum ")]
    assert [s.split(" (")[0] for s in strata] == [f"Stratum Blk {i}" for i in range(1, 13)]
    colours = [to_hex(h.get_markerfacecolor()) for h in legend.legend_handles[: len(strata)]]
    assert len(set(colours)) == len(colours) == 12
    # reference: Okabe & Ito (2008) first, then Tol (2021) muted (both from memory).
    assert colours[:7] == [
        c.lower() for c in ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")
    ]


def test_legend_colours_never_repeat():
    for n in (1, 7, 8, 16, 17, 24, 40):
        colours = legend_colours(n)
        assert len(colours) == n and len({c.lower() for c in colours}) == n


def _north_arrow_boxes(fig):
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    found = [a for a in fig.findobj() if a.get_gid() == "north-arrow"]
    assert len(found) == 2  # the arrow and its "N"
    return [a.get_window_extent(renderer) for a in found]


def _points_display(fig, plan):
    ax = fig.axes[0]
    xy = shapely.get_coordinates(plan.points.geometry.values)
    return ax.transData.transform(xy)


def _assert_clear(fig, plan):
    # reference: matplotlib's own renderer extents of the drawn artists.
    shown = _points_display(fig, plan)
    for box in _north_arrow_boxes(fig):
        padded = box.expanded(1.0, 1.0)
        inside = (
            (shown[:, 0] >= padded.x0)
            & (shown[:, 0] <= padded.x1)
            & (shown[:, 1] >= padded.y0)
            & (shown[:, 1] <= padded.y1)
        )
        assert not inside.any(), shown[inside][:3]


def test_north_arrow_clear_of_points_on_a_many_block_page(many_strata_plan):
    _assert_clear(plan_figure(many_strata_plan), many_strata_plan)


def test_north_arrow_moves_off_points_in_the_top_corners(tmp_path):
    # A strip of vines along the top of the page and one block bottom left: both top
    # corners hold points, the bottom right is empty.
    from tests.geoms import E0, N0

    frame = blocks_frame(
        {
            "Top": shapely.box(E0, N0 + 250, E0 + 400, N0 + 400),
            "Low": shapely.box(E0, N0, E0 + 150, N0 + 150),
        }
    )
    plan = make_plan(
        read_blocks(write_geojson(frame, tmp_path / "b.geojson")), spacing=10.0, seed=2, command=["t"]
    )
    fig = plan_figure(plan)
    ax = fig.axes[0]
    frac = ax.transAxes.inverted().transform(_points_display(fig, plan))

    def points_near(cx, cy):
        return int(((np.abs(frac[:, 0] - cx) <= 0.05) & (np.abs(frac[:, 1] - cy) <= 0.10)).sum())

    assert points_near(0.94, 0.88) > 0 and points_near(0.06, 0.88) > 0  # the usual spot is taken
    _assert_clear(fig, plan)
    arrow = _north_arrow_boxes(fig)[0]
    box = ax.get_window_extent()
    assert box.x0 < arrow.x0 and arrow.x1 < box.x1  # still on the map
    assert arrow.y1 < (box.y0 + box.y1) / 2  # moved to the bottom right


def test_north_arrow_leaves_the_map_when_every_corner_has_points(tmp_path):
    # One square block planned densely: every corner of the map holds points.
    frame = blocks_frame({"Full": lonlat_square(18.9, -33.86, 0.004)}, crs="EPSG:4326")
    path = write_geojson(frame, tmp_path / "b.geojson")
    plan = make_plan(read_blocks(path), spacing=12.0, seed=1, command=["test"])
    fig = plan_figure(plan)
    _assert_clear(fig, plan)
    ax_box = fig.axes[0].get_window_extent()
    arrow = _north_arrow_boxes(fig)[0]
    assert arrow.x0 >= ax_box.x1  # drawn beside the map, in the margin
    subtitle = [t.get_text() for t in fig.texts if "points in" in t.get_text()]
    assert subtitle and "in 1 block " in subtitle[0]


def test_page_subtitle_says_one_block(tmp_path):
    frame = blocks_frame({"Only": lonlat_square(18.9, -33.86, 0.002)}, crs="EPSG:4326")
    plan = make_plan(
        read_blocks(write_geojson(frame, tmp_path / "b.geojson")), spacing=50.0, seed=1, command=["t"]
    )
    fig = plan_figure(plan)
    text = " ".join(t.get_text() for t in fig.texts)
    assert " 1 blocks" not in text and "in 1 block " in text
    assert np.isfinite(plan.blocks["area_ha"]).all()


def test_coverage_share_and_its_note_agree_to_the_last_digit():
    import re
    from types import SimpleNamespace

    import geopandas as gpd

    from fieldplan.check import coverage

    # Shares of 3.449 and 6.551 points: one rounding of 3.449 gives 3.4, two (3.45, then 3.5)
    # gave the table a different last digit from the note before.
    a, b = shapely.box(0, 0, 100, 34.49), shapely.box(200, 0, 300, 65.51)
    blocks = gpd.GeoDataFrame(
        {"block": ["A", "B"], "stratum": ["A", "B"], "sampled_area_ha": [0.3449, 0.6551]},
        geometry=[a, b],
        crs="EPSG:32734",
    )
    xy = [(10 + 10 * i, 10) for i in range(8)] + [(250, 10), (260, 20)]
    points = gpd.GeoDataFrame(
        {"point_id": [f"p{i}" for i in range(10)], "block": ["A"] * 8 + ["B"] * 2},
        geometry=shapely.points(xy),
        crs="EPSG:32734",
    )
    plan = SimpleNamespace(blocks=blocks, points=points, crs=blocks.crs, exclusions=None)
    table = coverage(plan).table.set_index("block")
    # reference: proportional share n * A_h / A (Cochran 1977, section 5.3): 10 * 0.3449 = 3.449.
    assert table.loc["A", "expected_points"] == pytest.approx(3.45)
    for name, row in table.iterrows():
        quoted = re.search(r"vs ([0-9.]+) by area share", row["notes"]).group(1)
        assert quoted == f"{row['expected_points']:.2f}", name


def test_estimates_table_lists_blocks_in_natural_order():
    import geopandas as gpd
    import pandas as pd

    from fieldplan.estimate.table import estimate_table

    names = ["Blk 10", "Blk 2", "Blk 1"]
    ids = [f"{b}-{i}" for b in names for i in range(3)]
    blocks_of = [b for b in names for _ in range(3)]
    pts = gpd.GeoDataFrame(
        {"point_id": ids, "block": blocks_of, "stratum": blocks_of},
        geometry=shapely.points(np.arange(9.0) * 10, np.zeros(9)),
    )
    blk = pd.DataFrame({"block": names, "stratum": names, "sampled_area_ha": [1.0, 2.0, 3.0]})
    res = pd.DataFrame(
        {
            "round": 1,
            "date": "",
            "point_id": ids,
            "unit": "",
            "value": np.arange(9.0) + 20,
            "units_measured": np.nan,
            "variable": "brix",
        }
    )
    table = estimate_table(pts, blk, res, value="brix")
    # common practice, no source: natural order of ids, then the whole-farm row.
    assert table["group"].tolist() == ["Blk 1", "Blk 2", "Blk 10", "all"]
