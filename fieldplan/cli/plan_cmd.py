"""``fieldplan plan``: read blocks, run a design, write the plan folder."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Force, Quiet, Seed, echo_err, handle_errors, progress_callback

__all__ = ["register", "plan", "run_plan"]


@handle_errors
def plan(
    ctx: typer.Context,
    blocks_file: Annotated[
        Path, typer.Argument(help="Block boundaries: GeoJSON, GeoPackage, Shapefile (or zipped), KML or KMZ.")
    ],
    out: Annotated[Path, typer.Option("--out", "-o", help="Folder to write the plan into.")],
    spacing: Annotated[float | None, typer.Option(help="Grid spacing in metres.")] = None,
    per_ha: Annotated[
        float | None,
        typer.Option("--per-ha", help="Sampling density in points per hectare (instead of --spacing)."),
    ] = None,
    layout: Annotated[str, typer.Option(help="Grid layout: square or triangular.")] = "square",
    start: Annotated[
        str, typer.Option(help="Random start: 'field' (one for the whole farm) or 'block' (one per block).")
    ] = "field",
    angle: Annotated[
        str,
        typer.Option(
            help="Grid bearing in degrees clockwise from north, or 'rows' to follow each block's row_bearing_deg."
        ),
    ] = "0",
    edge_buffer: Annotated[
        float,
        typer.Option("--edge-buffer", help="Metres kept free of samples inside each block edge (headland)."),
    ] = 0.0,
    exclude: Annotated[
        Path | None, typer.Option(help="Polygons to keep samples out of (wet spots, buildings, tracks).")
    ] = None,
    layer: Annotated[str | None, typer.Option(help="GeoPackage layer holding the blocks.")] = None,
    select: Annotated[
        str | None,
        typer.Option(help="Plan only blocks whose FIELD matches: FIELD=VALUE[,VALUE...], e.g. 'crop=wine grape'."),
    ] = None,
    id_field: Annotated[
        str | None,
        typer.Option("--id-field", help="Field with block ids (default: block, block_id, id or name)."),
    ] = None,
    column: Annotated[
        list[str] | None,
        typer.Option(
            "--column",
            help="The file's field for a role, ROLE=FIELD (repeatable), e.g. row_spacing=RowSpacing; roles: "
            "block, variety, row_spacing, plant_spacing, row_bearing, crop, stratum, or a name for --strata-by.",
        ),
    ] = None,
    length_unit: Annotated[
        str,
        typer.Option("--length-unit", help="Unit of the row and plant spacing fields: m, ft or yd."),
    ] = "m",
    repair: Annotated[
        bool, typer.Option(help="Repair invalid (self-intersecting) polygons instead of stopping.")
    ] = False,
    max_points: Annotated[
        int, typer.Option("--max-points", help="Refuse plans with more points than this.")
    ] = 10_000_000,
    purpose: Annotated[
        str, typer.Option(help="What the samples are for: general, soil (composites of cores) or ripeness.")
    ] = "general",
    cores: Annotated[
        int | None, typer.Option(help="Soil: cores per composite sample (default 16; 15-20 is usual).")
    ] = None,
    core_radius: Annotated[
        float | None, typer.Option("--core-radius", help="Soil: metres around each point for its cores (default 10).")
    ] = None,
    composite: Annotated[
        str | None,
        typer.Option(help="Soil: 'cell' (one composite per point) or 'zone' (one per block, zig-zag cores)."),
    ] = None,
    core_buffer: Annotated[
        float | None,
        typer.Option("--core-buffer", help="Soil: metres kept from block edges and exclusions (default 30)."),
    ] = None,
    depth: Annotated[
        str | None, typer.Option(help="Sampling depth in cm, e.g. 0-15 (soil default 0-15).")
    ] = None,
    crop_profile: Annotated[
        str | None,
        typer.Option(
            "--crop-profile",
            help="Ripeness: wine-grapes, table-grapes, pome-fruit, stone-fruit or a TOML file (default wine-grapes).",
        ),
    ] = None,
    cautions: Annotated[
        Path | None,
        typer.Option(help="Text file of field cautions, one per line, to carry instead of the defaults."),
    ] = None,
    design: Annotated[
        str, typer.Option(help="Design: grid, random, balanced (spatially balanced) or clusters (plants from rows).")
    ] = "grid",
    strata_by: Annotated[
        str | None,
        typer.Option("--strata-by", help="Block field whose values are strata (default: each block is a stratum)."),
    ] = None,
    per_block: Annotated[
        int | None, typer.Option("--per-block", help="random/balanced/clusters: points per block.")
    ] = None,
    n_total: Annotated[
        int | None, typer.Option("--n", help="random/balanced/clusters: total points, allocated over strata.")
    ] = None,
    allocation: Annotated[
        str | None,
        typer.Option(help="With --n: proportional (to area or --size-field), equal, neyman or optimal."),
    ] = None,
    size_field: Annotated[
        str | None, typer.Option("--size-field", help="With --n: block field used as stratum size instead of area.")
    ] = None,
    sd_field: Annotated[
        str | None, typer.Option("--sd-field", help="neyman/optimal: block field with the expected standard deviation.")
    ] = None,
    cost_field: Annotated[
        str | None, typer.Option("--cost-field", help="optimal: block field with the cost of one sample.")
    ] = None,
    min_per_stratum: Annotated[
        int | None, typer.Option("--min-per-stratum", help="Fewest points in any stratum (default 1).")
    ] = None,
    target_units: Annotated[
        int | None,
        typer.Option("--target-units", help="clusters: units to collect per stratum (with --plants-per-cluster)."),
    ] = None,
    units_per_cluster: Annotated[
        int | None,
        typer.Option(
            "--plants-per-cluster",
            help="clusters: consecutive plants in each cluster, one unit taken at each.",
        ),
    ] = None,
    units_per_cluster_old: Annotated[
        int | None, typer.Option("--units-per-cluster", hidden=True, help="Old name of --plants-per-cluster.")
    ] = None,
    skip_row_ends: Annotated[
        int | None, typer.Option("--skip-row-ends", help="clusters: plants left out at each end of every row.")
    ] = None,
    skip_border_rows: Annotated[
        int | None, typer.Option("--skip-border-rows", help="clusters: rows left out on each side of a block.")
    ] = None,
    rows: Annotated[
        Path | None, typer.Option("--rows", help="clusters: mapped row lines (instead of the spacing model).")
    ] = None,
    instructions: Annotated[
        str | None,
        typer.Option(help="clusters: field instructions with {row}, {plant}, {units}, {block} placeholders."),
    ] = None,
    engine: Annotated[
        str,
        typer.Option(help="Where to plan: 'local' (this process) or 'dask' (groups of blocks in parallel)."),
    ] = "local",
    scheduler: Annotated[
        str | None,
        typer.Option(
            help="With --engine dask: address of a running Dask scheduler, e.g. tcp://scheduler-host:8786 "
            "(default: two worker processes on this machine)."
        ),
    ] = None,
    spares: Annotated[
        int,
        typer.Option(
            "--spares", min=0, help="random/balanced/clusters: extra points per stratum, used in rank order."
        ),
    ] = 0,
    substitute: Annotated[
        str, typer.Option("--substitute", help="grid: 'within-cell' precomputes a substitute per point.")
    ] = "none",
    formats: Annotated[
        str,
        typer.Option(
            "--formats",
            help="Outputs to write, comma-separated: all (default); core (points.geojson, points.csv, "
            "summary.csv, plan.gpkg) for large batch runs; or any of geojson, csv, summary, gpkg, html, "
            "gpx, kml, png. manifest.json, plan.gpkg and README.txt are always written.",
        ),
    ] = "all",
    recipe: Annotated[
        Path | None,
        typer.Option(
            "--recipe",
            help="TOML recipe with the plan's parameters (see 'fieldplan recipe'); flags given here win.",
        ),
    ] = None,
    like: Annotated[
        Path | None,
        typer.Option(
            "--like",
            help="Plan like an earlier plan folder: its parameters, a new seed unless --seed is given.",
        ),
    ] = None,
    seed: Seed = 0,
    force: Force = False,
    quiet: Quiet = False,
) -> None:
    """Plan sample points over block boundaries and write them to a folder.

    Example: fieldplan plan blocks.geojson --spacing 40 --edge-buffer 8 --seed 7 --out plan-2027-soil
    """
    old_cluster_flag = units_per_cluster_old is not None
    if units_per_cluster_old is not None:
        # The old name read as "berries per grape cluster"; kept hidden for one release.
        if units_per_cluster is not None and units_per_cluster != units_per_cluster_old:
            from fieldplan.errors import OptionError

            raise OptionError("give --plants-per-cluster only (--units-per-cluster is its old name)")
        echo_err("note: --units-per-cluster is now --plants-per-cluster; the old name goes in the next release")
        units_per_cluster = units_per_cluster_old
    from fieldplan.spec import SpecError, flag_of

    values = {
        "design": design,
        "spacing": spacing,
        "per_ha": per_ha,
        "layout": layout,
        "start": start,
        "angle": angle,
        "edge_buffer": edge_buffer,
        "exclude": exclude,
        "layer": layer,
        "select": select,
        "id_field": id_field,
        "repair": repair,
        "columns": column or (),
        "length_unit": length_unit,
        "max_points": max_points,
        "purpose": purpose,
        "cores": cores,
        "core_radius": core_radius,
        "composite": composite,
        "core_buffer": core_buffer,
        "depth": depth,
        "crop_profile": crop_profile,
        "cautions": cautions,
        "strata_by": strata_by,
        "per_block": per_block,
        "n": n_total,
        "allocation": allocation,
        "size_field": size_field,
        "sd_field": sd_field,
        "cost_field": cost_field,
        "min_per_stratum": min_per_stratum,
        "target_units": target_units,
        "plants_per_cluster": units_per_cluster,
        "skip_row_ends": skip_row_ends,
        "skip_border_rows": skip_border_rows,
        "rows": rows,
        "instructions": instructions,
        "engine": engine,
        "scheduler": scheduler,
        "spares": spares,
        "substitute": substitute,
        "formats": formats,
    }
    # Only what was typed overrides a recipe; the spec's defaults fill the rest.
    python_name = {"n": "n_total", "plants_per_cluster": "units_per_cluster", "columns": "column"}
    given = {
        k: str(v) if isinstance(v, Path) else v
        for k, v in values.items()
        if _typed(ctx, python_name.get(k, k)) or (k == "plants_per_cluster" and old_cluster_flag)
    }
    try:
        spec, seed = _spec_and_seed(given, recipe=recipe, like=like, seed=seed if _typed(ctx, "seed") else None)
        run_plan(blocks_file, spec, out=out, seed=seed, force=force, quiet=quiet)
    except SpecError as err:
        # The library names parameters; here they are flags.
        from fieldplan.errors import OptionError

        raise OptionError(err.render(flag_of)) from None


def _typed(ctx: typer.Context, name: str) -> bool:
    """Whether option ``name`` was given on the command line (or in the environment)."""
    # By name: typer may carry its own copy of click's ParameterSource enum.
    source = ctx.get_parameter_source(name)
    return getattr(source, "name", None) in ("COMMANDLINE", "ENVIRONMENT")


def _spec_and_seed(given: dict, *, recipe: Path | None, like: Path | None, seed: int | None):
    """The spec from a recipe or earlier plan overridden by the flags given, and the seed to use."""
    from fieldplan.errors import OptionError
    from fieldplan.recipe import merge, plan_recipe, read_recipe
    from fieldplan.spec import PlanSpec

    if recipe is not None and like is not None:
        raise OptionError("give --recipe or --like, not both")
    base: dict = {}
    base_seed = None
    if recipe is not None:
        base, base_seed = read_recipe(recipe)
    elif like is not None:
        base, _ = plan_recipe(like)
    spec = PlanSpec.from_dict(merge(base, given))
    if seed is None:
        seed = base_seed
    if seed is None and like is not None:
        import secrets

        # A plan like another is a new draw: same design, different points.
        seed = secrets.randbelow(1_000_000)
        echo_err(f"note: new seed {seed} (give --seed to choose one)")
    return spec, (0 if seed is None else seed)


def run_plan(blocks_file: Path, spec, *, out: Path, seed: int, force: bool, quiet: bool):
    """Check the output folder and resources, read, plan, write and report one spec."""
    from fieldplan.engine import check_engine
    from fieldplan.plan import make_plan
    from fieldplan.read import read_blocks, read_exclusions, select_blocks
    from fieldplan.safety import load_cautions, set_cautions
    from fieldplan.samples.purpose import resolve_purpose
    from fieldplan.store import write_plan
    from fieldplan.stratified import read_rows
    from fieldplan.write.safe import check_out_dir

    # Fail on an occupied folder (or, with --force, a folder that is not a plan) before any work.
    check_out_dir(out, force=force)
    cautions = Path(spec.outputs.cautions) if spec.outputs.cautions else None
    if cautions is not None:
        load_cautions(cautions)  # a bad cautions file fails before any work
    samples = spec.samples
    resolve_purpose(  # a missing crop profile fails before any work
        purpose=samples.purpose,
        cores=samples.cores,
        core_radius=samples.core_radius,
        composite=samples.composite,
        depth=samples.depth,
        crop_profile=samples.crop_profile,
        core_buffer=samples.core_buffer,
    )
    check_engine(spec.scale.engine, spec.scale.scheduler)  # a missing dask fails before any work
    blocks = read_blocks(blocks_file, **spec.input.read_options(), crop_profile=samples.crop_profile)
    if spec.input.select is not None:
        blocks = select_blocks(blocks, spec.input.select)
    exclusions = read_exclusions(spec.input.exclude, crs=blocks.crs) if spec.input.exclude else None
    rows = read_rows(spec.clusters.rows, crs=blocks.crs) if spec.clusters.rows else None
    with progress_callback("Planning blocks", quiet=quiet) as progress:
        result = make_plan(
            blocks,
            spec,
            seed=seed,
            exclusions=exclusions,
            rows=rows,
            command=["fieldplan", *sys.argv[1:]],
            progress=progress,
        )
    set_cautions(result, cautions)
    write_plan(result, out, force=force, formats=list(spec.outputs.formats))
    if not quiet:
        report(result, out)
    return result


def report(result, out: Path) -> None:
    """Print what was planned, notes and flags, and the cautions."""
    from fieldplan.safety import cautions_text, plan_cautions
    from fieldplan.words import plural

    for note in result.meta.get("notes", []):
        echo_err(f"note: {note}")
    flagged = result.blocks[result.blocks["flags"] != ""]
    for row in flagged.itertuples(index=False):
        echo_err(f"note: block {row.block}: {row.flags}")
    n_spare = int(result.points["status"].eq("spare").sum()) if "status" in result.points.columns else 0
    typer.echo(
        f"Planned {plural(len(result.points) - n_spare, 'point')}"
        + (f" and {plural(n_spare, 'spare')}" if n_spare else "")
        + f" in {plural(len(result.blocks), 'block')} "
        f"({result.params.get('design')}, seed {result.params.get('seed')}) -> {out}"
    )
    if (out / "map.html").exists():
        typer.echo(f"Map: {(out / 'map.html').resolve()}")
    typer.echo("Before going out:\n" + cautions_text(plan_cautions(result)))


def register(app: typer.Typer) -> None:
    app.command("plan")(plan)
