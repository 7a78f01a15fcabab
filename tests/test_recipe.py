"""Recipes: plan -> recipe -> plan gives the same points; --recipe with flags over it; --like."""

from __future__ import annotations

import json
import tomllib

import pytest
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.demo import demo_blocks_path, demo_exclusions_path
from fieldplan.recipe import merge, read_recipe, recipe_text
from fieldplan.spec import PlanSpec

runner = CliRunner()
BLOCKS = str(demo_blocks_path())


def _plan(out, *args):
    result = runner.invoke(app, ["plan", BLOCKS, *args, "-q", "--out", str(out)])
    assert result.exit_code == 0, result.output
    return out


def _recipe(plan_dir, path, *args):
    result = runner.invoke(app, ["recipe", str(plan_dir), *args])
    assert result.exit_code == 0, result.output
    path.write_text(result.stdout)
    return path


POINT_FILES = ("points.csv", "points.geojson", "summary.csv")


@pytest.mark.parametrize(
    "args",
    [
        ["--spacing", "45", "--edge-buffer", "8", "--layout", "triangular", "--angle", "rows"],
        ["--design", "balanced", "--n", "30", "--allocation", "equal", "--purpose", "soil", "--cores", "12"],
        ["--design", "random", "--per-block", "2", "--spares", "2", "--purpose", "ripeness",
         "--crop-profile", "table-grapes"],
    ],
)
def test_plan_recipe_plan_gives_identical_point_files(tmp_path, monkeypatch, args):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1700000000")
    first = _plan(tmp_path / "first", *args, "--exclude", str(demo_exclusions_path()), "--seed", "13")
    recipe = _recipe(first, tmp_path / "r.toml")
    # reference: tomllib (TOML 1.0): the recipe is plain TOML and carries the seed
    data = tomllib.loads(recipe.read_text())
    assert data["seed"] == 13
    second = _plan(tmp_path / "second", "--recipe", str(recipe))
    for name in POINT_FILES:
        assert (first / name).read_bytes() == (second / name).read_bytes(), name
    a = json.loads((first / "manifest.json").read_text())["parameters"]
    b = json.loads((second / "manifest.json").read_text())["parameters"]
    assert a == b


def test_flags_override_the_recipe(tmp_path):
    recipe = tmp_path / "soil.toml"
    recipe.write_text(
        'seed = 5\ndesign = "random"\n\n[size]\nper_block = 3\n\n[samples]\npurpose = "soil"\ncores = 12\n'
    )
    out = _plan(tmp_path / "p", "--recipe", str(recipe), "--n", "20", "--cores", "18")
    params = json.loads((out / "manifest.json").read_text())["parameters"]
    # The size given on the command line replaces the recipe's; the rest of the recipe stays.
    assert params["n"] == 20 and params["per_block"] is None
    assert params["cores"] == 18 and params["purpose"] == "soil" and params["seed"] == 5
    out = _plan(tmp_path / "q", "--recipe", str(recipe), "--seed", "6")
    assert json.loads((out / "manifest.json").read_text())["parameters"]["seed"] == 6


def test_like_reuses_parameters_with_a_new_seed(tmp_path):
    first = _plan(tmp_path / "a", "--design", "balanced", "--per-block", "2", "--seed", "3")
    result = runner.invoke(app, ["plan", BLOCKS, "--like", str(first), "--out", str(tmp_path / "b")])
    assert result.exit_code == 0, result.output
    assert "new seed" in result.output
    a = json.loads((first / "manifest.json").read_text())["parameters"]
    b = json.loads((tmp_path / "b" / "manifest.json").read_text())["parameters"]
    assert {k: v for k, v in a.items() if k not in ("seed", "plan_id")} == {
        k: v for k, v in b.items() if k not in ("seed", "plan_id")
    }
    same = _plan(tmp_path / "c", "--like", str(first), "--seed", "3")
    assert (same / "points.csv").read_bytes() == (first / "points.csv").read_bytes()


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("design = 'random'\n[size]\nper_blok = 3\n", "per_block"),
        ("spacing = -4\n", "spacing"),
        ("spacing = [1\n", "TOML"),
        ("seed = -1\nspacing = 30\n", "seed"),
    ],
)
def test_a_bad_recipe_names_the_file_and_the_parameter(tmp_path, text, fragment):
    recipe = tmp_path / "bad.toml"
    recipe.write_text(text)
    out = tmp_path / "x"
    result = runner.invoke(app, ["plan", BLOCKS, "--recipe", str(recipe), "--out", str(out)])
    assert result.exit_code == 2
    assert "bad.toml" in result.output and fragment in result.output
    assert "Traceback" not in result.output and not out.exists()


def test_recipe_text_reads_back_with_mapping_and_units(tmp_path):
    spec = PlanSpec.from_dict(
        {
            "design": "clusters",
            "per_block": 2,
            "plants_per_cluster": 3,
            "columns": {"row_spacing": "Row Spacing (ft)", "block": 'Blk "name"'},
            "length_unit": "ft",
            "instructions": "row {row}\tplant {plant}",
        }
    )
    path = tmp_path / "r.toml"
    path.write_text(recipe_text(spec, seed=2))
    values, seed = read_recipe(path)
    assert seed == 2
    assert PlanSpec.from_dict(values) == spec


def test_merge_drops_what_a_new_design_does_not_take():
    base = {"design": "random", "per_block": 3, "spares": 2, "edge_buffer": 5.0}
    merged = merge(base, {"design": "grid", "spacing": 40})
    assert merged == {"design": "grid", "spacing": 40, "edge_buffer": 5.0}
    assert PlanSpec.from_dict(merged).grid.spacing == 40.0
