"""The plan folder: write a Plan atomically, load it back, and change it one writer at a time.

A plan folder holds one record, ``plan.gpkg``, and files derived from it
(points.csv, points.geojson, map.html, ...). Every change goes through
:func:`transaction` (or at least :func:`locked`): it holds the folder's lock
(:mod:`fieldplan.lock`) across read-modify-write, writes the changed layers into
a private copy of ``plan.gpkg`` (``mkstemp`` in the folder) that replaces the
original in one rename, and then rebuilds the derived files. ``plan.gpkg``
counts its changes (``store_generation`` in ``plan_info``); the hidden
``.fieldplan-state.json``, written after the derived files, carries the
generation they were made from, so a command that finds the two out of step (a
run killed between the two steps) rebuilds the derived files before it works.
A freshly planned folder has neither and counts as generation 1 on both sides.
"""

from __future__ import annotations

import gc
import importlib
import json
import os
import pickle
import re
import shutil
import signal
import sqlite3
import sys
import tempfile
import threading
from collections.abc import Callable, Iterator
from contextlib import closing, contextmanager
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from pathlib import Path

from fieldplan.errors import FieldplanError, OptionError, PlanDirError
from fieldplan.lock import PlanBusyError, plan_lock
from fieldplan.write.gpkg import GPKG_NAME, read_info, write_gpkg
from fieldplan.write.safe import staged_folder
from fieldplan.write.tables import (
    points_lonlat,
    shared_lonlat,
    write_manifest,
    write_points_csv,
    write_points_geojson,
    write_readme,
    write_summary_csv,
)

__all__ = [
    "WRITERS",
    "FORMATS",
    "CORE_FORMATS",
    "REQUIRED_FORMATS",
    "selected_formats",
    "write_plan",
    "split_writers",
    "WRITER_COST",
    "WRITER_FIXED",
    "writer_cost",
    "CHILD_WRITERS",
    "WRITE_JOBS_ENV",
    "WriterProcessError",
    "load_plan",
    "CORE_LAYERS",
    "GENERATION_KEY",
    "HISTORY_LAYERS",
    "PlanBusyError",
    "Transaction",
    "locked",
    "transaction",
    "store_generation",
    "outputs_generation",
    "rebuild_outputs",
    "rewrite_outputs",
    "plan_formats",
    "write_outputs",
    "refuse_links",
    "plan_history",
]

CORE_LAYERS = ("blocks", "points", "exclusions", "plan_info")


def _deferred(module: str, name: str) -> Callable:
    """A writer that imports its module when called: a ``--formats core`` plan never loads
    matplotlib, the map template or the XML writers."""

    def writer(plan, folder):
        return getattr(importlib.import_module(module), name)(plan, folder)

    writer.__name__ = writer.__qualname__ = name
    return writer


write_cores_geojson = _deferred("fieldplan.samples.outputs", "write_cores_geojson")
map_writer = _deferred("fieldplan.write.html_map", "map_writer")
gpx_writer = _deferred("fieldplan.write.gpx", "gpx_writer")
kml_writer = _deferred("fieldplan.write.kml", "kml_writer")
png_writer = _deferred("fieldplan.write.png", "png_writer")

#: Every writer takes ``(plan, folder)`` and writes its file(s) into ``folder``.
WRITERS: list[Callable] = [
    write_points_geojson,
    write_points_csv,
    write_summary_csv,
    write_manifest,
    write_readme,
    write_gpkg,
    map_writer,
    gpx_writer,
    kml_writer,
    png_writer,
    write_cores_geojson,
]


#: Format name of each writer (by function name), for ``write_plan(formats=...)``.
FORMATS: dict[str, str] = {
    "write_points_geojson": "geojson",
    "write_cores_geojson": "geojson",
    "write_points_csv": "csv",
    "write_summary_csv": "summary",
    "write_manifest": "manifest",
    "write_readme": "readme",
    "write_gpkg": "gpkg",
    "map_writer": "html",
    "gpx_writer": "gpx",
    "kml_writer": "kml",
    "png_writer": "png",
}
#: Always written: later commands reload the plan from plan.gpkg and recognise
#: a plan folder by manifest.json; the README carries the field cautions.
REQUIRED_FORMATS = ("manifest", "gpkg", "readme")
#: The tables and GIS files, without the printable page, map and GPS files.
CORE_FORMATS = ("geojson", "csv", "summary", "manifest", "gpkg", "readme")


