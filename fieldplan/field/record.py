"""Storing where samples were actually taken: the ``actual`` layer, positions.csv and the map.

The ``actual`` layer of plan.gpkg keeps the latest recorded position of each
point (a later round replaces a point's earlier position); ``positions.csv``
lists them with their displacement from the planned spot and whether it is
beyond the limit. The map draws the layer as recorded positions.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from dataclasses import replace
from pathlib import Path

import geopandas as gpd
import pandas as pd

from fieldplan.field.positions import position_report

__all__ = ["ACTUAL_LAYER", "POSITIONS_NAME", "record_positions"]

ACTUAL_LAYER = "actual"
POSITIONS_NAME = "positions.csv"


def record_positions(
    plan_dir: str | Path,
    actual: pd.DataFrame,
    *,
    max_offset: float | None = None,
    round_no: int = 0,
    recorded_utc: str = "",
) -> pd.DataFrame:
    """Compare recorded positions with the plan, store them and re-draw the plan files.

    Parameters
    ----------
    plan_dir : path
        A plan folder.
    actual : pandas.DataFrame
        ``point_id, lon, lat`` (WGS84); rows without a position are ignored.
    max_offset : float, optional
        Metres; default :func:`fieldplan.field.positions.default_max_offset`.
    round_no, recorded_utc
        Recorded with each position.

    Returns
    -------
    pandas.DataFrame
        This round's comparison (see :func:`fieldplan.field.positions.compare_positions`).
    """
    from fieldplan.field.mark import _OWN_LAYERS, _normalised_blocks, _rewrite_outputs
    from fieldplan.store import load_plan
    from fieldplan.write.gpkg import GPKG_NAME, write_layer
    from fieldplan.write.safe import atomic_write_text, neutralise_frame

    plan_dir = Path(plan_dir)
    plan = load_plan(plan_dir)
    report = position_report(plan, actual, max_offset=max_offset)
    block = plan.points.drop_duplicates("point_id").set_index("point_id")["block"]
    table = report.assign(
        block=report["point_id"].map(block).to_numpy(), round=int(round_no), recorded_utc=recorded_utc
    )
    layer = gpd.GeoDataFrame(
        table,
        geometry=gpd.points_from_xy(table["actual_lon"], table["actual_lat"]),
        crs=4326,
    ).to_crs(plan.crs)
    old = plan.layers.get(ACTUAL_LAYER)
    if old is not None and len(old):
        old = gpd.GeoDataFrame(old).to_crs(plan.crs)
        layer = pd.concat(
            [old[~old["point_id"].isin(layer["point_id"])], layer[old.columns]], ignore_index=True
        )
        layer = gpd.GeoDataFrame(layer, geometry=old.geometry.name, crs=plan.crs)
    gpkg = plan_dir / GPKG_NAME
    tmp = Path(tempfile.mkstemp(prefix=".plan.", suffix=".gpkg", dir=plan_dir)[1])
    try:
        shutil.copyfile(gpkg, tmp)
        write_layer(tmp, ACTUAL_LAYER, layer, geometry_type="Point")
        os.replace(tmp, gpkg)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    columns = [c for c in layer.columns if c != layer.geometry.name]
    text = neutralise_frame(pd.DataFrame(layer[columns])).to_csv(index=False, lineterminator="\n")
    atomic_write_text(plan_dir / POSITIONS_NAME, text)
    layers = {k: v for k, v in plan.layers.items() if k not in _OWN_LAYERS}
    layers[ACTUAL_LAYER] = layer
    _rewrite_outputs(replace(plan, blocks=_normalised_blocks(plan.blocks), layers=layers), plan_dir)
    return report
