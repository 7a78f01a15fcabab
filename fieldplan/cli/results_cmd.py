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
        typer.Option("--variable", help="Value column to import (repeat for several; default all)."),
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
    by: Annotated[str | None, typer.Option("--recorded-by", help="With --remove-round: who (default $USER).")] = None,
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

    from fieldplan.field.record import POSITIONS_NAME, record_positions
    from fieldplan.results import append_round, format_outliers, format_problems, prepare_import
    from fieldplan.store import transaction

    # Read and check every input before the first write: a refused import stores nothing. The
    # round and its positions are one change of the plan, made under its lock (the rounds
    # already stored are read under it) and written only when the block ends.
    with transaction(plan_dir) as txn:
        ready = prepare_import(
            txn.plan,
            file,
            value_columns=value,
            sheet=sheet,
            date_format=date_format,
            allow_duplicate=allow_duplicate,
            positions=positions,
            max_offset=max_offset,
        )
        table = ready.table
        for note in table.notes:
            echo_err(f"note: {file.name}: {note}")
        if not table.problems.empty:
            echo_err(f"{len(table.problems)} problem(s) in {file.name}:")
            echo_err(format_problems(table.problems))
        if len(ready.suspects):
            echo_err(
                f"{len(ready.suspects)} value(s) far from the rest of the round "
                "(modified z-score beyond 3.5, Iglewicz & Hoaglin 1993), e.g. a decimal slip:"
            )
            echo_err(format_outliers(ready.suspects))
            if not accept_outliers:
                raise InputError(
                    f"{file}: nothing stored; correct the values listed above, or give --accept-outliers "
                    "if they are real"
                )
        stored = append_round(
            plan_dir,
            table,
            existing=ready.existing,
            imported_utc=_now_utc(),
            allow_duplicate=allow_duplicate,
            round_no=ready.round_no,
        )
        report = None
        if ready.positions is not None:
            report = record_positions(
                plan_dir, ready.positions, max_offset=ready.max_offset, round_no=stored, recorded_utc=_now_utc()
            )
    if not quiet:
        cols = ", ".join(table.value_columns)
        typer.echo(
            f"Stored round {stored}: {ready.matched} of {len(ready.active)} active plan points, values {cols} "
            f"-> {Path(plan_dir) / 'plan.gpkg'} (layer results)"
        )
        if ready.inactive:
            echo_err(
                f"note: {len(ready.inactive)} row(s) for points not in the active sample (spares not in "
                f"use or marked inaccessible), stored but worth a check: {', '.join(ready.inactive[:10])}"
                + (" ..." if len(ready.inactive) > 10 else "")
            )
    if report is not None:
        far = report[report["beyond_max_offset"]]
        for row in far.head(50).itertuples(index=False):
            echo_err(f"warning: point {row.point_id} was sampled {row.offset_m:.1f} m from its planned spot")
        if not quiet:
            typer.echo(
                f"Positions: {len(report)} recorded, {len(far)} more than {ready.max_offset:g} m from the "
                f"plan -> {Path(plan_dir) / POSITIONS_NAME}"
            )


def _remove(plan_dir: Path, round_no: int, *, reason: str, by: str | None, quiet: bool) -> None:
    from fieldplan.results import remove_round

    done = remove_round(plan_dir, round_no, reason=reason, by=by)
    # Never silent: the removal is printed even with --quiet.
    typer.echo(
        f"Removed round {done['round']} ({done['source']}, {done['values']} values) from the results; "
        f"kept in layer results_removed, event {done['event_id']} in the events table"
    )
    if (Path(plan_dir) / "estimates.csv").exists():
        echo_err("note: estimates.csv was made before the removal; run 'fieldplan estimate' again")


def register(app: typer.Typer) -> None:
    app.command("results")(results)
