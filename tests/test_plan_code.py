"""Sample ids do not depend on how the exclusion file's path was typed."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_plots"


def _plan(cwd: Path, exclude: str, out: Path) -> pd.DataFrame:
    cmd = [sys.executable, "-c", "from fieldplan.cli.main import run; run()", "plan",
           str(DEMO / "estate_blocks.geojson"), "--exclude", exclude, "--spacing", "100",
           "--purpose", "soil", "--seed", "7", "--formats", "core", "--out", str(out), "-q"]  # fmt: skip
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    subprocess.run(cmd, cwd=cwd, check=True, capture_output=True, env=env)
    return pd.read_csv(out / "points.csv")


def test_same_plan_from_another_folder_keeps_its_sample_ids(tmp_path):
    # Bags are labelled with sample ids; re-making the same plan elsewhere must not relabel them
    # (common practice, no source: a sample keeps its id from the field to the lab).
    here = tmp_path / "office"
    here.mkdir()
    shutil.copy(DEMO / "estate_exclusions.geojson", here / "estate_exclusions.geojson")
    relative = _plan(here, "estate_exclusions.geojson", tmp_path / "a")
    absolute = _plan(tmp_path, str(here / "estate_exclusions.geojson"), tmp_path / "b")
    assert relative["sample_id"].tolist() == absolute["sample_id"].tolist()
    assert relative[["x", "y"]].equals(absolute[["x", "y"]])
