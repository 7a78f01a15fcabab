"""Crews on a plan folder: assign, route and write the crew outputs.

Unlike the rest of :mod:`fieldplan.route`, this module reads and writes files.
Every file it changes in an existing plan folder is replaced atomically (a
complete new file swapped in), so an interrupted run leaves the old one.

Outputs: ``plan.gpkg`` (``points`` gain ``crew`` and ``visit_order``; a new
``routes`` layer, one LineString per crew), ``crews.csv``, ``crew_NN.gpx`` per
crew, ``crew_sheets.html``, ``crews_unfitted.csv`` when ``max_hours`` leaves
points out, and refreshed ``points.csv``, ``points.geojson``, ``points.gpx``
and ``map.html``.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import shapely

from fieldplan.errors import OutputExistsError
from fieldplan.route.crews import DEFAULT_MINUTES_PER_POINT, DEFAULT_WALK_KMH, CrewPlan, assign_crews
from fieldplan.route.metric import DEFAULT_ACROSS_FACTOR
from fieldplan.sorting import natural_order
from fieldplan.words import plural

__all__ = [
    "RERUN_NAME",
    "inherit_crews",
    "rerun_command",
    "save_rerun",
    "MAX_DROP_OFF_KM",
    "CrewRun",
    "check_drop_off",
    "default_start_xy",
    "incomplete_blocks",
    "plan_crews",
    "write_crews",
]

#: A drop-off further than this from every block is taken for a typing slip (a lost minus sign,
#: longitude and latitude swapped): crews drive to the blocks, they do not walk from another farm.
MAX_DROP_OFF_KM = 50.0

# Point statuses nobody walks to: unused spares and points marked inaccessible.
_NOT_VISITED = ("spare", "inaccessible")
_SHEET_COLUMNS = ("point_id", "block", "stratum", "row", "plant", "instructions", "lon", "lat")


@dataclass(frozen=True)
class CrewRun:
    """A plan with crews assigned, ready to be written."""

    plan: object
    result: CrewPlan
    table: pd.DataFrame
    routes: object  # GeoDataFrame
    unfitted_ids: list[str]
    start_xy: np.ndarray | None
    start_source: str = ""  # "given" (--drop-off), "centroid" (default for --return) or "" (none)
    incomplete: tuple[str, ...] = ()  # one line per block that max_hours leaves part-sampled


def check_drop_off(plan, lonlat: tuple[float, float], *, max_km: float = MAX_DROP_OFF_KM) -> float:
    """Refuse a drop-off further than ``max_km`` from every block; return its distance in km.

    The distance is geodesic (WGS84 ellipsoid, :class:`pyproj.Geod`) from the
    drop-off to the nearest point of the nearest block (found in the plan's
    metric CRS). The message suggests the point with a sign flipped or the
    two numbers swapped when that one lies near the blocks.
    """
    from pyproj import Geod, Transformer

    from fieldplan.errors import OptionError

    km = _drop_off_km(plan, lonlat, Geod(ellps="WGS84"), Transformer)
    if km <= max_km:
        return km
    lon, lat = lonlat
    guesses = [(lon, -lat), (-lon, lat), (-lon, -lat), (lat, lon)]
    near = [g for g in guesses if -180 <= g[0] <= 180 and -90 <= g[1] <= 90]
    near = [g for g in near if _drop_off_km(plan, g, Geod(ellps="WGS84"), Transformer) <= max_km]
    hint = f"; did you mean --drop-off {near[0][0]:g},{near[0][1]:g}?" if near else ""
    raise OptionError(
        f"--drop-off {lon:g},{lat:g} is {km:,.0f} km from the nearest block, more than {max_km:g} km: "
        "check the signs (south and west are negative) and the order LON,LAT" + hint
    )


def _drop_off_km(plan, lonlat, geod, transformer) -> float:
    to_local = transformer.from_crs("EPSG:4326", plan.crs, always_xy=True)
    to_wgs84 = transformer.from_crs(plan.crs, "EPSG:4326", always_xy=True)
    x, y = to_local.transform(*lonlat)
    if not (np.isfinite(x) and np.isfinite(y)):
        return float("inf")
    blocks = shapely.union_all(plan.blocks.geometry.values)
    nearest = shapely.get_coordinates(shapely.shortest_line(shapely.Point(x, y), blocks))[-1]
    lon, lat = to_wgs84.transform(*nearest)
    _, _, metres = geod.inv(lonlat[0], lonlat[1], lon, lat)
    return float(metres) / 1000.0


def incomplete_blocks(points, crew: np.ndarray, active: np.ndarray) -> list[str]:
    """One line per block whose active points are only partly assigned to a crew."""
    blocks = points["block"].astype(str).to_numpy()
    frame = pd.DataFrame({"block": blocks[active], "left": (crew[active] == 0)})
    counts = frame.groupby("block", sort=False)["left"].agg(["sum", "size"])
    counts = counts[counts["sum"] > 0]
    counts = counts.iloc[natural_order(counts.index)]  # Blk 2 before Blk 10
    return [
        f"block {b}: {int(r['sum'])} of {int(r['size'])} point(s) not visited"
        + (" (the whole block)" if r["sum"] == r["size"] else "")
        for b, r in counts.iterrows()
    ]


def default_start_xy(plan) -> np.ndarray:
    """The drop-off used when none is given: the centroid of the union of the plan's blocks.

    Blocks are used rather than the sampled points because they do not change
    when points are marked inaccessible or spares come into use, so repeated
    runs keep the same drop-off. The centroid may lie outside every block (an
    L-shaped estate); it is a meeting point, not a sampling point.
    """
    union = shapely.union_all(plan.blocks.geometry.values)
    return np.asarray(shapely.get_coordinates(shapely.centroid(union))[0], dtype=float)


def plan_crews(
    plan,
    *,
    n_crews: int,
    start_lonlat: tuple[float, float] | None = None,
    walk_kmh: float = DEFAULT_WALK_KMH,
    minutes_per_point: float = DEFAULT_MINUTES_PER_POINT,
    max_hours: float | None = None,
    return_to_start: bool = False,
    across_factor: float = DEFAULT_ACROSS_FACTOR,
    kicks: int | None = None,
) -> CrewRun:
    """Assign the plan's points to crews (no file is written).

    Points whose ``status`` is ``"spare"`` or ``"inaccessible"`` are left out (crew 0). With
    ``return_to_start`` and no ``start_lonlat`` the drop-off is :func:`default_start_xy`. Row bearings
    come from the blocks table (``row_bearing_deg``). The search is seeded from
    the plan's seed, so the same plan gives the same crews.
    """
    import geopandas as gpd
    from pyproj import Transformer

    from fieldplan.rng import stream

    points = plan.points.copy()
    active = np.ones(len(points), dtype=bool)
    if "status" in points.columns:
        status = points["status"].fillna("").astype(str).str.lower()
        active = ~status.isin(_NOT_VISITED).to_numpy()
    xy = shapely.get_coordinates(points.geometry.values)
    blocks = plan.blocks
    bearing_by_block = (
        dict(
            zip(
                blocks["block"].astype(str),
                pd.to_numeric(blocks.get("row_bearing_deg", np.nan), errors="coerce"),
                strict=True,
            )
        )
        if "row_bearing_deg" in blocks.columns
        else {}
    )
    block_names = points["block"].astype(str).to_numpy()
    codes, _ = pd.factorize(block_names, sort=True)
    bearing = np.array([bearing_by_block.get(b, np.nan) for b in block_names], dtype=float)

    start_xy, start_source = None, ""
    if start_lonlat is not None:
        check_drop_off(plan, start_lonlat)
        to_local = Transformer.from_crs("EPSG:4326", plan.crs, always_xy=True)
        start_xy, start_source = np.array(to_local.transform(*start_lonlat), dtype=float), "given"
    elif return_to_start:
        start_xy, start_source = default_start_xy(plan), "centroid"

    idx = np.flatnonzero(active)
    seed = int(plan.params.get("seed", 0))
    result = assign_crews(
        xy[idx],
        n_crews=n_crews,
        rng=stream(seed, "crews"),
        start=start_xy,
        group=codes[idx],
        row_bearing_deg=bearing[idx],
        across_factor=across_factor,
        walk_kmh=walk_kmh,
        minutes_per_point=minutes_per_point,
        max_hours=max_hours,
        return_to_start=return_to_start,
        kicks=kicks,
    )
    crew = np.zeros(len(points), dtype=np.int64)
    visit = np.zeros(len(points), dtype=np.int64)
    crew[idx], visit[idx] = result.crew, result.visit_order
    points["crew"] = crew
    points["visit_order"] = visit

    lines, rows = [], []
    for k, route in enumerate(result.routes, start=1):
        path = xy[idx[route]]
        if start_xy is not None:
            path = np.vstack([start_xy, path] + ([start_xy] if return_to_start else []))
        lines.append(shapely.linestrings(path) if len(path) >= 2 else None)
        rows.append(
            {
                "crew": k,
                "n_points": len(route),
                "length_km": round(float(result.walk_m[k - 1]) / 1000.0, 3),
                "hours": round(float(result.hours[k - 1]), 2),
            }
        )
    # crews.csv and the routes layer use the same names and units (counts as n_points, as
    # summary.csv does; walking length in km).
    table = pd.DataFrame(rows, columns=["crew", "n_points", "length_km", "hours"])
    routes = gpd.GeoDataFrame(
        {column: table[column].to_numpy() for column in table.columns},
        geometry=gpd.GeoSeries(lines, crs=plan.crs),
        crs=plan.crs,
    )
    unfitted = points["point_id"].astype(str).to_numpy()[idx[result.unfitted]].tolist()
    layers = {**getattr(plan, "layers", {}), "routes": routes}
    new_plan = dataclasses.replace(plan, points=points, layers=layers)
    incomplete = tuple(incomplete_blocks(points, crew, active)) if len(result.unfitted) else ()
    return CrewRun(new_plan, result, table, routes, unfitted, start_xy, start_source, incomplete)


def _swap_gpkg(plan_dir: Path, points, routes) -> None:
    """Store the points and routes layers as one change of the plan (see ``fieldplan.store.transaction``)."""
    from fieldplan.store import transaction

    with transaction(plan_dir) as txn:
        txn.set_layer("points", points, geometry_type="Point")
        txn.set_layer("routes", routes, geometry_type="LineString")


def _sheet_rows(points, order: np.ndarray) -> list[dict]:
    from fieldplan.write.tables import points_lonlat

    sub = points.iloc[order]
    lonlat = points_lonlat(sub) if len(sub) else np.empty((0, 2))
    frame = pd.DataFrame(sub.drop(columns="geometry"))
    if "instructions" not in frame.columns:
        extras = [c for c in ("purpose", "depth_cm", "units") if c in frame.columns]
        frame["instructions"] = (
            [
                "; ".join(
                    f"{c.replace('_', ' ')} {v}"
                    for c, v in zip(extras, vals, strict=True)
                    if v is not None and v == v and str(v) != ""
                )
                for vals in frame[extras].itertuples(index=False, name=None)
            ]
            if extras
            else ""
        )
    # Six decimals of a degree is about 0.1 m: enough to walk to, short enough to read.
    frame["lon"] = [f"{v:.6f}" for v in lonlat[:, 0]]
    frame["lat"] = [f"{v:.6f}" for v in lonlat[:, 1]]
    return frame.to_dict("records")


def _cautions(plan) -> list[str]:
    """The plan's own cautions when it records them, else the defaults."""
    from fieldplan import safety

    pick = getattr(safety, "plan_cautions", None)
    return list(pick(plan)) if pick else list(safety.CAUTIONS)


