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
