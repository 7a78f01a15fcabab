/* fieldplan workspace: functions shared by every page (no data of its own, no inline script). */
(function () {
  "use strict";
  var FP = window.FP = window.FP || {};

  FP.csrf = function () {
    var meta = document.querySelector('meta[name="fp-csrf"]');
    return meta ? meta.getAttribute("content") : "";
  };

  // Build an element; text always goes in as textContent, never as markup.
  FP.el = function (tag, text, cls, attrs) {
    var node = document.createElement(tag);
    if (text !== undefined && text !== null) { node.textContent = String(text); }
    if (cls) { node.className = cls; }
    if (attrs) { Object.keys(attrs).forEach(function (k) { node.setAttribute(k, attrs[k]); }); }
    return node;
  };

  FP.clear = function (node) { while (node && node.firstChild) { node.removeChild(node.firstChild); } return node; };

  function ApiError(status, payload) {
    this.status = status;
    this.payload = payload || {};
    this.message = (payload && payload.error) || ("request failed (" + status + ")");
    this.parameter = payload && payload.parameter;
  }
  ApiError.prototype = Object.create(Error.prototype);
  FP.ApiError = ApiError;

  // fetch() with the session's CSRF token on every change; JSON in, JSON out.
  FP.api = function (method, url, body) {
    var opts = { method: method, headers: { "Accept": "application/json" }, credentials: "same-origin" };
    if (method !== "GET" && method !== "HEAD") { opts.headers["X-CSRF-Token"] = FP.csrf(); }
    if (body instanceof FormData) {
      opts.body = body;
    } else if (body !== undefined) {
      opts.headers["Content-Type"] = "application/json";
      opts.body = JSON.stringify(body);
    }
    return fetch(url, opts).then(function (r) {
      return r.text().then(function (text) {
        var data = null;
        try { data = text ? JSON.parse(text) : null; } catch (e) { data = { error: text }; }
        if (!r.ok) { throw new ApiError(r.status, data); }
        return data;
      });
    });
  };

  // Poll a background job until it ends; onProgress(job) on every answer.
  FP.waitJob = function (jobId, onProgress) {
    return new Promise(function (resolve, reject) {
      function poll() {
        FP.api("GET", "/api/jobs/" + encodeURIComponent(jobId)).then(function (job) {
          if (onProgress) { onProgress(job); }
          if (job.status === "done") { resolve(job.result); }
          else if (job.status === "failed") { reject(new ApiError(job.error ? job.error.status : 500, job.error)); }
          else { setTimeout(poll, 250); }
        }, reject);
      }
      poll();
    });
  };

  // A message box: kind is "ok", "error" or "info".
  FP.say = function (box, kind, text, details) {
    if (!box) { return; }
    FP.clear(box);
    box.className = "fp-msg fp-msg-" + kind;
    box.appendChild(FP.el("p", text));
    if (details && details.length) {
      var ul = FP.el("ul");
      details.forEach(function (d) { ul.appendChild(FP.el("li", d)); });
      box.appendChild(ul);
    }
    box.hidden = false;
  };

  FP.sayError = function (box, err) {
    var text = err && err.message ? err.message : String(err);
    if (err && err.parameter) { text += " [" + err.parameter + "]"; }
    FP.say(box, "error", text);
  };

  FP.fmt = function (v, digits) {
    if (v === null || v === undefined || v === "" || (typeof v === "number" && !isFinite(v))) { return "\u2014"; }
    if (typeof v === "number") { return Number.isInteger(v) ? String(v) : v.toFixed(digits === undefined ? 3 : digits); }
    return String(v);
  };

  // A table from rows and [key, title, digits] columns.
  FP.table = function (rows, columns, cls) {
    var table = FP.el("table", null, "fp-table " + (cls || ""));
    var thead = FP.el("thead"), tr = FP.el("tr");
    columns.forEach(function (c) { tr.appendChild(FP.el("th", c[1])); });
    thead.appendChild(tr); table.appendChild(thead);
    var tbody = FP.el("tbody");
    rows.forEach(function (row) {
      var r = FP.el("tr");
      columns.forEach(function (c) {
        var v = row[c[0]];
        var td = FP.el("td", FP.fmt(v, c[2]));
        if (typeof v === "number") { td.className = "num"; }
        r.appendChild(td);
      });
      tbody.appendChild(r);
    });
    table.appendChild(tbody);
    return table;
  };

  FP.formJSON = function (form) {
    var out = {};
    Array.prototype.forEach.call(form.elements, function (input) {
      if (!input.name || input.disabled) { return; }
      if (input.type === "checkbox") { out[input.name] = input.checked; return; }
      if (input.type === "file" || input.type === "submit" || input.type === "button") { return; }
      var v = input.value.trim();
      if (v === "") { return; }
      out[input.name] = input.type === "number" ? Number(v) : v;
    });
    return out;
  };
})();
