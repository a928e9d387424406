/* weft's analyst page: reads this server's JSON API and draws what it answers. Plain
 * JavaScript, no library, nothing fetched from anywhere else. Text from the API (node names,
 * messages) only ever goes into textContent, never into markup. */
"use strict";

(function () {
  const $ = (id) => document.getElementById(id);
  const SVG = "http://www.w3.org/2000/svg";

  /* What the page knows of the live snapshot. */
  const state = { model: null, links: null, labels: null, map: null, version: null };

  /* ---- small helpers ---- */

  /* el("td", {class: "num", text: "3"}, child, ...) */
  function el(tag, attrs, ...children) {
    const e = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs || {})) {
      if (v === undefined || v === null || v === false) continue;
      if (k === "text") e.textContent = v;
      else if (k === "class") e.className = v;
      else e.setAttribute(k, v === true ? "" : v);
    }
    for (const c of children) if (c !== null && c !== undefined) e.append(c);
    return e;
  }

  function svg(tag, attrs, ...children) {
    const e = document.createElementNS(SVG, tag);
    for (const [k, v] of Object.entries(attrs || {})) {
      if (k === "text") e.textContent = v;
      else e.setAttribute(k, String(v));
    }
    for (const c of children) if (c) e.append(c);
    return e;
  }

  function clear(node) {
    while (node.firstChild) node.removeChild(node.firstChild);
    return node;
  }

  function fmt(v, digits) {
    if (v === null || v === undefined || (typeof v === "number" && !isFinite(v))) return "—";
    if (typeof v !== "number") return String(v);
    if (Number.isInteger(v)) return v.toLocaleString("en");
    const a = Math.abs(v);
    if (a >= 1000) return v.toLocaleString("en", { maximumFractionDigits: 1 });
    if (a >= 100) return v.toFixed(1);
    return String(Number(v.toPrecision(digits || 4)));
  }

  function bytes(n) {
    if (typeof n !== "number") return "—";
    const units = ["B", "KiB", "MiB", "GiB", "TiB"];
    let i = 0;
    while (n >= 1024 && i < units.length - 1) { n /= 1024; i++; }
    return (i ? n.toFixed(1) : String(n)) + " " + units[i];
  }

  function ago(iso) {
    const t = Date.parse(iso);
    if (!isFinite(t)) return "";
    const s = Math.max(0, (Date.now() - t) / 1000);
    if (s < 90) return Math.round(s) + " s ago";
    if (s < 5400) return Math.round(s / 60) + " min ago";
    if (s < 172800) return Math.round(s / 3600) + " h ago";
    return Math.round(s / 86400) + " days ago";
  }

  /* "2026-12-02T07:45:15Z" -> "2026-12-02 07:45 UTC" */
  function shortTime(iso) {
    return typeof iso === "string" ? iso.replace("T", " ").replace(/:\d\dZ$/, " UTC") : "—";
  }

  function get(obj, ...path) {
    for (const p of path) {
      if (obj === null || obj === undefined) return undefined;
      obj = obj[p];
    }
    return obj;
  }

  /* {ok, status, body} of GET path; body is the parsed JSON or null. */
  async function api(path) {
    try {
      const resp = await fetch(path, { headers: { Accept: "application/json" }, cache: "no-store" });
      let body = null;
      try { body = await resp.json(); } catch (e) { body = null; }
      return { ok: resp.ok, status: resp.status, body: body };
    } catch (e) {
      return { ok: false, status: 0, body: null };
    }
  }

  function errorBox(r, what) {
    const err = get(r, "body", "error");
    const box = el("div", { class: "error", role: "alert" });
    if (r.status === 0) {
      box.append(el("strong", { text: what + ": the server did not answer." }));
    } else {
      box.append(el("strong", { text: what + " (" + r.status + "): " + (err ? err.message : "no answer") }));
      if (err && err.hint) box.append(el("span", { class: "hint", text: err.hint }));
    }
    return box;
  }

  function badge(status, text) {
    return el("span", { class: "badge s-" + status, text: text || status });
  }

  /* A table in a scrolling wrapper. columns: [{label, num, cls}]; rows: arrays of cells
   * (text, number or Node); opts: {caption, rowClass(row, i)}. */
  function table(columns, rows, opts) {
    opts = opts || {};
    const t = el("table");
    if (opts.caption) t.append(el("caption", { text: opts.caption }));
    const head = el("tr");
    for (const c of columns)
      head.append(el("th", { scope: "col", class: [c.num ? "num" : "", c.cls || ""].join(" ").trim() || null, text: c.label }));
    t.append(el("thead", {}, head));
    const body = el("tbody");
    rows.forEach((row, i) => {
      const tr = el("tr", { class: opts.rowClass ? opts.rowClass(row, i) : null });
      row.forEach((cell, j) => {
        const c = columns[j] || {};
        const td = el("td", { class: [c.num ? "num" : "", c.cls || ""].join(" ").trim() || null });
        if (cell instanceof Node) td.append(cell);
        else td.textContent = typeof cell === "number" ? fmt(cell) : (cell === null || cell === undefined ? "—" : String(cell));
        tr.append(td);
      });
      body.append(tr);
    });
    t.append(body);
    return el("div", { class: "table-wrap" }, t);
  }

  function cautionBox(text) {
    return el("p", { class: "caution", role: "note" },
      el("strong", { text: "Caution: label predictions" }), text);
  }

  /* ---- the snapshot, its history, its health ---- */

  function partsOf(model) {
    return { links: get(model, "parts", "links") || null, labels: get(model, "parts", "labels") || null };
  }

  /* The record of one model part: the manifest's models.link / models.labels, or the
   * top-level model, metrics and curve of an older manifest. */
  function partRecord(model, part) {
    const key = part === "links" ? "link" : "labels";
    const rec = get(model, "models", key);
    if (rec) return rec;
    const kind = get(model, "model", "kind");
    const isLabels = kind === "gcn";
    if ((part === "labels") !== isLabels) return null;
    return { model: model.model, metrics: model.metrics, curve: model.curve };
  }

  function renderLive(r) {
    const line = clear($("live-line"));
    if (!r.ok) {
      line.append(r.status === 503 ? "No snapshot is live yet: train one with weft train." : errorBox(r, "GET /v1/model"));
      return;
    }
    const m = r.body, p = partsOf(m);
    const bits = [];
    if (p.links) bits.push(p.links.kind + " link model, " + fmt(p.links.nodes) + " nodes, dimension " + p.links.dim);
    if (p.labels) bits.push("GCN label model, " + p.labels.classes.length + " classes");
    line.append(badge("live", "live"), " Version " + m.version + " · " + bits.join(" · ") +
      (m.created ? " · written " + m.created + " (" + ago(m.created) + ")" : ""));
  }

  function renderFacts(m) {
    const dl = clear($("snapshot-facts"));
    const add = (k, v) => { if (v !== undefined && v !== null && v !== "") dl.append(el("dt", { text: k }), el("dd", {}, v instanceof Node ? v : String(v))); };
    if (!m) { add("Snapshot", "none is live"); return; }
    const p = partsOf(m);
    add("Version", m.version);
    if (m.created) add("Written", m.created + " (" + ago(m.created) + ")");
    const g = m.graph;
    if (g) add("Graph", fmt(g.nodes) + " nodes, " + fmt(g.edges) + " edges, " + fmt(g.relations) + " relation" + (g.relations === 1 ? "" : "s") + (g.undirected ? ", undirected" : ""));
    const lr = partRecord(m, "links");
    if (p.links) {
      const mm = (lr && lr.model) || {};
      add("Link model", p.links.kind + ", dimension " + p.links.dim + (mm.loss ? ", " + mm.loss + " loss" : "") +
        (mm.epochs_run ? ", " + mm.epochs_run + " epochs (best " + mm.best_epoch + ")" : "") +
        (lr && lr.carried_from ? ", carried from version " + lr.carried_from : ""));
    }
    const br = partRecord(m, "labels");
    if (p.labels) {
      const mm = (br && br.model) || {};
      add("Label model", "GCN, " + p.labels.classes.length + " classes (" + p.labels.classes.join(", ") + "), " +
        fmt(p.labels.labelled) + " labelled nodes" + (mm.epochs_run ? ", " + mm.epochs_run + " epochs" : "") +
        (br && br.carried_from ? ", carried from version " + br.carried_from : ""));
    }
    if (m.types) add("Node types", fmt(m.types.count) + " types over " + fmt(m.types.typed) + " nodes");
    if (m.gate) add("Gate", m.gate.passed ? (m.gate.forced ? "refused, promoted by force" : "passed") : "refused" + (m.gate.reason ? ": " + m.gate.reason : ""));
    if (Array.isArray(m.inputs) && m.inputs.length)
      add("Inputs", m.inputs.map((i) => i.role + ": " + String(i.path || "").split("/").pop() + (i.sha256 ? " (" + i.sha256.slice(0, 12) + "…)" : "")).join("; "));
  }

  function renderHistory(r) {
    const box = clear($("history"));
    if (!r.ok) { box.append(r.status === 503 ? el("p", { class: "empty", text: "No store yet." }) : errorBox(r, "GET /v1/snapshots")); return; }
    const rows = (r.body.snapshots || []).slice().reverse().map((s) => [
      s.version,
      badge(s.state === "live" ? "live" : s.state === "rejected" ? "fail" : "ok", s.state + (s.is_previous ? ", previous" : "")),
      shortTime(s.created),
      s.link ? s.link.kind + (typeof s.link.test_mrr === "number" ? " · MRR " + fmt(s.link.test_mrr) : "") : "—",
      s.labels ? s.labels.kind + (typeof s.labels.test_accuracy === "number" ? " · acc. " + fmt(s.labels.test_accuracy) : "") : "—",
      bytes(s.bytes),
      s.reason || (s.forced ? "forced" : "") || (s.gate && s.gate.reason) || "",
    ]);
    box.append(table([{ label: "Version", num: true }, { label: "State" }, { label: "Written" }, { label: "Link model" },
      { label: "Label model" }, { label: "Size", num: true }, { label: "Note" }], rows,
    { caption: rows.length + " version" + (rows.length === 1 ? "" : "s") + ", newest first" }));
  }

  function renderHealth(r) {
    const list = clear($("health-list"));
    const overall = clear($("health-overall"));
    const b = r.body;
    if (!b || !Array.isArray(b.checks)) { list.append(el("li", {}, errorBox(r, "GET /v1/health"))); return; }
    overall.className = "badge s-" + b.status;
    overall.textContent = b.status;
    for (const c of b.checks) {
      const figure = c.value === null ? "" : fmt(c.value) + (c.threshold === null ? "" : " (limit " + fmt(c.threshold) + ")");
      list.append(el("li", {}, badge(c.status),
        el("span", {}, el("span", { class: "name", text: c.name }), figure ? " · " + figure : ""),
        el("span", { class: "msg", text: c.message })));
    }
  }

  /* ---- metrics beside their baselines ---- */

  const LOWER_IS_BETTER = new Set(["mean_rank", "ece", "log_loss"]);
  const METRIC_NAMES = {
    mrr: "MRR", mean_rank: "mean rank", "hits@1": "Hits@1", "hits@3": "Hits@3", "hits@10": "Hits@10",
    auc: "AUC-ROC", ap: "average precision", accuracy: "accuracy", macro_f1: "macro-F1",
    ece: "calibration error (ECE)", log_loss: "log loss",
  };

  function barCell(values, i) {
    const finite = values.filter((v) => typeof v === "number" && isFinite(v));
    const top = Math.max(...finite.map(Math.abs), 1e-12);
    const wrap = el("span", { "aria-hidden": "true" });
    const v = values[i];
    if (typeof v === "number" && isFinite(v)) {
      const b = el("span", { class: "bar" + (i ? " base" : "") });
      b.style.width = Math.max(1, Math.round(100 * Math.abs(v) / top)) + "%";
      wrap.append(b);
    }
    return wrap;
  }

  function metricsTable(title, test, baselines, keys) {
    if (!test) return el("p", { class: "empty", text: title + ": no test metrics in the manifest." });
    const names = Object.keys(baselines || {});
    const cols = [{ label: "Metric" }, { label: "model", num: true }];
    for (const n of names) cols.push({ label: n.replace(/_/g, " "), num: true });
    cols.push({ label: "model better?" }, { label: "bars: model, then baselines", cls: "barcell" });
    const rows = [];
    for (const k of keys) {
      if (typeof test[k] !== "number") continue;
      const base = names.map((n) => get(baselines, n, k));
      const lower = LOWER_IS_BETTER.has(k);
      const better = base.every((b) => typeof b !== "number" || (lower ? test[k] < b : test[k] > b));
      const values = [test[k]].concat(base);
      const bars = el("span", { class: "bars" });
      values.forEach((_, i) => { bars.append(barCell(values, i)); bars.append(el("br")); });
      const label = el("span", {}, METRIC_NAMES[k], lower ? el("span", { class: "aside", text: "lower is better" }) : null);
      rows.push([label, test[k]].concat(base,
        [better ? "yes" : "no", bars]));
    }
    return table(cols, rows, { caption: title, rowClass: (row) => (row[row.length - 2] === "yes" ? "is-best" : null) });
  }

  function renderMetrics(m) {
    const box = clear($("metrics-tables"));
    if (!m) { box.append(el("p", { class: "empty", text: "No snapshot is live." })); return; }
    const lr = state.links && partRecord(m, "links");
    if (lr && lr.metrics) {
      const t = lr.metrics.test || {};
      box.append(el("div", {}, metricsTable("Link model (" + state.links.kind + "), " + fmt(t.queries) + " test queries", t,
        lr.metrics.baselines, ["mrr", "hits@1", "hits@3", "hits@10", "mean_rank", "auc", "ap"])));
    }
    const br = state.labels && partRecord(m, "labels");
    if (br && br.metrics) {
      const t = br.metrics.test || {};
      box.append(el("div", {}, metricsTable("Label model (GCN), " + fmt(t.nodes) + " test nodes", t,
        br.metrics.baselines, ["accuracy", "macro_f1", "ece", "log_loss"])));
    }
    if (!box.firstChild) box.append(el("p", { class: "empty", text: "The manifest holds no metrics." }));
  }

  /* ---- training curves (SVG) ---- */

  function niceTicks(lo, hi, count) {
    if (!(hi > lo)) { hi = lo + 1; }
    const raw = (hi - lo) / Math.max(1, count);
    const mag = Math.pow(10, Math.floor(Math.log10(raw)));
    const step = [1, 2, 5, 10].map((f) => f * mag).find((s) => s >= raw) || raw;
    const ticks = [];
    for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) ticks.push(Number(v.toPrecision(12)));
    return ticks;
  }

  const SERIES_COLOURS = ["#0f6e63", "#d55e00", "#0072b2", "#cc79a7"];

  /* A figure: an SVG line chart of series [{name, points: [[x, y]]}], a key, and the numbers
   * as a table for those who cannot see the chart. */
  function lineChart(title, xLabel, series, marker) {
    const W = 480, H = 230, L = 52, R = 12, T = 12, B = 38;
    const all = series.flatMap((s) => s.points);
    const fig = el("figure");
    fig.append(el("figcaption", { text: title }));
    if (!all.length) { fig.append(el("p", { class: "empty", text: "No points recorded." })); return fig; }
    let x0 = Math.min(...all.map((p) => p[0])), x1 = Math.max(...all.map((p) => p[0]));
    let y0 = Math.min(...all.map((p) => p[1])), y1 = Math.max(...all.map((p) => p[1]));
    if (x1 === x0) x1 = x0 + 1;
    if (y1 === y0) { y0 -= 0.5; y1 += 0.5; }
    const pad = (y1 - y0) * 0.06;
    y0 -= pad; y1 += pad;
    const sx = (x) => L + (x - x0) / (x1 - x0) * (W - L - R);
    const sy = (y) => T + (1 - (y - y0) / (y1 - y0)) * (H - T - B);
    const summary = series.map((s) => {
      const last = s.points[s.points.length - 1];
      return s.name + " from " + fmt(s.points[0][1]) + " to " + fmt(last[1]) + " over " + s.points.length + " epochs";
    }).join("; ");
    const g = svg("svg", { viewBox: "0 0 " + W + " " + H, class: "chart", role: "img", "aria-label": title + ": " + summary });
    g.append(svg("title", { text: title }));
    for (const t of niceTicks(y0, y1, 5)) {
      if (t < y0 || t > y1) continue;
      g.append(svg("line", { x1: L, x2: W - R, y1: sy(t), y2: sy(t), class: "grid" }));
      g.append(svg("text", { x: L - 6, y: sy(t) + 4, "text-anchor": "end", text: fmt(t, 3) }));
    }
    for (const t of niceTicks(x0, x1, 6)) {
      if (t < x0 || t > x1) continue;
      g.append(svg("line", { x1: sx(t), x2: sx(t), y1: H - B, y2: H - B + 4, class: "axis" }));
      g.append(svg("text", { x: sx(t), y: H - B + 16, "text-anchor": "middle", text: fmt(t) }));
    }
    g.append(svg("line", { x1: L, x2: W - R, y1: H - B, y2: H - B, class: "axis" }));
    g.append(svg("line", { x1: L, x2: L, y1: T, y2: H - B, class: "axis" }));
    g.append(svg("text", { x: (L + W - R) / 2, y: H - 4, "text-anchor": "middle", text: xLabel }));
    if (marker && marker.x >= x0 && marker.x <= x1) {
      g.append(svg("line", { x1: sx(marker.x), x2: sx(marker.x), y1: T, y2: H - B, class: "best" }));
      g.append(svg("text", { x: sx(marker.x) + 4, y: T + 10, text: marker.label }));
    }
    series.forEach((s, i) => {
      const d = s.points.map((p, j) => (j ? "L" : "M") + sx(p[0]).toFixed(1) + " " + sy(p[1]).toFixed(1)).join("");
      g.append(svg("path", { d: d, class: "series", stroke: SERIES_COLOURS[i % SERIES_COLOURS.length] }));
      if (s.points.length === 1)
        g.append(svg("circle", { cx: sx(s.points[0][0]), cy: sy(s.points[0][1]), r: 3, fill: SERIES_COLOURS[i % SERIES_COLOURS.length] }));
    });
    fig.append(g);
    const keys = el("ul", { class: "keys" });
    series.forEach((s, i) => {
      const sw = el("span", { class: "swatch", "aria-hidden": "true" });
      sw.style.background = SERIES_COLOURS[i % SERIES_COLOURS.length];
      keys.append(el("li", {}, sw, s.name));
    });
    fig.append(keys);
    const epochs = Array.from(new Set(all.map((p) => p[0]))).sort((a, b) => a - b);
    const lookup = series.map((s) => new Map(s.points));
    const details = el("details");
    details.append(el("summary", { text: "The numbers" }));
    details.append(table([{ label: xLabel, num: true }].concat(series.map((s) => ({ label: s.name, num: true }))),
      epochs.map((e) => [e].concat(lookup.map((m) => (m.has(e) ? m.get(e) : null))))));
    fig.append(details);
    return fig;
  }

  function pointsOf(curve, key) {
    return (curve || []).filter((c) => typeof c[key] === "number" && isFinite(c[key])).map((c) => [c.epoch, c[key]]);
  }

  function renderCurves(m) {
    const box = clear($("curve-charts"));
    const lr = m && state.links && partRecord(m, "links");
    if (lr && Array.isArray(lr.curve) && lr.curve.length) {
      const best = get(lr, "model", "best_epoch");
      const marker = best ? { x: best, label: "best epoch " + best } : null;
      box.append(lineChart("Link model: training loss", "epoch", [{ name: "training loss", points: pointsOf(lr.curve, "loss") }], marker));
      box.append(lineChart("Link model: validation MRR", "epoch", [{ name: "validation MRR", points: pointsOf(lr.curve, "valid_mrr") }], marker));
    }
    const br = m && state.labels && partRecord(m, "labels");
    if (br && Array.isArray(br.curve) && br.curve.length) {
      const best = get(br, "model", "best_epoch");
      const marker = best ? { x: best, label: "best epoch " + best } : null;
      box.append(lineChart("Label model: loss", "epoch", [
        { name: "training loss", points: pointsOf(br.curve, "loss") },
        { name: "validation loss", points: pointsOf(br.curve, "valid_loss") }], marker));
      box.append(lineChart("Label model: validation accuracy", "epoch", [{ name: "validation accuracy", points: pointsOf(br.curve, "valid_accuracy") }], marker));
    }
    if (!box.firstChild) box.append(el("p", { class: "empty", text: "The live snapshot records no training curve." }));
  }

  /* ---- the embedding map (canvas) ---- */

  const PALETTE = ["#e69f00", "#56b4e9", "#009e73", "#0072b2", "#d55e00", "#cc79a7", "#999933",
    "#882255", "#44aa99", "#332288", "#aa4499", "#f0e442"];
  const NO_VALUE = "#9aa3a0";

  const view = { scale: 1, cx: 0, cy: 0, w: 0, h: 0, dpr: 1, hover: -1, selected: -1 };
  const canvas = $("map-canvas");
  const ctx = canvas.getContext("2d");
  let groups = [];   /* [{name, colour, idx: [point indices]}] */

  function colourKey() { return $("map-colour").value; }

  function buildGroups() {
    const map = state.map;
    groups = [];
    if (!map) return;
    const key = colourKey();
    const byName = new Map();
    map.points.forEach((p, i) => {
      const v = key === "none" ? "all nodes" : p[key];
      const name = v === null || v === undefined ? "(none)" : v;
      if (!byName.has(name)) byName.set(name, []);
      byName.get(name).push(i);
    });
    const order = key === "type" ? (map.types || []) : key === "none" ? [] : (map.classes || []);
    const names = Array.from(byName.keys()).sort((a, b) => {
      const ia = order.indexOf(a), ib = order.indexOf(b);
      if (a === "(none)") return 1;
      if (b === "(none)") return -1;
      return (ia < 0 ? 1e9 : ia) - (ib < 0 ? 1e9 : ib) || (a < b ? -1 : a > b ? 1 : 0);
    });
    names.forEach((n, i) => groups.push({
      name: n, idx: byName.get(n),
      colour: n === "(none)" ? NO_VALUE : key === "none" ? "#0f6e63" : PALETTE[i % PALETTE.length],
    }));
  }

  function renderLegend() {
    const ul = clear($("map-legend"));
    for (const g of groups) {
      const sw = el("span", { class: "swatch", "aria-hidden": "true" });
      sw.style.background = g.colour;
      ul.append(el("li", {}, sw, g.name + " (" + fmt(g.idx.length) + ")"));
    }
  }

  /* The value a share q of the sorted values lies below. */
  function quantile(sorted, q) {
    return sorted[Math.min(sorted.length - 1, Math.max(0, Math.round(q * (sorted.length - 1))))];
  }

  /* The view that shows the central 99% of the points along each axis with a margin (a few
   * far-out points would otherwise squeeze the rest into a corner; zoom out reaches them). */
  function fitView() {
    const map = state.map;
    if (!map || !map.points.length) { view.scale = 1; view.cx = view.cy = 0; return; }
    const xs = map.points.map((p) => p.x).sort((a, b) => a - b);
    const ys = map.points.map((p) => p.y).sort((a, b) => a - b);
    const x0 = quantile(xs, 0.005), x1 = quantile(xs, 0.995);
    const y0 = quantile(ys, 0.005), y1 = quantile(ys, 0.995);
    view.cx = (x0 + x1) / 2;
    view.cy = (y0 + y1) / 2;
    const spanX = Math.max(x1 - x0, 1e-9), spanY = Math.max(y1 - y0, 1e-9);
    view.scale = 0.9 * Math.min(view.w / spanX, view.h / spanY);
    view.base = view.scale;
  }

  const toScreenX = (x) => view.w / 2 + (x - view.cx) * view.scale;
  const toScreenY = (y) => view.h / 2 - (y - view.cy) * view.scale;

  function resizeCanvas() {
    const r = canvas.getBoundingClientRect();
    view.dpr = window.devicePixelRatio || 1;
    const hadSize = view.w > 0;
    view.w = Math.max(1, r.width);
    view.h = Math.max(1, r.height);
    canvas.width = Math.round(view.w * view.dpr);
    canvas.height = Math.round(view.h * view.dpr);
    if (!hadSize) fitView();
    draw();
  }

  function draw() {
    ctx.setTransform(view.dpr, 0, 0, view.dpr, 0, 0);
    ctx.clearRect(0, 0, view.w, view.h);
    const map = state.map;
    if (!map) return;
    const pts = map.points;
    const size = pts.length > 5000 ? 2.5 : 4;
    for (const g of groups) {
      ctx.fillStyle = g.colour;
      for (const i of g.idx) {
        const x = toScreenX(pts[i].x), y = toScreenY(pts[i].y);
        if (x < -size || y < -size || x > view.w + size || y > view.h + size) continue;
        ctx.fillRect(x - size / 2, y - size / 2, size, size);
      }
    }
    for (const [i, colour] of [[view.selected, "#1a56db"], [view.hover, "#b3261e"]]) {
      if (i < 0) continue;
      ctx.strokeStyle = colour;
      ctx.lineWidth = 2;
      ctx.beginPath();
      ctx.arc(toScreenX(pts[i].x), toScreenY(pts[i].y), 7, 0, 2 * Math.PI);
      ctx.stroke();
    }
  }

  /* The point nearest screen position (sx, sy) within r pixels, or -1. */
  function nearest(sx, sy, r) {
    const map = state.map;
    if (!map) return -1;
    let best = -1, bestD = r * r;
    map.points.forEach((p, i) => {
      const dx = toScreenX(p.x) - sx, dy = toScreenY(p.y) - sy, d = dx * dx + dy * dy;
      if (d <= bestD) { bestD = d; best = i; }
    });
    return best;
  }

  function describe(p) {
    const bits = [p.name];
    if (p.type !== null) bits.push("type " + p.type);
    if (p.label !== null) bits.push("predicted " + p.label);
    if (p.observed !== null) bits.push("observed " + p.observed);
    return bits.join(" · ");
  }

  function showTip(i, sx, sy) {
    const tip = $("map-tip");
    if (i < 0) { tip.hidden = true; return; }
    tip.textContent = describe(state.map.points[i]);
    tip.hidden = false;
    const left = Math.min(sx + 12, view.w - tip.offsetWidth - 4);
    tip.style.left = Math.max(4, left) + "px";
    tip.style.top = Math.max(4, sy - 30) + "px";
  }

  function select(i, how) {
    view.selected = i;
    draw();
    if (i < 0) return;
    const p = state.map.points[i];
    for (const id of ["lp-node", "le-source", "bp-node", "be-node"]) $(id).value = p.name;
    $("map-status").textContent = describe(p) + " — " + (how || "selected") + "; it is now the node of the queries below.";
  }

  function zoomAt(factor, sx, sy) {
    if (sx === undefined) { sx = view.w / 2; sy = view.h / 2; }
    const dx = (sx - view.w / 2) / view.scale, dy = (sy - view.h / 2) / view.scale;
    const base = view.base || view.scale;
    const next = Math.min(base * 400, Math.max(base * 0.25, view.scale * factor));
    view.cx += dx - dx * view.scale / next;
    view.cy -= dy - dy * view.scale / next;
    view.scale = next;
    draw();
  }

  function pan(dxPixels, dyPixels) {
    view.cx -= dxPixels / view.scale;
    view.cy += dyPixels / view.scale;
    draw();
  }

  function wireMap() {
    let drag = null;
    canvas.addEventListener("pointerdown", (e) => {
      drag = { x: e.clientX, y: e.clientY, moved: false };
      canvas.setPointerCapture(e.pointerId);
    });
    canvas.addEventListener("pointermove", (e) => {
      const r = canvas.getBoundingClientRect();
      const sx = e.clientX - r.left, sy = e.clientY - r.top;
      if (drag) {
        const dx = e.clientX - drag.x, dy = e.clientY - drag.y;
        if (drag.moved || Math.abs(dx) + Math.abs(dy) > 4) {
          drag.moved = true;
          pan(dx, dy);
          drag.x = e.clientX;
          drag.y = e.clientY;
          showTip(-1);
          return;
        }
      }
      const i = nearest(sx, sy, 8);
      if (i !== view.hover) { view.hover = i; draw(); }
      showTip(i, sx, sy);
    });
    canvas.addEventListener("pointerup", (e) => {
      const wasDrag = drag && drag.moved;
      drag = null;
      if (wasDrag) return;
      const r = canvas.getBoundingClientRect();
      const i = nearest(e.clientX - r.left, e.clientY - r.top, 8);
      if (i >= 0) select(i, "clicked");
    });
    canvas.addEventListener("pointerleave", () => { view.hover = -1; showTip(-1); draw(); });
    canvas.addEventListener("wheel", (e) => {
      e.preventDefault();
      const r = canvas.getBoundingClientRect();
      zoomAt(Math.exp(-e.deltaY * 0.0015), e.clientX - r.left, e.clientY - r.top);
    }, { passive: false });
    canvas.addEventListener("keydown", (e) => {
      const step = Math.min(view.w, view.h) * 0.1;
      const keys = {
        ArrowLeft: () => pan(step, 0), ArrowRight: () => pan(-step, 0),
        ArrowUp: () => pan(0, step), ArrowDown: () => pan(0, -step),
        "+": () => zoomAt(1.25), "=": () => zoomAt(1.25), "-": () => zoomAt(0.8),
        "0": () => { fitView(); draw(); },
        Enter: () => select(nearest(view.w / 2, view.h / 2, Math.max(view.w, view.h)), "nearest the centre"),
      };
      if (keys[e.key]) { e.preventDefault(); keys[e.key](); }
    });
    $("zoom-in").addEventListener("click", () => zoomAt(1.25));
    $("zoom-out").addEventListener("click", () => zoomAt(0.8));
    $("zoom-reset").addEventListener("click", () => { fitView(); draw(); });
    $("map-colour").addEventListener("change", () => { buildGroups(); renderLegend(); draw(); });
    $("map-points").addEventListener("change", () => loadMap());
    $("map-form").addEventListener("submit", (e) => { e.preventDefault(); findNode($("map-find").value.trim()); });
    if (window.ResizeObserver) new ResizeObserver(() => resizeCanvas()).observe(canvas);
    else window.addEventListener("resize", resizeCanvas);
  }

  function findNode(name) {
    if (!state.map || !name) return;
    const i = state.map.points.findIndex((p) => p.name === name);
    if (i < 0) {
      $("map-status").textContent = name + " is not among the " + fmt(state.map.points.length) +
        " points shown (a sample of " + fmt(state.map.nodes) + " nodes, or no such node).";
      return;
    }
    const p = state.map.points[i];
    view.cx = p.x;
    view.cy = p.y;
    view.scale = Math.max(view.scale, (view.base || view.scale) * 4);
    select(i, "found");
  }

  function fillNodeNames(points) {
    const list = clear($("node-names"));
    for (const p of points.slice(0, 5000)) list.append(el("option", { value: p.name }));
  }

  async function loadMap() {
    const status = $("map-status");
    status.textContent = "Projecting the embeddings…";
    const r = await api("/v1/map?max_points=" + encodeURIComponent($("map-points").value));
    if (!r.ok) {
      state.map = null;
      groups = [];
      draw();
      clear($("map-legend"));
      status.textContent = "";
      status.append(r.status === 503 ? "No snapshot is live." : errorBox(r, "GET /v1/map"));
      return;
    }
    const m = r.body;
    state.map = m;
    view.hover = view.selected = -1;
    const colour = $("map-colour");
    for (const opt of colour.options) {
      if (opt.value === "type") opt.disabled = !m.types;
      if (opt.value === "label" || opt.value === "observed") opt.disabled = !m.classes;
    }
    if (colour.selectedOptions[0] && colour.selectedOptions[0].disabled)
      colour.value = m.types ? "type" : m.classes ? "label" : "none";
    buildGroups();
    fitView();
    draw();
    renderLegend();
    const share = m.explained_variance_ratio.map((v) => (100 * v).toFixed(1) + "%");
    status.textContent = fmt(m.points.length) + " of " + fmt(m.nodes) + " nodes" + (m.sampled ? " (a fixed sample)" : "") +
      ", projected from the " + m.dim + "-dimensional rows of " + m.from + " onto their first two principal components, which explain " +
      share[0] + " and " + share[1] + " of the variance.";
    canvas.setAttribute("aria-label", "Scatter plot of " + m.points.length + " node embeddings coloured by " +
      colour.selectedOptions[0].textContent + "; focus it to move with the arrow keys and zoom with + and -");
    const caution = $("map-caution");
    caution.hidden = !m.caution;
    clear(caution);
    if (m.caution) caution.append(el("strong", { text: "Caution: the map shows predicted labels" }), m.caution);
    fillNodeNames(m.points);
    fillRelations(m.relations);
    const types = $("lp-type");
    while (types.options.length > 1) types.remove(1);
    for (const t of m.types || []) types.append(el("option", { value: t, text: t }));
  }

  /* ---- the query forms ---- */

  function formValues(form) {
    const v = {};
    for (const e of form.elements) if (e.name) v[e.name] = e.type === "checkbox" ? e.checked : e.value.trim();
    return v;
  }

  function query(params) {
    const q = new URLSearchParams();
    for (const [k, v] of Object.entries(params)) if (v !== "" && v !== null && v !== undefined && v !== false) q.set(k, String(v));
    return q.toString();
  }

  /* Run f(values) for a form's submit, showing errors for a missing required field. */
  function onSubmit(id, resultId, f) {
    const form = $(id);
    form.addEventListener("submit", async (e) => {
      e.preventDefault();
      const out = clear($(resultId));
      for (const input of form.querySelectorAll("[required]")) {
        if (!input.value.trim()) {
          const label = form.querySelector("label[for='" + input.id + "']");
          out.append(el("div", { class: "error", role: "alert", text: (label ? label.textContent : input.name) + " is needed." }));
          input.focus();
          return;
        }
      }
      const button = form.querySelector("button[type='submit']");
      button.disabled = true;
      form.setAttribute("aria-busy", "true");
      try { await f(formValues(form), out); } finally {
        button.disabled = false;
        form.removeAttribute("aria-busy");
      }
    });
  }

  async function linkPredict(v, out) {
    const params = v.direction === "in" ? { target: v.node, direction: "in" } : { source: v.node };
    Object.assign(params, { relation: v.relation, candidate_type: v.candidate_type, k: v.k, include_known: v.include_known ? "true" : "" });
    const path = "/v1/links/predict?" + query(params);
    const r = await api(path);
    if (!r.ok) { out.append(errorBox(r, "Link prediction")); return; }
    const b = r.body, isOut = b.direction === "out";
    const hasProb = b.predictions.some((p) => "probability" in p);
    const cols = [{ label: "Rank", num: true }, { label: isOut ? "Target" : "Source" }, { label: "Score", num: true }];
    if (hasProb) cols.push({ label: "Probability", num: true });
    const rows = b.predictions.map((p, i) => [i + 1, isOut ? p.target : p.source, p.score].concat(hasProb ? [p.probability] : []));
    out.append(el("p", { class: "summary", text: (isOut ? "Best new targets of " + b.source : "Best new sources of " + b.target) +
      " by relation " + b.relation + (b.candidate_type ? ", among type " + b.candidate_type : "") +
      (b.include_known ? ", known links included" : ", known links left out") + " (version " + b.version + ")." }));
    out.append(rows.length ? table(cols, rows, { caption: rows.length + " predicted link" + (rows.length === 1 ? "" : "s") })
      : el("p", { class: "empty", text: "No candidate is left." }));
  }

  async function linkExplain(v, out) {
    const r = await api("/v1/links/explain?" + query({ source: v.source, target: v.target, relation: v.relation, k: v.k }));
    if (!r.ok) { out.append(errorBox(r, "Link explanation")); return; }
    const b = r.body;
    out.append(el("p", { class: "summary", text: b.source + " → " + b.target + " by " + b.relation + ": score " + fmt(b.score) +
      ("probability" in b ? ", probability " + fmt(b.probability) : "") + "; " + (b.known ? "already a known link" : "not a known link") +
      " (version " + b.version + ")." }));
    out.append(b.similar_sources.length ? table([{ label: "Similar source" }, { label: "Cosine similarity", num: true }, { label: "Its score", num: true }],
      b.similar_sources.map((s) => [s.source, s.similarity, s.score]),
      { caption: "Nodes that already link to " + b.target + ", most like " + b.source + " first (" + b.similar_sources.length + " of " + b.similar_sources_total + ")" })
      : el("p", { class: "empty", text: "No other node links to " + b.target + " by this relation." }));
    out.append(b.paths.length ? table([{ label: "Via" }, { label: "Strength", num: true }, { label: "First hop" }, { label: "Second hop" }],
      b.paths.map((p) => [p.via, p.strength].concat(p.hops.map((h) => h.source + " → " + h.target + " (" + h.relation + ", score " + fmt(h.score) + ")"))),
      { caption: "Two-step paths in the known graph (" + b.paths.length + " of " + b.paths_total + ")" })
      : el("p", { class: "empty", text: "No two-step path joins them in the known graph." }));
  }

  function observedText(o) {
    return o ? o.class + " (" + (o.part === "none" ? "given, outside the split" : "used for " + o.part) + ")" : "none given";
  }

  async function labelPredict(v, out) {
    const r = await api("/v1/labels/predict?" + query({ node: v.node }));
    if (!r.ok) { out.append(errorBox(r, "Label prediction")); return; }
    const b = r.body;
    out.append(cautionBox(b.caution));
    out.append(el("p", { class: "summary", text: b.node + ": predicted " + b.predicted + " with probability " + fmt(b.probability) +
      "; observed label: " + observedText(b.observed) + " (version " + b.version + ")." }));
    out.append(table([{ label: "Class" }, { label: "Probability", num: true }, { label: "scale", cls: "barcell" }],
      b.classes.map((c) => {
        const bar = el("span", { class: "bar", "aria-hidden": "true" });
        bar.style.width = Math.max(1, Math.round(100 * c.probability)) + "%";
        return [c.class, c.probability, bar];
      }), { caption: "Class probabilities, highest first" }));
  }

  async function labelExplain(v, out) {
    const r = await api("/v1/labels/explain?" + query({ node: v.node, k: v.k }));
    if (!r.ok) { out.append(errorBox(r, "Label explanation")); return; }
    const b = r.body, c = b.predicted;
    out.append(cautionBox(b.caution));
    out.append(el("p", { class: "summary", text: b.node + ": predicted " + c + " with probability " + fmt(b.probabilities[c]) +
      ". Its score (logit) " + fmt(b.check.logit) + " is the sum of the terms below: " + fmt(b.check.sum_of_terms) + " (version " + b.version + ")." }));
    const rows = [[b.node + " (itself)", b.self.weight, b.self.contribution[c]]];
    for (const n of b.neighbours) rows.push([n.node, n.weight, n.contribution_to_predicted]);
    if (b.others.count) rows.push([b.others.count + " other neighbour" + (b.others.count === 1 ? "" : "s"), null, b.others.contribution_to_predicted]);
    if (b.bias) rows.push(["bias", null, b.bias[c]]);
    rows.push(["sum", null, b.check.sum_of_terms]);
    out.append(table([{ label: "Term" }, { label: "Weight in A′", num: true }, { label: "Share of " + c + "'s score", num: true }], rows,
      { caption: "What pushed " + b.node + " towards " + c + ", largest first", rowClass: (row, i) => (i === rows.length - 1 ? "total" : null) }));
  }

  function enableForms() {
    const set = (ids, on, what) => {
      for (const id of ids) {
        const form = $(id), fs = form.querySelector("fieldset");
        fs.disabled = !on;
        let note = form.querySelector(".disabled-note");
        const text = state.model ? "The live snapshot has no " + what + " model." : "No snapshot is live yet.";
        if (on && note) note.remove();
        if (!on && !note) fs.append(note = el("p", { class: "disabled-note" }));
        if (!on) note.textContent = text;
      }
    };
    set(["form-link-predict", "form-link-explain"], !!state.links, "link");
    set(["form-label-predict", "form-label-explain"], !!state.labels, "label");
  }

  /* The relation selects: the model's only relation needs no name; with several, one is
   * chosen (the first by default). */
  function fillRelations(names) {
    for (const select of document.querySelectorAll("select.relations")) {
      const was = select.value;
      clear(select);
      if (!names || names.length <= 1)
        select.append(el("option", { value: "", text: names && names.length ? names[0] : "the model's only relation" }));
      else
        for (const n of names) select.append(el("option", { value: n, text: n }));
      if (names && names.includes(was)) select.value = was;
    }
  }

  /* ---- loading ---- */

  async function loadAll() {
    document.body.removeAttribute("data-ready");
    const [model, snaps, health] = await Promise.all([api("/v1/model"), api("/v1/snapshots"), api("/v1/health")]);
    state.model = model.ok ? model.body : null;
    const p = partsOf(state.model);
    state.links = p.links;
    state.labels = p.labels;
    state.version = state.model ? state.model.version : null;
    renderLive(model);
    renderFacts(state.model);
    renderHistory(snaps);
    renderHealth(health);
    renderMetrics(state.model);
    renderCurves(state.model);
    enableForms();
    if (state.model) await loadMap();
    else {
      state.map = null;
      groups = [];
      draw();
      clear($("map-legend"));
      $("map-status").textContent = "No snapshot is live yet.";
    }
    document.body.setAttribute("data-ready", "1");
  }

  /* Say so when another version has gone live since the page was loaded (GET /healthz is
   * cheap); "Reload all" then shows it. */
  async function watchVersion() {
    const r = await api("/healthz");
    const v = get(r, "body", "version");
    if (!r.ok || v === undefined || v === state.version || document.getElementById("newer")) return;
    $("live-line").append(" ", el("strong", { id: "newer", text: v === null ? "(no snapshot is live now: reload)" : "(version " + v + " is live now: reload)" }));
  }

  onSubmit("form-link-predict", "lp-result", linkPredict);
  onSubmit("form-link-explain", "le-result", linkExplain);
  onSubmit("form-label-predict", "bp-result", labelPredict);
  onSubmit("form-label-explain", "be-result", labelExplain);
  $("refresh").addEventListener("click", () => loadAll());
  window.setInterval(watchVersion, 15000);
  wireMap();
  resizeCanvas();
  loadAll();
})();
