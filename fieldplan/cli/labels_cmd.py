"""``fieldplan labels``: sticker sheets (labels.pdf) for a plan's sample bags."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Quiet, handle_errors
from fieldplan.words import plural

__all__ = ["register", "labels"]


def _check_date(text: str | None) -> str | None:
    from datetime import date

    from fieldplan.errors import OptionError

    if text is None:
        return None
    try:
        return date.fromisoformat(text).isoformat()
    except ValueError:
        raise OptionError(f"--date takes YYYY-MM-DD, e.g. 2027-03-01; got {text!r}") from None


@handle_errors
def labels(
    plan_dir: Annotated[Path, typer.Argument(help="A plan folder made by 'fieldplan plan'.")],
    layout: Annotated[
        str,
        typer.Option(
            "--label-sheet",
            help="Sheet: a4-3x8, letter-3x10, or COLSxROWS (columns x rows, e.g. 4x10 or letter-2x7)."
        ),
    ] = "a4-3x8",
    date: Annotated[
        str | None, typer.Option(help="Date printed on every label (YYYY-MM-DD); blank line if not given.")
    ] = None,
    skip: Annotated[int, typer.Option(min=0, help="Label positions already used on the first sheet.")] = 0,
    round_no: Annotated[
        int,
        typer.Option("--round", min=1, help="Sampling round: rounds after the first get their own ids."),
    ] = 1,
    include_spares: Annotated[
        bool,
        typer.Option(
            "--include-spares",
            help="Also print labels for unused spares, after the others and marked SPARE.",
        ),
    ] = False,
    preview: Annotated[
        bool, typer.Option(help="Also write labels_preview.png (first sheet) to check before printing.")
    ] = False,
    quiet: Quiet = False,
) -> None:
    """Write labels.pdf into the plan folder: one label per sample with its id as text and QR code.

    Samples of points to be sampled only (points marked inaccessible get none);
    --include-spares adds the unused spares after them, each marked SPARE.

    Round 2 and later (--round) write labels_r2.pdf etc. with that round's ids.

    Example: fieldplan labels plan-2027-soil --label-sheet letter-3x10 --date 2027-03-01
    """
    from fieldplan.samples.labels import label_records, labels_pdf, labels_png, parse_layout
    from fieldplan.store import load_plan
    from fieldplan.write.safe import atomic_write_bytes

    sheet = parse_layout(layout)
    when = _check_date(date)
    plan = load_plan(plan_dir)
    records = label_records(
        plan.points, plan_id=plan.params.get("plan_id", ""), round_no=round_no, include_spares=include_spares
    )
    suffix = "" if round_no == 1 else f"_r{round_no}"
    pdf_path = plan_dir / f"labels{suffix}.pdf"
    atomic_write_bytes(pdf_path, labels_pdf(records, sheet, date=when, skip=skip))
    if preview:
        import io

        buffer = io.BytesIO()
        labels_png(records, sheet, date=when, skip=skip).save(buffer, format="PNG")
        atomic_write_bytes(plan_dir / f"labels{suffix}_preview.png", buffer.getvalue())
    if not quiet:
        sheets = -(-(skip + len(records)) // sheet.per_page)
        n_spare = int((records["status"] == "spare").sum())
        extra = f" ({n_spare} spare(s), marked SPARE, at the end)" if n_spare else ""
        typer.echo(
            f"{plural(len(records), 'label')}{extra} on {plural(sheets, sheet.name + ' sheet')} -> {pdf_path}\n"
            "Print at 100 % (no 'fit to page') so labels line up with the sheet."
        )


def register(app: typer.Typer) -> None:
    app.command("labels")(labels)