def write_crews(
    plan_dir: str | Path, run: CrewRun, *, title: str | None = None, links: dict | None = None
) -> list[Path]:
    """Write every crew output into ``plan_dir`` (each file atomically); return the paths.

    ``links`` maps a crew number to its crew page address, printed on its sheet with a QR code.
    """
    from fieldplan.route.sheets import CrewSheet, crew_sheets_html
    from fieldplan.write.gpx import gpx_bytes
    from fieldplan.write.html_map import plan_caption, write_map
    from fieldplan.write.safe import atomic_write_bytes, atomic_write_text, neutralise_frame
    from fieldplan.write.tables import write_points_csv, write_points_geojson

    plan_dir = Path(plan_dir)
    plan, points, routes = run.plan, run.plan.points, run.routes
    written: list[Path] = []
    _swap_gpkg(plan_dir, points, routes)
    written.append(plan_dir / "plan.gpkg")

    csv = neutralise_frame(run.table).to_csv(index=False, lineterminator="\n")
    atomic_write_text(plan_dir / "crews.csv", csv)
    written.append(plan_dir / "crews.csv")
    unfitted_path = plan_dir / "crews_unfitted.csv"
    if run.unfitted_ids:
        gone = points[points["point_id"].astype(str).isin(run.unfitted_ids)][["point_id", "block"]]
        atomic_write_text(
            unfitted_path, neutralise_frame(gone.astype(str)).to_csv(index=False, lineterminator="\n")
        )
        written.append(unfitted_path)
    elif unfitted_path.exists():
        unfitted_path.unlink()  # stale from an earlier run with fewer hours

    for old in sorted(plan_dir.glob("crew_[0-9]*.gpx")):
        if int(old.stem.split("_")[1]) > len(run.table):
            old.unlink()
    xy = shapely.get_coordinates(points.geometry.values)
    caption = title or str(plan_caption(plan).get("plan_id", "fieldplan"))
    sheets = []
    crew_col = points["crew"].to_numpy()
    visit_col = points["visit_order"].to_numpy()
    for k in run.table["crew"].tolist():
        members = np.flatnonzero(crew_col == k)
        members = members[np.argsort(visit_col[members], kind="stable")]
        crew_points = points.iloc[members]
        crew_route = routes[routes["crew"] == k]
        sub = dataclasses.replace(plan, points=crew_points, layers={})
        path = plan_dir / f"crew_{k:02d}.gpx"
        atomic_write_bytes(path, gpx_bytes(sub, routes=crew_route))
        written.append(path)
        geom = crew_route.geometry.iloc[0] if len(crew_route) else None
        row = run.table[run.table["crew"] == k].iloc[0]
        start_note = "; starts at the drop-off" if run.start_xy is not None else ""
        sheets.append(
            CrewSheet(
                crew=int(k),
                route_xy=shapely.get_coordinates(geom) if geom is not None else np.zeros((0, 2)),
                points_xy=xy[members],
                rows=_sheet_rows(points, members),
                summary=(
                    f"{plural(int(row['n_points']), 'point')}, {row['length_km']:.2f} km walking, "
                    f"about {row['hours']:.1f} h{start_note}"
                ),
                start_xy=run.start_xy,
                link=str((links or {}).get(int(k), "")),
            )
        )
    columns = [
        c
        for c in _SHEET_COLUMNS
        if any(c in r and r[c] is not None and str(r[c]) != "" for s in sheets for r in s.rows)
    ]
    blocks = list(zip(plan.blocks["block"].astype(str), plan.blocks.geometry.values, strict=True))
    page = crew_sheets_html(sheets, title=caption, columns=columns, cautions=_cautions(plan), blocks=blocks)
    atomic_write_text(plan_dir / "crew_sheets.html", page)
    written.append(plan_dir / "crew_sheets.html")

    write_points_csv(plan, plan_dir)
    write_points_geojson(plan, plan_dir)
    atomic_write_bytes(plan_dir / "points.gpx", gpx_bytes(plan, routes=routes))
    write_map(plan, plan_dir / "map.html", routes=routes)
    written += [plan_dir / n for n in ("points.csv", "points.geojson", "points.gpx", "map.html")]
    return written


