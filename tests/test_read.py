"""Reading block files: formats, ids, CRS handling and clear one-line errors."""

from __future__ import annotations

import zipfile

import numpy as np
import pytest
import shapely

from fieldplan.errors import InputError, InvalidBlocksError
from fieldplan.read import read_blocks, read_exclusions
from tests.geoms import blocks_frame, bowtie, lonlat_square, square, with_hole, write_geojson


def _lonlat_blocks(n=3, **cols):
    geoms = {f"B{i}": lonlat_square(15.0 + 0.005 * i, 47.0) for i in range(n)}
    return blocks_frame(geoms, crs="EPSG:4326", **cols)


def test_geojson_gpkg_shapefile_and_zip_read_alike(tmp_path):
    frame = _lonlat_blocks(variety=["Riesling", "Zweigelt", None], row_spacing_m=[2.2, 2.4, None])
    gj = write_geojson(frame, tmp_path / "b.geojson")
    frame.to_file(tmp_path / "b.gpkg", layer="blocks", driver="GPKG")
    shp_dir = tmp_path / "shp"
    shp_dir.mkdir()
    frame.to_file(shp_dir / "b.shp")
    with zipfile.ZipFile(tmp_path / "b.zip", "w") as z:
        for part in shp_dir.iterdir():
            z.write(part, part.name)
    areas = []
    for path in (gj, tmp_path / "b.gpkg", shp_dir / "b.shp", tmp_path / "b.zip"):
        blocks = read_blocks(path)
        assert blocks["block"].tolist() == ["B0", "B1", "B2"]
        assert blocks.crs.to_epsg() == 32633
        assert blocks["variety"].tolist()[:2] == ["Riesling", "Zweigelt"]
        areas.append(blocks.geometry.area.to_numpy())
    assert np.allclose(areas, areas[0], rtol=1e-6)


def test_holes_and_multipolygons_kept(tmp_path):
    frame = blocks_frame({"H": with_hole, "S": shapely.affinity.translate(square, 1000)})  # side by side
    blocks = read_blocks(write_geojson(frame, tmp_path / "b.geojson"))
    assert blocks.geometry.iloc[0].interiors or len(blocks.geometry.iloc[0].interiors) == 1
    assert blocks.geometry.area.iloc[0] == pytest.approx(with_hole.area, rel=1e-4)


def test_id_field_fallback_and_override(tmp_path):
    frame = _lonlat_blocks().rename(columns={"block": "name"})
    frame["code"] = ["x1", "x2", "x3"]
    path = write_geojson(frame, tmp_path / "b.geojson")
    assert read_blocks(path)["block"].tolist() == ["B0", "B1", "B2"]
    assert read_blocks(path, id_field="code")["block"].tolist() == ["x1", "x2", "x3"]
    with pytest.raises(InvalidBlocksError, match="no field 'nope'"):
        read_blocks(path, id_field="nope")


@pytest.mark.parametrize(
    ("content", "match"),
    [
        ("", "empty"),
        ('{"type": "FeatureCollection", "features": [', "line 1, column"),
        ("hello", "syntax error"),
        ('{"type": "Topology"}', "not a GeoJSON FeatureCollection"),
    ],
)
def test_bad_files_give_one_line_errors(tmp_path, content, match):
    path = tmp_path / "bad.geojson"
    path.write_text(content)
    with pytest.raises(InputError, match=match) as info:
        read_blocks(path)
    assert "\n" not in str(info.value) and "bad.geojson" in str(info.value)


def test_missing_file_and_bad_zip(tmp_path):
    with pytest.raises(InputError, match="not found"):
        read_blocks(tmp_path / "nope.geojson")
    (tmp_path / "x.zip").write_bytes(b"not a zip")
    with pytest.raises(InputError, match="not a readable zip"):
        read_blocks(tmp_path / "x.zip")


def test_points_only_and_invalid_polygons(tmp_path):
    pts = blocks_frame({"P": shapely.Point(500000, 5300000)})
    with pytest.raises(InvalidBlocksError, match="no polygons"):
        read_blocks(write_geojson(pts, tmp_path / "p.geojson"))
    bad = blocks_frame({"X": bowtie, "S": shapely.affinity.translate(square, 1000)})
    path = write_geojson(bad, tmp_path / "bow.geojson")
    with pytest.raises(InvalidBlocksError, match="--repair"):
        read_blocks(path)
    repaired = read_blocks(path, repair=True)
    assert repaired.geometry.is_valid.all()
    assert any("repaired" in n for n in repaired.attrs["notes"])


