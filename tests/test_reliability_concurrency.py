"""Concurrent changes to one plan folder: real processes in parallel, rows counted afterwards.

Each worker is a separate Python process that imports fieldplan once and then runs the CLI
(``fieldplan.cli.main.app``) once per round; rounds start together across workers at shared
wall-clock instants, so the two commands of a round really overlap. Events and rounds stored
are then counted in plan.gpkg.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pyogrio
import pytest
import shapely
from typer.testing import CliRunner

from fieldplan.cli.main import app
from tests.geoms import E0, N0, blocks_frame, write_geojson

runner = CliRunner()
ROOT = Path(__file__).resolve().parents[1]
ROUNDS = 10

# Each worker runs the CLI in a loop, each run starting at the same instant in every worker.
WORKER = textwrap.dedent(
    """
    import json, sys, time
    from fieldplan.cli.main import app
    start, step, jobs = float(sys.argv[1]), float(sys.argv[2]), json.loads(sys.argv[3])
    codes = []
    for k, args in enumerate(jobs):
        wait = start + k * step - time.time()
        if wait > 0:
            time.sleep(wait)
        try:
            app(args, standalone_mode=False)
            codes.append(0)
        except SystemExit as exc:
            codes.append(int(exc.code or 0))
        except BaseException as exc:  # a crash is a result too: it is counted, not hidden
            codes.append(repr(exc))
    print(json.dumps(codes))
    """
)


def _plan(tmp_path: Path) -> tuple[Path, list[str]]:
    geoms = {"A": shapely.box(E0, N0, E0 + 300, N0 + 200), "B": shapely.box(E0 + 400, N0, E0 + 700, N0 + 200)}
    source = write_geojson(blocks_frame(geoms), tmp_path / "blocks.geojson")
    plan = tmp_path / "plan"
    made = runner.invoke(app, ["plan", str(source), "--spacing", "25", "--seed", "3", "--out", str(plan)])
    assert made.exit_code == 0, made.output
    ids = pyogrio.read_dataframe(plan / "plan.gpkg", layer="points")["point_id"].astype(str).tolist()
    return plan, ids


def _run_workers(job_lists: list[list[list[str]]], step: float) -> list[list]:
    """Start one process per job list; round k of every process begins at the same instant."""
    env = {**os.environ, "PYTHONPATH": str(ROOT), "PYTHONWARNINGS": "ignore"}
    # Leave time for the imports (a few seconds on a loaded 2-core machine).
    start = time.time() + 5.0
    procs = [
        subprocess.Popen(
            [sys.executable, "-c", WORKER, str(start), str(step), json.dumps(jobs)],
            cwd=ROOT,
            env=env,
            stdout=subprocess.PIPE,
            stderr=subprocess.DEVNULL,
            text=True,
        )
        for jobs in job_lists
    ]
    out = []
    for proc in procs:
        stdout, _ = proc.communicate(timeout=240)
        out.append(json.loads(stdout.strip().splitlines()[-1]))
    return out


@pytest.mark.slow
def test_concurrent_marks_all_recorded(tmp_path):
    plan, ids = _plan(tmp_path)
    # Two crews, each marking its own points, one pair of commands per round.
    jobs = [
        [["mark", str(plan), ids[2 * k + w], "--inaccessible", "--reason", f"crew {w}", "--quiet"]
         for k in range(ROUNDS)]
        for w in range(2)
    ]  # fmt: skip
    codes = _run_workers(jobs, step=0.5)
    assert codes == [[0] * ROUNDS, [0] * ROUNDS]
    events = pyogrio.read_dataframe(plan / "plan.gpkg", layer="events", read_geometry=False)
    # Every command's events are stored exactly once, numbered without gaps or repeats.
    # reference: the commands actually run; the events table is append-only, one row per mark
    assert len(events) == 2 * ROUNDS
    assert sorted(events["event_id"].tolist()) == list(range(1, 2 * ROUNDS + 1))
    assert sorted(events["point_id"]) == sorted(ids[: 2 * ROUNDS])
    # The derived files agree with the store.
    points = {r.split(",")[0]: r for r in (plan / "points.csv").read_text().splitlines()[1:]}
    assert all("inaccessible" in points[p] for p in ids[: 2 * ROUNDS])


@pytest.mark.slow
def test_concurrent_results_all_rounds_stored(tmp_path):
    plan, ids = _plan(tmp_path)
    n = 4
    files = []
    for w in range(2):
        for k in range(n):
            path = tmp_path / f"lab_{w}_{k}.csv"
            rows = [f"{pid},{6 + 0.1 * w + 0.01 * k + 0.001 * j:.3f}" for j, pid in enumerate(ids[:5])]
            path.write_text("point_id,ph\n" + "\n".join(rows) + "\n")
            files.append(path)
    jobs = [[["results", str(plan), str(files[w * n + k]), "--quiet"] for k in range(n)] for w in range(2)]
    codes = _run_workers(jobs, step=0.8)
    assert codes == [[0] * n, [0] * n]
    stored = pyogrio.read_dataframe(plan / "plan.gpkg", layer="results", read_geometry=False)
    # reference: the files actually imported, five rows each; every import lands exactly once
    assert sorted(stored["round"].unique().tolist()) == list(range(1, 2 * n + 1))
    assert stored.groupby("round")["source"].nunique().eq(1).all()
    assert sorted(stored["source"].unique()) == sorted(f.name for f in files)
    assert len(stored) == 2 * n * 5