#: The options of the last ``fieldplan crews`` run, so the advice printed after a change can repeat them.
RERUN_NAME = "crews.json"


def save_rerun(plan_dir: str | Path, args: list[str]) -> Path:
    """Record the ``fieldplan crews`` options that made the crews (``args`` after the folder)."""
    import json

    from fieldplan.write.safe import atomic_write_text

    path = Path(plan_dir) / RERUN_NAME
    atomic_write_text(path, json.dumps({"args": [str(a) for a in args]}, indent=1) + "\n")
    return path


def rerun_command(plan_dir: str | Path) -> str | None:
    """The command that re-routes every crew with the options last used (None without crews).

    It carries ``--force``, as it replaces crews on purpose. Crews made before the
    options were recorded get the number of crews from ``crews.csv``.
    """
    import json
    import shlex

    plan_dir = Path(plan_dir)
    args: list[str] | None = None
    try:
        data = json.loads((plan_dir / RERUN_NAME).read_text(encoding="utf-8"))
        args = [str(a) for a in data["args"]]
    except (OSError, ValueError, KeyError, TypeError):
        table = plan_dir / "crews.csv"
        if not table.exists():
            return None
        rows = [line for line in table.read_text(encoding="utf-8").splitlines()[1:] if line.strip()]
        args = ["--crews", str(max(len(rows), 1))]
    return shlex.join(["fieldplan", "crews", str(plan_dir), *args, "--force"])


