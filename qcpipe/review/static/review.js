// qcpipe review page: the deployment's record as stacked panels on one time axis, periods marked by
// dragging, annotations saved through the JSON API, and the re-run with its flag differences.
// Every value from the archive or a reviewer is written as text (textContent), never as HTML.
"use strict";
(function () {
  const root = document.getElementById("review");
  if (!root) return;
  const TOKEN = document.querySelector('meta[name="qcpipe-token"]').content;
  const DEP = root.dataset.deployment, STATION = root.dataset.station;
  const chart = document.getElementById("chart");
  let meta = null, classes = [], series = null, mode = "zoom", editing = null, pending = null;

  function el(tag, text, cls) { const e = document.createElement(tag); if (text !== undefined) e.textContent = text; if (cls) e.className = cls; return e; }
  // plotly's date strings ("2026-09-20 06:12:33.5") are UTC without a zone; numbers are epoch ms
  function plotlyMs(x) {
    if (typeof x === "number") return x;
    const t = String(x).trim().replace(" ", "T");
    return Date.parse(/([zZ]|[+-]\d\d:?\d\d)$/.test(t) ? t : t + "Z");
  }
  function iso(msec) { return new Date(msec).toISOString().replace(/\.\d{3}Z$/, "Z"); }
  function say(id, text, good) { const p = document.getElementById(id); p.textContent = text; p.className = "message " + (good ? "good" : "bad"); }
  async function api(method, url, body) {
    const opts = {method: method, headers: {}};
    if (method !== "GET") { opts.headers["X-Qcpipe-Token"] = TOKEN; }
    if (body !== undefined) { opts.headers["Content-Type"] = "application/json"; opts.body = JSON.stringify(body); }
    const r = await fetch(url, opts);
    const data = await r.json();
    if (!r.ok) { throw new Error(data.error || ("HTTP " + r.status)); }
    return data;
  }

  function flagStyle() {
    const out = {};
    classes.forEach(function (c) { out[c.flag] = c; });
    return out;
  }

  // --- drawing ------------------------------------------------------------------------
  function traces(check) {
    const style = flagStyle(), out = [];
    const panels = series.variables.length + (series.reference ? 1 : 0);
    series.variables.forEach(function (v, i) {
      const axis = i === 0 ? "" : String(i + 1);
      out.push({x: v.t, y: v.v, xaxis: "x", yaxis: "y" + axis, type: "scatter", mode: "lines",
                line: {color: "#6b6b6b", width: 1}, hoverinfo: "x+y", showlegend: false, name: v.name});
      const flags = check && v.checks[check] ? v.checks[check] : v.flag;
      Object.keys(style).forEach(function (f) {
        const xs = [], ys = [], fv = Number(f);
        for (let k = 0; k < flags.length; k++) {
          if (flags[k] === fv) { xs.push(v.t[k]); ys.push(v.v[k] === null ? null : v.v[k]); }
        }
        if (!xs.length || fv === 1 && !check && xs.length > 4000) return;
        const s = style[f];
        out.push({x: xs, y: ys, xaxis: "x", yaxis: "y" + axis, type: "scatter", mode: "markers",
                  name: s.words, legendgroup: s.words, showlegend: false,
                  marker: {color: s.colour, symbol: s.symbol, size: fv === 1 ? 4 : 8,
                           line: {width: fv >= 3 ? 1 : 0, color: "#000"}},
                  hovertemplate: v.name + " %{y}<br>%{x}<br>" + s.words + "<extra></extra>"});
      });
    });
    if (series.reference) {
      const r = series.reference, axis = String(panels);
      out.push({x: r.t, y: r.v, xaxis: "x", yaxis: "y" + axis, type: "scatter", mode: "lines",
                line: {color: "#0072B2", width: 1.2}, name: "reference water level", showlegend: false});
    }
    return out;
  }

  function layout(range) {
    const n = series.variables.length + (series.reference ? 1 : 0), gap = 0.04, h = (1 - gap * (n - 1)) / n;
    const lay = {margin: {l: 70, r: 20, t: 10, b: 40}, height: Math.max(420, 170 * n), dragmode: mode === "zoom" ? "zoom" : "select",
                 selectdirection: "h", hovermode: "closest", showlegend: false, uirevision: DEP,
                 xaxis: {type: "date", title: {text: "time (UTC)"}, anchor: "y" + (n > 1 ? n : "")}, shapes: []};
    if (range) { lay.xaxis.range = range; lay.xaxis.autorange = false; }
    for (let i = 0; i < n; i++) {
      const name = "yaxis" + (i === 0 ? "" : i + 1), top = 1 - i * (h + gap);
      const v = series.variables[i];
      const label = v ? v.name.replace(/_/g, " ") + (v.units ? " (" + v.units + ")" : "")
                      : "reference level at " + series.reference.station + " (m)";
      lay[name] = {domain: [top - h, top], title: {text: label, font: {size: 12}}, fixedrange: true};
    }
    series.emersed.forEach(function (p) {
      lay.shapes.push({type: "rect", xref: "x", yref: "paper", x0: p[0], x1: p[1], y0: 0, y1: 1, layer: "below",
                       fillcolor: "rgba(240,228,66,0.35)", line: {width: 0}});
    });
    const style = flagStyle();
    meta.annotations.forEach(function (a) {
      const c = style[a.flag] ? style[a.flag].colour : "#0072B2";
      lay.shapes.push({type: "rect", xref: "x", yref: "paper", x0: a.start_ms, x1: a.end_ms, y0: 0, y1: 1,
                       layer: "below", fillcolor: "rgba(0,114,178,0.12)", line: {width: 1.5, dash: "dash", color: c},
                       label: {text: a.reason, textposition: "top left", font: {size: 11, color: "#1d232a"}}});
    });
    const s = document.getElementById("start").value, e = document.getElementById("end").value;
    if (s && e && !isNaN(Date.parse(s)) && !isNaN(Date.parse(e))) {
      lay.shapes.push({type: "rect", xref: "x", yref: "paper", x0: Date.parse(s), x1: Date.parse(e), y0: 0, y1: 1, layer: "above",
                       fillcolor: "rgba(0,114,178,0.10)", line: {width: 2, color: "#0072B2"}, name: "selection"});
    }
    return lay;
  }

  function draw(range) {
    const check = document.getElementById("check").value;
    Plotly.react(chart, traces(check), layout(range), {displaylogo: false, responsive: true,
      modeBarButtonsToRemove: ["lasso2d", "toImage"]});
    document.getElementById("resolution").textContent = (series.full ? "every sample shown" :
      "thinned for display (lowest and highest value of each flag class per pixel column); zoom in for every sample")
      + " - " + series.samples + " samples in view";
  }

  async function load(range) {
    const cols = Math.max(200, Math.round(chart.clientWidth || 1000));
    let url = "/api/deployment/" + encodeURIComponent(DEP) + "/series?columns=" + cols;
    if (range) { url += "&start=" + encodeURIComponent(iso(plotlyMs(range[0]))) + "&end=" + encodeURIComponent(iso(plotlyMs(range[1]))); }
    series = await api("GET", url);
    draw(range);
  }

  function currentRange() {
    const xa = chart.layout && chart.layout.xaxis;
    return xa && xa.autorange === false ? xa.range.slice() : null;
  }

  // --- annotations --------------------------------------------------------------------
  function listAnnotations() {
    const body = document.querySelector("#annotations tbody");
    body.replaceChildren();
    if (!meta.annotations.length) { const tr = el("tr"); const td = el("td", "none yet", "quiet"); td.colSpan = 6; tr.append(td); body.append(tr); }
    meta.annotations.forEach(function (a) {
      const tr = el("tr");
      tr.append(el("td", a.start + " to " + a.end), el("td", a.variables.join(", ")),
                el("td", ({1: "pass", 3: "suspect", 4: "fail"})[a.flag]), el("td", a.reason),
                el("td", a.reviewer + ", " + a.date));
      const td = el("td"), edit = el("button", "edit"), remove = el("button", "remove");
      edit.type = remove.type = "button";
      edit.addEventListener("click", function () { startEdit(a); });
      remove.addEventListener("click", async function () {
        try { await api("DELETE", "/api/annotations/" + a.key); say("mark-message", "annotation removed", true); await refreshMeta(); }
        catch (err) { say("mark-message", err.message, false); }
      });
      td.append(edit, remove); tr.append(td); body.append(tr);
    });
  }

  function startEdit(a) {
    editing = a.key;
    document.getElementById("start").value = a.start; document.getElementById("end").value = a.end;
    document.getElementById("reason").value = a.reason; document.getElementById("reviewer").value = a.reviewer;
    document.querySelectorAll('#variables input').forEach(function (c) { c.checked = a.variables.indexOf(c.value) >= 0; });
    document.querySelectorAll('input[name="flag"]').forEach(function (r) { r.checked = Number(r.value) === a.flag; });
    document.getElementById("save").textContent = "Save changes"; document.getElementById("cancel-edit").hidden = false;
    draw(currentRange());
  }

  function stopEdit() {
    editing = null; document.getElementById("save").textContent = "Save annotation";
    document.getElementById("cancel-edit").hidden = true;
  }

  async function refreshMeta() {
    meta = await api("GET", "/api/deployment/" + encodeURIComponent(DEP));
    listAnnotations();
    draw(currentRange());
  }

  async function save(ev) {
    ev.preventDefault();
    const vars = Array.from(document.querySelectorAll("#variables input:checked")).map(function (c) { return c.value; });
    const flag = Number(document.querySelector('input[name="flag"]:checked').value);
    const reviewer = document.getElementById("reviewer").value;
    const body = {station: STATION, variables: vars, flag: flag, start: document.getElementById("start").value,
                  end: document.getElementById("end").value, reason: document.getElementById("reason").value,
                  reviewer: reviewer};
    try {
      const r = editing ? await api("PUT", "/api/annotations/" + editing, body) : await api("POST", "/api/annotations", body);
      try { localStorage.setItem("qcpipe-reviewer", reviewer); } catch (e) { /* private mode */ }
      say("mark-message", (editing ? "annotation changed in " : "annotation saved to ") + r.file +
          "; re-run QC to apply it", true);
      stopEdit();
      await refreshMeta();
    } catch (err) { say("mark-message", err.message, false); }
  }

  // --- re-run ---------------------------------------------------------------------------
  function showDiffs(status) {
    const box = document.getElementById("diffs");
    box.replaceChildren();
    (status.diffs || []).forEach(function (d) {
      const sec = el("section", undefined, "diff");
      sec.append(el("h3", d.deployment + ": version " + d.from + " to " + d.to));
      sec.append(el("pre", d.lines.join("\n"), "diff"));
      box.append(sec);
    });
    if (!(status.diffs || []).length) box.append(el("p", "no earlier version to compare with", "quiet"));
  }

  async function poll() {
    const s = await api("GET", "/api/rerun");
    if (s.state === "running") {
      const parts = Object.keys(s.progress || {}).map(function (k) { const p = s.progress[k]; return k + " " + p.done + "/" + (p.total || "?"); });
      say("rerun-message", "re-running: " + (parts.join(", ") || "starting") + (s.last_step ? " (" + s.last_step + ")" : ""), true);
      setTimeout(poll, 600);
      return;
    }
    document.getElementById("rerun-button").disabled = false;
    if (s.state === "failed") { say("rerun-message", "the re-run failed: " + s.error, false); return; }
    if (s.state === "done") {
      const written = (s.written || []).map(function (w) { return w.deployment + " v" + String(w.version).padStart(3, "0"); });
      say("rerun-message", "re-run finished: " + (written.length ? written.join(", ") : "nothing changed"), true);
      showDiffs(s);
      meta = await api("GET", "/api/deployment/" + encodeURIComponent(DEP));
      document.querySelector("h1 small").textContent = "station " + meta.station + ", version " +
        String(meta.version).padStart(3, "0") + ", " + meta.samples + " samples";
      listAnnotations();
      await load(currentRange());
    }
  }

  async function startRerun() {
    try {
      document.getElementById("rerun-button").disabled = true;
      await api("POST", "/api/rerun", {deployment: DEP});
      say("rerun-message", "re-run started", true);
      setTimeout(poll, 300);
    } catch (err) { document.getElementById("rerun-button").disabled = false; say("rerun-message", err.message, false); }
  }

  // --- wiring -----------------------------------------------------------------------------
  function setMode(m) {
    mode = m;
    document.getElementById("mode-zoom").classList.toggle("on", m === "zoom");
    document.getElementById("mode-mark").classList.toggle("on", m === "mark");
    Plotly.relayout(chart, {dragmode: m === "zoom" ? "zoom" : "select"});
  }

  async function start() {
    classes = JSON.parse(document.getElementById("flag-classes").textContent);
    meta = await api("GET", "/api/deployment/" + encodeURIComponent(DEP));
    const sel = document.getElementById("check");
    const checks = new Set();
    meta.variables.forEach(function (v) { v.checks.forEach(function (c) { checks.add(c); }); });
    Array.from(checks).sort().forEach(function (c) { const o = el("option", "raised by " + c.replace(/_/g, " ")); o.value = c; sel.append(o); });
    const vbox = document.getElementById("variables");
    meta.station_variables.concat(["all"]).forEach(function (v) {
      const lab = el("label"), c = el("input");
      c.type = "checkbox"; c.value = v; c.name = "variable";
      c.checked = meta.variables.length > 0 && v === meta.variables[meta.variables.length - 1].name;
      lab.append(c, document.createTextNode(" " + v.replace(/_/g, " ")));
      vbox.append(lab);
    });
    try { document.getElementById("reviewer").value = localStorage.getItem("qcpipe-reviewer") || ""; } catch (e) { /* none */ }
    listAnnotations();
    await load(null);
    chart.on("plotly_relayout", function (ev) {
      if (ev["xaxis.range[0]"] !== undefined) {
        clearTimeout(pending);
        const r = [ev["xaxis.range[0]"], ev["xaxis.range[1]"]];
        pending = setTimeout(function () { load(r).catch(function (err) { say("mark-message", err.message, false); }); }, 250);
      } else if (ev["xaxis.autorange"]) {
        clearTimeout(pending);
        pending = setTimeout(function () { load(null); }, 250);
      }
    });
    chart.on("plotly_selected", function (ev) {
      if (!ev || !ev.range) return;
      const key = Object.keys(ev.range).find(function (k) { return k[0] === "x"; });
      if (!key) return;
      const r = ev.range[key];
      document.getElementById("start").value = iso(plotlyMs(r[0]));
      document.getElementById("end").value = iso(plotlyMs(r[1]));
      say("mark-message", "period selected: choose variables, a flag and a reason, then save", true);
      draw(currentRange());
    });
    document.getElementById("check").addEventListener("change", function () { draw(currentRange()); });
    document.getElementById("mode-zoom").addEventListener("click", function () { setMode("zoom"); });
    document.getElementById("mode-mark").addEventListener("click", function () { setMode("mark"); });
    document.getElementById("whole").addEventListener("click", function () { load(null); });
    document.getElementById("mark-form").addEventListener("submit", save);
    document.getElementById("cancel-edit").addEventListener("click", stopEdit);
    document.getElementById("rerun-button").addEventListener("click", startRerun);
    if (root.dataset.canAnnotate !== "yes") { document.getElementById("save").disabled = true; }
    root.dataset.ready = "yes";
  }
  start().catch(function (err) { say("mark-message", "the page could not load its data: " + err.message, false); });
})();
