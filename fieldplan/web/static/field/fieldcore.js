/* fieldplan crew page: pure functions (no page, no storage), shared with the tests.
 *
 * - Sample ids: the check character of fieldplan/samples/ids.py (31-character alphabet,
 *   radix 3, sum(a_i * 3^(k-i)) + c == 1 mod 31), so a mistyped label is refused offline.
 * - Distance and bearing: Vincenty's inverse formula on the WGS84 ellipsoid (Vincenty 1975,
 *   Survey Review 23(176)); sub-millimetre for points a field apart.
 */
(function (root) {
  "use strict";

  var ALPHABET = "23456789ABCDEFGHJKMNPQRSTUVWXYZ";
  var RADIX = 3;

  function normaliseId(text) {
    return String(text || "").replace(/[\s-]+/g, "").toUpperCase();
  }

  function checkChar(payload) {
    var p = ALPHABET.length, total = 0;
    for (var i = 0; i < payload.length; i++) {
      var v = ALPHABET.indexOf(payload.charAt(i));
      if (v < 0) return null;
      total = ((total + v) * RADIX) % p;
    }
    return ALPHABET.charAt((((1 - total) % p) + p) % p);
  }

  function isValidId(text) {
    var t = normaliseId(text);
    if (t.length < 2) return false;
    var c = checkChar(t.slice(0, -1));
    return c !== null && c === t.charAt(t.length - 1);
  }

  /* Why `typed` is not the bag of a point planned with `planned` ("" when it is); `labels`
   * adds the point's ids of later label rounds (normalised), as the server accepts them. */
  function bagProblem(typed, planned, labels) {
    if (!planned) return "";
    var t = normaliseId(typed);
    if (!t) return "Type or scan the bag's sample id.";
    if (!isValidId(typed)) return "Check character wrong: read the label again.";
    if (t !== normaliseId(planned) && (labels || []).indexOf(t) < 0) {
      return "Wrong bag: this point's bag is " + planned + ".";
    }
    return "";
  }

  var A = 6378137.0, F = 1 / 298.257223563, B = A * (1 - F);
  var RAD = Math.PI / 180;

  /* Geodesic distance (m) and initial azimuth (degrees from north, clockwise) from 1 to 2. */
  function inverse(lat1, lon1, lat2, lon2) {
    var L = (lon2 - lon1) * RAD;
    var U1 = Math.atan((1 - F) * Math.tan(lat1 * RAD));
    var U2 = Math.atan((1 - F) * Math.tan(lat2 * RAD));
    var sinU1 = Math.sin(U1), cosU1 = Math.cos(U1), sinU2 = Math.sin(U2), cosU2 = Math.cos(U2);
    var lambda = L, prev, iter = 0;
    var sinSigma, cosSigma, sigma, cosSqAlpha, cos2SigmaM, sinLambda, cosLambda;
    do {
      sinLambda = Math.sin(lambda);
      cosLambda = Math.cos(lambda);
      var a = cosU2 * sinLambda, b = cosU1 * sinU2 - sinU1 * cosU2 * cosLambda;
      sinSigma = Math.sqrt(a * a + b * b);
      if (sinSigma === 0) return { distance: 0, azimuth: 0 };
      cosSigma = sinU1 * sinU2 + cosU1 * cosU2 * cosLambda;
      sigma = Math.atan2(sinSigma, cosSigma);
      var sinAlpha = (cosU1 * cosU2 * sinLambda) / sinSigma;
      cosSqAlpha = 1 - sinAlpha * sinAlpha;
      cos2SigmaM = cosSqAlpha !== 0 ? cosSigma - (2 * sinU1 * sinU2) / cosSqAlpha : 0;
      var C = (F / 16) * cosSqAlpha * (4 + F * (4 - 3 * cosSqAlpha));
      prev = lambda;
      lambda = L + (1 - C) * F * sinAlpha *
        (sigma + C * sinSigma * (cos2SigmaM + C * cosSigma * (-1 + 2 * cos2SigmaM * cos2SigmaM)));
    } while (Math.abs(lambda - prev) > 1e-12 && ++iter < 200);
    var uSq = (cosSqAlpha * (A * A - B * B)) / (B * B);
    var AA = 1 + (uSq / 16384) * (4096 + uSq * (-768 + uSq * (320 - 175 * uSq)));
    var BB = (uSq / 1024) * (256 + uSq * (-128 + uSq * (74 - 47 * uSq)));
    var dSigma = BB * sinSigma * (cos2SigmaM + (BB / 4) * (cosSigma * (-1 + 2 * cos2SigmaM * cos2SigmaM) -
      (BB / 6) * cos2SigmaM * (-3 + 4 * sinSigma * sinSigma) * (-3 + 4 * cos2SigmaM * cos2SigmaM)));
    var distance = B * AA * (sigma - dSigma);
    var az = Math.atan2(cosU2 * sinLambda, cosU1 * sinU2 - sinU1 * cosU2 * cosLambda) / RAD;
    return { distance: distance, azimuth: (az + 360) % 360 };
  }

  var POINTS16 = ["N", "NNE", "NE", "ENE", "E", "ESE", "SE", "SSE", "S", "SSW", "SW", "WSW", "W", "WNW", "NW", "NNW"];

  function compassName(deg) {
    return POINTS16[Math.round((((deg % 360) + 360) % 360) / 22.5) % 16];
  }

  /* First point in visit order that is neither recorded nor inaccessible (null when all are). */
  function nextPoint(points, done) {
    for (var i = 0; i < points.length; i++) {
      var p = points[i];
      if (p.status === "inaccessible" || done[p.point_id]) continue;
      return p;
    }
    return null;
  }

  function uuid4() {
    if (root.crypto && root.crypto.randomUUID) return root.crypto.randomUUID();
    var b = new Uint8Array(16);
    root.crypto.getRandomValues(b);
    b[6] = (b[6] & 0x0f) | 0x40;
    b[8] = (b[8] & 0x3f) | 0x80;
    var h = Array.prototype.map.call(b, function (x) { return (x + 0x100).toString(16).slice(1); }).join("");
    return h.slice(0, 8) + "-" + h.slice(8, 12) + "-" + h.slice(12, 16) + "-" + h.slice(16, 20) + "-" + h.slice(20);
  }

  var api = {
    ALPHABET: ALPHABET, normaliseId: normaliseId, checkChar: checkChar, isValidId: isValidId,
    bagProblem: bagProblem, inverse: inverse, compassName: compassName, nextPoint: nextPoint, uuid4: uuid4,
  };
  root.FieldCore = api;
  if (typeof module !== "undefined" && module.exports) module.exports = api;
})(typeof self !== "undefined" ? self : this);
