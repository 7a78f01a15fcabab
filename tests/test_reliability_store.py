"""The plan store: one writer at a time, derived files in step, links refused, history kept.

What these checks compare against is outside the store's own code: the number of commands run
(each change lands exactly once), the bytes of files before the command (nothing outside the
folder changes), and the operating system's rules for rename(2), flock(2) and O_NOFOLLOW
(reference: POSIX.1-2017 and the Linux man pages).
"""

from __future__ import annotations

import json
import os
import signal
import stat
import subprocess
import sys
import threading
import time
from pathlib import Path

import pyogrio
import pytest
import shapely
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.errors import PlanDirError
from fieldplan.field.events import read_events
from fieldplan.field.mark import inaccessible_set, mark_points
from fieldplan.lock import PlanBusyError, plan_lock
from fieldplan.store import (
    STATE_NAME,
    load_plan,
    locked,
    outputs_generation,
    store_generation,
    transaction,
)
from tests.geoms import E0, N0, blocks_frame, write_geojson

runner = CliRunner()
ROOT = Path(__file__).resolve().parents[1]


def _plan(tmp_path: Path, *, spacing: float = 50, name: str = "plan") -> tuple[Path, list[str]]:
    geoms = {f"B{i}": shapely.box(E0 + i * 600, N0, E0 + i * 600 + 500, N0 + 500) for i in range(2)}
    source = write_geojson(blocks_frame(geoms), tmp_path / "blocks.geojson")
    plan = tmp_path / name
    made = runner.invoke(app, ["plan", str(source), "--spacing", str(spacing), "--seed", "4", "--out", str(plan)])
    assert made.exit_code == 0, made.output
    ids = pyogrio.read_dataframe(plan / "plan.gpkg", layer="points")["point_id"].astype(str).tolist()
    return plan, ids


def _results_csv(path: Path, ids: list[str]) -> Path:
    path.write_text("point_id,ph\n" + "".join(f"{p},{6 + 0.1 * k:.1f}\n" for k, p in enumerate(ids)))
    return path


def _csv_status(plan: Path) -> dict[str, str]:
    lines = (plan / "points.csv").read_text().splitlines()
    header = lines[0].split(",")
    pid, status = header.index("point_id"), header.index("status") if "status" in header else None
    rows = [line.split(",") for line in lines[1:]]
    return {r[pid]: (r[status] if status is not None else "selected") for r in rows}


def _consistent(plan: Path) -> set[str]:
    """Assert events, the store's points layer and points.csv/points.geojson agree; return the marked ids."""
    off = set(inaccessible_set(read_events(plan / "plan.gpkg")))
    stored = pyogrio.read_dataframe(plan / "plan.gpkg", layer="points", read_geometry=False)
    in_store = set(stored.loc[stored.get("status", "") == "inaccessible", "point_id"]) if "status" in stored else set()
    in_csv = {p for p, s in _csv_status(plan).items() if s == "inaccessible"}
    features = json.loads((plan / "points.geojson").read_text())["features"]
    in_geojson = {f["properties"]["point_id"] for f in features if f["properties"].get("status") == "inaccessible"}
    assert off == in_store == in_csv == in_geojson, (off, in_store, in_csv, in_geojson)
    assert store_generation(plan) == outputs_generation(plan)
    return off


def _debris(plan: Path) -> list[str]:
    inside = [p.name for p in plan.iterdir() if ".tmp" in p.name or p.name.endswith(".stage")]
    beside = [p.name for p in plan.parent.iterdir() if p.name.startswith(f".{plan.name}.")]
    return inside + beside


# --- item: a killed change leaves a consistent folder ------------------------------------------


