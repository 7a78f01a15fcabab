/* fieldplan crew page: navigate to the next point, record it, keep everything on the phone,
 * sync when there is a signal. Records go to IndexedDB before anything else is done with
 * them; each carries a UUID made here, so the server stores it once however often it is sent.
 */
(function () {
  "use strict";
  var FC = window.FieldCore;
  var parts = location.pathname.split("/");
  var PLAN = decodeURIComponent(parts[2] || ""), CREW = parseInt(parts[3] || "0", 10);
  var KEY = PLAN + "/" + CREW;
  var query = new URLSearchParams(location.search);
  var TOKEN = query.get("t") || localStorage.getItem("fieldplan-token:" + KEY) || "";
  if (query.get("t")) localStorage.setItem("fieldplan-token:" + KEY, query.get("t"));
  var API = "/api/field/" + encodeURIComponent(PLAN) + "/" + CREW;

  var state = { data: null, records: [], fix: null, target: null, armedOffset: false, syncing: false };
  var $ = function (id) { return document.getElementById(id); };

  /* ---------- storage: IndexedDB, one database per origin, records keyed by UUID ---------- */
  var dbPromise = new Promise(function (resolve, reject) {
    var req = indexedDB.open("fieldplan-crew", 1);
    req.onupgradeneeded = function () {
      var db = req.result;
      if (!db.objectStoreNames.contains("records")) db.createObjectStore("records", { keyPath: "id" });
      if (!db.objectStoreNames.contains("meta")) db.createObjectStore("meta", { keyPath: "key" });
    };
    req.onsuccess = function () { resolve(req.result); };
    req.onerror = function () { reject(req.error); };
  });

  function tx(store, mode, work) {
    return dbPromise.then(function (db) {
      return new Promise(function (resolve, reject) {
        var t = db.transaction(store, mode), out;
        out = work(t.objectStore(store));
        t.oncomplete = function () { resolve(out && "result" in out ? out.result : out); };
        t.onerror = function () { reject(t.error); };
        t.onabort = function () { reject(t.error || new Error("storage refused the record")); };
      });
    });
  }
  function putRecord(r) { return tx("records", "readwrite", function (s) { return s.put(r); }); }
  function allRecords() {
    return tx("records", "readonly", function (s) { return s.getAll(); }).then(function (rows) {
      return (rows || []).filter(function (r) { return r.plan === PLAN && r.crew === CREW; })
        .sort(function (a, b) { return a.time_utc < b.time_utc ? -1 : a.time_utc > b.time_utc ? 1 : 0; });
    });
  }
  function putMeta(key, value) { return tx("meta", "readwrite", function (s) { return s.put({ key: key, value: value }); }); }
  function getMeta(key) {
    return tx("meta", "readonly", function (s) { return s.get(key); }).then(function (row) { return row ? row.value : null; });
  }

  /* ---------- small helpers ---------- */
  function say(text, ok) {
    var m = $("message");
    m.textContent = text;
    m.className = ok ? "ok" : "";
    m.hidden = !text;
  }
  function show(id) {
    ["taken-form", "unreachable-form", "offer", "records", "cautions"].forEach(function (s) { $(s).hidden = s !== id; });
  }
  function localDate(d) {
    var z = function (n) { return (n < 10 ? "0" : "") + n; };
    return d.getFullYear() + "-" + z(d.getMonth() + 1) + "-" + z(d.getDate());
  }
  function metres(m) { return m >= 1000 ? (m / 1000).toFixed(2) + " km" : Math.round(m) + " m"; }
  function pointById(id) {
    var pts = (state.data && state.data.points) || [];
    for (var i = 0; i < pts.length; i++) if (pts[i].point_id === id) return pts[i];
    return null;
  }
  function doneSet() {
    var done = {};
    ((state.data && state.data.recorded) || []).forEach(function (p) { done[p] = true; });
    state.records.forEach(function (r) { if (!r.problem) done[r.point_id] = true; });
    return done;
  }

  /* ---------- map ---------- */
  var map = null, layers = {};
  function drawMap(keepView) {
    var d = state.data;
    if (!window.L || !d) return;
    if (!map) {
      map = L.map("map", { zoomControl: true, attributionControl: false });
      L.control.scale({ imperial: false }).addTo(map);
      layers.blocks = L.layerGroup().addTo(map);
      layers.route = L.layerGroup().addTo(map);
      layers.points = L.layerGroup().addTo(map);
      layers.me = L.layerGroup().addTo(map);
    }
    layers.blocks.clearLayers();
    layers.route.clearLayers();
    var bounds = [];
    d.blocks.forEach(function (b) {
      b.rings.forEach(function (ring) {
        var ll = ring.map(function (c) { return [c[1], c[0]]; });
        bounds = bounds.concat(ll);
        L.polyline(ll, { color: "#000", weight: 3 }).addTo(layers.blocks);
      });
    });
    if (d.route.length > 1) {
      L.polyline(d.route.map(function (c) { return [c[1], c[0]]; }), { color: "#0a4fa6", weight: 4, dashArray: "8 6" })
        .addTo(layers.route);
    }
    d.points.forEach(function (p) { bounds.push([p.lat, p.lon]); });
    if (keepView) { /* a refresh while walking keeps the crew's view */ }
    else if (bounds.length) map.fitBounds(bounds, { padding: [18, 18] });
    else map.setView([0, 0], 2);
    drawPoints();
  }
  function drawPoints() {
    if (!map || !state.data) return;
    layers.points.clearLayers();
    var done = doneSet();
    state.data.points.forEach(function (p) {
      var cls = "fp-pt" + (p.status === "inaccessible" ? " off" : done[p.point_id] ? " done" : "") +
        (state.target && state.target.point_id === p.point_id ? " next" : "");
      var icon = L.divIcon({ className: cls, html: String(p.n), iconSize: [26, 26] });
      var m = L.marker([p.lat, p.lon], { icon: icon, title: p.point_id, keyboard: false });
      m.on("click", function () { state.target = p; update(); });
      m.addTo(layers.points);
    });
  }
  function drawMe() {
    if (!map || !state.fix) return;
    layers.me.clearLayers();
    var c = state.fix.coords, ll = [c.latitude, c.longitude];
    L.circle(ll, { radius: c.accuracy, color: "#0a4fa6", weight: 2, fillOpacity: 0.12 }).addTo(layers.me);
    L.circleMarker(ll, { radius: 8, color: "#000", weight: 3, fillColor: "#0a4fa6", fillOpacity: 1 }).addTo(layers.me);
  }

  /* ---------- navigation ---------- */
  function pickTarget() {
    var done = doneSet();
    if (state.target && !done[state.target.point_id] && state.target.status !== "inaccessible") return state.target;
    state.target = FC.nextPoint(state.data.points, done);
    return state.target;
  }
  function update() {
    if (!state.data) return;
    var done = doneSet(), left = 0, did = 0;
    state.data.points.forEach(function (p) {
      if (p.status === "inaccessible" || done[p.point_id]) did++;
      else left++;
    });
    $("done-count").textContent = did;
    $("left-count").textContent = left;
    $("unsynced-count").textContent = state.records.filter(function (r) { return !r.synced; }).length;
    var t = pickTarget();
    var arrow = $("arrow");
    if (!t) {
      $("next-id").textContent = "none: all done";
      $("distance").textContent = "\u2713";
      $("bearing").textContent = "";
      $("next-where").textContent = "Sync, then head back.";
      arrow.classList.add("none");
    } else {
      $("next-id").textContent = "#" + t.n + " " + t.point_id;
      var where = $("next-where");
      where.textContent = "Block " + t.block + (t.row ? ", row " + t.row : "") + (t.plant ? ", plant " + t.plant : "");
      if (t.sample_id) {
        var bag = document.createElement("span");
        bag.className = "bag";
        bag.textContent = "bag " + t.sample_id;
        where.appendChild(document.createTextNode(" \u00b7 "));
        where.appendChild(bag);
      }
      if (state.fix) {
        var c = state.fix.coords, g = FC.inverse(c.latitude, c.longitude, t.lat, t.lon);
        $("distance").textContent = metres(g.distance);
        $("distance").dataset.metres = g.distance.toFixed(3);
        $("bearing").textContent = Math.round(g.azimuth) % 360 + "\u00b0 " + FC.compassName(g.azimuth);
        $("bearing").dataset.degrees = g.azimuth.toFixed(3);
        var heading = c.heading, moving = heading !== null && heading === heading && (c.speed || 0) > 0.5;
        var turn = moving ? g.azimuth - heading : g.azimuth;
        arrow.style.transform = "rotate(" + turn.toFixed(1) + "deg)";
        $("arrow-mode").textContent = moving ? "(ahead is up)" : "(north is up)";
        arrow.classList.remove("none");
      } else {
        $("distance").textContent = "\u2013";
        $("bearing").textContent = "waiting for position";
        arrow.classList.add("none");
      }
    }
    if (state.fix) {
      $("accuracy").textContent = "\u00b1" + Math.round(state.fix.coords.accuracy) + " m";
    }
    drawPoints();
  }
  function onFix(pos) { state.fix = pos; drawMe(); update(); }
  function freshFix() {
    // The watch keeps the fix current while the page is open; ask again only if it is stale.
    if (state.fix && Date.now() - state.fix.timestamp < 5000) return Promise.resolve(state.fix);
    return new Promise(function (resolve) {
      if (!navigator.geolocation) return resolve(state.fix);
      navigator.geolocation.getCurrentPosition(function (p) { onFix(p); resolve(p); },
        function () { resolve(state.fix); }, { enableHighAccuracy: true, maximumAge: 2000, timeout: 5000 });
    });
  }

  /* ---------- recording ---------- */
  function baseRecord(kind, point, fix) {
    var now = new Date();
    var r = {
      id: FC.uuid4(), plan: PLAN, crew: CREW, kind: kind, point_id: point.point_id,
      time_utc: now.toISOString().replace(/\.\d{3}Z$/, "Z"), date: localDate(now),
      lon: null, lat: null, accuracy_m: null, synced: false,
    };
    if (fix) {
      r.lon = +fix.coords.longitude.toFixed(7);
      r.lat = +fix.coords.latitude.toFixed(7);
      r.accuracy_m = Math.round(fix.coords.accuracy * 10) / 10;
    }
    return r;
  }
  function openTaken() {
    var t = pickTarget();
    if (!t) return say("No point left to sample.");
    state.armedOffset = false;
    $("btn-save-taken").textContent = "Save";
    document.querySelectorAll(".point-here").forEach(function (e) { e.textContent = "#" + t.n + " " + t.point_id; });
    $("sample-id").value = "";
    $("sample-id").placeholder = t.sample_id ? t.sample_id.slice(0, 5) + "\u2026" : "";
    $("value").value = "";
    $("note").value = "";
    $("taken-problem").hidden = true;
    $("offset-warning").hidden = true;
    var v = state.data.variable;
    $("value-row").hidden = !v;
    $("variable-label").textContent = v ? v.toUpperCase() : "Value";
    show("taken-form");
    $("sample-id").focus();
  }
  function saveTaken() {
    var t = pickTarget();
    if (!t) return;
    var typed = $("sample-id").value, problem = FC.bagProblem(typed, t.sample_id, t.labels);
    var raw = $("value").value.trim(), value = raw === "" ? null : Number(raw.replace(",", "."));
    var v = state.data.variable, lim = state.data.ranges[v];
    if (!problem && raw !== "" && !isFinite(value)) problem = "The value is not a number.";
    if (!problem && value !== null && lim && (value < lim[0] || value > lim[1])) {
      problem = v + " " + value + " is outside " + lim[0] + "\u2013" + lim[1] + ": check the reading.";
    }
    if (problem) { $("taken-problem").textContent = problem; $("taken-problem").hidden = false; return; }
    $("taken-problem").hidden = true;
    freshFix().then(function (fix) {
      var r = baseRecord("taken", t, fix);
      r.sample_id = FC.normaliseId(typed).length ? typed.trim().toUpperCase() : "";
      r.variable = value === null ? "" : v;
      r.value = value;
      r.note = $("note").value.trim();
      if (fix) {
        var off = FC.inverse(fix.coords.latitude, fix.coords.longitude, t.lat, t.lon).distance;
        r.offset_m = Math.round(off * 10) / 10;
        if (off > state.data.max_offset_m && !state.armedOffset) {
          state.armedOffset = true;
          $("offset-warning").textContent = "You are " + Math.round(off) + " m from the planned spot (limit " +
            state.data.max_offset_m + " m). Walk closer, or tap Save anyway.";
          $("offset-warning").hidden = false;
          $("btn-save-taken").textContent = "Save anyway";
          return;
        }
      } else {
        r.note = (r.note ? r.note + "; " : "") + "no position";
      }
      return keepRecord(r).then(function () {
        show(null);
        say("Saved on this phone: " + t.point_id + (r.offset_m > state.data.max_offset_m ? " (far from the spot)" : ""), true);
      });
    });
  }
  function openUnreachable() {
    var t = pickTarget();
    if (!t) return say("No point left.");
    document.querySelectorAll(".point-here").forEach(function (e) { e.textContent = "#" + t.n + " " + t.point_id; });
    $("reason-text").value = "";
    $("unreachable-problem").hidden = true;
    show("unreachable-form");
  }
  function saveUnreachable() {
    var t = pickTarget();
    if (!t) return;
    var reason = $("reason").value;
    if (!reason) { $("unreachable-problem").textContent = "Choose a reason."; $("unreachable-problem").hidden = false; return; }
    freshFix().then(function (fix) {
      var r = baseRecord("unreachable", t, fix);
      r.reason = reason;
      r.note = $("reason-text").value.trim();
      return keepRecord(r).then(function () {
        var o = t.offer;
        if (o && o.replacement_id) {
          state.offer = o;
          var where = "";
          if (state.fix && o.lat !== null) {
            var g = FC.inverse(state.fix.coords.latitude, state.fix.coords.longitude, o.lat, o.lon);
            where = ", " + metres(g.distance) + " at " + Math.round(g.azimuth) + "\u00b0 " + FC.compassName(g.azimuth);
          }
          $("offer-text").textContent = "Sample " + o.kind + " " + o.replacement_id + where +
            " instead, as the plan's rule picks it. The office confirms it at the next sync.";
          $("btn-offer-go").hidden = false;
        } else {
          state.offer = null;
          $("offer-text").textContent = "No spare or substitute is left for this point: go on with the next one.";
          $("btn-offer-go").hidden = true;
        }
        show("offer");
      });
    });
  }
  function goToOffer() {
    var o = state.offer;
    if (!o) return show(null);
    var p = pointById(o.replacement_id);
    if (!p) {
      p = { n: "+", point_id: o.replacement_id, block: (state.target && state.target.block) || "", sample_id: o.sample_id || "",
        labels: o.labels || [], status: o.kind, lon: o.lon, lat: o.lat, offer: null };
      var at = state.data.points.indexOf(state.target);
      state.data.points.splice(at < 0 ? state.data.points.length : at + 1, 0, p);
      putMeta("data:" + KEY, state.data);
    }
    state.target = p;
    show(null);
    update();
  }
  function keepRecord(r) {
    return putRecord(r).then(function () {
      state.records.push(r);
      state.target = null;
      update();
      if (navigator.onLine) sync(true);
    }).catch(function (err) {
      say("Could not keep the record on this phone (" + err + "). Write it on paper.");
      throw err;
    });
  }

  /* ---------- sync and export ---------- */
  function setOnline() {
    var pill = $("sync-state"), on = navigator.onLine;
    pill.textContent = on ? "Online" : "Offline: records stay on this phone";
    pill.className = "pill " + (on ? "online" : "offline");
  }
  function sync(quiet) {
    if (state.syncing) return Promise.resolve();
    var todo = state.records.filter(function (r) { return !r.synced; });
    if (!todo.length) { if (!quiet) say("Nothing to sync: every record is on the server.", true); return Promise.resolve(); }
    state.syncing = true;
    var body = JSON.stringify({ records: todo.map(function (r) {
      return { id: r.id, kind: r.kind, point_id: r.point_id, time_utc: r.time_utc, date: r.date, lon: r.lon,
        lat: r.lat, accuracy_m: r.accuracy_m, sample_id: r.sample_id || "", variable: r.variable || "",
        value: r.value === undefined ? null : r.value, note: r.note || "", reason: r.reason || "" };
    }) });
    return fetch(API + "/records", {
      method: "POST", headers: { "content-type": "application/json", "x-crew-token": TOKEN }, body: body,
    }).then(function (resp) {
      return resp.json().then(function (answer) {
        if (!resp.ok) throw new Error(answer.error || answer.detail || resp.status);
        return answer;
      });
    }).then(function (answer) {
      var got = {};
      (answer.stored || []).concat(answer.duplicates || []).forEach(function (id) { got[id] = ""; });
      Object.keys(answer.refused || {}).forEach(function (id) { got[id] = answer.refused[id]; });
      var writes = todo.filter(function (r) { return r.id in got; }).map(function (r) {
        r.synced = true;
        r.synced_utc = new Date().toISOString();
        if (got[r.id]) r.problem = got[r.id];
        return putRecord(r);
      });
      return Promise.all(writes).then(function () {
        var refused = Object.keys(answer.refused || {}).length;
        var msg = "Synced: " + (answer.stored || []).length + " new, " + (answer.duplicates || []).length +
          " already there" + (refused ? ", " + refused + " not taken by the plan (see Records)" : "") + ".";
        (answer.events || []).forEach(function (e) {
          if (e.replacement_id) msg += " " + e.point_id + " \u2192 " + e.replacement_id + ".";
        });
        var far = (answer.positions || []).filter(function (p) { return p.beyond_max_offset; });
        if (far.length) {
          msg += " " + far.length + " sample(s) more than " + state.data.max_offset_m + " m from the planned spot: " +
            far.map(function (p) { return p.point_id + " (" + Math.round(p.offset_m) + " m)"; }).join(", ") + ".";
        }
        if ((answer.conflicts || []).length) msg += " " + answer.conflicts.length + " conflict(s) for the office.";
        say(msg, !refused);
        update();
        // The plan may have changed (a spare brought in, another crew's records): fetch it again.
        if ((answer.stored || []).length) {
          return loadData().then(function (data) {
            var keep = state.target && state.target.point_id;
            state.data = data;
            state.target = keep ? pointById(keep) : null;
            drawMap(true);
            update();
          }).catch(function () { /* the kept copy stays in use */ });
        }
      });
    }).catch(function (err) {
      if (!quiet) say("Not synced (" + (navigator.onLine ? err.message || err : "no signal") + "). Records stay on this phone.");
    }).then(function () { state.syncing = false; });
  }
  function exportRecords() {
    var doc = { format: "fieldplan-records", version: 1, plan: PLAN, crew: CREW,
      exported_utc: new Date().toISOString(), records: state.records };
    var blob = new Blob([JSON.stringify(doc, null, 1)], { type: "application/json" });
    var a = $("download");
    a.href = URL.createObjectURL(blob);
    a.download = "fieldplan-" + PLAN + "-crew" + CREW + "-records.json";
    a.click();
    say("Saved " + state.records.length + " records to a file: apply it with 'fieldplan field-records " + PLAN + " FILE'.", true);
  }
  function listRecords() {
    var ol = $("record-list");
    ol.textContent = "";
    state.records.forEach(function (r) {
      var li = document.createElement("li");
      var s = document.createElement("span");
      s.className = "state";
      s.textContent = r.problem ? "refused: " + r.problem : r.synced ? "synced" : "on phone";
      li.textContent = r.time_utc.slice(11, 16) + " " + r.point_id + " " + (r.kind === "taken" ? "taken" + (r.value !== null &&
        r.value !== undefined ? " " + r.variable + " " + r.value : "") : "can't reach: " + r.reason) + " \u00b7 ";
      li.appendChild(s);
      ol.appendChild(li);
    });
    show("records");
  }

  /* ---------- scanning the bag's QR code, where the browser can ---------- */
  var scanning = null;
  function scan() {
    if (scanning) return stopScan();
    var video = $("scan-video"), detector = new window.BarcodeDetector({ formats: ["qr_code"] });
    navigator.mediaDevices.getUserMedia({ video: { facingMode: "environment" } }).then(function (stream) {
      scanning = stream;
      video.srcObject = stream;
      video.hidden = false;
      video.play();
      var tick = function () {
        if (!scanning) return;
        detector.detect(video).then(function (codes) {
          if (codes.length) { $("sample-id").value = codes[0].rawValue; stopScan(); }
          else setTimeout(tick, 250);
        }).catch(function () { setTimeout(tick, 400); });
      };
      tick();
    }).catch(function (err) { say("Camera not available (" + err.name + "): type the id."); });
  }
  function stopScan() {
    if (scanning) scanning.getTracks().forEach(function (t) { t.stop(); });
    scanning = null;
    $("scan-video").hidden = true;
  }

  /* ---------- start ---------- */
  function render(data) {
    state.data = data;
    document.title = data.plan + ": crew " + data.crew;
    $("title").textContent = data.plan + " \u00b7 crew " + data.crew;
    var sel = $("reason");
    sel.textContent = "";
    [""].concat(data.reasons).forEach(function (r) {
      var o = document.createElement("option");
      o.value = r;
      o.textContent = r || "Choose\u2026";
      sel.appendChild(o);
    });
    var ul = $("caution-list");
    ul.textContent = "";
    data.cautions.forEach(function (c) {
      var li = document.createElement("li");
      li.textContent = c;
      ul.appendChild(li);
    });
    drawMap();
    update();
    if ((data.conflicts || []).length) {
      say("The office has " + data.conflicts.length + " open question(s) on this crew's points: " +
        data.conflicts.map(function (c) { return c.point_id + " (" + c.kind + ")"; }).join(", ") + ".");
    }
  }
  function loadData() {
    return fetch(API + "/data?t=" + encodeURIComponent(TOKEN)).then(function (resp) {
      if (!resp.ok) {
        return resp.json().catch(function () { return {}; }).then(function (e) {
          var err = new Error(e.error || e.detail || "HTTP " + resp.status);
          err.status = resp.status;
          throw err;
        });
      }
      return resp.json();
    }).then(function (data) {
      return putMeta("data:" + KEY, data).then(function () { return data; });
    }).catch(function (err) {
      if (err.status === 403) { say(err.message); throw err; }
      return getMeta("data:" + KEY).then(function (data) {
        if (!data) { say("No signal and this phone has not opened the crew link before."); throw err; }
        return data;
      });
    });
  }

  function bind(id, fn) { $(id).addEventListener("click", fn); }
  bind("btn-taken", openTaken);
  bind("btn-save-taken", saveTaken);
  bind("btn-cancel-taken", function () { stopScan(); show(null); });
  bind("btn-unreachable", openUnreachable);
  bind("btn-save-unreachable", saveUnreachable);
  bind("btn-cancel-unreachable", function () { show(null); });
  bind("btn-offer-go", goToOffer);
  bind("btn-offer-close", function () { show(null); });
  bind("btn-sync", function () { sync(false); });
  bind("btn-export", exportRecords);
  bind("btn-list", listRecords);
  bind("btn-records-close", function () { show(null); });
  bind("btn-cautions", function () { show("cautions"); });
  bind("btn-cautions-close", function () { show(null); putMeta("cautions-seen:" + KEY, true); });
  bind("btn-scan", scan);
  if ("BarcodeDetector" in window && navigator.mediaDevices) $("btn-scan").hidden = false;
  window.addEventListener("online", function () { setOnline(); sync(true); });
  window.addEventListener("offline", setOnline);
  setOnline();

  var manifest = document.createElement("link");
  manifest.rel = "manifest";
  manifest.href = "manifest.webmanifest?t=" + encodeURIComponent(TOKEN);
  document.head.appendChild(manifest);
  if ("serviceWorker" in navigator) {
    window.fieldplanWorker = navigator.serviceWorker.register("sw.js?t=" + encodeURIComponent(TOKEN))
      .then(function () { return navigator.serviceWorker.ready; })
      .catch(function (err) { say("Offline use is not available in this browser (" + err.message + ")."); });
  }
  if (navigator.storage && navigator.storage.persist) navigator.storage.persist();

  window.fieldplanCrew = { state: state, sync: sync, ready: null };
  window.fieldplanCrew.ready = Promise.all([allRecords(), loadData()]).then(function (got) {
    state.records = got[0];
    render(got[1]);
    return getMeta("cautions-seen:" + KEY);
  }).then(function (seen) {
    if (!seen) show("cautions");
    if (navigator.geolocation) {
      navigator.geolocation.watchPosition(onFix, function (err) {
        $("accuracy").textContent = "no position (" + err.message + ")";
      }, { enableHighAccuracy: true, maximumAge: 5000, timeout: 30000 });
    }
    setInterval(function () { if (navigator.onLine) sync(true); }, 60000);
    return true;
  });
})();
