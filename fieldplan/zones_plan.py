"""Plans by management zone, and the cLHS design over covariate cells.

:func:`split_by_zones` cuts each block's sampling area by the zones of a zones GeoPackage
(``fieldplan zones``) into block-zone pieces that the stratified designs then sample as
units: each piece becomes one row of the plan's blocks, named ``BLOCK-zN``, carrying its
block (``parent_block``), its zone and a standard deviation for Neyman allocation. Strata are
the pieces (zone x block), or the zones across blocks (``across=True``).

Neyman allocation needs each stratum's standard deviation of the target, which is not known
before sampling; the zone's standard deviation of one covariate (the first, or the one
named) stands in for it. This is a stand-in: it allocates more points where the covariate
varies more, which helps as far as the covariate's variation tracks the target's.

:func:`clhs_design` is the runner of the ``clhs`` design (see :mod:`fieldplan.design.clhs`):
it brings the covariates onto a grid over the blocks' sampling areas and places ``n`` points
at the centres of the cells the conditioned Latin hypercube picks.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from fieldplan.errors import InputError, OptionError

__all__ = ["split_by_zones", "clhs_design", "ZONE_SD_FIELD", "ZONE_STRATUM_FIELD"]

ZONE_SD_FIELD = "zone_sd"
ZONE_STRATUM_FIELD = "zone_stratum"


def _sd_column(zones: pd.DataFrame, sd_covariate: str | None, source: str) -> str:
    sds = [c for c in zones.columns if c.endswith("_sd")]
    if not sds:
        raise InputError(f"{source}: the zones layer has no covariate SD columns; make it with 'fieldplan zones'")
    if sd_covariate is None:
        return sds[0]
    wanted = f"{sd_covariate}_sd".lower()
    match = [c for c in sds if c.lower() == wanted]
    if not match:
        names = ", ".join(c[:-3] for c in sds)
        raise OptionError(f"--zone-sd {sd_covariate!r}: no such covariate in {source}; choose one of {names}")
    return match[0]


def split_by_zones(
    blocks,
    areas: np.ndarray,
    zones,
    *,
    across: bool = False,
    sd_covariate: str | None = None,
    source: str = "zones",
):
    """Cut blocks and their sampling areas into block-zone pieces.

    Parameters
    ----------
    blocks : geopandas.GeoDataFrame
        The plan's blocks (metric CRS).
    areas : numpy.ndarray
        Each block's sampling area (:func:`fieldplan.plan.sample_areas`).
    zones : geopandas.GeoDataFrame
        The ``zones`` layer (``block, zone, area_ha, <covariate>_sd...``) in the same CRS.
    across : bool
        Strata are zones across blocks (``zone N``) instead of block-zone pieces.
    sd_covariate : str, optional
        Covariate whose zone SD stands in for the target's SD (default: the first).
    source : str
        File name for messages.

    Returns
    -------
    pieces : geopandas.GeoDataFrame
        One row per block-zone piece: the block's attributes, ``block`` = ``BLOCK-zN``,
        ``parent_block``, ``zone``, ``zone_sd`` and ``zone_stratum``; geometry is the block
        cut by the zone.
    piece_areas : numpy.ndarray
        The sampling area of each piece.
    notes : list of str
    """
    import geopandas as gpd
    import shapely

    sd_col = _sd_column(zones, sd_covariate, source)
    names = blocks["block"].astype(str).to_numpy()
    zb = zones["block"].astype(str).to_numpy()
    missing = sorted(set(names) - set(zb))
    if missing:
        shown = ", ".join(missing[:5]) + (" ..." if len(missing) > 5 else "")
        raise InputError(
            f"{source}: no zones for block(s) {shown}; make the zones from the same blocks file"
        )
    position = {name: i for i, name in enumerate(names)}
    keep = np.array([b in position for b in zb])
    z = zones[keep]
    bi = np.array([position[b] for b in z["block"].astype(str)], dtype=np.int64)
    zone_geoms = z.geometry.values
    # The zone polygons were clipped to the sampling area at zoning time; a piece's outline is
    # the block cut by its zone, and its sampling area is this plan's sampling area cut by it.
    outline = shapely.intersection(blocks.geometry.values[bi], zone_geoms)
    sampled = shapely.intersection(np.asarray(areas, dtype=object)[bi], zone_geoms)
    ok = shapely.area(outline) > 1e-6
    notes = []
    if (~ok).any():
        notes.append(f"{int((~ok).sum())} zone piece(s) of {source} fall outside their block and are left out")
    bi, outline, sampled, z = bi[ok], outline[ok], sampled[ok], z[ok]
    zone_no = z["zone"].astype(int).to_numpy()
    frame = pd.DataFrame(blocks.drop(columns="geometry")).iloc[bi].reset_index(drop=True)
    frame["parent_block"] = frame["block"].astype(str)
    frame["block"] = [f"{b}-z{k}" for b, k in zip(frame["parent_block"], zone_no, strict=True)]
    frame["zone"] = zone_no
    frame[ZONE_SD_FIELD] = z[sd_col].to_numpy(dtype=float)
    frame[ZONE_STRATUM_FIELD] = [f"zone {k}" for k in zone_no] if across else frame["block"].to_numpy()
    if frame["block"].duplicated().any():
        dup = frame.loc[frame["block"].duplicated(), "block"].iloc[0]
        raise InputError(f"{source}: zone piece {dup} appears twice; make the zones again")
    pieces = gpd.GeoDataFrame(frame, geometry=list(outline), crs=blocks.crs)
    pieces.attrs.update(blocks.attrs)
    order = np.lexsort((zone_no, frame["parent_block"].to_numpy()))
    pieces = pieces.iloc[order].reset_index(drop=True)
    return pieces, np.asarray(sampled, dtype=object)[order], notes


def clhs_design(blocks, areas, params, exclusion_union, progress):
    """Runner of the ``clhs`` design: ``n`` cell centres by conditioned Latin hypercube.

    Reads ``covariates`` (files), ``n``, ``cell``, ``clhs_iterations`` and ``cost`` (a
    covariate name whose values are the sampling cost per cell) from the design options.

    Returns
    -------
    table : pandas.DataFrame
        ``block, x, y`` and each covariate's value at the point.
    flags : list of list of str
        Per block.
    """
    from fieldplan.covariates import load_covariates
    from fieldplan.design.clhs import clhs
    from fieldplan.rng import stream

    opts = params["design_options"]
    seed = int(params["seed"])
    specs = list(opts.get("covariates") or ())
    if not specs:
        raise OptionError("the clhs design needs covariate files (--covariates)")
    n = opts.get("n")
    if n is None:
        raise OptionError("the clhs design needs a total number of points (--n)")
    cov = load_covariates(specs, blocks, areas, cell=float(opts.get("cell") or 5.0), seed=seed)
    rows, cols, table = cov.cells()
    cost = None
    cost_name = opts.get("cost")
    names = list(cov.names)
    if cost_name:
        if cost_name not in names:
            raise OptionError(f"--cost {cost_name!r}: not one of the covariates ({', '.join(names)})")
        j = names.index(cost_name)
        cost = table[:, j]
        table = np.delete(table, j, axis=1)
        names.pop(j)
        if not names:
            raise OptionError("--cost takes one covariate as the cost; give at least one other covariate")
    sample = clhs(table, int(n), rng=stream(seed, "design", "clhs"), cost=cost,
                  iterations=int(opts.get("clhs_iterations") or 10_000))
    r, c = rows[sample.index], cols[sample.index]
    x, y = cov.grid.centres(r, c)
    owner = cov.grid.block_index[r, c]
    out = pd.DataFrame({"block": blocks["block"].astype(str).to_numpy()[owner], "x": x, "y": y})
    from fieldplan.zones import _column_name

    for j, name in enumerate(names):
        out[_column_name(name)] = np.round(table[sample.index, j], 6)
    order = np.lexsort((y, x, owner))
    out = out.iloc[order].reset_index(drop=True)
    hit = ", ".join(f"{name} {int(h)}/{int(n)}" for name, h in zip(names, sample.strata_hit, strict=True))
    out.attrs["notes"] = [
        f"cLHS: quantile strata hit once per covariate: {hit} (objective {sample.objective:.3f} after "
        f"{sample.iterations:,} steps)",
        *[f"{name}: {cov.methods[name]}" for name in cov.names],
        *cov.notes,
    ]
    counts = out.groupby("block").size()
    flags = [[] if counts.get(b, 0) else ["no cLHS point fell in this block"] for b in blocks["block"].astype(str)]
    if progress is not None:
        progress(1, 1)
    return out, flags