def inherit_crews(current, after, ids: list[str], replaced_by: list[str], *, restore: bool):
    """Crews after a mark: a point brought in takes the crew and visit of the point it replaces.

    Parameters
    ----------
    current : DataFrame
        The points before the change, with ``crew`` and ``visit_order`` when crews exist.
    after : DataFrame
        The points after it (``fieldplan.field.mark.field_points``).
    ids, replaced_by : list of str
        The points marked (or restored) and, for each, the point that came into use
        (or, on restore, stopped being needed); '' for none.
    restore : bool
        Whether the points were restored.

    Returns
    -------
    DataFrame
        ``after`` with ``crew`` and ``visit_order`` (unchanged when there are no crews);
        points nobody visits have crew 0.
    """
    if "crew" not in current.columns:
        return after
    key = current["point_id"].astype(str)
    crew = dict(zip(key, pd.to_numeric(current["crew"], errors="coerce").fillna(0).astype(int), strict=True))
    visit = dict(
        zip(
            key,
            pd.to_numeric(current.get("visit_order", 0), errors="coerce").fillna(0).astype(int),
            strict=True,
        )
    )
    for pid, other in zip(ids, replaced_by, strict=True):
        came, went = (pid, other) if restore else (other, pid)
        if came and went:
            crew[came], visit[came] = crew.get(went, 0), visit.get(went, 0)
        if went:
            crew[went], visit[went] = 0, 0
    out = after.copy()
    names = out["point_id"].astype(str)
    off = (
        out["status"].fillna("").astype(str).str.lower().isin(_NOT_VISITED)
        if "status" in out.columns
        else pd.Series(False, index=out.index)
    )
    out["crew"] = np.where(off, 0, names.map(crew).fillna(0).astype(np.int64))
    out["visit_order"] = np.where(off, 0, names.map(visit).fillna(0).astype(np.int64))
    return out


def has_crews(plan) -> bool:
    """Whether a plan already carries crew assignments."""
    return "crew" in plan.points.columns or "routes" in getattr(plan, "layers", {})


def refuse_existing(plan, plan_dir: Path, *, force: bool) -> None:
    """Raise unless ``force`` when the plan has crews already."""
    if has_crews(plan) and not force:
        raise OutputExistsError(
            f"{plan_dir}: the plan already has crews and routes; add --force to replace them"
        )
