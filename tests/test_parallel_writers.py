"""Writers side by side: the heavy optional writers of ``write_plan`` in a forked child."""

from __future__ import annotations

import errno
import gc
import itertools
import os
import signal
import sys
import threading
import time
from pathlib import Path

import pytest
from typer.testing import CliRunner

import fieldplan.store as store
from fieldplan.cli.main import app
from fieldplan.demo import demo_blocks_path
from fieldplan.errors import FieldplanError, InputError, OptionError
from fieldplan.plan import make_plan
from fieldplan.read import read_blocks

pytestmark = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the fork is Linux only")

runner = CliRunner()
OLD = '{"fieldplan_version": "0.1.0", "note": "old plan"}\n'


@pytest.fixture(scope="module")
def demo_plan():
    return make_plan(read_blocks(demo_blocks_path()), spacing=60.0, seed=4, command=["test"])


@pytest.fixture
def forks(monkeypatch):
    """Count the forks write_plan makes (in this, the parent, process)."""
    count = []
    real = os.fork

    def counting_fork():
        count.append(1)
        return real()

    monkeypatch.setattr(store.os, "fork", counting_fork)
    monkeypatch.delenv(store.WRITE_JOBS_ENV, raising=False)
    # A thread left running by an earlier test of the session would turn the fork off.
    monkeypatch.setattr(store.threading, "active_count", lambda: 1)
    return count


def _old_plan(out: Path) -> None:
    out.mkdir()
    (out / "manifest.json").write_text(OLD)


def _left_as_it_was(out: Path) -> None:
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json"]
    assert (out / "manifest.json").read_text() == OLD
    assert sorted(p.name for p in out.parent.iterdir()) == [out.name]  # no staging folder left


def _replace_writer(monkeypatch, name: str, func) -> None:
    func.__name__ = func.__qualname__ = name
    writers = [func if getattr(w, "__name__", "") == name else w for w in store.WRITERS]
    monkeypatch.setattr(store, "WRITERS", writers)
    monkeypatch.setitem(store.WRITER_COST, name, 10.0)  # the heaviest: it goes to the child
    assert func in store.split_writers(writers)[1]


@pytest.mark.parametrize("formats", [None, ["core"]])
def test_outputs_are_byte_identical_with_and_without_the_child(demo_plan, tmp_path, monkeypatch, forks, formats):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    if formats:  # weigh the demo's tables as a large plan's, so the child takes some of them
        monkeypatch.setattr(store, "COST_POINTS", 10)
        assert store.split_writers(store._writers(store.selected_formats(formats)), len(demo_plan.points))[1]
    # Same folder name on both sides: the manifest and README name the folder.
    assert gc.get_freeze_count() == 0
    store.write_plan(demo_plan, tmp_path / "forked" / "plan", formats=formats)
    assert forks == [1]
    assert gc.get_freeze_count() == 0  # the collector sees every object again
    monkeypatch.setenv(store.WRITE_JOBS_ENV, "1")
    store.write_plan(demo_plan, tmp_path / "serial" / "plan", formats=formats)
    assert forks == [1]
    forked = {p.name: p.read_bytes() for p in (tmp_path / "forked" / "plan").iterdir()}
    serial = {p.name: p.read_bytes() for p in (tmp_path / "serial" / "plan").iterdir()}
    # reference: the writers run one after another in one process (FIELDPLAN_WRITE_JOBS=1)
    expected = {"points.csv", "points.geojson", "plan.gpkg"}
    assert expected | (set() if formats else {"map.html", "plan.png", "points.kml", "points.gpx"}) <= set(serial)
    assert sorted(forked) == sorted(serial)
    for name in serial:
        assert forked[name] == serial[name], name


def test_error_in_a_child_writer_surfaces_as_in_the_parent(demo_plan, tmp_path, monkeypatch, forks):
    def kml_writer(plan, folder):
        (folder / "points.kml").write_text("<kml")  # half a file, left in the stage
        raise InputError("blocks.geojson: feature 3 has no name; name every block")

    _replace_writer(monkeypatch, "kml_writer", kml_writer)
    out = tmp_path / "plan"
    _old_plan(out)
    with pytest.raises(InputError, match=r"^blocks.geojson: feature 3 has no name; name every block$"):
        store.write_plan(demo_plan, out, force=True, discard_history=True)
    assert forks == [1]
    _left_as_it_was(out)


