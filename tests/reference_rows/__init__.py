"""The row model as it was computed block by block with compiled kernels (numba).

Kept only as the reference the array version of the row model is checked against
(``tests/test_rows_arrays.py``): :mod:`.scanline` and :mod:`.clusters` are the
earlier per-block modules unchanged, and :func:`cluster_picks` is the earlier
per-block loop of the clusters design.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import shapely

from fieldplan.rng import stream
from tests.reference_rows.clusters import (
    cluster_sizes,
    concat_segments,
    eligible_plants,
    pick_plants,
    row_segments,
    rows_from_lines,
)

__all__ = ["cluster_picks"]


def _row_model(blocks, i, area, rows_frame):
    row = blocks.iloc[i]
    ps = float(row["plant_spacing_m"]) if pd.notna(row["plant_spacing_m"]) else np.nan
    if not np.isfinite(ps) or ps <= 0:
        return None
    if rows_frame is not None:
        lines = rows_frame.geometry.values
        hit = shapely.intersects(lines, row.geometry)
        if not hit.any():
            return None
        return rows_from_lines(lines[hit], plant_spacing_m=ps, polygon=area)
    rs, bearing = row["row_spacing_m"], row["row_bearing_deg"]
    if pd.isna(rs) or pd.isna(bearing):
        return None
    return row_segments(
        row.geometry, row_spacing_m=float(rs), plant_spacing_m=ps, row_bearing_deg=float(bearing), clip=area
    )


def cluster_picks(blocks, areas, params, exclusion_union=None) -> pd.DataFrame:
    """Picks of the clusters design, block by block: block, x, y, row, plant, units (and spares)."""
    opts = params["design_options"]
    seed, n_spares, rows_frame = params["seed"], int(params.get("spares") or 0), params.get("rows_frame")
    skips = (opts["skip_row_ends"], opts["skip_border_rows"])
    labels = blocks["stratum"].astype(str).to_numpy(dtype=object)
    strata = list(pd.unique(labels))
    members = [np.flatnonzero(labels == s) for s in strata]
    empty = shapely.is_empty(areas) | (shapely.area(areas) <= 0)
    fallback = blocks.geometry.values
    if exclusion_union is not None:
        fallback = shapely.difference(fallback, exclusion_union)
    use = np.where(empty, fallback, areas)
    gone = shapely.is_empty(use) | (shapely.area(use) <= 0)
    out = []
    for stratum, m in zip(strata, members, strict=True):
        parts, owner_idx, elig = [], [], []
        for i in m[~gone[m]]:
            seg = _row_model(blocks, i, use[i], rows_frame)
            if seg is None:
                continue
            count = eligible_plants(seg, skip_row_ends=skips[0], skip_border_rows=skips[1])
            if count.sum() == 0 and use[i] is not fallback[i]:
                seg = _row_model(blocks, i, fallback[i], rows_frame)
                count = eligible_plants(seg, skip_row_ends=skips[0], skip_border_rows=skips[1])
            if count.sum() == 0:
                continue
            parts.append(seg)
            owner_idx.append(i)
            elig.append(count)
        if not parts:
            continue
        joined, which = concat_segments(parts)
        eligible = np.concatenate(elig)
        if opts["per_block"] is not None:
            n_sel = int(opts["per_block"]) * m.size
        else:
            n_sel = int(np.ceil(opts["target_units"] / opts["units_per_cluster"] - 1e-9))
        n_h = int(min(n_sel + n_spares, eligible.sum()))
        rng = stream(seed, "design", str(stratum))
        picks = pick_plants(joined, n_h, rng=rng, skip_row_ends=skips[0], eligible=eligible)
        units_per = int(opts["units_per_cluster"] or 1)
        if opts["target_units"] is not None:
            units = cluster_sizes(int(opts["target_units"]), units_per)
            units = np.concatenate([units, np.full(n_h - n_sel, units_per, dtype=np.int64)])
        else:
            units = np.full(n_h, units_per, dtype=np.int64)
        out.append(
            pd.DataFrame(
                {
                    "_order": np.asarray(owner_idx)[which][picks.segment],
                    "x": picks.x,
                    "y": picks.y,
                    "row": picks.row,
                    "plant": picks.plant,
                    "units": units,
                    "spare_rank": np.maximum(np.arange(n_h) - n_sel + 1, 0),
                }
            )
        )
    table = pd.concat(out, ignore_index=True)
    table = table.iloc[np.argsort(table["_order"].to_numpy(), kind="stable")].reset_index(drop=True)
    table.insert(0, "block", blocks["block"].astype(str).to_numpy()[table.pop("_order").to_numpy()])
    return table