def selected_formats(formats) -> set[str] | None:
    """Format names to write for a ``formats`` choice; ``None`` means every format."""
    if formats is None:
        return None
    wanted = {str(f).strip().lower() for f in formats if str(f).strip()}
    if "all" in wanted:
        return None
    if "core" in wanted:
        wanted = (wanted - {"core"}) | set(CORE_FORMATS)
    known = set(FORMATS.values())
    unknown = sorted(wanted - known)
    if unknown:
        raise OptionError(
            f"unknown output format(s) {', '.join(unknown)}; choose from all, core, "
            + ", ".join(sorted(known))
        )
    return wanted | set(REQUIRED_FORMATS)


def write_plan(
    plan, out_dir: str | Path, *, force: bool = False, formats=None, discard_history: bool = False
) -> Path:
    """Write the outputs of ``plan`` into ``out_dir``.

    Files are written into a temporary folder beside ``out_dir`` that replaces it
    only when complete, so an interrupted run never leaves half a plan. A
    non-empty ``out_dir`` is refused unless ``force``.

    ``formats`` (names from :data:`FORMATS`, or ``"core"`` / ``"all"``) picks
    the writers to run; ``None`` runs every one. Manifest, GeoPackage and README
    are always written, and a chosen subset is recorded in the manifest as
    ``formats``. Writers not listed in :data:`FORMATS` always run.

    A plan being replaced (``force``) that holds history (results, events,
    positions, crews, lab sheets: :func:`plan_history`) is never deleted unless
    ``discard_history``: it is moved aside to ``NAME.replaced-<UTC time>``,
    recorded in the new manifest as ``previous_plan``. The old folder's lock is
    held during the swap, so no change to it is lost half-way.
    """
    out_dir = Path(out_dir)
    chosen = selected_formats(formats)
    if chosen is not None:
        plan.meta["formats"] = sorted(chosen)
    # The lock alone (no consistency rebuild): the folder is being replaced, however broken.
    guard = plan_lock(out_dir) if force and (out_dir / GPKG_NAME).is_file() else _nothing()
    with guard:
        aside = None
        if force and not discard_history and plan_history(out_dir):
            aside = _aside_name(out_dir)
            plan.meta["previous_plan"] = aside.name
        with (
            staged_folder(out_dir, force=force, aside=aside) as stage,
            shared_lonlat(getattr(plan, "points", None)),
        ):
            _run_writers(plan, stage, _writers(chosen))
    return out_dir


def _writers(chosen: set[str] | None) -> list[Callable]:
    """The writers of the formats ``chosen`` (``None``: all); unlisted writers always run."""
    out = []
    for writer in WRITERS:
        kind = FORMATS.get(getattr(writer, "__name__", ""))
        if chosen is None or kind is None or kind in chosen:
            out.append(writer)
    return out


# --- writers side by side: the heavy optional writers in a forked child process ---

#: Seconds each writer took on a 1,000-block, 20,000-point plan, run one after another in
#: one process (imports included): the weights by which :func:`write_plan` splits the
#: writers between itself and a child process. Unlisted writers count as light.
WRITER_COST: dict[str, float] = {
    "write_points_geojson": 0.06,
    "write_points_csv": 0.05,
    "write_summary_csv": 0.01,
    "write_manifest": 0.0,
    "write_readme": 0.0,
    "write_gpkg": 0.08,
    "write_cores_geojson": 0.0,
    "map_writer": 0.39,
    "png_writer": 0.29,
    "kml_writer": 0.16,
    "gpx_writer": 0.05,
}
#: The part of :data:`WRITER_COST` a writer pays whatever the plan's size (its imports); the
#: rest grows with the number of points.
WRITER_FIXED: dict[str, float] = {"map_writer": 0.18, "png_writer": 0.08, "kml_writer": 0.01}
#: Points of the plan :data:`WRITER_COST` was measured on.
COST_POINTS = 20_000
#: A child is made only for at least this much work: making and collecting one costs a few
#: milliseconds, and a small plan's tables take less than that.
MIN_CHILD_SECONDS = 0.03
#: Writers that may run in the child: each only reads the plan and writes its own file.
CHILD_WRITERS = (
    "map_writer",
    "png_writer",
    "kml_writer",
    "gpx_writer",
    "write_points_geojson",
    "write_points_csv",
    "write_cores_geojson",
)
#: ``FIELDPLAN_WRITE_JOBS=1`` writes every file in this process, one after another.
WRITE_JOBS_ENV = "FIELDPLAN_WRITE_JOBS"


class WriterProcessError(FieldplanError, ChildProcessError):
    """The process writing some of a plan's files stopped without finishing (e.g. killed)."""


