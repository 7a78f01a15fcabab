"""``fieldplan zones``: management zones from covariate rasters and surveys."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Force, Quiet, Seed, echo_err, handle_errors

__all__ = ["register", "zones"]


@handle_errors
def zones(
    paths: Annotated[
        list[Path],
        typer.Argument(
            help="Block boundaries (GeoJSON, GeoPackage, Shapefile); further covariate files may follow "
            "--covariates."
        ),
    ],
    out: Annotated[Path, typer.Option("--out", "-o", help="GeoPackage to write (a PNG map is written beside it).")],
    covariates: Annotated[
        list[str] | None,
        typer.Option(
            "--covariates",
            help="Covariate files: GeoTIFF rasters, or point surveys as CSV/GeoJSON (survey.csv:COLUMN picks "
            "the value column). Several may follow one --covariates.",
        ),
    ] = None,
    n_zones: Annotated[
        str, typer.Option("--zones", help="Number of zones, or 'auto' to choose 2-6 and print the table.")
    ] = "auto",
    method: Annotated[str, typer.Option(help="Clustering: kmeans or fuzzy (fuzzy k-means).")] = "kmeans",
    criterion: Annotated[
        str | None,
        typer.Option(help="With --zones auto: fpi-nce (Odeh et al. 1992) or silhouette; default fpi-nce "
                     "for fuzzy, silhouette for kmeans."),
    ] = None,
    per: Annotated[str, typer.Option(help="Cluster the whole farm at once ('farm') or each block ('block').")] = "farm",
    pca: Annotated[
        bool, typer.Option("--pca", help="Cluster principal components (90 % of the variance) instead.")
    ] = False,
    fuzziness: Annotated[float, typer.Option(help="Fuzzy k-means exponent m (above 1).")] = 1.5,
    smooth: Annotated[int, typer.Option(help="Majority filter window in cells (odd; 1 = no smoothing).")] = 3,
    min_zone_ha: Annotated[
        float, typer.Option("--min-zone-ha", help="Merge zone pieces smaller than this into a neighbour.")
    ] = 0.0,
    cell: Annotated[float, typer.Option(help="Grid cell side in metres.")] = 5.0,
    edge_buffer: Annotated[
        float, typer.Option("--edge-buffer", help="Metres of headland inside each block edge left out.")
    ] = 0.0,
    exclude: Annotated[Path | None, typer.Option(help="Polygons to leave out (wet spots, buildings).")] = None,
    layer: Annotated[str | None, typer.Option(help="GeoPackage layer holding the blocks.")] = None,
    id_field: Annotated[str | None, typer.Option("--id-field", help="Field with block ids.")] = None,
    select: Annotated[str | None, typer.Option(help="Only blocks whose FIELD matches: FIELD=VALUE[,VALUE...].")] = None,
    points_crs: Annotated[
        str | None, typer.Option("--points-crs", help="CRS of x/y columns in CSV surveys (default: the plan's).")
    ] = None,
    seed: Seed = 0,
    force: Force = False,
    quiet: Quiet = False,
) -> None:
    """Delineate management zones from covariate maps and write them as polygons.

    Covariates are brought onto one grid over the blocks (rasters resampled, surveys kriged),
    standardised, clustered, smoothed and polygonised within each block.

    Example: fieldplan zones blocks.geojson --covariates eca.csv ndvi.tif --zones auto --seed 7 --out zones.gpkg
    """
    from fieldplan.covariates import load_covariates
    from fieldplan.errors import OptionError
    from fieldplan.plan import sample_areas
    from fieldplan.read import read_blocks, read_exclusions, select_blocks
    from fieldplan.zones import delineate, write_zones

    blocks_file, extra = paths[0], [str(p) for p in paths[1:]]
    specs = list(covariates or []) + extra
    if not specs:
        raise OptionError("give covariate files with --covariates (rasters or point surveys)")
    if n_zones != "auto" and not n_zones.isdigit():
        raise OptionError(f"--zones must be a whole number or 'auto', got {n_zones!r}")
    out_png = out.with_suffix(".png")
    if not force and (out.exists() or out_png.exists()):
        from fieldplan.errors import OutputExistsError

        raise OutputExistsError(f"{out if out.exists() else out_png}: exists; add --force to replace it")
    blocks = read_blocks(blocks_file, layer=layer, id_field=id_field)
    if select is not None:
        blocks = select_blocks(blocks, select)
    exclusions = read_exclusions(exclude, crs=blocks.crs) if exclude is not None else None
    areas = sample_areas(blocks, edge_buffer=edge_buffer, exclusions=exclusions)
    cov = load_covariates(specs, blocks, areas, cell=cell, seed=seed, points_crs=points_crs)
    zone_map = delineate(
        cov,
        blocks,
        areas,
        k="auto" if n_zones == "auto" else int(n_zones),
        method=method,
        criterion=criterion,
        scope=per,
        pca=pca,
        m=fuzziness,
        smooth=smooth,
        min_zone_ha=min_zone_ha,
        seed=seed,
    )
    gpkg, png = write_zones(zone_map, blocks, out, force=force)
    if quiet:
        return
    for note in zone_map.notes:
        echo_err(f"note: {note}")
    for name in cov.names:
        typer.echo(f"{name}: {cov.methods[name]}")
    if zone_map.choice is not None:
        typer.echo(_choice_text(zone_map.choice))
    summary = zone_map.polygons.groupby("zone").agg(blocks=("block", "nunique"), area_ha=("area_ha", "sum"))
    typer.echo("zone  blocks  area (ha)")
    for z, row in summary.iterrows():
        typer.echo(f"{z:>4}  {row.blocks:>6}  {row.area_ha:>9.2f}")
    typer.echo(f"Wrote {gpkg} ({len(zone_map.polygons)} block-zone polygons) and {png}")


def _choice_text(table) -> str:
    """The table behind the choice of K, one line per K and scope."""
    lines = ["scope   K     FPI     NCE  silhouette"]
    for row in table.itertuples(index=False):
        mark = "  <- chosen" if row.chosen else ""
        lines.append(f"{str(row.scope)[:6]:<6} {row.k:>2}  {row.fpi:6.3f}  {row.nce:6.3f}  {row.silhouette:10.3f}{mark}")
    return "\n".join(lines)


def register(app: typer.Typer) -> None:
    """Add ``zones`` to the ``fieldplan`` command group."""
    app.command("zones")(zones)
