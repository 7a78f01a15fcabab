"""map.html: one self-contained, offline map of a plan, built with folium.

The map is a ``folium.Map`` (made by :func:`fieldplan.explore.plan_map`, the same
map :func:`fieldplan.explore` gives notebooks) saved as a page that inlines
Leaflet's JavaScript and CSS (read from the ``xstatic-leaflet`` package at write
time) and the plan data as JSON, so opening it makes no network request. An
OpenStreetMap layer can be switched on from the layer control when online; it is
off by default and the plan reads fully on a plain background. folium is
imported only when a map is written.

Input text (block names, varieties, instructions) only ever reaches the page as
JSON inside ``<script type="application/json">`` or folium's ``tojson``, with
``<``, ``>`` and ``&`` escaped, and the page script builds DOM text with
``textContent``. A Content-Security-Policy allows only the page's own two
scripts (by hash). The page's JavaScript, CSS and templates are package data
in ``fieldplan/data/map/`` (listed in :mod:`fieldplan.explore`).

This module also holds the map's symbols that other writers reuse
(:data:`PALETTE`, :data:`SHAPES`, :func:`stratum_styles`, :func:`plan_caption`,
:func:`optional_layer`) and :func:`map_data`, the JSON document the page and the
web workspace render.

Call :func:`write_map` to (re)write a map, e.g. after crews and routes change::

    from fieldplan.write.html_map import write_map
    write_map(plan, plan_dir / "map.html", routes=routes_gdf)
"""

from __future__ import annotations

import hashlib
import json
import math
import re
from pathlib import Path
from typing import Any

import numpy as np
import shapely

__all__ = [
    "PALETTE",
    "ROUTE_COLOURS",
    "DOM_MARKER_LIMIT",
    "INACCESSIBLE_STYLE",
    "SHAPES",
    "plan_caption",
    "optional_layer",
    "map_data",
    "stratum_styles",
    "map_html",
    "write_map",
    "map_writer",
]

# Okabe & Ito (2008), "Color Universal Design (CUD): how to make figures and
# presentations that are friendly to colorblind people", the eight-colour set;
# black is left out because outlines and labels are drawn in near-black.
PALETTE: tuple[str, ...] = (
    "#E69F00",  # orange
    "#56B4E9",  # sky blue
    "#009E73",  # bluish green
    "#F0E442",  # yellow
    "#0072B2",  # blue
    "#D55E00",  # vermillion
    "#CC79A7",  # reddish purple
)
# Marker shapes cycle independently of colours (7 colours x 6 shapes), so two
# strata never differ by colour alone.
SHAPES: tuple[str, ...] = ("circle", "square", "triangle", "diamond", "triangle-down", "hexagon")
# Routes: darker Okabe-Ito members plus black, each crew also gets its own dash pattern.
ROUTE_COLOURS: tuple[str, ...] = ("#000000", "#0072B2", "#D55E00", "#009E73", "#CC79A7")
ROUTE_DASHES: tuple[str | None, ...] = (None, "10 6", "2 6", "14 4 2 4")

OSM_TILES = "https://tile.openstreetmap.org/{z}/{x}/{y}.png"
OSM_ATTRIBUTION = "\u00a9 OpenStreetMap contributors"
#: Points marked inaccessible: a grey circle struck through, a shape no stratum uses,
#: so they differ from planned points by shape as well as by colour.
INACCESSIBLE_STYLE = {
    "shape": "circle-x",
    "colour": "#bdbdbd",
    "legend": "Inaccessible point (marked, not sampled)",
}
COORD_DECIMALS = 7  # about 1 cm; GPX/KML carry more
#: Above this many points the map draws them on a canvas instead of one element each.
DOM_MARKER_LIMIT = 1500
MARKER_MODES = ("auto", "dom", "canvas")
POPUP_FIELDS = (
    "point_id",
    "block",
    "stratum",
    "design",
    "row",
    "plant",
    "units",
    "depth_cm",
    "status",
    "crew",
    "visit_order",
)


def plan_caption(plan: Any) -> dict[str, str]:
    """Plan id, seed and date shown on the map and the printed page.

    The id is ``meta["plan_id"]`` or ``params["plan_id"]`` when the plan has one
    (the same code as on sample labels); otherwise the first
    ten hex digits of the SHA-256 of the plan parameters and input digest, so it
    is stable for the same input and seed. The date is the day part of
    ``meta["created_utc"]`` (which honours ``SOURCE_DATE_EPOCH``).
    """
    meta = dict(getattr(plan, "meta", None) or {})
    params = dict(getattr(plan, "params", None) or {})
    plan_id = meta.get("plan_id") or params.get("plan_id")
    if not plan_id:
        basis = json.dumps(
            {"params": params, "input": meta.get("input_sha256")},
            sort_keys=True,
            default=str,
        )
        plan_id = hashlib.sha256(basis.encode("utf-8")).hexdigest()[:10]
    seed = meta.get("seed", params.get("seed"))
    created = str(meta.get("created_utc") or "")
    return {
        "plan_id": str(plan_id),
        "seed": "" if seed is None else str(seed),
        "date": created[:10],
        "design": str(params.get("design", "")),
    }


