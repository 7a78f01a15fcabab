/* fieldplan crew page: service worker.
 *
 * Scope: one crew's folder, /field/{plan}/{crew}/. It keeps the page, its scripts, Leaflet
 * and the crew's data so the page opens and works with no signal. Only same-origin GET
 * requests are ever looked at or stored: anything else passes by untouched and uncached.
 * Records are not kept here: the page writes them to IndexedDB the moment they are made.
 */
"use strict";

var SCOPE = new URL(self.registration.scope);
var TOKEN = new URL(self.location.href).searchParams.get("t") || "";
var PARTS = SCOPE.pathname.split("/");
var PLAN = PARTS[2], CREW = PARTS[3];
var CACHE = "fieldplan-crew-v1:" + PLAN + ":" + CREW;
var STATIC = [
  "/field/static/crew.css",
  "/field/static/fieldcore.js",
  "/field/static/crew.js",
  "/field/static/icon-192.png",
  "/field/static/leaflet/leaflet.js",
  "/field/static/leaflet/leaflet.css",
];
var PAGE = SCOPE.pathname + "?t=" + TOKEN;
var DATA = "/api/field/" + PLAN + "/" + CREW + "/data?t=" + TOKEN;
var MANIFEST = SCOPE.pathname + "manifest.webmanifest?t=" + TOKEN;

function sameOrigin(url) {
  return new URL(url, self.location.href).origin === self.location.origin;
}

self.addEventListener("install", function (event) {
  event.waitUntil(
    caches.open(CACHE).then(function (cache) {
      return cache.addAll([PAGE, DATA, MANIFEST].concat(STATIC).filter(sameOrigin));
    }).then(function () { return self.skipWaiting(); })
  );
});

self.addEventListener("activate", function (event) {
  event.waitUntil(self.clients.claim());
});

function keep(request, response) {
  if (response && response.ok && response.type === "basic" && sameOrigin(request.url)) {
    var copy = response.clone();
    caches.open(CACHE).then(function (cache) { cache.put(request, copy); });
  }
  return response;
}

function fromCache(request, ignoreSearch) {
  return caches.open(CACHE).then(function (cache) {
    return cache.match(request, { ignoreSearch: ignoreSearch });
  });
}

self.addEventListener("fetch", function (event) {
  var request = event.request;
  if (request.method !== "GET" || !sameOrigin(request.url)) return;
  var url = new URL(request.url);
  if (url.pathname.indexOf("/field/static/") === 0) {
    // Scripts and styles: the kept copy at once, refreshed in the background when there is a
    // signal, so a new fieldplan version reaches the phone on the next opening.
    event.respondWith(fromCache(request, false).then(function (hit) {
      var fresh = fetch(request).then(function (r) { return keep(request, r); });
      if (hit) {
        event.waitUntil(fresh.catch(function () { return null; }));
        return hit;
      }
      return fresh;
    }));
    return;
  }
  var navigation = request.mode === "navigate";
  if (navigation || url.pathname.indexOf("/api/field/") === 0 || url.pathname.indexOf(SCOPE.pathname) === 0) {
    // The page and the crew's data: fresh when there is a signal, the kept copy when not.
    event.respondWith(fetch(request).then(function (r) { return keep(request, r); }).catch(function () {
      return fromCache(request, false).then(function (hit) {
        return hit || fromCache(navigation ? PAGE : request, navigation).then(function (again) {
          return again || new Response("Offline and not kept on this phone yet.", {
            status: 503, headers: { "content-type": "text/plain; charset=utf-8" },
          });
        });
      });
    }));
  }
});