def test_duplicate_and_blank_ids(tmp_path):
    frame = _lonlat_blocks()
    frame.loc[2, "block"] = "B0"
    with pytest.raises(InvalidBlocksError, match="'B0' is used by features 1, 3"):
        read_blocks(write_geojson(frame, tmp_path / "d.geojson"))
    frame.loc[2, "block"] = "  "
    with pytest.raises(InvalidBlocksError, match="blank block id"):
        read_blocks(write_geojson(frame, tmp_path / "e.geojson"))


def test_crs_missing_and_swapped_coordinates(tmp_path):
    # reference: RFC 7946 §3.1.1 (longitude first; GeoJSON is WGS84); latitude is bounded by ±90 degrees.
    projected = blocks_frame({"A": shapely.box(500000, 5300000, 500100, 5300100)}, crs=None)
    projected.to_file(tmp_path / "proj.geojson", driver="GeoJSON")
    with pytest.raises(InvalidBlocksError, match="not longitude/latitude"):
        read_blocks(tmp_path / "proj.geojson")
    projected.to_file(tmp_path / "proj.shp")
    with pytest.raises(InvalidBlocksError, match="no CRS"):
        read_blocks(tmp_path / "proj.shp")
    no_prj = _lonlat_blocks().set_crs(None, allow_override=True)
    no_prj.to_file(tmp_path / "noprj.shp")
    blocks = read_blocks(tmp_path / "noprj.shp")
    assert any("WGS84 is assumed" in n for n in blocks.attrs["notes"])
    # blocks at 120°E, 40°N written as (lat, lon): "latitude" 120 is impossible
    swapped = blocks_frame({f"S{i}": lonlat_square(40.0 + 0.01 * i, 120.0) for i in range(3)}, crs=None)
    with pytest.raises(InvalidBlocksError, match="swapped"):
        swapped.to_file(tmp_path / "sw.geojson", driver="GeoJSON")
        read_blocks(tmp_path / "sw.geojson")
    far = _lonlat_blocks(4)
    far.loc[3, "geometry"] = lonlat_square(47.0, 15.0)  # one block with lon/lat swapped
    with pytest.raises(InvalidBlocksError, match="swapped"):
        read_blocks(write_geojson(far, tmp_path / "far.geojson"))


def test_shapefile_truncated_field_names(tmp_path):
    # reference: dBASE field names hold at most 10 characters (Shapefile .dbf format).
    frame = _lonlat_blocks(row_spacing_m=[2.2, 2.4, 2.5], row_bearing_deg=[10.0, 20.0, 30.0])
    frame.to_file(tmp_path / "t.shp")
    blocks = read_blocks(tmp_path / "t.shp")
    assert blocks["row_spacing_m"].tolist() == [2.2, 2.4, 2.5]
    assert blocks["row_bearing_deg"].tolist() == [10.0, 20.0, 30.0]


def test_non_numeric_row_attribute(tmp_path):
    frame = _lonlat_blocks(row_spacing_m=["2.5", "wide", None])
    with pytest.raises(InvalidBlocksError, match="row_spacing_m='wide'"):
        read_blocks(write_geojson(frame, tmp_path / "r.geojson"))


def test_exclusions_refuse_lines(tmp_path):
    frame = blocks_frame({"t": shapely.LineString([(500000, 5300000), (500100, 5300100)])})
    path = write_geojson(frame, tmp_path / "x.geojson")
    with pytest.raises(InputError, match="buffer tracks"):
        read_exclusions(path, crs="EPSG:32633")


def test_select_blocks_by_attribute(tmp_path):
    from fieldplan.errors import OptionError
    from fieldplan.read import select_blocks

    frame = _lonlat_blocks(variety=["Syrah", "syrah ", "Pinotage"])
    blocks = read_blocks(write_geojson(frame, tmp_path / "b.geojson"))
    assert select_blocks(blocks, "variety=SYRAH")["block"].tolist() == ["B0", "B1"]
    assert select_blocks(blocks, "block=B2,B0")["block"].tolist() == ["B0", "B2"]
    with pytest.raises(OptionError, match="no block has"):
        select_blocks(blocks, "variety=Merlot")
    with pytest.raises(OptionError, match="no field 'crop'"):
        select_blocks(blocks, "crop=vine")
    with pytest.raises(OptionError, match="FIELD=VALUE"):
        select_blocks(blocks, "variety")
