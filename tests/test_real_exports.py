"""Files in the shapes real farm exports have: State Plane feet, national grids, phone GeoJSON, KML.

The files are built at test time by :mod:`tests.real_exports`. Areas are checked
against geodesic areas from pyproj.Geod, units against their exact definitions.
"""

from __future__ import annotations

import json
import warnings
import zipfile

import numpy as np
import pandas as pd
import pyogrio
import pytest
from pyproj import CRS, Geod, Transformer
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.errors import InputError, InvalidBlocksError, OptionError
from fieldplan.read import LENGTH_UNITS, PLAN_COLUMNS, read_blocks, read_exclusions
from fieldplan.read_kml import parse_kml
from fieldplan.store import load_plan
from tests import real_exports as rx

runner = CliRunner()

US_SURVEY_FOOT = 1200.0 / 3937.0  # reference: US survey foot, exact definition (1 m = 39.37 in)
FOOT = (
    0.3048  # reference: international foot, exact definition (international yard and pound agreement, 1959)
)
YARD = 0.9144  # reference: international yard, exact definition (same agreement)

SHAPEFILE_COLUMNS = [
    "--column",
    "block=BLOCK_NAME",
    "--column",
    "row_spacing=RowSpacing",
    "--column",
    "plant_spacing=VineSpace",
    "--column",
    "row_bearing=RowDir",
]


def geodesic_ha(corners: dict) -> dict:
    """Geodesic area of each lon/lat box in hectares."""
    geod = Geod(ellps="WGS84")  # reference: pyproj.Geod (Karney 2013 geodesic polygon area)
    out = {}
    for name, (x0, y0, x1, y1) in corners.items():
        area, _ = geod.polygon_area_perimeter([x0, x1, x1, x0], [y0, y0, y1, y1])
        out[name] = abs(area) / 10_000.0
    return out


def plan_cli(args: list[str]):
    return runner.invoke(app, ["plan", *args])


# --- units and CRS -----------------------------------------------------------


def test_length_units_are_the_exact_definitions():
    assert LENGTH_UNITS["ft"] == FOOT
    assert LENGTH_UNITS["yd"] == YARD
    assert LENGTH_UNITS["us-ft"] == US_SURVEY_FOOT
    # reference: EPSG:2226 is defined in US survey feet (EPSG dataset via pyproj).
    assert CRS.from_epsg(2226).axis_info[0].unit_conversion_factor == pytest.approx(US_SURVEY_FOOT, rel=1e-15)


def test_state_plane_shapefile_in_feet_reads_with_mapped_columns(tmp_path):
    path = rx.state_plane_shapefile(tmp_path)
    blocks = read_blocks(
        path,
        columns={
            "block": "BLOCK_NAME",
            "row_spacing": "RowSpacing",
            "plant_spacing": "VineSpace",
            "row_bearing": "RowDir",
        },
        length_unit="ft",
    )
    # Natural order of block ids: Blk 1, Blk 2, Blk 10.
    assert blocks["block"].tolist() == ["Blk 1", "Blk 2", "Blk 10"]
    # reference: international foot, 0.3048 m exactly.
    assert blocks["row_spacing_m"].tolist() == pytest.approx([8 * FOOT, 7 * FOOT, 9 * FOOT], abs=1e-12)
    assert blocks["plant_spacing_m"].tolist() == pytest.approx([5 * FOOT, 4 * FOOT, 6 * FOOT], abs=1e-12)
    assert blocks["row_bearing_deg"].tolist() == [12.0, 12.0, 95.0]  # degrees are not lengths
    assert blocks["variety"].tolist()[0] == "Cabernet Sauvignon"  # found by its name in another case
    # The file's own AREA_HA and FLAGS are kept, renamed, never beside the plan's area_ha/flags.
    assert blocks["src_AREA_HA"].tolist() == [4.9, 7.3, 3.0]
    assert blocks.attrs["renamed_columns"] == {"AREA_HA": "src_AREA_HA", "FLAGS": "src_FLAGS"}
    assert blocks.attrs["source_crs"] == "EPSG:2226"
    assert blocks.attrs["read_params"]["length_unit"] == "ft"
    # Areas after reprojecting State Plane feet to UTM metres agree with geodesic areas.
    area_ha = dict(zip(blocks["block"], blocks.geometry.area / 10_000.0, strict=True))
    for name, expected in geodesic_ha(rx.NAPA).items():
        # reference: pyproj.Geod; UTM scale error under 0.1% this close to the central meridian.
        assert area_ha[name] == pytest.approx(expected, rel=1e-3)


