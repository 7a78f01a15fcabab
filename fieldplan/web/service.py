"""What the web workspace does to plan folders: the same library calls as the CLI commands.

Each function mirrors one subcommand (named beside it) and runs under the plan's
lock (:func:`fieldplan.web.workspace.plan_lock`), so two browsers changing one plan
queue rather than overwrite each other. Nothing here knows about HTTP.
"""

from __future__ import annotations

import math
import os
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from fieldplan.web.workspace import WebError, plan_lock

__all__ = [
    "READINESS_COLOURS",
    "READINESS_BREAKS",
    "load",
    "plan_detail",
    "plan_files",
    "assign_crews",
    "import_results",
    "mark",
    "estimates",
    "coverage",
    "make_labels",
    "make_lab_sheet",
    "readiness_class",
    "records",
]

# ColorBrewer YlGnBu, 5 classes (Brewer & Harrower 2003, colorbrewer2.org, flagged colour-blind
# safe): light = unlikely to have reached the target, dark = likely. Sequential in lightness, so
# it also reads in greyscale.
READINESS_COLOURS = ("#ffffcc", "#a1dab4", "#41b6c4", "#2c7fb8", "#253494")
READINESS_BREAKS = (0.2, 0.4, 0.6, 0.8)
NO_ESTIMATE_COLOUR = "#e0e0e0"

_CACHE: dict[str, tuple[tuple, Any]] = {}


def _now_utc() -> str:
    # SOURCE_DATE_EPOCH keeps stored rounds reproducible, as the CLI does.
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    when = datetime.fromtimestamp(int(epoch), UTC) if epoch else datetime.now(UTC)
    return when.strftime("%Y-%m-%dT%H:%M:%SZ")


def _stamp(folder: Path) -> tuple:
    out = []
    for name in ("plan.gpkg", "manifest.json", "points.geojson"):
        try:
            st = (folder / name).stat()
            out.append((st.st_mtime_ns, st.st_size, st.st_ino))
        except OSError:
            out.append(None)
    return tuple(out)


def folder_stamp(folder: Path) -> tuple:
    """Name, size and modification time of every entry of a plan folder (hidden ones too)."""
    out = []
    with os.scandir(folder) as entries:
        for entry in entries:
            try:
                st = entry.stat(follow_symlinks=False)
            except OSError:
                continue
            out.append((entry.name, st.st_size, st.st_mtime_ns))
            if entry.is_dir(follow_symlinks=False):
                # A journal folder: its files count too (one level is all the plan folder uses).
                with os.scandir(entry.path) as inner:
                    for sub in inner:
                        try:
                            sst = sub.stat(follow_symlinks=False)
                        except OSError:
                            continue
                        out.append((f"{entry.name}/{sub.name}", sst.st_size, sst.st_mtime_ns))
    return tuple(sorted(out))


def load(folder: Path):
    """The plan in ``folder`` (``fieldplan.store.load_plan``), cached until its files change.

    Callers must not modify the returned plan.
    """
    from fieldplan.store import load_plan

    key = str(folder)
    stamp = _stamp(folder)
    hit = _CACHE.get(key)
    if hit is not None and hit[0] == stamp:
        return hit[1]
    plan = load_plan(folder)
    _CACHE[key] = (stamp, plan)
    return plan


def _jsonable(value):
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, pd.Timestamp | datetime):
        return None if pd.isna(value) else value.strftime("%Y-%m-%d")
    if value is pd.NaT:
        return None
    try:
        if (
            value is not None
            and not isinstance(value, str | int | float | bool | list | dict)
            and pd.isna(value)
        ):
            return None
    except (TypeError, ValueError):
        pass
    return value


def records(frame: pd.DataFrame) -> list[dict]:
    """Rows of a table as JSON-ready dicts (NaN -> null, dates -> YYYY-MM-DD)."""
    frame = pd.DataFrame(frame).drop(columns="geometry", errors="ignore")
    return [{str(k): _jsonable(v) for k, v in row.items()} for row in frame.to_dict("records")]


