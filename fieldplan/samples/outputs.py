"""Plan-folder output of the samples stage: ``cores.geojson``."""

from __future__ import annotations

import json
import math
from pathlib import Path

from fieldplan.write.safe import atomic_write_text
from fieldplan.write.tables import points_lonlat

__all__ = ["CORES_NAME", "write_cores_geojson"]

CORES_NAME = "cores.geojson"


def _plain(value):
    if hasattr(value, "item"):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def write_cores_geojson(plan, folder: Path) -> None:
    """``cores.geojson``: every soil core with its composite's ``sample_id`` (RFC 7946, WGS84).

    Written only when the plan has a ``cores`` layer (``--purpose soil``).
    """
    cores = plan.layers.get("cores")
    if cores is None or len(cores) == 0 or "geometry" not in cores:
        return
    lonlat = points_lonlat(cores)
    columns = [c for c in cores.columns if c != "geometry"]
    records = cores[columns].to_dict(orient="records")
    features = [
        {
            "type": "Feature",
            "properties": {k: _plain(v) for k, v in props.items()},
            "geometry": {"type": "Point", "coordinates": [float(lon), float(lat)]},
        }
        for (lon, lat), props in zip(lonlat, records, strict=True)
    ]
    text = json.dumps({"type": "FeatureCollection", "features": features}, ensure_ascii=False)
    atomic_write_text(Path(folder) / CORES_NAME, text + "\n")
