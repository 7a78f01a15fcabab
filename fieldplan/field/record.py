"""Storing where samples were actually taken: the ``actual`` layer, positions.csv and the map.

The ``actual`` layer of plan.gpkg keeps the latest recorded position of each
point (a later round replaces a point's earlier position); ``positions.csv``
lists them with their displacement from the planned spot and whether it is
beyond the limit. The map draws the layer as recorded positions.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import pandas as pd

from fieldplan.field.positions import position_report

__all__ = ["ACTUAL_LAYER", "POSITIONS_NAME", "record_positions", "positions_text"]

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
    from fieldplan.store import transaction

    plan_dir = Path(plan_dir)
    # Read, compare and store under the folder's lock (joining the caller's transaction if
    # it holds one, as 'fieldplan results' does to store a round and its positions together).
    with transaction(plan_dir) as txn:
        plan = txn.plan
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
        # positions.csv is derived from this layer when the transaction commits.
        txn.set_layer(ACTUAL_LAYER, layer, geometry_type="Point")
    return report


def positions_text(layer) -> str:
    """positions.csv: the ``actual`` layer as a table, cells neutralised for spreadsheets."""
    from fieldplan.write.safe import neutralise_frame

    layer = gpd.GeoDataFrame(layer)
    columns = [c for c in layer.columns if c != layer.geometry.name]
    return neutralise_frame(pd.DataFrame(layer[columns])).to_csv(index=False, lineterminator="\n")
