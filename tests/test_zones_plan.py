"""Block-zone pieces for plans by zone, and the cLHS design runner."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import shapely

from fieldplan.errors import InputError, OptionError
from fieldplan.plan import sample_areas
from fieldplan.zones_plan import ZONE_SD_FIELD, ZONE_STRATUM_FIELD, clhs_design, split_by_zones

rasterio = pytest.importorskip("rasterio")

UTM = "EPSG:32734"
X0, Y0 = 300_000.0, 6_250_000.0


def _blocks() -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(
        {"block": ["A", "B"], "variety": ["x", "y"]},
        geometry=[shapely.box(X0, Y0, X0 + 200, Y0 + 100), shapely.box(X0 + 200, Y0, X0 + 300, Y0 + 100)],
        crs=UTM,
    )


def _zones() -> gpd.GeoDataFrame:
    # Zone 1: the western 120 m of A; zone 2: the rest of A and all of B.
    geoms = [
        shapely.box(X0, Y0, X0 + 120, Y0 + 100),
        shapely.box(X0 + 120, Y0, X0 + 200, Y0 + 100),
        shapely.box(X0 + 200, Y0, X0 + 300, Y0 + 100),
    ]
    return gpd.GeoDataFrame(
        {"block": ["A", "A", "B"], "zone": [1, 2, 2], "area_ha": [1.2, 0.8, 1.0],
         "eca_mean": [10.0, 20.0, 22.0], "eca_sd": [1.0, 3.0, 2.0], "ndvi_sd": [0.1, 0.2, 0.3]},
        geometry=geoms, crs=UTM,
    )


def test_pieces_partition_each_blocks_sampling_area():
    blocks = _blocks()
    areas = sample_areas(blocks, edge_buffer=5.0)
    pieces, piece_areas, notes = split_by_zones(blocks, areas, _zones())
    assert list(pieces["block"]) == ["A-z1", "A-z2", "B-z2"]
    assert list(pieces["parent_block"]) == ["A", "A", "B"] and list(pieces["zone"]) == [1, 2, 2]
    assert list(pieces["variety"]) == ["x", "x", "y"]
    for name, area in zip(blocks["block"], areas, strict=True):
        mine = piece_areas[(pieces["parent_block"] == name).to_numpy()]
        # reference: shapely areas; the pieces of a block add up to its sampling area (headland
        # applied to the block's outline, not to each piece)
        assert sum(p.area for p in mine) == pytest.approx(area.area, rel=1e-9)
    assert piece_areas[0].area == pytest.approx(115 * 90)  # 5 m headland on three sides, by hand
    assert list(pieces[ZONE_SD_FIELD]) == [1.0, 3.0, 2.0]  # the first covariate's SD by default
    assert list(pieces[ZONE_STRATUM_FIELD]) == ["A-z1", "A-z2", "B-z2"]
    across, _, _ = split_by_zones(blocks, areas, _zones(), across=True, sd_covariate="ndvi")
    assert list(across[ZONE_STRATUM_FIELD]) == ["zone 1", "zone 2", "zone 2"]
    assert list(across[ZONE_SD_FIELD]) == [0.1, 0.2, 0.3]
    assert notes == []


def test_zones_must_match_the_blocks():
    blocks = _blocks()
    zones = _zones()
    zones = zones[zones["block"] == "A"]
    with pytest.raises(InputError, match="no zones for block"):
        split_by_zones(blocks, blocks.geometry.values, zones)
    with pytest.raises(OptionError, match="no such covariate"):
        split_by_zones(blocks, blocks.geometry.values, _zones(), sd_covariate="yield")


def _write_tif(path, values, transform):
    with rasterio.open(path, "w", driver="GTiff", width=values.shape[1], height=values.shape[0], count=1,
                       dtype="float32", crs=UTM, transform=transform) as dst:
        dst.write(values.astype("float32"), 1)


def test_clhs_design_places_points_at_cell_centres_inside_blocks(tmp_path):
    from rasterio.transform import from_origin

    blocks = _blocks()
    areas = sample_areas(blocks, edge_buffer=4.0)
    rng = np.random.default_rng(0)
    _write_tif(tmp_path / "a.tif", rng.uniform(size=(30, 70)), from_origin(X0 - 20, Y0 + 120, 5, 5))
    _write_tif(tmp_path / "b.tif", rng.normal(size=(30, 70)), from_origin(X0 - 20, Y0 + 120, 5, 5))
    params = {"seed": 3, "design_options": {"covariates": [str(tmp_path / "a.tif"), str(tmp_path / "b.tif")],
                                            "n": 12, "cell": 5.0, "clhs_iterations": 3000}}
    table, flags = clhs_design(blocks, areas, params, None, None)
    assert len(table) == 12 and set(table.columns) >= {"block", "x", "y", "a", "b"}
    pts = shapely.points(table["x"], table["y"])
    owner = {b: g for b, g in zip(blocks["block"], areas, strict=True)}
    # reference: shapely contains; every point lies in its block's sampling area
    assert all(owner[b].contains(p) for b, p in zip(table["block"], pts, strict=True))
    assert any("quantile strata hit once" in n for n in table.attrs["notes"])
    again, _ = clhs_design(blocks, areas, params, None, None)
    assert again.equals(table)  # same seed, same points
    with pytest.raises(OptionError, match="--n"):
        clhs_design(blocks, areas, {"seed": 1, "design_options": {"covariates": ["a.tif"]}}, None, None)
