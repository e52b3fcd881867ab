// tiltopt Pareto explorer: draws everything from the JSON embedded in the page (no server).
(function () {
  "use strict";
  const D = JSON.parse(document.getElementById("tiltopt-data").textContent);
  const $ = (id) => document.getElementById(id);
  const GREY = "#b4b9be";
  const colLookup = {};
  D.columns.forEach((c) => { colLookup[c.key] = c; });
  const withUnit = (c) => (c.unit && c.unit !== "-" ? `${c.label} [${c.unit}]` : c.label);
  const fmt = (v, d) => (v === null || v === undefined || !isFinite(v) ? "–" : Number(v).toFixed(d === undefined ? 2 : d));

  // ------------------------------------------------------------ row groups
  const all = [...Array(D.n).keys()];
  const feasIdx = all.filter((i) => D.feasible[i]);
  const infIdx = all.filter((i) => !D.feasible[i]);
  const mergedIdx = all.filter((i) => D.merged[i]);
  // Three or more objectives: a scatter-plot matrix of them. Two: one plain scatter plot (plotly's splom
  // fails on a single panel). One: a strip of the designs along the objective, under their histogram.
  const objDims = D.objectives.filter((k) => colLookup[k]);
  const plotKind = objDims.length >= 3 ? "matrix" : (objDims.length === 2 ? "pair" : "strip");
  const dims = plotKind === "strip" ? (objDims.length ? objDims : ["generation"].filter((k) => colLookup[k])) : objDims;
  const state = { colour: D.runs.length > 1 ? "__run" : (dims[0] || "__run"), view: "matrix", selected: -1,
                  lean: 0, travel: 0 };

  // ------------------------------------------------------------ header
  $("stamp").textContent = `generated ${D.generated} · tiltopt ${D.versions.tiltopt}`;
  $("safety").textContent = D.safety;
  $("run-legend").innerHTML = D.runs.map((r, k) =>
    `<span class="item"><span class="sw" style="background:${D.palette[k % D.palette.length]}"></span>` +
    `<b>${esc(r.id)}</b>&nbsp;${esc(r.template)} · ${r.n_front} on front` +
    (r.n_infeasible ? `, ${r.n_infeasible} infeasible` : "") + `</span>`).join("");

  function esc(s) {
    return String(s === null || s === undefined ? "" : s).replace(/[&<>"]/g, (c) => ({ "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;" }[c]));
  }

  // ------------------------------------------------------------ colour-by
  const sel = $("colour-by");
  function addGroup(label, items) {
    if (!items.length) return;
    const g = document.createElement("optgroup");
    g.label = label;
    items.forEach(([key, text]) => { const o = document.createElement("option"); o.value = key; o.textContent = text; g.appendChild(o); });
    sel.appendChild(g);
  }
  addGroup("Run and template", [["__run", "run"], ["__template", "template"]]);
  const byGroup = (g) => D.columns.filter((c) => c.group === g).map((c) => [c.key, withUnit(c)]);
  addGroup("Objectives (as minimised)", byGroup("objective"));
  addGroup("Design variables", byGroup("variable"));
  addGroup("Metrics", byGroup("metric"));
  addGroup("Constraints", byGroup("constraint"));
  addGroup("Search", byGroup("meta"));
  sel.value = state.colour;

  function colourOf(idx) {
    const key = state.colour;
    if (key === "__run" || key === "__template") {
      const codes = key === "__run" ? D.run : D.template;
      const names = key === "__run" ? D.runs.map((r) => r.id) : D.templates;
      const k = Math.max(names.length, 1);
      const scale = [];
      names.forEach((_, j) => {
        const c = D.palette[j % D.palette.length];
        scale.push([j / k, c], [(j + 1) / k, c]);
      });
      if (names.length === 1) scale.push([1, D.palette[0]]);
      return { color: idx.map((i) => codes[i]), colorscale: scale, cmin: -0.5, cmax: k - 0.5,
               colorbar: { title: { text: key === "__run" ? "run" : "template" }, tickvals: names.map((_, j) => j),
                           ticktext: names, len: 0.5 } };
    }
    const vals = D.values[key];
    const c = colLookup[key];
    return { color: idx.map((i) => (vals[i] === null ? NaN : vals[i])), colorscale: D.scale,
             colorbar: { title: { text: withUnit(c), side: "right" }, len: 0.6 } };
  }

  function hoverText(i) {
    const run = D.runs[D.run[i]];
    let s = `<b>${esc(D.ids[i])}</b> · ${esc(run.id)}` + (D.feasible[i] ? "" : ` · <i>infeasible: ${esc(D.reason[i])}</i>`) +
      (D.detail[String(i)] ? "" : " · <i>no drawing precomputed</i>");
    D.objectives.forEach((k) => { const c = colLookup[k]; if (c) s += `<br>${esc(withUnit(c))}: ${fmt(D.values[k][i], 3)}`; });
    if (state.colour.indexOf("__") !== 0 && !D.objectives.includes(state.colour)) {
      const c = colLookup[state.colour];
      s += `<br>${esc(withUnit(c))}: ${fmt(D.values[state.colour][i], 3)}`;
    }
    return s;
  }

  // ------------------------------------------------------------ scatter matrix
  const traceRows = [];   // the design rows of each trace (null: a trace of no designs)
  const curves = { designs: 0, infeasible: 1 };
  function splomTrace(idx, extra) {
    return Object.assign({
      type: "splom",
      dimensions: dims.map((k) => ({ label: axisLabel(withUnit(colLookup[k])), values: idx.map((i) => D.values[k][i]) })),
      text: idx.map(hoverText), hovertemplate: "%{text}<extra></extra>",
      diagonal: { visible: false }, showupperhalf: false,
    }, extra);
  }
  // a fixed vertical spread for the strip (golden-ratio sequence of the row number): the same every redraw
  const spread = (i) => 0.7 * ((i * 0.6180339887498949) % 1) - 0.35;
  function pointTrace(idx, extra) {
    if (plotKind === "matrix") return splomTrace(idx, extra);
    const key = dims[0];
    return Object.assign({
      type: "scatter", mode: "markers", x: idx.map((i) => (key ? D.values[key][i] : i)),
      y: idx.map((i) => (plotKind === "pair" ? D.values[dims[1]][i] : spread(i))),
      text: idx.map(hoverText), hovertemplate: "%{text}<extra></extra>",
    }, extra);
  }
  function matrixTraces() {
    traceRows.length = 0;
    const t = [];
    if (plotKind === "strip" && dims.length) {   // above the strip: how the feasible designs spread
      t.push({ type: "histogram", x: feasIdx.map((i) => D.values[dims[0]][i]), yaxis: "y2", hoverinfo: "skip",
               marker: { color: "rgba(13, 124, 134, 0.16)", line: { width: 1, color: "rgba(13, 124, 134, 0.45)" } } });
      traceRows.push(null);
    }
    const col = colourOf(feasIdx);
    curves.designs = t.length;
    t.push(pointTrace(feasIdx, { name: "designs", marker: Object.assign({ size: feasIdx.length > 300 ? 5 : 7, line: { width: 0.4, color: "#ffffff" }, showscale: true }, col) }));
    traceRows.push(feasIdx);
    curves.infeasible = t.length;
    t.push(pointTrace(infIdx, { name: "infeasible", visible: $("show-infeasible").checked,
                                 marker: { size: 5, color: GREY, opacity: 0.55 } }));
    traceRows.push(infIdx);
    t.push(pointTrace(mergedIdx, { name: "merged front", visible: $("highlight-front").checked, hoverinfo: "skip",
                                    hovertemplate: null, marker: { size: feasIdx.length > 300 ? 9 : 13, color: "rgba(0,0,0,0)", line: { width: 1.2, color: "#14325c" } } }));
    traceRows.push(mergedIdx);
    const s = state.selected >= 0 ? [state.selected] : [];
    t.push(pointTrace(s, { name: "selected", hoverinfo: "skip", hovertemplate: null,
                           marker: { size: 18, symbol: "diamond-open", color: "#c8553d", line: { width: 2.5, color: "#c8553d" } } }));
    traceRows.push(s);
    return t;
  }
  // Long axis titles of the matrix take two lines (the unit on the second), so that narrow
  // panels do not run neighbouring titles together.
  function axisLabel(text) {
    if (text.length <= 18) return text;
    const cut = text.lastIndexOf(" [");
    return cut > 0 ? `${text.slice(0, cut)}<br>${text.slice(cut + 1)}` : text;
  }
  function matrixLayout() {
    const lay = { margin: { l: 70, r: 30, t: 20, b: 60 }, hovermode: "closest", dragmode: "select", showlegend: false,
                  paper_bgcolor: "#fbfaf7", plot_bgcolor: "#ffffff", font: { size: 12, color: "#1d2733" } };
    if (plotKind !== "matrix") return plainLayout(lay);
    const n = dims.length;
    for (let k = 1; k <= n; k++) {
      const ax = { gridcolor: "#e6eaee", zeroline: false, automargin: true };
      const r = axisRange(dims[k - 1]);
      if (r) { ax.range = r; ax.autorange = false; }
      lay[`xaxis${k === 1 ? "" : k}`] = Object.assign({}, ax);
      lay[`yaxis${k === 1 ? "" : k}`] = Object.assign({}, ax);
    }
    return lay;
  }
  function plainLayout(lay) {
    const axis = (key) => {
      const ax = { gridcolor: "#e6eaee", zeroline: false, automargin: true,
                   title: { text: key ? withUnit(colLookup[key]) : "design" } };
      const r = key ? axisRange(key) : null;
      if (r) { ax.range = r; ax.autorange = false; }
      return ax;
    };
    lay.dragmode = "zoom";
    lay.xaxis = axis(dims[0]);
    if (plotKind === "pair") {
      lay.yaxis = axis(dims[1]);
    } else {
      lay.yaxis = { domain: [0, 0.6], range: [-0.5, 0.5], showticklabels: false, showgrid: false, zeroline: false,
                    fixedrange: true, title: { text: "designs (spread to be seen)" } };
      lay.yaxis2 = { domain: [0.68, 1], anchor: "x", rangemode: "tozero", gridcolor: "#e6eaee", zeroline: false,
                     title: { text: "feasible designs" }, automargin: true };
    }
    return lay;
  }
  // Axis ranges follow the feasible designs (infeasible ones often carry far-off values); infeasible designs
  // inside the range are shown, the rest are counted as off the axes.
  function axisRange(key) {
    const base = feasIdx.length ? feasIdx : all;
    const v = base.map((i) => D.values[key][i]).filter((x) => x !== null && isFinite(x));
    if (!v.length) return null;
    let lo = Math.min(...v), hi = Math.max(...v);
    const pad = (hi - lo) * 0.25 || Math.abs(hi) * 0.1 || 1;
    return [lo - pad, hi + pad];
  }
  function offAxes() {
    let n = 0;
    infIdx.forEach((i) => { if (dims.some((k) => { const r = axisRange(k), x = D.values[k][i]; return r && x !== null && (x < r[0] || x > r[1]); })) n++; });
    return n;
  }
  const nOff = offAxes();
  if (plotKind !== "matrix") $("view-matrix").textContent = plotKind === "pair" ? "Scatter plot" : "Strip and histogram";
  const matrixDiv = $("matrix");
  Plotly.newPlot(matrixDiv, matrixTraces(), matrixLayout(), { responsive: true, displaylogo: false });
  matrixDiv.on("plotly_click", (ev) => {
    if (!ev || !ev.points || !ev.points.length) return;
    const p = ev.points.find((q) => q.curveNumber === curves.designs || q.curveNumber === curves.infeasible) ||
      ev.points.find((q) => traceRows[q.curveNumber]);
    if (!p) return;
    const rows = traceRows[p.curveNumber];
    if (!rows || rows[p.pointIndex] === undefined) return;
    openDetail(rows[p.pointIndex]);
  });
  function redrawMatrix() { Plotly.react(matrixDiv, matrixTraces(), matrixLayout()); }

  // ------------------------------------------------------------ parallel coordinates
  const parDiv = $("parallel");
  let parDrawn = false;
  function drawParallel() {
    const idx = feasIdx;   // infeasible designs are greyed in the scatter matrix only
    const col = colourOf(idx);
    const pdims = D.objectives.filter((k) => colLookup[k]).map((k) => ({ label: withUnit(colLookup[k]), values: idx.map((i) => D.values[k][i]) }));
    const trace = { type: "parcoords", dimensions: pdims,
                    line: { color: col.color, colorscale: col.colorscale, cmin: col.cmin, cmax: col.cmax, showscale: true, colorbar: col.colorbar },
                    labelangle: -12, labelfont: { size: 12 }, rangefont: { size: 10 }, tickfont: { size: 11 } };
    Plotly.react(parDiv, [trace], { margin: { l: 80, r: 90, t: 70, b: 30 }, paper_bgcolor: "#fbfaf7", font: { color: "#1d2733" } },
                 { responsive: true, displaylogo: false });
    parDrawn = true;
  }

  function setView(v) {
    state.view = v;
    $("view-matrix").classList.toggle("active", v === "matrix");
    $("view-parallel").classList.toggle("active", v === "parallel");
    matrixDiv.hidden = v !== "matrix";
    parDiv.hidden = v !== "parallel";
    $("view-hint").textContent = v === "parallel"
      ? "Drag along an axis to filter designs; drag an axis title to reorder. Feasible front designs only; click a point in the scatter matrix to open a design."
      : "Hover a point for its values; click a point to open its design. Objectives are shown as minimised.";
    if (v === "parallel") drawParallel(); else Plotly.Plots.resize(matrixDiv);
  }
  $("view-matrix").addEventListener("click", () => setView("matrix"));
  $("view-parallel").addEventListener("click", () => setView("parallel"));

  function updateCount() {
    $("count").textContent = `${feasIdx.length} feasible on the fronts · ${mergedIdx.length} on the merged front` +
      (infIdx.length ? ` · ${infIdx.length} infeasible ${$("show-infeasible").checked ? "shown" + (nOff ? ` (${nOff} off the axes)` : "") : "hidden"}` : "");
  }
  sel.addEventListener("change", () => {
    state.colour = sel.value;
    redrawMatrix();
    if (state.view === "parallel" || parDrawn) drawParallel();
  });
  $("show-infeasible").addEventListener("change", () => { redrawMatrix(); if (parDrawn) drawParallel(); updateCount(); });
  $("highlight-front").addEventListener("change", () => redrawMatrix());
  updateCount();

  // ------------------------------------------------------------ detail
  let cur = null;   // {i, run, det, bounds}
  $("detail-close").addEventListener("click", () => {
    $("detail").hidden = true; document.querySelector(".layout").classList.remove("with-detail");
    state.selected = -1; redrawMatrix(); Plotly.Plots.resize(matrixDiv);
  });
  $("copy-cmd").addEventListener("click", () => {
    const t = $("sheet-cmd").textContent;
    if (navigator.clipboard) navigator.clipboard.writeText(t).catch(() => {});
  });

  function openDetail(i) {
    const run = D.runs[D.run[i]];
    const det = D.detail[String(i)] || null;
    state.selected = i;
    cur = { i, run, det, bounds: det ? stateBounds(run, det) : null };
    $("detail").hidden = false;
    document.querySelector(".layout").classList.add("with-detail");
    $("detail").dataset.candidate = D.ids[i];
    $("detail-id").textContent = D.ids[i];
    $("detail-sub").innerHTML = `run <b>${esc(run.id)}</b> · template ${esc(run.template)} · ` +
      (D.feasible[i] ? (D.merged[i] ? "feasible, on the merged front" : "feasible, on its run's front")
                     : `<span style="color:#b3411f">infeasible: ${esc(D.reason[i] || "constraint violated")}</span>`);
    $("sheet-cmd").textContent = run.sheet_cmd + D.ids[i];
    const ts = $("travel-select");
    ts.innerHTML = run.travel_mm.map((t, k) => `<option value="${k}">${fmt(t, 0)} mm</option>`).join("");
    let t0 = 0;
    run.travel_mm.forEach((t, k) => { if (Math.abs(t) < Math.abs(run.travel_mm[t0])) t0 = k; });
    ts.value = String(t0);
    state.travel = t0;
    const sl = $("lean-slider");
    sl.max = String(run.lean_deg.length - 1);
    sl.value = "0";
    state.lean = 0;
    fillTables(i);
    $("detail-notes").innerHTML = run.notes.map((n) => `<li>${esc(n)}</li>`).join("") +
      `<li>Gaps drawn in red are front-view gaps in the linkage plane (tyre outline to links, bodies and shell section), not the 3-D clearance metric` + (det && det.gap_label.indexOf("3-D") >= 0 ? "; the last curve is the 3-D clearance over the steer range." : "; so is the last curve (the clearance part did not run for this page).") + `</li>`;
    redrawMatrix();
    requestAnimationFrame(() => { Plotly.Plots.resize(matrixDiv); drawState(); drawCurves(); });
  }

  function fillTables(i) {
    const rowsOf = (g) => D.columns.filter((c) => c.group === g).map((c) =>
      `<tr><td>${esc(c.label)}</td><td class="num">${fmt(D.values[c.key][i], 3)}</td><td class="unit">${esc(c.unit === "-" ? "" : c.unit)}</td></tr>`).join("");
    $("var-table").innerHTML = rowsOf("variable") || "<tr><td>none</td></tr>";
    $("metric-table").innerHTML = `<tr><th colspan="3">objectives, as minimised</th></tr>` + rowsOf("objective") +
      `<tr><th colspan="3">metrics</th></tr>` + rowsOf("metric");
  }

  $("lean-slider").addEventListener("input", (e) => { state.lean = Number(e.target.value); drawState(); markCurves(); });
  $("travel-select").addEventListener("change", (e) => { state.travel = Number(e.target.value); drawState(); });

  // geometry helpers (same conventions as tiltopt/reports/drawing.py)
  function tyre(c, g, R, r, n) {
    const out = [];
    const cs = Math.cos(g), sn = Math.sin(g);
    const put = (u, w) => out.push([c[0] + u * cs + w * sn, c[1] - u * sn + w * cs]);
    for (let k = 0; k < n; k++) { const t = Math.PI * k / (n - 1); put(r * Math.cos(t), (R - r) + r * Math.sin(t)); }
    for (let k = 0; k < n; k++) { const t = Math.PI * k / (n - 1); put(-r * Math.cos(t), -(R - r) - r * Math.sin(t)); }
    return out;
  }
  function toGlobal(p, o) {
    const c = Math.cos(o[2]), s = Math.sin(o[2]);
    return [o[0] + c * p[0] + s * p[1], o[1] - s * p[0] + c * p[1]];
  }
  function pointsOf(st) { const P = []; for (let k = 0; k < st.p.length; k += 2) P.push([st.p[k] / 10, st.p[k + 1] / 10]); return P; }
  function segDist(p, a, b) {
    const abx = b[0] - a[0], aby = b[1] - a[1];
    const L2 = Math.max(abx * abx + aby * aby, 1e-12);
    let t = ((p[0] - a[0]) * abx + (p[1] - a[1]) * aby) / L2;
    t = Math.max(0, Math.min(1, t));
    const q = [a[0] + abx * t, a[1] + aby * t];
    return [Math.hypot(p[0] - q[0], p[1] - q[1]), q];
  }
  function stateBounds(run, det) {
    let y0 = Infinity, y1 = -Infinity, z1 = -Infinity;
    det.s.forEach((row) => row.forEach((st) => {
      if (!st) return;
      pointsOf(st).forEach((p) => { y0 = Math.min(y0, p[0]); y1 = Math.max(y1, p[0]); z1 = Math.max(z1, p[1]); });
      run.spec.wheels.forEach((w, k) => tyre(pointsOf(st)[w.centre], st.c[k], det.wheels[k][0], det.wheels[k][1], 8)
        .forEach((p) => { y0 = Math.min(y0, p[0]); y1 = Math.max(y1, p[0]); z1 = Math.max(z1, p[1]); }));
      if (run.shell) run.shell.forEach((q) => { const p = toGlobal(q, st.o); y0 = Math.min(y0, p[0]); y1 = Math.max(y1, p[0]); z1 = Math.max(z1, p[1]); });
    }));
    const span = Math.max(y1 - y0, z1, 100);
    return { y0: y0 - 0.05 * span, y1: y1 + 0.05 * span, z0: -0.06 * span, z1: z1 + 0.05 * span, span };
  }

  function drawState() {
    if (!cur) return;
    const { run, det } = cur;
    const lean = run.lean_deg[state.lean];
    $("lean-value").textContent = `${fmt(lean, 1)} deg`;
    const box = $("drawing");
    if (!det || !run.spec) {
      box.innerHTML = `<p class="notes" style="padding:12px">No drawing precomputed for this design (see the notes below).</p>`;
      $("state-readout").textContent = "";
      return;
    }
    const st = det.s[state.travel][state.lean];
    if (!st) {
      const why = det.status[state.travel][state.lean] || "not reached";
      box.innerHTML = `<svg viewBox="0 0 400 60" data-lean="${lean}"><text x="10" y="35" fill="#b3411f" font-size="14">State not reached (lean ${fmt(lean, 1)} deg, travel ${fmt(run.travel_mm[state.travel], 0)} mm): ${esc(why)}</text></svg>`;
      $("state-readout").innerHTML = `<span class="bad">not reached: ${esc(why)}</span>`;
      return;
    }
    const b = cur.bounds, spec = run.spec, P = pointsOf(st);
    const hz = b.z1 - b.z0, lw = hz / 300, fs = hz / 26;
    const X = (p) => `${p[0].toFixed(1)},${(-p[1]).toFixed(1)}`;
    const poly = (a) => a.map(X).join(" ");
    const s = [];
    s.push(`<svg xmlns="http://www.w3.org/2000/svg" viewBox="${b.y0} ${-b.z1} ${b.y1 - b.y0} ${b.z1 - b.z0}" preserveAspectRatio="xMidYMid meet" data-lean="${lean}" data-travel="${run.travel_mm[state.travel]}">`);
    s.push(`<rect x="${b.y0 - 2 * b.span}" y="0" width="${b.y1 - b.y0 + 4 * b.span}" height="${-b.z0}" fill="#efe9e1"/>`);
    s.push(`<line x1="${b.y0 - 2 * b.span}" y1="0" x2="${b.y1 + 2 * b.span}" y2="0" stroke="#6b5b4b" stroke-width="${lw * 1.2}"/>`);
    let shellG = null;
    if (run.shell) {
      shellG = run.shell.map((q) => toGlobal(q, st.o));
      s.push(`<polygon class="shell" points="${poly(shellG)}" fill="#7d9cb3" fill-opacity="0.12" stroke="#7d9cb3" stroke-width="${lw}" stroke-dasharray="${lw * 6},${lw * 3}"/>`);
    }
    const tyres = spec.wheels.map((w, k) => tyre(P[w.centre], st.c[k], det.wheels[k][0], det.wheels[k][1], 14));
    tyres.forEach((t) => s.push(`<polygon class="tyre" points="${poly(t)}" fill="#2b2b2b" fill-opacity="0.18" stroke="#2b2b2b" stroke-width="${lw}"/>`));
    spec.bodies.forEach((bd) => {
      const h = bd.hull.map((k) => P[k]);
      if (h.length > 2) s.push(`<polygon class="body" points="${poly(h)}" fill="${bd.colour}" fill-opacity="0.22" stroke="${bd.colour}" stroke-width="${lw * 2.2}" stroke-linejoin="round"><title>${esc(bd.name)}</title></polygon>`);
      else if (h.length === 2) s.push(`<polyline class="body" points="${poly(h)}" stroke="${bd.colour}" stroke-width="${lw * 3}" stroke-linecap="round"><title>${esc(bd.name)}</title></polyline>`);
    });
    spec.links.forEach(([a, c, name]) => s.push(`<polyline class="link" points="${poly([P[a], P[c]])}" stroke="#264653" stroke-width="${lw * 2.4}" stroke-linecap="round"><title>${esc(name)}</title></polyline>`));
    spec.springs.forEach(([a, c, name]) => s.push(`<polyline class="spring" points="${poly(coil(P[a], P[c], lw * 9))}" fill="none" stroke="#b8860b" stroke-width="${lw * 1.6}"><title>${esc(name)}</title></polyline>`));
    spec.sliders.forEach(([a, c]) => s.push(`<polyline points="${poly([P[a], P[c]])}" stroke="#555" stroke-width="${lw * 1.2}" stroke-dasharray="${lw * 3},${lw * 2}"/>`));
    spec.wheels.forEach((w) => { const c = P[w.centre]; s.push(`<circle cx="${c[0]}" cy="${-c[1]}" r="${lw * 2.5}" fill="#2b2b2b"/>`); });
    spec.pivots.forEach(([k, name]) => { const c = P[k]; s.push(`<circle class="pivot" cx="${c[0]}" cy="${-c[1]}" r="${lw * 3.2}" fill="#fff" stroke="#111" stroke-width="${lw * 1.1}"><title>${esc(name)}</title></circle>`); });
    if (spec.datum >= 0) { const c = P[spec.datum], d = lw * 6; s.push(`<path d="M${c[0] - d},${-c[1]}H${c[0] + d}M${c[0]},${-c[1] + d}V${-c[1] - d}" stroke="#111" stroke-width="${lw}"/>`); }
    // gap marks
    const segs = [];
    spec.bodies.forEach((bd, bi) => { const h = bd.hull; const n = h.length > 2 ? h.length : 1; for (let k = 0; k < n; k++) segs.push([P[h[k]], P[h[(k + 1) % h.length]], bi]); });
    spec.links.concat(spec.springs).forEach(([a, c]) => segs.push([P[a], P[c], -1]));
    const gaps = [];
    spec.wheels.forEach((w, wi) => {
      const cands = [];
      const own = segs.filter((q) => q[2] !== w.body);
      const test = (list, kind) => {
        let best = [Infinity, null, null];
        const ty = tyres[wi];
        ty.forEach((p) => list.forEach(([a, c]) => { const [d, q] = segDist(p, a, c); if (d < best[0]) best = [d, p, q]; }));
        // segment ends against the tyre's edges (its straight sides have no vertex in the middle)
        list.forEach(([a, c]) => [a, c].forEach((e) => ty.forEach((p, k) => {
          const [d, q] = segDist(e, p, ty[(k + 1) % ty.length]); if (d < best[0]) best = [d, q, e]; })));
        if (best[1]) cands.push([best[0], best[1], best[2], kind]);
      };
      test(own, "links");
      if (shellG) test(shellG.map((p, k) => [p, shellG[(k + 1) % shellG.length]]), "shell");
      cands.forEach(([d, p, q, kind]) => {
        gaps.push({ wheel: w.name, kind, d });
        s.push(`<line class="gap" x1="${p[0]}" y1="${-p[1]}" x2="${q[0]}" y2="${-q[1]}" stroke="#d62839" stroke-width="${lw}"/>`);
        s.push(`<text x="${(p[0] + q[0]) / 2 + lw * 3}" y="${-(p[1] + q[1]) / 2}" font-size="${fs * 0.8}" fill="#d62839">${d.toFixed(0)}</text>`);
      });
    });
    s.push(`<text x="${b.y0 + lw * 4}" y="${-b.z1 + fs * 1.2}" font-size="${fs}" fill="#1d2733">lean ${fmt(lean, 1)} deg · travel ${fmt(run.travel_mm[state.travel], 0)} mm</text>`);
    s.push(`<text x="${b.y1 - lw * 4}" y="${-b.z0 - lw * 4}" font-size="${fs * 0.7}" fill="#6b5b4b" text-anchor="end">front view, mm · red: front-view gaps</text>`);
    s.push("</svg>");
    box.innerHTML = s.join("");
    const c = det.curves, t = state.travel, l = state.lean;
    $("state-readout").innerHTML =
      `scrub ${fmt(c.scrub_mm[t][l], 2)} mm · heave ${fmt(c.heave_mm[t][l], 2)} mm · camber error L ${fmt(c.camber_error_left_deg[t][l], 2)} / R ${fmt(c.camber_error_right_deg[t][l], 2)} deg · ${esc(det.gap_label)} ${fmt(c.gap_mm[t][l], 0)} mm`;
  }
  function coil(a, b, amp) {
    const d = [b[0] - a[0], b[1] - a[1]], L = Math.hypot(d[0], d[1]) || 1, u = [d[0] / L, d[1] / L], nrm = [-u[1], u[0]];
    amp = Math.min(amp, 0.12 * L);
    const out = [a, [a[0] + d[0] * 0.15, a[1] + d[1] * 0.15]];
    for (let k = 1; k < 16; k++) { const f = 0.15 + 0.7 * k / 16, sg = k % 2 ? 1 : -1; out.push([a[0] + d[0] * f + nrm[0] * amp * sg, a[1] + d[1] * f + nrm[1] * amp * sg]); }
    out.push([a[0] + d[0] * 0.85, a[1] + d[1] * 0.85], b);
    return out;
  }

  const CURVES = [
    ["curve-scrub", "scrub [mm]", ["scrub_mm"]],
    ["curve-heave", "heave [mm]", ["heave_mm"]],
    ["curve-camber", "camber error [deg] (L solid, R dashed)", ["camber_error_left_deg", "camber_error_right_deg"]],
    ["curve-gap", null, ["gap_mm"]],
  ];
  function drawCurves() {
    if (!cur) return;
    const { run, det } = cur;
    CURVES.forEach(([id, title, keys]) => {
      const el = $(id);
      if (!det) { Plotly.purge(el); el.innerHTML = ""; return; }
      const traces = [];
      run.travel_mm.forEach((tr, t) => keys.forEach((key, kk) => traces.push({
        type: "scatter", mode: "lines+markers", x: run.lean_deg, y: det.curves[key][t],
        name: `travel ${fmt(tr, 0)} mm` + (keys.length > 1 ? (kk ? " R" : " L") : ""), showlegend: kk === 0 && id === "curve-scrub",
        line: { color: D.palette[t % D.palette.length], dash: kk ? "dash" : "solid", width: 2 }, marker: { size: 4 },
        hovertemplate: `lean %{x:.1f} deg<br>%{y:.3f}<extra>travel ${fmt(tr, 0)} mm</extra>` })));
      const lean = run.lean_deg[state.lean];
      Plotly.react(el, traces, {
        title: { text: title || `${det.gap_label} [mm]`, font: { size: 12 }, x: 0.02, xanchor: "left" },
        margin: { l: 48, r: 8, t: 28, b: 34 }, xaxis: { title: { text: "lean [deg]", font: { size: 11 } }, zeroline: false, gridcolor: "#eef1f3" },
        yaxis: { zeroline: true, zerolinecolor: "#c9d1d8", gridcolor: "#eef1f3" }, paper_bgcolor: "#fff", plot_bgcolor: "#fff",
        legend: { orientation: "h", y: 1.25, x: 1, xanchor: "right", font: { size: 10 } }, font: { size: 11 },
        shapes: [{ type: "line", x0: lean, x1: lean, yref: "paper", y0: 0, y1: 1, line: { color: "#c8553d", width: 1, dash: "dot" } }],
      }, { displayModeBar: false, responsive: true });
    });
  }
  function markCurves() {
    if (!cur || !cur.det) return;
    const lean = cur.run.lean_deg[state.lean];
    CURVES.forEach(([id]) => Plotly.relayout($(id), { "shapes[0].x0": lean, "shapes[0].x1": lean }));
  }

  window.tiltoptExplorer = { data: D, openDetail, state, traceRows };
})();
