"""The invented demo estate (Tallowmere Estate): where its files are and how it is planned."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

__all__ = ["demo_blocks_path", "demo_exclusions_path", "DEMO_OPTIONS", "make_demo_plan"]

#: The demo's grid: 40 m square grid, 8 m headland, seed 7.
DEMO_OPTIONS = {"spacing": 40.0, "edge_buffer": 8.0, "seed": 7, "layout": "square", "start": "field"}


def _data(name: str) -> Path:
    return Path(str(resources.files("fieldplan") / "data" / "demo" / name))


def demo_blocks_path() -> Path:
    """Path of the demo estate's block boundaries (GeoJSON, WGS84)."""
    return _data("estate_blocks.geojson")


def demo_exclusions_path() -> Path:
    """Path of the demo estate's exclusion polygons (wet spot, shed, track)."""
    return _data("estate_exclusions.geojson")


def make_demo_plan(*, seed: int | None = None, progress=None, command: list[str] | None = None):
    """Plan the demo estate with :data:`DEMO_OPTIONS` and return the Plan."""
    from fieldplan.planning.plan import make_plan
    from fieldplan.read import read_blocks, read_exclusions

    blocks = read_blocks(demo_blocks_path())
    exclusions = read_exclusions(demo_exclusions_path(), crs=blocks.crs)
    options = dict(DEMO_OPTIONS)
    if seed is not None:
        options["seed"] = seed
    return make_plan(blocks, exclusions=exclusions, progress=progress, command=command, **options)
