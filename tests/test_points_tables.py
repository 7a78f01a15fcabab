"""points.csv and points.geojson: the column-wise writers give the bytes of the reference writers.

The references are pandas' ``DataFrame.to_csv`` (the csv module's QUOTE_MINIMAL) on the
neutralised table, and ``json.dumps`` of one dict per point. Plans of every kind are checked,
with hostile text (quotes, commas, line breaks, formulas, control characters, non-ASCII) in
text columns with and without gaps; a fixed table is also checked against the bytes the
writers gave before they were rebuilt column by column.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from types import SimpleNamespace

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from fieldplan.write.safe import neutralise_frame
from fieldplan.write.tables import (
    _geojson_text_records,
    csv_xy_crs,
    points_lonlat,
    shared_lonlat,
    write_points_csv,
    write_points_geojson,
)

HOSTILE = ["a", "b,c", 'say "hi"', "=SUM(A1)", "+1", "line\nbreak", "-x", "@y", "cr\rhere", " lead", "",
           "x\n=evil", '"q"', ",", "tab\there", "é, ü", "back\\slash", "ctl\x01", "\tlead", "\rlead",
           '日本,"語"', "emoji \U0001f347", "Start at row 3, plant 7; sample 2 plant(s)"]  # fmt: skip


def _table(n: int, seed: int) -> gpd.GeoDataFrame:
    """Points shaped like a cluster plan's, with hostile text, gaps, tiny and huge numbers."""
    rng = np.random.default_rng(seed)
    x = 300_000 + rng.random(n) * 5_000
    y = 6_240_000 + rng.random(n) * 5_000
    return gpd.GeoDataFrame(
        {
            "point_id": [f"B{i // 30:03d}-{i % 30 + 1:02d}" for i in range(n)],
            "block": rng.choice(HOSTILE, n).tolist(),
            "stratum": pd.Series(rng.choice(["north", "south", "=cmd"], n).tolist(), dtype="string"),
            "design": "clusters",
            "row": rng.integers(1, 80, n),
            "plant": rng.integers(1, 200, n),
            "units": np.full(n, 2),
            "instructions": [
                f"Start at row {r}, plant {p}; sample 2 plant(s)" for r, p in rng.integers(1, 99, (n, 2))
            ],
            "note": pd.Series(rng.choice([*HOSTILE, None], n).tolist(), dtype=object),
            "label": pd.Series(rng.choice([*HOSTILE, None], n).tolist(), dtype="string"),
            "value": np.where(
                rng.random(n) < 0.1, np.nan, rng.normal(size=n) * 10.0 ** rng.integers(-7, 18, n)
            ),
            "flag": rng.random(n) < 0.5,
        },
        geometry=shapely.points(x, y),
        crs="EPSG:32734",
    )


def _plan(points: gpd.GeoDataFrame, input_crs: str | None = "EPSG:4326") -> SimpleNamespace:
    return SimpleNamespace(points=points, crs=points.crs, meta={"input_crs": input_crs})


def _reference_csv(plan) -> bytes:
    """points.csv through pandas: the table as the writer defines it, neutralised, to_csv."""
    pts = plan.points
    lonlat = points_lonlat(pts)
    crs = csv_xy_crs(plan)
    xy = shapely.get_coordinates(pts.geometry.values)
    if not crs.equals(plan.crs):
        from pyproj import Transformer

        xy = np.column_stack(
            Transformer.from_crs(plan.crs, crs, always_xy=True).transform(xy[:, 0], xy[:, 1])
        )
    xy = np.round(xy, 3)
    base = ["point_id", "block", "stratum", "design"]
    table = pd.DataFrame({c: pts[c].to_numpy() for c in base})
    table["lon"], table["lat"] = lonlat[:, 0], lonlat[:, 1]
    table["x"], table["y"] = xy[:, 0], xy[:, 1]
    table["crs"] = crs.to_string()
    for column in pts.columns:
        if column not in base and column != "geometry":
            table[column] = pts[column].to_numpy()
    # reference: pandas DataFrame.to_csv (the csv module's QUOTE_MINIMAL, doubled quotes)
    return neutralise_frame(table).to_csv(index=False, lineterminator="\n").encode("utf-8")