def writer_cost(writer: Callable, n_points: int = COST_POINTS) -> float:
    """Expected seconds of ``writer`` on a plan of ``n_points`` points (:data:`WRITER_COST`)."""
    name = getattr(writer, "__name__", "")
    total = WRITER_COST.get(name, 0.0)
    fixed = min(WRITER_FIXED.get(name, 0.0), total)
    return fixed + (total - fixed) * n_points / COST_POINTS


def split_writers(writers: list[Callable], n_points: int = COST_POINTS) -> tuple[list[Callable], list[Callable]]:
    """Split ``writers`` into (this process's, the child's), balanced by their expected cost
    on a plan of ``n_points`` points (:func:`writer_cost`).

    Only :data:`CHILD_WRITERS` may go to the child; the heaviest is placed first, each on
    the side with less work so far (longest processing time first). Both lists keep the
    order of ``writers``. The child's list is empty when its share would be under
    :data:`MIN_CHILD_SECONDS`.
    """
    name = lambda w: getattr(w, "__name__", "")  # noqa: E731
    cost = {id(w): writer_cost(w, n_points) for w in writers}
    movable = sorted((w for w in writers if name(w) in CHILD_WRITERS), key=lambda w: -cost[id(w)])
    load = [sum(cost[id(w)] for w in writers if name(w) not in CHILD_WRITERS), 0.0]
    to_child = set()
    for writer in movable:
        side = 1 if load[1] < load[0] else 0
        load[side] += cost[id(writer)]
        if side:
            to_child.add(id(writer))
    if load[1] < MIN_CHILD_SECONDS:
        return list(writers), []
    return [w for w in writers if id(w) not in to_child], [w for w in writers if id(w) in to_child]


def _write_jobs() -> int:
    """How many processes write a plan: 2 where a fork is safe and helps, else 1."""
    value = os.environ.get(WRITE_JOBS_ENV, "").strip()
    if value:
        try:
            wanted = int(value)
        except ValueError:
            raise OptionError(
                f"{WRITE_JOBS_ENV}={value!r}: give a whole number (1 writes every file in one process)"
            ) from None
        if wanted <= 1:
            return 1
    # A fork copies only the calling thread: with other threads about (the web workspace's
    # workers, a progress bar) a lock one of them holds could never be released in the child.
    if not sys.platform.startswith("linux") or threading.current_thread() is not threading.main_thread():
        return 1
    if threading.active_count() != 1 or len(os.sched_getaffinity(0)) < 2:
        return 1
    return 2


def _run_writers(plan, stage: Path, writers: list[Callable]) -> None:
    """Run ``writers`` into ``stage``: the heavy ones in a forked child while this process
    runs the rest (see :func:`split_writers`), or all here, one after another."""
    points = getattr(plan, "points", None)
    n_points = COST_POINTS if points is None else len(points)
    mine, theirs = split_writers(writers, n_points) if _write_jobs() > 1 else (writers, [])
    if not theirs:
        for writer in writers:
            writer(plan, stage)
        return
    if points is not None:
        points_lonlat(points)  # projected once, before the fork, for the writers on both sides
    _flush()  # else text buffered before the fork could be printed twice
    with _frozen_objects():
        read_end, write_end = os.pipe()
        parent = os.getpid()
        try:
            pid = os.fork()
        except OSError:  # no process to spare (EAGAIN, ENOMEM): write here, one after another
            os.close(read_end)
            os.close(write_end)
            pid = None
        else:
            if pid == 0:  # the child: never returns
                os.close(read_end)
                _child_writes(plan, stage, theirs, write_end, parent)
            os.close(write_end)
            report, status = _beside_child(plan, stage, mine, pid, read_end)
    if pid is None:
        for writer in writers:
            writer(plan, stage)
        return
    _raise_child_failure(report, status, stage, theirs)


@contextmanager
def _frozen_objects() -> Iterator[None]:
    """Keep the objects made so far out of the collector's view while the writer child runs.

    A collection writes into every object it scans, and each page so touched would be
    copied for the process that touched it (``gc.freeze``, Python docs). Objects an
    application froze itself stay as it left them.
    """
    froze = gc.get_freeze_count() == 0
    if froze:
        gc.freeze()
    try:
        yield
    finally:
        if froze:
            gc.unfreeze()


