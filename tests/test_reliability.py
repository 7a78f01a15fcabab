"""Bad input through the command line: exit code 2, one line naming file, feature and fix, nothing written.

Each case in :data:`CASES` builds a broken input in a temporary folder and runs
``fieldplan plan`` on it. ``docs/reliability.md`` lists the same cases with the
message a real run prints.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import warnings
import zipfile
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import pytest
import shapely
from typer.testing import CliRunner

from fieldplan.cli.main import app
from tests.geoms import E0, N0, blocks_frame, bowtie, lonlat_square, square, write_geojson

runner = CliRunner()
ROOT = Path(__file__).resolve().parents[1]


def _lonlat_blocks(n: int = 3, **columns):
    geoms = {f"B{i}": lonlat_square(15.0 + 0.005 * i, 47.0) for i in range(n)}
    return blocks_frame(geoms, crs="EPSG:4326", **columns)


def _write(path: Path, content: str | bytes) -> Path:
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    return path


def _folder(path: Path) -> Path:
    path.mkdir()
    return path


def _feature_collection(path: Path, features: list[tuple[dict, dict | None]]) -> Path:
    data = {
        "type": "FeatureCollection",
        "features": [{"type": "Feature", "properties": p, "geometry": g} for p, g in features],
    }
    return _write(path, json.dumps(data))


_SQUARE_LONLAT = {"type": "Polygon", "coordinates": [[[15, 47], [15.003, 47], [15.003, 47.003], [15, 47]]]}


@dataclass
class Case:
    """A broken input: how to build it, what the message must say."""

    name: str
    what: str
    build: Callable[[Path], tuple[Path, list[str]]]
    expect: list[str]
    names_file: bool = True
    build_args: list[str] = field(default_factory=list)


def _points_only(tmp):
    frame = blocks_frame({"P": shapely.Point(E0, N0), "Q": shapely.Point(E0 + 10, N0)})
    return write_geojson(frame, tmp / "points.geojson"), []


def _lines_only(tmp):
    frame = blocks_frame({"L": shapely.LineString([(E0, N0), (E0 + 100, N0 + 100)])})
    return write_geojson(frame, tmp / "lines.geojson"), []


def _one_empty(tmp):
    return _feature_collection(
        tmp / "nullgeom.geojson", [({"block": "A"}, None), ({"block": "B"}, _SQUARE_LONLAT)]
    ), []


def _all_empty(tmp):
    return _feature_collection(tmp / "allnull.geojson", [({"block": "A"}, None)]), []


def _zero_area(tmp):
    flat = {"type": "Polygon", "coordinates": [[[15, 47], [15.001, 47], [15.002, 47], [15, 47]]]}
    return _feature_collection(
        tmp / "flat.geojson", [({"block": "Z"}, flat), ({"block": "B"}, _SQUARE_LONLAT)]
    ), []


def _ring(path: Path, ring: list) -> Path:
    # json.dumps writes NaN as the bare token NaN, which GDAL's GeoJSON reader accepts.
    return _feature_collection(path, [({"block": "A"}, {"type": "Polygon", "coordinates": [ring]})])


def _nan_vertex(tmp):
    return _ring(tmp / "nan.geojson", [[15, 47], [float("nan"), 47], [15.003, 47.003], [15, 47]]), []


def _huge_vertex(tmp):
    return _ring(tmp / "huge.geojson", [[15, 47], [1e300, 47], [15.003, 47.003], [15, 47]]), []


def _open_ring(tmp):
    return _ring(tmp / "open.geojson", [[15, 47], [15.003, 47], [15.003, 47.003]]), []


def _bowtie(tmp):
    frame = blocks_frame({"X": bowtie, "S": shapely.affinity.translate(square, 1000)})
    return write_geojson(frame, tmp / "bowtie.geojson"), []


def _lat_out_of_range(tmp):
    # Blocks at 120°E, 40°N written as (lat, lon): a "latitude" of 120 is impossible.
    frame = blocks_frame({f"S{i}": lonlat_square(40.0 + 0.01 * i, 120.0) for i in range(3)}, crs="EPSG:4326")
    frame.to_file(tmp / "swapped.geojson", driver="GeoJSON")
    return tmp / "swapped.geojson", []


def _one_swapped(tmp):
    frame = _lonlat_blocks(4)
    frame.loc[3, "geometry"] = lonlat_square(47.0, 15.0)
    return write_geojson(frame, tmp / "one_swapped.geojson"), []


def _one_far(tmp):
    frame = _lonlat_blocks(4)
    frame.loc[3, "geometry"] = lonlat_square(-70.0, -30.0)
    return write_geojson(frame, tmp / "one_far.geojson"), []


def _projected_no_prj(tmp):
    frame = blocks_frame({"A": shapely.box(E0, N0, E0 + 100, N0 + 100)}, crs=None)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the missing CRS is the point of this case
        frame.to_file(tmp / "no_prj.shp")
    return tmp / "no_prj.shp", []


def _projected_geojson(tmp):
    text = json.dumps(
        {
            "type": "FeatureCollection",
            "features": [
                {
                    "type": "Feature",
                    "properties": {"block": "A"},
                    "geometry": shapely.geometry.mapping(shapely.box(E0, N0, E0 + 100, N0 + 100)),
                }
            ],
        }
    )
    return _write(tmp / "utm.geojson", text), []


def _duplicate_ids(tmp):
    frame = _lonlat_blocks()
    frame.loc[2, "block"] = "B0"
    return write_geojson(frame, tmp / "dup.geojson"), []


def _blank_id(tmp):
    frame = _lonlat_blocks()
    frame.loc[1, "block"] = "  "
    return write_geojson(frame, tmp / "blank.geojson"), []


def _null_id(tmp):
    frame = _lonlat_blocks()
    frame["block"] = frame["block"].astype(object)
    frame.loc[1, "block"] = None
    return write_geojson(frame, tmp / "null_id.geojson"), []


def _no_id_field(tmp):
    frame = _lonlat_blocks().rename(columns={"block": "code"})
    return write_geojson(frame, tmp / "no_id.geojson"), []


def _named_id_missing(tmp):
    return write_geojson(_lonlat_blocks(), tmp / "blocks.geojson"), ["--id-field", "parcel"]


def _non_numeric_row(tmp):
    frame = _lonlat_blocks(row_spacing_m=["2.5", "wide", None])
    return write_geojson(frame, tmp / "rows.geojson"), []


def _good(tmp):
    return write_geojson(_lonlat_blocks(), tmp / "blocks.geojson")


def _gpkg_layers(tmp):
    frame = _lonlat_blocks()
    frame.to_file(tmp / "farm.gpkg", layer="parcels", driver="GPKG")
    frame.to_file(tmp / "farm.gpkg", layer="soils", driver="GPKG")
    return tmp / "farm.gpkg", []


def _exclusion_lines(tmp):
    track = blocks_frame({"track": shapely.LineString([(E0, N0), (E0 + 100, N0 + 100)])})
    path = write_geojson(track, tmp / "tracks.geojson")
    return _good(tmp), ["--exclude", str(path)]


def _cautions_empty(tmp):
    path = _write(tmp / "cautions.txt", "# our list\n\n")
    return _good(tmp), ["--cautions", str(path)]


def _bad_zip(tmp):
    return _write(tmp / "blocks.zip", b"PK\x03\x04 cut short"), []


def _zip_without_shp(tmp):
    with zipfile.ZipFile(tmp / "blocks.zip", "w") as archive:
        archive.writestr("blocks.txt", "no shapefile here")
    return tmp / "blocks.zip", []


def _zip_two_shp(tmp):
    frame = _lonlat_blocks()
    with zipfile.ZipFile(tmp / "two.zip", "w") as archive:
        for stem in ("a", "b"):
            frame.to_file(tmp / f"{stem}.shp")
            for ext in ("shp", "shx", "dbf", "prj"):
                archive.write(tmp / f"{stem}.{ext}", f"{stem}.{ext}")
    return tmp / "two.zip", []


def _shp_without(ext: str):
    def build(tmp):
        _lonlat_blocks().to_file(tmp / "blocks.shp")
        (tmp / f"blocks.{ext}").unlink()
        return tmp / "blocks.shp", []

    return build


PNG = b"\x89PNG\r\n\x1a\n" + bytes(64)

CASES = [
    Case("missing", "file missing", lambda t: (t / "nope.geojson", []), ["nope.geojson", "not found"]),
    Case("empty", "empty file", lambda t: (_write(t / "empty.geojson", ""), []), ["empty"]),
    Case("folder", "a folder instead of a file", lambda t: (_folder(t / "exports"), []), ["is a folder"]),
    Case(
        "csv_renamed",
        "CSV renamed .geojson",
        lambda t: (_write(t / "table.geojson", "block,x,y\nA,15.1,47.2\n"), []),
        ["looks like a table (CSV)", "export"],
    ),
    Case(
        "png_renamed", "PNG renamed .geojson", lambda t: (_write(t / "photo.geojson", PNG), []), ["PNG image"]
    ),
    Case(
        "csv_suffix",
        "a .csv file",
        lambda t: (_write(t / "blocks.csv", "a,b\n"), []),
        ["unsupported file type '.csv'", "GeoJSON"],
    ),
    Case("bad_zip", "unreadable zip", _bad_zip, ["not a readable zip archive"]),
    Case("zip_no_shp", "zip without a Shapefile", _zip_without_shp, ["holds no .shp"]),
    Case("zip_two_shp", "zip with two Shapefiles", _zip_two_shp, ["holds 2 Shapefiles (a.shp, b.shp)"]),
    Case("shp_no_dbf", "Shapefile without its .dbf", _shp_without("dbf"), ["its blocks.dbf is missing"]),
    Case("shp_no_shx", "Shapefile without its .shx", _shp_without("shx"), ["its blocks.shx is missing"]),
    Case(
        "json_syntax",
        "GeoJSON syntax error",
        lambda t: (_write(t / "broken.geojson", '{"type": "FeatureCollection",\n "features": [}\n'), []),
        ["syntax error at line 2, column 15"],
    ),
    Case(
        "not_geojson",
        "JSON that is not GeoJSON",
        lambda t: (_write(t / "topo.geojson", '{"type": "Topology"}'), []),
        ["not a GeoJSON FeatureCollection"],
    ),
    Case(
        "no_features",
        "FeatureCollection with no features",
        lambda t: (_feature_collection(t / "none.geojson", []), []),
        ["holds no features"],
    ),
    Case("points_only", "points only", _points_only, ["no polygons (found Point)"]),
    Case("lines_only", "lines only", _lines_only, ["no polygons (found LineString)"]),
    Case("empty_geometry", "one empty geometry", _one_empty, ["feature 1 (block='A') has an empty geometry"]),
    Case("all_empty", "every geometry empty", _all_empty, ["every geometry is empty"]),
    Case("zero_area", "zero-area polygon", _zero_area, ["feature 1 (block='Z') has zero area"]),
    Case("nan_vertex", "NaN coordinate", _nan_vertex, ["feature 1 (block='A') has a vertex at (nan, 47)"]),
    Case("huge_vertex", "absurd coordinate", _huge_vertex, ["block='A'", "(1e+300, 47)", "fix that vertex"]),
    Case("open_ring", "polygon ring not closed", _open_ring, ["open.geojson", "ring is not closed"]),
    Case(
        "bowtie",
        "self-intersecting polygon",
        _bowtie,
        ["block='X'", "self-intersection near 15.0006", "--repair"],
    ),
    Case("lat_range", "latitude outside ±90", _lat_out_of_range, ["latitude outside ±90", "swapped"]),
    Case("one_swapped", "one feature with lon/lat swapped", _one_swapped, ["block='B3'", "look swapped"]),
    Case("one_far", "one feature far from the rest", _one_far, ["block='B3'", "km from the other blocks"]),
    Case("no_prj", "projected Shapefile without .prj", _projected_no_prj, ["no CRS", "add a .prj"]),
    Case(
        "utm_geojson",
        "projected coordinates in GeoJSON",
        _projected_geojson,
        ["not longitude/latitude", "reproject it to WGS84"],
    ),
    Case("duplicate_ids", "duplicate block ids", _duplicate_ids, ["'B0' is used by features 1, 3"]),
    Case("blank_id", "blank block id", _blank_id, ["feature 2 has a blank block id"]),
    Case("null_id", "missing (null) block id", _null_id, ["feature 2 has a blank block id"]),
    Case("no_id_field", "no id field", _no_id_field, ["no block id field", "--id-field", "code"]),
    Case("id_field_missing", "--id-field names no field", _named_id_missing, ["no field 'parcel'"]),
    Case(
        "row_not_number",
        "row attribute not a number",
        _non_numeric_row,
        ["block='B1'", "row_spacing_m='wide'"],
    ),
    Case("gpkg_layers", "GeoPackage with several layers", _gpkg_layers, ["several layers", "--layer"]),
    Case(
        "exclusion_line", "exclusion drawn as a line", _exclusion_lines, ["tracks.geojson", "buffer tracks"]
    ),
    Case(
        "cautions_empty",
        "cautions file with no caution",
        _cautions_empty,
        ["cautions.txt", "holds no caution"],
    ),
    Case(
        "spacing_and_density",
        "--spacing and --per-ha together",
        lambda t: (_good(t), ["--per-ha", "2"]),
        ["--spacing or --per-ha, not both"],
        names_file=False,
    ),
    Case(
        "negative_buffer",
        "negative edge buffer",
        lambda t: (_good(t), ["--edge-buffer", "-5"]),
        ["--edge-buffer must be zero or positive"],
        names_file=False,
    ),
    Case(
        "too_many_points",
        "grid denser than --max-points",
        lambda t: (_good(t), ["--max-points", "100", "--spacing", "5"]),
        ["about 9,12", "points, more than the limit of 100", "--max-points"],
        names_file=False,
    ),
    Case(
        "spacing_infinite",
        "--spacing inf",
        lambda t: (_good(t), ["--spacing", "inf"]),
        ["--spacing must be a finite number, got inf"],
        names_file=False,
    ),
    Case(
        "buffer_infinite",
        "--edge-buffer inf",
        lambda t: (_good(t), ["--edge-buffer", "inf"]),
        ["--edge-buffer must be a finite number, got inf"],
        names_file=False,
    ),
    Case(
        "angle_nan",
        "--angle nan",
        lambda t: (_good(t), ["--angle", "nan"]),
        ["--angle must be a finite number, got nan"],
        names_file=False,
    ),
    Case(
        "max_points_zero",
        "--max-points 0",
        lambda t: (_good(t), ["--max-points", "0"]),
        ["--max-points must be 1 or more, got 0"],
        names_file=False,
    ),
    Case(
        "bad_angle",
        "--angle neither degrees nor rows",
        lambda t: (_good(t), ["--angle", "north"]),
        ["--angle takes degrees"],
        names_file=False,
    ),
]


def run_case(case: Case, tmp: Path):
    """Build the case's input and run ``fieldplan plan`` on it; return (result, out, input)."""
    source, extra = case.build(tmp)
    case.build_args = extra
    out = tmp / "plan-out"
    args = ["plan", str(source), "--spacing", "40", "--out", str(out), *extra]
    if "--spacing" in extra:
        args = ["plan", str(source), "--out", str(out), *extra]
    return runner.invoke(app, args), out, source


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_bad_input_exit_2_one_line_nothing_written(tmp_path, case):
    result, out, source = run_case(case, tmp_path)
    assert result.exit_code == 2, result.output
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, result.stderr
    message = lines[0]
    assert message.startswith("fieldplan: error: ")
    assert "Traceback" not in result.output
    if case.names_file:
        files = [Path(source).name] + [Path(x).name for x in case.build_args if Path(x).suffix]
        assert any(name in message for name in files), message
    for fragment in case.expect:
        assert fragment in message, message
    assert not out.exists()
    assert not list(tmp_path.glob(".plan-out.*"))


