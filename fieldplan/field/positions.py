"""Where samples were actually taken, against where the plan put them.

Displacement is the geodesic distance on the WGS84 ellipsoid
(:meth:`pyproj.Geod.inv`, Karney's algorithm), so it is right at any latitude
and needs no projection.

Default limit (``max_offset``):

* grid plans: half the grid spacing. A grid point stands for the area closer to
  it than to its neighbours; the nearest neighbour is one spacing away on both
  the square and the triangular lattice, so a sample more than half a spacing
  from its planned point may lie nearer another point's area and no longer
  represents its own.
* other designs: 10 m. Consumer GNSS receivers and phones are typically within
  about 5 m under open sky (GPS.gov, "GPS Accuracy", from memory); a 10 m limit
  is about twice that, so an offset beyond it is a real move rather than
  receiver noise.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from fieldplan.errors import InputError

__all__ = [
    "DEFAULT_OFFSET_M",
    "default_max_offset",
    "displacement_m",
    "read_gpx_positions",
    "positions_from_table",
    "compare_positions",
    "position_report",
    "positions_from_csv",
]

DEFAULT_OFFSET_M = 10.0


def default_max_offset(params: dict) -> float:
    """The default ``--max-offset`` in metres for a plan's parameters (see module notes)."""
    spacing = params.get("spacing_m")
    if params.get("design", "grid") == "grid" and spacing:
        return float(spacing) / 2.0
    return DEFAULT_OFFSET_M


def displacement_m(lon0: ArrayLike, lat0: ArrayLike, lon1: ArrayLike, lat1: ArrayLike) -> np.ndarray:
    """Geodesic distance in metres between planned and actual positions (WGS84)."""
    from pyproj import Geod

    lon0, lat0, lon1, lat1 = (np.asarray(v, dtype=float) for v in (lon0, lat0, lon1, lat1))
    _, _, dist = Geod(ellps="WGS84").inv(lon0, lat0, lon1, lat1)
    return np.asarray(dist, dtype=float)


def _check_lonlat(frame: pd.DataFrame, source: str) -> pd.DataFrame:
    lon = pd.to_numeric(frame["lon"], errors="coerce")
    lat = pd.to_numeric(frame["lat"], errors="coerce")
    present = frame["lon"].notna() | frame["lat"].notna()
    bad = present & ~((lon.abs() <= 180) & (lat.abs() <= 90))
    if bad.any():
        row = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputError(
            f"{source}: row {row + 1} (point {frame['point_id'].iloc[row]!r}) has lon,lat "
            f"{frame['lon'].iloc[row]!r},{frame['lat'].iloc[row]!r}; give decimal degrees, longitude first"
        )
    return pd.DataFrame({"point_id": frame["point_id"].astype(str), "lon": lon, "lat": lat})


def positions_from_table(table: pd.DataFrame, *, source: str = "results") -> pd.DataFrame | None:
    """``point_id, lon, lat`` from a results table with optional ``lon``/``lat`` columns.

    Returns ``None`` when the table has no such columns; rows left blank are NaN.
    """
    columns = {c.lower(): c for c in table.columns}
    if "lon" not in columns and "lat" not in columns:
        return None
    if "lon" not in columns or "lat" not in columns:
        raise InputError(f"{source}: has only one of the lon/lat columns; give both or neither")
    if "point_id" not in columns:
        raise InputError(f"{source}: positions need a point_id column")
    frame = table.rename(
        columns={columns["lon"]: "lon", columns["lat"]: "lat", columns["point_id"]: "point_id"}
    )
    return _check_lonlat(frame, source)


