"""Crew sheets and crews.csv speak to people: headings in words, one name per count and length."""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import pandas as pd
from typer.testing import CliRunner

from fieldplan.cli.main import app

DEMO = Path(__file__).resolve().parents[1] / "demo_plots" / "estate_blocks.geojson"


def test_sheet_headings_in_words_and_crews_table_matches_routes_layer(tmp_path):
    runner = CliRunner()
    out = tmp_path / "plan"
    made = runner.invoke(app, ["plan", str(DEMO), "--spacing", "80", "--seed", "3", "--out", str(out), "-q"])
    assert made.exit_code == 0, made.output
    crewed = runner.invoke(app, ["crews", str(out), "--crews", "2", "--drop-off", "18.89605,-33.86014", "--force", "-q"])
    assert crewed.exit_code == 0, crewed.output
    sheets = (out / "crew_sheets.html").read_text()
    # A crew reads "Point" and "Longitude", not file column names (common practice, no source).
    assert "<th>Point</th>" in sheets and "<th>Longitude</th>" in sheets
    assert "<th>point_id</th>" not in sheets and "<th>lon</th>" not in sheets
    table = pd.read_csv(out / "crews.csv")
    routes = gpd.read_file(out / "plan.gpkg", layer="routes")
    assert list(table.columns) == ["crew", "n_points", "length_km", "hours"]
    assert list(routes.drop(columns="geometry").columns) == list(table.columns)
    # reference: shapely length of each route line (metres, the plan's UTM CRS); the walking
    # length counts crossing rows as longer than the straight line, never shorter.
    straight_km = routes.geometry.length.to_numpy() / 1000.0
    assert (straight_km <= table["length_km"].to_numpy() + 0.001).all()
    assert (straight_km > 0.5 * table["length_km"].to_numpy()).all()
    # summary.csv counts points as n_points too.
    assert "n_points" in pd.read_csv(out / "summary.csv").columns
