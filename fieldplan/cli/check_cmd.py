"""``fieldplan check``: coverage of a plan folder, block by block; exit 1 when a rule fails."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Quiet, echo_err, handle_errors

__all__ = ["register", "check"]

_MAX_PROBLEMS_SHOWN = 20


@handle_errors
def check(
    plan_dir: Annotated[Path, typer.Argument(help="A plan folder written by 'fieldplan plan'.")],
    min_per_block: Annotated[
        int, typer.Option("--min-per-block", help="Rule: at least this many points in every block.")
    ] = 1,
    max_gap: Annotated[
        float | None,
        typer.Option(
            "--max-gap", help="Rule: no spot of a block further than this many metres from a point."
        ),
    ] = None,
    proportional: Annotated[
        bool,
        typer.Option(
            "--proportional",
            help="Rule: each block within one point of its area-proportional share (else a note).",
        ),
    ] = False,
    csv: Annotated[
        Path | None,
        typer.Option("--csv", help="Where to write the table (default PLAN_DIR/coverage.csv)."),
    ] = None,
    quiet: Quiet = False,
) -> None:
    """Check a plan's coverage block by block; exit 1 when a rule fails.

    Every block sampled, points per block against their area share, the largest gap
    from any spot of a block to its nearest point, points outside their block or in
    an exclusion.

    Hand edits of points.geojson are picked up: when it differs from plan.gpkg it is
    the file checked. Exit code 0 when every rule holds, 1 when one fails.

    Example: fieldplan check plan-2027-soil --min-per-block 3 --max-gap 60
    """
    from rich.console import Console
    from rich.table import Table

    from fieldplan.check import coverage, points_to_check, write_coverage_csv
    from fieldplan.store import load_plan

    plan = load_plan(plan_dir)
    points, source = points_to_check(plan_dir, plan)
    report = coverage(
        plan,
        points=points,
        source=source,
        min_per_block=min_per_block,
        max_gap_m=max_gap,
        proportional=proportional,
    )
    out = write_coverage_csv(report, csv if csv is not None else Path(plan_dir) / "coverage.csv")

    if not quiet:
        console = Console(highlight=False)
        table = Table(title=_plain(f"Coverage of {plan_dir}"), caption=_plain(source))
        columns = (
            ("block", "Block", "left"),
            ("n_points", "Points", "right"),
            ("expected_points", "Share", "right"),
            ("max_gap_m", "Gap m", "right"),
            ("outside", "Out", "right"),
            ("in_exclusion", "Excl", "right"),
            ("status", "Status", "left"),
            ("notes", "Notes", "left"),
        )
        for key, title, justify in columns:
            table.add_column(title, justify=justify, no_wrap=key != "notes")
        for row in report.table.to_dict("records"):
            cells = []
            for key, _, _ in columns:
                value = row[key]
                if key == "max_gap_m":
                    value = "-" if not math.isfinite(value) else f"{value:.1f}"
                elif key == "expected_points":
                    value = f"{value:.2f}"  # as the table holds it, and as the notes quote it
                cells.append(str(value))
            style = "bold red" if row["status"] == "fail" else None
            # Names come from input files: print them literally, never as rich markup.
            table.add_row(*(_plain(c) for c in cells), style=style)
        console.print(table)
        if len(report.problems):
            for row in report.problems.head(_MAX_PROBLEMS_SHOWN).itertuples(index=False):
                echo_err(f"point {row.point_id} (block {row.block}) {row.problem}")
            extra = len(report.problems) - _MAX_PROBLEMS_SHOWN
            if extra > 0:
                echo_err(f"... and {extra} more misplaced points")
        typer.echo(f"Table: {out}")
    from fieldplan.field.mark import replacement_warnings

    for line in replacement_warnings(plan):
        echo_err(f"warning: {line}")
    for line in report.failures:
        echo_err(f"fail: {line}")
    if not report.ok:
        raise typer.Exit(1)
    if not quiet:
        typer.echo("All rules hold.")


def _plain(text: str):
    from rich.text import Text

    return Text(text)


def register(app: typer.Typer) -> None:
    app.command("check")(check)