@pytest.mark.slow
def test_sigkill_during_mark_leaves_a_consistent_folder(tmp_path):
    plan, ids = _plan(tmp_path, spacing=12)  # about 3,400 points: a mark takes about a second
    env = {**os.environ, "PYTHONPATH": str(ROOT), "PYTHONWARNINGS": "ignore"}
    # Moments: while the private copy of plan.gpkg is written (before the swap), while the derived
    # files are staged (after the swap: the store is ahead of points.csv), and a fixed delay.
    moments = [
        ("copy", lambda pid: list(plan.glob(f".plan.gpkg.{pid}.*.tmp.gpkg"))),
        ("stage", lambda pid: list(plan.glob(f".{plan.name}.{pid}.*.stage"))),
        ("stage+0.2s", lambda pid: list(plan.glob(f".{plan.name}.{pid}.*.stage"))),
    ]
    marked: set[str] = set()
    seen_ahead = False
    for k, (label, ready) in enumerate(moments):
        point = ids[k]
        cmd = [sys.executable, "-m", "fieldplan", "mark", str(plan), point, "--inaccessible", "--reason", "x"]
        proc = subprocess.Popen(cmd, cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        deadline = time.monotonic() + 90
        while time.monotonic() < deadline and proc.poll() is None and not ready(proc.pid):
            time.sleep(0.002)
        if label.endswith("s"):
            time.sleep(0.2)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
        seen_ahead |= store_generation(plan) != outputs_generation(plan)
        # Any command finds the folder consistent: loading rebuilds derived files out of step.
        load_plan(plan)
        now = _consistent(plan)
        assert now - marked <= {point}  # the killed mark landed whole or not at all
        marked = now
        # The next change removes the killed run's debris and records its own events once.
        done = runner.invoke(app, ["mark", str(plan), ids[10 + k], "--inaccessible", "--reason", "y"])
        assert done.exit_code == 0, done.output
        marked = _consistent(plan)
        assert ids[10 + k] in marked
        assert _debris(plan) == []
    assert seen_ahead  # at least one kill fell between the swap and the derived files


def test_out_of_step_files_rebuilt_under_the_lock(tmp_path):
    plan, ids = _plan(tmp_path)
    mark_points(plan, [ids[0]], reason="flooded")
    # A run killed after the store changed but before the derived files did (simulated).
    state = json.loads((plan / STATE_NAME).read_text())
    (plan / STATE_NAME).write_text(json.dumps({"store_generation": state["store_generation"] - 1}))
    (plan / "points.csv").write_text("stale\n")
    load_plan(plan)
    assert _consistent(plan) == {ids[0]}


def test_stale_staging_and_temp_files_cleaned(tmp_path):
    plan, ids = _plan(tmp_path)
    dead = 99_999_999  # above any Linux pid_max: cannot be running
    (plan / f".plan.{dead}.abc12345.stage").mkdir()
    (plan / f".plan.{dead}.abc12345.stage" / "points.kml").write_bytes(b"x" * 1000)
    (plan / f".plan.gpkg.{dead}.abcd1234.tmp.gpkg").write_bytes(b"half")
    (plan / f".points.csv.{dead}.abcd1234.tmp").write_bytes(b"half")
    (plan / ".results-tmp-plan.gpkg").write_bytes(b"old name")
    old_mark = tmp_path / ".plan.k2j3h4.mark"  # staging folder of the unlocked mark
    old_mark.mkdir()
    live = plan / f".points.csv.{os.getpid()}.abcd1234.tmp"  # a live process's file stays
    live.write_bytes(b"")
    mark_points(plan, [ids[1]], reason="gate")
    assert _debris(plan) == [live.name]


# --- items: concurrent changes (in process: threads), busy message ------------------------------


def test_busy_plan_says_retry_after_timeout(tmp_path, monkeypatch):
    plan, ids = _plan(tmp_path)
    holding, release = threading.Event(), threading.Event()

    def holder():
        with plan_lock(plan):
            holding.set()
            release.wait(10)

    thread = threading.Thread(target=holder)
    thread.start()
    holding.wait(10)
    try:
        with pytest.raises(PlanBusyError, match="the plan is busy .* retry in a moment"):
            with transaction(plan, timeout=0.2):
                pass
        monkeypatch.setenv("FIELDPLAN_LOCK_TIMEOUT", "0.2")
        with pytest.raises(PlanBusyError, match="waited 0.2 s"):
            mark_points(plan, [ids[0]], reason="x")
        env_result = runner.invoke(
            app, ["mark", str(plan), ids[0], "--inaccessible", "--reason", "x"], env={"FIELDPLAN_LOCK_TIMEOUT": "0.2"}
        )
        assert env_result.exit_code == 2
        assert "the plan is busy" in env_result.output and "Traceback" not in env_result.output
    finally:
        release.set()
        thread.join()
    assert read_events(plan / "plan.gpkg").empty  # nothing was written while refused


def test_threads_in_one_process_wait_for_each_other(tmp_path):
    # A web server runs library calls in threads: they must not lose each other's changes.
    plan, ids = _plan(tmp_path)
    errors = []

    def worker(k):
        try:
            mark_points(plan, [ids[k]], reason=f"thread {k}")
        except Exception as exc:  # noqa: BLE001 - collected and asserted below
            errors.append(exc)

    threads = [threading.Thread(target=worker, args=(k,)) for k in range(3)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []
    events = read_events(plan / "plan.gpkg")
    assert sorted(events["event_id"]) == [1, 2, 3]
    assert _consistent(plan) == set(ids[:3])


def test_nested_transactions_join_into_one_change(tmp_path):
    plan, ids = _plan(tmp_path)
    before = store_generation(plan)
    with transaction(plan) as outer:
        mark_points(plan, [ids[0]], reason="a")
        assert store_generation(plan) == before  # nothing visible before the outer commit
        assert outer.plan is not None
    assert store_generation(plan) == before + 1
    assert _consistent(plan) == {ids[0]}


# --- item: a failed results import stores nothing -----------------------------------------------


def test_failed_results_import_stores_nothing_and_rerun_succeeds(tmp_path):
    plan, ids = _plan(tmp_path)
    lab = _results_csv(tmp_path / "lab.csv", ids[:3])
    gpx = tmp_path / "walk.gpx"
    gpx.write_text("<gpx><wpt lat='nope'")  # unreadable
    gpkg_before = (plan / "plan.gpkg").read_bytes()
    bad = runner.invoke(app, ["results", str(plan), str(lab), "--positions", str(gpx)])
    assert bad.exit_code == 2
    assert "walk.gpx" in bad.output and "Traceback" not in bad.output
    assert (plan / "plan.gpkg").read_bytes() == gpkg_before
    good = runner.invoke(app, ["results", str(plan), str(lab)])
    assert good.exit_code == 0, good.output  # not refused as a duplicate
    stored = pyogrio.read_dataframe(plan / "plan.gpkg", layer="results", read_geometry=False)
    assert stored["round"].unique().tolist() == [1]


# --- item: planted links, temp files, file modes ------------------------------------------------


@pytest.mark.parametrize("name", [".results-tmp-plan.gpkg", "points.csv", "plan.gpkg", ".fieldplan.lock"])
def test_planted_symlink_refused_and_outside_file_untouched(tmp_path, name):
    plan, ids = _plan(tmp_path)
    outside = tmp_path / "precious.txt"
    outside.write_bytes(b"do not overwrite\n" * 10)
    before = outside.read_bytes()
    target = plan / name
    if target.exists():
        target.unlink()
    target.symlink_to(outside)
    lab = _results_csv(tmp_path / "lab.csv", ids[:3])
    for args in (["results", str(plan), str(lab)], ["mark", str(plan), ids[0], "--inaccessible", "--reason", "x"]):
        result = runner.invoke(app, args)
        assert result.exit_code == 2, result.output
        assert "symbolic link" in result.output and name in result.output
        assert "Traceback" not in result.output
    assert outside.read_bytes() == before
    assert target.is_symlink()  # the link itself is left for the user to look at


def test_temp_files_are_private_and_mode_is_kept(tmp_path, monkeypatch):
    plan, ids = _plan(tmp_path)
    os.chmod(plan / "plan.gpkg", 0o640)
    os.chmod(plan / "points.csv", 0o604)
    names = []
    import tempfile as tf

    real = tf.mkstemp

    def spy(*args, **kwargs):
        fd, path = real(*args, **kwargs)
        names.append(path)
        return fd, path

    monkeypatch.setattr(tf, "mkstemp", spy)
    mark_points(plan, [ids[0]], reason="x")
    assert stat.S_IMODE(os.stat(plan / "plan.gpkg").st_mode) == 0o640
    assert stat.S_IMODE(os.stat(plan / "points.csv").st_mode) == 0o604
    # The store's copy came from mkstemp (exclusive, unpredictable name) in the plan folder.
    assert any(Path(p).parent == plan and ".plan.gpkg." in Path(p).name for p in names)


# --- item: plan --force keeps history unless told --------------------------------------------------


def test_force_over_plan_with_history_moves_it_aside(tmp_path):
    plan, ids = _plan(tmp_path)
    source = tmp_path / "blocks.geojson"
    lab = _results_csv(tmp_path / "lab.csv", ids[:3])
    assert runner.invoke(app, ["results", str(plan), str(lab)]).exit_code == 0
    assert runner.invoke(app, ["mark", str(plan), ids[5], "--inaccessible", "--reason", "x"]).exit_code == 0
    gpkg_before = (plan / "plan.gpkg").read_bytes()
    again = runner.invoke(app, ["plan", str(source), "--spacing", "60", "--out", str(plan), "--force", "--quiet"])
    assert again.exit_code == 0, again.output
    aside = [p for p in tmp_path.iterdir() if p.name.startswith("plan.replaced-")]
    assert len(aside) == 1
    assert str(aside[0]) in again.output and "not deleted" in again.output
    assert (aside[0] / "plan.gpkg").read_bytes() == gpkg_before
    assert json.loads((plan / "manifest.json").read_text())["previous_plan"] == aside[0].name
    assert "results" not in {r[0] for r in pyogrio.list_layers(plan / "plan.gpkg")}
    # With --discard-history the old plan goes, as asked.
    assert runner.invoke(app, ["results", str(plan), str(lab)]).exit_code == 0
    gone = runner.invoke(
        app, ["plan", str(source), "--spacing", "70", "--out", str(plan), "--force", "--discard-history", "-q"]
    )
    assert gone.exit_code == 0, gone.output
    assert len([p for p in tmp_path.iterdir() if p.name.startswith("plan.replaced-")]) == 1
    # A plan without history is simply replaced, as before.
    plain = runner.invoke(app, ["plan", str(source), "--spacing", "80", "--out", str(plan), "--force", "-q"])
    assert plain.exit_code == 0 and "moved to" not in plain.output
    assert len([p for p in tmp_path.iterdir() if p.name.startswith("plan.replaced-")]) == 1


def test_locked_refuses_a_folder_without_a_store(tmp_path):
    with pytest.raises(PlanDirError, match="no plan.gpkg"), locked(tmp_path):
        pass


def test_results_round_leaves_derived_files_alone_and_in_step(tmp_path):
    # A round changes no file derived from the plan (no writer shows results): they are not
    # re-written, and the folder still reads as in step with the store.
    plan, ids = _plan(tmp_path)
    before = {p.name: p.stat().st_mtime_ns for p in plan.iterdir() if not p.name.startswith(".")}
    lab = _results_csv(tmp_path / "lab.csv", ids[:3])
    assert runner.invoke(app, ["results", str(plan), str(lab)]).exit_code == 0
    after = {p.name: p.stat().st_mtime_ns for p in plan.iterdir() if not p.name.startswith(".")}
    assert {k: v for k, v in after.items() if k != "plan.gpkg"} == {k: v for k, v in before.items() if k != "plan.gpkg"}
    assert store_generation(plan) == outputs_generation(plan) == 2


def test_lock_follows_a_folder_replaced_while_waiting(tmp_path):
    # A waiter that locked the lock file of a folder since replaced (plan --force) must lock the
    # new folder instead: after it returns, the new folder's lock file is the one held.
    import fcntl

    plan, _ = _plan(tmp_path)
    holding, got = threading.Event(), {}

    def waiter():
        holding.wait(10)
        with plan_lock(plan):
            fd = os.open(plan / ".fieldplan.lock", os.O_RDWR)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                got["held"] = False  # nobody held the new folder's lock
            except BlockingIOError:
                got["held"] = True
            finally:
                os.close(fd)

    thread = threading.Thread(target=waiter)
    thread.start()
    with plan_lock(plan):
        holding.set()
        time.sleep(0.3)  # the waiter now polls the old folder's lock file
        os.rename(plan, tmp_path / "plan.old")
        (tmp_path / "plan.old").rename(tmp_path / "plan.tmp")
        plan.mkdir()
        for name in ("plan.gpkg", "manifest.json"):
            (plan / name).write_bytes((tmp_path / "plan.tmp" / name).read_bytes())
    thread.join(20)
    assert got == {"held": True}


@pytest.mark.slow
def test_sigkill_during_results_stores_the_round_once(tmp_path):
    plan, ids = _plan(tmp_path, spacing=12)
    lab = _results_csv(tmp_path / "lab.csv", ids[:50])
    env = {**os.environ, "PYTHONPATH": str(ROOT), "PYTHONWARNINGS": "ignore"}
    cmd = [sys.executable, "-m", "fieldplan", "results", str(plan), str(lab)]
    proc = subprocess.Popen(cmd, cwd=ROOT, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 90
    while time.monotonic() < deadline and proc.poll() is None and not list(plan.glob(".plan.gpkg.*.tmp.gpkg")):
        time.sleep(0.002)
    proc.send_signal(signal.SIGKILL)
    proc.wait(timeout=30)
    layers = {row[0] for row in pyogrio.list_layers(plan / "plan.gpkg")}
    stored = 0 if "results" not in layers else 1
    # Killed before the swap: nothing stored and a re-run stores round 1; after it: a re-run
    # is refused as a duplicate. Either way the round is stored exactly once.
    again = runner.invoke(app, ["results", str(plan), str(lab)])
    assert again.exit_code == (2 if stored else 0), again.output
    rounds = pyogrio.read_dataframe(plan / "plan.gpkg", layer="results", read_geometry=False)
    assert rounds["round"].unique().tolist() == [1] and len(rounds) == 50
    assert _debris(plan) == []
