/* Plan page: map, coverage, crews, results, estimates and readiness, downloads, marking points. */
(function () {
  "use strict";
  var FP = window.FP, el = FP.el;
  var root = document.getElementById("plan-page");
  var name = root.getAttribute("data-plan");
  var base = "/api/plans/" + encodeURIComponent(name);
  var state = { detail: null, map: null, picking: false, dropOff: null, readiness: null, stepIn: null };
  var pageMsg = document.getElementById("page-msg");

  var REASONS = ["flooded or waterlogged", "gate locked / no access", "crop or trellis in the way",
    "unsafe (machinery, spraying, animals)", "point outside the crop", "other"];

  function pointPopup(props, kind) {
    var box = el("div", null, "fp-mark");
    if (kind === "point") {
      var form = el("form", null, "fp-mark-form");
      form.appendChild(el("h3", "Cannot be sampled?"));
      var sel = el("select", null, null, { name: "reason", "aria-label": "Reason" });
      REASONS.forEach(function (r) { sel.appendChild(el("option", r, null, { value: r })); });
      var lab = el("label", "Reason "); lab.appendChild(sel); form.appendChild(lab);
      var more = el("input", null, null, { name: "detail", placeholder: "details (optional)", maxlength: "300" });
      form.appendChild(more);
      var who = el("input", null, null, { name: "by", placeholder: "your name", maxlength: "100" });
      who.value = window.localStorage ? (localStorage.getItem("fp-who") || "") : "";
      form.appendChild(who);
      form.appendChild(el("button", "Mark inaccessible", "fp-danger", { type: "submit" }));
      form.addEventListener("submit", function (e) {
        e.preventDefault();
        var reason = sel.value + (more.value.trim() ? ": " + more.value.trim() : "");
        if (window.localStorage && who.value.trim()) { localStorage.setItem("fp-who", who.value.trim()); }
        markPoint(props.point_id, "inaccessible", reason, who.value.trim());
      });
      box.appendChild(form);
    } else if (kind === "inaccessible") {
      var b = el("button", "Restore this point", null, { type: "button" });
      b.addEventListener("click", function () { markPoint(props.point_id, "restore", "restored from the workspace", ""); });
      box.appendChild(b);
    }
    return box;
  }

  function markPoint(pointId, action, reason, by) {
    FP.api("POST", base + "/marks", { point_ids: [pointId], action: action, reason: reason, by: by || null })
      .then(function (res) {
        var ev = res.events[0] || {};
        var text;
        if (action === "inaccessible") {
          text = pointId + " marked inaccessible" + (ev.replacement_id ? "; " + ev.replacement_id + " steps in (event " + ev.event_id + ")" : "; nothing replaces it (event " + ev.event_id + ")");
        } else {
          text = pointId + " restored" + (ev.replacement_id ? "; " + ev.replacement_id + " is no longer needed" : "");
        }
        state.stepIn = action === "inaccessible" ? ev.replacement_id || null : null;
        return load().then(function () {
          FP.say(pageMsg, "ok", text, res.notes);
          if (state.stepIn) { state.map.openPoint(state.stepIn); }
        });
      })
      .catch(function (err) { FP.sayError(pageMsg, err); });
  }

  function drawMap(detail) {
    if (state.map) { state.map.destroy(); }
    state.map = new FP.PlanMap("map", detail.map, {
      pointPopup: pointPopup,
      onMapClick: function (latlng) {
        if (!state.picking) { return; }
        state.picking = false;
        document.getElementById("map").classList.remove("fp-picking");
        setDropOff([Number(latlng.lng.toFixed(7)), Number(latlng.lat.toFixed(7))]);
      }
    });
    if (state.dropOff) { state.map.setDropOff(L.latLng(state.dropOff[1], state.dropOff[0])); }
    if (state.readiness) {
      state.map.setReadiness(state.readiness.rows, detail.readiness_scale, state.readiness.target);
    }
  }

  function setDropOff(lonlat) {
    state.dropOff = lonlat;
    var text = document.getElementById("dropoff-text");
    if (lonlat) {
      text.textContent = "Drop-off at " + lonlat[0].toFixed(6) + ", " + lonlat[1].toFixed(6) + " (lon, lat)";
      state.map.setDropOff(L.latLng(lonlat[1], lonlat[0]));
    } else {
      text.textContent = "None: crews start at their first point.";
      state.map.setDropOff(null);
    }
  }

  function showCrews(detail) {
    var box = FP.clear(document.getElementById("crews-now"));
    var form = document.getElementById("crews-form");
    var force = form.querySelector('input[name="force"]');
    if (detail.crews.length) {
      box.appendChild(FP.table(detail.crews, [["crew", "Crew"], ["n_points", "Points"], ["length_km", "km", 2], ["hours", "Hours", 1]], "fp-crews"));
      if (!force) {
        var lab = el("label", null, "fp-check");
        force = el("input", null, null, { type: "checkbox", name: "force" });
        lab.appendChild(force); lab.appendChild(document.createTextNode(" Replace the crews assigned before"));
        form.querySelector(".fp-fields").appendChild(lab);
      }
    } else {
      box.appendChild(el("p", "No crews assigned yet.", "fp-muted"));
    }
    var links = FP.clear(document.getElementById("crew-links"));
    if (detail.crew_links && detail.crew_links.length) {
      links.appendChild(el("h3", "Crew pages for phones"));
      var ul = el("ul", null, "fp-files");
      detail.crew_links.forEach(function (c) {
        var li = el("li");
        li.appendChild(el("a", "Crew " + c.crew, null, { href: c.url }));
        li.appendChild(el("span", " — send this link to the crew only: it opens their points and records their samples.", "fp-muted"));
        ul.appendChild(li);
      });
      links.appendChild(ul);
    }
    var conf = document.getElementById("conflicts");
    var rows = (detail.conflicts || []).map(function (c) {
      return { point_id: c.point_id, kind: c.kind, note: c.note, records: (c.records || []).length };
    });
    conf.hidden = !rows.length;
    var out = FP.clear(document.getElementById("conflicts-out"));
    if (rows.length) { out.appendChild(FP.table(rows, [["point_id", "Point"], ["kind", "What"], ["records", "Records"], ["note", "Note"]], "fp-conflicts")); }
  }

  function showEvents(detail) {
    var out = FP.clear(document.getElementById("events-out"));
    var rows = (detail.events || []).slice().reverse();
    if (!rows.length) { out.appendChild(el("p", "No point marked yet.", "fp-muted")); return; }
    out.appendChild(FP.table(rows, [["event_id", "No."], ["time_utc", "When (UTC)"], ["user", "Who"], ["action", "What"],
      ["point_id", "Point"], ["replacement_id", "Instead"], ["reason", "Why"]], "fp-events"));
  }

  function showFiles(detail) {
    var list = FP.clear(document.getElementById("files"));
    detail.files.forEach(function (f) {
      var li = el("li");
      var a = el("a", f.name, null, { href: base + "/files/" + encodeURIComponent(f.name), download: f.name });
      li.appendChild(a);
      if (f.what) { li.appendChild(el("span", " \u2014 " + f.what, "fp-muted")); }
      list.appendChild(li);
    });
  }

  function showResultsState(detail) {
    var p = document.getElementById("results-now");
    p.textContent = detail.rounds ? detail.rounds + " round(s) stored; variables: " + detail.variables.join(", ") : "No results stored yet.";
    var sel = document.getElementById("value-select");
    var keep = sel.value;
    FP.clear(sel);
    detail.variables.forEach(function (v) { sel.appendChild(el("option", v, null, { value: v })); });
    if (keep && detail.variables.indexOf(keep) >= 0) { sel.value = keep; }
  }

  function load() {
    return FP.api("GET", base).then(function (detail) {
      state.detail = detail;
      drawMap(detail);
      showCrews(detail);
      showFiles(detail);
      showEvents(detail);
      showResultsState(detail);
      document.body.setAttribute("data-loaded", String(Date.now()));
      return detail;
    }).catch(function (err) { FP.sayError(pageMsg, err); });
  }

  function runCoverage(e) {
    if (e) { e.preventDefault(); }
    var q = FP.formJSON(document.getElementById("coverage-form"));
    var params = new URLSearchParams();
    Object.keys(q).forEach(function (k) { params.set(k, q[k]); });
    var out = document.getElementById("coverage-out");
    FP.api("GET", base + "/coverage?" + params.toString()).then(function (res) {
      FP.clear(out);
      out.appendChild(FP.table(res.blocks, [["block", "Block"], ["n_points", "Points"], ["expected_points", "Area share", 2],
        ["max_gap_m", "Largest gap (m)", 1], ["outside", "Outside"], ["in_exclusion", "In exclusion"], ["status", "Status"], ["notes", "Notes"]], "fp-coverage"));
      var lines = res.failures.concat(res.warnings);
      if (lines.length) {
        var ul = el("ul", null, "fp-fail");
        lines.forEach(function (t) { ul.appendChild(el("li", t)); });
        out.appendChild(ul);
      } else {
        out.appendChild(el("p", "Every rule holds.", "fp-ok"));
      }
    }).catch(function (err) { FP.clear(out); out.appendChild(el("p", err.message, "fp-fail")); });
  }

  document.getElementById("coverage-form").addEventListener("submit", runCoverage);

  document.getElementById("pick-dropoff").addEventListener("click", function () {
    state.picking = true;
    document.getElementById("map").classList.add("fp-picking");
    document.getElementById("dropoff-text").textContent = "Click the map where the crews are dropped off\u2026";
  });
  document.getElementById("clear-dropoff").addEventListener("click", function () { setDropOff(null); });

  document.getElementById("crews-form").addEventListener("submit", function (e) {
    e.preventDefault();
    var body = FP.formJSON(e.target);
    if (state.dropOff) { body.start = state.dropOff; }
    var msg = document.getElementById("crews-msg");
    FP.say(msg, "info", "Routing the crews\u2026");
    FP.api("POST", base + "/crews", body).then(function (res) {
      var lines = res.crews.map(function (c) { return "Crew " + c.crew + ": " + c.n_points + " points, " + c.length_km.toFixed(2) + " km, about " + c.hours.toFixed(1) + " h"; });
      if (res.unfitted.length) { lines.push(res.unfitted.length + " point(s) do not fit in the longest day: " + res.unfitted.slice(0, 10).join(", ")); }
      (res.warnings || []).forEach(function (w) { lines.push(w); });
      FP.say(msg, "ok", "Crews assigned. Routes are on the map; crew sheets and GPX files are in Downloads.", lines);
      return load();
    }).catch(function (err) { FP.sayError(msg, err); });
  });

  document.getElementById("results-form").addEventListener("submit", function (e) {
    e.preventDefault();
    var form = e.target, data = new FormData();
    var file = form.querySelector('input[type="file"]').files[0];
    if (!file) { return; }
    data.append("file", file);
    data.append("allow_duplicate", form.querySelector('input[name="allow_duplicate"]').checked ? "true" : "false");
    data.append("accept_outliers", form.querySelector('input[name="accept_outliers"]').checked ? "true" : "false");
    ["date_format", "sheet"].forEach(function (k) {
      var v = form.querySelector('[name="' + k + '"]').value.trim();
      if (v) { data.append(k, v); }
    });
    var gpx = form.querySelector('input[name="positions"]').files[0];
    if (gpx) { data.append("positions", gpx); }
    var msg = document.getElementById("results-msg");
    var out = FP.clear(document.getElementById("results-problems"));
    FP.say(msg, "info", "Checking " + file.name + "\u2026");
    FP.api("POST", base + "/results", data).then(function (res) {
      var text = "Stored round " + res.round + ": " + res.matched + " of " + res.points + " plan points, values " + res.values.join(", ") + ".";
      var extra = (res.notes || []).slice();
      if (res.inactive && res.inactive.length) { extra.push(res.inactive.length + " row(s) for points not in the active sample (spares not in use or marked inaccessible), stored but worth a check."); }
      if (res.positions) { extra.push("Positions: " + res.positions.recorded + " recorded, " + res.positions.beyond.length + " more than " + res.positions.limit_m + " m from the plan."); }
      FP.say(msg, res.problems.length ? "info" : "ok", text + (res.problems.length ? " " + res.problems.length + " problem(s), listed by row below; those cells were left out." : " No problems."), extra);
      if (res.problems.length) {
        out.appendChild(FP.table(res.problems, [["row", "Row"], ["point_id", "Point"], ["column", "Column"], ["problem", "Problem"], ["detail", "Detail"]], "fp-problems"));
      }
      form.reset();
      return load();
    }).catch(function (err) {
      FP.sayError(msg, err);
      var p = err.payload || {};
      if (p.outliers && p.outliers.length) {
        out.appendChild(el("h3", "Values far from the rest of the round"));
        out.appendChild(FP.table(p.outliers, [["row", "Row"], ["point_id", "Point"], ["column", "Column"], ["value", "Value", 2], ["median", "Round median", 2], ["z", "Modified z", 1]], "fp-outliers"));
      }
      if (p.problems && p.problems.length) {
        out.appendChild(el("h3", "Problems by row"));
        out.appendChild(FP.table(p.problems, [["row", "Row"], ["point_id", "Point"], ["column", "Column"], ["problem", "Problem"], ["detail", "Detail"]], "fp-problems"));
      }
    });
  });

  document.getElementById("remove-round-form").addEventListener("submit", function (e) {
    e.preventDefault();
    var msg = document.getElementById("results-msg");
    FP.api("POST", base + "/results/remove", FP.formJSON(e.target)).then(function (res) {
      FP.say(msg, "ok", "Round " + res.round + " (" + res.source + ", " + res.values + " values) taken out; kept in layer results_removed, event " + res.event_id + ".", res.notes);
      e.target.reset();
      return load();
    }).catch(function (err) { FP.sayError(msg, err); });
  });

  document.getElementById("estimates-form").addEventListener("submit", function (e) {
    e.preventDefault();
    var q = FP.formJSON(e.target);
    var msg = document.getElementById("estimates-msg");
    var out = FP.clear(document.getElementById("estimates-out"));
    if (!q.value) { FP.say(msg, "error", "No results yet: upload a results file first."); return; }
    var save = !!q.save;
    delete q.save;
    var params = new URLSearchParams();
    Object.keys(q).forEach(function (k) { if (q[k] !== false) { params.set(k, q[k]); } });
    msg.hidden = true;
    FP.api(save ? "POST" : "GET", base + "/estimates?" + params.toString()).then(function (res) {
      if (res.saved) { FP.say(msg, "ok", "Written to " + res.saved + " (as 'fieldplan estimate' does)."); }
      var pct = Math.round(res.confidence * 1000) / 10 + "%";
      var cols = [["group", res.by === "farm" ? "Farm" : res.by.charAt(0).toUpperCase() + res.by.slice(1)], ["n", "n"], ["mean", "Mean", 2], ["se", "SE", 3],
        ["lower", pct + " low", 2], ["upper", pct + " high", 2]];
      if (res.rows.length && res.rows[0].se_local !== undefined) { cols.push(["se_local", "SE local", 3]); }
      if (res.target !== null) { cols.push(["p_reached", "P(\u2265 " + res.target + ")", 2], ["target_date", "Projected date"]); }
      cols.push(["note", "Note"]);
      out.appendChild(el("p", res.value + ", round " + res.round + ", " + res.design + " design", "fp-muted"));
      out.appendChild(FP.table(res.rows, cols, "fp-estimates"));
      res.notes.forEach(function (n) { out.appendChild(el("p", n, "fp-note")); });
      if (res.target !== null && res.by === "block") {
        state.readiness = { rows: res.rows, target: res.target };
        state.map.setReadiness(res.rows, state.detail.readiness_scale, res.target);
      } else {
        state.readiness = null;
        state.map.setReadiness(null);
      }
    }).catch(function (err) { FP.sayError(msg, err); });
  });

  document.getElementById("labels-form").addEventListener("submit", function (e) {
    e.preventDefault();
    var msg = document.getElementById("downloads-msg");
    FP.api("POST", base + "/labels", FP.formJSON(e.target)).then(function (res) {
      FP.say(msg, "ok", res.labels + " labels" + (res.spares ? " (" + res.spares + " spares, marked SPARE, at the end)" : "") + " on " + res.layout + " sheets in " + res.file + ". Print at 100 % (no fit to page).");
      return load();
    }).catch(function (err) { FP.sayError(msg, err); });
  });
  document.getElementById("lab-form").addEventListener("submit", function (e) {
    e.preventDefault();
    var msg = document.getElementById("downloads-msg");
    FP.api("POST", base + "/lab-sheet", FP.formJSON(e.target)).then(function (res) {
      FP.say(msg, "ok", "Written: " + res.files.join(", "));
      return load();
    }).catch(function (err) { FP.sayError(msg, err); });
  });

  load().then(function () { runCoverage(); });
})();
