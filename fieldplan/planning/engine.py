"""Engines that run a design over blocks: in this process, or in parallel on Dask.

A design function (registered in :data:`fieldplan.spec.DESIGNS`) takes every block at
once. Decisions that depend on all blocks are made here, once, before the
blocks are split: the field-wide grid origin (from the farm's total bounds)
goes into the design parameters, and stratified designs are split only between
whole strata, so each stratum's draw (keyed by its name in
:func:`fieldplan.rng.stream`) sees exactly the blocks it sees in process.
Allocation of a total ``n`` over strata needs every stratum at once; that
design runs in process whatever the engine.

The Dask engine partitions blocks with dask-geopandas and plans partitions on
a ``dask.distributed`` cluster: a local one (two single-threaded worker
processes, loopback only, no dashboard) unless a scheduler address is given.
Results are identical to the in-process engine for the same seed.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from typing import Any

import numpy as np
import pandas as pd

from fieldplan.errors import OptionError

__all__ = ["ENGINES", "check_engine", "grid_origin", "run_design", "dask_client", "partition_keys"]

ENGINES = ("local", "dask")
_ORDER = "_fieldplan_order"
_AREA = "_fieldplan_area"
_PART = "_fieldplan_part"


def check_engine(engine: str, scheduler: str | None = None) -> str:
    """Validate an engine name (and that a scheduler address comes with ``dask`` only)."""
    if engine not in ENGINES:
        raise OptionError(f"--engine must be one of {', '.join(ENGINES)}; got {engine!r}")
    if scheduler is not None and engine != "dask":
        raise OptionError("--scheduler applies to --engine dask only")
    if engine == "dask":
        try:
            import dask_geopandas  # noqa: F401
            import distributed  # noqa: F401
        except ImportError:
            raise OptionError(
                "--engine dask needs the optional packages dask-geopandas and distributed; "
                "install them with: pip install 'fieldplan[dask]'"
            ) from None
    return engine


def grid_origin(total_bounds: Sequence[float] | np.ndarray, spacing: float) -> tuple[float, float]:
    """Field-wide lattice anchor: the farm's lower-left corner rounded down to the spacing."""
    minx, miny = float(total_bounds[0]), float(total_bounds[1])
    return (math.floor(minx / spacing) * spacing, math.floor(miny / spacing) * spacing)


