"""The notebook API: sample_points in the input's CRS, prepare_blocks refusing what cannot be planned."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import shapely

import fieldplan
from fieldplan.errors import FieldplanError, InvalidBlocksError
from fieldplan.read import read_blocks
from tests.geoms import E0, N0, UTM33N, blocks_frame, concave, square, with_hole


def _lonlat_blocks():
    local = blocks_frame({"A": square, "B": shapely.affinity.translate(concave, 600)})
    return local.to_crs("EPSG:4326")


@pytest.mark.parametrize(
    "spec",
    [{"spacing": 50}, {"design": "random", "per_block": 6}, {"design": "balanced", "per_ha": 1.5}],
)
def test_sample_points_on_lonlat_input_come_back_in_lonlat_inside_the_polygons(spec):
    fields = _lonlat_blocks()
    points = fieldplan.sample_points(fields, spec, seed=3)
    assert points.crs == fields.crs
    # reference: shapely (GEOS) point-in-polygon in the input's own coordinates, with a
    # tolerance of 1e-9 degrees (0.1 mm) for the round trip through UTM (pyproj)
    owner = fields.set_index("block").geometry.loc[points["block"]].to_numpy()
    assert shapely.dwithin(owner, points.geometry.values, 1e-9).all()
    assert set(points["block"]) == {"A", "B"}
    lon, lat = points.geometry.x, points.geometry.y
    assert lon.between(14, 16).all() and lat.between(47, 48.5).all()


def test_sample_points_equals_make_plan_in_utm():
    fields = _lonlat_blocks()
    spec = {"design": "random", "per_block": 4}
    points = fieldplan.sample_points(fields, spec, seed=8)
    blocks = fieldplan.prepare_blocks(fields.to_crs(UTM33N))
    plan = fieldplan.make_plan(blocks, spec, seed=8)
    # reference: pyproj transformation UTM 33N -> WGS84 of the planned points
    back = plan.points.to_crs("EPSG:4326")
    np.testing.assert_allclose(
        shapely.get_coordinates(points.geometry.values), shapely.get_coordinates(back.geometry.values), atol=1e-9
    )


def test_sample_points_uses_the_index_when_there_is_no_block_column():
    fields = _lonlat_blocks().drop(columns="block").set_index(np.array(["north", "south"]))
    points = fieldplan.sample_points(fields, {"spacing": 80}, seed=1)
    assert set(points["block"]) == {"north", "south"}


def test_make_plan_refuses_degrees():
    with pytest.raises(InvalidBlocksError, match="geographic CRS") as info:
        fieldplan.make_plan(_lonlat_blocks(), {"spacing": 40}, seed=1)
    assert info.value.param == "blocks"


@pytest.mark.parametrize(
    ("frame", "kwargs", "param", "fragment"),
    [
        (lambda: _lonlat_blocks(), {}, "gdf", "geographic"),
        (lambda: blocks_frame({"A": square}).set_crs(None, allow_override=True), {}, "gdf", "no CRS"),
        (lambda: blocks_frame({"A": square}).to_crs("EPSG:2263"), {}, "gdf", "foot"),
        (lambda: blocks_frame({"A": square}).rename(columns={"block": "name"}), {}, "block", "no column 'block'"),
        (lambda: blocks_frame({"A": square}), {"block": "Block_ID"}, "block", "no column 'Block_ID'"),
        (lambda: blocks_frame({"A": square, "B": with_hole}, block=["A", "A"]), {}, "block", "more than one"),
        (lambda: blocks_frame({"A": square}), {"columns": {"row_spacing": "RowSp"}}, "columns", "RowSp"),
        (lambda: blocks_frame({"A": square}), {"length_unit": "chain"}, "length_unit", "us-ft"),
        (
            lambda: blocks_frame(
                {"A": shapely.Polygon([(E0, N0), (E0 + 100, N0 + 100), (E0 + 100, N0), (E0, N0 + 100)])}
            ),
            {},
            "repair",
            "repair=True",
        ),
    ],
)
def test_prepare_blocks_refuses_with_the_argument_named(frame, kwargs, param, fragment):
    with pytest.raises(FieldplanError) as info:
        fieldplan.prepare_blocks(frame(), **kwargs)
    assert info.value.param == param
    assert fragment in str(info.value)


def test_prepare_blocks_maps_columns_and_converts_feet():
    frame = blocks_frame({"A": square}, RowSp=[10.0], VineSp=[5.0], Kind=["Syrah"])
    blocks = fieldplan.prepare_blocks(
        frame, columns={"row_spacing": "RowSp", "plant_spacing": "VineSp", "variety": "Kind"}, length_unit="ft"
    )
    # reference: international foot = 0.3048 m exactly (NIST SP 811, appendix B)
    assert blocks["row_spacing_m"].iloc[0] == pytest.approx(3.048)
    assert blocks["plant_spacing_m"].iloc[0] == pytest.approx(1.524)
    assert blocks["variety"].iloc[0] == "Syrah"
    assert np.isnan(blocks["row_bearing_deg"].iloc[0])


def test_prepared_blocks_plan_like_read_blocks(tmp_path):
    from tests.geoms import write_geojson

    frame = blocks_frame({"A": square, "B": shapely.affinity.translate(concave, 600)})
    path = write_geojson(frame, tmp_path / "b.geojson")
    read = read_blocks(path)
    prepared = fieldplan.prepare_blocks(gpd.read_file(path).to_crs(read.crs))
    a = fieldplan.make_plan(read, {"spacing": 35}, seed=2).points
    b = fieldplan.make_plan(prepared, {"spacing": 35}, seed=2).points
    # common practice, no source: a file read and the same frame prepared in memory plan alike
    np.testing.assert_allclose(
        shapely.get_coordinates(a.geometry.values), shapely.get_coordinates(b.geometry.values), atol=1e-6
    )
