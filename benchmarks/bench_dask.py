"""The Dask engine: planning on two workers against one, and against in process.

Many farms at once: several thousand blocks, a dense grid following each
block's rows. Local clusters (loopback only) are started before timing, so the
figures measure planning, not cluster start-up. Plans are checked identical to
the in-process engine's.
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

__all__ = ["study"]


def _timed(fn, repeat: int) -> tuple[float, object]:
    best, out = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def study(*, smoke: bool = False, seed: int = 31, scheduler: str | None = None) -> list[Result]:
    """Time ``run_design`` with the dask engine on 1 and 2 workers and in process.

    With ``scheduler`` (a running cluster's address, as the tests pass) both
    timings use that cluster, so only the plumbing is exercised.
    """
    logging.getLogger("distributed").setLevel(logging.ERROR)
    blocks = estate(60 if smoke else 3000, seed=seed)
    blocks["stratum"] = blocks["block"]
    areas = sample_areas(blocks, edge_buffer=4.0)
    params = {
        "seed": 5,
        "layout": "triangular",
        "spacing": spacing_for_density(2.0 if smoke else 12.0, "triangular"),
        "start": "field",
        "angle": "rows",
        "max_points": 10_000_000,
    }
    repeat = 1 if smoke else 2

    def local():
        return run_design("grid", blocks, areas, params, None)

    t_local, (expected, _) = _timed(local, repeat)
    times, same = {}, True
    for workers in (1, 2):
        with dask_client(scheduler, n_workers=workers) as client:
            run_design("grid", blocks, areas, params, None, engine="dask", client=client)  # warm workers

            def on_dask(client=client):
                return run_design("grid", blocks, areas, params, None, engine="dask", client=client)

            times[workers], (table, _) = _timed(on_dask, repeat)
        try:
            pd.testing.assert_frame_equal(table, expected)
        except AssertionError:
            same = False
    details = {
        "blocks": len(blocks),
        "points": len(expected),
        "identical_to_in_process": same,
        "seconds_in_process": round(t_local, 3),
        "seconds_dask_1_worker": round(times[1], 3),
        "seconds_dask_2_workers": round(times[2], 3),
    }
    return [
        Result(
            "dask",
            "dask engine: 2 workers vs 1 worker (speed-up)",
            times[1] / times[2],
            1.5,
            "higher",
            details=details,
        ),
        Result(
            "dask",
            "dask engine on 2 workers vs in process (speed-up)",
            t_local / times[2],
            1.0,
            "higher",
            details=details,
            informational=True,
        ),
    ]
