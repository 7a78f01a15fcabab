"""``fieldplan lab-sheet``: lab submission sheet and results template for a plan."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Quiet, handle_errors
from fieldplan.words import plural

__all__ = ["register", "lab_sheet"]


@handle_errors
def lab_sheet(
    plan_dir: Annotated[Path, typer.Argument(help="A plan folder made by 'fieldplan plan'.")],
    analyses: Annotated[
        str, typer.Option(help='Analyses to request, comma-separated, e.g. "pH,P,K" or "Brix,pH,TA".')
    ],
    round_no: Annotated[
        int,
        typer.Option("--round", min=1, help="Sampling round: rounds after the first get their own ids."),
    ] = 1,
    include_spares: Annotated[
        bool,
        typer.Option("--include-spares", help="Also list unused spares (status 'spare'), after the others."),
    ] = False,
    quiet: Quiet = False,
) -> None:
    """Write lab_submission.csv and results_template.csv into the plan folder.

    Round 2 and later (--round) write lab_submission_r2.csv etc. with that round's ids.
    Samples of points to be sampled only, with a status column (selected, replacement,
    substitute); --include-spares adds the unused spares (status spare).

    Fill in results_template.csv (one row per sample) and read it back with
    'fieldplan results'.

    Example: fieldplan lab-sheet plan-2027-soil --analyses "pH,P,K,organic_matter"
    """
    from fieldplan.safety import CAUTIONS
    from fieldplan.samples.lab import parse_analyses, write_lab_sheet
    from fieldplan.store import load_plan

    names = parse_analyses(analyses)
    plan = load_plan(plan_dir)
    paths = write_lab_sheet(plan, plan_dir, analyses=names, round_no=round_no, include_spares=include_spares)
    if not quiet:
        from fieldplan.samples.lab import sample_rows

        rows = sample_rows(plan.points, include_spares=include_spares)
        n_spare = int((rows["status"] == "spare").sum())
        samples = plural(len(rows), "sample") + (f" ({plural(n_spare, 'spare')})" if n_spare else "")
        typer.echo(f"{samples}, analyses {', '.join(names)} -> " + ", ".join(str(p) for p in paths))
        if plan.params.get("purpose") == "soil":
            typer.echo("\n".join("Caution: " + c for c in CAUTIONS if "buried" in c))


def register(app: typer.Typer) -> None:
    app.command("lab-sheet")(lab_sheet)
