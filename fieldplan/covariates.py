"""Covariates on a common grid: rasters resampled and point surveys interpolated.

A covariate is anything mapped that predicts where soil and crop differ: a yield map,
an apparent electrical conductivity (ECa) survey, a vegetation index, elevation.
Every covariate is brought onto one grid of square cells in the plan's metric CRS
(the UTM zone of the blocks), and only cells whose centre lies in a block's sampling
area (block minus headland minus exclusions) are kept.

- Rasters (GeoTIFF, any CRS and resolution) are warped with rasterio: averaged where
  the source is finer than the grid, bilinear where it is coarser; nodata cells are
  left out, never read as values.
- Point surveys (CSV with x/y or lon/lat columns, or GeoJSON points) are interpolated by
  ordinary kriging with a variogram fitted to the survey (method of moments, Matheron
  1962; spherical or exponential model by weighted least squares). When no model can be
  fitted (too few points, no spatial structure, a failed fit) inverse distance weighting
  (power 2) is used instead. The method used is recorded in :attr:`Covariates.methods`.

The kriging and variogram functions are pure numpy/scipy and are checked against
scikit-gstat in ``tests/test_covariates.py``.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from pyproj import CRS

from fieldplan.errors import InputError, OptionError

__all__ = [
    "Grid",
    "Covariates",
    "Variogram",
    "make_grid",
    "read_raster",
    "read_points",
    "empirical_variogram",
    "fit_variogram",
    "ordinary_kriging",
    "inverse_distance",
    "interpolate",
    "load_covariates",
]

MODELS = ("spherical", "exponential", "gaussian")
_MIN_KRIGING_POINTS = 30


@dataclass(frozen=True)
class Grid:
    """Square cells in a metric CRS over the blocks' sampling areas.

    Attributes
    ----------
    transform : affine.Affine
        North-up transform of the grid (rasterio convention).
    width, height : int
        Columns and rows.
    crs : pyproj.CRS
        The plan's metric CRS.
    cell : float
        Cell side in metres.
    block_index : numpy.ndarray
        ``(height, width)`` int32: index into ``blocks`` of the block whose sampling area
        holds the cell centre, -1 outside every sampling area.
    blocks : tuple of str
        Block names, in the order of ``block_index``.
    """

    transform: object
    width: int
    height: int
    crs: CRS
    cell: float
    block_index: np.ndarray
    blocks: tuple[str, ...]

    @property
    def mask(self) -> np.ndarray:
        """Cells inside a sampling area."""
        return self.block_index >= 0

    def centres(self, rows: np.ndarray, cols: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Metric x, y of the centres of cells ``(rows, cols)``."""
        t = self.transform
        x = t.c + (np.asarray(cols) + 0.5) * t.a
        y = t.f + (np.asarray(rows) + 0.5) * t.e
        return x, y

    @property
    def cell_ha(self) -> float:
        """Area of one cell in hectares."""
        return self.cell * self.cell / 10_000.0


