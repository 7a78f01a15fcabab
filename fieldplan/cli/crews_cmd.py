"""``fieldplan crews``: split a plan's points among crews and route each crew."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from fieldplan.cli.options import Quiet, echo_err, handle_errors, parse_lonlat

__all__ = ["register", "crews"]


@handle_errors
def crews(
    plan_dir: Annotated[Path, typer.Argument(help="Plan folder made by 'fieldplan plan'.")],
    n_crews: Annotated[int, typer.Option("--crews", min=1, help="Number of crews.")],
    start: Annotated[
        str | None,
        typer.Option(
            "--drop-off",
            help=(
                "Drop-off point LON,LAT where every crew begins. With --return and no --drop-off, "
                "the centroid of the union of the plan's blocks."
            ),
        ),
    ] = None,
    walk_speed: Annotated[float, typer.Option("--walk-speed", min=0.1, help="Walking speed, km/h.")] = 4.0,
    minutes_per_point: Annotated[
        float, typer.Option("--minutes-per-point", min=0.0, help="Minutes spent at each point.")
    ] = 5.0,
    max_hours: Annotated[
        float | None,
        typer.Option("--max-hours", min=0.1, help="Longest day of a crew; what does not fit is listed."),
    ] = None,
    return_to_start: Annotated[
        bool,
        typer.Option(
            "--return", help="Crews walk back to the drop-off (--drop-off, else the blocks' centroid)."
        ),
    ] = False,
    across_factor: Annotated[
        float,
        typer.Option(
            "--across-rows", min=1.0, help="How much slower crossing rows is than walking along them."
        ),
    ] = 1.5,
    link_base: Annotated[
        str | None,
        typer.Option(
            "--link-base",
            help=(
                "Address the crews' phones reach 'fieldplan serve' at, e.g. http://192.168.1.20:8750: "
                "each crew sheet then carries its crew page link as a QR code."
            ),
        ),
    ] = None,
    force: Annotated[
        bool, typer.Option("--force", help="Replace the crews, routes and crew files this plan already has.")
    ] = False,
    quiet: Quiet = False,
) -> None:
    """Assign points to crews, balanced by estimated time, and route each crew.

    Each point gets a crew and a visit order. Writes crews.csv, crew_NN.gpx,
    crew_sheets.html and a routes layer in plan.gpkg, and refreshes points.csv,
    points.geojson, points.gpx and map.html.
    """
    from fieldplan.route.folder import plan_crews, refuse_existing, write_crews
    from fieldplan.store import load_plan, locked

    lonlat = parse_lonlat(start) if start is not None else None
    # Read, route and write under the plan's lock, so a mark made meanwhile is not overwritten.
    with locked(plan_dir):
        plan = load_plan(plan_dir)
        refuse_existing(plan, plan_dir, force=force)
        run = plan_crews(
            plan,
            n_crews=n_crews,
            start_lonlat=lonlat,
            walk_kmh=walk_speed,
            minutes_per_point=minutes_per_point,
            max_hours=max_hours,
            return_to_start=return_to_start,
            across_factor=across_factor,
        )
        write_crews(plan_dir, run, links=_links(plan_dir, run, link_base))
    from fieldplan.route.folder import save_rerun

    # The options, so that advice printed after a later change can repeat them exactly.
    rerun = ["--crews", str(n_crews)]
    rerun += ["--drop-off", start] if start is not None else []
    rerun += ["--walk-speed", f"{walk_speed:g}"] if walk_speed != 4.0 else []
    rerun += ["--minutes-per-point", f"{minutes_per_point:g}"] if minutes_per_point != 5.0 else []
    rerun += ["--max-hours", f"{max_hours:g}"] if max_hours is not None else []
    rerun += ["--return"] if return_to_start else []
    rerun += ["--across-rows", f"{across_factor:g}"] if across_factor != 1.5 else []
    rerun += ["--link-base", link_base] if link_base is not None else []
    save_rerun(plan_dir, rerun)
    if run.unfitted_ids:
        shown = ", ".join(run.unfitted_ids[:10]) + (" ..." if len(run.unfitted_ids) > 10 else "")
        echo_err(
            f"{len(run.unfitted_ids)} point(s) do not fit in {max_hours:g} h per crew: {shown} "
            f"(listed in {Path(plan_dir) / 'crews_unfitted.csv'}); add crews or hours"
        )
        echo_err(
            "warning: these blocks would be left part-sampled: "
            + "; ".join(line.removeprefix("block ") for line in run.incomplete)
            + ". The points left out are the far ends of the routes, so what is sampled of a block "
            "leans toward the drop-off and its estimate is biased; sample the rest another day "
            "(same plan) or add crews or hours rather than estimating from part of a block"
        )
    if not quiet:
        if run.start_xy is not None:
            typer.echo(_start_line(run, plan.crs))
        typer.echo(run.table.to_string(index=False))
        typer.echo(f"Crews written to {Path(plan_dir)} (crews.csv, crew_NN.gpx, crew_sheets.html)")


def _links(plan_dir: Path, run, base: str | None) -> dict | None:
    """Crew links signed with the workspace's secret (the plan folder's parent is the workspace)."""
    if not base:
        return None
    from fieldplan.errors import OptionError
    from fieldplan.field.links import crew_link, workspace_secret

    if not base.startswith(("http://", "https://")):
        raise OptionError(f"--link-base {base!r} must start with http:// or https://")
    folder = Path(plan_dir).resolve()
    secret = workspace_secret(folder.parent)
    return {int(k): crew_link(base, secret, folder.name, int(k)) for k in run.table["crew"].tolist()}


def _start_line(run, crs) -> str:
    """Say which drop-off the crews start from, in LON,LAT as --drop-off takes it."""
    from pyproj import Transformer

    lon, lat = Transformer.from_crs(crs, "EPSG:4326", always_xy=True).transform(*run.start_xy)
    where = "--drop-off" if run.start_source == "given" else "centroid of the plan's blocks (no --drop-off given)"
    return f"Drop-off: {lon:.6f},{lat:.6f} ({where})"


def register(app: typer.Typer) -> None:
    app.command("crews")(crews)
