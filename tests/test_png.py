"""plan.png / plan.pdf: printable page, stable bytes, true north, scale bar, any name drawable."""

from __future__ import annotations

import io
import json
import math
import struct
import unicodedata

import numpy as np
import pytest
import shapely
from PIL import Image
from pyproj import CRS, Geod, Proj, Transformer

from fieldplan.plan import make_plan
from fieldplan.read import read_blocks
from fieldplan.write.page import PAGE_SIZE, page_layout, page_text
from fieldplan.write.png import (
    MAX_LABELLED_BLOCKS,
    nice_length,
    plan_image_bytes,
    render_png,
    true_north_bearing,
    write_png,
)
from tests.geoms import lonlat_estate_file


def _square(x0: float, y0: float, w: float, h: float) -> dict:
    ring = [[x0, y0], [x0 + w, y0], [x0 + w, y0 + h], [x0, y0 + h], [x0, y0]]
    return {"type": "Polygon", "coordinates": [ring]}


@pytest.fixture(scope="module")
def plan(tmp_path_factory):
    folder = tmp_path_factory.mktemp("estate")
    # '$' is mathtext to matplotlib (and '$x^' fails to parse) unless drawn as plain text.
    names = [("A1", "Syrah"), ("$x^", "a$b$c"), ("B_2", None)]
    path = lonlat_estate_file(folder / "blocks.geojson", names)
    return make_plan(read_blocks(path), spacing=30.0, seed=5, command=["test"])


@pytest.fixture(scope="module")
def png(plan):
    return plan_image_bytes(plan, fmt="png")


def _rgb(png: bytes) -> np.ndarray:
    return np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(int)


def _chunks(png: bytes) -> list[tuple[bytes, bytes]]:
    # reference: PNG specification (ISO/IEC 15948) section 5.3: length, type, data, CRC
    out, pos = [], 8
    while pos < len(png):
        (length,) = struct.unpack(">I", png[pos : pos + 4])
        out.append((png[pos + 4 : pos + 8], png[pos + 8 : pos + 8 + length]))
        pos += 12 + length
    return out


def test_png_is_a4_landscape_and_stable(plan, png, tmp_path):
    # reference: PNG specification (ISO/IEC 15948), 8-byte signature
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    image = Image.open(io.BytesIO(png))
    width, height = image.size
    assert (width, height) == PAGE_SIZE
    # reference: ISO 216, A4 is 297 mm x 210 mm (sides in ratio sqrt 2)
    assert abs(width / height - 297 / 210) < 0.002
    assert abs(width / 150 * 25.4 - 297) < 1.0  # 150 dpi
    chunks = dict(_chunks(png))
    # reference: PNG specification section 11.3.5.3, pHYs: pixels per unit, unit 1 = metre;
    # 150 dpi = 150 / 0.0254 = 5905.5 px/m.
    ppx, ppy, unit = struct.unpack(">IIB", chunks[b"pHYs"])
    assert unit == 1 and ppx == ppy and abs(ppx - 150 / 0.0254) <= 1
    assert b"tEXt" not in chunks and b"iTXt" not in chunks and b"Software" not in png
    assert write_png(plan, tmp_path / "plan.png").read_bytes() == png
    assert plan_image_bytes(plan, fmt="png") == png  # the same plan, the same bytes


def test_pdf_is_one_stable_page(plan):
    a = plan_image_bytes(plan, fmt="pdf")
    b = plan_image_bytes(plan, fmt="pdf")
    # reference: ISO 32000-1 section 7.5.2, a PDF file begins with "%PDF-"
    assert a.startswith(b"%PDF-") and a == b
    assert a.count(b"/Type /Page\n") + a.count(b"/Type /Page ") + a.count(b"/Type /Page>") >= 1
    assert b"/CreationDate" not in a
    # reference: ISO 32000-1 section 14.11.2, MediaBox in points of 1/72 inch; A4 (ISO 216)
    # is 297 mm x 210 mm = 841.9 x 595.3 pt.
    box = a.split(b"/MediaBox [")[1].split(b"]")[0].split()
    assert [round(float(v), 1) for v in box] == [0.0, 0.0, 841.9, 595.3]


def test_points_are_drawn_in_palette_colours(png):
    rgb = _rgb(png).reshape(-1, 3)
    # reference: Okabe & Ito (2008) orange #E69F00, sky blue #56B4E9, bluish green #009E73
    # (from memory); the three strata take the first three colours.
    for colour in ((0xE6, 0x9F, 0x00), (0x56, 0xB4, 0xE9), (0x00, 0x9E, 0x73)):
        close = np.abs(rgb - np.array(colour)).sum(axis=1) <= 6
        assert close.sum() > 50, colour
    assert rgb.std() > 10  # not a blank page