def test_os_error_in_the_child_keeps_its_class_and_errno(demo_plan, tmp_path, monkeypatch, forks):
    def png_writer(plan, folder):
        raise OSError(errno.ENOSPC, "No space left on device", str(folder / "plan.png"))

    _replace_writer(monkeypatch, "png_writer", png_writer)
    with pytest.raises(OSError) as caught:
        store.write_plan(demo_plan, tmp_path / "plan")
    assert forks == [1]
    # reference: Python's OSError pickles errno, strerror and filename (its __reduce__)
    assert caught.value.errno == errno.ENOSPC and caught.value.filename.endswith("plan.png")
    assert any("writer process" in note for note in caught.value.__notes__)
    assert list(tmp_path.iterdir()) == []


class TwoPartError(FieldplanError):
    """An error whose constructor cannot be called with its message alone (does not unpickle)."""

    def __init__(self, path, fix):
        super().__init__(f"{path}: {fix}")


def test_error_that_does_not_unpickle_keeps_class_and_message(demo_plan, tmp_path, monkeypatch, forks):
    def map_writer(plan, folder):
        raise TwoPartError("map.html", "free some memory")

    _replace_writer(monkeypatch, "map_writer", map_writer)
    with pytest.raises(TwoPartError, match=r"^map.html: free some memory$"):
        store.write_plan(demo_plan, tmp_path / "plan")
    assert forks == [1]


def test_cli_prints_the_same_line_and_exit_code_for_a_child_error(tmp_path, monkeypatch, forks):
    def kml_writer(plan, folder):
        raise InputError("blocks.geojson: feature 3 has no name; name every block")

    _replace_writer(monkeypatch, "kml_writer", kml_writer)
    results = {}
    for jobs in ("1", "2"):
        monkeypatch.setenv(store.WRITE_JOBS_ENV, jobs)
        out = tmp_path / jobs / "plan"
        args = ["plan", str(demo_blocks_path()), "--spacing", "60", "--seed", "4", "-q", "--out", str(out)]
        results[jobs] = runner.invoke(app, args)
        assert not out.exists() and list(out.parent.iterdir()) == []
    assert forks == [1]  # the second run only
    assert results["1"].exit_code == results["2"].exit_code == 2
    assert results["1"].stderr == results["2"].stderr
    assert results["2"].stderr.strip().splitlines() == [
        "fieldplan: error: blocks.geojson: feature 3 has no name; name every block"
    ]


def test_child_killed_by_a_signal_fails_the_plan_cleanly(demo_plan, tmp_path, monkeypatch, forks):
    def png_writer(plan, folder):
        (folder / "plan.png").write_bytes(b"\x89PNG")
        os.kill(os.getpid(), signal.SIGKILL)  # as the kernel's out-of-memory killer would

    _replace_writer(monkeypatch, "png_writer", png_writer)
    out = tmp_path / "plan"
    _old_plan(out)
    with pytest.raises(store.WriterProcessError, match="killed by signal SIGKILL") as caught:
        store.write_plan(demo_plan, out, force=True, discard_history=True)
    assert "\n" not in str(caught.value) and store.WRITE_JOBS_ENV in str(caught.value)
    assert forks == [1]
    _left_as_it_was(out)


def test_parent_failure_stops_the_child_before_the_stage_goes(demo_plan, tmp_path, monkeypatch, forks):
    def map_writer(plan, folder):
        time.sleep(0.4)
        # Would make the removed staging folder again if the child outlived the failure.
        from fieldplan.write.safe import atomic_write_bytes

        atomic_write_bytes(folder / "late" / "map.html", b"late")

    def write_summary_csv(plan, folder):
        raise OSError(errno.EIO, "Input/output error")

    _replace_writer(monkeypatch, "map_writer", map_writer)
    writers = [write_summary_csv if w.__name__ == "write_summary_csv" else w for w in store.WRITERS]
    monkeypatch.setattr(store, "WRITERS", writers)
    out = tmp_path / "plan"
    _old_plan(out)
    with pytest.raises(OSError, match="Input/output error"):
        store.write_plan(demo_plan, out, force=True, discard_history=True)
    time.sleep(0.8)
    assert forks == [1]
    _left_as_it_was(out)