def optional_layer(plan: Any, name: str):
    """A further layer of the plan: attribute ``name`` or ``plan.layers[name]``; None if absent.

    Only layers with geometry count (a plain table of the same name is ignored).
    """
    layer = getattr(plan, name, None)
    if layer is None:
        layer = (getattr(plan, "layers", None) or {}).get(name)
    if layer is None or not hasattr(layer, "geometry") or len(layer) == 0:
        return None
    return layer


def stratum_styles(strata) -> dict[str, dict[str, str]]:
    """Colour and shape for each stratum, in natural stratum order (stable across runs)."""
    from fieldplan.sorting import natural_sorted

    names = natural_sorted({str(s) for s in strata})
    return {
        name: {"colour": PALETTE[i % len(PALETTE)], "shape": SHAPES[i % len(SHAPES)]}
        for i, name in enumerate(names)
    }


def _json_value(value: Any) -> Any:
    if value is None:
        return None
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float):
        if not math.isfinite(value):
            return None
        return value if not value.is_integer() else int(value)
    if isinstance(value, int | bool | str):
        return value
    try:
        import pandas as pd

        if pd.isna(value):
            return None
    except (TypeError, ValueError):
        pass
    return str(value)


def _ring_lists(coords: list, offsets) -> list:
    """Split a flat coordinate list at ``offsets`` (the ragged-array layout)."""
    bounds = offsets.tolist()
    return [coords[a:b] for a, b in zip(bounds[:-1], bounds[1:], strict=True)]


def _geojson_geometries(geoms: np.ndarray, decimals: int) -> list[dict]:
    """GeoJSON geometry dicts of ``geoms`` (no empties), coordinates rounded to ``decimals``.

    The same objects as ``shapely.geometry.mapping`` (lists for tuples), built per
    geometry type from shapely's ragged arrays: one ``tolist`` for all coordinates
    rather than a Python iteration over each vertex.
    """
    out: list[dict | None] = [None] * len(geoms)
    kinds = shapely.get_type_id(geoms)
    names = {
        0: "Point",
        1: "LineString",
        3: "Polygon",
        4: "MultiPoint",
        5: "MultiLineString",
        6: "MultiPolygon",
    }
    for kind, name in names.items():
        idx = np.flatnonzero(kinds == kind)
        if len(idx) == 0:
            continue
        _, coords, offsets = shapely.to_ragged_array(geoms[idx], include_z=False)
        flat = np.round(coords, decimals).tolist()
        if kind == 0:
            parts = flat
        elif kind in (1, 4):
            parts = _ring_lists(flat, offsets[0])
        elif kind in (3, 5):
            parts = _ring_lists(_ring_lists(flat, offsets[0]), offsets[1])
        else:
            parts = _ring_lists(_ring_lists(_ring_lists(flat, offsets[0]), offsets[1]), offsets[2])
        for i, part in zip(idx.tolist(), parts, strict=True):
            out[i] = {"type": name, "coordinates": part}
    for i in np.flatnonzero(kinds == 7).tolist():  # geometry collections: rare, one by one
        rounded = shapely.transform(geoms[i], lambda c: np.round(c, decimals))
        out[i] = json.loads(json.dumps(shapely.geometry.mapping(rounded)))
    return out


def _features(gdf, columns: tuple[str, ...] | list[str], *, decimals: int = COORD_DECIMALS) -> dict:
    """GeoJSON FeatureCollection in WGS84 with rounded coordinates and the chosen properties."""
    if gdf is None or len(gdf) == 0:
        return {"type": "FeatureCollection", "features": []}
    wgs = gdf.to_crs(4326) if gdf.crs is not None else gdf
    geoms = np.asarray(wgs.geometry.values, dtype=object)
    keep = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    cols = [c for c in columns if c in wgs.columns]
    records = wgs.loc[keep, cols].to_dict("records") if cols else [{}] * int(keep.sum())
    shapes = _geojson_geometries(geoms[keep], decimals)
    features = [
        {"type": "Feature", "properties": {k: _json_value(v) for k, v in rec.items()}, "geometry": geom}
        for rec, geom in zip(records, shapes, strict=True)
    ]
    return {"type": "FeatureCollection", "features": features}


