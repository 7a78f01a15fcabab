/* New plan page: upload, attribute table with column roles, the plan form built from the
   plan specification (GET /api/spec), sample-size calculator, preview, save. */
(function () {
  "use strict";
  var FP = window.FP, el = FP.el;
  var state = { schema: null, upload: null, exclusions: null, outlineMap: null, planMap: null,
    previewed: null, roles: {} };
  var SOIL_ONLY = ["cores", "core_radius", "composite", "core_buffer"];
  var RIPENESS_ONLY = ["crop_profile"];
  var FROM_TABLE = ["id_field", "columns"];  // set with the column roles under the map
  var LABELS = { per_ha: "Points per hectare", per_block: "Points per block", n: "Total points",
    edge_buffer: "Headland kept free", strata_by: "Strata from field", min_per_stratum: "Fewest per stratum",
    size_field: "Stratum size field", sd_field: "SD field", cost_field: "Cost field",
    target_units: "Units per stratum", plants_per_cluster: "Plants per cluster",
    skip_row_ends: "Plants skipped at row ends", skip_border_rows: "Border rows skipped",
    core_radius: "Core radius", core_buffer: "Core buffer", crop_profile: "Crop profile",
    length_unit: "Unit of row and plant spacing", max_points: "Most points allowed", select: "Only blocks where",
    repair: "Repair invalid polygons", layer: "GeoPackage layer" };

  function label(f) {
    var text = LABELS[f.name] || (f.name.charAt(0).toUpperCase() + f.name.slice(1).replace(/_/g, " "));
    return f.unit ? text + " (" + f.unit + ")" : text;
  }

  // ---- map of the upload ------------------------------------------------------------------
  var map = L.map("map", { maxZoom: 22, zoomSnap: 0.5 }).setView([0, 0], 2);
  L.control.scale({ metric: true, imperial: false }).addTo(map);
  var outline = null;

  function showOutline(info) {
    if (state.planMap) { state.planMap.destroy(); state.planMap = null; resetMapDiv(); }
    if (outline) { map.removeLayer(outline); }
    outline = L.geoJSON(info.outline, {
      style: function () { return { color: "#24566b", weight: 2, fillColor: "#ffffff", fillOpacity: 0.5, className: "fp-outline" }; },
      onEachFeature: function (f, layer) {
        layer.on("click", function () { highlightRow(f.properties._row); });
        var id = f.properties[info.check.id_field || "block"];
        layer.bindTooltip(el("span", "Row " + f.properties._row + (id !== undefined && id !== null ? " \u00b7 " + id : "")), { sticky: true });
      }
    }).addTo(map);
    map.fitBounds(info.bounds, { padding: [20, 20], maxZoom: 19 });
  }

  function resetMapDiv() {
    // Leaflet cannot reuse a container: the preview map replaces the outline map.
    var old = document.getElementById("map"), fresh = el("div", null, old.className, { id: "map", role: "application", "aria-label": "Blocks and previewed points" });
    old.parentNode.replaceChild(fresh, old);
    return fresh;
  }

  function highlightRow(row) {
    var rows = document.querySelectorAll("#attr-table tbody tr");
    rows.forEach(function (r) { r.classList.toggle("fp-highlight", r.getAttribute("data-row") === String(row)); });
    var hit = document.querySelector('#attr-table tbody tr[data-row="' + row + '"]');
    if (hit) { hit.scrollIntoView({ block: "nearest" }); }
  }

  // ---- attribute table with column roles ----------------------------------------------------
  function showAttributes(info) {
    var box = document.getElementById("attributes");
    box.hidden = false;
    document.getElementById("attr-count").textContent = "(" + info.features + " features" + (info.rows_shown < info.features ? ", first " + info.rows_shown + " shown" : "") + ")";
    var wrap = FP.clear(document.getElementById("attr-table"));
    var table = el("table", null, "fp-table fp-attr");
    var thead = el("thead"), names = el("tr"), roles = el("tr", null, "fp-roles");
    names.appendChild(el("th", "Row"));
    roles.appendChild(el("th", "Role"));
    state.roles = {};
    info.columns.forEach(function (c) {
      names.appendChild(el("th", c));
      var th = el("th"), sel = el("select", null, "fp-role", { "data-column": c, "aria-label": "Role of column " + c });
      sel.appendChild(el("option", "\u2014", null, { value: "" }));
      state.schema.roles.forEach(function (r) { sel.appendChild(el("option", r.title, null, { value: r.role })); });
      if (c === info.check.id_field) { sel.value = "block"; }
      sel.addEventListener("change", function () {
        // One column per role.
        if (sel.value) {
          document.querySelectorAll("select.fp-role").forEach(function (o) { if (o !== sel && o.value === sel.value) { o.value = ""; } });
        }
        stale();
      });
      th.appendChild(sel); roles.appendChild(th);
    });
    thead.appendChild(names); thead.appendChild(roles); table.appendChild(thead);
    var tbody = el("tbody");
    info.rows.forEach(function (row, i) {
      var tr = el("tr", null, null, { "data-row": String(i + 1) });
      tr.appendChild(el("td", i + 1, "num"));
      info.columns.forEach(function (c) { tr.appendChild(el("td", row[c] === null || row[c] === undefined ? "" : row[c])); });
      tbody.appendChild(tr);
    });
    table.appendChild(tbody);
    wrap.appendChild(table);
  }

  function roleParams() {
    var out = { id_field: null, columns: {} };
    document.querySelectorAll("select.fp-role").forEach(function (sel) {
      if (!sel.value) { return; }
      if (sel.value === "block") { out.id_field = sel.getAttribute("data-column"); }
      else { out.columns[sel.value] = sel.getAttribute("data-column"); }
    });
    return out;
  }

  // ---- the form, from the plan specification ------------------------------------------------
  function fieldInput(f) {
    var input;
    var initial = f.default === null || f.default === undefined ? "" : f.default;
    if (f.name === "crop_profile") {
      input = el("select");
      input.appendChild(el("option", "default (" + f.effective_default + ")", null, { value: "" }));
      state.schema.crop_profiles.forEach(function (p) { input.appendChild(el("option", p, null, { value: p })); });
    } else if (f.name === "layer") {
      input = el("select");
      input.appendChild(el("option", "(the blocks layer)", null, { value: "" }));
    } else if (f.kind === "choice") {
      input = el("select");
      if (f.default === null) { input.appendChild(el("option", "default (" + f.effective_default + ")", null, { value: "" })); }
      (f.choices || []).forEach(function (c) { input.appendChild(el("option", c, null, { value: c })); });
      input.value = initial === "" ? "" : String(initial);
    } else if (f.kind === "boolean") {
      input = el("input", null, null, { type: "checkbox" });
      input.checked = !!f.default;
    } else if (f.kind === "number" || f.kind === "integer") {
      input = el("input", null, null, { type: "number", step: f.kind === "integer" ? "1" : "any" });
      if (f.minimum !== null && f.minimum !== undefined) { input.setAttribute("min", f.minimum); }
      if (f.maximum !== null && f.maximum !== undefined) { input.setAttribute("max", f.maximum); }
      input.value = initial === "" ? "" : String(initial);
      if (f.default === null && f.effective_default !== null && f.effective_default !== undefined) { input.setAttribute("placeholder", "default " + f.effective_default); }
    } else if (f.kind === "list") {
      input = el("input", null, null, { type: "text" });
      input.value = Array.isArray(initial) ? initial.join(",") : String(initial);
    } else {
      input = el("input", null, null, { type: "text", maxlength: "300" });
      input.value = String(initial);
      if (f.default === null && f.effective_default !== null && f.effective_default !== undefined) { input.setAttribute("placeholder", "default " + f.effective_default); }
    }
    input.name = f.name;
    input.id = "f-" + f.name;
    input.setAttribute("data-kind", f.kind);
    input.setAttribute("data-default", JSON.stringify(f.default));
    input.addEventListener("change", stale);
    input.addEventListener("input", stale);
    return input;
  }

  function buildForm(schema) {
    var box = FP.clear(document.getElementById("spec-fields"));
    var byPanel = {};
    schema.fields.forEach(function (f) {
      if (FROM_TABLE.indexOf(f.name) >= 0) { return; }
      (byPanel[f.panel] = byPanel[f.panel] || []).push(f);
    });
    // The design first: it decides which of the other fields apply.
    var order = ["grid", "size", "clusters", "samples", "input", "outputs", "scale"];
    var panels = schema.panels.slice().sort(function (a, b) {
      var i = order.indexOf(a.id), j = order.indexOf(b.id);
      return (i < 0 ? 99 : i) - (j < 0 ? 99 : j);
    });
    panels.forEach(function (p) {
      var fields = byPanel[p.id];
      if (!fields || !fields.length) { return; }
      var fs = el("fieldset", null, "fp-panel-" + p.id);
      fs.appendChild(el("legend", p.title));
      var grid = el("div", null, "fp-fields");
      fields.forEach(function (f) {
        var wrap = el("label", null, f.kind === "boolean" ? "fp-check fp-field" : "fp-field", { "data-field": f.name, "data-designs": f.designs.join(" ") });
        var input = fieldInput(f);
        if (f.kind === "boolean") { wrap.appendChild(input); wrap.appendChild(document.createTextNode(" " + label(f))); }
        else { wrap.appendChild(document.createTextNode(label(f) + " ")); wrap.appendChild(input); }
        wrap.appendChild(el("span", f.help, "fp-help"));
        wrap.appendChild(el("span", "", "fp-field-error", { "data-error-for": f.name }));
        grid.appendChild(wrap);
      });
      fs.appendChild(grid);
      box.appendChild(fs);
    });
    var design = document.getElementById("f-design"), purpose = document.getElementById("f-purpose");
    design.addEventListener("change", applyVisibility);
    purpose.addEventListener("change", applyVisibility);
    applyVisibility();
  }

  function applyVisibility() {
    var design = document.getElementById("f-design").value;
    var purpose = document.getElementById("f-purpose").value;
    document.querySelectorAll("#spec-fields .fp-field").forEach(function (wrap) {
      var name = wrap.getAttribute("data-field");
      var show = wrap.getAttribute("data-designs").split(" ").indexOf(design) >= 0;
      if (SOIL_ONLY.indexOf(name) >= 0) { show = show && purpose === "soil"; }
      if (RIPENESS_ONLY.indexOf(name) >= 0) { show = show && purpose === "ripeness"; }
      if (name === "layer") { show = !!(state.upload && state.upload.layers && state.upload.layers.length > 1); }
      wrap.hidden = !show;
    });
    document.querySelectorAll("#spec-fields fieldset").forEach(function (fs) {
      fs.hidden = !fs.querySelector(".fp-field:not([hidden])");
    });
  }

  function formParams() {
    var out = {};
    document.querySelectorAll("#spec-fields .fp-field").forEach(function (wrap) {
      if (wrap.hidden) { return; }
      var input = wrap.querySelector("input, select");
      var kind = input.getAttribute("data-kind"), def = JSON.parse(input.getAttribute("data-default"));
      var v;
      if (kind === "boolean") { v = input.checked; if (v === !!def) { return; } }
      else {
        v = input.value.trim();
        if (v === "") { return; }
        if (kind === "number" || kind === "integer") { v = Number(v); }
        else if (kind === "list") { v = v.split(",").map(function (s) { return s.trim(); }).filter(Boolean); if (JSON.stringify(v) === JSON.stringify(def)) { return; } }
        if (v === def) { return; }
      }
      out[input.name] = v;
    });
    var roles = roleParams();
    // The column the reader finds by itself is its default: naming it would change the recorded
    // parameters (and the plan code) without changing the plan.
    var found = state.upload && state.upload.check ? state.upload.check.id_field : null;
    if (roles.id_field && roles.id_field !== found) { out.id_field = roles.id_field; }
    if (Object.keys(roles.columns).length) { out.columns = roles.columns; }
    return out;
  }

  function clearFieldErrors() {
    document.querySelectorAll(".fp-invalid").forEach(function (n) { n.classList.remove("fp-invalid"); });
    document.querySelectorAll(".fp-field-error").forEach(function (n) { n.textContent = ""; });
  }

  function showFieldError(err, box) {
    FP.sayError(box, err);
    var param = err.parameter;
    if (!param) { return; }
    var input = document.getElementById("f-" + param);
    var slot = document.querySelector('[data-error-for="' + param + '"]');
    if (input) {
      input.classList.add("fp-invalid");
      var wrap = input.closest(".fp-field");
      if (wrap && wrap.hidden) { wrap.hidden = false; }
      input.focus();
    }
    if (slot) { slot.textContent = err.message; }
  }

  function stale() {
    if (state.previewed) {
      state.previewed = null;
      document.getElementById("save-btn").disabled = true;
      FP.say(document.getElementById("save-msg"), "info", "Parameters changed: preview again before saving.");
    }
  }

  // ---- upload ----------------------------------------------------------------------------
  document.getElementById("upload-form").addEventListener("submit", function (e) {
    e.preventDefault();
    var msg = document.getElementById("upload-msg");
    var file = document.getElementById("blocks-file").files[0];
    var excl = document.getElementById("exclusions-file").files[0];
    if (!file) { return; }
    var data = new FormData(); data.append("file", file);
    FP.say(msg, "info", "Reading " + file.name + "\u2026");
    state.exclusions = null;
    FP.api("POST", "/api/uploads", data).then(function (info) {
      state.upload = info;
      showOutline(info);
      showAttributes(info);
      var layerSel = document.getElementById("f-layer");
      if (layerSel) {
        FP.clear(layerSel); layerSel.appendChild(el("option", "(the blocks layer)", null, { value: "" }));
        (info.layers || []).forEach(function (l) { layerSel.appendChild(el("option", l, null, { value: l })); });
      }
      var c = info.check;
      var lines = c.notes.slice();
      if (c.ok) {
        FP.say(msg, "ok", info.file + ": " + c.blocks + " blocks, " + c.area_ha + " ha, block ids from column " + c.id_field + ".", lines);
      } else {
        FP.say(msg, "error", info.file + ": " + info.features + " features read, but: " + c.message, ["Map the block id column below, or fix the file."]);
      }
      document.getElementById("preview-btn").disabled = false;
      applyVisibility();
      stale();
      if (!excl) { return null; }
      var ed = new FormData(); ed.append("file", excl);
      return FP.api("POST", "/api/uploads", ed).then(function (einfo) {
        state.exclusions = einfo;
        L.geoJSON(einfo.outline, { style: function () { return { color: "#555555", weight: 1.5, dashArray: "6 4", fillColor: "#bdbdbd", fillOpacity: 0.6 }; } }).addTo(map);
        msg.appendChild(el("p", "Exclusions: " + einfo.features + " polygons from " + einfo.file + "."));
      });
    }).catch(function (err) { FP.sayError(msg, err); });
  });

  // ---- sample-size calculator ----------------------------------------------------------------
  document.getElementById("size-form").addEventListener("submit", function (e) {
    e.preventDefault();
    var q = FP.formJSON(e.target), params = new URLSearchParams();
    Object.keys(q).forEach(function (k) { params.set(k, q[k]); });
    var out = FP.clear(document.getElementById("size-out"));
    FP.api("GET", "/api/size?" + params.toString()).then(function (res) {
      out.appendChild(el("pre", res.formula, "fp-formula"));
      var n = res.clusters !== null ? res.clusters : res.n;
      out.appendChild(el("p", res.clusters !== null ? "Result: " + res.clusters + " clusters (" + res.units_total + " units)" : "Result: " + res.n + " samples", "fp-size-result"));
      out.appendChild(el("p", "The CV or SD is a guess from earlier seasons or a pilot; the margin holds only if it is right.", "fp-note"));
      var use = el("button", "Use " + n + " as the total points (n)", null, { type: "button" });
      use.addEventListener("click", function () {
        var design = document.getElementById("f-design");
        if (design.value === "grid") { design.value = "random"; design.dispatchEvent(new Event("change")); }
        var input = document.getElementById("f-n");
        if (input) { input.value = n; input.dispatchEvent(new Event("change")); }
      });
      out.appendChild(use);
    }).catch(function (err) { out.appendChild(el("p", err.message, "fp-fail")); });
  });

  // ---- preview and save ---------------------------------------------------------------------
  function progress(job) {
    var bar = document.getElementById("progress");
    bar.hidden = false;
    var pct = job.total ? Math.round(100 * job.done / job.total) : (job.status === "done" ? 100 : 5);
    bar.firstChild.style.width = pct + "%";
    bar.setAttribute("title", job.total ? job.done + " of " + job.total : job.status);
  }

  function request() {
    return { upload: state.upload.upload, exclusions: state.exclusions ? state.exclusions.upload : null,
      params: formParams(), seed: Number(document.getElementById("seed").value || 0) };
  }

  document.getElementById("preview-btn").addEventListener("click", function () {
    if (!state.upload) { return; }
    var msg = document.getElementById("preview-msg");
    clearFieldErrors();
    var body = request();
    FP.say(msg, "info", "Planning\u2026");
    FP.api("POST", "/api/previews", body).then(function (job) {
      return FP.waitJob(job.job, progress);
    }).then(function (res) {
      document.getElementById("progress").hidden = true;
      state.previewed = body;
      if (state.planMap) { state.planMap.destroy(); }
      if (map) { map.remove(); map = null; }
      resetMapDiv();
      state.planMap = new FP.PlanMap("map", res.map, {});
      var lines = res.notes.slice();
      FP.say(msg, "ok", "Preview: " + res.points + " points" + (res.spares ? " and " + res.spares + " spares" : "") + " in " + res.blocks + " blocks. Nothing is saved yet.", lines);
      var out = FP.clear(document.getElementById("preview-out"));
      out.appendChild(FP.table(res.per_block, [["block", "Block"], ["area_ha", "Area (ha)", 2], ["n_points", "Points"], ["stratum", "Stratum"], ["flags", "Flags"]], "fp-preview"));
      document.getElementById("save-btn").disabled = false;
      document.getElementById("save-msg").hidden = true;
    }).catch(function (err) {
      document.getElementById("progress").hidden = true;
      showFieldError(err, msg);
    });
  });

  document.getElementById("save-form").addEventListener("submit", function (e) {
    e.preventDefault();
    var msg = document.getElementById("save-msg");
    if (!state.previewed) { FP.say(msg, "info", "Preview the points first."); return; }
    var body = Object.assign({}, state.previewed, { name: document.getElementById("plan-name").value.trim() });
    FP.say(msg, "info", "Saving\u2026");
    FP.api("POST", "/api/plans", body).then(function (job) {
      return FP.waitJob(job.job, progress);
    }).then(function (res) {
      document.getElementById("progress").hidden = true;
      FP.say(msg, "ok", "Saved " + res.name + ": " + res.points + " points in " + res.blocks + " blocks.");
      var a = el("a", "Open the plan", "fp-button fp-primary", { href: res.url, id: "open-plan" });
      msg.appendChild(a);
    }).catch(function (err) {
      document.getElementById("progress").hidden = true;
      FP.sayError(msg, err);
    });
  });

  FP.api("GET", "/api/spec").then(function (schema) {
    state.schema = schema;
    buildForm(schema);
  }).catch(function (err) { FP.sayError(document.getElementById("upload-msg"), err); });
})();
