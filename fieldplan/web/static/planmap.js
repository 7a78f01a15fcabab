/* The plan map of the workspace: the same symbols as a plan folder's map.html
   (stratum colour + shape, struck-through inaccessible points, white crosses for spares,
   small crosses for recorded positions, hatched exclusions, one colour and dash per crew),
   drawn from GET /api/plans/{name} ("map"), plus the workspace's own layers: readiness
   colours, the crews' drop-off and the point being marked. */
(function () {
  "use strict";
  var FP = window.FP = window.FP || {};
  var SVGNS = "http://www.w3.org/2000/svg";
  var el = FP.el;

  // The same marker shapes as map.html: one definition (/static/map/shapes.js).
  var SHAPE_POINTS = fieldplanShapes.SHAPE_POINTS;
  var STRIKE = fieldplanShapes.STRIKE;
  var shapeSvg = fieldplanShapes.shapeSvg;
  FP.shapeSvg = shapeSvg;

  function swatch(fill, stroke, dash) {
    var svg = document.createElementNS(SVGNS, "svg");
    svg.setAttribute("width", "14"); svg.setAttribute("height", "14");
    var r = document.createElementNS(SVGNS, "rect");
    r.setAttribute("x", "1"); r.setAttribute("y", "1"); r.setAttribute("width", "12"); r.setAttribute("height", "12");
    r.setAttribute("fill", fill); r.setAttribute("stroke", stroke || "#333333"); r.setAttribute("stroke-width", "1.5");
    if (dash) { r.setAttribute("stroke-dasharray", dash); }
    svg.appendChild(r);
    return svg;
  }
  FP.swatch = swatch;

  var POPUP_NAMES = [["point_id", "Point"], ["block", "Block"], ["stratum", "Stratum"],
    ["design", "Design"], ["row", "Row"], ["plant", "Plant"], ["units", "Units"],
    ["depth_cm", "Depth (cm)"], ["sample_id", "Sample id"], ["status", "Status"], ["crew", "Crew"],
    ["visit_order", "Visit no."], ["instructions", "Instructions"], ["recorded_utc", "Recorded"],
    ["offset_m", "Offset (m)"]];

  function detailsTable(props) {
    var table = el("table", null, "fp-popup-table");
    POPUP_NAMES.forEach(function (pair) {
      var v = props[pair[0]];
      if (v === undefined || v === null || v === "") { return; }
      var tr = el("tr");
      tr.appendChild(el("th", pair[1]));
      tr.appendChild(el("td", v));
      table.appendChild(tr);
    });
    return table;
  }
  FP.detailsTable = detailsTable;

  // Canvas marker: a stratum's shape on a shared canvas; point ids drawn as text (fillText) from zoom 18.
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
      if (this.options.label && this._map && this._map.getZoom() >= 18) {
        ctx.globalAlpha = 1;
        ctx.font = "bold 11px sans-serif";
        ctx.lineWidth = 3; ctx.strokeStyle = "#ffffff"; ctx.fillStyle = "#111111";
        ctx.strokeText(this.options.label, p.x + rad + 3, p.y + 4);
        ctx.fillText(this.options.label, p.x + rad + 3, p.y + 4);
      }
    }
  });

  function escapeHtml(text) {
    return String(text).replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;")
      .replace(/"/g, "&quot;").replace(/'/g, "&#39;");
  }

  function propsAt(layer, i) {
    var out = {};
    Object.keys(layer.props).forEach(function (k) { out[k] = layer.props[k][i]; });
    return out;
  }

  /* options: pointPopup(props, kind) -> Node (extra content under the details),
              blockPopup(props) -> Node, onMapClick(latlng) */
  function PlanMap(container, data, options) {
    options = options || {};
    this.data = data;
    this.options = options;
    var map = this.map = L.map(container, { maxZoom: 22, zoomSnap: 0.5 });
    map.fitBounds(data.bounds, { padding: [20, 20], maxZoom: 19 });
    var renderer = this.renderer = L.svg();
    renderer.addTo(map);
    var self = this;
    var layers = this.layers = {};
    var overlays = [];
    var styleOf = {};
    data.strata.forEach(function (s) { styleOf[s.name] = s; });
    this.readiness = {};

    // Blocks (white, outlined); readiness colours replace the fill when set.
    layers.blocks = L.geoJSON(data.blocks, { renderer: renderer,
      style: function (f) { return self.blockStyle(f); },
      onEachFeature: function (f, layer) {
        layer.bindPopup(function () { return self.blockPopup(f.properties); });
      } }).addTo(map);
    map.createPane("fp-block-labels").style.zIndex = 640;
    map.getPane("fp-block-labels").style.pointerEvents = "none";
    layers.labels = L.geoJSON(data.block_labels, { pointToLayer: function (f, latlng) {
      var span = el("span", f.properties.block);
      if (f.properties.variety) { span.appendChild(el("small", f.properties.variety)); }
      return L.marker(latlng, { interactive: false, keyboard: false, pane: "fp-block-labels",
        icon: L.divIcon({ html: span, className: "fp-block-label", iconSize: null }) });
    } });
    overlays.push(["Blocks", L.layerGroup([layers.blocks, layers.labels]).addTo(map)]);

    layers.exclusions = L.geoJSON(data.exclusions, { renderer: renderer,
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
      layers.exclusions.addTo(map);
      overlays.push(["Exclusions (not sampled)", layers.exclusions]);
    }

    layers.routes = {};
    data.crews.forEach(function (crew) {
      var fc = { type: "FeatureCollection", features: data.routes.features.filter(function (f) {
        return String(f.properties.crew) === crew.name; }) };
      var layer = L.geoJSON(fc, { renderer: renderer, style: function () {
        return { color: crew.colour, weight: 3, opacity: 0.9, dashArray: crew.dash, className: "fp-route" }; },
        onEachFeature: function (f, l) {
          var p = f.properties, parts = ["Crew " + crew.name];
          var n = p.n_points !== undefined ? p.n_points : p.points;
          if (n !== undefined && n !== null) { parts.push(n + " points"); }
          if (p.length_km !== undefined && p.length_km !== null) { parts.push(Number(p.length_km).toFixed(2) + " km"); }
          else if (p.length_m !== undefined && p.length_m !== null) { parts.push((p.length_m / 1000).toFixed(2) + " km"); }
          if (p.hours !== undefined && p.hours !== null) { parts.push("about " + Number(p.hours).toFixed(1) + " h"); }
          l.bindTooltip(el("span", parts.join(" \u00b7 ")), { sticky: true });
        } }).addTo(map);
      layers.routes[crew.name] = layer;
      overlays.push(["Route: crew " + crew.name, layer]);
    });

    // Large plans: every marker drawn on one canvas (same shapes and colours), as map.html does.
    var canvasMode = data.marker_mode === "canvas";
    var canvasRenderer = null;
    if (canvasMode) {
      map.createPane("fp-points").style.zIndex = 450;
      canvasRenderer = L.canvas({ pane: "fp-points", padding: 0.3 });
    }

    function marker(props, latlng, cls, shape, colour, size, kind) {
      var title = String(props.point_id === null || props.point_id === undefined ? "" : props.point_id);
      var m;
      if (canvasMode) {
        m = new ShapeMarker(latlng, { renderer: canvasRenderer, radius: size / 2 - 1, shape: shape,
          fillColor: colour, fillOpacity: 1, color: "#1a1a1a", weight: 1.2, label: title });
      } else {
        var box = el("div");
        box.appendChild(shapeSvg(shape, colour, size));
        box.appendChild(el("span", title, "fp-label"));
        var icon = L.divIcon({ html: box, className: cls, iconSize: [size, size],
          iconAnchor: [size / 2, size / 2], popupAnchor: [0, -size / 2] });
        m = L.marker(latlng, { icon: icon, title: title, keyboard: true, alt: title });
      }
      m.fpProps = props; m.fpKind = kind;
      m.bindPopup(function () {
        var wrap = el("div", null, "fp-popup");
        wrap.appendChild(detailsTable(props));
        if (options.pointPopup) {
          var extra = options.pointPopup(props, kind, m);
          if (extra) { wrap.appendChild(extra); }
        }
        return wrap;
      }, { minWidth: 220 });
      return m;
    }
    function pointLayer(layer, make) {
      var markers = [];
      for (var i = 0; i < layer.n; i++) { markers.push(make(propsAt(layer, i), L.latLng(layer.lat[i], layer.lon[i]))); }
      return L.featureGroup(markers);
    }
    this.markers = {};
    layers.points = pointLayer(data.points, function (props, latlng) {
      var st = styleOf[String(props.stratum)] || { colour: "#bbbbbb", shape: "circle" };
      var cls = "fp-point" + (props.status === "replacement" || props.status === "substitute" ? " fp-stepped-in" : "");
      var m = marker(props, latlng, cls, st.shape, st.colour, 16, "point");
      self.markers[String(props.point_id)] = m;
      return m;
    }).addTo(map);
    overlays.push(["Sample points", layers.points]);
    if (data.spares.n) {
      layers.spares = pointLayer(data.spares, function (props, latlng) {
        var m = marker(props, latlng, "fp-spare", "cross", "#ffffff", 14, "spare");
        self.markers[String(props.point_id)] = m;
        return m;
      });
      overlays.push(["Spare points", layers.spares]);
    }
    if (data.inaccessible.n) {
      layers.inaccessible = pointLayer(data.inaccessible, function (props, latlng) {
        var st = data.inaccessible_style;
        var m = marker(props, latlng, "fp-inaccessible", st.shape, st.colour, 14, "inaccessible");
        self.markers[String(props.point_id)] = m;
        return m;
      }).addTo(map);
      overlays.push(["Inaccessible points (not sampled)", layers.inaccessible]);
    }
    if (data.actual.n) {
      layers.actual = pointLayer(data.actual, function (props, latlng) {
        return marker(props, latlng, "fp-actual", "x", "#111111", 12, "actual");
      }).addTo(map);
      overlays.push(["Recorded positions", layers.actual]);
    }

    var control = L.control.layers(null, null, { collapsed: true, position: "topright" });
    overlays.forEach(function (o) { control.addOverlay(o[1], escapeHtml(o[0])); });
    control.addTo(map);
    L.control.scale({ metric: true, imperial: false, maxWidth: 200 }).addTo(map);

    var Legend = L.Control.extend({ options: { position: "bottomright" }, onAdd: function () {
      var box = el("div", null, "fp-panel fp-legend");
      box.appendChild(el("h2", "Legend"));
      function row(svg, text) {
        var r = el("div", null, "fp-legend-row"); r.appendChild(svg); r.appendChild(el("span", text)); box.appendChild(r);
      }
      data.strata.forEach(function (s) { row(shapeSvg(s.shape, s.colour, 14), "Stratum " + s.name); });
      row(swatch("#ffffff"), "Block (id, variety)");
      if (data.exclusions.features.length) { row(swatch("#bdbdbd", "#555555", "3 2"), "Exclusion (hatched on map)"); }
      if (data.spares.n) { row(shapeSvg("cross", "#ffffff", 14), "Spare point (off by default)"); }
      if (data.inaccessible.n) { row(shapeSvg(data.inaccessible_style.shape, data.inaccessible_style.colour, 14), data.inaccessible_style.legend); }
      if (data.actual.n) { row(shapeSvg("x", "#111111", 12), "Recorded position"); }
      data.crews.forEach(function (crew) {
        var svg = document.createElementNS(SVGNS, "svg"); svg.setAttribute("width", "24"); svg.setAttribute("height", "10");
        var ln = document.createElementNS(SVGNS, "line"); ln.setAttribute("x1", "0"); ln.setAttribute("y1", "5");
        ln.setAttribute("x2", "24"); ln.setAttribute("y2", "5"); ln.setAttribute("stroke", crew.colour);
        ln.setAttribute("stroke-width", "3"); if (crew.dash) { ln.setAttribute("stroke-dasharray", crew.dash); }
        svg.appendChild(ln); row(svg, "Route: crew " + crew.name);
      });
      L.DomEvent.disableClickPropagation(box); L.DomEvent.disableScrollPropagation(box);
      return box;
    } });
    this.legend = new Legend().addTo(map);

    map.on("zoomend", function () {
      var box = map.getContainer();
      if (map.getZoom() >= 18) { L.DomUtil.addClass(box, "fp-show-labels"); } else { L.DomUtil.removeClass(box, "fp-show-labels"); }
    });
    if (options.onMapClick) { map.on("click", function (e) { options.onMapClick(e.latlng); }); }
  }

  PlanMap.prototype.blockStyle = function (f) {
    var r = this.readiness[String(f.properties.block)];
    if (this.readinessOn) {
      var scale = this.readinessScale;
      var fill = r && r.readiness_class !== null && r.readiness_class !== undefined ? scale.colours[r.readiness_class] : scale.none;
      return { color: "#333333", weight: 2, fillColor: fill, fillOpacity: 0.85, className: "fp-block fp-ready-" + (r ? r.readiness_class : "none") };
    }
    return { color: "#333333", weight: 2, fillColor: "#ffffff", fillOpacity: 0.55, className: "fp-block" };
  };

  PlanMap.prototype.blockPopup = function (p) {
    var box = el("div", null, "fp-popup");
    box.appendChild(el("strong", "Block " + (p.block === null ? "" : p.block)));
    if (p.variety) { box.appendChild(el("div", "Variety: " + p.variety)); }
    if (p.stratum) { box.appendChild(el("div", "Stratum: " + p.stratum)); }
    if (p.area_ha !== undefined && p.area_ha !== null) { box.appendChild(el("div", "Area: " + Number(p.area_ha).toFixed(2) + " ha")); }
    if (p.n_points !== undefined && p.n_points !== null) { box.appendChild(el("div", "Points: " + p.n_points)); }
    var r = this.readiness[String(p.block)];
    if (this.readinessOn && r) {
      var t = el("div", null, "fp-ready-popup");
      t.appendChild(el("div", "Mean " + FP.fmt(r.mean, 2) + " (" + FP.fmt(r.lower, 2) + " \u2013 " + FP.fmt(r.upper, 2) + ")"));
      t.appendChild(el("div", "P(reached " + this.readinessTarget + "): " + FP.fmt(r.p_reached, 2)));
      var when = r.target_date ? r.target_date + (r.date_lower ? " (" + r.date_lower + " \u2013 " + r.date_upper + ")" : "") : (r.trend_note || "no projection");
      t.appendChild(el("div", "Projected date: " + when));
      box.appendChild(t);
    } else if (this.readinessOn) {
      box.appendChild(el("div", "No estimate for this block"));
    }
    if (this.options.blockPopup) { var extra = this.options.blockPopup(p); if (extra) { box.appendChild(extra); } }
    return box;
  };

  /* rows: estimates rows by block (with readiness_class); scale: {colours, breaks, none}. */
  PlanMap.prototype.setReadiness = function (rows, scale, target) {
    var self = this;
    this.readiness = {};
    (rows || []).forEach(function (r) { if (r.group !== "all") { self.readiness[String(r.group)] = r; } });
    this.readinessOn = !!rows;
    this.readinessScale = scale;
    this.readinessTarget = target;
    this.layers.blocks.setStyle(function (f) { return self.blockStyle(f); });
    if (this.readyLegend) { this.map.removeControl(this.readyLegend); this.readyLegend = null; }
    if (!rows) { return; }
    var Ready = L.Control.extend({ options: { position: "bottomleft" }, onAdd: function () {
      var box = el("div", null, "fp-panel fp-ready-legend");
      box.appendChild(el("h2", "Readiness: P(mean \u2265 " + target + ")"));
      var edges = [0].concat(scale.breaks).concat([1]);
      scale.colours.forEach(function (c, i) {
        var r = el("div", null, "fp-legend-row");
        r.appendChild(swatch(c));
        r.appendChild(el("span", edges[i].toFixed(1) + " \u2013 " + edges[i + 1].toFixed(1)));
        box.appendChild(r);
      });
      var r = el("div", null, "fp-legend-row");
      r.appendChild(swatch(scale.none)); r.appendChild(el("span", "no estimate")); box.appendChild(r);
      L.DomEvent.disableClickPropagation(box);
      return box;
    } });
    this.readyLegend = new Ready().addTo(this.map);
  };

  PlanMap.prototype.setDropOff = function (latlng) {
    if (this.dropOff) { this.map.removeLayer(this.dropOff); this.dropOff = null; }
    if (!latlng) { return; }
    var box = el("div");
    box.appendChild(shapeSvg("square", "#111111", 18, "#ffffff"));
    this.dropOff = L.marker(latlng, { title: "Drop-off", keyboard: false,
      icon: L.divIcon({ html: box, className: "fp-dropoff", iconSize: [18, 18], iconAnchor: [9, 9] }) }).addTo(this.map);
  };

  PlanMap.prototype.openPoint = function (pointId) {
    var m = this.markers[String(pointId)];
    if (!m) { return false; }
    if (!this.map.hasLayer(m)) {
      // Spares are off by default: switch their layer on to show one.
      if (this.layers.spares && this.layers.spares.hasLayer(m)) { this.layers.spares.addTo(this.map); }
    }
    m.openPopup();
    return true;
  };

  PlanMap.prototype.destroy = function () { this.map.remove(); };

  FP.PlanMap = PlanMap;
})();
