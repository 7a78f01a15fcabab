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
    quiet: Quiet = False,
) -> None:
    """Check a results file against the plan's points and store it as the next round.

    Every problem (unknown point ids, duplicates, cells that are not numbers,
    values outside a plausible range) is listed with its row number; the rest of
    the file is kept. Earlier rounds are never overwritten.
    """
    from fieldplan.results import append_round, format_problems, read_results, stored_results
    from fieldplan.store import load_plan

    plan = load_plan(plan_dir)
    table = read_results(file, point_ids=plan.points["point_id"].astype(str), value_columns=value)
    if not table.problems.empty:
        echo_err(f"{len(table.problems)} problem(s) in {file.name}:")
        echo_err(format_problems(table.problems))
    existing = stored_results(plan.layers)
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


def register(app: typer.Typer) -> None:
    app.command("results")(results)
