"""Records made on a crew's phone, applied to a plan folder exactly once.

A crew page (``fieldplan serve``, ``/field/{plan}/{crew}``) keeps every record it
makes on the phone and uploads them in batches whenever it has a signal. Each
record carries its own UUID, made on the phone when the record is made, so the
same record uploaded twice (a lost answer, a retry, a second phone exporting the
same file) is recognised and never counted twice.

Where a record goes
-------------------
* Every record received is first appended to ``field_records.jsonl`` in the plan
  folder (one JSON object a line, flushed to disk before anything else happens).
  That journal is append-only: nothing in it is ever edited or removed, so two
  crews recording the same point, or a record the plan cannot take, are all kept.
* ``taken`` records with a value measured on the spot (e.g. Brix) go to the
  ``results`` layer through :func:`fieldplan.results.parse_results` and
  :func:`fieldplan.results.append_round`, the code path of ``fieldplan results``.
  One round holds the day's field values of every crew known so far (the table
  a crew leader would type up at night), so the latest round is the whole day;
  its SHA-256 is that of the records it holds, so an unchanged day is never
  stored twice (the same guard that refuses a re-imported file).
* The positions of ``taken`` records go to the ``actual`` layer and
  ``positions.csv`` through :func:`fieldplan.field.record.record_positions`, as
  ``fieldplan results`` stores lon/lat columns.
* ``unreachable`` records become ``inaccessible`` events through
  :func:`fieldplan.field.mark.mark_points`, the code path of ``fieldplan mark``,
  which brings in the next spare or the cell's substitute. The event's reason
  ends with ``[record <uuid>]``, so the events table itself says whether a record
  was applied.

Records are applied under the plan folder's write lock (:func:`fieldplan.store.locked`,
the lock of ``fieldplan mark`` and ``fieldplan results``), held from reading the journal
to the last write; a sync interrupted between the journal and the plan is finished by the
next one, because whether a record reached the plan is read back from the plan
(round digests, event reasons), not assumed.

Conflicts (:func:`field_conflicts`) are listed, never resolved silently: two
records taking the same point, or a point taken in the field while it is marked
inaccessible (at the office or by another crew).
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from fieldplan.errors import InputError

__all__ = [
    "JOURNAL_NAME",
    "KINDS",
    "TAKEN",
    "UNREACHABLE",
    "REASONS",
    "SyncReport",
    "read_journal",
    "journal_records",
    "check_record",
    "check_sample_id",
    "point_labels",
    "apply_records",
    "field_conflicts",
    "conflict_notes",
    "replacement_offers",
    "read_records_file",
]

JOURNAL_NAME = "field_records.jsonl"
TAKEN = "taken"
UNREACHABLE = "unreachable"
KINDS = (TAKEN, UNREACHABLE)
#: Reasons offered on the crew page for a point that cannot be reached (free text may follow).
REASONS = (
    "standing water or mud",
    "locked gate or no access",
    "livestock or people working there",
    "crop removed or replanted",
    "steep or unsafe ground",
    "spray re-entry interval not over",
    "machinery working",
    "other",
)
_UUID = re.compile(r"^[0-9a-fA-F]{8}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{12}$")
_VARIABLE = re.compile(r"^[a-z][a-z0-9_]{0,39}$")
_TAG = re.compile(r"\[record ([0-9a-fA-F-]{36})\]")
_MAX_TEXT = 500
_MAX_BATCH = 5000
_SOURCE_PREFIX = "field-records-"


@dataclass
class SyncReport:
    """What one upload did.

    Attributes
    ----------
    stored : list of str
        Record ids new to this plan, kept in the journal (and applied where they could be).
    duplicates : list of str
        Record ids the plan had already: nothing was added for them.
    refused : dict
        Record id -> why the plan cannot take it; the record is kept in the journal
        all the same and listed for the office (only records with no usable id are dropped).
    round_no : int or None
        The results round stored for the day's field values, if a new one was needed.
    events : list of dict
        Events appended (``event_id, point_id, replacement_id``).
    positions : list of dict
        Recorded positions stored (``point_id, offset_m, beyond_max_offset``).
    conflicts : list of dict
        Every conflict now on this plan (see :func:`field_conflicts`).
    notes : list of str
        Anything else the crew should know (a point already marked at the office...).
    """

    stored: list[str] = field(default_factory=list)
    duplicates: list[str] = field(default_factory=list)
    refused: dict[str, str] = field(default_factory=dict)
    round_no: int | None = None
    events: list[dict] = field(default_factory=list)
    positions: list[dict] = field(default_factory=list)
    conflicts: list[dict] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def as_dict(self) -> dict:
        """JSON-ready form (the sync endpoint's answer)."""
        return {
            "stored": self.stored,
            "duplicates": self.duplicates,
            "refused": self.refused,
            "round": self.round_no,
            "events": self.events,
            "positions": self.positions,
            "conflicts": self.conflicts,
            "notes": self.notes,
        }


def _now(now: datetime | None) -> str:
    if now is None:
        epoch = os.environ.get("SOURCE_DATE_EPOCH")
        now = datetime.fromtimestamp(int(epoch), UTC) if epoch else datetime.now(UTC)
    return now.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def _text(value, limit: int = _MAX_TEXT) -> str:
    text = "" if value is None else " ".join(str(value).split())
    return text[:limit]


def _number(value) -> float | None:
    if value is None or value == "":
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def check_record(raw: Mapping) -> dict:
    """A record from a phone in its stored form; raises :class:`InputError` if it has no usable id.

    Fields: ``id`` (UUID, required), ``kind`` (``taken`` or ``unreachable``),
    ``point_id``, ``time_utc``, ``date`` (local date on the phone), ``lon``,
    ``lat``, ``accuracy_m``, ``sample_id``, ``variable``, ``value``, ``note``,
    ``reason``. Text is trimmed and cut at 500 characters; numbers that are not
    finite become empty. Whether the plan can take the record is decided later
    (:func:`apply_records`), so that a record the plan refuses is still kept.
    """
    if not isinstance(raw, Mapping):
        raise InputError("a field record must be a JSON object")
    rid = _text(raw.get("id"), 36)
    if not _UUID.match(rid):
        raise InputError(f"record id {rid!r} is not a UUID; each record needs its own UUID made on the phone")
    record = {
        "id": rid.lower(),
        "kind": _text(raw.get("kind"), 20).lower(),
        "point_id": _text(raw.get("point_id"), 100),
        "time_utc": _text(raw.get("time_utc"), 40),
        "date": _text(raw.get("date"), 10),
        "lon": _number(raw.get("lon")),
        "lat": _number(raw.get("lat")),
        "accuracy_m": _number(raw.get("accuracy_m")),
        "sample_id": _text(raw.get("sample_id"), 40),
        "variable": _text(raw.get("variable"), 40).lower(),
        "value": _number(raw.get("value")),
        "note": _text(raw.get("note")),
        "reason": _text(raw.get("reason")),
    }
    if not record["date"] and len(record["time_utc"]) >= 10:
        record["date"] = record["time_utc"][:10]
    return record


def _content(record: Mapping) -> dict:
    """The part of a record that its id stands for (what the phone sent)."""
    keys = ("kind", "point_id", "time_utc", "lon", "lat", "sample_id", "variable", "value", "reason", "note")
    return {k: record.get(k) for k in keys}


def check_sample_id(typed: str, planned: str, accepted: Iterable[str] = ()) -> str:
    """Why ``typed`` is not the bag of a point whose planned id is ``planned`` ('' if it is).

    The check character is tested first (:func:`fieldplan.samples.ids.is_valid`), so
    a mistyped id is told apart from a valid id of another point (the wrong bag).
    ``accepted`` adds the point's labels of later rounds (``fieldplan labels --round``,
    see :func:`fieldplan.results.sample_id_map`); hyphens, spaces and case are ignored.
    """
    from fieldplan.samples.ids import is_valid, normalise_id

    if not planned:
        return ""
    if not typed:
        return f"no sample id; this point's bag is {planned}"
    if not is_valid(typed):
        return f"sample id {typed} has a wrong check character; read the label again"
    if normalise_id(typed) not in {normalise_id(planned), *map(normalise_id, accepted)}:
        return f"sample id {typed} is another point's bag; this point's bag is {planned}"
    return ""


def point_labels(plan) -> dict[str, list[str]]:
    """Point id -> the normalised sample ids its bags may carry (label rounds 1 to next round + 2).

    The same set of rounds ``fieldplan results`` accepts for sample ids.
    """
    from fieldplan.results import sample_id_map

    try:
        from fieldplan.results import next_round

        rounds = next_round(plan.layers) + 2
    except ImportError:  # pragma: no cover - older results module
        rounds = 3
    out: dict[str, list[str]] = {}
    for label, (pid, _round) in sample_id_map(plan.points, rounds=rounds).items():
        out.setdefault(pid, []).append(label)
    return {pid: sorted(labels) for pid, labels in out.items()}


def _plan_problem(record: Mapping, points: pd.DataFrame, labels: Mapping[str, list[str]]) -> str:
    """Why the plan cannot take ``record`` ('' when it can)."""
    from fieldplan.results import plausible_range

    if record["kind"] not in KINDS:
        return f"kind {record['kind']!r} is not one of {', '.join(KINDS)}"
    pid = record["point_id"]
    if pid not in points.index:
        return f"point {pid!r} is not in this plan"
    if record["lon"] is not None or record["lat"] is not None:
        lon, lat = record["lon"], record["lat"]
        if lon is None or lat is None or abs(lon) > 180 or abs(lat) > 90:
            return f"position {lon},{lat} is not a longitude,latitude pair"
    if record["kind"] == TAKEN:
        planned = points.at[pid, "sample_id"] if "sample_id" in points.columns else ""
        planned = "" if planned is None or planned != planned else str(planned)
        problem = check_sample_id(record["sample_id"], planned, labels.get(pid, ()))
        if problem:
            return problem
        if record["value"] is not None:
            if not _VARIABLE.match(record["variable"]):
                return f"value {record['value']:g} has no measurement name (e.g. brix)"
            limits = plausible_range(record["variable"])
            if limits and not limits[0] <= record["value"] <= limits[1]:
                return (
                    f"{record['variable']} {record['value']:g} is outside the plausible "
                    f"{limits[0]:g}-{limits[1]:g}; check the reading"
                )
    elif not record["reason"]:
        return "an unreachable point needs a reason"
    return ""


def read_journal(plan_dir: str | Path) -> list[dict]:
    """Every line of the plan's field journal, in the order written.

    A last line cut short by a crash is skipped (its record was never acknowledged,
    so the phone still holds it and sends it again).
    """
    path = Path(plan_dir) / JOURNAL_NAME
    if not path.is_file():
        return []
    out = []
    with path.open(encoding="utf-8") as handle:
        for line in handle:
            line = line.strip()
            if not line:
                continue
            try:
                entry = json.loads(line)
            except json.JSONDecodeError:
                continue
            if isinstance(entry, dict):
                out.append(entry)
    return out


def journal_records(entries: Iterable[Mapping]) -> list[dict]:
    """The record lines of a journal (see :func:`read_journal`), in the order received."""
    return [dict(e) for e in entries if e.get("type") == "record"]


def _append_journal(plan_dir: Path, entries: Sequence[Mapping]) -> None:
    if not entries:
        return
    text = "".join(json.dumps(dict(e), sort_keys=True, ensure_ascii=False) + "\n" for e in entries)
    path = plan_dir / JOURNAL_NAME
    fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
    try:
        os.write(fd, text.encode("utf-8"))
        os.fsync(fd)
    finally:
        os.close(fd)


def _lock(plan_dir: Path, timeout: float):
    """The plan folder's write lock (:func:`fieldplan.store.locked`), held across the whole sync.

    The library functions called under it take the same lock again (it is re-entrant in
    one thread), so nothing changes the plan between reading its state and writing to it;
    a busy plan gives :class:`fieldplan.lock.PlanBusyError` ("plan is busy, retry").
    """
    from fieldplan.store import locked

    return locked(plan_dir, timeout=timeout)


def _points_table(plan) -> pd.DataFrame:
    frame = pd.DataFrame(plan.points.drop(columns=plan.points.geometry.name))
    frame["point_id"] = frame["point_id"].astype(str)
    return frame.drop_duplicates("point_id").set_index("point_id")


def _day_table(records: Sequence[Mapping], day: str) -> tuple[pd.DataFrame, list[str], str]:
    """The wide results table of one day's field values, its value columns and digest."""
    rows = [r for r in records if r["kind"] == TAKEN and r["value"] is not None and r["date"] == day]
    rows.sort(key=lambda r: (r["time_utc"], r["id"]))
    variables = sorted({r["variable"] for r in rows})
    frame = pd.DataFrame(
        {
            "point_id": [r["point_id"] for r in rows],
            "date": day,
            **{v: [f"{r['value']!r}" if r["variable"] == v else "" for r in rows] for v in variables},
        }
    )
    digest = hashlib.sha256(
        json.dumps([[r["id"], r["point_id"], r["variable"], r["value"]] for r in rows]).encode()
    ).hexdigest()
    return frame, variables, digest


def apply_records(
    plan_dir: str | Path,
    records: Sequence[Mapping],
    *,
    crew: int | str,
    now: datetime | None = None,
    max_offset: float | None = None,
    lock_timeout: float = 60.0,
) -> SyncReport:
    """Keep a batch of field records and apply the new ones to the plan, each exactly once.

    Parameters
    ----------
    plan_dir : path
        A plan folder.
    records : sequence of mapping
        Records as the crew page sends them (see :func:`check_record`).
    crew : int or str
        The crew that sent them (from the crew link, never from the records).
    now : datetime, optional
        Time of receipt (default: now, or ``SOURCE_DATE_EPOCH``).
    max_offset : float, optional
        Metres before a recorded position is flagged (default: the plan's).
    lock_timeout : float
        Seconds to wait for another sync of the same plan.

    Returns
    -------
    SyncReport

    Raises
    ------
    InputError
        If a record has no UUID or the batch is too large; nothing is kept then.
    """
    from fieldplan.store import load_plan

    plan_dir = Path(plan_dir)
    if len(records) > _MAX_BATCH:
        raise InputError(f"{len(records)} records in one upload; send at most {_MAX_BATCH} at a time")
    checked = [check_record(r) for r in records]
    received = _now(now)
    report = SyncReport()
    with _lock(plan_dir, lock_timeout):
        plan = load_plan(plan_dir)
        points = _points_table(plan)
        labels = point_labels(plan)
        entries = read_journal(plan_dir)
        known = {r["id"]: r for r in journal_records(entries)}
        applied = {rid for e in entries if e.get("type") == "applied" for rid in e.get("ids", [])}
        new_entries = []
        for record in checked:
            old = known.get(record["id"])
            if old is not None:
                if _content(old) != _content(record):
                    report.refused[record["id"]] = (
                        "this record id was already used for a different record; the first one is kept"
                    )
                elif old.get("problem"):
                    report.refused[record["id"]] = old["problem"]
                else:
                    report.duplicates.append(record["id"])
                continue
            problem = _plan_problem(record, points, labels)
            entry = {"type": "record", **record, "crew": str(crew), "received_utc": received}
            if problem:
                entry["problem"] = problem
                report.refused[record["id"]] = problem
            else:
                report.stored.append(record["id"])
            known[record["id"]] = entry
            new_entries.append(entry)
        # The journal first: from here on the records are safe whatever happens to the plan.
        _append_journal(plan_dir, new_entries)
        pending = [r for r in known.values() if r["id"] not in applied and not r.get("problem")]
        if pending:
            _apply_pending(
                plan_dir, plan, list(known.values()), pending, report, received, max_offset=max_offset
            )
            # Only now is the plan known to hold them; a crash before this line is finished next time.
            _append_journal(
                plan_dir, [{"type": "applied", "ids": [r["id"] for r in pending], "utc": received}]
            )
    report.conflicts = field_conflicts(plan_dir)
    return report


def _applied_record_ids(events: pd.DataFrame) -> set[str]:
    found = events["reason"].astype(str).str.findall(_TAG)
    return {rid.lower() for ids in found for rid in ids}


def _apply_pending(
    plan_dir: Path,
    plan,
    records: list[dict],
    pending: list[dict],
    report: SyncReport,
    received: str,
    *,
    max_offset,
):
    """Bring the plan up to date with the journal's ``pending`` records.

    Each step first reads from the plan whether it was done (an event tagged with the
    record, a round with the day's digest), so running it twice changes nothing.
    """
    from fieldplan.field.events import read_events
    from fieldplan.field.mark import inaccessible_set, mark_points
    from fieldplan.field.record import record_positions
    from fieldplan.results import parse_results, stored_results
    from fieldplan.store import load_plan
    from fieldplan.write.gpkg import GPKG_NAME

    usable = [r for r in records if not r.get("problem")]
    events = read_events(plan_dir / GPKG_NAME)
    done = _applied_record_ids(events)
    off = set(inaccessible_set(events))
    changed = False
    for record in sorted((r for r in pending if r["kind"] == UNREACHABLE), key=lambda r: r["time_utc"]):
        if record["id"] in done:
            continue
        pid = record["point_id"]
        if pid in off:
            if record["id"] in report.stored:
                report.notes.append(f"{pid} was already marked inaccessible; the crew's reason is kept")
            continue
        reason = (
            f"{record['reason']}{': ' + record['note'] if record['note'] else ''} [record {record['id']}]"
        )
        result = mark_points(
            plan_dir,
            [pid],
            reason=reason,
            by=f"crew {record.get('crew', '')}".strip(),
            now=_parse_time(record["time_utc"]),
        )
        off.add(pid)
        changed = True
        for row in result.events.itertuples(index=False):
            report.events.append(
                {
                    "event_id": int(row.event_id),
                    "point_id": row.point_id,
                    "replacement_id": row.replacement_id,
                }
            )
        report.notes += result.notes

    if changed:
        plan = load_plan(plan_dir)
    existing = stored_results(plan.layers)
    digests = set(existing["sha256"]) if "sha256" in existing.columns else set()
    days = sorted({r["date"] for r in pending if r["kind"] == TAKEN and r["value"] is not None and r["date"]})
    known_ids = set(plan.points["point_id"].astype(str))
    for day in days:
        frame, variables, digest = _day_table(usable, day)
        if digest in digests or frame.empty:
            continue
        table = parse_results(
            frame,
            point_ids=known_ids,
            value_columns=variables,
            source=f"{_SOURCE_PREFIX}{day}.csv",
            sha256=digest,
        )
        from fieldplan.results import append_round

        field_days = sorted(
            str(src)[len(_SOURCE_PREFIX) : -len(".csv")]
            for src in set(existing["source"] if "source" in existing.columns else [])
            if str(src).startswith(_SOURCE_PREFIX) and str(src).endswith(".csv")
        )
        if field_days and day < field_days[-1]:
            report.notes.append(
                f"values of {day} arrived after field values of {field_days[-1]}; stored as the latest "
                f"round, so 'fieldplan estimate' (latest round) now describes {day}"
            )
        report.round_no = append_round(plan_dir, table, existing=existing, imported_utc=received)
        for row in table.problems.itertuples(index=False):
            report.notes.append(f"{row.point_id}: {row.problem} ({row.detail})".replace(" ()", ""))
        plan = load_plan(plan_dir)
        existing = stored_results(plan.layers)

    taken = [r for r in pending if r["kind"] == TAKEN and r["lon"] is not None and r["lat"] is not None]
    if taken:
        taken.sort(key=lambda r: (r["time_utc"], r["id"]))
        actual = pd.DataFrame(
            {
                "point_id": [r["point_id"] for r in taken],
                "lon": [r["lon"] for r in taken],
                "lat": [r["lat"] for r in taken],
            }
        )
        round_no = report.round_no or (int(existing["round"].max()) if len(existing) else 0)
        positions = record_positions(
            plan_dir, actual, max_offset=max_offset, round_no=round_no, recorded_utc=received
        )
        for row in positions.itertuples(index=False):
            report.positions.append(
                {
                    "point_id": row.point_id,
                    "offset_m": float(row.offset_m),
                    "beyond_max_offset": bool(row.beyond_max_offset),
                }
            )


def _parse_time(text: str) -> datetime | None:
    try:
        moment = datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        return None
    return moment if moment.tzinfo else moment.replace(tzinfo=UTC)


def field_conflicts(plan_dir: str | Path) -> list[dict]:
    """Points where field records disagree with each other or with the office.

    Returns
    -------
    list of dict
        ``point_id``, ``kind`` (``taken twice`` or ``taken but inaccessible``),
        ``records`` (id, crew, kind, time of each record involved), ``events``
        (ids of the inaccessible events involved) and ``note`` (one sentence).
        Nothing is resolved: every record stays in the journal and the plan.
    """
    from fieldplan.field.events import INACCESSIBLE, read_events
    from fieldplan.field.mark import inaccessible_set
    from fieldplan.write.gpkg import GPKG_NAME

    plan_dir = Path(plan_dir)
    records = [r for r in journal_records(read_journal(plan_dir)) if not r.get("problem")]
    gpkg = plan_dir / GPKG_NAME
    events = read_events(gpkg) if gpkg.is_file() else pd.DataFrame(columns=["point_id", "action"])
    off = set(inaccessible_set(events)) if len(events) else set()
    taken: dict[str, list[dict]] = {}
    for r in records:
        if r["kind"] == TAKEN:
            taken.setdefault(r["point_id"], []).append(r)
    unreachable: dict[str, list[dict]] = {}
    for r in records:
        if r["kind"] == UNREACHABLE:
            unreachable.setdefault(r["point_id"], []).append(r)

    def brief(r: Mapping) -> dict:
        return {"id": r["id"], "crew": r.get("crew", ""), "kind": r["kind"], "time_utc": r["time_utc"]}

    out = []
    for pid in sorted(taken):
        group = sorted(taken[pid], key=lambda r: (r["time_utc"], r["id"]))
        if len(group) > 1:
            crews = ", ".join(f"crew {r.get('crew', '?')} at {r['time_utc']}" for r in group)
            out.append(
                {
                    "point_id": pid,
                    "kind": "taken twice",
                    "records": [brief(r) for r in group],
                    "events": [],
                    "note": f"{pid} was taken {len(group)} times ({crews}); all records are kept, "
                    "the earliest value is in the day's results round",
                }
            )
        marked = (
            events[(events["point_id"] == pid) & (events["action"] == INACCESSIBLE)] if len(events) else []
        )
        if pid in off or pid in unreachable:
            ids = [int(e) for e in marked["event_id"]] if len(marked) else []
            others = sorted(unreachable.get(pid, []), key=lambda r: r["time_utc"])
            who = "; ".join(f"crew {r.get('crew', '?')} found it unreachable ({r['reason']})" for r in others)
            who = who or "marked inaccessible at the office"
            out.append(
                {
                    "point_id": pid,
                    "kind": "taken but inaccessible",
                    "records": [brief(r) for r in group + others],
                    "events": ids,
                    "note": f"{pid} was taken by crew {group[0].get('crew', '?')} but {who}; "
                    "both are kept: restore the point with 'fieldplan mark --restore' if the sample stands",
                }
            )
    return out


def conflict_notes(plan_dir: str | Path) -> list[str]:
    """One sentence per conflict, for the plan page and the estimate's notes."""
    return [c["note"] for c in field_conflicts(plan_dir)]


def replacement_offers(plan, point_ids: Iterable[str] | None = None) -> dict[str, dict]:
    """What ``fieldplan mark --inaccessible`` would bring in for each point, were it marked now.

    The crew page ships these so it can show, offline, the spare or substitute that
    takes a point's place the moment the crew finds it unreachable. Each is computed
    with the functions :func:`fieldplan.field.mark.mark_points` uses, on the plan's
    current state; the mark applied at the next sync has the final word.

    Returns
    -------
    dict
        point id -> ``{"replacement_id", "lon", "lat", "kind", "sample_id"}`` (``kind``:
        ``spare``, ``substitute`` or ``none``; ``sample_id`` of the bag to use there).
    """
    import geopandas as gpd

    from fieldplan.field.events import EVENTS_LAYER
    from fieldplan.field.mark import (
        PLANNED_LAYER,
        SUBSTITUTE_SUFFIX,
        SUBSTITUTES_LAYER,
        _replacements,
        field_points,
        inaccessible_set,
    )
    from fieldplan.write.tables import points_lonlat

    events = plan.layers.get(EVENTS_LAYER)
    off: list[str] = []
    if events is not None and len(events):
        events = pd.DataFrame(events).sort_values("event_id", kind="stable")
        off = inaccessible_set(events.assign(point_id=events["point_id"].astype(str)))
    planned_layer = plan.layers.get(PLANNED_LAYER)
    planned = (
        plan.points
        if planned_layer is None
        else gpd.GeoDataFrame(planned_layer).set_crs(plan.crs, allow_override=True)
    )
    substitutes = plan.layers.get(SUBSTITUTES_LAYER)
    before = field_points(planned, off, substitutes)
    wanted = [str(p) for p in (point_ids if point_ids is not None else before["point_id"])]
    lookup = before.drop_duplicates("point_id").set_index(before["point_id"].drop_duplicates().astype(str))
    offers: dict[str, dict] = {}
    for pid in wanted:
        if pid in off or pid not in lookup.index:
            continue
        after = field_points(planned, off + [pid], substitutes)
        pick = _replacements(before, after, [pid], planned)[0]
        if not pick:
            offers[pid] = {"replacement_id": "", "lon": None, "lat": None, "kind": "none"}
            continue
        row = after[after["point_id"].astype(str) == pick].iloc[:1]
        lon, lat = points_lonlat(row)[0]
        offers[pid] = {
            "replacement_id": pick,
            "lon": round(float(lon), 7),
            "lat": round(float(lat), 7),
            "kind": "substitute" if pick.endswith(SUBSTITUTE_SUFFIX) else "spare",
            "sample_id": _text(row["sample_id"].iloc[0], 40) if "sample_id" in row.columns else "",
        }
    return offers


def read_records_file(path: str | Path) -> tuple[list[dict], dict]:
    """Records exported from the crew page (``fieldplan-records`` JSON), and its header.

    Returns
    -------
    records : list of dict
    header : dict
        ``plan``, ``crew`` and ``exported_utc`` as written by the page.
    """
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8-sig"))
    except FileNotFoundError:
        raise InputError(f"{path}: no such file; give the file the crew page exported") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as err:
        raise InputError(f"{path}: not a crew page export ({err}); export the records again") from None
    if (
        not isinstance(data, dict)
        or data.get("format") != "fieldplan-records"
        or not isinstance(data.get("records"), list)
    ):
        raise InputError(f"{path}: not a crew page export (no 'fieldplan-records' header); export again")
    header = {k: data.get(k) for k in ("plan", "crew", "exported_utc")}
    return list(data["records"]), header
