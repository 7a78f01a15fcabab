"""The ``events`` table of plan.gpkg: an append-only record of changes made in the field.

Every ``fieldplan mark`` adds rows; nothing ever removes or edits one, so the
table is the audit trail of which points were given up, why, by whom, when, and
what replaced them. A restore is a new row, not a deletion.

The table is a GeoPackage attribute table (``gpkg_contents.data_type =
'attributes'``, OGC GeoPackage 1.3 §2.4) written through GDAL, which keeps
``gpkg_contents`` consistent.
"""

from __future__ import annotations

import getpass
import os
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from fieldplan.errors import OptionError, PlanDirError

__all__ = [
    "EVENTS_LAYER",
    "EVENT_COLUMNS",
    "ACTIONS",
    "INACCESSIBLE",
    "RESTORE",
    "REMOVE_ROUND",
    "current_user",
    "make_events",
    "read_events",
    "stored_events",
    "number_events",
    "write_numbered_events",
    "append_events",
]

EVENTS_LAYER = "events"
EVENT_COLUMNS = ("event_id", "time_utc", "user", "action", "point_id", "replacement_id", "reason")
INACCESSIBLE = "inaccessible"
RESTORE = "restore"
#: A results round taken out with ``fieldplan results --remove-round`` (point_id empty).
REMOVE_ROUND = "remove-round"
ACTIONS = (INACCESSIBLE, RESTORE, REMOVE_ROUND)


def current_user(by: str | None = None) -> str:
    """Who is recording: ``by`` if given, else ``$USER``, else the login name."""
    if by:
        return str(by)
    name = os.environ.get("USER") or os.environ.get("USERNAME")
    if name:
        return name
    try:
        return getpass.getuser()
    except Exception:  # noqa: BLE001 - no login name in some containers
        return "unknown"


def _empty() -> pd.DataFrame:
    frame = pd.DataFrame({c: pd.Series(dtype=object) for c in EVENT_COLUMNS})
    frame["event_id"] = frame["event_id"].astype("int64")
    return frame


def make_events(
    actions: list[str],
    point_ids: list[str],
    *,
    replacement_ids: list[str | None] | None = None,
    reason: str = "",
    user: str | None = None,
    now: datetime | None = None,
) -> pd.DataFrame:
    """Build new event rows (``event_id`` is assigned by :func:`append_events`)."""
    for action in actions:
        if action not in ACTIONS:
            raise OptionError(f"event action must be one of {', '.join(ACTIONS)}; got {action!r}")
    moment = (now or datetime.now(UTC)).astimezone(UTC).replace(microsecond=0)
    stamp = moment.isoformat().replace("+00:00", "Z")
    replacements = replacement_ids if replacement_ids is not None else [None] * len(point_ids)
    return pd.DataFrame(
        {
            "event_id": pd.Series([0] * len(point_ids), dtype="int64"),
            "time_utc": stamp,
            "user": current_user(user),
            "action": list(actions),
            "point_id": [str(p) for p in point_ids],
            "replacement_id": ["" if r is None else str(r) for r in replacements],
            "reason": str(reason or ""),
        },
        columns=list(EVENT_COLUMNS),
    )


def _typed(frame: pd.DataFrame) -> pd.DataFrame:
    frame = frame[list(EVENT_COLUMNS)].copy()
    frame["event_id"] = frame["event_id"].astype("int64")
    for column in EVENT_COLUMNS[1:]:
        frame[column] = frame[column].fillna("").astype(str).astype(object)
    return frame.sort_values("event_id", kind="stable").reset_index(drop=True)


def read_events(gpkg: str | Path) -> pd.DataFrame:
    """The events table in recording order; empty (with its columns) if none was recorded yet."""
    import pyogrio

    gpkg = Path(gpkg)
    if not gpkg.is_file():
        raise PlanDirError(f"{gpkg}: no plan.gpkg; give a folder made by 'fieldplan plan'")
    if EVENTS_LAYER not in {row[0] for row in pyogrio.list_layers(gpkg)}:
        return _empty()
    return _typed(pyogrio.read_dataframe(gpkg, layer=EVENTS_LAYER, read_geometry=False))


def stored_events(plan) -> pd.DataFrame:
    """The events table of a loaded plan (``Plan.layers``), like :func:`read_events`."""
    frame = plan.layers.get(EVENTS_LAYER)
    if frame is None or len(frame) == 0:
        return _empty()
    return _typed(pd.DataFrame(frame).drop(columns="geometry", errors="ignore"))


def number_events(existing: pd.DataFrame, events: pd.DataFrame) -> pd.DataFrame:
    """New rows numbered after the last of ``existing`` (read under the plan's lock)."""
    start = int(existing["event_id"].max()) + 1 if len(existing) else 1
    rows = events[list(EVENT_COLUMNS)].copy()
    rows["event_id"] = pd.Series(range(start, start + len(rows)), index=rows.index, dtype="int64")
    return rows.reset_index(drop=True)


def write_numbered_events(gpkg: str | Path, rows: pd.DataFrame, *, append: bool) -> None:
    """Add numbered rows to the events table of ``gpkg`` (a store copy inside a transaction)."""
    import pyogrio

    if len(rows):
        pyogrio.write_dataframe(rows, Path(gpkg), layer=EVENTS_LAYER, driver="GPKG", append=append)


def append_events(gpkg: str | Path, events: pd.DataFrame) -> pd.DataFrame:
    """Append rows to the events table of ``gpkg``, numbering them after the last recorded event.

    Writes straight into ``gpkg``: use it on the private copy inside a
    :func:`fieldplan.store.transaction` (``txn.edit``), or prefer
    :func:`number_events` on the events read under the lock (as ``mark`` does).
    Returns the rows as stored (with their ``event_id``).
    """
    existing = read_events(gpkg)
    rows = number_events(existing, events)
    write_numbered_events(gpkg, rows, append=len(existing) > 0)
    return rows
