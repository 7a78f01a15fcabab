"""Frozen copy of the hand-written Leaflet map writer (before folium), kept as the baseline of
``benchmarks/bench_map.py``: not used by fieldplan itself.

Its original docstring follows: map.html: one self-contained, offline Leaflet map of a plan.

The page inlines Leaflet's JavaScript and CSS (read from the ``xstatic-leaflet``
package at write time) and the plan data as JSON, so opening it makes no network
request. An OpenStreetMap base layer can be switched on from the layer control
when online; it is off by default and the plan reads fully on a plain background.

Input text (block names, varieties, instructions) only ever reaches the page as
JSON inside ``<script type="application/json">`` with ``<``, ``>`` and ``&``
escaped, and the page script builds DOM text with ``textContent``. A
Content-Security-Policy allows only the page's own two scripts (by hash).

Call :func:`write_map` to (re)write a map, e.g. after crews and routes change::

    from fieldplan.write.html_map import write_map
    write_map(plan, plan_dir / "map.html", routes=routes_gdf)
"""

from __future__ import annotations

import base64
import hashlib
import html
import json
import math
import re
from functools import lru_cache
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


@lru_cache(maxsize=1)
def _leaflet_assets() -> tuple[str, str]:
    import xstatic.pkg.leaflet as xl

    base = Path(xl.BASE_DIR)
    js = (base / "leaflet.js").read_text(encoding="utf-8")
    css = (base / "leaflet.css").read_text(encoding="utf-8")
    # A source-map comment makes developer tools fetch a file that is not there.
    js = "\n".join(ln for ln in js.splitlines() if not ln.startswith("//# sourceMappingURL"))
    # Image URLs in the stylesheet would be requests; the layer-toggle icon becomes
    # an inline SVG and the rest are dropped (default icons are never used).
    layers_svg = (
        "<svg xmlns='http://www.w3.org/2000/svg' width='26' height='26' viewBox='0 0 26 26'>"
        "<path d='M13 4 24 10 13 16 2 10Z' fill='#555'/>"
        "<path d='M4 14 13 19 22 14 24 15.5 13 22 2 15.5Z' fill='#999'/></svg>"
    )
    uri = "data:image/svg+xml;base64," + base64.b64encode(layers_svg.encode()).decode()
    css = css.replace("url(images/layers.png)", f'url("{uri}")')
    css = css.replace("url(images/layers-2x.png)", f'url("{uri}")')
    css = css.replace("url(images/marker-icon.png)", "none")
    css = css.replace("behavior: url(#default#VML);", "")
    for text, closer in ((js, "</script"), (css, "</style")):
        if closer in text.lower():
            raise RuntimeError(f"Leaflet asset contains {closer!r}; cannot inline it safely")
    return js, css


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


def _features(gdf, columns: tuple[str, ...] | list[str], *, decimals: int = COORD_DECIMALS) -> dict:
    """GeoJSON FeatureCollection in WGS84 with rounded coordinates and the chosen properties."""
    if gdf is None or len(gdf) == 0:
        return {"type": "FeatureCollection", "features": []}
    wgs = gdf.to_crs(4326) if gdf.crs is not None else gdf
    geoms = shapely.transform(np.asarray(wgs.geometry.values, dtype=object), lambda c: np.round(c, decimals))
    cols = [c for c in columns if c in wgs.columns]
    records = wgs[cols].to_dict("records") if cols else [{}] * len(wgs)
    features = []
    for geom, rec in zip(geoms, records, strict=True):
        if geom is None or shapely.is_empty(geom):
            continue
        props = {k: _json_value(v) for k, v in rec.items()}
        features.append({"type": "Feature", "properties": props, "geometry": shapely.geometry.mapping(geom)})
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
    route_fc = _features(routes, ["crew", "points", "length_m", "hours"])
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