def test_us_survey_foot_unit(tmp_path):
    path = rx.state_plane_shapefile(tmp_path)
    blocks = read_blocks(
        path, columns={"block": "BLOCK_NAME", "row_spacing": "RowSpacing"}, length_unit="us-ft"
    )
    # reference: US survey foot, 1200/3937 m exactly.
    assert blocks["row_spacing_m"].iloc[0] == pytest.approx(8 * 1200 / 3937, abs=1e-12)


def test_feet_read_as_metres_are_refused_with_block_and_value(tmp_path):
    path = rx.state_plane_shapefile(tmp_path)
    with pytest.raises(InvalidBlocksError) as err:
        read_blocks(path, columns={"block": "BLOCK_NAME", "row_spacing": "RowSpacing"})
    message = str(err.value)
    # common practice, no source: wine grape rows 1.5-4 m (the shipped profile's range).
    assert "block 'Blk 1' (and 2 more) has row_spacing_m=8 (field RowSpacing)" in message
    assert "outside 1.5 to 4 m for wine-grapes" in message
    assert "--length-unit ft" in message
    assert "\n" not in message


def test_plausible_range_comes_from_the_crop_profile(tmp_path):
    from fieldplan.samples.profiles import load_profile

    wine = load_profile("wine-grapes")
    assert wine.row_spacing_m == (1.5, 4.0)  # common practice, no source
    assert "common practice" in wine.spacing_basis
    for name in ("table-grapes", "pome-fruit", "stone-fruit"):
        profile = load_profile(name)
        assert profile.crops and profile.row_spacing_m and profile.plant_spacing_m and profile.spacing_basis
    # An apple row of 12 ft read as 12 m is refused through the crop field and the pome-fruit profile.
    frame = rx.gpd.GeoDataFrame(
        {"block": ["A"], "crop": ["Apple"], "row_spacing_m": [12.0]},
        geometry=[rx.shapely.box(*rx.KENT["North"])],
        crs="EPSG:4326",
    )
    path = tmp_path / "apples.geojson"
    frame.to_file(path)
    with pytest.raises(
        InvalidBlocksError, match=r"block 'A' has row_spacing_m=12, outside 2 to 8 m for pome-fruit"
    ):
        read_blocks(path)
    # Without a crop value, a --crop-profile gives the range.
    frame = frame.drop(columns="crop")
    frame.to_file(path)
    assert read_blocks(path)["row_spacing_m"].iloc[0] == 12.0
    with pytest.raises(InvalidBlocksError, match="for wine-grapes"):
        read_blocks(path, crop_profile="wine-grapes")


def test_column_and_unit_options_are_checked_naming_the_parameter(tmp_path):
    path = rx.state_plane_shapefile(tmp_path)
    with pytest.raises(
        OptionError, match=r"--column \(columns\): role 'row spacing' is not a name; roles are: block"
    ):
        read_blocks(path, columns={"row spacing": "RowSpacing"})
    with pytest.raises(OptionError, match=r"'area_ha' is a column the plan writes itself"):
        read_blocks(path, columns={"area_ha": "AREA_HA"})
    with pytest.raises(OptionError, match=r"--length-unit \(length_unit\): 'inch'"):
        read_blocks(path, length_unit="inch")
    with pytest.raises(
        InvalidBlocksError, match=r"no field 'RowSpace'; did you mean 'RowSpacing'\? fields are: "
    ):
        read_blocks(path, columns={"block": "BLOCK_NAME", "row_spacing": "RowSpace"})
    with pytest.raises(OptionError, match="name different fields"):
        read_blocks(path, id_field="Variety", columns={"block": "BLOCK_NAME"})


