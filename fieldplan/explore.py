"""Plan maps through folium: the offline ``map.html`` and :func:`explore` for notebooks.

One builder, :func:`plan_map`, adds a plan's layers to a ``folium.Map``; the same
map is either saved as the self-contained ``map.html`` (``offline=True``, what
:func:`fieldplan.write.html_map.write_map` does) or returned to a notebook by
:func:`explore`, where users add their own folium layers as they do with
``GeoDataFrame.explore()``::

    import fieldplan
    m = fieldplan.explore("plans/estate")        # a plan folder or a Plan object
    m                                            # shows in Jupyter
    m.save("estate.html")

What comes from folium: the map, the layer control, block polygons, exclusions
and crew routes (``GeoJson`` with Leaflet styles), block labels (``GeoJson`` of
anchor points with a ``Marker``/``DivIcon``), the "Blocks" group
(``FeatureGroup``), the two map panes (``CustomPane``), the initial view
(``FitBounds``), the OpenStreetMap layer (``TileLayer``, listed but off).

What folium has no element for is JavaScript of our own, kept as package data
in ``fieldplan/data/map/`` and called from two thin folium elements:

* ``shapes.js`` (the ``fieldplanShapes`` global): the stratum marker shapes, inlined
  before the kit; the workspace's plan map loads the same file, so both draw a stratum alike.
* ``fieldplan-map.js`` (the ``fieldplanKit`` global): ``fill``, which hands the
  GeoJson layers their features from the page's data document (folium would embed
  them a second time, and branca re-parses every rendered script as a Jinja
  template, which costs 0.3 s on the 1,000-block plan); point layers with a shape
  and colour per stratum drawn as elements or, for large plans, on one canvas
  (folium has no shaped markers that work offline, and one folium element per
  point would take seconds to render); popups, block labels and route tooltips
  built with ``textContent`` (folium's GeoJson popups and tooltips build HTML from
  the data); the SVG hatch pattern of exclusions; the plan box with cautions and
  the legend (folium has no control with arbitrary content); a metric-only scale
  bar (folium's ``control_scale`` adds an imperial bar too); point labels from
  zoom 18 and ``window.fieldplanMap`` / ``window.fieldplanLayers``.
* ``fieldplan-map.css``: the page and symbol styles.
* ``call.js.j2``: the one-line template of the elements that call the kit.
* ``map.js.j2`` and ``page.html.j2``: the offline map and page. folium's own map
  template loads Leaflet, jQuery, Bootstrap and Font Awesome from CDNs and writes
  an inline script a Content-Security-Policy would have to allow; the offline page
  inlines Leaflet from the ``xstatic-leaflet`` package instead (no other asset is
  needed) and pins its two scripts by hash.
* ``layers-icon.svg``: the layer-control icon, inlined in Leaflet's stylesheet.

The plan data reach the page once, as escaped JSON in
``<script type="application/json" id="fp-data">`` (see
:func:`fieldplan.write.html_map.map_data`); what folium writes into its script
goes through Jinja's ``tojson``, which escapes ``<``, ``>``, ``&`` and ``'``.
Layer names go to Leaflet's layer control as HTML, so they are escaped here.

folium names its elements with random ids; the offline page renumbers them in
order of appearance when it is rendered, so the same plan gives the same bytes.

The offline map and page are subclasses of ``folium.Map`` and ``branca``'s
``Figure`` with templates of their own and empty ``default_js``/``default_css``
(folium's extension points for elements); nothing of folium is patched.
"""

from __future__ import annotations

import base64
import hashlib
import html
import re
import sys
import types
from functools import cache, lru_cache
from importlib import resources
from pathlib import Path
from typing import Any

import folium
from branca.element import Element, Figure, MacroElement
from folium.map import CustomPane, FeatureGroup, Layer, LayerControl
from folium.template import Template
from folium.utilities import JsCode

__all__ = ["explore", "plan_map", "render_offline"]

BLOCK_STYLE = {"color": "#333333", "weight": 2, "fillColor": "#ffffff", "fillOpacity": 0.55}
# Exclusions: a dashed outline filled with the hatch pattern the kit adds to the SVG renderer.
EXCLUSION_STYLE = {
    "color": "#555555",
    "weight": 1.5,
    "dashArray": "6 4",
    "fillColor": "url(#fp-hatch)",
    "fillOpacity": 1,
}
MAP_OPTIONS = {"maxZoom": 22, "zoomSnap": 0.5}
FIT_PADDING = (20, 20)
FIT_MAX_ZOOM = 20
LABEL_PANE = ("fp-block-labels", 640)  # above point markers (600); lets clicks through
POINT_PANE = ("fp-points", 450)  # canvas-drawn points: above polygons (400), below markers
SCALE_OPTIONS = {"metric": True, "imperial": False, "maxWidth": 200}


