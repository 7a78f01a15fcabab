"""``fieldplan results``: bring a results table into a plan folder as a new round."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Quiet, echo_err, handle_errors

__all__ = ["register", "results"]


def _now_utc() -> str:
    import os
    from datetime import UTC, datetime

    # SOURCE_DATE_EPOCH keeps the stored round byte-identical across reruns.
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    when = datetime.fromtimestamp(int(epoch), UTC) if epoch else datetime.now(UTC)
    return when.strftime("%Y-%m-%dT%H:%M:%SZ")


def _active_ids(points) -> set[str]:
    """Points to be sampled now: not unused spares, not marked inaccessible."""
    from fieldplan.field.mark import REPLACEMENT, SUBSTITUTE
    from fieldplan.field.spares import SELECTED

    ids = points["point_id"].astype(str)
    if "status" not in points.columns:
        return set(ids)
    status = points["status"].fillna(SELECTED).astype(str)
    return set(ids[status.isin([SELECTED, REPLACEMENT, SUBSTITUTE])])


@handle_errors
def results(
    plan_dir: Annotated[Path, typer.Argument(help="Plan folder made by 'fieldplan plan'.")],
    file: Annotated[
        Path | None,
        typer.Argument(
            help="Results table (CSV or .xlsx): point_id or sample_id, value columns, optional date."
        ),
    ] = None,
    value: Annotated[
        list[str] | None,
        typer.Option("--value", help="Value column to import (repeat for several; default all)."),
    ] = None,
    allow_duplicate: Annotated[
        bool,
        typer.Option("--allow-duplicate", help="Import a file already imported, as a new round."),
    ] = False,
    positions: Annotated[
        Path | None,
        typer.Option(
            "--positions", help="GPX waypoints named by point id: where samples were actually taken."
        ),
    ] = None,
    max_offset: Annotated[
        float | None,
        typer.Option(
            "--max-offset",
            help="Metres from the planned spot before a sample is flagged (default: half the grid spacing, else 10).",
        ),
    ] = None,
    sheet: Annotated[
        str | None, typer.Option("--sheet", help="Sheet of an .xlsx workbook to read (default the first).")
    ] = None,
    date_format: Annotated[
        str | None,
        typer.Option(
            "--date-format",
            help="Dates that are not ISO: dmy (31/03/2026), mdy (03/31/2026) or a pattern such as %d.%m.%Y.",
        ),
    ] = None,
    accept_outliers: Annotated[
        bool,
        typer.Option(
            "--accept-outliers",
            help="Store values far from the rest of the round (modified z-score above 3.5) after checking them.",
        ),
    ] = False,
    remove_round: Annotated[
        int | None,
        typer.Option(
            "--remove-round",
            min=1,
            help="Take round N out of the results (kept in layer results_removed, logged in the events table).",
        ),
    ] = None,
    reason: Annotated[str, typer.Option("--reason", help="With --remove-round: why, for the events table.")] = "",
    by: Annotated[str | None, typer.Option("--by", help="With --remove-round: who (default $USER).")] = None,
    quiet: Quiet = False,
) -> None:
    """Check a results file against the plan's points and store it as the next round.

    Every problem (unknown point or sample ids, duplicates, cells that are not
    numbers, values outside a plausible range) is listed with its row number, one
    line per kind when a kind repeats; the rest of the file is kept. Values far
    from the rest of the round stop the import until --accept-outliers. The whole
    file (and --positions) is checked before anything is written; earlier rounds
    are never overwritten.

    Example: fieldplan results plan-2027 lab-round1.xlsx --date-format dmy
    """
    from fieldplan.errors import InputError, OptionError

    if remove_round is not None:
        if file is not None:
            raise OptionError("give either a results FILE to import or --remove-round N, not both")
        _remove(plan_dir, remove_round, reason=reason, by=by, quiet=quiet)
        return
    if file is None:
        raise OptionError("give a results file to import (CSV or .xlsx), or --remove-round N")

    from fieldplan.results import (
        append_round,
        format_outliers,
        format_problems,
        next_round,
        outlier_suspects,
        read_results,
        refuse_duplicate,
        sample_id_map,
        stored_results,
    )
    from fieldplan.store import load_plan

    # Read and check every input before the first write: a refused import stores nothing.
    plan = load_plan(plan_dir)
    existing = stored_results(plan.layers)
    round_no = next_round(plan.layers)
    table = read_results(
        file,
        point_ids=plan.points["point_id"].astype(str),
        value_columns=value,
        sample_ids=sample_id_map(plan.points, rounds=round_no + 2),
        date_format=date_format,
        sheet=sheet,
    )
    # A refused re-import prints the refusal alone, not the problems of a file already dealt with.
    refuse_duplicate(table, existing, allow_duplicate=allow_duplicate)
    actual = _read_positions(table, positions)
    if actual is not None:
        from fieldplan.field.positions import default_max_offset, position_report

        # Unknown waypoint names or a bad --max-offset fail here, before the round is stored.
        limit = default_max_offset(plan.params) if max_offset is None else max_offset
        position_report(plan, actual, max_offset=limit)
    for note in table.notes:
        echo_err(f"note: {file.name}: {note}")
    if not table.problems.empty:
        echo_err(f"{len(table.problems)} problem(s) in {file.name}:")
        echo_err(format_problems(table.problems))
    suspects = outlier_suspects(table)
    if len(suspects):
        echo_err(
            f"{len(suspects)} value(s) far from the rest of the round "
            "(modified z-score beyond 3.5, Iglewicz & Hoaglin 1993), e.g. a decimal slip:"
        )
        echo_err(format_outliers(suspects))
        if not accept_outliers:
            raise InputError(
                f"{file}: nothing stored; correct the values listed above, or give --accept-outliers "
                "if they are real"
            )
    stored = append_round(
        plan_dir,
        table,
        existing=existing,
        imported_utc=_now_utc(),
        allow_duplicate=allow_duplicate,
        round_no=round_no,
    )
    if not quiet:
        active = _active_ids(plan.points)
        matched = table.data["point_id"].astype(str)
        got = len(set(matched) & active)
        inactive = sorted(set(matched) - active)
        cols = ", ".join(table.value_columns)
        typer.echo(
            f"Stored round {stored}: {got} of {len(active)} active plan points, values {cols} "
            f"-> {Path(plan_dir) / 'plan.gpkg'} (layer results)"
        )
        if inactive:
            echo_err(
                f"note: {len(inactive)} row(s) for points not in the active sample (spares not in use "
                f"or marked inaccessible), stored but worth a check: {', '.join(inactive[:10])}"
                + (" ..." if len(inactive) > 10 else "")
            )
    if actual is not None:
        _positions(plan, plan_dir, actual, max_offset=max_offset, round_no=stored, quiet=quiet)


def _read_positions(table, gpx: Path | None):
    """Recorded positions from --positions or the file's lon/lat columns (read only)."""
    from fieldplan.field.positions import positions_from_table, read_gpx_positions

    if gpx is not None:
        return read_gpx_positions(gpx)
    data = table.data
    if "lon" not in data.columns and "lat" not in data.columns:
        return None
    return positions_from_table(data[[c for c in ("point_id", "lon", "lat") if c in data.columns]],
                                source=table.source)  # fmt: skip