def _beside_child(plan, stage: Path, writers: list[Callable], pid: int, pipe: int) -> tuple[bytes, int]:
    """Run ``writers`` here, then collect the child's report and exit status."""
    try:
        for writer in writers:
            writer(plan, stage)
        with os.fdopen(pipe, "rb") as stream:
            pipe = None
            report = stream.read()
        _, status = os.waitpid(pid, 0)
        pid = None
    finally:
        if pipe is not None:
            os.close(pipe)
        if pid is not None:
            # This process failed (or was interrupted): stop the child before the staging
            # folder is removed, so it cannot write into it (or make it again) afterwards.
            os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
    return report, status


def _child_writes(plan, stage: Path, writers: list[Callable], pipe: int, parent: int) -> None:
    """In the forked child: run ``writers``, report through ``pipe``, leave with ``os._exit``."""
    code = 1
    try:
        _die_with(parent)
        try:
            for writer in writers:
                writer(plan, stage)
        except BaseException as err:  # noqa: BLE001 - every failure goes back to the parent
            report = _error_report(err)
        else:
            report = pickle.dumps(("ok",))
        with os.fdopen(pipe, "wb") as out:
            out.write(report)
        code = 0
    finally:
        # Never return into the caller's code: its cleanup (the staging folder's swap or
        # removal, atexit hooks) belongs to the parent alone.
        _flush()
        os._exit(code)


def _flush() -> None:
    for stream in (sys.stdout, sys.stderr):
        try:
            if stream is not None:
                stream.flush()
        except (OSError, ValueError):  # a closed or broken stream: nothing to keep
            pass


def _die_with(parent: int) -> None:
    """Have Linux kill this child when the parent dies, so it never writes into a removed stage."""
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, signal.SIGKILL)  # PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass
    if os.getppid() != parent:  # the parent died before the request took effect
        os._exit(1)


def _error_report(err: BaseException) -> bytes:
    """The child's exception as pickled bytes; its class name and message if it cannot travel."""
    import traceback

    trace = "".join(traceback.format_exception(err))
    try:
        report = pickle.dumps(("error", err, trace))
        pickle.loads(report)
        return report
    except Exception:  # noqa: BLE001 - an exception that does not pickle or unpickle
        kind = f"{type(err).__module__}:{type(err).__qualname__}"
        return pickle.dumps(("failed", kind, str(err), trace))


def _raise_child_failure(report: bytes, status: int, stage: Path, writers: list[Callable]) -> None:
    """Raise what the child reported: its own exception, or a :class:`WriterProcessError`."""
    names = ", ".join(getattr(w, "__name__", "?") for w in writers)
    try:
        message = pickle.loads(report) if report else None
    except Exception:  # noqa: BLE001 - a report cut short
        message = None
    if os.WIFEXITED(status) and os.WEXITSTATUS(status) == 0 and message == ("ok",):
        return
    if isinstance(message, tuple) and message and message[0] in ("error", "failed"):
        err = message[1] if message[0] == "error" else _rebuild(message[1], message[2])
        if not isinstance(err, FieldplanError):
            # An unexpected error: where it happened, as the traceback a serial run would show.
            err.add_note(f"raised in the writer process ({names}):\n{message[-1]}")
        raise err
    how = (
        f"was killed by signal {signal.Signals(os.WTERMSIG(status)).name}"
        if os.WIFSIGNALED(status)
        else f"stopped with exit code {os.waitstatus_to_exitcode(status)}"
    )
    raise WriterProcessError(
        f"{stage}: the process writing {names} {how} (out of memory?); nothing was written: "
        f"retry, or set {WRITE_JOBS_ENV}=1 to write every file in one process"
    )


def _rebuild(kind: str, text: str) -> BaseException:
    """An exception of class ``kind`` ("module:qualname") with message ``text``, if it can be made."""
    module, _, qualname = kind.partition(":")
    try:
        cls = importlib.import_module(module)
        for part in qualname.split("."):
            cls = getattr(cls, part)
        if isinstance(cls, type) and issubclass(cls, BaseException):
            # Not cls(text): its constructor may want other arguments or reword the message.
            err = cls.__new__(cls)
            err.args = (text,)
            str(err)
            return err
    except Exception:  # noqa: BLE001 - a class that cannot be rebuilt from its message
        pass
    return RuntimeError(f"{kind.replace(':', '.')}: {text}")


def plan_formats(plan) -> set[str] | None:
    """The formats a plan was written with (its manifest's ``formats``); ``None`` for all."""
    chosen = (getattr(plan, "meta", None) or {}).get("formats")
    return set(chosen) | set(REQUIRED_FORMATS) if chosen else None


@contextmanager
def _nothing():
    yield


def _aside_name(out_dir: Path) -> Path:
    stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    aside = out_dir.with_name(f"{out_dir.name}.replaced-{stamp}")
    k = 2
    while aside.exists():
        aside = out_dir.with_name(f"{out_dir.name}.replaced-{stamp}-{k}")
        k += 1
    return aside


