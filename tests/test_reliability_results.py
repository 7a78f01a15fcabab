"""Results rounds in plan.gpkg are append-only; the same file is not imported twice unless asked."""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

pytest.importorskip("fieldplan.cli.results_cmd", reason="fieldplan results is not available")

import pyogrio  # noqa: E402

from fieldplan.cli.main import app  # noqa: E402
from tests.geoms import blocks_frame, lonlat_square, write_geojson  # noqa: E402

runner = CliRunner()


def _rounds(plan: Path):
    frame = pyogrio.read_dataframe(plan / "plan.gpkg", layer="results", read_geometry=False)
    return frame.sort_values(list(frame.columns)).reset_index(drop=True)


def _results_csv(path: Path, ids: list[str], values: list[float]) -> Path:
    lines = ["point_id,ph"] + [f"{i},{v}" for i, v in zip(ids, values, strict=True)]
    path.write_text("\n".join(lines) + "\n")
    return path


def test_rounds_append_only_and_reimport_refused(tmp_path):
    frame = blocks_frame({f"B{i}": lonlat_square(15.0 + 0.005 * i, 47.0) for i in range(2)}, crs="EPSG:4326")
    plan = tmp_path / "plan"
    made = runner.invoke(
        app,
        ["plan", str(write_geojson(frame, tmp_path / "b.geojson")), "--spacing", "80", "--out", str(plan)],
    )
    assert made.exit_code == 0, made.output
    ids = pyogrio.read_dataframe(plan / "plan.gpkg", layer="points")["point_id"].astype(str).tolist()[:4]
    first = _results_csv(tmp_path / "round1.csv", ids, [6.1, 6.4, 5.9, 7.0])
    assert runner.invoke(app, ["results", str(plan), str(first)]).exit_code == 0
    round1 = _rounds(plan)
    assert sorted(round1["round"].unique()) == [1]

    again = runner.invoke(app, ["results", str(plan), str(first)])
    assert again.exit_code == 2
    message = again.stderr.strip()
    assert "round1.csv" in message and "already imported as round 1" in message
    assert "--allow-duplicate" in message and "\n" not in message
    assert _rounds(plan).equals(round1)  # the refused import changed nothing

    second = _results_csv(tmp_path / "round2.csv", ids, [6.2, 6.3, 6.0, 6.9])
    assert runner.invoke(app, ["results", str(plan), str(second)]).exit_code == 0
    both = _rounds(plan)
    assert sorted(both["round"].unique()) == [1, 2]
    kept = both[both["round"] == 1].reset_index(drop=True)
    assert kept.equals(round1)  # round 1 exactly as stored before

    forced = runner.invoke(app, ["results", str(plan), str(first), "--allow-duplicate"])
    assert forced.exit_code == 0, forced.output
    assert sorted(_rounds(plan)["round"].unique()) == [1, 2, 3]
    assert not list(plan.glob(".*tmp*"))


def test_refused_reimport_prints_only_the_refusal(tmp_path):
    frame = blocks_frame({"B0": lonlat_square(15.0, 47.0)}, crs="EPSG:4326")
    plan = tmp_path / "plan"
    made = runner.invoke(
        app,
        ["plan", str(write_geojson(frame, tmp_path / "b.geojson")), "--spacing", "80", "--out", str(plan)],
    )
    assert made.exit_code == 0, made.output
    ids = pyogrio.read_dataframe(plan / "plan.gpkg", layer="points")["point_id"].astype(str).tolist()[:3]
    # One unknown point id and one cell that is not a number: problems on the first import.
    path = tmp_path / "lab.csv"
    path.write_text(f"point_id,ph\n{ids[0]},6.1\n{ids[1]},n/a\nNOPE-1,6.0\n{ids[2]},6.5\n")
    first = runner.invoke(app, ["results", str(plan), str(path)])
    assert first.exit_code == 0, first.output
    assert "problem(s) in lab.csv" in first.stderr

    again = runner.invoke(app, ["results", str(plan), str(path)])
    assert again.exit_code == 2
    lines = again.stderr.splitlines()
    # common practice, no source: a refusal is one line, with nothing from the file before it
    assert len(lines) == 1
    assert "lab.csv" in lines[0] and "--allow-duplicate" in lines[0] and "problem" not in lines[0]
    assert again.stdout == ""