@cache
def _asset(name: str) -> str:
    """A file of ``fieldplan/data/map/`` (package data)."""
    return (resources.files("fieldplan") / "data" / "map" / name).read_text(encoding="utf-8")


@lru_cache(maxsize=1)
def leaflet_assets() -> tuple[str, str]:
    """Leaflet's JavaScript and CSS from the ``xstatic-leaflet`` package, ready to inline.

    The source-map comment is dropped (developer tools would fetch it) and the
    stylesheet's image URLs become an inline SVG (the layer-control icon) or
    ``none`` (default marker icons, never used).
    """
    import xstatic.pkg.leaflet as xl

    base = Path(xl.BASE_DIR)
    js = (base / "leaflet.js").read_text(encoding="utf-8")
    css = (base / "leaflet.css").read_text(encoding="utf-8")
    js = "\n".join(ln for ln in js.splitlines() if not ln.startswith("//# sourceMappingURL"))
    icon = _asset("layers-icon.svg").strip()
    uri = "data:image/svg+xml;base64," + base64.b64encode(icon.encode()).decode()
    css = css.replace("url(images/layers.png)", f'url("{uri}")')
    css = css.replace("url(images/layers-2x.png)", f'url("{uri}")')
    css = css.replace("url(images/marker-icon.png)", "none")
    css = css.replace("behavior: url(#default#VML);", "")
    for text, closer in ((js, "</script"), (css, "</style")):
        if closer in text.lower():
            raise RuntimeError(f"Leaflet asset contains {closer!r}; cannot inline it safely")
    return js, css


class _Text(Element):
    """Fixed text put into the page as is (inlined assets, the data island)."""

    def __init__(self, text: str, name: str = "Text") -> None:
        super().__init__()
        self._name = name
        self.text = text

    def render(self, **kwargs) -> str:
        return self.text


class _Island(_Text):
    """The plan's data document, ``<script type="application/json" id="fp-data">``.

    The offline page renders a placeholder here and puts the document in last:
    it is most of the page, and every step of rendering would copy it again.
    """

    PLACEHOLDER = "@@FIELDPLAN_DATA@@"

    def render(self, **kwargs) -> str:
        return self.PLACEHOLDER if kwargs.get("island_placeholder") else self.text


class _KitControl(MacroElement):
    """A call of ``fieldplanKit.<function>(map, options)``: controls and page glue."""

    _template = Template(_asset("call.js.j2"))

    def __init__(self, function: str, options: dict | None = None) -> None:
        super().__init__()
        self._name = "FieldplanControl"
        self.function = function
        self.options = options or {}


class _KitLayer(Layer):
    """A layer the kit builds (point layers), listed in the layer control like any folium layer."""

    _template = Template(_asset("call.js.j2"))

    def __init__(self, function: str, options: dict, *, name: str, show: bool = True) -> None:
        super().__init__(name=html.escape(name, quote=True), overlay=True, control=True, show=show)
        self._name = "FieldplanPoints"
        self.function = function
        self.options = options


class _OfflineMap(folium.Map):
    """A folium Map that loads nothing: no CDN links, no inline script beyond the page's own."""

    _template = Template(_asset("map.js.j2"))
    default_js: list = []
    default_css: list = []


class _OfflinePage(Figure):
    """The page around the offline map: language, CSP, the two scripts, stable names.

    Rendering it (``Map.save``, a notebook's display, :func:`render_offline`) gives
    the finished page, so every way of saving the offline map gives the same bytes.
    """

    _template = Template(_asset("page.html.j2"))
    island: _Island | None = None

    def render(self, **kwargs) -> str:
        text = _finish_offline(self, super().render(island_placeholder=True, **kwargs))
        if self.island is not None:
            # The body's first placeholder is the island (the title, in the head, is input text).
            head, body = text.split("<body>", 1)
            text = head + "<body>" + body.replace(_Island.PLACEHOLDER, self.island.text, 1)
        return text


def _geojson(key: str, index: list[int] | None = None, **kwargs) -> folium.GeoJson:
    """A folium GeoJson layer whose features come from the page's data island.

    folium embeds a GeoJson's features in its script, where branca parses the
    rendered script once more as a Jinja template: about 0.3 s for the
    1,000-block plan, and a second copy of every polygon in the page. The layer
    is made empty (styles, popups, layer-control entry as usual) and
    ``fieldplanKit.fill`` adds ``data[key]`` (the features at ``index``, if given)
    before the layer is added to the map. Styles are Leaflet's ``style`` option
    (one style per layer), as folium's ``style_function`` needs the features.
    """
    layer = folium.GeoJson({"type": "FeatureCollection", "features": []}, **kwargs)
    options: dict[str, Any] = {"key": key}
    if index is not None:
        options["index"] = index
    _KitControl("fill", options).add_to(layer)
    return layer


