"""Plans of a frozen estate give the very points recorded before the plan assembly was reworked.

reference: points, ids, rows, plants, texts and column dtypes of the same plans made by the
earlier code (``tests/data/frozen_plans/``, written by ``python -m tests.test_plan_frozen --write``
at commit cbd666f, before the row clip, seed streams and text columns were made cheaper). Same
blocks, spec and seed must give the same plan to the last bit of every coordinate.

The estate (``blocks.geojson``, metric EPSG:32633) is 24 blocks of
``benchmarks.workloads.estate(24, seed=7, max_ha=3.0, hole_share=0.25, multi_share=0.25,
vertices=24)`` (row spacings 2.2-3.2 m, plant spacings 0.9-1.6 m; coordinates to the mm) with
holes and two-part blocks;
``exclusions.geojson`` cuts circles out of eight of them. Soil plans also keep their cores
layer (``*-cores.csv``).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest

from fieldplan.notebook import prepare_blocks
from fieldplan.planning.plan import make_plan

DATA = Path(__file__).parent / "data" / "frozen_plans"

PLANS = {
    # two-part blocks are cut part by part against their whole outline (the self-clip path)
    "clusters": ({"design": "clusters", "per_block": 6, "plants_per_cluster": 2}, 3, False),
    # a headland and exclusions: the general clip, with skips, spares and a cluster target
    "clusters-clipped": (
        {
            "design": "clusters",
            "target_units": 9,
            "plants_per_cluster": 4,
            "edge_buffer": 3.0,
            "skip_row_ends": 1,
            "skip_border_rows": 1,
            "spares": 1,
            "purpose": "ripeness",
        },
        5,
        True,
    ),
    "grid": ({"design": "grid", "per_ha": 4, "edge_buffer": 2.0}, 1, True),
    "grid-soil": ({"design": "grid", "per_ha": 2, "purpose": "soil", "cores": 4}, 2, False),
    "grid-soil-block": (
        {"design": "grid", "per_ha": 2, "purpose": "soil", "composite": "block", "cores": 5},
        4,
        True,
    ),
    "random": ({"design": "random", "per_block": 2, "spares": 1}, 9, True),
}
#: Soil plans whose cores layer is frozen too.
CORES = ["grid-soil", "grid-soil-block"]


def _estate():
    blocks = prepare_blocks(gpd.read_file(DATA / "blocks.geojson"))
    exclusions = gpd.read_file(DATA / "exclusions.geojson")
    return blocks, exclusions


def _dtype(dtype) -> str:
    # Text columns also by their storage (pyarrow or python): the writers branch on it.
    storage = getattr(dtype, "storage", None)
    return f"{dtype}[{storage}]" if storage else str(dtype)


def _plan(name: str):
    spec, seed, excluded = PLANS[name]
    blocks, exclusions = _estate()
    return make_plan(blocks, spec, seed=seed, exclusions=exclusions if excluded else None, command=["frozen"])


def _points(name: str, layer: str | None = None) -> pd.DataFrame:
    plan = _plan(name)
    points = plan.points if layer is None else plan.layers[layer]
    xy = np.column_stack([points.geometry.x.to_numpy(), points.geometry.y.to_numpy()])
    table = pd.DataFrame(points.drop(columns=points.geometry.name))
    # Every bit of the coordinates: floats as their exact hexadecimal text.
    table["x"] = [float(v).hex() for v in xy[:, 0]]
    table["y"] = [float(v).hex() for v in xy[:, 1]]
    table.attrs["dtypes"] = {c: _dtype(points[c].dtype) for c in points.columns}
    return table


def _write() -> None:
    dtypes = {}
    for name in PLANS:
        table = _points(name)
        dtypes[name] = table.attrs["dtypes"]
        table.to_csv(DATA / f"{name}.csv", index=False)
    for name in CORES:
        table = _points(name, "cores")
        dtypes[f"{name} cores"] = table.attrs["dtypes"]
        table.to_csv(DATA / f"{name}-cores.csv", index=False)
    (DATA / "dtypes.json").write_text(json.dumps(dtypes, indent=1, sort_keys=True) + "\n")


def _same_table(got: pd.DataFrame, file: str, key: str) -> None:
    want = pd.read_csv(DATA / file, dtype=str, keep_default_na=False)
    assert list(got.columns) == list(want.columns)
    assert len(got) == len(want) > 0
    for column in want.columns:
        mine = ["" if pd.isna(v) else str(v) for v in got[column].tolist()]
        assert mine == want[column].tolist(), column
    # The writers see the same column types as before.
    assert got.attrs["dtypes"] == json.loads((DATA / "dtypes.json").read_text())[key]


@pytest.mark.parametrize("name", list(PLANS))
def test_plan_points_match_the_frozen_plans(name):
    _same_table(_points(name), f"{name}.csv", name)


@pytest.mark.parametrize("name", CORES)
def test_soil_cores_match_the_frozen_plans(name):
    _same_table(_points(name, "cores"), f"{name}-cores.csv", f"{name} cores")


if __name__ == "__main__":
    if sys.argv[1:] == ["--write"]:
        _write()


def test_plan_leaves_the_garbage_collector_as_it_found_it():
    # common practice, no source: a library may pause the collector, never leave it changed
    import gc

    blocks, _ = _estate()
    spec = PLANS["grid"][0]
    assert gc.isenabled()
    make_plan(blocks, spec, seed=1, command=["frozen"])
    assert gc.isenabled()
    gc.disable()
    try:
        make_plan(blocks, spec, seed=1, command=["frozen"])
        assert not gc.isenabled()
    finally:
        gc.enable()
