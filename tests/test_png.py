"""plan.png / plan.pdf: printable page, stable bytes, true north, scale bar."""

from __future__ import annotations

import io
import json
import math

import numpy as np
import pytest
from PIL import Image
from pyproj import CRS, Proj, Transformer

from fieldplan.plan import make_plan
from fieldplan.read import read_blocks
from fieldplan.write.png import nice_length, plan_image_bytes, true_north_bearing, write_png
from tests.geoms import lonlat_estate_file


def _square(x0: float, y0: float, w: float, h: float) -> dict:
    ring = [[x0, y0], [x0 + w, y0], [x0 + w, y0 + h], [x0, y0 + h], [x0, y0]]
    return {"type": "Polygon", "coordinates": [ring]}


@pytest.fixture(scope="module")
def plan(tmp_path_factory):
    folder = tmp_path_factory.mktemp("estate")
    # '$' would switch matplotlib to mathtext (and '$x^' fail to parse) if not escaped.
    names = [("A1", "Syrah"), ("$x^", "a$b$c"), ("B_2", None)]
    path = lonlat_estate_file(folder / "blocks.geojson", names)
    return make_plan(read_blocks(path), spacing=30.0, seed=5, command=["test"])


@pytest.fixture(scope="module")
def png(plan):
    return plan_image_bytes(plan, fmt="png")


def test_png_is_a4_landscape_and_stable(plan, png, tmp_path):
    # reference: PNG specification (ISO/IEC 15948), 8-byte signature
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    image = Image.open(io.BytesIO(png))
    width, height = image.size
    # reference: ISO 216, A4 is 297 mm x 210 mm (sides in ratio sqrt 2)
    assert abs(width / height - 297 / 210) < 0.002
    assert abs(width / 150 * 25.4 - 297) < 1.0  # 150 dpi
    assert b"Software" not in png
    assert write_png(plan, tmp_path / "plan.png").read_bytes() == png


def test_pdf_is_one_stable_page(plan):
    a = plan_image_bytes(plan, fmt="pdf")
    b = plan_image_bytes(plan, fmt="pdf")
    # reference: ISO 32000-1 section 7.5.2, a PDF file begins with "%PDF-"
    assert a.startswith(b"%PDF-") and a == b
    assert a.count(b"/Type /Page\n") + a.count(b"/Type /Page ") + a.count(b"/Type /Page>") >= 1
    assert b"/CreationDate" not in a


def test_points_are_drawn_in_palette_colours(png):
    rgb = np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).reshape(-1, 3).astype(int)
    # reference: Okabe & Ito (2008) orange #E69F00, sky blue #56B4E9, bluish green #009E73
    # (from memory); the three strata take the first three colours.
    for colour in ((0xE6, 0x9F, 0x00), (0x56, 0xB4, 0xE9), (0x00, 0x9E, 0x73)):
        close = np.abs(rgb - np.array(colour)).sum(axis=1) <= 6
        assert close.sum() > 50, colour
    assert rgb.std() > 10  # not a blank page


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


def test_many_blocks_drop_labels_and_draw_every_point(tmp_path):
    from fieldplan.write.png import MAX_LABELLED_BLOCKS, plan_figure

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
    fig = plan_figure(many)
    ax = fig.axes[0]
    names = set(many.blocks["block"])
    assert not any(t.get_text() in names for t in ax.texts)  # no block labels
    assert any("Block labels left out" in t.get_text() for t in fig.texts)  # and the page says so
    # Every point is drawn once, whatever the number of strata (40 here, over the legend's 24).
    from matplotlib.collections import PathCollection

    drawn = np.concatenate([c.get_offsets() for c in ax.collections if isinstance(c, PathCollection)])
    assert len(drawn) == len(many.points)
    xy = np.column_stack([many.points.geometry.x, many.points.geometry.y])
    assert np.array_equal(np.unique(drawn, axis=0), np.unique(xy, axis=0))
