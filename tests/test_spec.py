"""The plan specification: checks naming their parameter, flat round trips, schema, CLI = API."""

from __future__ import annotations

import dataclasses
import json

import pytest
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.demo import demo_blocks_path
from fieldplan.errors import FieldplanError, OptionError
from fieldplan.plan import make_plan
from fieldplan.read import read_blocks
from fieldplan.spec import (
    DESIGNS,
    GridSpec,
    PlanSpec,
    SizeSpec,
    SpecError,
    flag_of,
    spec_schema,
)

runner = CliRunner()


@pytest.fixture(scope="module")
def blocks():
    return read_blocks(demo_blocks_path())


@pytest.mark.parametrize(
    ("values", "param"),
    [
        ({"spacing": -5}, "spacing"),
        ({"spacing": float("nan")}, "spacing"),
        ({"spacing": 40, "per_ha": 1}, "per_ha"),
        ({}, "spacing"),
        ({"spacing": 40, "grid_layout": "hexagon"}, "grid_layout"),
        ({"spacing": 40, "random_start": "farm"}, "random_start"),
        ({"spacing": 40, "angle": "diagonal"}, "angle"),
        ({"spacing": 40, "per_block": 3}, "per_block"),
        ({"spacing": 40, "spares": 2}, "spares"),
        ({"design": "random"}, "per_block"),
        ({"design": "random", "per_block": 2, "n": 10}, "n"),
        ({"design": "random", "spacing": 30}, "spacing"),
        ({"design": "random", "per_block": 0}, "per_block"),
        ({"design": "random", "per_block": 2.5}, "per_block"),
        ({"design": "random", "n": 20, "allocation": "neyman"}, "sd_field"),
        ({"design": "random", "per_block": 2, "allocation": "equal"}, "allocation"),
        ({"design": "random", "per_block": 2, "skip_row_ends": 2}, "skip_row_ends"),
        ({"design": "random", "per_block": 2, "substitute": "within-cell"}, "substitute"),
        ({"design": "clusters", "target_units": 30}, "plants_per_cluster"),
        ({"design": "clusters", "per_block": 2, "instructions": "row {rows}"}, "instructions"),
        ({"design": "hexagons"}, "design"),
        ({"spacing": 40, "cores": 12}, "cores"),
        ({"spacing": 40, "purpose": "soil", "cores": 0}, "cores"),
        ({"spacing": 40, "purpose": "soil", "depth": "15-0"}, "depth"),
        ({"spacing": 40, "crop_profile": "wine-grapes"}, "crop_profile"),
        ({"spacing": 40, "length_unit": "furlong"}, "length_unit"),
        ({"spacing": 40, "columns": ["row_spacing"]}, "columns"),
        ({"spacing": 40, "formats": "core,pdf"}, "formats"),
        ({"spacing": 40, "scheduler": "tcp://127.0.0.1:8786"}, "scheduler"),
        ({"spacing": 40, "max_points": 0}, "max_points"),
        ({"spacing": 40, "edge_buffer": -1}, "edge_buffer"),
    ],
)
def test_each_check_names_its_parameter(values, param):
    with pytest.raises(SpecError) as info:
        PlanSpec.from_dict(values)
    err = info.value
    assert err.param == param
    # One error class for library callers and the CLI alike.
    assert isinstance(err, FieldplanError) and isinstance(err, OptionError) and isinstance(err, ValueError)
    # The library speaks of parameters; the CLI words the same message with flags.
    assert param in str(err)
    assert flag_of(param) in err.render(flag_of)
    assert "{" not in err.render(flag_of) or "{row" in err.render(flag_of)


def test_choices_are_listed_when_refused():
    for name, bad in (("grid_layout", "hex"), ("purpose", "water"), ("design", "grdi"), ("engine", "spark")):
        values = {"spacing": 40, name: bad}
        with pytest.raises(SpecError) as info:
            PlanSpec.from_dict(values)
        choices = next(f["choices"] for f in spec_schema()["fields"] if f["name"] == name)
        for choice in choices:
            assert choice in str(info.value)


def test_unknown_parameter_suggests_the_near_name():
    with pytest.raises(SpecError, match="did you mean 'per_block'"):
        PlanSpec.from_dict({"design": "random", "per_blok": 3})


