"""The workspace: a folder of plan folders (what ``fieldplan plan --out`` writes).

Plan names come from URLs and forms, so they are checked before they touch the
file system: :func:`plan_dir` accepts only a plain name (letters, digits, ``-``,
``_``, ``.``, no leading dot, no ``..``) and returns a path that resolves inside
the workspace. Nothing else turns user text into a path.
"""

from __future__ import annotations

import json
import re
import sqlite3
import threading
from dataclasses import dataclass
from pathlib import Path

from fieldplan.errors import FieldplanError

__all__ = [
    "PLAN_NAME",
    "WebError",
    "check_plan_name",
    "plan_dir",
    "existing_plan_dir",
    "list_plans",
    "plan_summary",
    "plan_lock",
]

#: A plan name: 1-64 characters, starts with a letter or digit; no separators, no "..".
PLAN_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")


class WebError(FieldplanError):
    """An error answered to a web client: HTTP status, message, and the parameter at fault."""

    def __init__(
        self, status: int, message: str, *, parameter: str | None = None, extra: dict | None = None
    ) -> None:
        super().__init__(message)
        self.status = status
        self.parameter = parameter
        self.extra = dict(extra or {})


def check_plan_name(name: str, *, parameter: str = "name") -> str:
    """Return ``name`` if it is a valid plan name, else raise :class:`WebError` (400)."""
    if not isinstance(name, str) or not PLAN_NAME.match(name) or ".." in name:
        raise WebError(
            400,
            f"plan name {name!r} is not allowed: use 1-64 letters, digits, '-', '_' or '.', "
            "starting with a letter or digit (e.g. 2027-soil)",
            parameter=parameter,
        )
    return name


def plan_dir(workspace: Path, name: str, *, parameter: str = "name") -> Path:
    """The folder of plan ``name`` inside ``workspace`` (which need not exist yet)."""
    check_plan_name(name, parameter=parameter)
    root = Path(workspace).resolve()
    path = (root / name).resolve()
    # A planted symbolic link must not lead outside the workspace.
    if path.parent != root:
        raise WebError(400, f"plan {name!r} is not a folder of this workspace", parameter=parameter)
    return path


def existing_plan_dir(workspace: Path, name: str, *, parameter: str = "name") -> Path:
    """Like :func:`plan_dir`, and the folder must hold a plan (404 otherwise)."""
    path = plan_dir(workspace, name, parameter=parameter)
    if not (path / "plan.gpkg").is_file() or not (path / "manifest.json").is_file():
        raise WebError(404, f"no plan named {name!r} in this workspace", parameter=parameter)
    return path


_LOCKS: dict[str, threading.RLock] = {}
_LOCKS_GUARD = threading.Lock()


def plan_lock(path: Path) -> threading.RLock:
    """One lock per plan folder in this process: changes to one plan run one at a time.

    The library's own folder lock covers other processes (the CLI); this one keeps
    two browser requests from reading the same state and writing over each other.
    """
    key = str(Path(path).resolve())
    with _LOCKS_GUARD:
        return _LOCKS.setdefault(key, threading.RLock())


@dataclass(frozen=True)
class _Stamp:
    mtimes: tuple


_SUMMARIES: dict[str, tuple[_Stamp, dict]] = {}


def _stamp(path: Path) -> _Stamp:
    names = ("manifest.json", "plan.gpkg", "crews.csv", "estimates.csv")
    out = []
    for n in names:
        try:
            st = (path / n).stat()
            out.append((n, st.st_mtime_ns, st.st_size))
        except OSError:
            out.append((n, None, None))
    return _Stamp(tuple(out))


def _gpkg_facts(path: Path) -> dict:
    """Rounds of results and marked points, read straight from the GeoPackage (no geometry)."""
    facts = {"rounds": 0, "inaccessible": 0, "events": 0, "spares": 0}
    try:
        con = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=2.0)
    except sqlite3.Error:
        return facts
    try:
        tables = {r[0] for r in con.execute("SELECT table_name FROM gpkg_contents")}
        if "results" in tables:
            facts["rounds"] = int(
                con.execute('SELECT COUNT(DISTINCT "round") FROM results').fetchone()[0] or 0
            )
        if "events" in tables:
            facts["events"] = int(con.execute("SELECT COUNT(*) FROM events").fetchone()[0] or 0)
        if "points" in tables:
            cols = {r[1] for r in con.execute("PRAGMA table_info(points)")}
            if "status" in cols:
                counts = dict(con.execute("SELECT status, COUNT(*) FROM points GROUP BY status").fetchall())
                facts["inaccessible"] = int(counts.get("inaccessible", 0))
                facts["spares"] = int(counts.get("spare", 0))
    except sqlite3.Error:
        pass
    finally:
        con.close()
    return facts


def _last_estimate(path: Path) -> dict | None:
    import csv

    try:
        with (path / "estimates.csv").open(encoding="utf-8", newline="") as handle:
            rows = list(csv.DictReader(handle))
    except (OSError, csv.Error, UnicodeDecodeError):
        return None
    if not rows:
        return None
    overall = next((r for r in rows if r.get("group") == "all"), rows[-1])
    return {
        "variable": overall.get("variable", ""),
        "round": overall.get("round", ""),
        "group": overall.get("group", ""),
        "mean": overall.get("mean", ""),
        "lower": overall.get("lower", ""),
        "upper": overall.get("upper", ""),
    }


def _crews(path: Path) -> int:
    try:
        with (path / "crews.csv").open(encoding="utf-8") as handle:
            return max(0, sum(1 for line in handle if line.strip()) - 1)
    except OSError:
        return 0


def plan_summary(path: Path) -> dict:
    """What the home page shows of one plan folder (cached until its files change)."""
    path = Path(path)
    stamp = _stamp(path)
    cached = _SUMMARIES.get(str(path))
    if cached is not None and cached[0] == stamp:
        return dict(cached[1])
    manifest = json.loads((path / "manifest.json").read_text(encoding="utf-8"))
    params = manifest.get("parameters", {}) or {}
    counts = manifest.get("counts", {}) or {}
    facts = _gpkg_facts(path / "plan.gpkg")
    summary = {
        "name": path.name,
        "plan_id": params.get("plan_id") or manifest.get("plan_id"),
        "design": params.get("design", ""),
        "purpose": params.get("purpose", "general"),
        "seed": manifest.get("seed", params.get("seed")),
        "blocks": counts.get("blocks"),
        "points": counts.get("points"),
        "created_utc": manifest.get("created_utc", ""),
        "input_file": Path(str(manifest.get("input_file") or "")).name,
        "crews": _crews(path),
        "rounds": facts["rounds"],
        "inaccessible": facts["inaccessible"],
        "spares": facts["spares"],
        "last_estimate": _last_estimate(path),
    }
    _SUMMARIES[str(path)] = (stamp, summary)
    return dict(summary)


def list_plans(workspace: Path) -> list[dict]:
    """Summaries of every plan folder in ``workspace``, newest first (then by name)."""
    root = Path(workspace)
    out = []
    for child in root.iterdir() if root.is_dir() else ():
        if not PLAN_NAME.match(child.name) or not child.is_dir() or child.is_symlink():
            continue
        if not (child / "manifest.json").is_file() or not (child / "plan.gpkg").is_file():
            continue
        try:
            out.append(plan_summary(child))
        except (OSError, ValueError):
            continue  # a folder being rewritten this instant: listed on the next visit
    out.sort(key=lambda s: s["name"])
    out.sort(key=lambda s: str(s.get("created_utc") or ""), reverse=True)
    return out
