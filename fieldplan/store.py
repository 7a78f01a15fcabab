"""The plan folder: write a Plan atomically, load it back from plan.gpkg."""

from __future__ import annotations

import importlib
from collections.abc import Callable
from pathlib import Path

from fieldplan.errors import OptionError, PlanDirError
from fieldplan.write.gpkg import GPKG_NAME, read_info, write_gpkg
from fieldplan.write.safe import staged_folder
from fieldplan.write.tables import (
    shared_lonlat,
    write_manifest,
    write_points_csv,
    write_points_geojson,
    write_readme,
    write_summary_csv,
)

__all__ = [
    "WRITERS",
    "FORMATS",
    "CORE_FORMATS",
    "REQUIRED_FORMATS",
    "selected_formats",
    "write_plan",
    "load_plan",
    "CORE_LAYERS",
]

CORE_LAYERS = ("blocks", "points", "exclusions", "plan_info")


def _deferred(module: str, name: str) -> Callable:
    """A writer that imports its module when called: a ``--formats core`` plan never loads
    matplotlib, the map template or the XML writers."""

    def writer(plan, folder):
        return getattr(importlib.import_module(module), name)(plan, folder)

    writer.__name__ = writer.__qualname__ = name
    return writer


write_cores_geojson = _deferred("fieldplan.samples.outputs", "write_cores_geojson")
map_writer = _deferred("fieldplan.write.html_map", "map_writer")
gpx_writer = _deferred("fieldplan.write.gpx", "gpx_writer")
kml_writer = _deferred("fieldplan.write.kml", "kml_writer")
png_writer = _deferred("fieldplan.write.png", "png_writer")

#: Every writer takes ``(plan, folder)`` and writes its file(s) into ``folder``.
WRITERS: list[Callable] = [
    write_points_geojson,
    write_points_csv,
    write_summary_csv,
    write_manifest,
    write_readme,
    write_gpkg,
    map_writer,
    gpx_writer,
    kml_writer,
    png_writer,
    write_cores_geojson,
]


#: Format name of each writer (by function name), for ``write_plan(formats=...)``.
FORMATS: dict[str, str] = {
    "write_points_geojson": "geojson",
    "write_cores_geojson": "geojson",
    "write_points_csv": "csv",
    "write_summary_csv": "summary",
    "write_manifest": "manifest",
    "write_readme": "readme",
    "write_gpkg": "gpkg",
    "map_writer": "html",
    "gpx_writer": "gpx",
    "kml_writer": "kml",
    "png_writer": "png",
}
#: Always written: later commands reload the plan from plan.gpkg and recognise
#: a plan folder by manifest.json; the README carries the field cautions.
REQUIRED_FORMATS = ("manifest", "gpkg", "readme")
#: The tables and GIS files, without the printable page, map and GPS files.
CORE_FORMATS = ("geojson", "csv", "summary", "manifest", "gpkg", "readme")


def selected_formats(formats) -> set[str] | None:
    """Format names to write for a ``formats`` choice; ``None`` means every format."""
    if formats is None:
        return None
    wanted = {str(f).strip().lower() for f in formats if str(f).strip()}
    if "all" in wanted:
        return None
    if "core" in wanted:
        wanted = (wanted - {"core"}) | set(CORE_FORMATS)
    known = set(FORMATS.values())
    unknown = sorted(wanted - known)
    if unknown:
        raise OptionError(
            f"unknown output format(s) {', '.join(unknown)}; choose from all, core, "
            + ", ".join(sorted(known))
        )
    return wanted | set(REQUIRED_FORMATS)


def write_plan(plan, out_dir: str | Path, *, force: bool = False, formats=None) -> Path:
    """Write the outputs of ``plan`` into ``out_dir``.

    Files are written into a temporary folder beside ``out_dir`` that replaces it
    only when complete, so an interrupted run never leaves half a plan. A
    non-empty ``out_dir`` is refused unless ``force``.

    ``formats`` (names from :data:`FORMATS`, or ``"core"`` / ``"all"``) picks
    the writers to run; ``None`` runs every one. Manifest, GeoPackage and README
    are always written, and a chosen subset is recorded in the manifest as
    ``formats``. Writers not listed in :data:`FORMATS` always run.
    """
    out_dir = Path(out_dir)
    chosen = selected_formats(formats)
    if chosen is not None:
        plan.meta["formats"] = sorted(chosen)
    with staged_folder(out_dir, force=force) as stage, shared_lonlat(getattr(plan, "points", None)):
        for writer in WRITERS:
            kind = FORMATS.get(getattr(writer, "__name__", ""))
            if chosen is None or kind is None or kind in chosen:
                writer(plan, stage)
    return out_dir


def load_plan(plan_dir: str | Path):
    """Load a plan folder written by :func:`write_plan` (reads ``plan.gpkg``)."""
    import geopandas as gpd
    import pyogrio
    from pyproj import CRS

    from fieldplan.plan import Plan

    plan_dir = Path(plan_dir)
    path = plan_dir / GPKG_NAME
    if not path.is_file():
        raise PlanDirError(f"{plan_dir}: no {GPKG_NAME} here; give a folder made by 'fieldplan plan'")
    try:
        names = [row[0] for row in pyogrio.list_layers(path)]
        info = read_info(path)
        blocks = gpd.read_file(path, layer="blocks", engine="pyogrio")
        blocks = blocks.set_geometry(_single_parts(blocks.geometry.values), crs=blocks.crs)
        points = gpd.read_file(path, layer="points", engine="pyogrio")
        exclusions = gpd.read_file(path, layer="exclusions", engine="pyogrio")
        exclusions = exclusions.set_geometry(_single_parts(exclusions.geometry.values), crs=exclusions.crs)
        layers = {}
        for name in names:
            if name in CORE_LAYERS:
                continue
            frame = pyogrio.read_dataframe(path, layer=name)
            layers[name] = frame
    except Exception as err:
        raise PlanDirError(f"{path}: cannot read the plan ({err}); re-run 'fieldplan plan'") from None
    params = info.pop("parameters", {})
    crs = CRS.from_user_input(blocks.crs)
    blocks["flags"] = blocks["flags"].fillna("") if "flags" in blocks else ""
    return Plan(blocks, points, exclusions.set_crs(crs, allow_override=True), crs, params, info, layers)


def _single_parts(geoms):
    """The blocks layer stores every block as MultiPolygon; give one-part blocks back as Polygon.

    A reloaded plan then writes the same files as the plan that was saved.
    """
    import numpy as np
    import shapely

    geoms = np.asarray(geoms, dtype=object).copy()
    one = (shapely.get_type_id(geoms) == 6) & (shapely.get_num_geometries(geoms) == 1)
    geoms[one] = shapely.get_geometry(geoms[one], 0)
    return geoms