#: Layers of plan.gpkg that record what happened after planning.
HISTORY_LAYERS = ("results", "events", "actual", "routes")
_HISTORY_FILES = ("crews.csv", "lab_submission*.csv", "labels*.pdf", "positions.csv", "field_records.jsonl")


def plan_history(plan_dir: str | Path) -> list[str]:
    """What a plan folder holds beyond the plan itself: layers and files a re-plan would lose."""
    plan_dir = Path(plan_dir)
    found: list[str] = []
    gpkg = plan_dir / GPKG_NAME
    if gpkg.is_file() and not gpkg.is_symlink():
        try:
            # The GeoPackage's own table of contents (OGC 12-128r18, gpkg_contents): what
            # pyogrio.list_layers lists, without opening the file through GDAL.
            with closing(sqlite3.connect(f"{gpkg.resolve().as_uri()}?mode=ro", uri=True)) as db:
                names = {row[0] for row in db.execute("SELECT table_name FROM gpkg_contents")}
        except Exception:  # noqa: BLE001 - an unreadable store is kept as history too
            return [GPKG_NAME]
        found += [f"{name} layer" for name in HISTORY_LAYERS if name in names]
    for pattern in _HISTORY_FILES:
        found += sorted(p.name for p in plan_dir.glob(pattern))
    return found


def load_plan(plan_dir: str | Path, *, check: bool = True):
    """Load a plan folder written by :func:`write_plan` (reads ``plan.gpkg``).

    With ``check`` (the default) derived files found out of step with the
    store are rebuilt first, under the folder's lock (see :func:`locked`).
    """
    if check:
        _bring_in_step(Path(plan_dir))
    return _read_plan(plan_dir)


def _read_plan(plan_dir: str | Path):
    import geopandas as gpd
    import pyogrio
    from pyproj import CRS

    from fieldplan.planning.plan import Plan

    plan_dir = Path(plan_dir)
    path = plan_dir / GPKG_NAME
    if not path.is_file():
        raise PlanDirError(f"{plan_dir}: no {GPKG_NAME} here; give a folder made by 'fieldplan plan'")
    try:
        names = [row[0] for row in pyogrio.list_layers(path)]
        info = read_info(path)
        blocks = gpd.read_file(path, layer="blocks", engine="pyogrio")
        blocks = blocks.set_geometry(_single_parts(blocks.geometry.values), crs=blocks.crs)
        points = gpd.read_file(path, layer="points", engine="pyogrio")
        exclusions = gpd.read_file(path, layer="exclusions", engine="pyogrio")
        exclusions = exclusions.set_geometry(_single_parts(exclusions.geometry.values), crs=exclusions.crs)
        layers = {}
        for name in names:
            if name in CORE_LAYERS:
                continue
            frame = pyogrio.read_dataframe(path, layer=name)
            layers[name] = frame
    except Exception as err:
        raise PlanDirError(f"{path}: cannot read the plan ({err}); re-run 'fieldplan plan'") from None
    params = info.pop("parameters", {})
    # Bookkeeping of the store, not part of the plan (the manifest must not change with it).
    info.pop(GENERATION_KEY, None)
    crs = CRS.from_user_input(blocks.crs)
    blocks["flags"] = blocks["flags"].fillna("") if "flags" in blocks else ""
    return Plan(blocks, points, exclusions.set_crs(crs, allow_override=True), crs, params, info, layers)


def _single_parts(geoms):
    """The blocks layer stores every block as MultiPolygon; give one-part blocks back as Polygon.

    A reloaded plan then writes the same files as the plan that was saved.
    """
    import numpy as np
    import shapely

    geoms = np.asarray(geoms, dtype=object).copy()
    one = (shapely.get_type_id(geoms) == 6) & (shapely.get_num_geometries(geoms) == 1)
    geoms[one] = shapely.get_geometry(geoms[one], 0)
    return geoms


# --- changing a plan folder: one writer at a time, derived files in step with the store ---

GENERATION_KEY = "store_generation"
#: Layers of plan.gpkg the derived files do not show (the audit trail and the points as planned).
_RECORD_ONLY_LAYERS = ("events", "points_planned")
#: Layers whose change alone leaves every derived file as it was (no writer reads them).
RECORD_ONLY_LAYERS = ("events", "points_planned", "results", "results_removed")
_TMP = re.compile(r"^\..+\.(?P<pid>\d+)\.[^.]+\.(?:tmp|stage|tmp\.gpkg)$")
# Temporary names used before the store had a lock; only ever debris now.
_LEGACY_TMP = re.compile(r"^\.(?:results|crews)-tmp-plan\.gpkg$|^\.plan\.[^.]+\.gpkg$")


