/* fieldplan map kit: the parts of a plan map folium has no element for.
 *
 * Loaded once per page, before the map's own script, as the global `fieldplanKit`.
 * The plan data comes from the page's <script type="application/json" id="fp-data">
 * (escaped JSON, parsed here once). Every piece of input text reaches the page
 * through textContent (or canvas fillText), never as HTML.
 *
 *   fill(layer, {key, index})     adds features of the data to a folium GeoJson layer (which is
 *                                 made empty, so the page carries each polygon once)
 *   pointLayer(map, {kind})       sample, spare, inaccessible points and recorded positions,
 *                                 each shaped and coloured by stratum, as elements or on a canvas
 *   blockPopup / blockLabel       popup and label of a block (GeoJson onEachFeature)
 *   exclusionPopup, hatch         popup of an exclusion; the SVG hatch pattern it is filled with
 *   routeTooltip                  crew, points, length and hours of a route
 *   planBox(map), legend(map)     the plan's id, seed, cautions; every symbol with its text
 *   scaleBar(map, options)        a metric scale bar only
 *   finish(map, {layers})         point ids from zoom 18; window.fieldplanMap / fieldplanLayers
 */
var fieldplanKit = (function () {
  "use strict";
  var SVGNS = "http://www.w3.org/2000/svg";
  var LABEL_ZOOM = 18;
  var cache = null;

  function data() {
    if (cache === null) { cache = JSON.parse(document.getElementById("fp-data").textContent); }
    return cache;
  }

  function el(tag, text, cls) {
    var node = document.createElement(tag);
    if (text !== undefined && text !== null) { node.textContent = String(text); }
    if (cls) { node.className = cls; }
    return node;
  }

  // Marker shapes are shared with the workspace's plan map (shapes.js, inlined before this kit).
  var SHAPE_POINTS = fieldplanShapes.SHAPE_POINTS;
  var STRIKE = fieldplanShapes.STRIKE;
  var shapeSvg = fieldplanShapes.shapeSvg;

  var POPUP_NAMES = [["point_id", "Point"], ["block", "Block"], ["stratum", "Stratum"],
    ["design", "Design"], ["row", "Row"], ["plant", "Plant"], ["units", "Units"],
    ["depth_cm", "Depth (cm)"], ["status", "Status"], ["crew", "Crew"], ["visit_order", "Visit no."],
    ["instructions", "Instructions"], ["recorded_utc", "Recorded"], ["offset_m", "Offset (m)"]];

  function popupFor(props) {
    var wrap = el("div", null, "fp-popup");
    var table = el("table");
    POPUP_NAMES.forEach(function (pair) {
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

  // One canvas renderer per map, in the "fp-points" pane (a folium CustomPane).
  var canvasRenderers = [];
  function canvasFor(map) {
    for (var i = 0; i < canvasRenderers.length; i++) {
      if (canvasRenderers[i][0] === map) { return canvasRenderers[i][1]; }
    }
    var pane = map.getPane("fp-points") ? "fp-points" : "overlayPane";
    var renderer = L.canvas({ pane: pane, padding: 0.3 });
    canvasRenderers.push([map, renderer]);
    return renderer;
  }

  function pointMarker(map, props, latlng, cls, shape, colour, size) {
    var title = String(props.point_id === null || props.point_id === undefined ? "" : props.point_id);
    var m;
    if (data().marker_mode === "canvas") {
      m = new ShapeMarker(latlng, { renderer: canvasFor(map), radius: size / 2 - 1, shape: shape,
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

  // Symbol of each point layer: [class, shape, colour, size]; sample points by stratum.
  function symbols(d, kind) {
    if (kind === "points") {
      var styleOf = {};
      d.strata.forEach(function (s) { styleOf[s.name] = s; });
      return function (props) {
        var st = styleOf[String(props.stratum)] || { colour: "#bbbbbb", shape: "circle" };
        return ["fp-point", st.shape, st.colour, 16];
      };
    }
    var fixed = {
      spares: ["fp-spare", "cross", "#ffffff", 14],
      inaccessible: ["fp-inaccessible", d.inaccessible_style.shape, d.inaccessible_style.colour, 14],
      actual: ["fp-actual", "x", "#111111", 12]
    }[kind];
    return function () { return fixed; };
  }

  function pointLayer(map, options) {
    var d = data(), layer = d[options.kind], symbol = symbols(d, options.kind), markers = [];
    for (var i = 0; i < layer.n; i++) {
      var props = propsAt(layer, i), s = symbol(props);
      markers.push(pointMarker(map, props, L.latLng(layer.lat[i], layer.lon[i]), s[0], s[1], s[2], s[3]));
    }
    return L.featureGroup(markers);
  }

  function fill(layer, options) {
    var features = data()[options.key].features;
    if (options.index) { features = options.index.map(function (i) { return features[i]; }); }
    layer.addData({ type: "FeatureCollection", features: features });
    return layer;
  }

  function blockPopup(feature, layer) {
    var p = feature.properties, box = el("div", null, "fp-popup");
    box.appendChild(el("strong", "Block " + (p.block === null ? "" : p.block)));
    if (p.variety) { box.appendChild(el("div", "Variety: " + p.variety)); }
    if (p.stratum) { box.appendChild(el("div", "Stratum: " + p.stratum)); }
    if (p.area_ha !== undefined && p.area_ha !== null) { box.appendChild(el("div", "Area: " + Number(p.area_ha).toFixed(2) + " ha")); }
    if (p.n_points !== undefined && p.n_points !== null) { box.appendChild(el("div", "Points: " + p.n_points)); }
    layer.bindPopup(function () { return box; });
  }

  // The label marker's icon gets its content as a DOM node, so the name stays text.
  function blockLabel(feature, layer) {
    var span = el("span", feature.properties.block);
    if (feature.properties.variety) { span.appendChild(el("small", feature.properties.variety)); }
    layer.options.icon.options.html = span;
  }

  function exclusionPopup(feature, layer) {
    layer.bindPopup(function () { return el("div", "Excluded: " + (feature.properties.name || "")); });
  }

  // Exclusions are filled with url(#fp-hatch): the pattern goes into the SVG renderer
  // that draws them, once it exists (the layer's "add" event).
  function hatch(event) {
    event.target.eachLayer(function (path) {
      var svgRoot = path._renderer && path._renderer._container;
      if (!svgRoot || svgRoot.querySelector("#fp-hatch")) { return; }
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
    });
  }

  function routeTooltip(feature, layer) {
    var p = feature.properties, parts = ["Crew " + (p.crew === null ? "" : p.crew)];
    var n = p.n_points !== undefined ? p.n_points : p.points;
          if (n !== undefined && n !== null) { parts.push(n + " points"); }
    if (p.length_km !== undefined && p.length_km !== null) { parts.push(Number(p.length_km).toFixed(2) + " km"); }
          else if (p.length_m !== undefined && p.length_m !== null) { parts.push((p.length_m / 1000).toFixed(2) + " km"); }
    if (p.hours !== undefined && p.hours !== null) { parts.push("about " + Number(p.hours).toFixed(1) + " h"); }
    layer.bindTooltip(el("span", parts.join(" \u00b7 ")), { sticky: true });
  }

  function panel(map, position, build) {
    var Panel = L.Control.extend({ options: { position: position }, onAdd: function () {
      var box = build();
      L.DomEvent.disableClickPropagation(box); L.DomEvent.disableScrollPropagation(box);
      return box;
    } });
    return new Panel().addTo(map);
  }

  // Plan caption and cautions.
  function planBox(map) {
    return panel(map, "topleft", function () {
      var d = data(), c = d.caption, box = el("div", null, "fp-panel");
      box.appendChild(el("h2", "Sampling plan " + c.plan_id));
      box.appendChild(el("div", "Seed " + c.seed + (c.date ? " \u00b7 " + c.date : "") + (c.design ? " \u00b7 " + c.design : "")));
      box.appendChild(el("div", d.points.n + " sample points in " + d.blocks.features.length + " blocks"));
      var det = el("details"); det.appendChild(el("summary", "Cautions"));
      var ul = el("ul");
      d.cautions.forEach(function (t) { ul.appendChild(el("li", t)); });
      det.appendChild(ul); box.appendChild(det);
      return box;
    });
  }

  // Legend: every symbol has a shape and a text, not only a colour.
  function legend(map) {
    return panel(map, "bottomright", function () {
      var d = data(), box = el("div", null, "fp-panel fp-legend");
      box.appendChild(el("h2", "Legend"));
      function row(svg, text) {
        var r = el("div", null, "fp-legend-row"); r.appendChild(svg); r.appendChild(el("span", text)); box.appendChild(r);
      }
      d.strata.forEach(function (s) { row(shapeSvg(s.shape, s.colour, 14), "Stratum " + s.name); });
      var blk = document.createElementNS(SVGNS, "svg"); blk.setAttribute("width", "14"); blk.setAttribute("height", "14");
      var r1 = document.createElementNS(SVGNS, "rect"); r1.setAttribute("x", "1"); r1.setAttribute("y", "1");
      r1.setAttribute("width", "12"); r1.setAttribute("height", "12"); r1.setAttribute("fill", "#ffffff");
      r1.setAttribute("stroke", "#333333"); r1.setAttribute("stroke-width", "2"); blk.appendChild(r1);
      row(blk, "Block (id, variety)");
      if (d.exclusions.features.length) {
        var ex = blk.cloneNode(true); ex.firstChild.setAttribute("fill", "#bdbdbd");
        ex.firstChild.setAttribute("stroke-dasharray", "3 2"); ex.firstChild.setAttribute("stroke", "#555555");
        row(ex, "Exclusion (hatched on map)");
      }
      if (d.spares.n) { row(shapeSvg("cross", "#ffffff", 14), "Spare point (off by default)"); }
      if (d.inaccessible.n) {
        var ist = d.inaccessible_style;
        row(shapeSvg(ist.shape, ist.colour, 14), ist.legend);
      }
      if (d.actual.n) { row(shapeSvg("x", "#111111", 12), "Recorded position"); }
      d.crews.forEach(function (crew) {
        var svg = document.createElementNS(SVGNS, "svg"); svg.setAttribute("width", "24"); svg.setAttribute("height", "10");
        var ln = document.createElementNS(SVGNS, "line"); ln.setAttribute("x1", "0"); ln.setAttribute("y1", "5");
        ln.setAttribute("x2", "24"); ln.setAttribute("y2", "5"); ln.setAttribute("stroke", crew.colour);
        ln.setAttribute("stroke-width", "3"); if (crew.dash) { ln.setAttribute("stroke-dasharray", crew.dash); }
        svg.appendChild(ln); row(svg, "Route: crew " + crew.name);
      });
      box.appendChild(el("div", "Point ids show from zoom " + LABEL_ZOOM + "."));
      return box;
    });
  }

  // Leaflet's own scale control, metric only (folium's adds an imperial bar too).
  function scaleBar(map, options) {
    return L.control.scale(options).addTo(map);
  }

  function finish(map, options) {
    function syncLabels() {
      var box = map.getContainer();
      if (map.getZoom() >= LABEL_ZOOM) { L.DomUtil.addClass(box, "fp-show-labels"); }
      else { L.DomUtil.removeClass(box, "fp-show-labels"); }
    }
    map.on("zoomend", syncLabels);
    syncLabels();
    window.fieldplanLayers = options.layers;
    window.fieldplanMap = map;
  }

  return {
    data: data, fill: fill, pointLayer: pointLayer, blockPopup: blockPopup, blockLabel: blockLabel,
    exclusionPopup: exclusionPopup, hatch: hatch, routeTooltip: routeTooltip,
    planBox: planBox, legend: legend, scaleBar: scaleBar, finish: finish
  };
})();
