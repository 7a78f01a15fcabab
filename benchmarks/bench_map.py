"""map.html through folium: size of the demo map and writing time against the former writer.

* ``demo map size``: bytes of the demo estate's ``map.html`` (Leaflet inlined), against
  a budget of 400 KB;
* ``1,000-block map``: seconds to write the map of the 1,000-block workload plan
  (``workloads.estate(1000)``, one point per hectare, about 20,000 points) with the
  folium writer (:func:`fieldplan.write.html_map.map_html`) over the hand-written
  Leaflet writer it replaced (frozen in ``benchmarks/baseline_map.py``), taken in
  turn in the same run; target 1.5x. Both pages carry the same data document, which
  the details record (``same_data``).
"""

from __future__ import annotations

import re
import tempfile
from pathlib import Path

from benchmarks import baseline_map
from benchmarks.timing import Result, alternating
from benchmarks.workloads import estate, write_geojson
from fieldplan.demo import make_demo_plan
from fieldplan.plan import make_plan
from fieldplan.read import read_blocks
from fieldplan.write.html_map import map_html

__all__ = ["study", "workload_plan"]

SIZE_BUDGET_KB = 400.0
TIME_TARGET = 1.5
_ISLAND = re.compile(r'<script type="application/json" id="fp-data">(.*?)</script>', re.S)


def workload_plan(n_blocks: int, *, seed: int = 21):
    """The plan of ``n_blocks`` workload blocks, read from GeoJSON as the CLI reads them."""
    with tempfile.TemporaryDirectory() as tmp:
        path = write_geojson(estate(n_blocks, seed=seed), Path(tmp) / "blocks.geojson")
        return make_plan(read_blocks(path), per_ha=1.0, seed=1)


def study(*, smoke: bool = False) -> list[Result]:
    """Size of the demo map and the folium/former writing-time ratio on the 1,000-block plan."""
    demo_plan = make_demo_plan()
    demo = map_html(demo_plan)
    size_kb = len(demo.encode("utf-8")) / 1000.0
    plan = workload_plan(20 if smoke else 1000)
    old_page, new_page = baseline_map.map_html(plan), map_html(plan)  # warm caches (assets, templates)
    old, new = alternating(
        lambda: baseline_map.map_html(plan), lambda: map_html(plan), repeat=1 if smoke else 5
    )
    same = _ISLAND.search(old_page).group(1) == _ISLAND.search(new_page).group(1)
    return [
        Result(
            "map",
            "demo map.html size, KB",
            size_kb,
            SIZE_BUDGET_KB,
            "lower",
            unit="KB",
            details={"bytes": len(demo.encode("utf-8")), "points": len(demo_plan.points)},
        ),
        Result(
            "map",
            f"{len(plan.blocks)}-block map.html: folium writer / former Leaflet writer (time)",
            new / old,
            TIME_TARGET,
            "lower",
            details={
                "blocks": len(plan.blocks),
                "points": len(plan.points),
                "seconds_folium": round(new, 3),
                "seconds_former": round(old, 3),
                "bytes_folium": len(new_page.encode("utf-8")),
                "bytes_former": len(old_page.encode("utf-8")),
                "same_data": same,
            },
        ),
    ]
