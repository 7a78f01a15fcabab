/* fieldplan marker shapes: one definition of the stratum symbols, shared by a plan folder's
 * map.html (inlined before the map kit) and the workspace's plan map (/static/map/shapes.js),
 * so the two can never draw a stratum differently. Defines the global `fieldplanShapes`:
 *
 *   SHAPE_POINTS   marker outlines as polygons in a unit box (-1..1, y down)
 *   STRIKE         the two strokes of the struck-through "circle-x" marker
 *   shapeSvg(shape, fill, size, stroke)   one marker as an inline SVG element
 */
var fieldplanShapes = (function () {
  "use strict";
  var SVGNS = "http://www.w3.org/2000/svg";

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

  return { SHAPE_POINTS: SHAPE_POINTS, STRIKE: STRIKE, shapeSvg: shapeSvg };
})();
