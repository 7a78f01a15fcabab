"""Coverage checks of a plan: is every block sampled, evenly, and are points where they belong?

The largest gap of a block is the largest distance from any spot of the block
(minus exclusions) to its nearest sample point of that block. The distance to
the nearest of a set of sites has no local maximum inside a Voronoi cell or on
the inside of a Voronoi edge, so over a polygon it peaks either at a Voronoi
vertex inside the polygon or on the polygon's boundary. :func:`max_gap`
therefore evaluates the Voronoi vertices exactly and the boundary on a fine
densification (error at most half the step), instead of scanning a lattice.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import shapely

from fieldplan.words import plural

__all__ = [
    "CoverageReport",
    "max_gap",
    "points_to_check",
    "coverage",
    "write_coverage_csv",
    "MOVED_TOLERANCE_M",
]

#: Points further apart than this between plan.gpkg and points.geojson count as moved.
MOVED_TOLERANCE_M = 0.01
_BOUNDARY_STEPS_PER_SPACING = 200
_MAX_BOUNDARY_POINTS = 200_000


@dataclass
class CoverageReport:
    """Result of :func:`coverage`.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per block: ``block, stratum, area_ha, sampled_area_ha, n_points,
        expected_points, off_by, max_gap_m, outside, in_exclusion, status, notes``.
    problems : pandas.DataFrame
        One row per misplaced point: ``point_id, block, problem``.
    failures : list of str
        One line per broken rule; empty when the plan passes.
    source : str
        Which points were checked (``plan.gpkg`` or ``points.geojson``) and why.
    """

    table: pd.DataFrame
    problems: pd.DataFrame
    failures: list[str] = field(default_factory=list)
    source: str = "plan"

    @property
    def ok(self) -> bool:
        return not self.failures


def max_gap(area, xy: np.ndarray, *, boundary_step: float | None = None) -> float:
    """Largest distance (m) from any spot of ``area`` to the nearest point of ``xy``.

    Parameters
    ----------
    area : shapely Polygon or MultiPolygon
        The region in a metric CRS.
    xy : (n, 2) array
        Sample point coordinates in the same CRS.
    boundary_step : float, optional
        Densification step along the boundary; default the typical point spacing
        ``sqrt(area / n)`` divided by 200 (so the boundary error is under 0.25 %).

    Returns
    -------
    float
        ``nan`` for an empty area, ``inf`` when there are no points.
    """
    from scipy.spatial import QhullError, Voronoi, cKDTree

    if area is None or shapely.is_empty(area) or shapely.area(area) <= 0:
        return math.nan
    xy = np.unique(np.asarray(xy, dtype=float).reshape(-1, 2), axis=0)
    if len(xy) == 0:
        return math.inf
    boundary = shapely.boundary(area)
    if boundary_step is None:
        spacing = math.sqrt(shapely.area(area) / len(xy))
        boundary_step = spacing / _BOUNDARY_STEPS_PER_SPACING
    boundary_step = max(boundary_step, shapely.length(boundary) / _MAX_BOUNDARY_POINTS, 1e-6)
    candidates = [shapely.get_coordinates(shapely.segmentize(boundary, boundary_step))]
    if len(xy) >= 3:
        try:
            vertices = Voronoi(xy).vertices
        except QhullError:  # all points on one line: no Voronoi vertices exist
            vertices = np.empty((0, 2))
        if len(vertices):
            inside = shapely.intersects_xy(area, vertices[:, 0], vertices[:, 1])
            candidates.append(vertices[inside])
    spots = np.concatenate(candidates)
    distance, _ = cKDTree(xy).query(spots)
    return float(distance.max())


def points_to_check(plan_dir: Path | str, plan: Any):
    """Points to check: ``points.geojson`` when it differs from ``plan.gpkg`` (hand edits).

    Returns
    -------
    (GeoDataFrame, str)
        The points in the plan's CRS, and a sentence saying which file was checked and why.
    """
    import geopandas as gpd

    from fieldplan.errors import InputError

    path = Path(plan_dir) / "points.geojson"
    if not path.is_file():
        return plan.points, "checked plan.gpkg (no points.geojson in the folder)"
    try:
        edited = gpd.read_file(path, engine="pyogrio")
    except Exception as err:
        raise InputError(
            f"{path}: cannot read it ({err}); fix the file or delete it to check plan.gpkg"
        ) from None
    for column in ("point_id", "block"):
        if column not in edited.columns:
            raise InputError(f"{path}: has no '{column}' property; restore it for every point")
    if edited.crs is None:
        edited = edited.set_crs(4326)
    edited = edited.to_crs(plan.crs)
    planned = plan.points.set_index("point_id").geometry
    current = edited.set_index("point_id").geometry
    common = planned.index.intersection(current.index)
    moved = int(
        (shapely.distance(planned.loc[common].values, current.loc[common].values) > MOVED_TOLERANCE_M).sum()
    )
    added = int((~current.index.isin(planned.index)).sum())
    removed = int((~planned.index.isin(current.index)).sum())
    if moved == 0 and added == 0 and removed == 0:
        return plan.points, "checked plan.gpkg (points.geojson holds the same points)"
    gpkg = Path(plan_dir) / "plan.gpkg"
    newer = " and is newer" if gpkg.is_file() and path.stat().st_mtime > gpkg.stat().st_mtime else ""
    return edited, (
        f"checked points.geojson: it differs from plan.gpkg{newer} "
        f"({moved} moved, {added} added, {removed} removed)"
    )


def _sampled_areas(plan: Any) -> np.ndarray:
    geoms = np.asarray(plan.blocks.geometry.values, dtype=object)
    exclusions = getattr(plan, "exclusions", None)
    if exclusions is not None and len(exclusions):
        union = shapely.union_all(exclusions.to_crs(plan.crs).geometry.values)
        geoms = shapely.difference(geoms, union)
    return np.asarray(geoms, dtype=object)


def coverage(
    plan: Any,
    *,
    points=None,
    source: str = "plan",
    min_per_block: int = 1,
    max_gap_m: float | None = None,
    proportional: bool = False,
) -> CoverageReport:
    """Check a plan's coverage block by block.

    Parameters
    ----------
    plan : Plan
        Blocks, exclusions and (unless ``points`` is given) points, in a metric CRS.
    points : GeoDataFrame, optional
        Points to check instead of ``plan.points`` (``point_id``, ``block``, geometry).
    source : str
        Sentence naming the points' origin, carried into the report.
    min_per_block : int
        Rule: every block holds at least this many points (1: every block sampled).
    max_gap_m : float, optional
        Rule: no spot of a block (minus exclusions) is further than this from a point.
    proportional : bool
        Make "off the area-proportional count by more than one point" a failure
        rather than a note (stratified and minimum-per-block designs depart from
        it on purpose).
    """
    from fieldplan.errors import OptionError

    if min_per_block < 0:
        raise OptionError(f"--min-per-block must be 0 or more, got {min_per_block}")
    if max_gap_m is not None and not max_gap_m > 0:
        raise OptionError(f"--max-gap must be positive metres, got {max_gap_m}")
    points = plan.points if points is None else points
    points = points.to_crs(plan.crs) if points.crs is not None else points
    if "status" in points.columns:
        # Unused spares and points marked inaccessible are not sampled; they do not cover a block.
        status = points["status"].astype(str).str.lower()
        spare = status.eq("spare").to_numpy()
        gone = status.eq("inaccessible").to_numpy()
        if spare.any() or gone.any():
            points = points[~(spare | gone)]
            source = f"{source}; {plural(int(spare.sum()), 'spare point')} left out" + (
                f", {int(gone.sum())} inaccessible" if gone.any() else ""
            )
    blocks = plan.blocks
    names = blocks["block"].astype(str).to_numpy()
    geoms = np.asarray(blocks.geometry.values, dtype=object)
    areas = _sampled_areas(plan)

    pid = points["point_id"].astype(str).to_numpy()
    pblock = points["block"].astype(str).to_numpy()
    xy = shapely.get_coordinates(points.geometry.values) if len(points) else np.empty((0, 2))
    index = pd.Series(np.arange(len(names)), index=names)
    which = pd.Series(pblock).map(index).fillna(-1).to_numpy(dtype=int)
    known = which >= 0
    inside = np.zeros(len(points), dtype=bool)
    if known.any():
        inside[known] = shapely.intersects_xy(geoms[which[known]], xy[known, 0], xy[known, 1])
    in_exclusion = np.zeros(len(points), dtype=bool)
    exclusions = getattr(plan, "exclusions", None)
    if exclusions is not None and len(exclusions) and len(points):
        union = shapely.union_all(exclusions.to_crs(plan.crs).geometry.values)
        in_exclusion = shapely.contains_xy(union, xy[:, 0], xy[:, 1])
    duplicated = pd.Series(pid).duplicated(keep=False).to_numpy()

    problems = pd.concat(
        [
            pd.DataFrame({"point_id": pid[mask], "block": pblock[mask], "problem": text})
            for mask, text in (
                (~known, "names a block that is not in the plan"),
                (known & ~inside, "lies outside its block"),
                (in_exclusion, "lies in an exclusion"),
                (duplicated, "shares its point_id with another point"),
            )
        ],
        ignore_index=True,
    )

    if "sampled_area_ha" in blocks.columns:
        share_area = blocks["sampled_area_ha"].to_numpy(dtype=float)
    else:
        share_area = shapely.area(areas) / 10_000.0
    counts = np.bincount(which[known], minlength=len(blocks))
    total_area = share_area.sum()
    expected = counts.sum() * share_area / total_area if total_area > 0 else np.zeros(len(blocks))
    gaps = np.array([max_gap(areas[i], xy[which == i]) for i in range(len(blocks))], dtype=float)

    failures: list[str] = []
    rows = []
    strata = blocks["stratum"].astype(str).to_numpy() if "stratum" in blocks else names
    for i, name in enumerate(names):
        notes, failed = [], []
        n = int(counts[i])
        if n == 0:
            failed.append("not sampled")
        elif n < min_per_block:
            failed.append(f"{n} < --min-per-block {min_per_block}")
        off = n - expected[i]
        # The note quotes the share exactly as the table holds it (two decimals), so the
        # two never disagree in the last digit.
        share = round(float(expected[i]), 2)
        if abs(off) > 1.0:
            text = f"{n} vs {share:.2f} by area share"
            (failed if proportional else notes).append(text)
        gap = gaps[i]
        if max_gap_m is not None and (not math.isfinite(gap) or gap > max_gap_m):
            if math.isfinite(gap) or n > 0:
                failed.append(f"gap {gap:.1f} m > --max-gap {max_gap_m:g} m")
        n_out = int((~inside & (which == i)).sum())
        n_excl = int((in_exclusion & (which == i)).sum())
        if n_out:
            failed.append(f"{n_out} outside the block")
        if n_excl:
            failed.append(f"{n_excl} in an exclusion")
        failures.extend(f"block {name}: {f}" for f in failed)
        rows.append(
            {
                "block": name,
                "stratum": strata[i],
                "area_ha": round(float(shapely.area(geoms[i])) / 10_000.0, 4),
                "sampled_area_ha": round(float(share_area[i]), 4),
                "n_points": n,
                "expected_points": share,
                "off_by": round(float(off), 2),
                "max_gap_m": round(float(gap), 2) if math.isfinite(gap) else gap,
                "outside": n_out,
                "in_exclusion": n_excl,
                "status": "fail" if failed else "pass",
                "notes": "; ".join(failed + notes),
            }
        )
    unknown = int((~known).sum())
    if unknown:
        failures.append(f"{plural(unknown, 'point')} name{'s' if unknown == 1 else ''} a block that is not in the plan")
    n_dup = int(duplicated.sum())
    if n_dup:
        failures.append(f"{plural(n_dup, 'point')} share a point_id with another point")
    return CoverageReport(pd.DataFrame(rows), problems, failures, source)


def write_coverage_csv(report: CoverageReport, path: Path | str) -> Path:
    """Write the per-block table as CSV (spreadsheet-safe text cells), atomically."""
    from fieldplan.write.safe import atomic_write_text, neutralise_frame

    path = Path(path)
    atomic_write_text(path, neutralise_frame(report.table).to_csv(index=False, lineterminator="\n"))
    return path