def test_no_fork_when_turned_off_in_a_thread_or_beside_other_threads(demo_plan, tmp_path, monkeypatch, forks):
    monkeypatch.undo()  # the real thread count again
    real_fork = os.fork
    monkeypatch.setattr(store.os, "fork", lambda: forks.append(1) or real_fork())
    monkeypatch.setattr(store, "WRITERS", [w for w in store.WRITERS if w.__name__ != "png_writer"])
    monkeypatch.setenv(store.WRITE_JOBS_ENV, "1")
    store.write_plan(demo_plan, tmp_path / "off")
    monkeypatch.delenv(store.WRITE_JOBS_ENV)

    errors = []

    def in_thread():
        try:
            store.write_plan(demo_plan, tmp_path / "thread")
        except BaseException as err:  # noqa: BLE001
            errors.append(err)

    worker = threading.Thread(target=in_thread)
    worker.start()
    worker.join()
    stop = threading.Event()
    idle = threading.Thread(target=stop.wait)
    idle.start()
    try:
        store.write_plan(demo_plan, tmp_path / "beside")
    finally:
        stop.set()
        idle.join()
    assert errors == [] and forks == []
    assert all((tmp_path / name / "points.kml").is_file() for name in ("off", "thread", "beside"))
    monkeypatch.setenv(store.WRITE_JOBS_ENV, "two")
    with pytest.raises(OptionError, match=store.WRITE_JOBS_ENV):
        store.write_plan(demo_plan, tmp_path / "bad")
    assert not (tmp_path / "bad").exists()


@pytest.mark.parametrize("n_points", [store.COST_POINTS, 200_000])
def test_split_is_within_grahams_bound_and_keeps_order(n_points):
    writers = store.WRITERS
    mine, theirs = store.split_writers(writers, n_points)
    assert mine + theirs != [] and sorted(map(id, mine + theirs)) == sorted(map(id, writers))
    assert all(w.__name__ in store.CHILD_WRITERS for w in theirs) and theirs
    assert mine == [w for w in writers if w in mine] and theirs == [w for w in writers if w in theirs]

    def cost(group):
        return sum(store.writer_cost(w, n_points) for w in group)

    fixed = [w for w in writers if w.__name__ not in store.CHILD_WRITERS]
    movable = [w for w in writers if w.__name__ in store.CHILD_WRITERS]
    best = min(
        max(cost(fixed) + cost(movable) - cost(group), cost(group))
        for k in range(len(movable) + 1)
        for group in itertools.combinations(movable, k)
    )
    # reference: Graham (1969), "Bounds on multiprocessing timing anomalies": longest
    # processing time first is within 4/3 - 1/(3m) of the best makespan (m = 2 machines).
    assert max(cost(mine), cost(theirs)) <= (4 / 3 - 1 / 6) * best + 1e-9


def test_small_core_plans_make_no_child_and_large_ones_share_the_tables():
    core = [w for w in store.WRITERS if store.FORMATS.get(w.__name__, "core") in (*store.CORE_FORMATS, "core")]
    # A small plan's tables take less than making a process would save.
    assert store.split_writers(core, 500) == (core, [])
    mine, theirs = store.split_writers(core, 30_000)
    names = {w.__name__ for w in theirs}
    assert theirs and names <= {"write_points_geojson", "write_points_csv", "write_cores_geojson"}
    assert "write_gpkg" in {w.__name__ for w in mine}  # the plan store stays with this process


def test_writes_serially_when_no_process_can_be_made(demo_plan, tmp_path, monkeypatch):
    def no_fork():
        raise BlockingIOError(errno.EAGAIN, "Resource temporarily unavailable")

    monkeypatch.delenv(store.WRITE_JOBS_ENV, raising=False)
    monkeypatch.setattr(store.os, "fork", no_fork)
    monkeypatch.setattr(store, "WRITERS", [w for w in store.WRITERS if w.__name__ != "png_writer"])
    store.write_plan(demo_plan, tmp_path / "plan")
    # reference: the writers' own file names (store.FORMATS), every one written
    assert {"map.html", "points.kml", "points.gpx", "plan.gpkg"} <= {
        p.name for p in (tmp_path / "plan").iterdir()
    }
