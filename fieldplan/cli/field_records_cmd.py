"""``fieldplan field-records``: apply records exported from a crew page, as the server's sync would."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Quiet, echo_err, handle_errors

__all__ = ["register", "field_records"]


@handle_errors
def field_records(
    plan_dir: Annotated[Path, typer.Argument(help="Plan folder the crew worked on.")],
    file: Annotated[
        Path, typer.Argument(help="Records file saved by the crew page's Export button (.json).")
    ],
    crew: Annotated[
        int | None, typer.Option("--crew", min=1, help="Crew number (default: the one in the file).")
    ] = None,
    quiet: Quiet = False,
) -> None:
    """Store a crew page's exported records in the plan: each record once, however often applied.

    Values go to the results layer (one round per field day), positions to positions.csv,
    unreachable points are marked inaccessible (spares or substitutes step in), and every
    record is kept in field_records.jsonl. Conflicts are listed, never resolved silently.
    """
    from fieldplan.errors import OptionError
    from fieldplan.field.sync import apply_records, read_records_file

    records, header = read_records_file(file)
    crew_no = crew if crew is not None else header.get("crew")
    if crew_no in (None, ""):
        raise OptionError(f"{file}: the file names no crew; give --crew N")
    if header.get("plan") and str(header["plan"]) != Path(plan_dir).resolve().name and not quiet:
        echo_err(
            f"note: {file.name} was exported from plan {header['plan']!r}; applying to {Path(plan_dir).name}"
        )
    report = apply_records(plan_dir, records, crew=int(crew_no))
    for rid, why in report.refused.items():
        echo_err(f"record {rid}: kept, not applied: {why}")
    for note in report.notes:
        echo_err(f"note: {note}")
    for conflict in report.conflicts:
        echo_err(f"conflict: {conflict['note']}")
    if not quiet:
        typer.echo(
            f"{len(report.stored)} new record(s), {len(report.duplicates)} already stored, "
            f"{len(report.refused)} not applied"
            + (f"; results round {report.round_no}" if report.round_no else "")
            + f" -> {Path(plan_dir) / 'field_records.jsonl'}"
        )


def register(app: typer.Typer) -> None:
    app.command("field-records")(field_records)
