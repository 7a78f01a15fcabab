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
        int | None,
        typer.Option("--plants-per-cluster", help="Plants (units) in each cluster (with --icc)."),
    ] = None,
    units_per_cluster_old: Annotated[
        int | None, typer.Option("--units-per-cluster", hidden=True, help="Old name of --plants-per-cluster.")
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
        typer.Option("--from-plan", help="Plan folder with results: take SD/CV and ICC from its last round."),
    ] = None,
    value: Annotated[str | None, typer.Option("--variable", help="Variable to size for (with --from-plan).")] = None,
) -> None:
    """Sample size for estimating a mean (Cochran), with clusters (Kish design effect).

    With --from-plan, a plan with results, the spread (and for clusters the ICC and plants per
    cluster) come from its last round; a cluster plan is sized in clusters, per block (or per
    stratum), and the plan options that give that size are printed.

    Example: fieldplan size --cv 25 --margin 10 --population 4000 --plants-per-cluster 5 --icc 0.1
    """
    from fieldplan.design.samplesize import sample_size
    from fieldplan.errors import OptionError

    if units_per_cluster_old is not None:
        if units_per_cluster is not None and units_per_cluster != units_per_cluster_old:
            raise OptionError("give --plants-per-cluster only (--units-per-cluster is its old name)")
        from fieldplan.cli.options import echo_err

        echo_err("note: --units-per-cluster is now --plants-per-cluster; the old name goes in the next release")
        units_per_cluster = units_per_cluster_old
    inputs = None
    if from_plan is not None:
        from fieldplan.estimate.nextplan import describe_for_sizing

        inputs = describe_for_sizing(
            from_plan,
            value=value,
            cv=cv,
            sd=sd,
            icc=icc,
            relative=margin is not None,
            plants_per_cluster=units_per_cluster,
        )
        cv, sd, icc = inputs.cv, inputs.sd, inputs.icc
        if inputs.clusters and inputs.per_plant:
            units_per_cluster = inputs.plants_per_cluster
            icc = 0.0 if icc is None else icc
        elif inputs.clusters:
            # One composite value per cluster: its spread is between clusters already, so the
            # sample size is a number of clusters with no design effect to add.
            units_per_cluster, icc = None, None
        if not as_json:
            typer.echo(inputs.summary)
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
    extra = {}
    if inputs is not None:
        k = result.clusters if result.clusters is not None else result.n
        from fieldplan.estimate.nextplan import plan_options

        extra = {
            "per": inputs.per,
            "clusters_per_" + inputs.per: k if inputs.clusters else None,
            "plants_per_cluster": inputs.plants_per_cluster,
            "plan_options": plan_options(inputs, clusters=k if inputs.clusters else None, n=result.n),
        }
    if as_json:
        typer.echo(json.dumps({**result.to_dict(), **extra}, indent=2, sort_keys=True))
        return
    if relative:
        typer.echo(f"Inputs: CV {cv:g} %, margin {margin:g} % of the mean, confidence {confidence:g}")
    else:
        typer.echo(f"Inputs: SD {sd:g}, margin {margin_abs:g}, confidence {confidence:g}")
    if population is not None:
        typer.echo(f"Population: {population} units")
    typer.echo(result.formula)
    per = f" per {inputs.per}" if inputs is not None else ""
    if result.clusters is not None:
        typer.echo(
            f"Result: {result.clusters} clusters of {units_per_cluster} plants{per} "
            f"({result.units_total} plants; degrees of freedom from the clusters)"
        )
    elif inputs is not None and inputs.clusters:
        typer.echo(
            f"Result: {result.n} clusters{per} (each a composite of {inputs.plants_per_cluster} plants; "
            "degrees of freedom from the clusters)"
        )
    else:
        typer.echo(f"Result: {result.n} samples{per}")
    if inputs is not None:
        what = f"stratum ({inputs.strata_by})" if inputs.per == "stratum" else "block"
        options = extra["plan_options"]
        typer.echo(
            f"This is per {what}: each {inputs.per}'s own mean within the margin "
            f"({inputs.n_groups} {inputs.per}s in the plan)."
            + (f" Plan options: {options}" if options else "")
        )
        if inputs.params.get("design") == "grid" and options:
            typer.echo(
                f"note: a grid's count follows the area; this density gives about {result.n} points in a "
                f"block of the median size ({inputs.median_ha:.3g} ha), fewer in smaller blocks"
            )
    typer.echo(
        "The CV or SD is a guess from earlier seasons or a pilot; the margin holds only if it is right."
    )


def register(app: typer.Typer) -> None:
    app.command("size")(size)