@pytest.mark.parametrize("name", ["bowtie"])
def test_bad_input_real_process(tmp_path, name):
    # The same through `python -m fieldplan`, as a user runs it: no traceback escapes.
    case = next(c for c in CASES if c.name == name)
    source, extra = case.build(tmp_path)
    out = tmp_path / "o"
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "fieldplan",
            "plan",
            str(source),
            "--spacing",
            "40",
            "--out",
            str(out),
            *extra,
        ],
        capture_output=True,
        text=True,
        cwd=ROOT,
        env={**os.environ, "COLUMNS": "200", "PYTHONWARNINGS": "ignore"},
        timeout=120,
    )
    assert proc.returncode == 2
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and "Traceback" not in proc.stderr, proc.stderr
    assert all(fragment in lines[0] for fragment in case.expect)
    assert not out.exists()


def test_occupied_folder_refused_and_left_alone(tmp_path):
    out = tmp_path / "plan"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    result = runner.invoke(app, ["plan", str(_good(tmp_path)), "--spacing", "40", "--out", str(out)])
    assert result.exit_code == 2
    assert "--force" in result.stderr and str(out) in result.stderr
    assert [p.name for p in out.iterdir()] == ["notes.txt"]
    assert (out / "notes.txt").read_text() == "keep me"