#: Files a plan page offers for download, in the order shown, with what they are.
DOWNLOADS: tuple[tuple[str, str], ...] = (
    ("points.gpx", "GPX waypoints (and routes) for GPS receivers"),
    ("points.kml", "KML placemarks and block outlines"),
    ("points.csv", "Points table (CSV)"),
    ("points.geojson", "Points (GeoJSON)"),
    ("crew_sheets.html", "Printable crew sheets"),
    ("labels.pdf", "Bag labels (PDF)"),
    ("lab_submission.csv", "Lab submission sheet"),
    ("results_template.csv", "Results template to fill in"),
    ("crews.csv", "Crews: points (n_points), walking km (length_km), hours"),
    ("estimates.csv", "Last estimates table"),
    ("coverage.csv", "Coverage check"),
    ("summary.csv", "Blocks summary"),
    ("positions.csv", "Recorded positions against the plan"),
    ("plan.png", "Printable plan page (PNG)"),
    ("map.html", "Offline map (open from disk)"),
    ("plan.gpkg", "GeoPackage with every layer"),
    ("manifest.json", "Parameters, input checksum"),
    ("README.txt", "Read-me with the field cautions"),
)


def plan_files(folder: Path) -> list[dict]:
    """Downloadable files of a plan folder: regular files at its top level, no hidden ones, no links."""
    known = dict(DOWNLOADS)
    present = {}
    with os.scandir(folder) as entries:
        for entry in entries:
            if entry.name.startswith(".") or not entry.is_file(follow_symlinks=False):
                continue
            present[entry.name] = entry.stat(follow_symlinks=False).st_size
    order = [n for n, _ in DOWNLOADS if n in present]
    order += sorted(n for n in present if n not in known)
    return [{"name": n, "bytes": present[n], "what": known.get(n, _describe(n))} for n in order]


def _describe(name: str) -> str:
    if name.startswith("crew_") and name.endswith(".gpx"):
        return f"GPX for crew {name[5:-4].lstrip('0') or '0'}"
    if name.startswith("labels") and name.endswith(".pdf"):
        return "Bag labels (PDF)"
    return ""


def plan_detail(folder: Path) -> dict:
    """Everything the plan page shows at first: summary, parameters, map layers, files, crews."""
    from fieldplan.web.workspace import plan_summary
    from fieldplan.write.html_map import map_data

    plan = load(folder)
    key = ("map", str(folder))
    hit = _CACHE.get(key)
    if hit is not None and hit[1][0] is plan:
        data = hit[1][1]
    else:
        data = map_data(plan, markers="auto")  # canvas markers above DOM_MARKER_LIMIT points
        _CACHE[key] = ((), (plan, data))
    from fieldplan.results import stored_results

    results = stored_results(plan.layers)
    variables = sorted(results["variable"].astype(str).unique().tolist()) if len(results) else []
    crews = []
    crews_csv = folder / "crews.csv"
    if crews_csv.is_file():
        crews = records(pd.read_csv(crews_csv))
    block_columns = [c for c in plan.blocks.columns if c not in ("geometry",)]
    status_counts = {}
    if "status" in plan.points.columns:
        status_counts = {str(k): int(v) for k, v in plan.points["status"].astype(str).value_counts().items()}
    from fieldplan.field.events import stored_events

    events = stored_events(plan)
    return {
        "plan": plan_summary(folder),
        "events": records(events.tail(200)),
        "parameters": {k: _jsonable(v) for k, v in plan.params.items()},
        "notes": list(plan.meta.get("notes", [])) if isinstance(plan.meta, dict) else [],
        "map": data,
        "files": plan_files(folder),
        "crews": crews,
        "variables": variables,
        "rounds": int(results["round"].max()) if len(results) else 0,
        "status_counts": status_counts,
        "block_columns": block_columns,
        "readiness_scale": {
            "colours": list(READINESS_COLOURS),
            "breaks": list(READINESS_BREAKS),
            "none": NO_ESTIMATE_COLOUR,
        },
    }


# --- crews (fieldplan crews) -------------------------------------------------------------