def _reference_geojson(plan) -> bytes:
    # reference: json.dumps of one dict per feature (RFC 7946 FeatureCollection)
    return _geojson_text_records(plan.points, points_lonlat(plan.points)).encode("utf-8")


def _written(plan, folder: Path) -> tuple[bytes, bytes]:
    folder.mkdir(parents=True, exist_ok=True)
    with shared_lonlat(plan.points):
        write_points_csv(plan, folder)
        write_points_geojson(plan, folder)
    return (folder / "points.csv").read_bytes(), (folder / "points.geojson").read_bytes()


#: sha256 of points.csv and points.geojson of ``_table(3000, seed=11)`` as written by the
#: writers before they were rebuilt column by column (same bytes required).
FIXED = {
    "points.csv": "f43ca166d04b09838bf9acba575514c968a204902ae7accd6adb8bee65a2cdfc",
    "points.geojson": "016dae75a15565d0f8c2ea7462291134679503c843e31ad78884a53eab31b5be",
}


def test_fixed_table_gives_the_former_bytes(tmp_path):
    plan = _plan(_table(3000, seed=11))
    csv, geojson = _written(plan, tmp_path)
    assert hashlib.sha256(csv).hexdigest() == FIXED["points.csv"]
    assert hashlib.sha256(geojson).hexdigest() == FIXED["points.geojson"]
    assert csv == _reference_csv(plan)
    assert geojson == _reference_geojson(plan)
    json.loads(geojson)  # and it parses


@pytest.mark.parametrize("seed", range(6))
def test_small_hostile_tables_match_the_references(tmp_path, seed):
    rng = np.random.default_rng(seed)
    points = _table(int(rng.integers(1, 40)), seed=seed)
    # A projected input CRS other than the plan's moves x/y into it; none keeps the plan's.
    for input_crs in ("EPSG:32634", None):
        plan = _plan(points, input_crs)
        csv, geojson = _written(plan, tmp_path / str(input_crs))
        assert csv == _reference_csv(plan)
        assert geojson == _reference_geojson(plan)


def test_columns_of_other_types_and_coordinate_names_fall_back_to_the_same_bytes(tmp_path):
    points = _table(50, seed=3)
    points["count"] = pd.array(np.arange(50), dtype="Int64")  # nullable integers
    points["kind"] = pd.Categorical(np.where(np.arange(50) % 2, "a,b", "=c"))
    points["x"] = np.arange(50.0)  # a column named like a coordinate of points.csv
    points["mixed"] = pd.Series([1, "a", None, 2.5, "=x"] * 10, dtype=object)
    plan = _plan(points)
    csv, geojson = _written(plan, tmp_path)
    assert csv == _reference_csv(plan)
    assert geojson == _reference_geojson(plan)


def test_the_plan_points_are_left_unchanged(tmp_path):
    points = _table(200, seed=5)
    before = points.copy()
    _written(_plan(points), tmp_path)
    pd.testing.assert_frame_equal(points, before)


@pytest.mark.parametrize("design", ["grid", "clusters"])
def test_plans_with_hostile_block_names_match_the_references(tmp_path, design):
    from fieldplan.demo import demo_blocks_path
    from fieldplan.planning.plan import make_plan
    from fieldplan.read import read_blocks

    blocks = read_blocks(demo_blocks_path())
    blocks["block"] = [HOSTILE[i % len(HOSTILE)] + f" {i}" for i in range(len(blocks))]
    spec = {"design": design, "spacing": 60} if design == "grid" else {"design": design, "per_block": 6}
    plan = make_plan(blocks, spec, seed=3)
    assert len(plan.points) > 20
    csv, geojson = _written(plan, tmp_path)
    assert csv == _reference_csv(plan)
    assert geojson == _reference_geojson(plan)