def _positions(plan, plan_dir: Path, actual, *, max_offset, round_no: int, quiet: bool) -> None:
    """Compare recorded positions with the plan and store them."""
    from fieldplan.field.positions import default_max_offset
    from fieldplan.field.record import POSITIONS_NAME, record_positions

    limit = default_max_offset(plan.params) if max_offset is None else max_offset
    report = record_positions(plan_dir, actual, max_offset=limit, round_no=round_no, recorded_utc=_now_utc())
    far = report[report["beyond_max_offset"]]
    for row in far.head(50).itertuples(index=False):
        echo_err(f"warning: point {row.point_id} was sampled {row.offset_m:.1f} m from its planned spot")
    if not quiet:
        typer.echo(
            f"Positions: {len(report)} recorded, {len(far)} more than {limit:g} m from the plan "
            f"-> {Path(plan_dir) / POSITIONS_NAME}"
        )


def _remove(plan_dir: Path, round_no: int, *, reason: str, by: str | None, quiet: bool) -> None:
    from fieldplan.results import remove_round

    done = remove_round(plan_dir, round_no, reason=reason, by=by)
    # Never silent: the removal is printed even with --quiet.
    typer.echo(
        f"Removed round {done['round']} ({done['source']}, {done['values']} values) from the results; "
        f"kept in layer results_removed, event {done['event_id']} in the events table"
    )


def register(app: typer.Typer) -> None:
    app.command("results")(results)