def partition_keys(design: str, blocks: pd.DataFrame, n_parts: int) -> np.ndarray:
    """Partition number of each block; whole strata stay together for stratified designs.

    Groups (blocks, or strata) are dealt to partitions in input order so that
    each partition holds about the same number of blocks.
    """
    from fieldplan.spec import DESIGNS

    n_parts = max(1, int(n_parts))
    info = DESIGNS.get(design)
    if (info is not None and not info.stratified) or "stratum" not in blocks.columns:
        groups = np.arange(len(blocks))
    else:
        groups = pd.factorize(blocks["stratum"].astype(str), sort=False)[0]
    sizes = np.bincount(groups)
    # Cut the running block count into n_parts equal slices, at group boundaries.
    ends = np.cumsum(sizes)
    part_of_group = np.minimum((ends - sizes) * n_parts // max(len(blocks), 1), n_parts - 1)
    return part_of_group[groups].astype(np.int64)


def _plan_partition(part: pd.DataFrame, design: str, params: dict, exclusion_union: Any) -> tuple:
    """Worker side: run the design on one partition's blocks."""
    from fieldplan.spec import DESIGNS

    part = part.sort_values(_ORDER, kind="stable")
    areas = np.asarray(part[_AREA].values, dtype=object)
    order = part[_ORDER].to_numpy()
    blocks = part.drop(columns=[_AREA, _ORDER, _PART]).reset_index(drop=True)
    if len(blocks) == 0:
        return None, {}, None
    table, flags = DESIGNS[design].load()(blocks, areas, params, exclusion_union, None)
    index = dict(zip(blocks["block"].to_numpy(), order, strict=True))
    strata = table.attrs.get("strata")
    # The driver knows every block's name: send back its position instead, as
    # pickling hundreds of thousands of short strings costs more than the design.
    codes, names = pd.factorize(table["block"], sort=False)
    position = pd.Series(index).reindex(names).to_numpy(dtype=np.int64)
    table = table.drop(columns="block")
    table.attrs = {}
    table[_ORDER] = position[codes]
    return table, dict(zip(order.tolist(), flags, strict=True)), strata


@contextmanager
def dask_client(scheduler: str | None = None, *, n_workers: int = 2) -> Iterator:
    """A ``distributed.Client``: to ``scheduler`` if given, else to a private local cluster.

    The local cluster listens on 127.0.0.1 only, runs ``n_workers`` single-threaded
    worker processes (GEOS and numpy release the GIL only in parts) and no dashboard.
    """
    from distributed import Client, LocalCluster

    if scheduler is not None:
        client = Client(scheduler)
        try:
            yield client
        finally:
            client.close()
        return
    cluster = LocalCluster(
        n_workers=n_workers,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        dashboard_address=None,
    )
    client = Client(cluster)
    try:
        yield client
    finally:
        client.close()
        cluster.close()


def _run_dask(
    design: str,
    blocks: pd.DataFrame,
    areas: np.ndarray,
    params: dict,
    exclusion_union: Any,
    *,
    client: Any,
    n_parts: int,
) -> tuple:
    import dask
    import dask_geopandas
    import geopandas as gpd

    frame = blocks.copy()
    # A geometry column survives partitioning; an object column would be cast to text.
    frame[_AREA] = gpd.GeoSeries(list(areas), index=frame.index, crs=blocks.crs)
    frame[_ORDER] = np.arange(len(frame), dtype=np.int64)
    frame[_PART] = partition_keys(design, blocks, n_parts)
    from fieldplan.spec import DESIGNS

    if not DESIGNS[design].stratified:
        # Blocks are independent: plain row chunks, no sorting pass.
        parts = dask_geopandas.from_geopandas(frame, npartitions=n_parts, sort=False)
    else:
        # Partition boundaries fall between index values, so a stratum never straddles two.
        frame = frame.set_index(_PART, drop=False)
        frame.index.name = None
        parts = dask_geopandas.from_geopandas(frame, npartitions=n_parts, sort=True)
    tasks = [
        dask.delayed(_plan_partition)(part, design, params, exclusion_union) for part in parts.to_delayed()
    ]
    futures = client.compute(tasks)
    return client.gather(futures)


def _merge(results: list[tuple], blocks: pd.DataFrame, n_blocks: int, design: str) -> tuple[pd.DataFrame, list[list[str]]]:
    tables = [t for t, _, _ in results if t is not None]
    flags_by_index: dict[int, list[str]] = {}
    for _, flags, _ in results:
        flags_by_index.update(flags)
    table = pd.concat(tables, ignore_index=True)
    # Points in block order, each block's points in their drawn order: as in process.
    order = table[_ORDER].to_numpy()
    if order.size and not (np.diff(order) >= 0).all():
        table = table.iloc[np.argsort(order, kind="stable")].reset_index(drop=True)
        order = table[_ORDER].to_numpy()
    names = blocks["block"].astype(str).to_numpy(dtype=object)
    table.insert(0, "block", pd.Series(names[order], dtype="str"))
    table = table.drop(columns=_ORDER)
    strata_parts = [s for _, _, s in results if s is not None]
    if strata_parts:
        strata = pd.concat(strata_parts, ignore_index=True)
        order = pd.unique(blocks["stratum"].astype(str).to_numpy(dtype=object))
        strata = strata.set_index(strata["stratum"].astype(str)).loc[list(order)].reset_index(drop=True)
        table.attrs["strata"] = strata
    return table, [flags_by_index.get(i, []) for i in range(n_blocks)]


def run_design(
    design: str,
    blocks: pd.DataFrame,
    areas: np.ndarray,
    params: dict,
    exclusion_union: Any,
    progress: Callable[[int, int], None] | None = None,
    *,
    engine: str = "local",
    scheduler: str | None = None,
    client: Any = None,
    partitions: int | None = None,
) -> tuple[pd.DataFrame, list[list[str]]]:
    """Run ``design`` over ``blocks`` with the chosen engine; same result either way.

    Parameters
    ----------
    design : str
        Name in :data:`fieldplan.spec.DESIGNS`.
    blocks, areas, params, exclusion_union, progress
        As the design functions take them.
    engine : {"local", "dask"}
    scheduler : str, optional
        Address of a running Dask scheduler (``tcp://host:8786``); default: a local cluster.
    client : distributed.Client, optional
        An existing client to use instead (it is left open).
    partitions : int, optional
        Number of partitions; default four per worker, at most one per block.
    """
    from fieldplan.spec import DESIGNS

    check_engine(engine, scheduler)
    params = dict(params)
    if design == "grid" and params.get("spacing"):
        params.setdefault("grid_origin", grid_origin(blocks.total_bounds, params["spacing"]))
    opts = params.get("design_options") or {}
    global_allocation = DESIGNS[design].stratified and opts.get("n") is not None
    if engine == "local" or global_allocation or len(blocks) < 2:
        return DESIGNS[design].load()(blocks, areas, params, exclusion_union, progress)

    def go(c: Any) -> tuple:
        workers = max(1, len(c.scheduler_info().get("workers", {})) or 1)
        n_parts = min(len(blocks), partitions or 4 * workers)
        return _run_dask(design, blocks, areas, params, exclusion_union, client=c, n_parts=n_parts)

    if client is not None:
        results = go(client)
    else:
        with dask_client(scheduler) as c:
            results = go(c)
    table, flags = _merge(results, blocks, len(blocks), design)
    max_points = params.get("max_points")
    if max_points is not None and len(table) > max_points:
        from fieldplan.spec import SpecDesignError

        raise SpecDesignError(
            "spacing",
            f"the plan would hold {len(table):,} points, more than {max_points:,}; "
            "use a wider {spacing} or lower {per_ha}",
        )
    if progress is not None:
        progress(len(blocks), len(blocks))
    return table, flags
