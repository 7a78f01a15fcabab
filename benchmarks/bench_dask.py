"""The Dask engine: planning on two workers against one, and against in process.

Many farms at once: several thousand blocks with a dense grid following each
block's rows, and a hundred blocks with spatially balanced points. Local
clusters (loopback only) are started before timing, so the figures measure
planning, not cluster start-up. Plans are checked identical to the in-process
engine's.
"""

from __future__ import annotations

import logging
import time

import pandas as pd

from benchmarks.timing import Result
from benchmarks.workloads import estate
from fieldplan.design.grid import spacing_for_density
from fieldplan.engine import dask_client, run_design
from fieldplan.plan import sample_areas
from fieldplan.stratified import check_design_options

__all__ = ["study"]


def _timed(fn, repeat: int) -> tuple[float, object]:
    best, out = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def _workloads(smoke: bool, seed: int) -> list[tuple[str, str, object, object, dict]]:
    """(label, design, blocks, areas, params) of each workload."""
    grid_blocks = estate(60 if smoke else 3000, seed=seed)
    grid_blocks["stratum"] = grid_blocks["block"]
    grid = {
        "seed": 5,
        "layout": "triangular",
        "spacing": spacing_for_density(2.0 if smoke else 12.0, "triangular"),
        "start": "field",
        "angle": "rows",
        "max_points": 10_000_000,
    }
    # Spatially balanced points (local pivotal method) per block: CPU-bound work of
    # tens of milliseconds a block, the kind of plan that is worth spreading out.
    lpm_blocks = estate(8 if smoke else 600, seed=seed + 1)
    lpm_blocks["stratum"] = lpm_blocks["block"]
    lpm = {"seed": 5, "design_options": check_design_options("balanced", {"per_block": 12})}
    return [
        ("grid", "grid", grid_blocks, sample_areas(grid_blocks, edge_buffer=4.0), grid),
        ("balanced", "balanced", lpm_blocks, sample_areas(lpm_blocks, edge_buffer=4.0), lpm),
    ]


def _measure(design, blocks, areas, params, *, scheduler, repeat: int) -> dict:
    def local():
        return run_design(design, blocks, areas, params, None)

    t_local, (expected, _) = _timed(local, repeat)
    times, same = {}, True
    for workers in (1, 2):
        with dask_client(scheduler, n_workers=workers) as client:
            run_design(design, blocks, areas, params, None, engine="dask", client=client)  # warm workers

            def on_dask(client=client):
                return run_design(design, blocks, areas, params, None, engine="dask", client=client)

            times[workers], (table, _) = _timed(on_dask, repeat)
        try:
            pd.testing.assert_frame_equal(table, expected)
        except AssertionError:
            same = False
    return {
        "design": design,
        "blocks": len(blocks),
        "points": len(expected),
        "identical_to_in_process": same,
        "seconds_in_process": round(t_local, 3),
        "seconds_dask_1_worker": round(times[1], 3),
        "seconds_dask_2_workers": round(times[2], 3),
    }


def study(*, smoke: bool = False, seed: int = 31, scheduler: str | None = None) -> list[Result]:
    """Time ``run_design`` with the dask engine on 1 and 2 workers and in process.

    Two workloads: a dense grid over 3,000 blocks (cheap per block, so moving
    blocks and points between processes weighs as much as the work), and
    spatially balanced points over 600 blocks (CPU-bound). The target applies
    to the second, the case the engine is for; the grid row is informational.
    With ``scheduler`` (a running cluster's address, as the tests pass) every
    timing uses that cluster, so only the plumbing is exercised.
    """
    logging.getLogger("distributed").setLevel(logging.ERROR)
    repeat = 1 if smoke else 3
    results = []
    for label, design, blocks, areas, params in _workloads(smoke, seed):
        details = _measure(design, blocks, areas, params, scheduler=scheduler, repeat=repeat)
        heavy = label == "balanced"
        results += [
            Result(
                "dask",
                f"dask engine, {label} design: 2 workers vs 1 worker (speed-up)",
                details["seconds_dask_1_worker"] / details["seconds_dask_2_workers"],
                1.5,
                "higher",
                details=details,
                informational=not heavy,
            ),
            Result(
                "dask",
                f"dask engine, {label} design: 2 workers vs in process (speed-up)",
                details["seconds_in_process"] / details["seconds_dask_2_workers"],
                1.0,
                "higher",
                details=details,
                informational=not heavy,
            ),
        ]
    return results