def test_flat_dict_round_trip_and_json():
    spec = PlanSpec.from_dict(
        {
            "design": "clusters",
            "target_units": 100,
            "plants_per_cluster": 4,
            "skip_row_ends": 2,
            "purpose": "ripeness",
            "crop_profile": "table-grapes",
            "spares": 3,
            "columns": {"row_spacing": "RowSpacing", "block": "BLOCK_NAME"},
            "length_unit": "ft",
            "formats": "core,html",
        }
    )
    # reference: json (RFC 8259) carries the dict unchanged, as a manifest does
    text = json.dumps(spec.to_dict())
    again = PlanSpec.from_dict(json.loads(text))
    assert again == spec
    assert again.to_dict() == spec.to_dict()
    assert spec.input.columns == (("block", "BLOCK_NAME"), ("row_spacing", "RowSpacing"))
    assert spec.input.read_options()["columns"] == {"block": "BLOCK_NAME", "row_spacing": "RowSpacing"}
    assert spec.outputs.formats == ("core", "html")


def test_sections_are_frozen_and_accept_dicts():
    spec = PlanSpec(design="random", size={"per_block": 4}, samples={"purpose": "soil"})
    assert isinstance(spec.size, SizeSpec) and spec.size.per_block == 4
    with pytest.raises(dataclasses.FrozenInstanceError):
        spec.design = "grid"  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        spec.grid.spacing = 10  # type: ignore[misc]
    assert spec.replace(per_block=6).size.per_block == 6
    assert PlanSpec(grid=GridSpec(spacing=25)).grid.spacing == 25.0


def test_section_tables_as_in_a_recipe():
    spec = PlanSpec.from_dict({"design": "grid", "grid": {"spacing": 30, "layout": "triangular"}})
    assert spec.grid.grid_layout == "triangular" and spec.grid.spacing == 30.0  # former name read


def test_schema_describes_every_parameter_for_forms():
    schema = spec_schema()
    # reference: json (RFC 8259): the schema is plain JSON for a web form
    assert json.loads(json.dumps(schema)) == schema
    names = [f["name"] for f in schema["fields"]]
    assert len(names) == len(set(names))
    assert set(names) == set(PlanSpec.from_dict({"spacing": 1}).to_dict())
    by = {f["name"]: f for f in schema["fields"]}
    assert by["spacing"]["unit"] == "m" and by["spacing"]["designs"] == ["grid"]
    assert by["design"]["choices"] == list(DESIGNS)
    assert by["cores"]["effective_default"] == 16  # common practice, no source: 15-20 cores per composite
    from fieldplan.read import LENGTH_UNITS

    assert by["length_unit"]["choices"] == list(LENGTH_UNITS)
    assert by["columns"]["flag"] == "--column"
    for field in schema["fields"]:
        assert field["help"] and field["panel"] in {p["id"] for p in schema["panels"]}


def test_old_manifest_parameters_are_read():
    # Parameters as plans wrote them before the spec existed.
    old = {
        "design": "random",
        "spacing_m": None,
        "per_ha": None,
        "layout": "square",
        "start": "field",
        "angle": 0.0,
        "edge_buffer_m": 8.0,
        "seed": 7,
        "max_points": 10_000_000,
        "design_options": {"per_block": 3, "allocation": "proportional", "min_per_stratum": 1,
                           "skip_row_ends": 0, "skip_border_rows": 0, "rows_file": None},
        "purpose": "soil",
        "cores": 16,
        "core_radius_m": 10.0,
        "composite": "cell",
        "core_buffer_m": 30.0,
        "depth_cm": "0-15",
        "plan_id": "ABCD",
    }
    spec = PlanSpec.from_dict(old)
    assert spec.size.per_block == 3 and spec.edge_buffer == 8.0
    assert spec.samples.core_radius == 10.0 and spec.samples.depth == "0-15"


