"""Derived files are rewritten in the formats the plan was written with."""

from __future__ import annotations

import pandas as pd
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.demo import demo_blocks_path
from fieldplan.store import load_plan, locked, plan_formats, rewrite_outputs

runner = CliRunner()
EXTRA = ("map.html", "plan.png", "points.gpx", "points.kml")


def test_mark_keeps_a_core_plan_core(tmp_path):
    out = tmp_path / "p"
    args = ["plan", str(demo_blocks_path()), "--design", "random", "--per-block", "2", "--spares", "1"]
    result = runner.invoke(app, [*args, "--formats", "core", "--seed", "3", "-q", "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert not any((out / name).exists() for name in EXTRA)
    first = pd.read_csv(out / "points.csv")["point_id"].iloc[0]
    marked = runner.invoke(app, ["mark", str(out), first, "--inaccessible", "--reason", "flooded", "-q"])
    assert marked.exit_code == 0, marked.output
    # common practice, no source: a later command keeps the outputs the user chose
    assert not any((out / name).exists() for name in EXTRA)
    assert (out / "points.csv").exists()


def test_rewrite_outputs_honours_the_plan_formats(tmp_path):
    out = tmp_path / "p"
    args = ["plan", str(demo_blocks_path()), "--spacing", "60", "--formats", "csv,kml", "-q", "--out", str(out)]
    assert runner.invoke(app, args).exit_code == 0
    plan = load_plan(out)
    assert plan_formats(plan) == {"csv", "kml", "manifest", "gpkg", "readme"}
    (out / "points.kml").unlink()
    with locked(out):
        rewrite_outputs(plan, out)
    assert (out / "points.kml").exists() and not (out / "map.html").exists()
    assert not (out / "points.geojson").exists()
