"""Coordinate reference systems: pick a local metric CRS and move between it and WGS84.

Everything fieldplan measures (spacings, buffers, areas) is computed in metres in
the UTM zone of the data's centroid. Output for GPS units and web maps is WGS84
longitude/latitude (RFC 7946 axis order).
"""

from __future__ import annotations

import math

from pyproj import CRS
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info

__all__ = ["WGS84", "utm_crs_for", "to_crs"]

WGS84 = CRS.from_epsg(4326)


def utm_crs_for(lon: float, lat: float) -> CRS:
    """Return the WGS84 / UTM zone CRS covering ``(lon, lat)``.

    The zone is the one pyproj's database lists for a zero-size area of
    interest at the point, which honours the Norway and Svalbard exceptions.

    Examples
    --------
    >>> utm_crs_for(151.2, -33.9).to_epsg()
    32756
    """
    if not (-180.0 <= lon <= 180.0 and -90.0 <= lat <= 90.0):
        raise ValueError(f"not a longitude/latitude pair: ({lon}, {lat})")
    quick = _regular_zone(lon, lat)
    if quick is not None:
        return CRS.from_epsg(quick)
    infos = query_utm_crs_info(
        datum_name="WGS 84",
        area_of_interest=AreaOfInterest(lon, lat, lon, lat),
    )
    if not infos:
        raise ValueError(f"no UTM zone found for ({lon}, {lat})")

    # Several zones can touch a point on a boundary; the database order is stable,
    # and we prefer the zone whose central meridian is nearest.
    def distance(info) -> float:
        crs = CRS.from_authority(info.auth_name, info.code)
        meridian = crs.coordinate_operation.params[1].value
        return abs(((lon - meridian) + 180.0) % 360.0 - 180.0)

    best = min(infos, key=distance)
    return CRS.from_authority(best.auth_name, best.code)


def _regular_zone(lon: float, lat: float) -> int | None:
    """EPSG code of the UTM zone by arithmetic, or None where the database must decide.

    The database query takes about half a second; away from zone edges, the
    equator, the poles and the Norway/Svalbard exceptions (56-84 N, 0-42 E)
    the zone is simply ``floor((lon + 180) / 6) + 1``.
    """
    if not (-80.0 < lat < 84.0) or lat == 0.0:
        return None
    if lat >= 56.0 and 0.0 <= lon < 42.0:
        return None
    position = (lon + 180.0) / 6.0
    if abs(position - round(position)) < 1e-6:
        return None
    zone = int(math.floor(position)) % 60 + 1
    return (32600 if lat > 0 else 32700) + zone


def to_crs(user_input) -> CRS:
    """All CRS input passes here: EPSG codes, WKT, PROJ strings or CRS objects."""
    return CRS.from_user_input(user_input)


# --- near the poles and across the antimeridian ----------------------------------------------

#: UTM covers 80 S to 84 N; beyond, the blocks get a local projection of their own.
UTM_SOUTH, UTM_NORTH = -80.0, 84.0


def local_crs_for(lon: float, lat: float) -> CRS:
    """The metric CRS to plan blocks centred at ``(lon, lat)``: UTM, or near a pole a local one.

    Within UTM's band (80 S to 84 N) this is :func:`utm_crs_for`. Beyond it, a
    local azimuthal equidistant projection centred on the blocks
    (:func:`polar_crs_for`) rather than the polar stereographic (UPS) zones: UPS's
    scale is 0.994 at the pole and about 0.997 at 84 N, so areas would be 0.7 to
    1.2 % off, while a projection centred on a farm keeps scale within 1e-6 of true
    over tens of kilometres. ``lon`` may be unwrapped past ±180 (see
    :func:`unwrap_longitudes`); it is brought back into range here.
    """
    lon = ((float(lon) + 180.0) % 360.0) - 180.0
    if UTM_SOUTH < lat < UTM_NORTH:
        return utm_crs_for(lon, lat)
    return polar_crs_for(lon, lat)


def polar_crs_for(lon: float, lat: float) -> CRS:
    """A WGS84 azimuthal equidistant CRS centred at ``(lon, lat)`` (metres)."""
    if not (-90.0 <= lat <= 90.0):
        raise ValueError(f"not a latitude: {lat}")
    lon = ((float(lon) + 180.0) % 360.0) - 180.0
    return CRS.from_proj4(f"+proj=aeqd +lat_0={lat:.6f} +lon_0={lon:.6f} +datum=WGS84 +units=m +no_defs")


def unwrap_longitudes(geoms):
    """Blocks straddling the antimeridian, with western longitudes moved past 180.

    A block drawn across ±180 arrives as a ring jumping from 179.998 to -179.998,
    or as two parts either side; planar geometry then reads it as spanning the
    globe. When adding 360 to negative longitudes makes the blocks span fewer
    degrees, that is done (the result lies around 180, which PROJ projects
    correctly), and a feature's parts that now touch are merged.

    Parameters
    ----------
    geoms : array of shapely geometries in WGS84 longitude/latitude

    Returns
    -------
    (numpy.ndarray, bool)
        The geometries (unchanged if no unwrapping helps) and whether they changed.
    """
    import numpy as np
    import shapely

    geoms = np.asarray(geoms, dtype=object)
    xy = shapely.get_coordinates(geoms)
    if len(xy) == 0:
        return geoms, False
    lon = xy[:, 0]
    span = float(lon.max() - lon.min())
    moved = np.where(lon < 0.0, lon + 360.0, lon)
    if span <= 180.0 or float(moved.max() - moved.min()) >= span:
        return geoms, False

    def shift(coords):
        out = coords.copy()
        out[:, 0] = np.where(out[:, 0] < 0.0, out[:, 0] + 360.0, out[:, 0])
        return out

    out = shapely.transform(geoms, shift)
    # Parts either side of the line now share an edge: one block, one polygon.
    multi = np.flatnonzero(shapely.get_num_geometries(out) > 1)
    for i in multi:
        out[i] = shapely.union_all(shapely.get_parts(out[i]), grid_size=None)
    return out, True


def check_lonlat_range(geoms, path, label) -> None:
    """Refuse longitude/latitude outside their ranges, naming the axis, the value and the feature.

    Parameters
    ----------
    geoms : array of shapely geometries said to be in WGS84 longitude/latitude
    path : file name for the message
    label : callable
        ``label(i)`` names feature ``i`` (e.g. ``feature 3 (block='B2')``).

    Raises
    ------
    fieldplan.errors.InvalidBlocksError
    """
    import numpy as np
    import shapely

    from fieldplan.errors import InvalidBlocksError

    xy, index = shapely.get_coordinates(np.asarray(geoms, dtype=object), return_index=True)
    if len(xy) == 0:
        return
    bad_lat = np.flatnonzero(np.abs(xy[:, 1]) > 90.0)
    if bad_lat.size:
        k = bad_lat[0]
        raise InvalidBlocksError(
            f"{path}: latitude outside ±90 degrees ({xy[k, 1]:g} in {label(int(index[k]))}); longitude and "
            "latitude are probably swapped: store longitude first (x) and latitude second (y)"
        )
    bad_lon = np.flatnonzero(np.abs(xy[:, 0]) > 180.0)
    if bad_lon.size:
        k = bad_lon[0]
        value = float(xy[k, 0])
        wrapped = ((value + 180.0) % 360.0) - 180.0
        raise InvalidBlocksError(
            f"{path}: longitude outside ±180 degrees ({value:g} in {label(int(index[k]))}); write it as "
            f"{wrapped:g} (a block may cross the antimeridian: fieldplan joins it across ±180)"
        )
