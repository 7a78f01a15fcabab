"""``fieldplan estimate``: means with confidence intervals from stored results."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Quiet, handle_errors

__all__ = ["register", "estimate", "format_estimates"]

ESTIMATES_NAME = "estimates.csv"


def _fmt(x, digits: int = 3) -> str:
    import math

    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "—"
    if isinstance(x, float):
        return f"{x:.{digits}f}"
    return str(x)


def format_estimates(table, *, confidence: float) -> str:
    """Plain-text table of the estimates (what the command prints)."""
    import pandas as pd

    pct = f"{100 * confidence:g}%"
    head = ["group", "n", "mean", "se", f"{pct} interval"]
    has_local = "se_local" in table
    has_p = "p_reached" in table
    has_date = "target_date" in table
    if has_local:
        head += ["se local", f"{pct} local"]
    has_icc = "icc" in table and bool(table["icc"].notna().any())
    if has_icc:
        head += ["ICC", "deff"]
    if has_p:
        below = "direction" in table and (table["direction"] == "below").any()
        head.append("P(≤ target)" if below else "P(≥ target)")
    if has_date:
        head.append("target date (range)")
    head.append("note")
    lines = []
    for r in table.to_dict("records"):
        cells = [str(r["group"]), str(r["n"]), _fmt(r["mean"]), _fmt(r["se"])]
        cells.append("—" if pd.isna(r["lower"]) else f"{_fmt(r['lower'])} – {_fmt(r['upper'])}")
        if has_local:
            cells += [
                _fmt(r["se_local"]),
                "—" if pd.isna(r["lower_local"]) else f"{_fmt(r['lower_local'])} – {_fmt(r['upper_local'])}",
            ]
        if has_icc:
            cells += [_fmt(r["icc"], 2), _fmt(r["deff"], 2)]
        if has_p:
            cells.append("—" if pd.isna(r["p_reached"]) else f"{r['p_reached']:.2f}")
        if has_date:
            if pd.isna(r.get("target_date")):
                note = r.get("trend_note")
                cells.append(note if isinstance(note, str) and note else "—")
            else:
                # Full dates with years: a range can cross the new year (southern harvests, late rounds).
                cells.append(
                    f"{r['target_date']:%Y-%m-%d} ({r['date_lower']:%Y-%m-%d} – {r['date_upper']:%Y-%m-%d})"
                )
        cells.append(str(r.get("note") or ""))
        lines.append(cells)
    widths = [max(len(h), *(len(c[i]) for c in lines)) for i, h in enumerate(head)]
    out = ["  ".join(h.ljust(w) for h, w in zip(head, widths, strict=True)).rstrip()]
    out += ["  ".join(c.ljust(w) for c, w in zip(cells, widths, strict=True)).rstrip() for cells in lines]
    return "\n".join(out)


@handle_errors
def estimate(
    plan_dir: Annotated[Path, typer.Argument(help="Plan folder with imported results.")],
    value: Annotated[str, typer.Option("--variable", help="Variable to estimate, e.g. brix.")],
    by: Annotated[str, typer.Option("--group-by", help="Group by block, stratum, variety or farm.")] = "block",
    confidence: Annotated[float, typer.Option("--confidence", help="Two-sided confidence level.")] = 0.95,
    target: Annotated[
        float | None,
        typer.Option("--target", help="Target value: adds P(mean ≥ target) and a projected date."),
    ] = None,
    target_below: Annotated[
        bool | None,
        typer.Option(
            "--target-below/--target-above",
            help="The target is reached from above (falling, e.g. titratable acidity) or from below "
            "(rising, e.g. Brix). Default: from above for acidity, from below otherwise.",
        ),
    ] = None,
    round_no: Annotated[
        int | None,
        typer.Option("--round", min=1, help="Round to report (default the latest); later rounds are ignored."),
    ] = None,
    local_variance: Annotated[
        bool,
        typer.Option(
            "--local-variance",
            help="Also report the local-difference variance (grids, balanced samples).",
        ),
    ] = False,
    previous: Annotated[
        Path | None,
        typer.Option(
            "--previous",
            help="Earlier plan whose sites this plan revisits (plan --revisit): estimate the change "
            "at the same sites (paired differences) instead of means.",
        ),
    ] = None,
    compare_round: Annotated[
        int | None,
        typer.Option("--compare-round", min=1, help="Estimate the change from this round at the same sites."),
    ] = None,
    quiet: Quiet = False,
) -> None:
    """Estimate means with confidence intervals for the latest results round.

    Writes estimates.csv in the plan folder and prints the table; with --previous
    or --compare-round, the change at the same sites goes to changes.csv.
    """
    if previous is not None or compare_round is not None:
        from fieldplan.estimate.paired import report_change

        report_change(plan_dir, value, by=by, confidence=confidence, round_no=round_no,
                      previous=previous, compare_round=compare_round, quiet=quiet)
        return
    from fieldplan.estimate.readiness import target_direction
    from fieldplan.estimate.table import estimate_table
    from fieldplan.results import normalise_column, stored_results
    from fieldplan.store import load_plan
    from fieldplan.write.safe import atomic_write_text, neutralise_frame

    plan = load_plan(plan_dir)
    design = str(plan.params.get("design", "grid"))
    results = stored_results(plan.layers)
    direction, why = target_direction(normalise_column(value), below=target_below)
    table = estimate_table(
        plan.points,
        plan.blocks,
        results,
        value=normalise_column(value),
        design=design,
        by=by,
        confidence=confidence,
        target=target,
        local_variance=local_variance,
        round_no=round_no,
        direction=direction,
    )
    out = table.copy()
    out.insert(0, "variable", normalise_column(value))
    out.insert(1, "confidence", confidence)
    for c in ("date", "target_date", "date_lower", "date_upper"):
        if c in out:
            out[c] = out[c].map(lambda t: "" if t is None or t != t else f"{t:%Y-%m-%d}")
    csv = neutralise_frame(out).to_csv(index=False, float_format="%.6g", lineterminator="\n")
    atomic_write_text(Path(plan_dir) / ESTIMATES_NAME, csv)
    if not quiet:
        rnd = int(table["round"].iloc[0])
        methods = "; ".join(
            f"{'all' if g == 'all' else by}: {e}"
            for g, e in table.assign(g=table["group"].eq("all").map({True: "all", False: by}))[
                ["g", "estimator"]
            ]
            .drop_duplicates()
            .itertuples(index=False)
        )
        when = table["date"].iloc[0]
        on = "" if when is None or when != when else f" of {when:%Y-%m-%d}"
        typer.echo(f"{normalise_column(value)}, round {rnd}{on}, design {design} ({methods})")
        if target is not None and why:
            typer.echo(f"note: {why} (--target-above to change)")
        typer.echo(format_estimates(table, confidence=confidence))
        from fieldplan.field.mark import substitution_notes

        for line in substitution_notes(plan):
            typer.echo(f"note: {line}")
        if design in ("grid", "balanced") and not local_variance:
            typer.echo(
                "note: grid/balanced points are treated as a simple random sample, which is "
                "conservative on patchy fields; --local-variance adds the local-difference estimate"
            )
        typer.echo(f"-> {Path(plan_dir) / ESTIMATES_NAME}")


def register(app: typer.Typer) -> None:
    app.command("estimate")(estimate)