def test_each_point_is_drawn_where_the_layout_puts_it(plan, png):
    layout = page_layout(plan)
    rgb = _rgb(png)
    ij = np.rint(layout.points).astype(int)
    colours = np.array([[int(s["colour"][k : k + 2], 16) for k in (1, 3, 5)] for s in layout.styles])
    # A marker's centre pixel is its stratum's colour, unless a block label is drawn over it.
    boxes = np.array([t.box() for t in layout.labels]).reshape(-1, 4)
    under_label = (
        (ij[:, None, 0] >= boxes[None, :, 0])
        & (ij[:, None, 0] <= boxes[None, :, 2])
        & (ij[:, None, 1] >= boxes[None, :, 1])
        & (ij[:, None, 1] <= boxes[None, :, 3])
    ).any(axis=1)
    centre = rgb[ij[:, 1], ij[:, 0]]
    expected = colours[layout.point_style]
    ok = np.abs(centre - expected).sum(axis=1) <= 6
    assert ok[~under_label].all() and (~under_label).sum() > 0.5 * len(ij)


@pytest.mark.parametrize(("lon", "lat", "epsg"), [(18.9, -33.86, 32734), (-121.5, 38.5, 32610)])
def test_north_arrow_follows_meridian_convergence(lon, lat, epsg):
    crs = CRS.from_epsg(epsg)
    x, y = Transformer.from_crs(4326, crs, always_xy=True).transform(lon, lat)
    bearing = true_north_bearing(crs, x, y)
    # reference: pyproj Proj.get_factors().meridian_convergence (PROJ), and the spherical
    # Transverse Mercator formula gamma = atan(tan(lon - lon0) sin(lat)),
    # Snyder (1987), Map Projections - A Working Manual, USGS PP 1395, p. 60 (from memory).
    convergence = Proj(crs).get_factors(lon, lat).meridian_convergence
    assert bearing == pytest.approx(-convergence, abs=1e-3)
    lon0 = crs.coordinate_operation.params[1].value
    snyder = math.degrees(math.atan(math.tan(math.radians(lon - lon0)) * math.sin(math.radians(lat))))
    assert bearing == pytest.approx(-snyder, abs=0.01)


def test_page_arrow_points_to_true_north(plan):
    layout = page_layout(plan)
    fx0, fy0, fx1, fy1 = layout.frame
    x0, y0, x1, y1 = layout.extent
    lon, lat = Transformer.from_crs(plan.crs, 4326, always_xy=True).transform((x0 + x1) / 2, (y0 + y1) / 2)
    # reference: pyproj Proj.get_factors().meridian_convergence (PROJ) at the map centre.
    convergence = Proj(plan.crs).get_factors(lon, lat).meridian_convergence
    tail, tip = np.asarray(layout.arrow["tail"]), np.asarray(layout.arrow["tip"])
    dx, dy = tip - tail
    drawn = math.degrees(math.atan2(dx, -dy))  # page y points down
    assert drawn == pytest.approx(-convergence, abs=0.01)
    assert abs(drawn) > 0.5  # this estate lies west of its zone's central meridian: visibly turned


def test_scale_bar_lengths_follow_1_2_5():
    # common practice, no source: scale bars use 1, 2, 5 x 10^k lengths
    assert [nice_length(v) for v in (0.5, 7, 19, 20, 49, 99, 101, 4300)] == [
        1,
        5,
        10,
        20,
        20,
        50,
        100,
        2000,
    ]


def test_scale_bar_matches_ground_distance(plan, png):
    layout = page_layout(plan)
    bar = layout.scale_bar
    assert bar["length_m"] == nice_length((layout.extent[2] - layout.extent[0]) / 5)
    # The first block is 0.0025 degrees of longitude wide at 33.86 S; its bottom edge on the page,
    # in bar lengths, must equal its length on the ground in metres over the bar's metres.
    # reference: pyproj.Geod (WGS84 ellipsoid) geodesic distance; the UTM scale factor here
    # is within 0.05 % of 1 (Snyder 1987, eq. 8-13, from memory).
    _, _, ground = Geod(ellps="WGS84").inv(18.9, -33.86, 18.9025, -33.86)
    to_map = Transformer.from_crs(4326, plan.crs, always_xy=True)
    a, b = layout.to_page(np.array([to_map.transform(18.9, -33.86), to_map.transform(18.9025, -33.86)]))
    on_page = float(np.hypot(*(b - a)))
    bar_px = bar["x1"] - bar["x0"]
    assert (on_page / bar_px) == pytest.approx(ground / bar["length_m"], rel=1e-3)
    # The drawn bar: a run of near-black pixels across the bar's middle row, as long as the bar.
    row = _rgb(png)[int(round(bar["y"] + bar["height"] / 2))]
    dark = np.flatnonzero((row < 60).all(axis=1))
    run = dark[(dark >= bar["x0"] - 3) & (dark <= bar["x1"] + 3)]
    assert abs((run.max() - run.min() + 1) - bar_px) <= 2