def test_bowtie_repaired_with_area_change_in_metric_units(tmp_path):
    source, _ = _bowtie(tmp_path)
    out = tmp_path / "o"
    result = runner.invoke(app, ["plan", str(source), "--spacing", "20", "--repair", "--out", str(out)])
    assert result.exit_code == 0, result.output
    note = next(ln for ln in result.stderr.splitlines() if "repaired" in ln)
    # The bow-tie (0,0)-(100,100)-(100,0)-(0,100) repairs into two triangles of 2,500 m² each:
    # reference: shoelace formula, triangle area = base × height / 2 = 100 × 50 / 2.
    assert "after repair 0.5000 ha (5,000 m²)" in note
    assert "block='X'" in note and "file units" not in note
    manifest = json.loads((out / "manifest.json").read_text())
    assert any("after repair 0.5000 ha" in n for n in manifest["notes"])


def test_edge_buffer_wider_than_block_falls_back_with_flag(tmp_path):
    out = tmp_path / "o"
    result = runner.invoke(
        app, ["plan", str(_good(tmp_path)), "--spacing", "40", "--edge-buffer", "500", "--out", str(out)]
    )
    assert result.exit_code == 0, result.output
    assert "edge buffer leaves nothing: one point on the block's surface" in result.stderr
    summary = (out / "summary.csv").read_text()
    assert summary.count("edge buffer leaves nothing") == 3


def test_angle_rows_without_bearing_falls_back_with_flag(tmp_path):
    out = tmp_path / "o"
    result = runner.invoke(
        app, ["plan", str(_good(tmp_path)), "--spacing", "40", "--angle", "rows", "--out", str(out)]
    )
    assert result.exit_code == 0, result.output
    assert result.stderr.count("no row_bearing_deg: grid not rotated") == 3
