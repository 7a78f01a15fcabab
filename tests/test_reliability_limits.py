"""Oversized and odd inputs: one-line errors in bounded time and memory; polar, antimeridian, overlaps."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
import zipfile
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import shapely
from pyproj import Geod, Transformer
from shapely.geometry import shape
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.errors import InputError, InvalidBlocksError
from fieldplan.limits import DEFAULT_MAX_BLOCKS, check_block_count
from fieldplan.read import read_blocks
from tests.geoms import E0, N0, blocks_frame, write_geojson

runner = CliRunner()
ROOT = Path(__file__).resolve().parents[1]
MEMORY_CAP = 2 << 30  # 2 GiB of address space: the reported cases reached 5.8 to 24 GB

# Every case runs in one child process under the memory cap, each through the CLI.
CHILD = textwrap.dedent(
    """
    import json, resource, sys
    resource.setrlimit(resource.RLIMIT_AS, (int(sys.argv[1]), int(sys.argv[1])))
    from typer.testing import CliRunner
    from fieldplan.cli.main import app
    out = []
    for args in json.loads(sys.argv[2]):
        result = CliRunner().invoke(app, args)
        out.append({"code": result.exit_code, "output": result.output,
                    "exception": repr(result.exception) if result.exit_code not in (0, 2) else ""})
    print(json.dumps(out))
    """
)


def _run_capped(cases: list[list[str]], cwd: Path) -> list[dict]:
    env = {**os.environ, "PYTHONPATH": str(ROOT), "PYTHONWARNINGS": "ignore"}
    done = subprocess.run(
        [sys.executable, "-c", CHILD, str(MEMORY_CAP), json.dumps(cases)],
        cwd=cwd,
        env=env,
        capture_output=True,
        text=True,
        timeout=180,  # bounded: the reported cases ran 70 to 184 s each before being killed
    )
    assert done.returncode == 0, done.stderr[-2000:]
    return json.loads(done.stdout.strip().splitlines()[-1])


def _feature_collection(features: list[tuple[str, dict]]) -> str:
    return json.dumps(
        {
            "type": "FeatureCollection",
            "features": [
                {"type": "Feature", "properties": {"block": name}, "geometry": geom}
                for name, geom in features
            ],
        }
    )


def _square(lon: float, lat: float, d: float = 0.003) -> dict:
    return {
        "type": "Polygon",
        "coordinates": [[[lon, lat], [lon + d, lat], [lon + d, lat + d], [lon, lat + d], [lon, lat]]],
    }


def _many_blocks_zip(tmp_path: Path, n: int) -> Path:
    k = int(np.ceil(np.sqrt(n)))
    i = np.arange(n)
    x, y = E0 + (i % k) * 60.0, N0 + (i // k) * 60.0
    frame = gpd.GeoDataFrame(
        {"block": [f"B{j}" for j in i]}, geometry=shapely.box(x, y, x + 50, y + 50), crs=32633
    )
    shp = tmp_path / "many.shp"
    frame.to_file(shp, engine="pyogrio")
    path = tmp_path / "many.zip"
    with zipfile.ZipFile(path, "w") as archive:
        for part in shp.parent.glob("many.*"):
            if part.suffix != ".zip":
                archive.write(part, part.name)
    return path


@pytest.mark.slow
def test_limit_cases_fail_fast_under_a_memory_cap(tmp_path):
    one = tmp_path / "one.geojson"
    one.write_text(_feature_collection([("B1", _square(15.0, 47.0))]))
    (tmp_path / "nested.geojson").write_text("[" * 100_000 + "]" * 100_000)
    (tmp_path / "longname.geojson").write_text(_feature_collection([("B" * 100_000, _square(15.0, 47.0))]))
    (tmp_path / "nul.geojson").write_text(_feature_collection([("B1\u0000x", _square(15.0, 47.0))]))
    (tmp_path / "tab.geojson").write_text(_feature_collection([("B1\tx", _square(15.0, 47.0))]))
    many = _many_blocks_zip(tmp_path, DEFAULT_MAX_BLOCKS + 5_000)
    base = ["plan", "--out", str(tmp_path / "out"), "--force"]
    cases = {
        # reference: the reported runs (184 s and 24 GB; a 1.95 TiB allocation; 70 s and 5.8 GB).
        "random per block": (
            [str(one), "--design", "random", "--per-block", "100000000"],
            "100,000,000 points",
        ),
        "random per ha": ([str(one), "--design", "random", "--per-ha", "1e9"], "--per-ha 1e+09"),
        "grid per ha": ([str(one), "--per-ha", "1e9"], "the grid would create"),
        "balanced candidates": (
            [str(one), "--design", "balanced", "--per-block", "5", "--candidates", "1000000000"],
            "candidate points",
        ),
        "spares": ([str(one), "--design", "random", "--per-block", "3", "--spares", "100000000"], "spares"),
        "n": ([str(one), "--design", "random", "--n", "100000000"], "--n 100,000,000"),
        "blocks": ([str(many), "--spacing", "50"], f"holds {DEFAULT_MAX_BLOCKS + 5_000:,} features"),
        "nested": ([str(tmp_path / "nested.geojson"), "--spacing", "50"], "nested too deeply"),
        "long name": (
            [str(tmp_path / "longname.geojson"), "--spacing", "50"],
            "block id of 100,000 characters",
        ),
        "nul": ([str(tmp_path / "nul.geojson"), "--spacing", "50"], "NUL character"),
        "control": ([str(tmp_path / "tab.geojson"), "--spacing", "50"], "control characters ('B1\\tx')"),
    }
    results = _run_capped([base[:1] + args + base[1:] for args, _ in cases.values()], tmp_path)
    for (name, (_, expect)), result in zip(cases.items(), results, strict=True):
        assert result["code"] == 2, (name, result)
        lines = result["output"].strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("fieldplan: error: "), (name, lines)
        assert expect in lines[0], (name, lines[0])
        assert "Traceback" not in result["output"]
    assert not (tmp_path / "out").exists()  # nothing written


def test_block_count_read_from_the_header(tmp_path):
    many = _many_blocks_zip(tmp_path, 300)
    with pytest.raises(InputError, match="holds 300 features"):
        read_blocks(many, max_blocks=299)
    assert len(read_blocks(many, max_blocks=300)) == 300
    check_block_count("x.zip", None, max_blocks=1)  # an unknown count is left to the reader


def test_max_points_covers_an_engine_free_design_call(tmp_path):
    from fieldplan.errors import DesignError
    from fieldplan.plan import make_plan

    blocks = blocks_frame({"A": shapely.box(E0, N0, E0 + 100, N0 + 100)})
    with pytest.raises(DesignError, match="more than the limit of 1,000"):
        make_plan(blocks, design="random", design_options={"per_block": 1_001}, max_points=1_000, seed=1)
    # At the limit it plans.
    plan = make_plan(blocks, design="random", design_options={"per_block": 1_000}, max_points=1_000, seed=1)
    assert len(plan.points) == 1_000


# --- polar and antimeridian ---------------------------------------------------------------------

GEOD = Geod(ellps="WGS84")

POLAR_AND_ANTIMERIDIAN = {
    "north of UTM (85 N)": _square(10.0, 85.0, 0.02),
    "Svalbard-like 88 N": _square(-40.0, 88.0, 0.05),
    "south of UTM (82 S)": _square(-60.0, -82.004, 0.02),
    "ring jumping 179.998 -> -179.998": {
        "type": "Polygon",
        "coordinates": [
            [[179.998, -17.0], [-179.998, -17.0], [-179.998, -16.996], [179.998, -16.996], [179.998, -17.0]]
        ],
    },
    "block split at 180": {
        "type": "MultiPolygon",
        "coordinates": [
            [[[179.997, 65.0], [180.0, 65.0], [180.0, 65.004], [179.997, 65.004], [179.997, 65.0]]],
            [[[-180.0, 65.0], [-179.997, 65.0], [-179.997, 65.004], [-180.0, 65.004], [-180.0, 65.0]]],
        ],
    },
}


@pytest.mark.parametrize("name", list(POLAR_AND_ANTIMERIDIAN))
def test_polar_and_antimeridian_blocks_planned_locally_with_true_areas(tmp_path, name):
    geom = POLAR_AND_ANTIMERIDIAN[name]
    path = tmp_path / "b.geojson"
    path.write_text(_feature_collection([("X", geom)]))
    blocks = read_blocks(path)
    # reference: pyproj.Geod.geometry_area_perimeter (geodesic area on the WGS84 ellipsoid),
    # which handles rings across the antimeridian itself.
    expected = abs(GEOD.geometry_area_perimeter(shape(geom))[0])
    assert float(blocks.geometry.area.iloc[0]) == pytest.approx(expected, rel=0.005)
    assert blocks.geometry.iloc[0].geom_type == "Polygon"  # the parts either side of 180 joined
    out = tmp_path / "plan"
    result = runner.invoke(app, ["plan", str(path), "--spacing", "60", "--out", str(out), "-q"])
    assert result.exit_code == 0, result.output
    points = gpd.read_file(out / "points.geojson")
    assert len(points) > 5
    # Every point lies in the block as drawn: both projected with pyproj into an azimuthal
    # equidistant projection centred on the points (independent of the plan's own CRS),
    # within 1 m of the block's outline.
    lon, lat = points.geometry.x.to_numpy(), points.geometry.y.to_numpy()
    lon0 = float(np.degrees(np.arctan2(np.sin(np.radians(lon)).mean(), np.cos(np.radians(lon)).mean())))
    aeqd = Transformer.from_crs(
        4326, f"+proj=aeqd +lat_0={lat.mean()} +lon_0={lon0} +datum=WGS84", always_xy=True
    )
    drawn = shapely.union_all(
        shapely.get_parts(
            shapely.transform(shape(geom), lambda c: np.column_stack(aeqd.transform(c[:, 0], c[:, 1])))
        )
    )
    px, py = aeqd.transform(lon, lat)
    assert shapely.contains_xy(drawn.buffer(1.0), px, py).all()
    crs = blocks.crs
    if crs.utm_zone:
        # points.csv x lies inside its UTM zone (false easting 500 km, zone about 670 km wide here)
        # common practice, no source
        table = np.genfromtxt(out / "points.csv", delimiter=",", names=True, dtype=None, encoding="utf-8")
        assert (np.abs(table["x"] - 500_000) < 400_000).all()


def test_longitude_past_180_names_the_longitude(tmp_path):
    ring = [[179.99, -17.0], [180.001, -17.0], [180.001, -16.996], [179.99, -16.996], [179.99, -17.0]]
    path = tmp_path / "edge.geojson"
    path.write_text(_feature_collection([("L", {"type": "Polygon", "coordinates": [ring]})]))
    result = runner.invoke(app, ["plan", str(path), "--spacing", "50", "--out", str(tmp_path / "o")])
    assert result.exit_code == 2
    line = result.output.strip()
    assert "longitude outside ±180 degrees (180.001 in feature 1 (block='L'))" in line
    assert "-179.999" in line and "latitude" not in line


# --- overlapping blocks -------------------------------------------------------------------------


def _overlapping(tmp_path: Path) -> Path:
    a = shapely.box(E0, N0, E0 + 1030, N0 + 1000)  # 103 ha
    b = shapely.box(E0 + 780, N0, E0 + 1810, N0 + 1000)  # 103 ha, 25 ha of it over A
    c = shapely.box(E0 + 3000, N0, E0 + 3100, N0 + 100)
    return write_geojson(blocks_frame({"A": a, "B": b, "C": c}), tmp_path / "ov.geojson")


def test_overlapping_blocks_refused_naming_the_pair_and_area(tmp_path):
    path = _overlapping(tmp_path)
    result = runner.invoke(app, ["plan", str(path), "--spacing", "100", "--out", str(tmp_path / "o")])
    assert result.exit_code == 2
    # 250 m x 1000 m = 25 ha; common practice, no source (rectangle area)
    assert "blocks 'A' and 'B' overlap by 25.00 ha" in result.output
    assert "--overlaps first" in result.output
    assert not (tmp_path / "o").exists()


def test_overlap_given_to_the_first_block_on_request(tmp_path):
    path = _overlapping(tmp_path)
    blocks = read_blocks(path, overlaps="first")
    area = dict(zip(blocks["block"], blocks.geometry.area / 10_000, strict=True))
    # A keeps its 103 ha; B loses the 25 ha it shares with A (rectangle areas).
    assert area["A"] == pytest.approx(103.0, rel=1e-4) and area["B"] == pytest.approx(78.0, rel=1e-4)
    out = tmp_path / "o"
    result = runner.invoke(
        app, ["plan", str(path), "--spacing", "100", "--overlaps", "first", "--out", str(out)]
    )
    assert result.exit_code == 0, result.output
    assert "left to the earlier block" in result.output
    pts = gpd.read_file(out / "points.geojson").to_crs(blocks.crs)
    in_a = shapely.contains_xy(blocks.geometry.iloc[0], pts.geometry.x, pts.geometry.y)
    assert set(pts.loc[in_a, "block"]) <= {"A"}  # no ground sampled for two blocks


def test_sliver_along_a_shared_boundary_is_not_an_overlap(tmp_path):
    a = shapely.box(E0, N0, E0 + 300, N0 + 300)
    b = shapely.box(E0 + 299.9, N0, E0 + 600, N0 + 300)  # traced 0.1 m over: 30 m^2
    blocks = read_blocks(write_geojson(blocks_frame({"A": a, "B": b}), tmp_path / "s.geojson"))
    assert len(blocks) == 2


def test_block_inside_another_is_an_overlap(tmp_path):
    a = shapely.box(E0, N0, E0 + 300, N0 + 300)
    b = shapely.box(E0 + 100, N0 + 100, E0 + 200, N0 + 200)
    path = write_geojson(blocks_frame({"A": a, "B": b}), tmp_path / "in.geojson")
    with pytest.raises(InvalidBlocksError, match="'A' and 'B' overlap by 1.00 ha"):
        read_blocks(path)
    with pytest.raises(InvalidBlocksError, match="lies wholly inside 'A'"):
        read_blocks(path, overlaps="first")
