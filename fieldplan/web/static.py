"""Static files: our CSS and scripts, and Leaflet from the ``xstatic-leaflet`` package (no CDN)."""

from __future__ import annotations

from pathlib import Path

__all__ = ["install_static", "MAP_DATA_DIR"]

#: The map's package data (fieldplan/data/map): its marker shapes serve both map.html and the workspace.
MAP_DATA_DIR = Path(__file__).resolve().parent.parent / "data" / "map"


def install_static(app, static_dir: Path, leaflet_dir: Path) -> None:
    from starlette.staticfiles import StaticFiles

    app.mount("/static/leaflet", StaticFiles(directory=str(leaflet_dir)), name="leaflet")
    # The marker shapes map.html inlines, served to the workspace's plan map from the same file.
    app.mount("/static/map", StaticFiles(directory=str(MAP_DATA_DIR)), name="map-data")
    app.mount("/static", StaticFiles(directory=str(static_dir)), name="static")