def _layer_name(name: str) -> str:
    # Leaflet's layer control inserts names as HTML.
    return html.escape(name, quote=True)


_ISLAND_OPEN = '<script type="application/json" id="fp-data">'


def _json_island(text: str) -> str:
    return f"{_ISLAND_OPEN}{text}</script>"


def plan_map(
    plan: Any,
    *,
    routes=None,
    spares=None,
    actual=None,
    markers: str = "auto",
    offline: bool = False,
    basemap: bool = False,
    data: dict | None = None,
) -> folium.Map:
    """A ``folium.Map`` with every layer of the plan's map.

    Parameters
    ----------
    plan : Plan
        The plan (see :func:`fieldplan.write.html_map.write_map` for the layers drawn).
    routes, spares, actual, markers
        As for :func:`fieldplan.write.html_map.write_map`.
    offline : bool
        True: Leaflet inlined from ``xstatic-leaflet``, nothing loaded from the
        network (what ``map.html`` is). False: folium's usual page (Leaflet and
        friends from CDNs), so any folium layer a user adds works as usual.
    basemap : bool
        Show the OpenStreetMap layer on opening (it is always listed, off by default).
    data : dict, optional
        A :func:`~fieldplan.write.html_map.map_data` document already made.
    """
    from fieldplan.write.html_map import _jsonify_for_script, map_data

    if data is None:
        data = map_data(plan, routes=routes, spares=spares, actual=actual, markers=markers)
    island = _json_island(_jsonify_for_script(data))
    (s, w), (n, e) = data["bounds"]
    centre = [(s + n) / 2.0, (w + e) / 2.0]
    if offline:
        m = _OfflineMap(location=centre, tiles=None, zoom_start=15, **MAP_OPTIONS)
        caption = data["caption"]
        page = _OfflinePage(title=html.escape(f"fieldplan map {caption['plan_id']}", quote=True))
        page.add_child(m)
        js, css = leaflet_assets()
        page.header.add_child(_Text(f"<style>\n{css}\n</style>"), name="leaflet_css")
        page.header.add_child(_Text(f"<script>\n{js}\n</script>"), name="leaflet_js")
    else:
        m = folium.Map(location=centre, tiles=None, zoom_start=15, **MAP_OPTIONS)
        page = m.get_root()
    page.header.add_child(_Text(f"<style>\n{_asset('fieldplan-map.css')}</style>"), name="fieldplan_css")
    island_element = _Island(island)
    page.html.add_child(island_element, name="fieldplan_data")
    if isinstance(page, _OfflinePage):
        page.island = island_element
    page.script.add_child(
        _Text("\n" + _asset("shapes.js") + "\n" + _asset("fieldplan-map.js")), name="fieldplan_kit"
    )

    m.fit_bounds([[s, w], [n, e]], padding=FIT_PADDING, max_zoom=FIT_MAX_ZOOM)
    CustomPane(LABEL_PANE[0], z_index=LABEL_PANE[1], pointer_events=False).add_to(m)
    CustomPane(POINT_PANE[0], z_index=POINT_PANE[1], pointer_events=True).add_to(m)
    layers: dict[str, Element] = {}

    group = FeatureGroup(name="Blocks").add_to(m)
    if data["blocks"]["features"]:
        layers["blocks"] = _geojson(
            "blocks", style=BLOCK_STYLE, on_each_feature=JsCode("fieldplanKit.blockPopup"), control=False
        ).add_to(group)
        _geojson(
            "block_labels",
            marker=folium.Marker(
                icon=folium.DivIcon(class_name="fp-block-label", icon_size=(0, 0)),
                interactive=False,
                keyboard=False,
                pane=LABEL_PANE[0],
            ),
            on_each_feature=JsCode("fieldplanKit.blockLabel"),
            control=False,
        ).add_to(group)
    else:
        layers["blocks"] = group

    if data["exclusions"]["features"]:
        exclusions = _geojson(
            "exclusions",
            name="Exclusions (not sampled)",
            style=EXCLUSION_STYLE,
            on_each_feature=JsCode("fieldplanKit.exclusionPopup"),
        )
        exclusions.on(add=JsCode("fieldplanKit.hatch"))
        layers["exclusions"] = exclusions.add_to(m)

    crews = [str(f["properties"].get("crew", "")) for f in data["routes"]["features"]]
    for crew in data["crews"]:
        style = {"color": crew["colour"], "weight": 3, "opacity": 0.9}
        if crew["dash"]:
            style["dashArray"] = crew["dash"]
        _geojson(
            "routes",
            [i for i, name in enumerate(crews) if name == crew["name"]],
            name=_layer_name(f"Route: crew {crew['name']}"),
            style=style,
            on_each_feature=JsCode("fieldplanKit.routeTooltip"),
        ).add_to(m)

    kinds = (
        ("points", "Sample points", True),
        ("spares", "Spare points", False),  # off by default: spares are for when a point fails
        ("inaccessible", "Inaccessible points (not sampled)", True),  # where not to go
        ("actual", "Recorded positions", True),
    )
    for kind, name, show in kinds:
        if kind == "points" or data[kind]["n"]:
            layers[kind] = _KitLayer("pointLayer", {"kind": kind}, name=name, show=show).add_to(m)

    # Online base layer: listed but off, so nothing is fetched unless asked for.
    folium.TileLayer(
        tiles=data["osm"]["url"],
        attr=html.escape(data["osm"]["attribution"]),
        name="OpenStreetMap (online only)",
        overlay=True,
        show=basemap,
        max_zoom=19,
        max_native_zoom=19,
    ).add_to(m)
    LayerControl(position="topright", collapsed=False).add_to(m)
    _KitControl("scaleBar", SCALE_OPTIONS).add_to(m)
    _KitControl("planBox").add_to(m)
    _KitControl("legend").add_to(m)
    _KitControl("finish", {"layers": {k: JsCode(v.get_name()) for k, v in layers.items()}}).add_to(m)
    return m