def assign_crews(
    folder: Path,
    *,
    crews: int,
    start: tuple[float, float] | None = None,
    walk_speed: float = 4.0,
    minutes_per_point: float = 5.0,
    max_hours: float | None = None,
    return_to_start: bool = False,
    across_rows: float = 1.5,
    force: bool = False,
    link_base: str | None = None,
) -> dict:
    """``fieldplan crews``: split the points among crews, route each, write the crew files.

    ``link_base`` (the server's address, when phones can reach it) puts each crew's page link
    on its sheet, as ``--link-base`` does.
    """
    from fieldplan.route.folder import plan_crews, refuse_existing, save_rerun, write_crews
    from fieldplan.store import load_plan, locked

    if start is not None:
        lon, lat = (float(v) for v in start)
        if not (-180 <= lon <= 180 and -90 <= lat <= 90):
            raise WebError(422, f"start {start!r} is not a longitude,latitude pair", parameter="start")
    # Read, route and write under the plan's lock, so a mark made meanwhile is not overwritten.
    with plan_lock(folder), locked(folder):
        plan = load_plan(folder)
        refuse_existing(plan, folder, force=force)
        run = plan_crews(
            plan,
            n_crews=int(crews),
            start_lonlat=tuple(start) if start is not None else None,
            walk_kmh=walk_speed,
            minutes_per_point=minutes_per_point,
            max_hours=max_hours,
            return_to_start=return_to_start,
            across_factor=across_rows,
        )
        links = None
        if link_base:
            from fieldplan.field.links import crew_link, workspace_secret

            secret = workspace_secret(folder.parent)
            links = {
                int(k): crew_link(link_base, secret, folder.name, int(k)) for k in run.table["crew"].tolist()
            }
        write_crews(folder, run, links=links)
    # The options as the command records them, so advice after a later change can repeat them.
    rerun = ["--crews", str(int(crews))]
    rerun += ["--drop-off", f"{float(start[0])!r},{float(start[1])!r}"] if start is not None else []
    rerun += ["--walk-speed", f"{walk_speed:g}"] if walk_speed != 4.0 else []
    rerun += ["--minutes-per-point", f"{minutes_per_point:g}"] if minutes_per_point != 5.0 else []
    rerun += ["--max-hours", f"{max_hours:g}"] if max_hours is not None else []
    rerun += ["--return"] if return_to_start else []
    rerun += ["--across-rows", f"{across_rows:g}"] if across_rows != 1.5 else []
    rerun += ["--link-base", link_base] if link_base else []
    save_rerun(folder, rerun)
    start_lonlat = None
    if run.start_xy is not None:
        from pyproj import Transformer

        lon, lat = Transformer.from_crs(plan.crs, "EPSG:4326", always_xy=True).transform(*run.start_xy)
        start_lonlat = [round(lon, 7), round(lat, 7)]
    warnings = []
    if run.unfitted_ids:
        warnings.append(
            f"{len(run.unfitted_ids)} point(s) do not fit in {max_hours:g} h per crew; these blocks would be "
            "left part-sampled: "
            + "; ".join(line.removeprefix("block ") for line in getattr(run, "incomplete", ()))
            + ". The points left out are the far ends of the routes, so what is sampled of a block leans "
            "toward the drop-off and its estimate is biased; sample the rest another day or add crews or hours"
        )
    return {
        "crews": records(run.table),
        "unfitted": list(run.unfitted_ids),
        "warnings": warnings,
        "start": start_lonlat,
        "start_source": run.start_source,
        "links": bool(links),
    }


# --- results (fieldplan results) ------------------------------------------------------------