def _point_columns(gdf, columns, *, decimals: int = COORD_DECIMALS) -> dict:
    """Point layer as columns (``lon``, ``lat``, ``props``): compact, built without a per-point loop."""
    if gdf is None or len(gdf) == 0:
        return {"n": 0, "lon": [], "lat": [], "props": {}}
    wgs = gdf.to_crs(4326) if gdf.crs is not None else gdf
    lonlat = np.round(shapely.get_coordinates(wgs.geometry.values), decimals)
    props = {}
    for column in columns:
        if column not in wgs.columns:
            continue
        values = wgs[column]
        if values.dtype.kind == "f":
            props[column] = [
                None if not math.isfinite(v) else (int(v) if v.is_integer() else v) for v in values.tolist()
            ]
        elif values.dtype.kind in "iub":
            props[column] = values.tolist()
        else:
            # Text columns are almost all plain str: skip the general conversion for those.
            props[column] = [v if type(v) is str else _json_value(v) for v in values.astype(object).tolist()]
    return {
        "n": int(len(lonlat)),
        "lon": lonlat[:, 0].tolist(),
        "lat": lonlat[:, 1].tolist(),
        "props": props,
    }


def _as_points(frame):
    """Recorded positions as WGS84 points: a GeoDataFrame as is, or a table with
    ``lon``/``lat`` (or ``actual_lon``/``actual_lat``, as position comparisons give)."""
    if frame is None or hasattr(frame, "geometry") or len(frame) == 0:
        return frame
    import geopandas as gpd

    for lon, lat in (("actual_lon", "actual_lat"), ("lon", "lat")):
        if lon in frame.columns and lat in frame.columns:
            rows = frame[frame[lon].notna() & frame[lat].notna()]
            return gpd.GeoDataFrame(
                rows.drop(columns=[lon, lat]),
                geometry=gpd.points_from_xy(rows[lon].astype(float), rows[lat].astype(float)),
                crs=4326,
            )
    return None


def _label_points(blocks) -> dict:
    """One label anchor per block, inside the block (point on surface), in WGS84."""
    if blocks is None or len(blocks) == 0:
        return {"type": "FeatureCollection", "features": []}
    anchors = blocks.copy()
    anchors = anchors.set_geometry(shapely.point_on_surface(np.asarray(blocks.geometry.values)))
    return _features(anchors, ["block", "variety"])


def _natural_key(text: str) -> tuple:
    # Crew "10" after crew "9", not after crew "1".
    return tuple((0, int(t), "") if t.isdigit() else (1, 0, t) for t in re.split(r"(\d+)", text))


def _jsonify_for_script(data: dict) -> str:
    text = json.dumps(data, ensure_ascii=False, sort_keys=True, separators=(",", ":"), allow_nan=False)
    # Inside <script>, '</script' or '<!--' in data would end or alter the element.
    return (
        text.replace("&", "\\u0026")
        .replace("<", "\\u003c")
        .replace(">", "\\u003e")
        .replace("\u2028", "\\u2028")
        .replace("\u2029", "\\u2029")
    )


def _split_inaccessible(points):
    """Points still to visit and points marked inaccessible (``fieldplan mark``)."""
    if points is None or "status" not in points.columns:
        return points, None
    gone = points["status"].astype(str).str.lower().eq("inaccessible").to_numpy()
    return points[~gone], points[gone]


def _split_points(points, spares):
    """Planned points and spare points; spares come from ``status == 'spare'`` if not given."""
    if points is not None and "status" in points.columns:
        is_spare = points["status"].astype(str).str.lower().eq("spare").to_numpy()
        if is_spare.any():
            extra = points[is_spare]
            points = points[~is_spare]
            if spares is None:
                spares = extra
            else:
                import pandas as pd

                spares = pd.concat([spares, extra.to_crs(spares.crs)], ignore_index=True)
    return points, spares


