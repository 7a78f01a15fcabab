"""Printed page and messages: unique legend colours, natural order, a north arrow clear of points,
plurals, and the coverage share agreeing with its note."""

from __future__ import annotations

import colorsys
import io
from types import SimpleNamespace

import numpy as np
import pytest
import shapely
from PIL import Image

from fieldplan.plan import make_plan
from fieldplan.read import read_blocks
from fieldplan.sorting import natural_key, natural_sorted
from fieldplan.words import plural
from fieldplan.write.page import legend_colours, page_layout
from fieldplan.write.png import render_figure, render_png
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


def _pixels(layout) -> np.ndarray:
    return np.asarray(Image.open(io.BytesIO(render_png(layout))).convert("RGB")).astype(int)


def _hex(rgb) -> str:
    return "#" + "".join(f"{int(v):02x}" for v in rgb)


def test_legend_lists_strata_in_natural_order_with_no_colour_twice(many_strata_plan):
    layout = page_layout(many_strata_plan)
    strata = [e for e in layout.legend if e.stratum is not None]
    assert [e.stratum for e in strata] == [f"Blk {i}" for i in range(1, 13)]
    assert all(e.label.text.startswith(f"Stratum \u2068{e.stratum}\u2069 (") for e in strata)
    colours = [e.colour.lower() for e in strata]
    assert len(set(colours)) == len(colours) == 12
    # reference: Okabe & Ito (2008) first, then Tol (2021) muted (both from memory).
    assert colours[:7] == [
        c.lower() for c in ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")
    ]
    assert colours[7:] == [c.lower() for c in ("#CC6677", "#332288", "#DDCC77", "#117733", "#88CCEE")]
    # On the page: each swatch's centre pixel is its colour, and the legend rows run top to bottom.
    rgb = _pixels(layout)
    for entry in strata:
        x, y = (int(round(v)) for v in entry.swatch)
        assert _hex(rgb[y, x]) == entry.colour.lower(), entry.stratum
    rows = [e.swatch[1] for e in strata]
    assert rows == sorted(rows)


def test_legend_colours_never_repeat():
    for n in (1, 7, 8, 16, 17, 24, 40):
        colours = legend_colours(n)
        assert len(colours) == n and len({c.lower() for c in colours}) == n


def test_legend_colours_beyond_the_named_schemes_are_evenly_spaced_hues():
    colours = legend_colours(24)
    # reference: colorsys.hsv_to_rgb (Python standard library): the eight extra colours are
    # hues 0.03 + k/8 at saturation 0.75, value 0.85 and 0.55 by turns.
    for k, colour in enumerate(colours[16:]):
        r, g, b = (int(colour[i : i + 2], 16) / 255 for i in (1, 3, 5))
        h, s, v = colorsys.rgb_to_hsv(r, g, b)
        assert h == pytest.approx((k / 8 + 0.03) % 1.0, abs=0.01)
        assert s == pytest.approx(0.75, abs=0.01) and v == pytest.approx(
            0.85 if k % 2 == 0 else 0.55, abs=0.01
        )


def _assert_clear(layout, rgb=None):
    # The arrow's box on the page holds no marker: checked against the layout's own point
    # positions, padded by the marker radius, and (when given) against the rendered pixels.
    x0, y0, x1, y1 = layout.arrow["box"]
    r = layout.marker / 2
    xy = layout.points
    inside = (xy[:, 0] >= x0 - r) & (xy[:, 0] <= x1 + r) & (xy[:, 1] >= y0 - r) & (xy[:, 1] <= y1 + r)
    assert not inside.any(), xy[inside][:3]
    if rgb is not None:
        patch = rgb[int(y0) : int(y1) + 1, int(x0) : int(x1) + 1].reshape(-1, 3)
        for style in layout.styles[: layout.n_strata]:
            colour = np.array([int(style["colour"][i : i + 2], 16) for i in (1, 3, 5)])
            assert not (np.abs(patch - colour).sum(axis=1) <= 6).any(), style


def test_north_arrow_clear_of_points_on_a_many_block_page(many_strata_plan):
    layout = page_layout(many_strata_plan)
    _assert_clear(layout, _pixels(layout))
    # The same layout drawn by matplotlib (plan.pdf): the arrow's artists clear of every point.
    # reference: matplotlib's own renderer extents of the drawn artists.
    fig = render_figure(layout)
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    found = [a for a in fig.findobj() if a.get_gid() == "north-arrow"]
    assert len(found) == 3  # shaft, head and "N"
    shown = fig.axes[0].transData.transform(layout.points)
    for box in (a.get_window_extent(renderer) for a in found):
        inside = (
            (shown[:, 0] >= box.x0)
            & (shown[:, 0] <= box.x1)
            & (shown[:, 1] >= box.y0)
            & (shown[:, 1] <= box.y1)
        )
        assert not inside.any(), shown[inside][:3]