def test_plan_params_are_the_spec_and_feed_back(blocks):
    spec = PlanSpec.from_dict({"design": "balanced", "per_block": 3, "purpose": "soil", "edge_buffer": 5})
    plan = make_plan(blocks, spec, seed=11)
    assert {k: plan.params[k] for k in spec.to_dict()} == spec.to_dict()
    assert plan.params["seed"] == 11 and plan.params["plan_id"]
    assert plan.spec == spec
    again = make_plan(blocks, plan.params, seed=11)
    assert again.points.equals(plan.points)
    with pytest.raises(dataclasses.FrozenInstanceError):
        plan.points = None  # type: ignore[misc]


def test_old_keywords_give_the_same_plan(blocks):
    new = make_plan(blocks, PlanSpec.from_dict({"design": "random", "per_block": 2}), seed=4)
    old = make_plan(blocks, design="random", design_options={"per_block": 2}, seed=4)
    assert old.points.equals(new.points) and old.params == new.params


def test_engine_and_formats_do_not_change_sample_ids(blocks):
    a = make_plan(blocks, {"spacing": 60}, seed=2)
    b = make_plan(blocks, {"spacing": 60, "formats": "core", "max_points": 5000}, seed=2)
    assert list(a.points["sample_id"]) == list(b.points["sample_id"])


def test_cli_and_api_give_identical_point_files(tmp_path, blocks, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1700000000")
    from fieldplan.store import write_plan

    out = tmp_path / "cli"
    args = ["--design", "random", "--per-block", "3", "--purpose", "soil", "--cores", "12", "--edge-buffer", "6"]
    result = runner.invoke(app, ["plan", str(demo_blocks_path()), *args, "--seed", "9", "-q", "--out", str(out)])
    assert result.exit_code == 0, result.output
    manifest = json.loads((out / "manifest.json").read_text())
    spec = PlanSpec.from_dict(manifest["parameters"])
    assert spec == PlanSpec.from_dict(
        {"design": "random", "per_block": 3, "purpose": "soil", "cores": 12, "edge_buffer": 6}
    )
    api = make_plan(read_blocks(demo_blocks_path()), spec, seed=9)
    write_plan(api, tmp_path / "api", formats=["core"])
    for name in ("points.geojson", "points.csv"):
        assert (out / name).read_bytes() == (tmp_path / "api" / name).read_bytes()


@pytest.mark.parametrize(
    ("args", "flag"),
    [
        (["--spacing", "-3"], "--spacing"),
        (["--design", "random", "--per-block", "2", "--allocation", "neyman"], "--sd-field"),
        (["--spacing", "40", "--angle", "sideways"], "--angle"),
        (["--spacing", "40", "--cores", "10"], "--cores"),
    ],
)
def test_cli_names_flags_not_parameters(tmp_path, args, flag):
    result = runner.invoke(app, ["plan", str(demo_blocks_path()), *args, "--out", str(tmp_path / "x")])
    assert result.exit_code == 2
    assert flag in result.output and "Traceback" not in result.output
    assert not (tmp_path / "x").exists()


def test_package_lists_its_lazy_names():
    import fieldplan

    names = dir(fieldplan)
    for name in ("PlanSpec", "make_plan", "read_blocks", "spec_schema", "__version__"):
        assert name in names
    assert "importlib" not in names


def test_parameters_doc_is_current():
    from pathlib import Path

    from fieldplan.spec import parameters_markdown

    doc = Path(__file__).resolve().parents[1] / "docs" / "parameters.md"
    # The doc is generated from the spec: regenerate it when a parameter changes (command in its header).
    assert doc.read_text(encoding="utf-8") == parameters_markdown()


def test_schema_marks_server_paths():
    by = {f["name"]: f for f in spec_schema()["fields"]}
    # Files on the planning machine: exclusions, rows, cautions, an earlier plan to revisit.
    assert all(by[name]["server_path"] for name in ("exclude", "rows", "cautions", "revisit"))
    assert not by["spacing"]["server_path"] and not by["columns"]["server_path"]


def test_engine_does_not_import_the_plan_module():
    import subprocess
    import sys

    code = "import sys, fieldplan.planning.engine; print('fieldplan.planning.plan' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    # The engine finds designs in the registry; only make_plan imports the engine.
    assert out.stdout.strip() == "False"
    from fieldplan import plan, stratified
    from fieldplan.planning import plan as moved

    assert plan.make_plan is moved.make_plan and stratified.read_rows is not None  # former paths still work