STATE_NAME = ".fieldplan-state.json"


def store_generation(plan_dir: str | Path) -> int:
    """How many changes ``plan.gpkg`` has recorded (1 as planned, and for older plans)."""
    path = Path(plan_dir) / GPKG_NAME
    try:
        con = sqlite3.connect(f"{path.resolve().as_uri()}?mode=ro", uri=True)
    except sqlite3.Error:
        return 1
    try:
        row = con.execute("SELECT value FROM plan_info WHERE key = ?", (GENERATION_KEY,)).fetchone()
    except sqlite3.Error:
        return 1
    finally:
        con.close()
    try:
        return int(json.loads(row[0])) if row else 1
    except (TypeError, ValueError):
        return 1


def outputs_generation(plan_dir: str | Path) -> int:
    """The store generation the derived files were made from (1 if never changed)."""
    try:
        state = json.loads((Path(plan_dir) / STATE_NAME).read_text(encoding="utf-8"))
        return int(state[GENERATION_KEY])
    except FileNotFoundError:
        return 1
    except (OSError, ValueError, KeyError, TypeError):
        return 0  # unreadable: rebuild


def _out_of_step(plan_dir: Path) -> bool:
    return store_generation(plan_dir) != outputs_generation(plan_dir)


def _bring_in_step(plan_dir: Path) -> None:
    if (plan_dir / GPKG_NAME).is_file() and _out_of_step(plan_dir):
        with locked(plan_dir):
            pass  # locked() rebuilds under the lock, after checking again


def refuse_links(plan_dir: str | Path) -> None:
    """Refuse a plan folder any of whose own files or folders is a symbolic link, naming them.

    A plan folder may arrive by e-mail or in a zip and be processed by a
    privileged account; a planted link would make a write land outside it.
    """
    plan_dir = Path(plan_dir)
    links = []
    for root, dirs, files in os.walk(plan_dir):
        for name in dirs + files:
            path = Path(root) / name
            if path.is_symlink():
                links.append(path)
    if links:
        shown = ", ".join(str(p.relative_to(plan_dir)) for p in links[:5])
        more = f" and {len(links) - 5} more" if len(links) > 5 else ""
        raise PlanDirError(
            f"{plan_dir}: holds symbolic links ({shown}{more}); a plan folder's own files must not be "
            "links: delete them (or copy the real files in) and retry"
        )


def _clean_debris(plan_dir: Path) -> list[Path]:
    """Remove temporary files and staging folders of killed runs (called under the lock)."""
    from fieldplan.write.safe import _pid_alive, clean_stale_stages

    removed = clean_stale_stages(plan_dir)
    for entry in plan_dir.iterdir():
        match = _TMP.match(entry.name)
        if (match is not None and not _pid_alive(int(match["pid"]))) or _LEGACY_TMP.match(entry.name):
            _remove(entry)
            removed.append(entry)
    # Staging folders of 'mark' before the store had a lock sat beside the plan folder.
    for entry in plan_dir.parent.glob(f".{plan_dir.name}.*.mark"):
        _remove(entry)
        removed.append(entry)
    return removed


def _remove(entry: Path) -> None:
    if entry.is_dir() and not entry.is_symlink():
        shutil.rmtree(entry, ignore_errors=True)
    else:
        entry.unlink(missing_ok=True)


_active = threading.local()


@contextmanager
def locked(plan_dir: str | Path, *, timeout: float | None = None) -> Iterator[Path]:
    """Hold a plan folder's write lock, with the folder checked and consistent; yield the folder.

    On entry (the outermost one in this thread): refuses a folder holding
    symbolic links (:func:`refuse_links`), removes debris of killed runs and
    rebuilds derived files found out of step with ``plan.gpkg``. Re-entrant in
    one thread; other threads and processes wait up to ``timeout`` seconds,
    then :class:`~fieldplan.lock.PlanBusyError` ("plan is busy, retry").
    """
    from fieldplan.lock import holds_lock

    plan_dir = Path(plan_dir)
    if not (plan_dir / GPKG_NAME).is_file():
        raise PlanDirError(f"{plan_dir}: no {GPKG_NAME} here; give a folder made by 'fieldplan plan'")
    outer = not holds_lock(plan_dir)
    with plan_lock(plan_dir, timeout=timeout):
        if outer:
            refuse_links(plan_dir)
            _clean_debris(plan_dir)
            if _out_of_step(plan_dir):
                rebuild_outputs(plan_dir)
        yield plan_dir