def test_id_field_matches_in_any_case_and_suggests(tmp_path):
    path = rx.state_plane_shapefile(tmp_path)
    assert read_blocks(path, id_field="block_name", columns={"row_spacing": "RowSpacing"}, length_unit="ft")[
        "block"
    ].tolist() == ["Blk 1", "Blk 2", "Blk 10"]
    with pytest.raises(
        InvalidBlocksError, match=r"--id-field BLOK_NAME: no field 'BLOK_NAME'; did you mean 'BLOCK_NAME'\?"
    ):
        read_blocks(path, id_field="BLOK_NAME")


def test_shapefile_plan_writes_every_plan_column_and_the_renamed_fields(tmp_path):
    path = rx.state_plane_shapefile(tmp_path)
    out = tmp_path / "plan"
    result = plan_cli(
        [str(path), "--spacing", "30", "--out", str(out), *SHAPEFILE_COLUMNS, "--length-unit", "ft"]
    )
    assert result.exit_code == 0, result.output
    assert "AREA_HA -> src_AREA_HA" in result.output
    fields = list(pyogrio.read_info(out / "plan.gpkg", layer="blocks")["fields"])
    # Every column the plan adds is there once, under its own name.
    for column in (
        "block",
        "stratum",
        "variety",
        "row_spacing_m",
        "plant_spacing_m",
        "row_bearing_deg",
        "area_ha",
        "sampled_area_ha",
        "n_points",
        "flags",
    ):
        assert fields.count(column) == 1, column
    assert "src_AREA_HA" in fields and "src_FLAGS" in fields
    lowered = [f.lower() for f in fields]
    assert len(lowered) == len(set(lowered))  # GeoPackage names are case-insensitive
    plan = load_plan(out)
    geodesic = geodesic_ha(rx.NAPA)
    for row in plan.blocks.itertuples():
        # reference: pyproj.Geod
        assert row.area_ha == pytest.approx(geodesic[row.block], rel=1e-3)
        assert row.flags == ""  # the file's FLAGS did not leak into the plan's flags
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["parameters"]["columns"] == {
        "block": "BLOCK_NAME",
        "plant_spacing": "VineSpace",
        "row_bearing": "RowDir",
        "row_spacing": "RowSpacing",
    }
    assert manifest["parameters"]["length_unit"] == "ft"
    assert manifest["renamed_columns"] == {"AREA_HA": "src_AREA_HA", "FLAGS": "src_FLAGS"}
    # points.csv x/y are in the file's own State Plane CRS (US survey feet), named in the file.
    table = pd.read_csv(out / "points.csv")
    assert set(table["crs"]) == {"EPSG:2226"}
    assert manifest["points_csv_crs"]["crs"] == "EPSG:2226"
    assert manifest["points_csv_crs"]["unit"] == "US survey foot"
    # reference: pyproj Transformer, WGS84 lon/lat -> EPSG:2226, independent of the writer.
    to_sp = Transformer.from_crs("EPSG:4326", "EPSG:2226", always_xy=True)
    x, y = to_sp.transform(table["lon"].to_numpy(), table["lat"].to_numpy())
    assert np.allclose(x, table["x"], atol=0.01) and np.allclose(y, table["y"], atol=0.01)


