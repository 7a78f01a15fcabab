"""The command line: exit codes, one-line errors, refusal to overwrite, demo."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from fieldplan import __version__
from fieldplan.cli.main import app
from fieldplan.demo import demo_blocks_path, demo_exclusions_path

runner = CliRunner()
ROOT = Path(__file__).resolve().parents[1]


def test_version():
    result = runner.invoke(app, ["--version"])
    assert result.exit_code == 0 and __version__ in result.output


def test_plan_writes_folder_and_refuses_overwrite(tmp_path):
    out = tmp_path / "plan-2027-soil"
    args = [
        "plan",
        str(demo_blocks_path()),
        "--spacing",
        "40",
        "--edge-buffer",
        "8",
        "--seed",
        "7",
        "--out",
        str(out),
    ]
    result = runner.invoke(app, args)
    assert result.exit_code == 0, result.output
    assert (out / "points.geojson").exists()
    again = runner.invoke(app, args)
    assert again.exit_code == 2
    assert "--force" in again.output
    assert runner.invoke(app, [*args, "--force"]).exit_code == 0


def test_bad_file_exit_2_one_line_no_traceback(tmp_path):
    bad = tmp_path / "blocks.geojson"
    bad.write_text('{"type": "FeatureCollection", "features": [}')
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "fieldplan",
            "plan",
            str(bad),
            "--spacing",
            "40",
            "--out",
            str(tmp_path / "o"),
        ],
        capture_output=True,
        text=True,
        env={**os.environ, "COLUMNS": "200"},
    )
    assert proc.returncode == 2
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and "blocks.geojson" in lines[0] and "line 1" in lines[0]
    assert "Traceback" not in proc.stderr
    assert not (tmp_path / "o").exists()


def test_demo_command(tmp_path):
    result = runner.invoke(app, ["demo", "--out", str(tmp_path / "d")])
    assert result.exit_code == 0, result.output
    manifest = json.loads((tmp_path / "d" / "manifest.json").read_text())
    assert manifest["counts"]["blocks"] == 14
    assert manifest["seed"] == 7


def test_demo_copy_matches_demo_plots():
    for name, path in (
        ("estate_blocks.geojson", demo_blocks_path()),
        ("estate_exclusions.geojson", demo_exclusions_path()),
    ):
        assert (ROOT / "demo_plots" / name).read_bytes() == path.read_bytes()


@pytest.mark.parametrize(
    "args", [["--spacing", "20", "--per-ha", "2"], ["--angle", "north"], ["--layout", "hex"]]
)
def test_contradicting_options_exit_2(tmp_path, args):
    result = runner.invoke(app, ["plan", str(demo_blocks_path()), "--out", str(tmp_path / "o"), *args])
    assert result.exit_code == 2
    assert not (tmp_path / "o").exists()
