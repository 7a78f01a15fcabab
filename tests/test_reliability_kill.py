"""Lost work: a plan run killed at any moment leaves the complete old plan or the complete new one."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
import shapely
from typer.testing import CliRunner

import fieldplan.write.safe as safe
from fieldplan.cli.main import app
from fieldplan.plan import make_plan
from fieldplan.read import read_blocks
from fieldplan.write.safe import clean_stale_stages, staged_folder
from tests.geoms import E0, N0, blocks_frame, write_geojson

runner = CliRunner()
ROOT = Path(__file__).resolve().parents[1]
OLD = '{"fieldplan_version": "0.1.0", "note": "old plan"}'
CORE = {"points.geojson", "points.csv", "summary.csv", "manifest.json", "README.txt", "plan.gpkg"}


def _estate(tmp: Path) -> Path:
    geoms = {
        f"B{i:02d}": shapely.box(
            E0 + (i % 4) * 600, N0 + (i // 4) * 600, E0 + (i % 4) * 600 + 500, N0 + (i // 4) * 600 + 500
        )
        for i in range(8)
    }
    return write_geojson(blocks_frame(geoms), tmp / "estate.geojson")


def _complete_count(folder: Path) -> int:
    """Number of points of the complete plan in ``folder``; fails on any half-written plan."""
    names = {p.name for p in folder.iterdir()}
    assert CORE <= names, sorted(CORE - names)
    manifest = json.loads((folder / "manifest.json").read_text())
    features = json.loads((folder / "points.geojson").read_text())["features"]
    rows = (folder / "points.csv").read_text().count("\n") - 1
    assert manifest["counts"]["points"] == len(features) == rows
    return len(features)


def test_sigkill_at_any_moment_leaves_old_or_new_plan(tmp_path):
    source = _estate(tmp_path)
    out = tmp_path / "plan"
    first = runner.invoke(app, ["plan", str(source), "--spacing", "50", "--seed", "1", "--out", str(out)])
    assert first.exit_code == 0, first.output
    old = _complete_count(out)
    new = len(make_plan(read_blocks(source), spacing=20, seed=2).points)
    assert new != old
    cmd = [sys.executable, "-m", "fieldplan", "plan", str(source), "--spacing", "20", "--seed", "2"]
    cmd += ["--force", "--quiet", "--out", str(out)]
    env = {**os.environ, "PYTHONWARNINGS": "ignore"}
    seen = set()
    for delay in (0.0, 0.3, 1.0):
        proc = subprocess.Popen(cmd, cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and proc.poll() is None:
            if list(tmp_path.glob(f".plan.{proc.pid}.*.partial")):
                break
            time.sleep(0.01)
        time.sleep(delay)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=60)
        count = _complete_count(out)
        assert count in (old, new)
        seen.add("old" if count == old else "new")
    # The staging folders of killed runs do not stop the next run, which removes them.
    done = runner.invoke(app, cmd[3:])
    assert done.exit_code == 0, done.output
    assert _complete_count(out) == new
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".plan.")]
    assert "old" in seen  # at least the first kill came before the swap


def test_kill_between_renames_is_recovered(tmp_path, monkeypatch):
    # Where the system cannot exchange two folders in one step, the old plan is set aside first;
    # a kill right after that leaves it under .NAME.PID.*.old, and the next run puts it back.
    out = tmp_path / "plan"
    with staged_folder(out) as stage:
        (stage / "manifest.json").write_text(OLD)
    monkeypatch.setattr(safe, "_exchange", lambda a, b: False)
    real_replace = os.replace
    calls = []

    def dying_replace(src, dst):
        calls.append(src)
        if len(calls) == 2:
            raise KeyboardInterrupt  # stands for SIGKILL between the two renames
        return real_replace(src, dst)

    monkeypatch.setattr(safe.os, "replace", dying_replace)
    with pytest.raises(KeyboardInterrupt), staged_folder(out, force=True) as stage:
        (stage / "manifest.json").write_text("new")
    monkeypatch.setattr(safe.os, "replace", real_replace)
    assert not out.exists()
    monkeypatch.setattr(safe, "_pid_alive", lambda pid: False)  # the killed run is gone
    clean_stale_stages(out)
    assert (out / "manifest.json").read_text() == OLD
    assert [p.name for p in tmp_path.iterdir()] == ["plan"]


def test_stale_partial_from_dead_process_removed(tmp_path):
    out = tmp_path / "plan"
    # A process id above any Linux pid_max (2**22) cannot be running.
    stale = tmp_path / ".plan.99999999.abc123.partial"
    stale.mkdir()
    (stale / "points.geojson").write_text("{")
    other = tmp_path / ".other.99999999.abc123.partial"
    other.mkdir()
    mine = tmp_path / f".plan.{os.getpid()}.live.partial"
    mine.mkdir()
    with staged_folder(out) as stage:
        (stage / "manifest.json").write_text("{}")
    assert not stale.exists()
    assert other.exists() and mine.exists()  # another plan's stage and a live run's stage stay
    assert (out / "manifest.json").read_text() == "{}"


def test_stale_stages_of_a_folder_whose_name_extends_this_one_stay(tmp_path):
    # Only this folder's stages are looked at (names starting ".plan."), yet "plan.v2" shares that
    # start: its stage stays, this folder's stale ones go, in name order, and unrelated entries stay.
    dead = 99999999  # above any Linux pid_max (2**22): not running
    other = tmp_path / f".plan.v2.{dead}.abc.partial"
    mine = [tmp_path / f".plan.{dead}.{tag}.partial" for tag in ("b2", "a1")]
    for folder in (other, *mine):
        folder.mkdir()
    (tmp_path / "notes.txt").write_text("keep")
    removed = clean_stale_stages(tmp_path / "plan")
    assert removed == sorted(mine)
    assert other.exists() and (tmp_path / "notes.txt").read_text() == "keep"


def test_failing_writer_leaves_old_plan_and_no_stage(tmp_path, monkeypatch):
    import fieldplan.store as store

    out = tmp_path / "plan"
    with staged_folder(out) as stage:
        (stage / "manifest.json").write_text(OLD)

    def broken(plan, folder):
        (folder / "points.geojson").write_text('{"type": "FeatureCollection", "feat')
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(store, "WRITERS", [broken])
    with pytest.raises(OSError, match="No space left"):
        store.write_plan(object(), out, force=True)
    assert [p.name for p in out.iterdir()] == ["manifest.json"]
    assert (out / "manifest.json").read_text() == OLD
    assert [p.name for p in tmp_path.iterdir()] == ["plan"]


def test_force_refuses_a_folder_that_is_not_a_plan(tmp_path):
    # `--out . --force` in a working folder must not replace that folder.
    work = tmp_path / "work"
    work.mkdir()
    (work / "blocks.geojson").write_text("{}")
    (work / "manifest.json").write_text('{"name": "some web app"}')
    result = runner.invoke(
        app, ["plan", str(_estate(tmp_path)), "--spacing", "50", "--force", "--out", str(work)]
    )
    assert result.exit_code == 2
    assert "no fieldplan plan" in result.stderr and "--force only replaces a plan folder" in result.stderr
    assert sorted(p.name for p in work.iterdir()) == ["blocks.geojson", "manifest.json"]