@pytest.mark.parametrize("name", sorted(set(PLAN_COLUMNS) - {"geometry"}))
def test_every_plan_column_name_in_a_file_is_renamed_not_clashing(tmp_path, name):
    frame = rx.gpd.GeoDataFrame(
        {"id": ["A", "B"], name.upper(): [1, 2]},
        geometry=[rx.shapely.box(*rx.KENT["North"]), rx.shapely.box(*rx.KENT["South"])],
        crs="EPSG:4326",
    )
    path = tmp_path / "b.geojson"
    frame.to_file(path)
    if name in ("block",):
        # BLOCK is itself an id field name: taken as the block id, not renamed.
        blocks = read_blocks(path, id_field="id")
    else:
        blocks = read_blocks(path)
    upper = name.upper()
    if name in ("variety", "crop", "stratum", "row_spacing_m", "plant_spacing_m", "row_bearing_deg"):
        assert upper not in blocks.columns  # read as the role of that name
        return
    assert blocks.attrs["renamed_columns"] == {upper: "src_" + upper}
    lowered = [str(c).lower() for c in blocks.columns]
    assert len(lowered) == len(set(lowered))
    # The whole plan folder is written (GeoPackage, map, page...), the file's values kept.
    from fieldplan.plan import make_plan
    from fieldplan.store import write_plan

    out = tmp_path / "plan"
    write_plan(make_plan(blocks, spacing=40.0, seed=1, command=["test"]), out)
    for layer in ("blocks", "points"):
        fields = [str(f).lower() for f in pyogrio.read_info(out / "plan.gpkg", layer=layer)["fields"]]
        assert len(fields) == len(set(fields)), layer
    written = pyogrio.read_dataframe(out / "plan.gpkg", layer="blocks")
    assert sorted(written["src_" + upper].tolist()) == [1, 2]


def test_national_grid_geopackage_layers_bowtie_and_area(tmp_path):
    path = rx.national_grid_gpkg(tmp_path)
    with pytest.raises(InputError, match=r"several layers \(Orchard Blocks \(Polygon\), trees \(Point\)\)"):
        read_blocks(path)
    with pytest.raises(
        InputError,
        match=r"no layer 'orchard'; the GeoPackage's layers are: Orchard Blocks \(Polygon\), trees \(Point\)",
    ):
        read_blocks(path, layer="orchard")
    with pytest.raises(InvalidBlocksError, match=r"feature 3 \(Block_ID='Bow'\) is not a valid polygon"):
        read_blocks(path, layer="orchard blocks")  # layer name in another case
    blocks = read_blocks(path, layer="Orchard Blocks", repair=True)
    assert blocks["block"].tolist() == ["Bow", "North", "South"]
    assert blocks.attrs["source_crs"] == "EPSG:27700"
    assert blocks.attrs["renamed_columns"] == {"Area_ha": "src_Area_ha"}
    area = dict(zip(blocks["block"], blocks.geometry.area, strict=True))
    for name, expected in geodesic_ha(rx.KENT).items():
        assert area[name] / 10_000 == pytest.approx(expected, rel=2e-3)  # reference: pyproj.Geod
    # The repaired bow-tie is two triangles of a quarter of the square each (half in all).
    # reference: plane geometry (two triangles of base s and height s/2), scaled to the ground
    # by the national grid's point scale factor from pyproj.
    assert area["Bow"] == pytest.approx(rx.BOWTIE_OFFSET**2 / 2, rel=2e-3)


def test_national_grid_plan_end_to_end(tmp_path):
    path = rx.national_grid_gpkg(tmp_path)
    out = tmp_path / "plan"
    result = plan_cli(
        [str(path), "--layer", "Orchard Blocks", "--repair", "--spacing", "25", "--out", str(out)]
    )
    assert result.exit_code == 0, result.output
    table = pd.read_csv(out / "points.csv")
    assert set(table["crs"]) == {"EPSG:27700"}
    # reference: pyproj Transformer, independent of the writer.
    to_bng = Transformer.from_crs("EPSG:4326", "EPSG:27700", always_xy=True)
    x, y = to_bng.transform(table["lon"].to_numpy(), table["lat"].to_numpy())
    assert np.allclose(x, table["x"], atol=0.01) and np.allclose(y, table["y"], atol=0.01)