def test_many_blocks_drop_labels_and_draw_every_point(tmp_path):
    n = MAX_LABELLED_BLOCKS + 10
    features = [
        {
            "type": "Feature",
            "properties": {"block": f"K{i:03d}", "stratum": f"S{i % 40}"},
            "geometry": _square(18.9 + (i % 15) * 0.0012, -33.86 + (i // 15) * 0.001, 0.001, 0.0008),
        }
        for i in range(n)
    ]
    path = tmp_path / "many.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection", "features": features}))
    many = make_plan(read_blocks(path), spacing=20.0, seed=2, command=["test"])
    assert many.points["stratum"].nunique() > 24
    layout = page_layout(many)
    assert layout.labels == []  # no block labels
    assert any("Block labels left out" in t.text for t in layout.texts)  # and the page says so
    # Every point is placed once, whatever the number of strata (40 here, over the legend's 24).
    xy = shapely.get_coordinates(many.points.geometry.values)
    assert len(layout.points) == len(many.points)
    assert np.allclose(np.unique(layout.points, axis=0), np.unique(layout.to_page(xy), axis=0))
    assert [e.label.text for e in layout.legend if e.kind == "none"] == ["... and 16 more strata"]
    image = Image.open(io.BytesIO(render_png(layout)))
    assert image.size == PAGE_SIZE


NAMES = [
    "$x^",
    "a$b$c",
    "Ch\u00e2teau \u00c9st",  # accented Latin
    "\u6771\u533a",  # CJK
    "\u062d\u0642\u0644 \u05e9\u05d3\u05d4",  # Arabic and Hebrew (right to left)
    "\U0001f347 Row \U0001f468\u200d\U0001f33e",  # emoji, with a zero-width joiner
    "tab\tbell\x07nul\x00end",  # control characters
    "e\u0301\u0301",  # combining accents
    "\ue000private",  # private use
    "x" * 300,  # overlong
]


def test_any_name_is_drawn_or_replaced():
    for name in NAMES:
        text = page_text(name)
        assert text  # something is always shown
        # reference: Unicode Standard, General Category: Cc (control), Cs (surrogate),
        # Co (private use) and Cn (unassigned) have no glyph to draw.
        assert not any(unicodedata.category(c) in ("Cc", "Cs", "Co", "Cn") for c in text), repr(text)
        assert len(text) <= 48
    assert page_text("$x^") == "$x^" and page_text("a$b$c") == "a$b$c"  # no markup interpreted
    assert page_text("Ch\u00e2teau \u00c9st") == "Ch\u00e2teau \u00c9st"  # DejaVu Sans has Latin-1
    assert page_text("tab\tbell\x07nul\x00end") == "tab bell?nul end"
    assert page_text("\ud800x") == "?x"  # a lone surrogate (invalid UTF-16 from JSON)


def test_a_plan_named_in_many_scripts_renders(tmp_path):
    # Block ids refuse control characters and over 200 characters (fieldplan.limits): those
    # names reach the page as varieties.
    names = [
        (name if name.isprintable() and len(name) < 200 else f"B{i}", name.replace("\x00", ""))
        for i, name in enumerate(NAMES)
    ]
    path = lonlat_estate_file(tmp_path / "blocks.geojson", names)
    named = make_plan(read_blocks(path), spacing=40.0, seed=1, command=["test"])
    layout = page_layout(named)
    png = render_png(layout)
    assert Image.open(io.BytesIO(png)).size == PAGE_SIZE
    assert render_png(page_layout(named)) == png
    shown = {t.text for t in layout.labels}
    assert "Ch\u00e2teau \u00c9st" in shown and "$x^" in shown