@dataclass
class Transaction:
    """An open change of a plan folder (see :func:`transaction`).

    Attributes
    ----------
    plan_dir : pathlib.Path
    plan : fieldplan.plan.Plan
        The plan as stored when the transaction began (read under the lock).
    """

    plan_dir: Path
    plan: object
    _edits: list = field(default_factory=list, repr=False)
    _files: dict = field(default_factory=dict, repr=False)
    _layers: set = field(default_factory=set, repr=False)
    committed: int | None = None
    #: The plan as the derived files of this change should show it; by default the
    #: stored plan read back after the commit (what a rebuild after a crash gives).
    view: object = None

    def set_layer(self, name: str, frame, *, geometry_type: str | None = None) -> None:
        """Replace (or add) layer ``name`` of plan.gpkg with ``frame`` at commit."""
        from fieldplan.write.gpkg import write_layer

        self.edit(lambda path: write_layer(path, name, frame, geometry_type=geometry_type), layers=(name,))

    def edit(self, change: Callable[[Path], object], *, layers: tuple[str, ...] | None = None) -> None:
        """Run ``change(path)`` on the private copy of plan.gpkg at commit (e.g. an append).

        ``layers`` names the layers it changes; unnamed, it is taken to change what the
        derived files show, so they are rebuilt.
        """
        self._check_open()
        self._edits.append(change)
        self._layers.update(layers if layers is not None else ("?",))

    def write_file(self, name: str, text: str | bytes) -> None:
        """Write a further derived file (e.g. positions.csv) with the rebuilt ones at commit."""
        self._check_open()
        self._files[name] = text

    def _check_open(self) -> None:
        if self.committed is not None:
            raise RuntimeError("this plan transaction is already committed")

    def commit(self) -> int:
        """Store the changes in one rename of plan.gpkg, then rebuild the derived files.

        Returns the new store generation. Called by :func:`transaction` on a normal
        exit if not called before; the lock stays held until the ``with`` ends.
        """
        self._check_open()
        if not self._edits and not self._files:
            self.committed = store_generation(self.plan_dir)
            return self.committed
        generation = self._swap_store() if self._edits else store_generation(self.plan_dir)
        if self._layers <= set(RECORD_ONLY_LAYERS) and not self._files and self.view is None:
            # Nothing the derived files show changed (a results round, an event): they are
            # in step with the new generation as they are.
            _write_state(self.plan_dir, generation)
        else:
            view = self.view if self.view is not None else _outputs_view(_read_plan(self.plan_dir))
            write_outputs(view, self.plan_dir, generation, extra=self._files)
        self.committed = generation
        return generation

    def _swap_store(self) -> int:
        gpkg = self.plan_dir / GPKG_NAME
        before = os.stat(gpkg)
        # GDAL wants a .gpkg ending; the process id lets a later run tell debris from a live copy.
        fd, name = tempfile.mkstemp(prefix=f".{GPKG_NAME}.{os.getpid()}.", suffix=".tmp.gpkg", dir=self.plan_dir)
        tmp = Path(name)
        try:
            with os.fdopen(fd, "wb") as out, open(gpkg, "rb") as src:
                shutil.copyfileobj(src, out, 1 << 20)
            for change in self._edits:
                change(tmp)
            generation = _bump_generation(tmp)
            _keep_owner_and_mode(tmp, before)
            _fsync(tmp)
            os.replace(tmp, gpkg)
        except BaseException:
            tmp.unlink(missing_ok=True)
            raise
        _fsync(self.plan_dir)
        return generation


@contextmanager
def transaction(plan_dir: str | Path, *, timeout: float | None = None) -> Iterator[Transaction]:
    """Change a plan folder: lock it, load the plan, and commit the changes atomically on exit.

    Examples
    --------
    >>> with transaction("plan-2027") as txn:  # doctest: +SKIP
    ...     events = read_events(...)          # read under the lock
    ...     txn.set_layer("notes", frame)      # staged on a private copy
    ...                                        # committed here: one rename, files rebuilt

    An exception inside the block leaves the folder as it was. A transaction
    opened inside another one on the same folder in the same thread joins it
    (one commit, at the outer end), so library functions that open their own
    can be combined into one change.
    """
    plan_dir = Path(plan_dir)
    key = os.path.realpath(plan_dir)
    txns = getattr(_active, "txns", None)
    if txns is None:
        txns = _active.txns = {}
    if key in txns:
        yield txns[key]
        return
    with locked(plan_dir, timeout=timeout):
        txn = Transaction(plan_dir, _read_plan(plan_dir))
        txns[key] = txn
        try:
            yield txn
            if txn.committed is None:
                txn.commit()
        finally:
            del txns[key]