def map_data(plan: Any, *, routes=None, spares=None, actual=None, markers: str = "auto") -> dict:
    """The JSON document the map page renders (exposed for tests and other front ends)."""
    if markers not in MARKER_MODES:
        from fieldplan.errors import OptionError

        raise OptionError(f"markers must be one of {', '.join(MARKER_MODES)}; got {markers!r}")
    from fieldplan.safety import plan_cautions

    routes = routes if routes is not None else optional_layer(plan, "routes")
    spares = spares if spares is not None else optional_layer(plan, "spares")
    actual = actual if actual is not None else optional_layer(plan, "actual")
    actual = _as_points(actual)
    points, spares = _split_points(plan.points, spares)
    points, inaccessible = _split_inaccessible(points)
    strata = list(points["stratum"].astype(str)) if len(points) else []
    if spares is not None and len(spares) and "stratum" in spares.columns:
        strata += list(spares["stratum"].astype(str))
    styles = stratum_styles(strata)
    n_markers = len(points) + sum(0 if extra is None else len(extra) for extra in (spares, inaccessible))
    mode = markers if markers != "auto" else ("dom" if n_markers <= DOM_MARKER_LIMIT else "canvas")
    point_cols = list(POPUP_FIELDS) + [c for c in ("instructions",) if c in points.columns]
    blocks_wgs = plan.blocks.to_crs(4326) if len(plan.blocks) else plan.blocks
    if len(blocks_wgs):
        w, s, e, n = (float(v) for v in blocks_wgs.total_bounds)
    elif len(points):
        w, s, e, n = (float(v) for v in points.to_crs(4326).total_bounds)
    else:
        w, s, e, n = -0.001, -0.001, 0.001, 0.001
    # Older plan folders name the route columns points and length_m.
    route_fc = _features(routes, ["crew", "n_points", "points", "length_km", "length_m", "hours"])
    crews = sorted({str(f["properties"].get("crew", "")) for f in route_fc["features"]}, key=_natural_key)
    return {
        "caption": plan_caption(plan),
        "cautions": plan_cautions(plan),  # the plan's own list (--cautions) or the defaults
        "bounds": [[s, w], [n, e]],
        "blocks": _features(plan.blocks, ["block", "stratum", "variety", "area_ha", "n_points"]),
        "block_labels": _label_points(plan.blocks),
        "exclusions": _features(getattr(plan, "exclusions", None), ["name"]),
        "points": _point_columns(points, point_cols),
        "spares": _point_columns(spares, point_cols),
        "inaccessible": _point_columns(inaccessible, point_cols),
        "inaccessible_style": INACCESSIBLE_STYLE,
        "actual": _point_columns(actual, ["point_id", "block", "recorded_utc", "offset_m"]),
        "marker_mode": mode,
        "routes": route_fc,
        "strata": [{"name": k, **v} for k, v in styles.items()],
        "crews": [
            {
                "name": c,
                "colour": ROUTE_COLOURS[i % len(ROUTE_COLOURS)],
                "dash": ROUTE_DASHES[i % len(ROUTE_DASHES)],
            }
            for i, c in enumerate(crews)
        ],
        "osm": {"url": OSM_TILES, "attribution": OSM_ATTRIBUTION},
    }


def map_html(plan: Any, *, routes=None, spares=None, actual=None, markers: str = "auto") -> str:
    """Return the complete map page as text (see :func:`write_map`)."""
    from fieldplan.explore import plan_map, render_offline

    data = map_data(plan, routes=routes, spares=spares, actual=actual, markers=markers)
    return render_offline(plan_map(plan, data=data, offline=True))


def write_map(
    plan: Any, path: Path | str, *, routes=None, spares=None, actual=None, markers: str = "auto"
) -> Path:
    """Write the offline map of ``plan`` to ``path`` (atomically) and return the path.

    Parameters
    ----------
    plan : Plan
        A plan (``blocks``, ``points``, ``exclusions`` in a metric CRS, ``params``,
        ``meta``). Optional layers ``routes``, ``spares`` and ``actual`` (as
        attributes or in ``plan.layers``) are drawn when present and not
        overridden by the arguments below.
    path : Path or str
        Output file, normally ``<plan folder>/map.html``.
    routes : GeoDataFrame, optional
        LineStrings with a ``crew`` column; each crew gets its own toggle.
    spares : GeoDataFrame, optional
        Spare points (same columns as ``plan.points``); off by default in the map.
        Points whose ``status`` is ``"spare"`` are shown here too. Points whose
        ``status`` is ``"inaccessible"`` get their own layer (on by default) and
        the :data:`INACCESSIBLE_STYLE` symbol, a grey circle struck through.
    actual : GeoDataFrame, optional
        Recorded positions (``point_id`` column), drawn as small crosses.
    markers : {"auto", "dom", "canvas"}
        ``"dom"`` draws each point as an element (hover titles, keyboard focus);
        ``"canvas"`` draws them on one canvas, which stays fast for tens of
        thousands of points. ``"auto"`` uses elements up to
        :data:`DOM_MARKER_LIMIT` points.

    Notes
    -----
    Same plan in, same bytes out: the page carries no clock time of its own.
    """
    from fieldplan.write.safe import atomic_write_text

    path = Path(path)
    atomic_write_text(path, map_html(plan, routes=routes, spares=spares, actual=actual, markers=markers))
    return path


def map_writer(plan: Any, folder: Path) -> None:
    """Plan-folder writer (``fieldplan.store.WRITERS``): ``map.html``."""
    write_map(plan, Path(folder) / "map.html")