@dataclass
class Covariates:
    """Covariate layers on one :class:`Grid`.

    Attributes
    ----------
    grid : Grid
    names : list of str
        One name per layer (file stem, or ``stem:column`` for surveys).
    values : numpy.ndarray
        ``(k, height, width)`` float64; NaN outside the sampling areas and where a layer has
        no data.
    methods : dict
        Name -> how the layer reached the grid (e.g. ``"raster, average"``,
        ``"ordinary kriging, spherical (range 84 m, sill 1.2, nugget 0.1)"``,
        ``"inverse distance (power 2): ..."``).
    notes : list of str
        Warnings for the user (cells without data, and so on).
    """

    grid: Grid
    names: list[str]
    values: np.ndarray
    methods: dict[str, str] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    def cells(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Row and column of every cell inside a sampling area with every layer present, and the table.

        Returns
        -------
        rows, cols : numpy.ndarray
            Cell indices (row-major order).
        table : numpy.ndarray
            ``(n, k)`` covariate values of those cells.
        """
        ok = self.grid.mask & np.isfinite(self.values).all(axis=0)
        rows, cols = np.nonzero(ok)
        return rows, cols, self.values[:, rows, cols].T.copy()


# --------------------------------------------------------------------------- grid


def make_grid(blocks, areas: np.ndarray, *, cell: float) -> Grid:
    """Lay a grid of ``cell``-metre squares over the sampling areas.

    Parameters
    ----------
    blocks : geopandas.GeoDataFrame
        Blocks in a metric CRS with a ``block`` column.
    areas : numpy.ndarray
        Sampling area of each block (block minus headland and exclusions), aligned with
        ``blocks`` (see :func:`fieldplan.plan.sample_areas`).
    cell : float
        Cell side in metres.
    """
    import shapely
    from rasterio.features import rasterize
    from rasterio.transform import from_origin

    if not (cell > 0 and math.isfinite(cell)):
        raise OptionError(f"--cell must be a positive number of metres, got {cell}")
    geoms = np.asarray(areas, dtype=object)
    keep = ~(shapely.is_empty(geoms) | shapely.is_missing(geoms))
    if not keep.any():
        raise InputError("no block has a sampling area left after headland and exclusions")
    minx, miny, maxx, maxy = shapely.total_bounds(geoms[keep])
    # Snap to multiples of the cell so the same blocks always give the same cells.
    x0 = math.floor(minx / cell) * cell
    y1 = math.ceil(maxy / cell) * cell
    width = max(1, math.ceil((maxx - x0) / cell))
    height = max(1, math.ceil((y1 - miny) / cell))
    if width * height > 60_000_000:
        raise OptionError(
            f"a {cell:g} m grid over these blocks has {width * height:,} cells; choose a coarser --cell"
        )
    transform = from_origin(x0, y1, cell, cell)
    shapes = [(g, i) for i, g in enumerate(geoms) if keep[i]]
    # rasterize burns a cell when its centre is inside the shape (all_touched=False).
    index = rasterize(
        shapes, out_shape=(height, width), transform=transform, fill=-1, dtype="int32", all_touched=False
    )
    return Grid(transform, width, height, CRS.from_user_input(blocks.crs), float(cell), index,
                tuple(str(b) for b in blocks["block"].to_numpy()))


# --------------------------------------------------------------------------- rasters


def read_raster(path: str | Path, grid: Grid, *, band: int = 1, resampling: str = "auto") -> tuple[np.ndarray, str]:
    """Warp one band of a raster onto ``grid``; nodata becomes NaN.

    Parameters
    ----------
    path : str or Path
        GeoTIFF (or any raster GDAL reads) with a CRS.
    grid : Grid
    band : int
        1-based band number.
    resampling : str
        ``auto`` (average where the source is finer than the grid, bilinear otherwise),
        ``average``, ``bilinear`` or ``nearest`` (for classes).

    Returns
    -------
    values : numpy.ndarray
        ``(height, width)`` float64, NaN outside the sampling areas and where the source has
        no data.
    method : str
    """
    import rasterio
    from rasterio.enums import Resampling
    from rasterio.errors import WindowError
    from rasterio.warp import reproject, transform_bounds
    from rasterio.windows import Window, from_bounds

    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such raster file; check the path")
    choices = ("auto", "average", "bilinear", "nearest")
    if resampling not in choices:
        raise OptionError(f"resampling must be one of {', '.join(choices)}, got {resampling!r}")
    try:
        src = rasterio.open(path)
    except Exception as err:  # rasterio raises RasterioIOError and others
        raise InputError(f"{path}: cannot read as a raster ({str(err).splitlines()[0]}); export it as GeoTIFF") from None
    with src:
        if src.crs is None:
            raise InputError(f"{path}: the raster has no CRS; save it as a GeoTIFF with its CRS")
        if not 1 <= band <= src.count:
            raise InputError(f"{path}: has {src.count} band(s), no band {band}; choose another band")
        t = grid.transform
        bounds = (t.c, t.f + grid.height * t.e, t.c + grid.width * t.a, t.f)
        left, bottom, right, top = transform_bounds(grid.crs.to_wkt(), src.crs, *bounds, densify_pts=21)
        window = from_bounds(left, bottom, right, top, transform=src.transform)
        # Two source pixels of margin so bilinear reads have neighbours at the edge.
        window = window.round_offsets(op="floor").round_lengths(op="ceil")
        window = Window(window.col_off - 2, window.row_off - 2, window.width + 4, window.height + 4)
        try:
            window = window.intersection(Window(0, 0, src.width, src.height))
        except WindowError:
            raise InputError(f"{path}: the raster does not overlap the blocks; check its CRS and extent") from None
        data = src.read(band, window=window, masked=True).astype("float64")
        source = np.where(np.ma.getmaskarray(data), np.nan, np.ma.getdata(data))
        source[~np.isfinite(source)] = np.nan
        src_transform = src.window_transform(window)
        src_crs = src.crs
        pixel = math.sqrt(abs(src.transform.a * src.transform.e))
    if resampling == "auto":
        fine = pixel * _metres_per_unit(src_crs, grid) < grid.cell
        resampling = "average" if fine else "bilinear"
    out = np.full((grid.height, grid.width), np.nan, dtype="float64")
    reproject(
        source,
        out,
        src_transform=src_transform,
        src_crs=src_crs,
        src_nodata=np.nan,
        dst_transform=grid.transform,
        dst_crs=grid.crs.to_wkt(),
        dst_nodata=np.nan,
        resampling=getattr(Resampling, resampling),
    )
    out[~grid.mask] = np.nan
    return out, f"raster, {resampling}"


def _metres_per_unit(src_crs, grid: Grid) -> float:
    crs = CRS.from_user_input(src_crs)
    if crs.is_geographic:
        return 111_320.0  # metres per degree of latitude, enough to compare resolutions
    try:
        return float(crs.axis_info[0].unit_conversion_factor)
    except (IndexError, AttributeError):
        return 1.0


# --------------------------------------------------------------------------- point surveys


def read_points(
    path: str | Path, *, crs: CRS, value: str | None = None, points_crs: CRS | str | None = None
) -> tuple[np.ndarray, np.ndarray, str]:
    """Read a point survey (CSV or any vector file of points) into ``crs``.

    CSV files need ``x``/``y`` (with ``points_crs``, or a projected CRS guessed as ``crs``)
    or ``lon``/``lat`` (also ``longitude``/``latitude``) columns. The value column is
    ``value`` if given, else the only numeric column left.

    Returns
    -------
    xy : numpy.ndarray
        ``(n, 2)`` metric coordinates.
    z : numpy.ndarray
        ``(n,)`` values; rows with a missing value are dropped.
    column : str
        The value column used.
    """
    import geopandas as gpd

    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such survey file; check the path")
    if path.suffix.lower() in (".csv", ".txt"):
        try:
            frame = pd.read_csv(path)
        except Exception as err:
            raise InputError(f"{path}: cannot read as CSV ({err}); save it as comma-separated text") from None
        lower = {c.lower().strip(): c for c in frame.columns}
        pair = next(
            (
                (lower[a], lower[b], src)
                for a, b, src in (
                    ("lon", "lat", "EPSG:4326"),
                    ("longitude", "latitude", "EPSG:4326"),
                    ("x", "y", points_crs if points_crs is not None else crs),
                    ("easting", "northing", points_crs if points_crs is not None else crs),
                )
                if a in lower and b in lower
            ),
            None,
        )
        if pair is None:
            raise InputError(f"{path}: needs lon/lat or x/y columns for the survey positions; rename them")
        xcol, ycol, src_crs = pair
        xs = pd.to_numeric(frame[xcol], errors="coerce").to_numpy(dtype="float64")
        ys = pd.to_numeric(frame[ycol], errors="coerce").to_numpy(dtype="float64")
        bad = ~(np.isfinite(xs) & np.isfinite(ys))
        if bad.any():
            raise InputError(f"{path}: row {int(np.argmax(bad)) + 2} has no readable position; fix or delete it")
        geo = gpd.GeoSeries(gpd.points_from_xy(xs, ys), crs=src_crs).to_crs(crs)
        table = frame.drop(columns=[xcol, ycol])
    else:
        from fieldplan.read import read_frame

        frame = read_frame(path)
        if frame.crs is None:
            frame = frame.set_crs("EPSG:4326")
        if not frame.geometry.geom_type.isin(["Point"]).all():
            raise InputError(f"{path}: a survey must hold points only; convert lines or polygons to points")
        geo = frame.geometry.to_crs(crs)
        table = pd.DataFrame(frame.drop(columns="geometry"))
    column = _value_column(table, value, path)
    z = pd.to_numeric(table[column], errors="coerce").to_numpy(dtype="float64")
    xy = np.column_stack([geo.x.to_numpy(), geo.y.to_numpy()])
    ok = np.isfinite(z)
    if ok.sum() < 3:
        raise InputError(f"{path}: column {column!r} has fewer than 3 numeric values; check the survey")
    return xy[ok], z[ok], column


def _value_column(table: pd.DataFrame, value: str | None, path: Path) -> str:
    if value is not None:
        match = {c.lower(): c for c in table.columns}.get(value.lower())
        if match is None:
            raise InputError(f"{path}: no column {value!r}; columns are {', '.join(map(str, table.columns))}")
        return match
    numeric = [c for c in table.columns if pd.to_numeric(table[c], errors="coerce").notna().mean() > 0.9]
    if len(numeric) != 1:
        raise InputError(
            f"{path}: cannot tell which column holds the survey values ({', '.join(map(str, numeric)) or 'none'}); "
            f"name it as {path.name}:COLUMN"
        )
    return numeric[0]


# --------------------------------------------------------------------------- variogram and kriging


def _model_function(model: str):
    # Parameterised as scikit-gstat does: r is the effective range, c0 the partial sill, b the nugget.
    if model == "spherical":
        def f(h, r, c0, b):
            u = np.minimum(h / r, 1.0)
            return b + c0 * (1.5 * u - 0.5 * u**3)
    elif model == "exponential":
        def f(h, r, c0, b):
            return b + c0 * (1.0 - np.exp(-3.0 * h / r))
    elif model == "gaussian":
        def f(h, r, c0, b):
            return b + c0 * (1.0 - np.exp(-((2.0 * h / r) ** 2)))
    else:
        raise OptionError(f"variogram model must be one of {', '.join(MODELS)}, got {model!r}")
    return f


@dataclass(frozen=True)
class Variogram:
    """A fitted variogram model: ``gamma(h) = nugget + psill * f(h / range)`` for h > 0, 0 at h = 0."""

    model: str
    range: float
    psill: float
    nugget: float

    def __call__(self, h: np.ndarray) -> np.ndarray:
        h = np.asarray(h, dtype="float64")
        g = _model_function(self.model)(h, self.range, self.psill, self.nugget)
        return np.where(h > 0, g, 0.0)

    def describe(self) -> str:
        return f"{self.model} (range {self.range:.4g} m, sill {self.psill + self.nugget:.4g}, nugget {self.nugget:.4g})"


def empirical_variogram(
    xy: np.ndarray, z: np.ndarray, *, n_lags: int = 10, maxlag: float | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Matheron's method-of-moments semivariance in ``n_lags`` even lag classes.

    Lag class i holds pairs with ``edges[i-1] <= h < edges[i]`` (``edges`` are the upper
    edges of ``n_lags`` equal classes on ``[0, maxlag]``; pairs at or beyond ``maxlag``
    are left out).

    Returns
    -------
    edges, mean_h, gamma, counts : numpy.ndarray
        Upper class edges, mean pair distance, semivariance and pair count per class.
    """
    from scipy.spatial.distance import pdist

    d = pdist(np.asarray(xy, dtype="float64"))
    diff = pdist(np.asarray(z, dtype="float64")[:, None], metric="cityblock")
    if maxlag is None:
        maxlag = float(d.max())
    edges = np.linspace(0.0, maxlag, n_lags + 1)[1:]
    group = np.digitize(d, edges)
    keep = group < n_lags
    group, d, diff = group[keep], d[keep], diff[keep]
    counts = np.bincount(group, minlength=n_lags).astype("float64")
    with np.errstate(invalid="ignore", divide="ignore"):
        gamma = 0.5 * np.bincount(group, weights=diff**2, minlength=n_lags) / counts
        mean_h = np.bincount(group, weights=d, minlength=n_lags) / counts
    return edges, mean_h, gamma, counts


def fit_variogram(
    xy: np.ndarray,
    z: np.ndarray,
    *,
    models: tuple[str, ...] = ("spherical", "exponential"),
    n_lags: int = 12,
    maxlag: float | None = None,
) -> Variogram | None:
    """Fit a variogram model to a survey, or return None when none fits.

    Lags run to half the largest distance (a usual rule, Journel & Huijbregts 1978) unless
    ``maxlag`` is given. The Gaussian model is left out by default: without a nugget its
    kriging systems are ill-conditioned (Wackernagel 2003, ch. 8). Each model is fitted by least squares weighted by pair count
    (``scipy.optimize.curve_fit``, bounded: range within the lags, sill and nugget within
    twice the largest semivariance) and the one with the smallest weighted residual is
    kept. None is returned with fewer than 30 points, fewer than 4 lag classes holding
    pairs, or when the nugget is 95 % or more of the sill (no spatial structure).
    """
    from scipy.optimize import curve_fit

    xy = np.asarray(xy, dtype="float64")
    z = np.asarray(z, dtype="float64")
    if len(z) < _MIN_KRIGING_POINTS or np.ptp(z) == 0:
        return None
    if maxlag is None:
        span = np.ptp(xy, axis=0)
        maxlag = 0.5 * float(np.hypot(*span))
    _, h, gamma, counts = empirical_variogram(xy, z, n_lags=n_lags, maxlag=maxlag)
    ok = counts >= 10
    if ok.sum() < 4:
        return None
    h, gamma, counts = h[ok], gamma[ok], counts[ok]
    top = float(gamma.max())
    best: tuple[float, Variogram] | None = None
    for model in models:
        f = _model_function(model)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                p, _ = curve_fit(
                    f,
                    h,
                    gamma,
                    p0=[0.5 * maxlag, 0.8 * top, 0.1 * top],
                    bounds=([1e-9 * maxlag, 0.0, 0.0], [maxlag, 2.0 * top, 2.0 * top]),
                    sigma=1.0 / np.sqrt(counts),
                    method="trf",
                )
        except (RuntimeError, ValueError):
            continue
        resid = float(np.sum(counts * (f(h, *p) - gamma) ** 2))
        if best is None or resid < best[0]:
            best = (resid, Variogram(model, float(p[0]), float(p[1]), float(p[2])))
    if best is None:
        return None
    v = best[1]
    # A pure nugget effect means no spatial structure to krige with. A range at the upper
    # bound (a trend, or structure wider than the lags) is kept: kriging uses the 16 nearest
    # points, where the fitted curve describes the data.
    if v.psill <= 0.05 * (v.psill + v.nugget):
        return None
    return v


def _neighbours(xy: np.ndarray, targets: np.ndarray, k: int, radius: float | None):
    from scipy.spatial import cKDTree

    k = min(k, len(xy))
    d, idx = cKDTree(xy).query(targets, k=k, distance_upper_bound=np.inf if radius is None else radius)
    if k == 1:
        d, idx = d[:, None], idx[:, None]
    return d, idx


def ordinary_kriging(
    xy: np.ndarray,
    z: np.ndarray,
    targets: np.ndarray,
    variogram: Variogram,
    *,
    max_points: int = 16,
    min_points: int = 3,
    radius: float | None = None,
    chunk: int = 4096,
) -> tuple[np.ndarray, np.ndarray]:
    """Ordinary kriging of point values at ``targets`` with a local neighbourhood.

    Each target uses its ``max_points`` nearest observations (only those within
    ``radius`` when given). The kriging system with a Lagrange multiplier for the
    unbiasedness constraint is solved for every target in batches (Webster & Oliver 2007,
    ch. 8)::

        [Gamma 1; 1' 0] [w; mu] = [gamma_0; 1],   z* = w'z,   s2 = w'gamma_0 + mu

    Returns
    -------
    estimate, variance : numpy.ndarray
        NaN where fewer than ``min_points`` observations are in reach.
    """
    xy = np.asarray(xy, dtype="float64")
    z = np.asarray(z, dtype="float64")
    targets = np.asarray(targets, dtype="float64").reshape(-1, 2)
    d0, idx = _neighbours(xy, targets, max_points, radius)
    n, k = idx.shape
    est = np.full(n, np.nan)
    var = np.full(n, np.nan)
    valid = np.isfinite(d0)
    for start in range(0, n, chunk):
        sl = slice(start, start + chunk)
        ok = valid[sl]
        ii = np.where(ok, idx[sl], 0)
        pts = xy[ii]  # (m, k, 2)
        dd = np.sqrt(((pts[:, :, None, :] - pts[:, None, :, :]) ** 2).sum(-1))
        m = len(ii)
        a = np.zeros((m, k + 1, k + 1))
        a[:, :k, :k] = variogram(dd)
        # Absent neighbours get an identity row and column, so their weight solves to 0.
        pair_ok = ok[:, :, None] & ok[:, None, :]
        a[:, :k, :k] = np.where(pair_ok, a[:, :k, :k], 0.0)
        eye = np.broadcast_to(np.eye(k, dtype=bool), (m, k, k))
        a[:, :k, :k][eye & ~pair_ok] = 1.0
        a[:, :k, k] = ok
        a[:, k, :k] = ok
        b = np.zeros((m, k + 1))
        b[:, :k] = np.where(ok, variogram(np.where(ok, d0[sl], 0.0)), 0.0)
        b[:, k] = 1.0
        enough = ok.sum(axis=1) >= min_points
        if not enough.any():
            continue
        sol = np.linalg.solve(a[enough], b[enough][:, :, None])[:, :, 0]
        w = sol[:, :k]
        rows = np.arange(start, min(start + chunk, n))[enough]
        est[rows] = (w * np.where(ok[enough], z[ii[enough]], 0.0)).sum(axis=1)
        var[rows] = (w * b[enough][:, :k]).sum(axis=1) + sol[:, k]
    return est, var


def inverse_distance(
    xy: np.ndarray, z: np.ndarray, targets: np.ndarray, *, power: float = 2.0, max_points: int = 16
) -> np.ndarray:
    """Inverse distance weighted mean of the ``max_points`` nearest values (exact at data points)."""
    z = np.asarray(z, dtype="float64")
    d, idx = _neighbours(np.asarray(xy, dtype="float64"), np.asarray(targets, dtype="float64"), max_points, None)
    exact = d[:, 0] == 0
    with np.errstate(divide="ignore"):
        w = 1.0 / d**power
    w[exact] = 0.0
    w[exact, 0] = 1.0
    return (w * z[idx]).sum(axis=1) / w.sum(axis=1)


def interpolate(
    xy: np.ndarray, z: np.ndarray, targets: np.ndarray, *, rng: np.random.Generator, max_fit_points: int = 2000
) -> tuple[np.ndarray, str]:
    """Krige ``z`` at ``targets`` with a fitted variogram, or inverse distance when none fits.

    The variogram is fitted on at most ``max_fit_points`` survey points drawn with ``rng``
    (pairs grow with the square of the points); kriging uses every point.

    Returns
    -------
    values : numpy.ndarray
    method : str
        Which method was used and, for kriging, the fitted model.
    """
    fit_xy, fit_z = xy, z
    if len(z) > max_fit_points:
        pick = np.sort(rng.choice(len(z), size=max_fit_points, replace=False))
        fit_xy, fit_z = xy[pick], z[pick]
    v = fit_variogram(fit_xy, fit_z)
    if v is not None:
        est, _ = ordinary_kriging(xy, z, targets, v)
        if np.isfinite(est).all():
            return est, f"ordinary kriging, {v.describe()}"
    reason = "fewer than 30 survey points" if len(z) < _MIN_KRIGING_POINTS else "no variogram model could be fitted"
    return inverse_distance(xy, z, targets), f"inverse distance (power 2, 16 nearest): {reason}"


# --------------------------------------------------------------------------- several files


_RASTER_SUFFIXES = (".tif", ".tiff", ".vrt", ".img")


def _split_spec(spec: str) -> tuple[Path, str | None]:
    """``path`` or ``path:column`` (a survey's value column)."""
    if Path(spec).exists() or ":" not in spec:
        return Path(spec), None
    head, _, column = spec.rpartition(":")
    return Path(head), column or None


def load_covariates(
    specs: list[str],
    blocks,
    areas: np.ndarray,
    *,
    cell: float = 5.0,
    seed: int = 0,
    points_crs: str | None = None,
) -> Covariates:
    """Bring every covariate file onto one grid over the blocks' sampling areas.

    Parameters
    ----------
    specs : list of str
        Raster paths (GeoTIFF) and point surveys (``survey.csv`` or ``survey.csv:COLUMN``).
    blocks : geopandas.GeoDataFrame
        Blocks in the plan's metric CRS.
    areas : numpy.ndarray
        Sampling area per block (:func:`fieldplan.plan.sample_areas`).
    cell : float
        Grid cell side in metres.
    seed : int
        Seed for the variogram's subsample of large surveys.
    points_crs : str, optional
        CRS of x/y columns in CSV surveys (default: the plan's CRS).
    """
    from fieldplan.rng import stream

    if not specs:
        raise OptionError("give at least one covariate file with --covariates")
    grid = make_grid(blocks, areas, cell=cell)
    rows, cols = np.nonzero(grid.mask)
    names: list[str] = []
    layers: list[np.ndarray] = []
    methods: dict[str, str] = {}
    notes: list[str] = []
    for spec in specs:
        path, column = _split_spec(spec)
        if path.suffix.lower() in _RASTER_SUFFIXES:
            values, method = read_raster(path, grid)
            name = path.stem
        else:
            xy, z, column = read_points(path, crs=grid.crs, value=column, points_crs=points_crs)
            name = f"{path.stem}:{column}"
            x, y = grid.centres(rows, cols)
            est, method = interpolate(xy, z, np.column_stack([x, y]), rng=stream(seed, "variogram", name))
            values = np.full((grid.height, grid.width), np.nan)
            values[rows, cols] = est
        base, n = name, 2
        while name in names:
            name, n = f"{base}_{n}", n + 1
        missing = int(grid.mask.sum() - np.isfinite(values[grid.mask]).sum())
        if missing == grid.mask.sum():
            raise InputError(f"{path}: has no data over the blocks; check its CRS and extent")
        if missing:
            notes.append(f"{name}: {missing:,} of {int(grid.mask.sum()):,} cells have no data and are left out")
        names.append(name)
        layers.append(values)
        methods[name] = method
    return Covariates(grid, names, np.stack(layers), methods, notes)