def _element_ids(tree: dict, out: set[str]) -> set[str]:
    out.add(str(tree.get("id", "")))
    for key in ("children", "header", "html", "script"):
        sub = tree.get(key)
        if isinstance(sub, dict):
            if key == "children":
                for child in sub.values():
                    _element_ids(child, out)
            else:
                _element_ids(sub, out)
    return out


_HEX_ID = re.compile(r"[0-9a-f]{32}")


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


def _finish_offline(page: Figure, text: str) -> str:
    """Stable element names and the CSP pinning the page's two scripts."""
    # folium's ids are random: renumber the ones its elements carry, in order of
    # appearance (the data island is not in the text yet and holds none).
    ids = _element_ids(page.to_dict(), set())
    numbers: dict[str, str] = {}

    def renumber(match: re.Match) -> str:
        token = match.group(0)
        if token not in ids:
            return token
        return numbers.setdefault(token, str(len(numbers) + 1))

    text = _HEX_ID.sub(renumber, text)
    js, _ = leaflet_assets()
    app = text.rsplit("<script>", 1)[1].split("</script>", 1)[0]
    csp = html.escape(_csp(["\n" + js + "\n", app]), quote=True)
    return text.replace("@@CSP@@", csp, 1)


def render_offline(m: folium.Map) -> str:
    """The page of a map made with ``plan_map(..., offline=True)``, as text."""
    return m.get_root().render()


def explore(
    plan: Any,
    *,
    routes=None,
    spares=None,
    actual=None,
    markers: str = "auto",
    basemap: bool = False,
    offline: bool = False,
) -> folium.Map:
    """The plan's map as a ``folium.Map``, for notebooks (as ``GeoDataFrame.explore()``).

    Parameters
    ----------
    plan : Plan or str or Path
        A plan, or a plan folder written by ``fieldplan plan`` (read with
        :func:`fieldplan.store.load_plan`, routes and recorded positions included).
    routes, spares, actual, markers
        As for :func:`fieldplan.write.html_map.write_map`.
    basemap : bool
        Show the OpenStreetMap layer on opening (listed in the layer control either way).
    offline : bool
        Inline Leaflet instead of folium's CDN links: the map shows without a network
        (folium layers added later that need other libraries then lack them).

    Returns
    -------
    folium.Map
        Blocks with id and variety, hatched exclusions, points by stratum, spares,
        inaccessible points, recorded positions, crew routes, legend, scale bar,
        popups and the plan box with cautions; add layers with ``.add_to(m)``.
    """
    if isinstance(plan, str | Path):
        from fieldplan.store import load_plan

        plan = load_plan(plan)
    return plan_map(
        plan, routes=routes, spares=spares, actual=actual, markers=markers, offline=offline, basemap=basemap
    )


class _CallableModule(types.ModuleType):
    """This module, callable as :func:`explore`.

    ``fieldplan.explore`` names both this module and its function: once the module
    is imported, Python binds the package attribute to the module, so calling the
    module keeps ``fieldplan.explore(plan)`` working either way.
    """

    def __call__(self, *args, **kwargs) -> folium.Map:
        return explore(*args, **kwargs)


sys.modules[__name__].__class__ = _CallableModule