def _with_points_at(plan, xy):
    """The plan with extra points at ``xy`` (plan CRS): points on a block's edge, where a
    grid can put them, as near the map's edge as a point can be."""
    import geopandas as gpd
    import pandas as pd

    extra = gpd.GeoDataFrame(
        {
            "point_id": [f"X{i}" for i in range(len(xy))],
            "block": plan.points["block"].iloc[0],
            "stratum": plan.points["stratum"].iloc[0],
        },
        geometry=shapely.points(xy),
        crs=plan.points.crs,
    )
    points = pd.concat([plan.points, extra], ignore_index=True)
    return SimpleNamespace(
        blocks=plan.blocks,
        points=points,
        crs=plan.crs,
        exclusions=plan.exclusions,
        meta=plan.meta,
        params=plan.params,
    )


def test_north_arrow_moves_off_points_in_the_top_corners(tmp_path):
    # A strip of vines along the top of the page and one block bottom left, with points on the
    # strip's top corners: both top corners of the map hold points, the bottom right is empty.
    from tests.geoms import E0, N0

    frame = blocks_frame(
        {
            "Top": shapely.box(E0, N0 + 250, E0 + 400, N0 + 400),
            "Low": shapely.box(E0, N0, E0 + 150, N0 + 150),
        }
    )
    planned = make_plan(
        read_blocks(write_geojson(frame, tmp_path / "b.geojson")), spacing=10.0, seed=2, command=["t"]
    )
    x0, _, x1, y1 = planned.blocks.total_bounds
    assert page_layout(planned).arrow["corner"] == "tr"  # the usual spot, while it is free
    plan = _with_points_at(planned, [(x0, y1), (x1, y1)])
    layout = page_layout(plan)
    _assert_clear(layout, _pixels(layout))
    fx0, fy0, fx1, fy1 = layout.frame
    ax0, ay0, ax1, ay1 = layout.arrow["box"]
    assert layout.arrow["on_map"] and layout.arrow["corner"] == "br"
    assert fx0 < ax0 and ax1 < fx1  # still on the map
    assert ay0 > (fy0 + fy1) / 2  # moved to the bottom right
    # The scale bar neither hides points nor sits on the arrow.
    bx0, by0, bx1, by1 = layout.scale_bar["box"]
    xy = layout.points
    assert not ((xy[:, 0] >= bx0) & (xy[:, 0] <= bx1) & (xy[:, 1] >= by0) & (xy[:, 1] <= by1)).any()
    assert bx1 < ax0 or bx0 > ax1 or by1 < ay0 or by0 > ay1


def test_north_arrow_leaves_the_map_when_every_corner_has_points(tmp_path):
    # One square block with points all along its edge: every corner of the map holds points.
    from tests.geoms import E0, N0

    frame = blocks_frame({"Full": shapely.box(E0, N0, E0 + 400, N0 + 400)})
    path = write_geojson(frame, tmp_path / "b.geojson")
    planned = make_plan(read_blocks(path), spacing=12.0, seed=1, command=["test"])
    edge = shapely.segmentize(planned.blocks.geometry.values[0].exterior, 10.0)
    plan = _with_points_at(planned, shapely.get_coordinates(edge)[:-1])
    layout = page_layout(plan)
    _assert_clear(layout, _pixels(layout))
    assert not layout.arrow["on_map"]
    assert layout.arrow["box"][0] >= layout.frame[2]  # drawn beside the map, in the margin
    assert layout.arrow["box"][1] >= layout.legend_box[3]  # below the legend
    subtitle = [t.text for t in layout.texts if "points in" in t.text]
    assert subtitle and "in 1 block " in subtitle[0]


def test_page_subtitle_says_one_block(tmp_path):
    frame = blocks_frame({"Only": lonlat_square(18.9, -33.86, 0.002)}, crs="EPSG:4326")
    plan = make_plan(
        read_blocks(write_geojson(frame, tmp_path / "b.geojson")), spacing=50.0, seed=1, command=["t"]
    )
    text = " ".join(t.text for t in page_layout(plan).texts)
    assert " 1 blocks" not in text and "in 1 block " in text
    assert np.isfinite(plan.blocks["area_ha"]).all()


def test_page_text_stays_on_the_page_and_off_the_map(many_strata_plan):
    layout = page_layout(many_strata_plan)
    width, height = layout.size
    fx0, fy0, fx1, fy1 = layout.frame
    for text in layout.texts:
        x0, y0, x1, y1 = text.box()
        assert 0 <= x0 and x1 <= width and 0 <= y0 and y1 <= height, text
        assert y1 <= fy0 or y0 >= fy1, text  # title, subtitle and cautions clear of the map
    lx0, ly0, lx1, ly1 = layout.legend_box
    assert lx0 >= fx1 and lx1 <= width
    for entry in layout.legend:
        x0, y0, x1, y1 = entry.label.box()
        assert lx0 <= x0 and x1 <= lx1 and ly0 <= y0 and y1 <= ly1, entry.label.text
    # Block labels never run into each other.
    boxes = [t.box() for t in layout.labels]
    for i, a in enumerate(boxes):
        for b in boxes[i + 1 :]:
            assert a[2] <= b[0] or b[2] <= a[0] or a[3] <= b[1] or b[3] <= a[1]


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