def _bump_generation(path: Path) -> int:
    """Count one more change in the copy's ``plan_info`` (plain SQL on an attribute table)."""
    con = sqlite3.connect(path)
    try:
        with con:
            row = con.execute("SELECT value FROM plan_info WHERE key = ?", (GENERATION_KEY,)).fetchone()
            current = int(json.loads(row[0])) if row else 1
            if row:
                con.execute(
                    "UPDATE plan_info SET value = ? WHERE key = ?", (json.dumps(current + 1), GENERATION_KEY)
                )
            else:
                con.execute(
                    "INSERT INTO plan_info (key, value) VALUES (?, ?)", (GENERATION_KEY, json.dumps(current + 1))
                )
    finally:
        con.close()
    return current + 1


def _keep_owner_and_mode(path: Path, before: os.stat_result) -> None:
    # mkstemp makes an owner-only file; the store keeps the mode (and, run as root, the owner) it had.
    if hasattr(os, "chown") and os.geteuid() == 0:
        try:
            os.chown(path, before.st_uid, before.st_gid)
        except OSError:
            pass
    os.chmod(path, before.st_mode & 0o7777)


def _fsync(path: Path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _outputs_view(plan):
    """The plan as the derived files show it: without the audit-trail layers."""
    layers = {k: v for k, v in plan.layers.items() if k not in _RECORD_ONLY_LAYERS}
    return replace(plan, layers=layers)


def write_outputs(plan, plan_dir: str | Path, generation: int, *, extra: dict | None = None) -> None:
    """Re-write the derived files of ``plan_dir`` from ``plan`` (its formats' writers but plan.gpkg).

    Files are written into a staging folder inside the plan folder and moved in
    one by one; then ``.fieldplan-state.json`` records ``generation``. Until it
    does, the folder reads as out of step and the next command rebuilds.
    ``extra`` maps further file names to their text or bytes.
    """
    from fieldplan.write.gpkg import write_gpkg

    plan_dir = Path(plan_dir)
    stage = Path(tempfile.mkdtemp(prefix=f".{plan_dir.name}.{os.getpid()}.", suffix=".stage", dir=plan_dir))
    try:
        with shared_lonlat(getattr(plan, "points", None)):
            # Only the formats the plan was written with: a --formats core plan stays core.
            for writer in _writers(plan_formats(plan)):
                if writer is not write_gpkg:
                    writer(plan, stage)
        extra = dict(extra or {})
        actual = plan.layers.get("actual")
        if actual is not None and len(actual):
            from fieldplan.field.record import POSITIONS_NAME, positions_text

            extra.setdefault(POSITIONS_NAME, positions_text(actual))
        for name, data in extra.items():
            (stage / name).write_bytes(data.encode("utf-8") if isinstance(data, str) else data)
        for path in sorted(p for p in stage.rglob("*") if p.is_file()):
            target = plan_dir / path.relative_to(stage)
            target.parent.mkdir(parents=True, exist_ok=True)
            if target.exists() and not target.is_symlink():
                os.chmod(path, os.stat(target).st_mode & 0o7777)
            else:
                os.chmod(path, 0o666 & ~_umask())
            os.replace(path, target)
    finally:
        shutil.rmtree(stage, ignore_errors=True)
    _write_state(plan_dir, generation)


def _write_state(plan_dir: Path, generation: int) -> None:
    from fieldplan.write.safe import atomic_write_text

    atomic_write_text(Path(plan_dir) / STATE_NAME, json.dumps({GENERATION_KEY: int(generation)}) + "\n")


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def rewrite_outputs(plan, plan_dir: str | Path) -> int:
    """Re-write the derived files of ``plan_dir`` from ``plan`` (call under :func:`locked`).

    Honours the formats the plan was written with (``plan.meta["formats"]``);
    plan.gpkg is not touched. Returns the store generation recorded.
    """
    generation = store_generation(plan_dir)
    write_outputs(plan, plan_dir, generation)
    return generation


def rebuild_outputs(plan_dir: str | Path) -> int:
    """Re-write the derived files from plan.gpkg (call under :func:`locked`); return the generation."""
    plan_dir = Path(plan_dir)
    generation = store_generation(plan_dir)
    write_outputs(_outputs_view(_read_plan(plan_dir)), plan_dir, generation)
    return generation
