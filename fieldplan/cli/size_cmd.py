"""``fieldplan size``: how many samples for a margin of error at a confidence level."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import handle_errors

__all__ = ["register", "size"]


@handle_errors
def size(
    cv: Annotated[
        float | None,
        typer.Option(
            "--cv", help="Coefficient of variation in percent (with --margin in percent of the mean)."
        ),
    ] = None,
    margin: Annotated[
        float | None,
        typer.Option("--margin", help="Margin of error in percent of the mean (with --cv)."),
    ] = None,
    sd: Annotated[
        float | None,
        typer.Option("--sd", help="Standard deviation, in the units of the measurement (with --margin-abs)."),
    ] = None,
    margin_abs: Annotated[
        float | None,
        typer.Option("--margin-abs", help="Margin of error in the units of the measurement (with --sd)."),
    ] = None,
    confidence: Annotated[
        float, typer.Option("--confidence", help="Two-sided confidence level, e.g. 0.95.")
    ] = 0.95,
    population: Annotated[
        int | None,
        typer.Option(
            "--population",
            help="Units in the population (plants, cells) for the finite population correction.",
        ),
    ] = None,
    units_per_cluster: Annotated[
        int | None, typer.Option("--units-per-cluster", help="Units taken at each cluster (with --icc).")
    ] = None,
    icc: Annotated[
        float | None, typer.Option("--icc", help="Intra-cluster correlation of the units in a cluster.")
    ] = None,
    normal: Annotated[
        bool, typer.Option("--normal", help="Use the normal quantile z instead of Student's t.")
    ] = False,
    as_json: Annotated[bool, typer.Option("--json", help="Print the result as JSON.")] = False,
    from_plan: Annotated[
        Path | None,
        typer.Option("--from", help="Plan folder with results: take SD/CV and ICC from its last round."),
    ] = None,
    value: Annotated[str | None, typer.Option("--value", help="Variable to size for (with --from).")] = None,
) -> None:
    """Sample size for estimating a mean (Cochran), with clusters (Kish design effect).

    Example: fieldplan size --cv 25 --margin 10 --population 4000 --units-per-cluster 5 --icc 0.1
    """
    from fieldplan.design.samplesize import sample_size
    from fieldplan.errors import OptionError

    if from_plan is not None:
        from fieldplan.estimate.nextplan import describe_for_sizing

        cv, sd, icc, used = describe_for_sizing(
            from_plan, value=value, cv=cv, sd=sd, icc=icc, relative=margin is not None
        )
        if not as_json:
            typer.echo(used)
    relative = cv is not None or margin is not None
    absolute = sd is not None or margin_abs is not None
    if relative == absolute:
        raise OptionError("give --cv with --margin (percent of the mean), or --sd with --margin-abs")
    if relative and (cv is None or margin is None):
        raise OptionError("--cv and --margin go together (both in percent)")
    if absolute and (sd is None or margin_abs is None):
        raise OptionError("--sd and --margin-abs go together (both in the measurement's units)")
    result = sample_size(
        margin=margin if relative else margin_abs,
        cv=cv,
        sd=sd,
        confidence=confidence,
        population=population,
        distribution="z" if normal else "t",
        units_per_cluster=units_per_cluster,
        icc=icc,
    )
    if as_json:
        typer.echo(json.dumps(result.to_dict(), indent=2, sort_keys=True))
        return
    if relative:
        typer.echo(f"Inputs: CV {cv:g} %, margin {margin:g} % of the mean, confidence {confidence:g}")
    else:
        typer.echo(f"Inputs: SD {sd:g}, margin {margin_abs:g}, confidence {confidence:g}")
    if population is not None:
        typer.echo(f"Population: {population} units")
    typer.echo(result.formula)
    if result.clusters is not None:
        typer.echo(
            f"Result: {result.clusters} clusters of {units_per_cluster} units ({result.units_total} units)"
        )
    else:
        typer.echo(f"Result: {result.n} samples")
    typer.echo(
        "The CV or SD is a guess from earlier seasons or a pilot; the margin holds only if it is right."
    )


def register(app: typer.Typer) -> None:
    app.command("size")(size)