def _csp(scripts: list[str]) -> str:
    hashes = " ".join(
        "'sha256-" + base64.b64encode(hashlib.sha256(s.encode("utf-8")).digest()).decode() + "'"
        for s in scripts
    )
    return (
        "default-src 'none'; "
        f"script-src {hashes}; "
        "style-src 'unsafe-inline'; "
        "img-src data: https://tile.openstreetmap.org; "
        "base-uri 'none'; form-action 'none'"
    )


def map_html(plan: Any, *, routes=None, spares=None, actual=None, markers: str = "auto") -> str:
    """Return the complete map page as text (see :func:`write_map`)."""
    if markers not in MARKER_MODES:
        from fieldplan.errors import OptionError

        raise OptionError(f"markers must be one of {', '.join(MARKER_MODES)}; got {markers!r}")
    js, css = _leaflet_assets()
    data = map_data(plan, routes=routes, spares=spares, actual=actual, markers=markers)
    caption = data["caption"]
    title = html.escape(f"fieldplan map {caption['plan_id']}", quote=True)
    leaflet_script = "\n" + js + "\n"
    app_script = "\n" + _APP_JS + "\n"
    page = (
        _TEMPLATE.replace("@@CSP@@", html.escape(_csp([leaflet_script, app_script]), quote=True))
        .replace("@@TITLE@@", title)
        .replace("@@LEAFLET_CSS@@", css)
        .replace("@@PAGE_CSS@@", _PAGE_CSS)
        .replace("@@DATA@@", _jsonify_for_script(data))
    )
    # Scripts go in last so no placeholder text inside them can be replaced.
    head, tail = page.split("@@LEAFLET_JS@@")
    tail_a, tail_b = tail.split("@@APP_JS@@")
    return head + leaflet_script + tail_a + app_script + tail_b


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


_TEMPLATE = """<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="@@CSP@@">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="referrer" content="no-referrer">
<title>@@TITLE@@</title>
<style>
@@LEAFLET_CSS@@
</style>
<style>
@@PAGE_CSS@@
</style>
</head>
<body>
<div id="map" role="application" aria-label="Sampling plan map"></div>
<script type="application/json" id="fp-data">@@DATA@@</script>
<script>@@LEAFLET_JS@@</script>
<script>@@APP_JS@@</script>
</body>
</html>
"""

_PAGE_CSS = """
html, body { height: 100%; margin: 0; }
#map { height: 100%; width: 100%; background: #f4f3ee; }
.fp-panel { background: #fff; padding: 6px 8px; border-radius: 4px; max-width: 320px;
  box-shadow: 0 1px 5px rgba(0,0,0,0.4); font: 12px/1.4 sans-serif; color: #222; }
.fp-panel h2 { font-size: 13px; margin: 0 0 4px; }
.fp-panel ul { margin: 4px 0 0; padding-left: 16px; }
.fp-legend-row { display: flex; align-items: center; gap: 6px; margin: 2px 0; }
.fp-point, .fp-spare, .fp-actual, .fp-inaccessible { background: none; border: none; }
.fp-point svg, .fp-spare svg, .fp-actual svg, .fp-inaccessible svg { display: block; overflow: visible; }
.fp-label { display: none; position: absolute; left: 17px; top: 0; white-space: nowrap;
  font: bold 11px sans-serif; color: #111; text-shadow: 0 0 2px #fff, 0 0 2px #fff; }
.fp-show-labels .fp-label { display: block; }
.fp-block-label { background: none; border: none; }
.fp-block-label span { display: inline-block; transform: translate(-50%, -50%);
  white-space: nowrap; text-align: center; font: bold 12px sans-serif; color: #222;
  text-shadow: 0 0 3px #fff, 0 0 3px #fff, 0 0 3px #fff; pointer-events: none; }
.fp-block-label small { display: block; font-weight: normal; }
.fp-popup table { border-collapse: collapse; }
.fp-popup th { text-align: left; padding-right: 8px; font-weight: 600; }
@media print { .leaflet-control-layers { display: none; } }
"""