def test_phone_geojson_with_z_and_a_gate_pin(tmp_path):
    path = rx.phone_geojson(tmp_path)
    blocks = read_blocks(path)
    assert not blocks.geometry.has_z.any()
    assert blocks["block"].tolist() == ["Creek block", "Home block"]
    notes = blocks.attrs["notes"]
    assert sum("dropped the Z" in n for n in notes) == 1
    skipped = [n for n in notes if "skipped" in n]
    assert skipped == [
        f"{path}: skipped 1 feature that is not a polygon: feature 3 (name='Gate') (Point); blocks are the polygons"
    ]
    for name, expected in geodesic_ha(rx.PHONE).items():
        got = blocks.loc[blocks["block"] == name].geometry.area.iloc[0] / 10_000
        assert got == pytest.approx(expected, rel=1e-3)  # reference: pyproj.Geod


def test_phone_geojson_plans_with_every_output_and_no_warning(tmp_path):
    path = rx.phone_geojson(tmp_path)
    out = tmp_path / "plan"
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a library warning would reach the user's terminal
        result = plan_cli([str(path), "--spacing", "30", "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert result.output.count("dropped the Z") == 1
    assert (out / "plan.png").stat().st_size > 0
    assert "Warning" not in result.output
    plan = load_plan(out)
    assert not plan.blocks.geometry.has_z.any()
    # Lon/lat CRS in, so points.csv x/y are in the plan's UTM zone.
    table = pd.read_csv(out / "points.csv")
    assert set(table["crs"]) == {"EPSG:32734"}


def test_exclusions_with_z_are_flattened(tmp_path):
    path = rx.phone_geojson(tmp_path)
    data = json.loads(path.read_text())
    data["features"] = data["features"][:1]
    ex = tmp_path / "wet.geojson"
    ex.write_text(json.dumps(data))
    frame = read_exclusions(ex, crs="EPSG:32734")
    assert not frame.geometry.has_z.any()
    assert any("dropped the Z" in n for n in frame.attrs["notes"])
    out = tmp_path / "plan"
    result = plan_cli([str(path), "--exclude", str(ex), "--spacing", "30", "--out", str(out)])
    assert result.exit_code == 0, result.output
    # Once for the blocks file and once for the exclusions file, each named.
    assert result.output.count("dropped the Z") == 2 and "wet.geojson: dropped the Z" in result.output


@pytest.mark.parametrize("maker", [rx.kml_file, rx.kmz_file])
def test_kml_and_kmz_read_as_blocks(tmp_path, maker):
    path = maker(tmp_path)
    blocks = read_blocks(path)
    assert blocks["block"].tolist() == ["Creek block", "Home block"]  # placemark names
    assert blocks["variety"].tolist() == ["Pinotage", "Pinotage"]  # ExtendedData
    notes = blocks.attrs["notes"]
    assert any(
        "skipped 2 features that are not a polygon: feature 3 (name='Gate') (Point), "
        "feature 4 (name='Walk to creek') (LineString)" in n
        for n in notes
    )
    for name, expected in geodesic_ha(rx.PHONE).items():
        got = blocks.loc[blocks["block"] == name].geometry.area.iloc[0] / 10_000
        assert got == pytest.approx(expected, rel=1e-3)  # reference: pyproj.Geod


def test_kml_agrees_with_gdal_kml_driver(tmp_path):
    path = rx.kml_file(tmp_path)
    ours = read_blocks(path)
    # reference: GDAL's KML driver through pyogrio reads the same placemarks.
    theirs = pyogrio.read_dataframe(path)
    theirs = theirs[theirs.geometry.geom_type.isin(["Polygon", "MultiPolygon"])]
    assert sorted(theirs["Name"]) == ours["block"].tolist()
    theirs = theirs.set_index("Name").to_crs(ours.crs)
    for row in ours.itertuples():
        assert row.geometry.area == pytest.approx(theirs.loc[row.block].geometry.area, rel=1e-9)


def test_kml_with_only_points_is_a_clear_error(tmp_path):
    path = tmp_path / "pins.kml"
    text = rx.kml_text({}, with_extras=True)
    path.write_text(text)
    result = plan_cli([str(path), "--spacing", "30", "--out", str(tmp_path / "p")])
    assert result.exit_code == 2
    assert "no polygons (found LineString, Point)" in result.output
    assert not (tmp_path / "p").exists()


def test_kml_entity_declarations_are_refused(tmp_path):
    bomb = (
        '<?xml version="1.0"?><!DOCTYPE kml [<!ENTITY a "aaaaaaaaaa"><!ENTITY b "&a;&a;&a;&a;&a;">]>'
        "<kml><Document><Placemark><name>&b;</name></Placemark></Document></kml>"
    )
    # reference: the "billion laughs" entity expansion pattern (defusedxml refuses DTD entities).
    with pytest.raises(InputError, match="document type or entity declaration"):
        parse_kml(bomb.encode(), source="bomb.kml")
    external = '<?xml version="1.0"?><!DOCTYPE kml SYSTEM "http://example.invalid/x.dtd"><kml/>'
    with pytest.raises(InputError, match="refused for safety"):
        parse_kml(external.encode(), source="ext.kml")


def test_kml_syntax_error_names_line(tmp_path):
    path = tmp_path / "cut.kml"
    path.write_text(rx.kml_text(rx.PHONE)[:300])
    with pytest.raises(InputError, match=r"cut.kml: not readable KML \(XML error at line"):
        read_blocks(path)


def test_kmz_without_kml_is_a_clear_error(tmp_path):
    path = tmp_path / "empty.kmz"
    with zipfile.ZipFile(path, "w") as archive:
        archive.writestr("readme.txt", "nothing")
    with pytest.raises(InputError, match="the KMZ holds no .kml document"):
        read_blocks(path)


def test_missing_row_fields_error_lists_the_files_fields(tmp_path):
    path = rx.state_plane_shapefile(tmp_path)
    result = plan_cli(
        [
            str(path),
            "--column",
            "block=BLOCK_NAME",
            "--design",
            "clusters",
            "--per-block",
            "3",
            "--out",
            str(tmp_path / "p"),
        ]
    )
    assert result.exit_code == 2
    line = result.output.strip()
    assert "no block has a row layout" in line and "--column row_spacing=FIELD" in line
    assert (
        "the file's fields: BLOCK_NAME, Variety, Crop, AREA_HA, RowSpacing, VineSpace, RowDir, FLAGS" in line
    )
    assert len(line.splitlines()) == 1


def test_bad_column_option_fails_before_any_work(tmp_path):
    path = rx.state_plane_shapefile(tmp_path)
    result = plan_cli([str(path), "--spacing", "30", "--column", "rowspacing", "--out", str(tmp_path / "p")])
    assert result.exit_code == 2
    assert "--column takes ROLE=SOURCE" in result.output


def test_column_role_names_a_field_for_strata(tmp_path):
    path = rx.state_plane_shapefile(tmp_path)
    out = tmp_path / "plan"
    result = plan_cli(
        [
            str(path),
            "--column",
            "block=BLOCK_NAME",
            "--column",
            "cultivar=Variety",
            "--strata-by",
            "cultivar",
            "--design",
            "random",
            "--per-block",
            "2",
            "--out",
            str(out),
        ]
    )
    assert result.exit_code == 0, result.output
    plan = load_plan(out)
    assert plan.blocks.set_index("block")["stratum"].to_dict() == {
        "Blk 1": "Cabernet Sauvignon",
        "Blk 2": "Merlot",
        "Blk 10": "Chardonnay",
    }
    assert json.loads((out / "manifest.json").read_text())["parameters"]["columns"] == {
        "block": "BLOCK_NAME",
        "cultivar": "Variety",
    }


def test_gpkg_layers_are_written_flat_without_a_warning(tmp_path):
    from fieldplan.write.gpkg import write_layer

    frame = rx.gpd.GeoDataFrame(
        {"name": ["a"]}, geometry=[rx.shapely.Point(18.86, -33.86, 212.5)], crs="EPSG:4326"
    )
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # GDAL's "contains geometries with Z" must not reach the user
        write_layer(tmp_path / "t.gpkg", "positions", frame)
    back = pyogrio.read_dataframe(tmp_path / "t.gpkg", layer="positions")
    assert not back.geometry.has_z.any()
    assert frame.geometry.has_z.all()  # the caller's frame is left as it was


def test_missing_row_value_error_names_the_option_and_the_files_fields(tmp_path):
    from fieldplan.read import check_row_attributes

    path = rx.state_plane_shapefile(tmp_path)
    blocks = read_blocks(path, columns={"block": "BLOCK_NAME"})
    with pytest.raises(InvalidBlocksError) as err:
        check_row_attributes(blocks, needed=True)
    message = str(err.value)
    assert "block 'Blk 1' (and 2 more) has no row_spacing_m" in message
    assert "--column row_spacing=FIELD" in message
    assert (
        "(the file's fields: BLOCK_NAME, Variety, Crop, AREA_HA, RowSpacing, VineSpace, RowDir, FLAGS)"
        in message
    )


def test_mapped_rows_with_z_are_flattened(tmp_path):
    from fieldplan.stratified import read_rows

    x0, y0, x1, y1 = rx.PHONE["Home block"]
    rows = rx.gpd.GeoDataFrame(
        {"row": [1]}, geometry=[rx.shapely.LineString([(x0, y0, 200.0), (x0, y1, 205.0)])], crs="EPSG:4326"
    )
    path = tmp_path / "rows.geojson"
    rows.to_file(path)
    assert not read_rows(path, crs="EPSG:32734").geometry.has_z.any()


def test_kml_placemark_name_is_the_block_id_even_beside_a_block_field(tmp_path):
    text = rx.kml_text(rx.PHONE).replace(
        '<Data name="variety">', '<Data name="block"><value></value></Data><Data name="variety">'
    )
    path = tmp_path / "named.kml"
    path.write_text(text)
    blocks = read_blocks(path)
    assert blocks["block"].tolist() == ["Creek block", "Home block"]
    assert "src_block" in blocks.columns  # the ExtendedData field is kept, renamed
    assert "stratum" not in blocks.columns


def test_kml_folders_become_a_field_to_select_on(tmp_path):
    from fieldplan.read import select_blocks

    path = rx.kml_file(tmp_path)
    blocks = read_blocks(path)
    assert set(blocks["folder"]) == {"Blocks"}
    # A plan's own points.kml: blocks and exclusions are both polygons; the folder tells them apart.
    out = tmp_path / "plan"
    assert plan_cli([str(path), "--spacing", "30", "--out", str(out)]).exit_code == 0
    again = select_blocks(read_blocks(out / "points.kml"), "folder=Blocks")
    assert again["block"].tolist() == ["Block Creek block", "Block Home block"]
    for name, expected in geodesic_ha(rx.PHONE).items():
        got = again.loc[again["block"] == f"Block {name}"].geometry.area.iloc[0] / 10_000
        assert got == pytest.approx(expected, rel=1e-3)  # reference: pyproj.Geod


@pytest.mark.parametrize(
    "options",
    [
        {"spacing": 40.0},
        {"design": "random", "design_options": {"n": 6}, "spares": 1},
        {"design": "balanced", "design_options": {"per_block": 2}},
    ],
)
def test_every_column_the_plan_adds_is_reserved(tmp_path, options):
    """A column the plan writes on its blocks must be in PLAN_COLUMNS, or a file field could collide."""
    from fieldplan.plan import make_plan

    path = rx.state_plane_shapefile(tmp_path)
    blocks = read_blocks(path, columns={"block": "BLOCK_NAME"})
    plan = make_plan(blocks, seed=1, command=["test"], **options)
    added = {str(c).lower() for c in plan.blocks.columns} - {str(c).lower() for c in blocks.columns}
    assert added, "the plan adds its own columns"
    assert added <= set(PLAN_COLUMNS), sorted(added - set(PLAN_COLUMNS))
