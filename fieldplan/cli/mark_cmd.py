"""``fieldplan mark``: record points that cannot be sampled (or restore them) and re-write the plan."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Quiet, echo_err, handle_errors

__all__ = ["register", "mark"]


def _ids_from_file(path: Path) -> list[str]:
    """Point ids from a text or CSV file: one per line, or a ``point_id`` column."""
    from fieldplan.errors import InputError

    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as err:
        raise InputError(
            f"{path}: cannot read the list of point ids ({err}); give a UTF-8 text or CSV file"
        ) from None
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    if lines and "," in lines[0]:
        header = [h.strip().lower() for h in lines[0].split(",")]
        if "point_id" not in header:
            raise InputError(f"{path}: a CSV list of points needs a point_id column")
        col = header.index("point_id")
        return [line.split(",")[col].strip() for line in lines[1:] if len(line.split(",")) > col]
    if lines and lines[0].lower() == "point_id":
        lines = lines[1:]
    return lines


@handle_errors
def mark(
    plan_dir: Annotated[Path, typer.Argument(help="Plan folder made by 'fieldplan plan'.")],
    point_ids: Annotated[list[str] | None, typer.Argument(help="Point ids, as in points.csv.")] = None,
    inaccessible: Annotated[
        bool,
        typer.Option("--inaccessible", help="The points cannot be sampled: bring in spares/substitutes."),
    ] = False,
    restore: Annotated[
        bool, typer.Option("--restore", help="Undo an earlier --inaccessible for these points.")
    ] = False,
    reason: Annotated[str, typer.Option("--reason", help="Why (kept in the plan's events table).")] = "",
    from_file: Annotated[
        Path | None, typer.Option("--ids-file", help="File of point ids: one per line, or CSV with point_id.")
    ] = None,
    by: Annotated[str | None, typer.Option("--recorded-by", help="Who records this (default: $USER).")] = None,
    quiet: Quiet = False,
) -> None:
    """Mark points inaccessible (activating spares or within-cell substitutes) or restore them.

    Every change is appended to the events table of plan.gpkg; nothing is deleted.

    Example: fieldplan mark plan-2027 B03-014 --inaccessible --reason "flooded"
    """
    from fieldplan.errors import OptionError
    from fieldplan.field.events import INACCESSIBLE, RESTORE
    from fieldplan.field.mark import mark_points

    if inaccessible == restore:
        raise OptionError("give exactly one of --inaccessible or --restore")
    if inaccessible and not reason.strip():
        raise OptionError(
            "--inaccessible needs a --reason (e.g. --reason 'flooded'); it goes in the audit trail"
        )
    ids = list(point_ids or [])
    if from_file is not None:
        ids += _ids_from_file(from_file)
    result = mark_points(
        plan_dir, ids, action=INACCESSIBLE if inaccessible else RESTORE, reason=reason, by=by
    )
    for note in result.notes:
        echo_err(f"note: {note}")
    from fieldplan.route.folder import rerun_command

    command = rerun_command(plan_dir)
    if command is not None:
        moved = [
            f"{row.replacement_id if row.action == INACCESSIBLE else row.point_id} joins crew "
            f"{_crew_of(result.points, row.replacement_id if row.action == INACCESSIBLE else row.point_id)}"
            for row in result.events.itertuples(index=False)
            if row.replacement_id
        ]
        echo_err(
            "note: points.csv and points.gpx give each point brought in the crew of the point it replaces"
            + (f" ({'; '.join(moved)})" if moved else "")
            + "; crew_NN.gpx and crew_sheets.html still show the routes made before this change. "
            f"To re-route every crew with the same options: {command}"
        )
    if quiet:
        return
    for row in result.events.itertuples(index=False):
        if row.action == INACCESSIBLE:
            swap = f", sample {row.replacement_id} instead" if row.replacement_id else ", nothing replaces it"
            typer.echo(f"{row.point_id}: inaccessible{swap} (event {row.event_id})")
        else:
            swap = f"; {row.replacement_id} no longer needed" if row.replacement_id else ""
            typer.echo(f"{row.point_id}: restored{swap} (event {row.event_id})")


def _crew_of(points, point_id: str) -> int:
    if "crew" not in points.columns:
        return 0
    hit = points.loc[points["point_id"].astype(str) == str(point_id), "crew"]
    return int(hit.iloc[0]) if len(hit) else 0


def register(app: typer.Typer) -> None:
    app.command("mark")(mark)
