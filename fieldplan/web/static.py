"""Static files: our CSS and scripts, and Leaflet from the ``xstatic-leaflet`` package (no CDN)."""

from __future__ import annotations

from pathlib import Path

__all__ = ["install_static"]


def install_static(app, static_dir: Path, leaflet_dir: Path) -> None:
    from starlette.staticfiles import StaticFiles

    app.mount("/static/leaflet", StaticFiles(directory=str(leaflet_dir)), name="leaflet")
    app.mount("/static", StaticFiles(directory=str(static_dir)), name="static")