def import_results(
    folder: Path,
    file: Path,
    *,
    value: list[str] | None = None,
    allow_duplicate: bool = False,
    max_offset: float | None = None,
    sheet: str | None = None,
    date_format: str | None = None,
    accept_outliers: bool = False,
    positions: Path | None = None,
) -> dict:
    """``fieldplan results``: check the whole file, then store it as the next round (one transaction).

    The same steps as the command: :func:`fieldplan.results.prepare_import` reads and checks
    everything (problems by row, a repeated file, recorded positions, outliers) before the
    first write; values far from the rest of the round stop the import unless
    ``accept_outliers``; the round and its positions are stored in one change of the plan.
    """
    from fieldplan.field.record import record_positions
    from fieldplan.results import append_round, prepare_import
    from fieldplan.store import transaction

    with plan_lock(folder), transaction(folder) as txn:
        ready = prepare_import(
            txn.plan,
            file,
            value_columns=value or None,
            sheet=sheet or None,
            date_format=date_format or None,
            allow_duplicate=allow_duplicate,
            positions=positions,
            max_offset=max_offset,
        )
        table = ready.table
        problems = records(table.problems)
        if len(ready.suspects) and not accept_outliers:
            raise WebError(
                422,
                f"{file.name}: nothing stored; {len(ready.suspects)} value(s) lie far from the rest of the round "
                "(modified z-score beyond 3.5, Iglewicz & Hoaglin 1993), e.g. a decimal slip: correct them, "
                "or accept them if they are real",
                parameter="accept_outliers",
                extra={"outliers": records(ready.suspects), "problems": problems},
            )
        stored = append_round(
            folder,
            table,
            existing=ready.existing,
            imported_utc=_now_utc(),
            allow_duplicate=allow_duplicate,
            round_no=ready.round_no,
        )
        report = None
        if ready.positions is not None:
            report = record_positions(
                folder, ready.positions, max_offset=ready.max_offset, round_no=stored, recorded_utc=_now_utc()
            )
    out = {
        "round": int(stored),
        "matched": int(ready.matched),
        "points": int(len(ready.active)),
        "values": list(table.value_columns),
        "problems": problems,
        "notes": list(table.notes),
        "outliers": records(ready.suspects) if len(ready.suspects) else [],
        "inactive": list(ready.inactive),
        "positions": None,
    }
    if report is not None:
        far = report[report["beyond_max_offset"]]
        out["positions"] = {
            "recorded": int(len(report)),
            "beyond": records(far.head(200)),
            "limit_m": ready.max_offset,
        }
    return out


def remove_round(folder: Path, round_no: int, *, reason: str = "", by: str | None = None) -> dict:
    """``fieldplan results --remove-round``: the round moves to ``results_removed``, an event records it."""
    from fieldplan.results import remove_round as _remove

    with plan_lock(folder):
        done = _remove(folder, int(round_no), reason=reason, by=by or None)
    notes = []
    if (folder / "estimates.csv").exists():
        notes.append("estimates.csv was made before the removal; estimate again and keep it")
    return {**{k: _jsonable(v) for k, v in done.items()}, "notes": notes}


# --- marks (fieldplan mark) ------------------------------------------------------------------


def mark(folder: Path, point_ids: list[str], *, action: str, reason: str = "", by: str | None = None) -> dict:
    """``fieldplan mark``: mark points inaccessible (spares step in) or restore them."""
    from fieldplan.errors import OptionError
    from fieldplan.field.events import INACCESSIBLE
    from fieldplan.field.mark import mark_points

    if action == INACCESSIBLE and not str(reason).strip():
        raise OptionError("marking a point inaccessible needs a reason (it goes in the audit trail)")
    with plan_lock(folder):
        result = mark_points(folder, list(point_ids), action=action, reason=str(reason), by=by or None)
    notes = list(result.notes)
    events = records(result.events)
    if (folder / "crews.csv").exists() and "crew" in result.points.columns:
        crew_of = dict(
            zip(result.points["point_id"].astype(str), result.points["crew"].astype(int), strict=True)
        )
        for event in events:
            brought = (
                event.get("replacement_id")
                if event.get("action") == "inaccessible"
                else event.get("point_id")
            )
            if brought and event.get("replacement_id"):
                event["crew"] = crew_of.get(str(brought), 0)
        notes.append(
            "the point brought in joins the crew of the point it replaces (points.csv, points.gpx); the crew GPX "
            "files and sheets still show the routes made before: assign crews again, replacing them, to re-route"
        )
    return {"events": events, "notes": notes}


# --- estimates (fieldplan estimate) --------------------------------------------------------