def test_spares_have_their_own_symbol_and_legend_row(tmp_path):
    path = lonlat_estate_file(tmp_path / "blocks.geojson", [("A", None), ("B", None)])
    spared = make_plan(
        read_blocks(path),
        design="random",
        design_options={"per_block": 4},
        spares=2,
        seed=3,
        command=["test"],
    )
    status = spared.points["status"].astype(str).str.lower()
    n_spare = int((status == "spare").sum())
    assert n_spare == 4
    layout = page_layout(spared)
    rows = [e for e in layout.legend if e.kind == "marker"]
    assert [e.stratum for e in rows] == ["A", "B", None]
    assert [e.count for e in rows] == [4, 4, 4]  # planned points per stratum, then the spares
    assert rows[-1].shape == "cross" and rows[-1].colour == "#ffffff"
    subtitle = next(t.text for t in layout.texts if t.role == "subtitle")
    assert "8 points in 2 blocks" in subtitle and "4 spares" in subtitle

    # Two points marked inaccessible (fieldplan mark): the map's grey struck-through circle.
    from types import SimpleNamespace

    from fieldplan.write.html_map import INACCESSIBLE_STYLE

    points = spared.points.copy()
    gone = points.index[status.to_numpy() != "spare"][:2]
    points.loc[gone, "status"] = "inaccessible"
    marked = SimpleNamespace(
        **{k: getattr(spared, k) for k in ("blocks", "crs", "exclusions", "meta", "params")}
    )
    marked.points = points
    layout = page_layout(marked)
    rows = [e for e in layout.legend if e.kind == "marker"]
    assert [e.count for e in rows] == [2, 4, 4, 2]  # stratum A lost two to the marks
    assert rows[-1].label.text.startswith(INACCESSIBLE_STYLE["legend"])
    assert rows[-1].colour == INACCESSIBLE_STYLE["colour"] and rows[-1].shape == "circle-x"
    rgb = _rgb(render_png(layout))
    grey = np.array([int(INACCESSIBLE_STYLE["colour"][i : i + 2], 16) for i in (1, 3, 5)])
    drawn = layout.points[layout.point_style == len(layout.styles) - 1]
    assert len(drawn) == 2
    for x, y in np.rint(drawn).astype(int):
        patch = rgb[y - 4 : y + 5, x - 4 : x + 5].reshape(-1, 3)
        assert (np.abs(patch - grey).sum(axis=1) <= 6).any()  # grey fill
        assert (patch.sum(axis=1) < 150).any()  # and the dark strike
    assert "2 marked inaccessible" in next(t.text for t in layout.texts if t.role == "subtitle")


def test_page_draws_without_the_bundled_font(plan, monkeypatch):
    # No font file to be found (matplotlib not installed): Pillow's own default font is used.
    from PIL import ImageFont

    from fieldplan.write import page

    for cached in (page.font, page._drawable, page._missing_glyph):
        cached.cache_clear()
    monkeypatch.setattr(page, "font_path", lambda bold=False: None)
    try:
        assert not str(getattr(page.font(7.0), "path", "")).endswith("DejaVuSans.ttf")
        assert isinstance(page.font(7.0), ImageFont.FreeTypeFont | ImageFont.ImageFont)
        png = plan_image_bytes(plan, fmt="png")
        assert Image.open(io.BytesIO(png)).size == PAGE_SIZE
        assert page_text("$x^") == "$x^"
        assert page_text("\u00e9\u6771") in ("\u00e9?", "??")  # drawn, or replaced if the font lacks it
    finally:
        for cached in (page.font, page._drawable, page._missing_glyph):
            cached.cache_clear()


@pytest.mark.parametrize("shape", ["circle", "square", "triangle", "diamond", "triangle-down", "hexagon"])
def test_marker_shapes_cover_their_area(shape):
    from fieldplan.write.png import _SHAPES, _sprite

    size = 300.0
    offsets, is_fill = _sprite(shape, size, 0.0)
    # reference: pi r^2 for the circle; shapely's polygon area for the others (matplotlib's
    # marker proportions: square side 1, diamond the unit square turned 45 degrees, triangles
    # of width and height 1, hexagon of circumradius 0.5).
    expected = math.pi * (size / 2) ** 2 if shape == "circle" else shapely.Polygon(_SHAPES[shape] * size).area
    assert len(offsets) == pytest.approx(expected, rel=0.01)
    assert is_fill.all()  # no edge asked for
    # An edge of e pixels is a band e wide around the fill (centred on the outline): its area
    # is the perimeter times e (reference: shapely's polygon length; pi d for the circle).
    # Edges at 45 degrees meet the pixel lattice in whole diagonals: a few per cent more.
    offsets, is_fill = _sprite(shape, size, 6.0)
    perimeter = math.pi * size if shape == "circle" else shapely.Polygon(_SHAPES[shape] * size).length
    assert (~is_fill).sum() == pytest.approx(6.0 * perimeter, rel=0.07)