_APP_JS = r"""
(function () {
  "use strict";
  var data = JSON.parse(document.getElementById("fp-data").textContent);
  var SVGNS = "http://www.w3.org/2000/svg";
  var map = L.map("map", { maxZoom: 22, zoomSnap: 0.5, preferCanvas: false });
  // The view must exist before any layer is added, or the SVG renderer has no container yet.
  map.fitBounds(data.bounds, { padding: [20, 20], maxZoom: 20 });
  var renderer = L.svg();
  renderer.addTo(map);

  function el(tag, text, cls) {
    var node = document.createElement(tag);
    if (text !== undefined && text !== null) { node.textContent = String(text); }
    if (cls) { node.className = cls; }
    return node;
  }

  // Marker outlines as polygons in a unit box (-1..1, y down); the circle is drawn as an arc.
  var SHAPE_POINTS = {
    "square": [[-0.72, -0.72], [0.72, -0.72], [0.72, 0.72], [-0.72, 0.72]],
    "triangle": [[0, -0.88], [0.85, 0.78], [-0.85, 0.78]],
    "diamond": [[0, -0.92], [0.92, 0], [0, 0.92], [-0.92, 0]],
    "triangle-down": [[-0.85, -0.78], [0.85, -0.78], [0, 0.88]],
    "hexagon": [[-0.45, -0.8], [0.45, -0.8], [0.9, 0], [0.45, 0.8], [-0.45, 0.8], [-0.9, 0]],
    "cross": [[-0.28, -0.9], [0.28, -0.9], [0.28, -0.28], [0.9, -0.28], [0.9, 0.28], [0.28, 0.28],
      [0.28, 0.9], [-0.28, 0.9], [-0.28, 0.28], [-0.9, 0.28], [-0.9, -0.28], [-0.28, -0.28]],
    "x": [[-0.75, -0.5], [-0.5, -0.75], [0, -0.25], [0.5, -0.75], [0.75, -0.5], [0.25, 0],
      [0.75, 0.5], [0.5, 0.75], [0, 0.25], [-0.5, 0.75], [-0.75, 0.5], [-0.25, 0]]
  };

  // "circle-x": a circle struck through by an X, for points no one should walk to.
  var STRIKE = [[-0.6, -0.6, 0.6, 0.6], [-0.6, 0.6, 0.6, -0.6]];

  function shapeSvg(shape, fill, size, stroke) {
    var svg = document.createElementNS(SVGNS, "svg");
    svg.setAttribute("width", size); svg.setAttribute("height", size);
    svg.setAttribute("viewBox", "0 0 16 16");
    if (shape === "circle-x") {
      var struck = shapeSvg("circle", fill, size, stroke);
      STRIKE.forEach(function (q) {
        var ln = document.createElementNS(SVGNS, "line");
        ln.setAttribute("x1", (8 + 7 * q[0]).toFixed(2)); ln.setAttribute("y1", (8 + 7 * q[1]).toFixed(2));
        ln.setAttribute("x2", (8 + 7 * q[2]).toFixed(2)); ln.setAttribute("y2", (8 + 7 * q[3]).toFixed(2));
        ln.setAttribute("stroke", stroke || "#1a1a1a"); ln.setAttribute("stroke-width", "2");
        ln.setAttribute("class", "fp-strike");
        struck.appendChild(ln);
      });
      return struck;
    }
    var s;
    if (shape === "circle" || !SHAPE_POINTS[shape]) {
      s = document.createElementNS(SVGNS, "circle");
      s.setAttribute("cx", "8"); s.setAttribute("cy", "8"); s.setAttribute("r", "6");
    } else {
      s = document.createElementNS(SVGNS, "path");
      s.setAttribute("d", "M" + SHAPE_POINTS[shape].map(function (p) {
        return (8 + 7 * p[0]).toFixed(2) + " " + (8 + 7 * p[1]).toFixed(2);
      }).join("L") + "Z");
    }
    s.setAttribute("fill", fill);
    s.setAttribute("stroke", stroke || "#1a1a1a");
    s.setAttribute("stroke-width", "1.3");
    svg.appendChild(s);
    return svg;
  }

  function popupFor(props) {
    var wrap = el("div", null, "fp-popup");
    var table = el("table");
    var names = [["point_id", "Point"], ["block", "Block"], ["stratum", "Stratum"],
      ["design", "Design"], ["row", "Row"], ["plant", "Plant"], ["units", "Units"],
      ["depth_cm", "Depth (cm)"], ["status", "Status"], ["crew", "Crew"], ["visit_order", "Visit no."],
      ["instructions", "Instructions"],
      ["recorded_utc", "Recorded"], ["offset_m", "Offset (m)"]];
    names.forEach(function (pair) {
      var v = props[pair[0]];
      if (v === undefined || v === null || v === "") { return; }
      var tr = el("tr");
      tr.appendChild(el("th", pair[1]));
      tr.appendChild(el("td", v));
      table.appendChild(tr);
    });
    wrap.appendChild(table);
    return wrap;
  }

  var styleOf = {};
  data.strata.forEach(function (s) { styleOf[s.name] = s; });

  function propsAt(layer, i) {
    var out = {};
    Object.keys(layer.props).forEach(function (k) { out[k] = layer.props[k][i]; });
    return out;
  }

  // Canvas marker: the stratum's shape drawn on a shared canvas; point ids drawn with
  // fillText (plain text by construction) when zoomed in far enough.
  var ShapeMarker = L.CircleMarker.extend({
    _updatePath: function () {
      var r = this._renderer;
      if (!r._ctx) { r._updateCircle(this); return; }
      if (!r._drawing || this._empty()) { return; }
      var p = this._point, ctx = r._ctx, rad = this._radius, pts = SHAPE_POINTS[this.options.shape];
      ctx.beginPath();
      if (!pts) {
        ctx.arc(p.x, p.y, rad, 0, Math.PI * 2, false);
      } else {
        pts.forEach(function (q, j) {
          var x = p.x + q[0] * rad, y = p.y + q[1] * rad;
          if (j === 0) { ctx.moveTo(x, y); } else { ctx.lineTo(x, y); }
        });
        ctx.closePath();
      }
      r._fillStroke(ctx, this);
      if (this.options.shape === "circle-x") {
        ctx.beginPath();
        STRIKE.forEach(function (q) {
          ctx.moveTo(p.x + q[0] * rad, p.y + q[1] * rad); ctx.lineTo(p.x + q[2] * rad, p.y + q[3] * rad);
        });
        ctx.globalAlpha = 1; ctx.lineWidth = 2; ctx.strokeStyle = this.options.color; ctx.stroke();
      }
      if (this.options.label && this._map && this._map.getZoom() >= LABEL_ZOOM) {
        ctx.globalAlpha = 1;
        ctx.font = "bold 11px sans-serif";
        ctx.lineWidth = 3; ctx.strokeStyle = "#ffffff"; ctx.fillStyle = "#111111";
        ctx.strokeText(this.options.label, p.x + rad + 3, p.y + 4);
        ctx.fillText(this.options.label, p.x + rad + 3, p.y + 4);
      }
    }
  });
  var LABEL_ZOOM = 18;
  var canvasPane = map.createPane("fp-points");
  canvasPane.style.zIndex = 450;
  var canvasRenderer = L.canvas({ pane: "fp-points", padding: 0.3 });

  function pointMarker(props, latlng, cls, shape, colour, size) {
    var title = String(props.point_id === null || props.point_id === undefined ? "" : props.point_id);
    var m;
    if (data.marker_mode === "canvas") {
      m = new ShapeMarker(latlng, { renderer: canvasRenderer, radius: size / 2 - 1, shape: shape,
        fillColor: colour, fillOpacity: 1, color: "#1a1a1a", weight: 1.2, label: title,
        className: cls });
    } else {
      var box = el("div");
      box.appendChild(shapeSvg(shape, colour, size));
      box.appendChild(el("span", title, "fp-label"));
      var icon = L.divIcon({ html: box, className: cls, iconSize: [size, size],
        iconAnchor: [size / 2, size / 2], popupAnchor: [0, -size / 2] });
      m = L.marker(latlng, { icon: icon, title: title, keyboard: true, alt: title });
    }
    m.bindPopup(function () { return popupFor(props); });
    return m;
  }

  function pointLayer(layer, make) {
    var markers = [];
    for (var i = 0; i < layer.n; i++) {
      markers.push(make(propsAt(layer, i), L.latLng(layer.lat[i], layer.lon[i])));
    }
    return L.featureGroup(markers);
  }

  var overlays = [];

  // Blocks
  var blocks = L.geoJSON(data.blocks, { renderer: renderer,
    style: function () { return { color: "#333333", weight: 2, fillColor: "#ffffff", fillOpacity: 0.55 }; },
    onEachFeature: function (f, layer) {
      var p = f.properties, box = el("div", null, "fp-popup");
      box.appendChild(el("strong", "Block " + (p.block === null ? "" : p.block)));
      if (p.variety) { box.appendChild(el("div", "Variety: " + p.variety)); }
      if (p.stratum) { box.appendChild(el("div", "Stratum: " + p.stratum)); }
      if (p.area_ha !== undefined && p.area_ha !== null) { box.appendChild(el("div", "Area: " + Number(p.area_ha).toFixed(2) + " ha")); }
      if (p.n_points !== undefined && p.n_points !== null) { box.appendChild(el("div", "Points: " + p.n_points)); }
      layer.bindPopup(function () { return box; });
    } }).addTo(map);
  // Block labels sit above the point markers (their own pane) and let clicks through.
  map.createPane("fp-block-labels").style.zIndex = 640;
  map.getPane("fp-block-labels").style.pointerEvents = "none";
  var labels = L.geoJSON(data.block_labels, { pointToLayer: function (f, latlng) {
      var span = el("span", f.properties.block);
      if (f.properties.variety) { span.appendChild(el("small", f.properties.variety)); }
      return L.marker(latlng, { interactive: false, keyboard: false, pane: "fp-block-labels",
        icon: L.divIcon({ html: span, className: "fp-block-label", iconSize: null }) });
    } });
  var blockGroup = L.layerGroup([blocks, labels]).addTo(map);
  overlays.push(["Blocks", blockGroup]);

  // Exclusions: hatched with an SVG pattern in the renderer's own <svg>.
  var exclusions = L.geoJSON(data.exclusions, { renderer: renderer,
    style: function () { return { color: "#555555", weight: 1.5, dashArray: "6 4",
      fillColor: "url(#fp-hatch)", fillOpacity: 1 }; },
    onEachFeature: function (f, layer) {
      layer.bindPopup(function () { return el("div", "Excluded: " + (f.properties.name || "")); });
    } });
  if (data.exclusions.features.length) {
    var svgRoot = renderer._container;
    var defs = document.createElementNS(SVGNS, "defs");
    var pat = document.createElementNS(SVGNS, "pattern");
    pat.setAttribute("id", "fp-hatch"); pat.setAttribute("patternUnits", "userSpaceOnUse");
    pat.setAttribute("width", "8"); pat.setAttribute("height", "8");
    pat.setAttribute("patternTransform", "rotate(45)");
    var bg = document.createElementNS(SVGNS, "rect");
    bg.setAttribute("width", "8"); bg.setAttribute("height", "8"); bg.setAttribute("fill", "#d9d9d9");
    var line = document.createElementNS(SVGNS, "line");
    line.setAttribute("x1", "0"); line.setAttribute("y1", "0"); line.setAttribute("x2", "0");
    line.setAttribute("y2", "8"); line.setAttribute("stroke", "#6b6b6b"); line.setAttribute("stroke-width", "3");
    pat.appendChild(bg); pat.appendChild(line); defs.appendChild(pat);
    svgRoot.insertBefore(defs, svgRoot.firstChild);
    exclusions.addTo(map);
    overlays.push(["Exclusions (not sampled)", exclusions]);
  }

  // Routes, one toggle per crew.
  data.crews.forEach(function (crew) {
    var fc = { type: "FeatureCollection", features: data.routes.features.filter(function (f) {
      return String(f.properties.crew) === crew.name; }) };
    var layer = L.geoJSON(fc, { renderer: renderer, style: function () {
      return { color: crew.colour, weight: 3, opacity: 0.9, dashArray: crew.dash }; },
      onEachFeature: function (f, l) {
        var p = f.properties, parts = ["Crew " + crew.name];
        if (p.points !== undefined && p.points !== null) { parts.push(p.points + " points"); }
        if (p.length_m !== undefined && p.length_m !== null) { parts.push((p.length_m / 1000).toFixed(2) + " km"); }
        if (p.hours !== undefined && p.hours !== null) { parts.push("about " + Number(p.hours).toFixed(1) + " h"); }
        l.bindTooltip(el("span", parts.join(" \u00b7 ")), { sticky: true });
      } });
    layer.addTo(map);
    overlays.push(["Route: crew " + crew.name, layer]);
  });

  // Sample points, spare points, recorded positions.
  var layers = { blocks: blocks, exclusions: exclusions };
  var points = pointLayer(data.points, function (props, latlng) {
    var st = styleOf[String(props.stratum)] || { colour: "#bbbbbb", shape: "circle" };
    return pointMarker(props, latlng, "fp-point", st.shape, st.colour, 16);
  }).addTo(map);
  layers.points = points;
  overlays.push(["Sample points", points]);
  if (data.spares.n) {
    layers.spares = pointLayer(data.spares, function (props, latlng) {
      return pointMarker(props, latlng, "fp-spare", "cross", "#ffffff", 14);
    });
    overlays.push(["Spare points", layers.spares]);
  }
  if (data.inaccessible.n) {
    // Shown by default: knowing where not to go matters as much as where to go.
    layers.inaccessible = pointLayer(data.inaccessible, function (props, latlng) {
      var st = data.inaccessible_style;
      return pointMarker(props, latlng, "fp-inaccessible", st.shape, st.colour, 14);
    }).addTo(map);
    overlays.push(["Inaccessible points (not sampled)", layers.inaccessible]);
  }
  if (data.actual.n) {
    layers.actual = pointLayer(data.actual, function (props, latlng) {
      return pointMarker(props, latlng, "fp-actual", "x", "#111111", 12);
    }).addTo(map);
    overlays.push(["Recorded positions", layers.actual]);
  }

  // Online base layer: listed but off, so nothing is fetched unless asked for.
  var osm = L.tileLayer(data.osm.url, { maxZoom: 19, maxNativeZoom: 19, attribution: data.osm.attribution });
  overlays.push(["OpenStreetMap (online only)", osm]);

  // Leaflet's layer control inserts names as HTML, so names are escaped first.
  function escapeHtml(text) {
    return String(text).replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;")
      .replace(/"/g, "&quot;").replace(/'/g, "&#39;");
  }
  var control = L.control.layers(null, null, { collapsed: false, position: "topright" });
  overlays.forEach(function (o) { control.addOverlay(o[1], escapeHtml(o[0])); });
  control.addTo(map);
  L.control.scale({ metric: true, imperial: false, maxWidth: 200 }).addTo(map);

  // Plan caption and cautions.
  var Info = L.Control.extend({ options: { position: "topleft" }, onAdd: function () {
    var box = el("div", null, "fp-panel");
    var c = data.caption;
    box.appendChild(el("h2", "Sampling plan " + c.plan_id));
    box.appendChild(el("div", "Seed " + c.seed + (c.date ? " \u00b7 " + c.date : "") + (c.design ? " \u00b7 " + c.design : "")));
    box.appendChild(el("div", data.points.n + " sample points in " + data.blocks.features.length + " blocks"));
    var det = el("details"); det.appendChild(el("summary", "Cautions"));
    var ul = el("ul");
    data.cautions.forEach(function (t) { ul.appendChild(el("li", t)); });
    det.appendChild(ul); box.appendChild(det);
    L.DomEvent.disableClickPropagation(box); L.DomEvent.disableScrollPropagation(box);
    return box;
  } });
  new Info().addTo(map);

  // Legend: every symbol has a shape and a text, not only a colour.
  var Legend = L.Control.extend({ options: { position: "bottomright" }, onAdd: function () {
    var box = el("div", null, "fp-panel fp-legend");
    box.appendChild(el("h2", "Legend"));
    function row(svg, text) {
      var r = el("div", null, "fp-legend-row"); r.appendChild(svg); r.appendChild(el("span", text)); box.appendChild(r);
    }
    data.strata.forEach(function (s) { row(shapeSvg(s.shape, s.colour, 14), "Stratum " + s.name); });
    var blk = document.createElementNS(SVGNS, "svg"); blk.setAttribute("width", "14"); blk.setAttribute("height", "14");
    var r1 = document.createElementNS(SVGNS, "rect"); r1.setAttribute("x", "1"); r1.setAttribute("y", "1");
    r1.setAttribute("width", "12"); r1.setAttribute("height", "12"); r1.setAttribute("fill", "#ffffff");
    r1.setAttribute("stroke", "#333333"); r1.setAttribute("stroke-width", "2"); blk.appendChild(r1);
    row(blk, "Block (id, variety)");
    if (data.exclusions.features.length) {
      var ex = blk.cloneNode(true); ex.firstChild.setAttribute("fill", "#bdbdbd");
      ex.firstChild.setAttribute("stroke-dasharray", "3 2"); ex.firstChild.setAttribute("stroke", "#555555");
      row(ex, "Exclusion (hatched on map)");
    }
    if (data.spares.n) { row(shapeSvg("cross", "#ffffff", 14), "Spare point (off by default)"); }
    if (data.inaccessible.n) {
      var ist = data.inaccessible_style;
      row(shapeSvg(ist.shape, ist.colour, 14), ist.legend);
    }
    if (data.actual.n) { row(shapeSvg("x", "#111111", 12), "Recorded position"); }
    data.crews.forEach(function (crew) {
      var svg = document.createElementNS(SVGNS, "svg"); svg.setAttribute("width", "24"); svg.setAttribute("height", "10");
      var ln = document.createElementNS(SVGNS, "line"); ln.setAttribute("x1", "0"); ln.setAttribute("y1", "5");
      ln.setAttribute("x2", "24"); ln.setAttribute("y2", "5"); ln.setAttribute("stroke", crew.colour);
      ln.setAttribute("stroke-width", "3"); if (crew.dash) { ln.setAttribute("stroke-dasharray", crew.dash); }
      svg.appendChild(ln); row(svg, "Route: crew " + crew.name);
    });
    box.appendChild(el("div", "Point ids show from zoom 18."));
    L.DomEvent.disableClickPropagation(box); L.DomEvent.disableScrollPropagation(box);
    return box;
  } });
  new Legend().addTo(map);

  function syncLabels() {
    var on = map.getZoom() >= LABEL_ZOOM;
    var box = map.getContainer();
    if (on) { L.DomUtil.addClass(box, "fp-show-labels"); } else { L.DomUtil.removeClass(box, "fp-show-labels"); }
  }
  map.on("zoomend", syncLabels);
  syncLabels();
  window.fieldplanLayers = layers;
  window.fieldplanMap = map;
})();
"""