def estimates(
    folder: Path,
    *,
    value: str,
    by: str = "block",
    confidence: float = 0.95,
    target: float | None = None,
    target_below: bool | None = None,
    round_no: int | None = None,
    local_variance: bool = False,
    save: bool = False,
) -> dict:
    """``fieldplan estimate``: the table, and readiness per block; ``save`` writes estimates.csv as it does."""
    from fieldplan.estimate.readiness import target_direction
    from fieldplan.estimate.table import estimate_table
    from fieldplan.field.mark import substitution_notes
    from fieldplan.results import normalise_column, stored_results

    plan = load(folder)
    design = str(plan.params.get("design", "grid"))
    results = stored_results(plan.layers)
    if results.empty:
        raise WebError(409, "this plan has no results yet; upload a results file first", parameter="value")
    variable = normalise_column(value)
    direction, why = target_direction(variable, below=target_below)
    table = estimate_table(
        plan.points,
        plan.blocks,
        results,
        value=variable,
        design=design,
        by=by,
        confidence=confidence,
        target=target,
        local_variance=local_variance,
        round_no=round_no,
        direction=direction,
    )
    if save:
        _write_estimates(folder, table, variable=variable, confidence=confidence)
    rows = records(table)
    if target is not None and "p_reached" in table:
        for row in rows:
            row["readiness_class"] = readiness_class(row.get("p_reached"))
    notes = list(substitution_notes(plan))
    if target is not None and why:
        notes.append(str(why))
    if design in ("grid", "balanced") and not local_variance:
        notes.append(
            "grid/balanced points are treated as a simple random sample, which is conservative on patchy "
            "fields; the local-difference estimate adds a second, usually narrower interval"
        )
    return {
        "value": variable,
        "by": by,
        "confidence": confidence,
        "target": target,
        "direction": direction,
        "design": design,
        "round": int(table["round"].iloc[0]) if len(table) else None,
        "rows": rows,
        "notes": notes,
        "saved": "estimates.csv" if save else None,
    }


def _write_estimates(folder: Path, table: pd.DataFrame, *, variable: str, confidence: float) -> None:
    """estimates.csv exactly as ``fieldplan estimate`` writes it."""
    from fieldplan.cli.estimate_cmd import ESTIMATES_NAME
    from fieldplan.write.safe import atomic_write_text, neutralise_frame

    out = table.copy()
    out.insert(0, "variable", variable)
    out.insert(1, "confidence", confidence)
    for c in ("date", "target_date", "date_lower", "date_upper"):
        if c in out:
            out[c] = out[c].map(lambda t: "" if t is None or t != t else f"{t:%Y-%m-%d}")
    csv = neutralise_frame(out).to_csv(index=False, float_format="%.6g", lineterminator="\n")
    with plan_lock(folder):
        atomic_write_text(folder / ESTIMATES_NAME, csv)


def readiness_class(p) -> int | None:
    """Index into :data:`READINESS_COLOURS` of a probability of having reached the target."""
    if p is None or (isinstance(p, float) and not math.isfinite(p)):
        return None
    return int(np.searchsorted(READINESS_BREAKS, float(p), side="right"))


# --- coverage (fieldplan check) -------------------------------------------------------------


def coverage(
    folder: Path, *, min_per_block: int = 1, max_gap: float | None = None, proportional: bool = False
) -> dict:
    """``fieldplan check`` without writing coverage.csv: the table per block and the misplaced points."""
    from fieldplan.check import coverage as check_coverage
    from fieldplan.check import points_to_check
    from fieldplan.field.mark import replacement_warnings

    plan = load(folder)
    points, source = points_to_check(folder, plan)
    report = check_coverage(
        plan,
        points=points,
        source=source,
        min_per_block=min_per_block,
        max_gap_m=max_gap,
        proportional=proportional,
    )
    return {
        "ok": bool(report.ok),
        "source": source,
        "blocks": records(report.table),
        "problems": records(report.problems.head(200)),
        "failures": list(report.failures),
        "warnings": list(replacement_warnings(plan)),
    }


# --- labels and lab sheet (fieldplan labels / lab-sheet) ---------------------------------------