def read_gpx_positions(path: str | Path) -> pd.DataFrame:
    """``point_id, lon, lat`` from the waypoints of a GPX file; the waypoint name is the point id."""
    import gpxpy
    import gpxpy.gpx

    path = Path(path)
    try:
        with path.open(encoding="utf-8") as handle:
            gpx = gpxpy.parse(handle)
    except FileNotFoundError:
        raise InputError(f"{path}: no such GPX file; give the file exported from the receiver") from None
    except (gpxpy.gpx.GPXException, ValueError, UnicodeDecodeError) as err:
        raise InputError(f"{path}: not a readable GPX file ({err}); export waypoints as GPX 1.1") from None
    names = [(w.name or "").strip() for w in gpx.waypoints]
    frame = pd.DataFrame(
        {
            "point_id": names,
            "lon": [w.longitude for w in gpx.waypoints],
            "lat": [w.latitude for w in gpx.waypoints],
        }
    )
    unnamed = frame["point_id"] == ""
    if unnamed.any():
        raise InputError(
            f"{path}: waypoint {int(np.flatnonzero(unnamed.to_numpy())[0]) + 1} has no name; "
            "name each waypoint with its point id"
        )
    return _check_lonlat(frame, str(path))


def compare_positions(
    planned: pd.DataFrame, actual: pd.DataFrame, *, max_offset: float, source: str = "positions"
) -> pd.DataFrame:
    """Displacement of each recorded position from its planned point.

    Parameters
    ----------
    planned : pandas.DataFrame
        ``point_id, lon, lat`` of the plan's points (WGS84).
    actual : pandas.DataFrame
        ``point_id, lon, lat`` where samples were taken; NaN where not recorded.
        A point recorded twice keeps its last position.
    max_offset : float
        Metres beyond which a sample is flagged.

    Returns
    -------
    pandas.DataFrame
        ``point_id, planned_lon, planned_lat, actual_lon, actual_lat, offset_m,
        beyond_max_offset`` for every recorded point, in ``actual`` order.
    """
    if not max_offset > 0:
        raise InputError(f"--max-offset must be positive metres, got {max_offset}")
    recorded = actual.dropna(subset=["lon", "lat"]).drop_duplicates("point_id", keep="last")
    unknown = ~recorded["point_id"].isin(planned["point_id"])
    if unknown.any():
        raise InputError(
            f"{source}: point {recorded['point_id'][unknown].iloc[0]!r} is not in the plan; "
            "check the waypoint names against points.csv"
        )
    merged = recorded.merge(planned, on="point_id", how="left", suffixes=("_actual", "_planned"))
    offset = displacement_m(
        merged["lon_planned"], merged["lat_planned"], merged["lon_actual"], merged["lat_actual"]
    )
    return pd.DataFrame(
        {
            "point_id": merged["point_id"].to_numpy(),
            "planned_lon": merged["lon_planned"].to_numpy(),
            "planned_lat": merged["lat_planned"].to_numpy(),
            "actual_lon": merged["lon_actual"].to_numpy(),
            "actual_lat": merged["lat_actual"].to_numpy(),
            "offset_m": np.round(offset, 3),
            "beyond_max_offset": offset > max_offset,
        }
    )


def position_report(plan, actual: pd.DataFrame, *, max_offset: float | None = None) -> pd.DataFrame:
    """Displacement of recorded positions from a plan's points (see :func:`compare_positions`).

    ``max_offset`` defaults to :func:`default_max_offset` of the plan's parameters.
    """
    from fieldplan.write.tables import points_lonlat

    lonlat = points_lonlat(plan.points)
    planned = pd.DataFrame(
        {"point_id": plan.points["point_id"].astype(str).to_numpy(), "lon": lonlat[:, 0], "lat": lonlat[:, 1]}
    )
    limit = default_max_offset(plan.params) if max_offset is None else float(max_offset)
    return compare_positions(planned, actual, max_offset=limit)


def positions_from_csv(path: str | Path) -> pd.DataFrame | None:
    """``point_id, lon, lat`` from a results CSV with optional ``lon``/``lat`` columns, else ``None``."""
    import csv
    import io

    path = Path(path)
    data = path.read_bytes()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = data.decode("latin-1")
    try:
        frame = pd.read_csv(io.StringIO(text), sep=None, engine="python", dtype=str, keep_default_na=False)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, csv.Error) as err:
        raise InputError(
            f"{path}: not a readable CSV table ({err}); save it as CSV with a header row"
        ) from None
    frame.columns = [str(c).strip().lower() for c in frame.columns]
    frame = frame.replace("", np.nan)
    return positions_from_table(frame, source=str(path))
