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
        Path, typer.Argument(help="Results table (CSV): point_id, value columns, optional date.")
    ],
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
    quiet: Quiet = False,
) -> None:
    """Check a results file against the plan's points and store it as the next round.

    Every problem (unknown point ids, duplicates, cells that are not numbers,
    values outside a plausible range) is listed with its row number; the rest of
    the file is kept. Earlier rounds are never overwritten.
    """
    from fieldplan.results import (
        append_round,
        format_problems,
        read_results,
        refuse_duplicate,
        stored_results,
    )
    from fieldplan.store import load_plan

    plan = load_plan(plan_dir)
    table = read_results(file, point_ids=plan.points["point_id"].astype(str), value_columns=value)
    existing = stored_results(plan.layers)
    # A refused re-import prints the refusal alone, not the problems of a file already dealt with.
    refuse_duplicate(table, existing, allow_duplicate=allow_duplicate)
    if not table.problems.empty:
        echo_err(f"{len(table.problems)} problem(s) in {file.name}:")
        echo_err(format_problems(table.problems))
    round_no = append_round(
        plan_dir,
        table,
        existing=existing,
        imported_utc=_now_utc(),
        allow_duplicate=allow_duplicate,
    )
    if not quiet:
        matched = table.data["point_id"].nunique()
        total = len(plan.points)
        cols = ", ".join(table.value_columns)
        typer.echo(
            f"Stored round {round_no}: {matched} of {total} plan points, values {cols} "
            f"-> {Path(plan_dir) / 'plan.gpkg'} (layer results)"
        )

    _positions(plan, plan_dir, file, positions, max_offset=max_offset, round_no=round_no, quiet=quiet)


def _positions(plan, plan_dir: Path, file: Path, gpx: Path | None, *, max_offset, round_no: int, quiet: bool):
    """Compare recorded positions (lon/lat columns or a GPX file) with the plan and store them."""
    from fieldplan.field.positions import default_max_offset, positions_from_csv, read_gpx_positions
    from fieldplan.field.record import POSITIONS_NAME, record_positions

    actual = read_gpx_positions(gpx) if gpx is not None else positions_from_csv(file)
    if actual is None:
        return
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


def register(app: typer.Typer) -> None:
    app.command("results")(results)