def make_labels(
    folder: Path,
    *,
    layout: str = "a4-3x8",
    date: str | None = None,
    skip: int = 0,
    round_no: int = 1,
    include_spares: bool = False,
) -> dict:
    """``fieldplan labels``: labels.pdf (labels_rN.pdf for later rounds) in the plan folder."""
    from datetime import date as _date

    from fieldplan.errors import OptionError
    from fieldplan.samples.labels import label_records, labels_pdf, parse_layout
    from fieldplan.write.safe import atomic_write_bytes

    if date:
        try:
            date = _date.fromisoformat(date).isoformat()
        except ValueError:
            raise OptionError(f"--date takes YYYY-MM-DD, e.g. 2027-03-01; got {date!r}") from None
    sheet = parse_layout(layout)
    name = "labels.pdf" if round_no == 1 else f"labels_r{int(round_no)}.pdf"
    with plan_lock(folder):
        plan = load(folder)
        recs = label_records(
            plan.points,
            plan_id=plan.params.get("plan_id", ""),
            round_no=int(round_no),
            include_spares=include_spares,
        )
        atomic_write_bytes(folder / name, labels_pdf(recs, sheet, date=date or None, skip=int(skip)))
    n_spare = int((recs["status"] == "spare").sum()) if "status" in recs else 0
    return {"file": name, "labels": len(recs), "spares": n_spare, "layout": sheet.name}


def make_lab_sheet(folder: Path, *, analyses: str, round_no: int = 1, include_spares: bool = False) -> dict:
    """``fieldplan lab-sheet``: lab_submission.csv and results_template.csv."""
    from fieldplan.samples.lab import parse_analyses, write_lab_sheet

    names = parse_analyses(analyses)
    with plan_lock(folder):
        plan = load(folder)
        paths = write_lab_sheet(
            plan, folder, analyses=names, round_no=int(round_no), include_spares=include_spares
        )
    return {"files": [Path(p).name for p in paths], "analyses": names}


# --- next season (a plan's recipe on its own blocks) ----------------------------------------


def duplicate(
    folder: Path, workspace: Path, new_name: str, *, seed: int | None = None, progress=None
) -> dict:
    """A new plan folder from ``folder``'s recipe (its :class:`PlanSpec` and blocks).

    The blocks and exclusions come from the plan's GeoPackage, the parameters from its
    manifest; the same seed gives the same points (sites revisited), another seed a new draw.
    """
    from fieldplan.plan import make_plan
    from fieldplan.spec import PlanSpec
    from fieldplan.store import load_plan, write_plan
    from fieldplan.web.workspace import plan_dir

    target = plan_dir(workspace, new_name)
    if target.exists() and any(target.iterdir()):
        raise WebError(
            409, f"a plan named {new_name!r} exists already; choose another name", parameter="name"
        )
    plan = load_plan(folder)
    spec = PlanSpec.from_dict(plan.params)
    use_seed = int(plan.params.get("seed", 0)) if seed is None else int(seed)
    exclusions = plan.exclusions if len(plan.exclusions) else None
    new = make_plan(
        plan.blocks,
        spec,
        seed=use_seed,
        exclusions=exclusions,
        command=["fieldplan", "serve", f"(next season of {folder.name}, seed {use_seed})"],
        progress=progress,
    )
    meta = plan.meta if isinstance(plan.meta, dict) else {}
    new.meta["cautions"] = list(meta.get("cautions") or [])
    if not new.meta["cautions"]:
        from fieldplan.safety import set_cautions

        set_cautions(new, None)
    else:
        new.meta["cautions_source"] = meta.get("cautions_source", "default")
    new.meta["duplicated_from"] = folder.name
    with plan_lock(target):
        write_plan(new, target, force=False, formats=list(spec.outputs.formats))
    n_spare = int(new.points["status"].eq("spare").sum()) if "status" in new.points.columns else 0
    return {
        "name": target.name,
        "url": f"/plans/{target.name}",
        "points": int(len(new.points) - n_spare),
        "seed": use_seed,
    }


def crew_links(folder: Path, base_url: str, secret: bytes) -> list[dict]:
    """Each crew's page address (the crew companion), if that part is installed."""
    try:
        from fieldplan.field.links import crew_link
    except ImportError:
        return []
    crews_csv = folder / "crews.csv"
    if not crews_csv.is_file():
        return []
    crews = pd.read_csv(crews_csv)["crew"].astype(int).tolist()
    return [{"crew": k, "url": crew_link(base_url, secret, folder.name, k)} for k in crews]


def conflicts(folder: Path) -> list[dict]:
    """Field records that disagree (two crews on one point, taken but marked inaccessible)."""
    try:
        from fieldplan.field.sync import JOURNAL_NAME, field_conflicts
    except ImportError:
        return []
    if not (folder / JOURNAL_NAME).exists():
        return []  # no field records yet: nothing can disagree
    return field_conflicts(folder)
