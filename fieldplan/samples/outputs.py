"""Plan-folder output of the samples stage: ``cores.geojson``."""

from __future__ import annotations

from pathlib import Path

from fieldplan.write.safe import atomic_write_text

# Same column-wise GeoJSON text as points.geojson: no Python object per core.
from fieldplan.write.tables import _geojson_text, points_lonlat

__all__ = ["CORES_NAME", "write_cores_geojson"]

CORES_NAME = "cores.geojson"


def write_cores_geojson(plan, folder: Path) -> None:
    """``cores.geojson``: every soil core with its composite's ``sample_id`` (RFC 7946, WGS84).

    Written only when the plan has a ``cores`` layer (``--purpose soil``).
    """
    cores = plan.layers.get("cores")
    if cores is None or len(cores) == 0 or "geometry" not in cores:
        return
    atomic_write_text(Path(folder) / CORES_NAME, _geojson_text(cores, points_lonlat(cores)))
