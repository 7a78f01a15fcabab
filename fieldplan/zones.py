"""Management zones from covariates: clustering, choice of K, smoothing, polygons.

Cells of the covariate grid (:mod:`fieldplan.covariates`) are standardised (optionally
turned into principal components) and clustered by k-means (scikit-learn) or fuzzy
k-means (Bezdek 1981), over the whole farm or block by block. With ``k="auto"`` every K
in 2-6 is fitted and K is chosen by the fuzziness performance index and the normalised
classification entropy (Odeh et al. 1992) or by the silhouette (Rousseeuw 1987); the table
behind the choice is returned. The zone map is smoothed by a majority filter, pieces smaller
than a minimum area are merged into the neighbouring zone they share most border with, and
the map is polygonised (``rasterio.features.shapes``) and clipped to each block's sampling area.

Zone numbers run from 1 upwards in order of the zone's mean of the first covariate (or first
principal component), so the same inputs and seed give the same numbering.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from fieldplan.errors import DesignError, OptionError

__all__ = [
    "ZoneMap",
    "standardise",
    "principal_components",
    "fuzzy_kmeans",
    "memberships",
    "fpi",
    "nce",
    "cluster",
    "choose_k",
    "majority_filter",
    "merge_small",
    "delineate",
    "zone_polygons",
]

K_RANGE = (2, 3, 4, 5, 6)
METHODS = ("kmeans", "fuzzy")
CRITERIA = ("fpi-nce", "silhouette")
SCOPES = ("farm", "block")


@dataclass
class ZoneMap:
    """Zones on the covariate grid and their polygons.

    Attributes
    ----------
    labels : numpy.ndarray
        ``(height, width)`` int16 zone numbers after smoothing, 0 outside or without data.
    raw : numpy.ndarray
        The same before smoothing.
    k : int or dict
        Zones used (per block when zoning block by block).
    polygons : geopandas.GeoDataFrame
        ``zones`` layer: block, zone, area_ha, cells, covariate means and SDs.
    choice : pandas.DataFrame or None
        With ``k="auto"``: K, FPI, NCE, silhouette and the chosen K (per block if by block).
    params : dict
        How the zones were made (for the GeoPackage's info table).
    notes : list of str
    """

    labels: np.ndarray
    raw: np.ndarray
    k: int | dict
    polygons: object
    choice: pd.DataFrame | None
    params: dict
    notes: list[str] = field(default_factory=list)


# --------------------------------------------------------------------------- feature space


def standardise(table: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Centre and scale each column to unit SD (population SD); constant columns keep SD 1."""
    mean = table.mean(axis=0)
    sd = table.std(axis=0)
    sd = np.where(sd > 0, sd, 1.0)
    return (table - mean) / sd, mean, sd


def principal_components(z: np.ndarray, *, keep: float = 0.9) -> tuple[np.ndarray, np.ndarray]:
    """Scores on the fewest principal components explaining ``keep`` of the variance.

    Components come from the SVD of the standardised table; signs are fixed so the largest
    loading of each component is positive (the same data always give the same scores).

    Returns
    -------
    scores : numpy.ndarray
    explained : numpy.ndarray
        Variance share of each kept component.
    """
    centred = z - z.mean(axis=0)
    _, s, vt = np.linalg.svd(centred, full_matrices=False)
    share = s**2 / np.sum(s**2) if np.sum(s**2) > 0 else np.ones_like(s) / len(s)
    n = int(np.searchsorted(np.cumsum(share), keep - 1e-12) + 1)
    vt = vt[:n]
    sign = np.sign(vt[np.arange(n), np.argmax(np.abs(vt), axis=1)])
    vt = vt * sign[:, None]
    return centred @ vt.T, share[:n]


# --------------------------------------------------------------------------- clustering


def memberships(x: np.ndarray, centres: np.ndarray, m: float) -> np.ndarray:
    """Fuzzy memberships of points to centres (Bezdek 1981, eq. 11.3); rows sum to 1.

    ``u_ik = 1 / sum_j (d_ik / d_jk) ** (2 / (m - 1))``; a point on a centre belongs to it fully.
    """
    d2 = ((x[:, None, :] - centres[None, :, :]) ** 2).sum(-1)
    on = d2 <= 1e-300
    # Distances relative to the nearest centre keep the powers in [0, 1] (no overflow).
    # Rows with a point on a centre give inf here and are set just below.
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ratio = d2 / np.maximum(d2.min(axis=1, keepdims=True), 1e-300)
        power = 1.0 / (m - 1.0)
        # m = 1.5 and m = 2 give whole powers: squaring is several times faster than pow.
        inv = 1.0 / (np.square(ratio) if power == 2.0 else ratio if power == 1.0 else ratio**power)
        u = inv / inv.sum(axis=1, keepdims=True)
    hit = on.any(axis=1)
    if hit.any():
        u[hit] = on[hit] / on[hit].sum(axis=1, keepdims=True)
    return u


def fuzzy_kmeans(
    x: np.ndarray, k: int, *, m: float = 1.5, rng: np.random.Generator, iterations: int = 300, tol: float = 1e-6
) -> tuple[np.ndarray, np.ndarray]:
    """Fuzzy k-means (fuzzy c-means, Bezdek 1981) with Euclidean distance.

    Starts from k-means++ centres (scikit-learn's ``kmeans_plusplus`` seeded from ``rng``)
    and alternates memberships and weighted centres until the centres move less than
    ``tol``.

    Returns
    -------
    centres : numpy.ndarray
        ``(k, p)``.
    u : numpy.ndarray
        ``(n, k)`` memberships.
    """
    from sklearn.cluster import kmeans_plusplus

    if m <= 1:
        raise OptionError(f"the fuzziness exponent must be above 1, got {m}")
    centres, _ = kmeans_plusplus(x, k, random_state=int(rng.integers(2**31 - 1)))
    for _ in range(iterations):
        u = memberships(x, centres, m)
        w = u**m
        new = (w.T @ x) / w.sum(axis=0)[:, None]
        moved = float(np.max(np.abs(new - centres)))
        centres = new
        if moved < tol:
            break
    return centres, memberships(x, centres, m)


def fpi(u: np.ndarray) -> float:
    """Fuzziness performance index (Odeh et al. 1992): ``1 - (c F - 1) / (c - 1)``, F = mean sum u^2.

    0 for a crisp partition, 1 when every point belongs equally to every class.
    """
    c = u.shape[1]
    f = float(np.sum(u**2) / u.shape[0])
    return 1.0 - (c * f - 1.0) / (c - 1.0)


def nce(u: np.ndarray) -> float:
    """Normalised classification entropy (Odeh et al. 1992): ``H / log c``, H = -mean sum u log u.

    0 for a crisp partition, 1 when every point belongs equally to every class.
    """
    c = u.shape[1]
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(u > 0, u * np.log(u), 0.0)
    h = -float(np.sum(terms) / u.shape[0])
    return h / math.log(c)


def cluster(
    x: np.ndarray,
    k: int,
    *,
    method: str = "kmeans",
    m: float = 1.5,
    rng: np.random.Generator,
    with_memberships: bool = True,
) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """Cluster rows of ``x`` into ``k`` groups.

    k-means is scikit-learn's ``KMeans`` (Lloyd, one k-means++ start as its default, seeded from
    ``rng``); fuzzy k-means is :func:`fuzzy_kmeans`, each point going to its largest
    membership. Memberships of k-means points are computed from its centres with the same
    exponent ``m`` so that FPI and NCE can be reported for either method.

    Returns
    -------
    labels : numpy.ndarray
        0-based cluster of each row.
    centres : numpy.ndarray
    u : numpy.ndarray or None
        Memberships (None for k-means with ``with_memberships=False``).
    """
    if method == "kmeans":
        from sklearn.cluster import KMeans
        from threadpoolctl import threadpool_limits

        # One thread: on a busy machine OpenMP threads spin and a small fit takes 100x longer,
        # and one thread sums in one order, so the labels do not depend on the core count.
        with threadpool_limits(1):
            km = KMeans(n_clusters=k, n_init=1, random_state=int(rng.integers(2**31 - 1))).fit(x)
        u = memberships(x, km.cluster_centers_, m) if with_memberships else None
        return km.labels_.astype(np.int64), km.cluster_centers_, u
    if method == "fuzzy":
        centres, u = fuzzy_kmeans(x, k, m=m, rng=rng)
        return np.argmax(u, axis=1), centres, u
    raise OptionError(f"zoning method must be one of {', '.join(METHODS)}, got {method!r}")


def choose_k(
    x: np.ndarray,
    *,
    method: str,
    criterion: str,
    m: float,
    rng: np.random.Generator,
    ks: tuple[int, ...] = K_RANGE,
    silhouette_sample: int = 2000,
) -> tuple[int, pd.DataFrame, dict[int, tuple[np.ndarray, np.ndarray]]]:
    """Fit every K in ``ks`` and choose one.

    ``fpi-nce``: the K with the smallest sum of its ranks on FPI and on NCE (both lowest at the
    least ambiguous partition, Odeh et al. 1992; ties go to the smaller K). ``silhouette``: the
    K with the largest mean silhouette (Rousseeuw 1987) on a seeded sample of at most
    ``silhouette_sample`` cells (scikit-learn's ``silhouette_score``; 2,000 cells give the
    mean silhouette to about +-0.01, and the cost grows with the square of the sample).

    Returns
    -------
    k : int
    table : pandas.DataFrame
        ``k, fpi, nce, silhouette, chosen``.
    fits : dict
        K -> (labels, centres).
    """
    from sklearn.metrics import silhouette_score
    from threadpoolctl import threadpool_limits

    if criterion not in CRITERIA:
        raise OptionError(f"--criterion must be one of {', '.join(CRITERIA)}, got {criterion!r}")
    ks = tuple(k for k in ks if k < len(x))
    if not ks:
        raise DesignError(f"only {len(x)} cells with data: too few to divide into zones")
    rows, fits = [], {}
    for k in ks:
        labels, centres, u = cluster(x, k, method=method, m=m, rng=rng)
        fits[k] = (labels, centres)
        if len(np.unique(labels)) > 1:
            sample = min(silhouette_sample, len(x))
            with threadpool_limits(1):
                sil = float(
                    silhouette_score(x, labels, sample_size=sample, random_state=int(rng.integers(2**31 - 1)))
                )
        else:
            sil = float("nan")
        rows.append({"k": k, "fpi": fpi(u), "nce": nce(u), "silhouette": sil})
    table = pd.DataFrame(rows)
    if criterion == "fpi-nce":
        score = table["fpi"].rank(method="min") + table["nce"].rank(method="min")
        best = int(table.loc[score.idxmin(), "k"])  # idxmin takes the first, i.e. the smaller K
    else:
        best = int(table.loc[table["silhouette"].fillna(-2).idxmax(), "k"])
    table["chosen"] = table["k"] == best
    return best, table, fits


# --------------------------------------------------------------------------- smoothing


def _neighbour_counts(labels: np.ndarray, k: int, size: int) -> np.ndarray:
    from scipy.ndimage import uniform_filter

    counts = np.empty((k + 1,) + labels.shape, dtype=np.float32)
    counts[0] = -1.0
    for z in range(1, k + 1):
        counts[z] = uniform_filter((labels == z).astype(np.float32), size=size, mode="constant")
    return counts


def majority_filter(labels: np.ndarray, *, size: int = 3, passes: int = 1) -> np.ndarray:
    """Majority filter of zone numbers in a ``size`` x ``size`` window, cells outside (0) untouched.

    Each zoned cell takes the zone most frequent among the zoned cells of its window; on a
    tie it keeps its own zone if that is among the most frequent, else the lowest number.
    """
    out = labels.copy()
    k = int(out.max())
    if k <= 1 or size < 2:
        return out
    inside = out > 0
    for _ in range(passes):
        counts = _neighbour_counts(out, k, size)
        best = counts.max(axis=0)
        own = np.take_along_axis(counts, out[None].astype(np.intp), axis=0)[0]
        new = np.where(own >= best - 1e-6, out, np.argmax(counts, axis=0)).astype(out.dtype)
        out = np.where(inside, new, 0).astype(labels.dtype)
    return out


def merge_small(labels: np.ndarray, block_index: np.ndarray, min_cells: int, *, rounds: int = 10) -> np.ndarray:
    """Merge zone pieces smaller than ``min_cells`` into the neighbouring zone they touch most.

    Pieces are 4-connected cells of one zone within one block (the connectivity
    ``rasterio.features.shapes`` polygonises with). A piece with no zoned neighbour in its
    block (a block smaller than the minimum, say) is kept.
    """
    from scipy.ndimage import label

    out = labels.copy()
    if min_cells <= 1:
        return out
    k = int(out.max())
    nb = int(block_index.max()) + 2
    for _ in range(rounds):
        piece = np.zeros(out.shape, dtype=np.int64)
        offset = 0
        for z in range(1, k + 1):
            comp, n = label(out == z)
            piece = np.where(comp > 0, (comp + offset) * nb + (block_index + 1), piece)
            offset += n
        ids, inverse = np.unique(piece.ravel(), return_inverse=True)
        inverse = inverse.reshape(out.shape)
        sizes = np.bincount(inverse.ravel())
        small = (sizes < min_cells) & (ids > 0)
        in_small = small[inverse]
        if not in_small.any():
            break
        # Votes: each small-piece cell looks at its 4 neighbours in the same block outside its piece.
        votes_piece, votes_zone = [], []
        h, w = out.shape
        pad_zone = np.pad(out, 1)
        pad_block = np.pad(block_index, 1, constant_values=-2)
        pad_piece = np.pad(inverse, 1, constant_values=-1)
        for dr, dc in ((0, 1), (0, -1), (1, 0), (-1, 0)):
            nz = pad_zone[1 + dr : 1 + dr + h, 1 + dc : 1 + dc + w]
            ok = (
                in_small
                & (nz > 0)
                & (pad_block[1 + dr : 1 + dr + h, 1 + dc : 1 + dc + w] == block_index)
                & (pad_piece[1 + dr : 1 + dr + h, 1 + dc : 1 + dc + w] != inverse)
            )
            votes_piece.append(inverse[ok])
            votes_zone.append(nz[ok])
        vp = np.concatenate(votes_piece)
        vz = np.concatenate(votes_zone).astype(np.int64)
        if len(vp) == 0:
            break
        tally = np.zeros((len(ids), k + 1), dtype=np.int64)
        np.add.at(tally, (vp, vz), 1)
        # Smallest pieces first would be exact; one round moves every small piece at once and
        # the next round catches pieces that merged into another small piece.
        target = np.argmax(tally, axis=1)
        movable = small & (tally.max(axis=1) > 0)
        if not movable.any():
            break
        move = movable[inverse]
        out = np.where(move, target[inverse], out).astype(labels.dtype)
    return out


# --------------------------------------------------------------------------- the whole job


def delineate(
    covariates,
    blocks,
    areas: np.ndarray,
    *,
    k: int | str = "auto",
    method: str = "kmeans",
    criterion: str | None = None,
    scope: str = "farm",
    pca: bool = False,
    m: float = 1.5,
    smooth: int = 3,
    min_zone_ha: float = 0.0,
    seed: int = 0,
) -> ZoneMap:
    """Delineate management zones from covariates on a grid.

    Parameters
    ----------
    covariates : fieldplan.covariates.Covariates
    blocks : geopandas.GeoDataFrame
        Blocks in the grid's CRS (``block`` column).
    areas : numpy.ndarray
        Sampling area of each block, as the grid was made from.
    k : int or "auto"
        Number of zones, or ``"auto"`` to choose in 2-6.
    method : str
        ``kmeans`` or ``fuzzy``.
    criterion : str, optional
        ``fpi-nce`` or ``silhouette`` (default: fpi-nce for fuzzy, silhouette for kmeans).
    scope : str
        ``farm`` (one clustering of all cells) or ``block`` (each block on its own).
    pca : bool
        Cluster principal components explaining 90 % of the variance instead of the
        standardised covariates.
    m : float
        Fuzziness exponent (1.5 by default; 1.3-2 are usual).
    smooth : int
        Majority filter window in cells (odd; 1 = none).
    min_zone_ha : float
        Zone pieces smaller than this are merged into a neighbour.
    seed : int
    """
    from fieldplan.rng import stream

    if method not in METHODS:
        raise OptionError(f"--method must be one of {', '.join(METHODS)}, got {method!r}")
    if scope not in SCOPES:
        raise OptionError(f"--per must be one of {', '.join(SCOPES)}, got {scope!r}")
    criterion = criterion or ("fpi-nce" if method == "fuzzy" else "silhouette")
    if criterion not in CRITERIA:
        raise OptionError(f"--criterion must be one of {', '.join(CRITERIA)}, got {criterion!r}")
    if k != "auto":
        k = int(k)
        if not 2 <= k <= 20:
            raise OptionError(f"--zones must be 'auto' or a number from 2 to 20, got {k}")
    if smooth < 1 or smooth % 2 == 0:
        raise OptionError(f"--smooth must be an odd number of cells (1 = none), got {smooth}")
    if min_zone_ha < 0:
        raise OptionError(f"--min-zone-ha must be zero or more, got {min_zone_ha}")
    grid = covariates.grid
    rows, cols, table = covariates.cells()
    if len(table) < 3:
        raise DesignError("fewer than 3 grid cells have every covariate: check the covariates cover the blocks")
    cell_block = grid.block_index[rows, cols]
    groups = [("farm", np.arange(len(table)))] if scope == "farm" else [
        (grid.blocks[b], np.flatnonzero(cell_block == b)) for b in np.unique(cell_block)
    ]
    raw = np.zeros((grid.height, grid.width), dtype=np.int16)
    choices, ks, notes, explained = [], {}, list(covariates.notes), None
    for name, members in groups:
        z, _, _ = standardise(table[members])
        if pca:
            z, explained = principal_components(z)
        rng = stream(seed, "zones", name)
        if k == "auto":
            kk, tab, fits = choose_k(z, method=method, criterion=criterion, m=m, rng=rng)
            labels = fits[kk][0]
            tab.insert(0, "scope", name)
            choices.append(tab)
        else:
            kk = min(k, len(members) - 1)
            if kk < 2:
                notes.append(f"{name}: too few cells for zones; one zone")
                labels = np.zeros(len(members), dtype=np.int64)
                kk = 1
            else:
                labels, _, _ = cluster(z, kk, method=method, m=m, rng=rng, with_memberships=False)
        # Number zones by their mean first feature so numbering does not depend on the solver.
        order = np.argsort(np.bincount(labels, weights=z[:, 0], minlength=kk) / np.maximum(
            np.bincount(labels, minlength=kk), 1), kind="stable")
        rank = np.empty(kk, dtype=np.int64)
        rank[order] = np.arange(kk)
        raw[rows[members], cols[members]] = (rank[labels] + 1).astype(np.int16)
        ks[name] = kk
    smoothed = majority_filter(raw, size=smooth) if smooth > 1 else raw.copy()
    min_cells = int(math.ceil(min_zone_ha / grid.cell_ha)) if min_zone_ha > 0 else 0
    smoothed = merge_small(smoothed, np.where(smoothed > 0, grid.block_index, -1), min_cells)
    polygons = zone_polygons(smoothed, covariates, blocks, areas)
    params = {
        "k": ks["farm"] if scope == "farm" else "per block",
        "k_requested": str(k),
        "method": method,
        "criterion": criterion if k == "auto" else "",
        "scope": scope,
        "pca": bool(pca),
        "pca_explained": "" if explained is None else ",".join(f"{e:.3f}" for e in explained),
        "fuzziness": m,
        "smooth_cells": smooth,
        "min_zone_ha": min_zone_ha,
        "cell_m": grid.cell,
        "seed": seed,
        "covariates": ";".join(covariates.names),
        "covariate_methods": ";".join(f"{n}: {covariates.methods[n]}" for n in covariates.names),
    }
    choice = pd.concat(choices, ignore_index=True) if choices else None
    return ZoneMap(smoothed, raw, ks["farm"] if scope == "farm" else ks, polygons, choice, params, notes)


def zone_polygons(labels: np.ndarray, covariates, blocks, areas: np.ndarray):
    """Polygons of (block, zone) covering each block's sampling area, with covariate statistics.

    Cells of a block's sampling area whose centre is outside it (its edge) or that have no
    data take the zone of the nearest zoned cell, so the polygons, clipped to the sampling
    area, cover it whole.
    """
    import geopandas as gpd
    import shapely
    from rasterio.features import shapes
    from scipy.ndimage import distance_transform_edt

    grid = covariates.grid
    zoned = labels > 0
    if not zoned.any():
        raise DesignError("no cell was zoned: check the covariates cover the blocks")
    _, (ri, ci) = distance_transform_edt(~zoned, return_indices=True)
    filled = labels[ri, ci].astype(np.int32)
    pieces = shapes(filled, transform=grid.transform, connectivity=4)
    geoms, values = [], []
    for geom, value in pieces:
        geoms.append(shapely.geometry.shape(geom))
        values.append(int(value))
    frame = gpd.GeoDataFrame({"zone": values}, geometry=geoms, crs=grid.crs)
    by_zone = frame.dissolve(by="zone").sort_index()
    zone_ids = by_zone.index.to_numpy()
    zone_geoms = by_zone.geometry.values
    area_geoms = np.asarray(areas, dtype=object)
    clipped = shapely.intersection(area_geoms[:, None], np.asarray(zone_geoms, dtype=object)[None, :])
    bi, zi = np.nonzero(~shapely.is_empty(clipped) & (shapely.area(clipped) > 1e-6))
    out_geoms = np.array([_polygonal(g) for g in clipped[bi, zi]], dtype=object)
    rows, cols, table = covariates.cells()
    cell_block = grid.block_index[rows, cols]
    cell_zone = labels[rows, cols].astype(np.int64)
    nz = int(labels.max()) + 1
    key = cell_block.astype(np.int64) * nz + cell_zone
    n_keys = len(grid.blocks) * nz
    counts = np.bincount(key, minlength=n_keys).astype("float64")
    data = {
        "block": np.asarray(grid.blocks, dtype=object)[bi],
        "zone": zone_ids[zi].astype(np.int64),
        "area_ha": shapely.area(out_geoms) / 10_000.0,
    }
    pick = bi.astype(np.int64) * nz + zone_ids[zi]
    data["cells"] = counts[pick].astype(np.int64)
    with np.errstate(invalid="ignore", divide="ignore"):
        for j, name in enumerate(covariates.names):
            s1 = np.bincount(key, weights=table[:, j], minlength=n_keys)
            s2 = np.bincount(key, weights=table[:, j] ** 2, minlength=n_keys)
            mean = s1 / counts
            var = np.maximum(s2 / counts - mean**2, 0.0) * counts / np.maximum(counts - 1, 1)
            col = _column_name(name)
            data[f"{col}_mean"] = mean[pick]
            data[f"{col}_sd"] = np.sqrt(var)[pick]
    result = gpd.GeoDataFrame(data, geometry=list(out_geoms), crs=grid.crs)
    return result.sort_values(["block", "zone"], kind="stable").reset_index(drop=True)


def _polygonal(geom):
    """Polygon parts only: an intersection along a shared edge can add lines or points."""
    import shapely

    if geom.geom_type in ("Polygon", "MultiPolygon"):
        return geom
    parts = [p for p in shapely.get_parts(geom) if p.geom_type in ("Polygon", "MultiPolygon")]
    return shapely.union_all(parts) if parts else shapely.Polygon()


def _column_name(name: str) -> str:
    """A covariate name as a safe column prefix (letters, digits, underscore)."""
    import re

    text = re.sub(r"[^0-9A-Za-z_]+", "_", name).strip("_") or "covariate"
    return text if not text[0].isdigit() else f"c_{text}"


# --------------------------------------------------------------------------- output

# Sequential greens to browns chosen for this map: zones are ordered by their mean first
# covariate, so an ordered ramp reads better than unrelated hues.
ZONE_COLOURS = ("#f6e8c3", "#dfc27d", "#bf812d", "#80cdc1", "#35978f", "#01665e", "#8c510a", "#c7eae5")


def zone_colour(zone: int) -> str:
    """Fill colour of zone number ``zone`` (1-based) on maps."""
    return ZONE_COLOURS[(int(zone) - 1) % len(ZONE_COLOURS)]


def zones_figure(zone_map: ZoneMap, blocks, *, title: str | None = None):
    """A matplotlib figure of the zones with block outlines, a legend and a scale bar."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import shapely
    from matplotlib.patches import Patch

    from fieldplan.write.png import _patches, nice_length

    polys = zone_map.polygons
    fig, ax = plt.subplots(figsize=(8.27, 8.27), dpi=150)
    zones = sorted(int(z) for z in polys["zone"].unique())
    for z in zones:
        part = polys[polys["zone"] == z]
        ax.add_collection(_patches(part.geometry.values, facecolor=zone_colour(z), edgecolor="none"))
    ax.add_collection(_patches(blocks.geometry.values, facecolor="none", edgecolor="#222222", linewidth=0.8))
    minx, miny, maxx, maxy = shapely.total_bounds(blocks.geometry.values)
    pad = 0.04 * max(maxx - minx, maxy - miny, 1.0)
    ax.set_xlim(minx - pad, maxx + pad)
    ax.set_ylim(miny - pad * 3, maxy + pad)
    ax.set_aspect("equal")
    ax.set_axis_off()
    if len(blocks) <= 200:
        centres = shapely.point_on_surface(blocks.geometry.values)
        for name, c in zip(blocks["block"].astype(str), centres, strict=True):
            ax.text(c.x, c.y, name, ha="center", va="center", fontsize=7, color="#111111")
    area = polys.groupby("zone")["area_ha"].sum()
    handles = [Patch(facecolor=zone_colour(z), edgecolor="#444444", label=f"Zone {z} ({area[z]:.1f} ha)") for z in zones]
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False, fontsize=8)
    bar = nice_length((maxx - minx) / 4)
    y = miny - pad * 2
    ax.plot([minx, minx + bar], [y, y], color="black", linewidth=2)
    ax.text(minx + bar / 2, y - pad * 0.3, f"{bar:g} m", ha="center", va="top", fontsize=7)
    p = zone_map.params
    ax.set_title(title or f"Management zones: {p['method']}, K = {p['k']}, {p['scope']}", fontsize=10)
    names = p["covariates"].replace(";", ", ")
    fig.text(0.02, 0.02, f"Covariates: {names}. Seed {p['seed']}. Zones are predictions from maps, "
             "not measurements: check them on the ground.", fontsize=6, wrap=True)
    fig.tight_layout()
    return fig


def write_zones(zone_map: ZoneMap, blocks, path, *, force: bool = False) -> tuple[object, object]:
    """Write ``zones.gpkg`` (layers ``zones``, ``zone_info``, ``zone_choice``) and a PNG beside it.

    Both files are written to temporary names and moved into place, so an interrupted run
    leaves the old files or none. Existing files are replaced only with ``force``.

    Returns
    -------
    gpkg, png : pathlib.Path
    """
    import io
    import json
    import os
    import tempfile
    from pathlib import Path

    import shapely

    from fieldplan.errors import OutputExistsError
    from fieldplan.write.gpkg import write_layer
    from fieldplan.write.safe import atomic_write_bytes

    path = Path(path)
    if path.suffix.lower() != ".gpkg":
        raise OptionError(f"{path}: --out must end in .gpkg (a GeoPackage)")
    png = path.with_suffix(".png")
    for target in (path, png):
        if target.exists() and not force:
            raise OutputExistsError(f"{target}: exists; choose another --out or add --force to replace it")
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp.gpkg", dir=path.parent)
    os.close(fd)
    os.unlink(tmp)
    try:
        polys = zone_map.polygons.copy()
        polys = polys.set_geometry(
            [g if g.geom_type == "MultiPolygon" else shapely.MultiPolygon([g]) for g in polys.geometry.values],
            crs=polys.crs,
        )
        write_layer(Path(tmp), "zones", polys, geometry_type="MultiPolygon")
        info = pd.DataFrame({"key": list(zone_map.params),
                             "value": [json.dumps(v, default=str) for v in zone_map.params.values()]})
        write_layer(Path(tmp), "zone_info", info)
        if zone_map.choice is not None:
            write_layer(Path(tmp), "zone_choice", zone_map.choice)
        fig = zones_figure(zone_map, blocks)
        buf = io.BytesIO()
        fig.savefig(buf, format="png", metadata={"Software": None})
        import matplotlib.pyplot as plt

        plt.close(fig)
        atomic_write_bytes(png, buf.getvalue())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path, png


def read_zones(path, *, crs=None):
    """Read the ``zones`` layer of a zones GeoPackage (into ``crs`` when given)."""
    from pathlib import Path

    import pyogrio

    from fieldplan.errors import InputError

    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such zones file; make it with 'fieldplan zones'")
    try:
        frame = pyogrio.read_dataframe(path, layer="zones")
    except Exception:
        raise InputError(f"{path}: has no 'zones' layer; make it with 'fieldplan zones'") from None
    for column in ("block", "zone", "area_ha"):
        if column not in frame.columns:
            raise InputError(f"{path}: the zones layer lacks the {column!r} column; make it with 'fieldplan zones'")
    return frame.to_crs(crs) if crs is not None else frame
