// tiltopt Pareto explorer: draws everything from the JSON embedded in the page. The detail of a design the
// page does not hold is asked of `tiltopt explore --serve` (the page's own origin, 127.0.0.1), never elsewhere.
(async function () {
  "use strict";
  performance.mark("tiltopt:start");
  const D = JSON.parse(document.getElementById("tiltopt-data").textContent);
  performance.mark("tiltopt:parsed");
  const $ = (id) => document.getElementById(id);
  const GREY = "#b4b9be", OUT = "#d3d8dc", RED = "#d62839";
  const PICKS = ["#c8553d", "#0d7c86", "#6a4c93", "#d4a017"];
  const SERVED = location.protocol === "http:" || location.protocol === "https:";
  const colLookup = {};
  D.columns.forEach((c) => { colLookup[c.key] = c; });
  const unitOf = (c) => (c.unit && c.unit !== "-" ? c.unit : "");
  const withUnit = (c) => (unitOf(c) ? `${c.label} [${c.unit}]` : c.label);
  const betterText = (c) => (c.better ? `${c.better} is better` : "");
  const fin = (v) => v !== null && v !== undefined && typeof v === "number" && isFinite(v);
  const fmt = (v, d) => (v === "inf" ? "nothing near" : (!fin(v) ? "–" : Number(v).toFixed(d === undefined ? 2 : d)));
  const sig = (v) => (fin(v) ? Number(Number(v).toPrecision(5)) : v);
  function esc(s) {
    return String(s === null || s === undefined ? "" : s).replace(/[&<>"]/g, (c) => ({ "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;" }[c]));
  }

  // ------------------------------------------------------------ values (float32 columns, gzip, bytes shuffled)
  async function decodeValues() {
    const out = {};
    let slots = new Float32Array(0);
    if (D.n_slots) {
      const text = atob(D.values);
      const bin = new Uint8Array(text.length);
      for (let k = 0; k < text.length; k++) bin[k] = text.charCodeAt(k);
      const stream = new Blob([bin]).stream().pipeThrough(new DecompressionStream("gzip"));
      const buf = new Uint8Array(await new Response(stream).arrayBuffer());
      const n4 = buf.length / 4, raw = new Uint8Array(buf.length);
      for (let b = 0; b < 4; b++) { const off = b * n4; for (let i = 0; i < n4; i++) raw[i * 4 + b] = buf[off + i]; }
      slots = new Float32Array(raw.buffer);
    }
    D.columns.forEach((c) => {
      if (c.slot !== undefined) out[c.key] = slots.subarray(c.slot * D.n, (c.slot + 1) * D.n);
      else if (c.const !== undefined) out[c.key] = new Float32Array(D.n).fill(c.const === null ? NaN : c.const);
    });
    D.columns.forEach((c) => { if (c.alias) out[c.key] = out[c.alias]; });
    return out;
  }
  const V = await decodeValues();
  performance.mark("tiltopt:decoded");
  const val = (key, i) => { const v = V[key][i]; return Number.isNaN(v) ? null : v; };

  // ------------------------------------------------------------ row groups
  const all = [...Array(D.n).keys()];
  const feasIdx = all.filter((i) => D.feasible[i] && D.front[i]);
  const infIdx = all.filter((i) => !D.feasible[i] || !D.front[i]);
  const multi = D.runs.length > 1;
  const objDims = D.objectives.filter((k) => colLookup[k]);
  const plotKind = objDims.length >= 3 ? "matrix" : (objDims.length === 2 ? "pair" : "strip");
  const dims = plotKind === "strip" ? (objDims.length ? objDims : ["generation"].filter((k) => colLookup[k])) : objDims;
  const state = { colour: multi ? (D.templates.length > 1 ? "__template" : "__run") : (dims[0] || "__run"),
                  view: "matrix", selected: -1, lean: 0, travel: 0, filters: {}, weights: {}, compare: [],
                  cmpLean: 0, cmpTravel: 0, mergedOnly: false };
  // a detail's marks arrive as [kind, wheel, mm, py, pz, qy, qz, member, member] (tiltopt/reports/detail.py)
  function expandMarks(det, run) {
    const names = run.spec.tubes.map((t) => t[4]);
    det.marks = det.marks.map((row) => row.map((ms) => ms.map((m) => {
      if (!Array.isArray(m)) return m;
      const kind = D.marks.kinds[m[0]];
      const to = kind === "pair" ? "the other wheel" : (kind === "tubes" ? `${names[m[7]] || ""} / ${names[m[8]] || ""}` : (names[m[7]] || ""));
      return { kind, wheel: m[1] < 0 ? null : m[1], mm: m[2], p: [m[3], m[4]], q: [m[5], m[6]], to };
    })));
    return det;
  }
  const details = {};
  Object.keys(D.detail).forEach((k) => { details[k] = expandMarks(D.detail[k], D.runs[D.run[Number(k)]]); });
  const pending = {};

  // ------------------------------------------------------------ header
  $("stamp").textContent = `generated ${D.generated} · tiltopt ${D.versions.tiltopt}`;
  $("safety").textContent = D.safety;
  $("run-legend").innerHTML = D.runs.map((r, k) =>
    `<span class="item"><span class="sw" style="background:${D.palette[k % D.palette.length]}"></span>` +
    `<b>${esc(r.id)}</b>&nbsp;${esc(r.template)} · ${r.n_front} on front` +
    (r.n_infeasible ? ` · ${r.n_infeasible} infeasible evaluated` +
      (r.n_infeasible_shown < r.n_infeasible ? ` (${r.n_infeasible_shown} shown, a random sample)` : "") : "") + `</span>`).join("");
  const nMerged = D.merged.reduce((a, b) => a + b, 0);
  if (multi || D.merged_front) {
    const parts = D.ownership.filter((o) => o.n > 0).map((o) => {
      const k = D.templates.indexOf(o.template);
      return `<span class="sw" style="background:${D.palette[k % D.palette.length]}"></span><b>${esc(o.template)}</b> ` +
        `${o.n} designs (${(100 * o.n / Math.max(nMerged, 1)).toFixed(0)} %)`;
    });
    $("ownership").hidden = false;
    $("ownership").innerHTML = `${D.merged_front ? `Merged front <b>${esc(D.merged_front)}</b>` : "Merged front of these runs"}: ` +
      `${nMerged} non-dominated designs; by template:` + parts.join("");
    $("merged-only-box").hidden = !multi;
  }

  // ------------------------------------------------------------ colour-by
  const sel = $("colour-by");
  function addGroup(parent, label, items) {
    if (!items.length) return;
    const g = document.createElement("optgroup");
    g.label = label;
    items.forEach(([key, text]) => { const o = document.createElement("option"); o.value = key; o.textContent = text; g.appendChild(o); });
    parent.appendChild(g);
  }
  const byGroup = (g) => D.columns.filter((c) => c.group === g && !c.alias).map((c) => [c.key, withUnit(c)]);
  addGroup(sel, "Run and template", [["__run", "run"], ["__template", "template"]]);
  addGroup(sel, "Objectives", byGroup("objective"));
  addGroup(sel, "Design variables", byGroup("variable"));
  addGroup(sel, "Metrics", byGroup("metric"));
  addGroup(sel, "Search", byGroup("meta"));
  sel.value = state.colour;

  // the key of the matrix's colours: a gradient with its range, or the runs' / templates' swatches
  function renderColourKey(col) {
    const key = state.colour, box = $("colour-key");
    if (key === "__run" || key === "__template") {
      const names = key === "__run" ? D.runs.map((r) => r.id) : D.templates;
      box.innerHTML = names.map((n, j) => `<span class="ck-item"><span class="sw" style="background:${D.palette[j % D.palette.length]}"></span>${esc(n)}</span>`).join("");
      return;
    }
    const c = colLookup[key], v = col.color.filter((x) => isFinite(x));
    const lo = v.length ? Math.min(...v) : NaN, hi = v.length ? Math.max(...v) : NaN;
    const grad = D.scale.map(([f, cc]) => `${cc} ${(100 * f).toFixed(0)}%`).join(", ");
    box.innerHTML = `<span class="ck-lo">${fmt(lo, Math.abs(hi - lo) < 10 ? 3 : 1)}</span><span class="ck-bar" style="background:linear-gradient(90deg, ${grad})"></span>` +
      `<span class="ck-hi">${fmt(hi, Math.abs(hi - lo) < 10 ? 3 : 1)}</span> <span class="ck-what">${esc(withUnit(c))}${c.better ? ` (${esc(betterText(c))})` : ""}</span>`;
  }
  function colourOf(idx) {
    const key = state.colour;
    if (key === "__run" || key === "__template") {
      const codes = key === "__run" ? D.run : D.template;
      const names = key === "__run" ? D.runs.map((r) => r.id) : D.templates;
      const k = Math.max(names.length, 1);
      const scale = [];
      names.forEach((_, j) => { const c = D.palette[j % D.palette.length]; scale.push([j / k, c], [(j + 1) / k, c]); });
      if (names.length === 1) scale.push([1, D.palette[0]]);
      return { color: idx.map((i) => codes[i]), colorscale: scale, cmin: -0.5, cmax: k - 0.5,
               colorbar: { title: { text: key === "__run" ? "run" : "template" }, tickvals: names.map((_, j) => j), ticktext: names,
                           len: 0.5, thickness: 12, x: 1.01, y: 0.75 } };
    }
    const c = colLookup[key];
    return { color: idx.map((i) => { const v = V[key][i]; return Number.isNaN(v) ? NaN : v; }), colorscale: D.scale,
             colorbar: { title: { text: withUnit(c) + (c.better ? (c.better === "higher" ? " ↑" : " ↓") : ""), side: "right" },
                         len: 0.5, thickness: 12, x: 1.01, y: 0.75 } };
  }

  // ------------------------------------------------------------ filters
  const filterable = D.columns.filter((c) => c.group !== "meta" && !(c.alias && colLookup[c.alias] && colLookup[c.alias].group === "objective"));
  const fullRange = {};
  function rangeOf(key) {
    if (fullRange[key]) return fullRange[key];
    let lo = Infinity, hi = -Infinity;
    const base = feasIdx.length ? feasIdx : all;
    base.forEach((i) => { const v = V[key][i]; if (!Number.isNaN(v)) { if (v < lo) lo = v; if (v > hi) hi = v; } });
    return (fullRange[key] = isFinite(lo) ? [lo, hi] : [0, 1]);
  }
  // the page column a bound's name means: an objective (by name, or by its metric), a metric, a variable
  function keyOfName(name) {
    const o = D.columns.find((c) => c.group === "objective" && (c.key === "obj." + name || c.where === name || c.key === name));
    if (o) return o.key;
    const c = colLookup[name];
    if (c) return c.alias && colLookup[c.alias] && colLookup[c.alias].group === "objective" ? c.alias : c.key;
    return null;
  }
  // a metric that hardly varies over the front (a parallelogram's camber error of 1e-14 deg) is no use as a filter
  const varies = (k) => { const [lo, hi] = rangeOf(k); return hi - lo > 1e-9 * Math.max(1, Math.abs(lo), Math.abs(hi)); };
  const shownFilters = [...objDims, ...D.key_metrics.map(keyOfName).filter((k) => k && !objDims.includes(k) && varies(k))]
    .filter((k, j, a) => colLookup[k] && a.indexOf(k) === j);
  // the run config's [targets] of the first run: the filters the page opens with
  const tg = D.runs[0].targets || {};
  Object.keys(tg).forEach((name) => {
    if (name === "weights") { Object.assign(state.weights, tg.weights); return; }
    const key = keyOfName(name);
    if (!key) return;
    state.filters[key] = { lo: tg[name].min === undefined ? null : tg[name].min, hi: tg[name].max === undefined ? null : tg[name].max };
    if (!shownFilters.includes(key)) shownFilters.push(key);
  });
  function passes(i) {
    if (state.mergedOnly && !D.merged[i]) return false;
    for (const key in state.filters) {
      const f = state.filters[key];
      const v = V[key][i];
      if (Number.isNaN(v)) return false;
      if (f.lo !== null && v < f.lo) return false;
      if (f.hi !== null && v > f.hi) return false;
    }
    return true;
  }
  let kept = [], outside = [], keptInf = [];
  function recount() {
    kept = []; outside = [];
    feasIdx.forEach((i) => (passes(i) ? kept : outside).push(i));
    keptInf = infIdx.filter(passes);
  }
  const activeFilters = () => Object.keys(state.filters).filter((k) => state.filters[k].lo !== null || state.filters[k].hi !== null);

  function boundText(key) {
    const c = colLookup[key], f = state.filters[key], n = c.where || key;
    if (f.lo !== null && f.hi !== null) return `${sig(f.lo)}<=${n}<=${sig(f.hi)}`;
    return f.lo !== null ? `${n}>=${sig(f.lo)}` : `${n}<=${sig(f.hi)}`;
  }
  function renderFilters() {
    const rows = shownFilters.map((key) => {
      const c = colLookup[key], [lo, hi] = rangeOf(key), f = state.filters[key] || { lo: null, hi: null };
      const step = (hi - lo) / 200 || 1;
      const a = f.lo === null ? lo : f.lo, b = f.hi === null ? hi : f.hi;
      const clamp = (v) => Math.max(0, Math.min(100, v));
      const pa = hi > lo ? clamp(100 * (a - lo) / (hi - lo)) : 0, pb = hi > lo ? clamp(100 * (b - lo) / (hi - lo)) : 100;
      return `<div class="frow" data-key="${esc(key)}"><div class="fname"><b>${esc(withUnit(c))}</b>` +
        `<span class="better">${esc(betterText(c))}</span></div>` +
        `<div class="finputs"><input type="number" class="flo" step="any" placeholder="${sig(lo)}" value="${f.lo === null ? "" : sig(f.lo)}">` +
        `<span>to</span><input type="number" class="fhi" step="any" placeholder="${sig(hi)}" value="${f.hi === null ? "" : sig(f.hi)}">` +
        `<button class="fx" type="button" title="Remove this filter">×</button></div>` +
        `<div class="dual"><div class="track"></div><div class="sel" style="left:${pa}%;width:${Math.max(pb - pa, 0)}%"></div>` +
        `<input type="range" class="rlo" min="${lo}" max="${hi}" step="${step}" value="${a}">` +
        `<input type="range" class="rhi" min="${lo}" max="${hi}" step="${step}" value="${b}"></div></div>`;
    });
    $("filter-rows").innerHTML = rows.join("");
    const add = $("filter-add");
    add.innerHTML = `<option value="">…</option>`;
    addGroup(add, "Objectives and metrics", filterable.filter((c) => c.group !== "variable" && !shownFilters.includes(c.key)).map((c) => [c.key, withUnit(c)]));
    addGroup(add, "Design variables", filterable.filter((c) => c.group === "variable" && !shownFilters.includes(c.key)).map((c) => [c.key, withUnit(c)]));
  }
  function setFilter(key, lo, hi, from) {
    const [a, b] = rangeOf(key);
    lo = lo === null || lo === "" || !isFinite(lo) ? null : Number(lo);
    hi = hi === null || hi === "" || !isFinite(hi) ? null : Number(hi);
    if (lo !== null && lo <= a && (hi === null || hi >= b)) lo = from === "typed" ? lo : null;
    if (hi !== null && hi >= b && from !== "typed") hi = null;
    if (lo === null && hi === null) delete state.filters[key];
    else state.filters[key] = { lo, hi };
    if (!shownFilters.includes(key)) shownFilters.push(key);
    applyFilters(from);
  }
  $("filter-rows").addEventListener("change", (e) => {
    const row = e.target.closest(".frow");
    if (!row) return;
    const key = row.dataset.key;
    if (e.target.classList.contains("flo") || e.target.classList.contains("fhi")) {
      setFilter(key, row.querySelector(".flo").value, row.querySelector(".fhi").value, "typed");
    } else if (e.target.type === "range") {
      let a = Number(row.querySelector(".rlo").value), b = Number(row.querySelector(".rhi").value);
      if (a > b) [a, b] = [b, a];
      const [lo, hi] = rangeOf(key);
      setFilter(key, a <= lo ? null : a, b >= hi ? null : b, "slider");
    }
  });
  $("filter-rows").addEventListener("input", (e) => {
    if (e.target.type !== "range") return;
    const row = e.target.closest(".frow"), key = row.dataset.key, [lo, hi] = rangeOf(key);
    let a = Number(row.querySelector(".rlo").value), b = Number(row.querySelector(".rhi").value);
    if (a > b) [a, b] = [b, a];
    row.querySelector(".flo").value = a <= lo ? "" : sig(a);
    row.querySelector(".fhi").value = b >= hi ? "" : sig(b);
    const s = row.querySelector(".sel");
    s.style.left = `${100 * (a - lo) / (hi - lo || 1)}%`; s.style.width = `${100 * (b - a) / (hi - lo || 1)}%`;
  });
  $("filter-rows").addEventListener("click", (e) => {
    if (!e.target.classList.contains("fx")) return;
    const key = e.target.closest(".frow").dataset.key;
    delete state.filters[key];
    if (!objDims.includes(key) && !D.key_metrics.map(keyOfName).includes(key)) shownFilters.splice(shownFilters.indexOf(key), 1);
    applyFilters("removed");
  });
  $("filter-add").addEventListener("change", (e) => {
    const key = e.target.value;
    if (key && !shownFilters.includes(key)) shownFilters.push(key);
    renderFilters();
    if (state.view === "parallel") drawParallel();
  });
  $("filter-clear").addEventListener("click", () => { state.filters = {}; applyFilters("cleared"); });
  $("filters-toggle").addEventListener("click", () => toggleFilters());
  function toggleFilters(open) {
    const lay = $("layout");
    const closed = open === undefined ? !lay.classList.contains("filters-closed") : !open;
    lay.classList.toggle("filters-closed", closed);
    $("filters-toggle").textContent = closed ? "▸" : "◂";
    resizePlots();
  }

  function applyFilters(from) {
    recount();
    if (from !== "typed") renderFilters();
    updateCount();
    if (from !== "start") redrawMatrix();
    if (parDrawn && from !== "parallel") drawParallel();
    renderCompromise();
    renderExport();
  }
  function updateCount() {
    const nf = activeFilters().length;
    const nInf = D.runs.reduce((a, r) => a + r.n_infeasible, 0);
    const inf = infIdx.length ? ` · <span class="muted">infeasible: ${nInf} evaluated, ${infIdx.length < nInf ? `a random sample of ${infIdx.length}` : "all"} ` +
      `on the page${activeFilters().length ? ` (${keptInf.length} pass the filters)` : ""}, ${$("show-infeasible").checked ? "shown" : "hidden"}</span>` : "";
    $("count").innerHTML = `<b id="count-left">${kept.length}</b> of ${feasIdx.length} front designs ` +
      (nf || state.mergedOnly ? `meet the ${nf} filter${nf === 1 ? "" : "s"}` : "(no filter)") + (multi ? ` · ${nMerged} on the merged front` : "") + inf;
    $("filter-count").textContent = `${kept.length} of ${feasIdx.length} front designs left`;
  }

  // ------------------------------------------------------------ best compromise (tiltopt.optimizer.selection)
  const objCols = (multi ? D.common_objectives : D.objectives).map((k) => colLookup[k]).filter(Boolean);
  function renderWeights() {
    $("weights").innerHTML = objCols.map((c) => {
      const name = c.key.slice(4), w = state.weights[name] === undefined ? 1 : state.weights[name];
      return `<label for="w-${esc(name)}">${esc(c.label)}</label><input type="number" id="w-${esc(name)}" data-obj="${esc(name)}" min="0" step="0.5" value="${w}">`;
    }).join("");
  }
  $("weights").addEventListener("change", (e) => {
    const name = e.target.dataset.obj;
    if (!name) return;
    const w = Number(e.target.value);
    state.weights[name] = isFinite(w) && w >= 0 ? w : 1;
    renderCompromise(); renderExport();
  });
  // Among the designs left (feasible, meeting every filter), each objective is scaled from the best value
  // among them (0) to the filter's bound where one limits it, else their worst (1); the smallest weighted
  // root-mean-square of the scaled objectives wins, ties to the first row (as best_compromise in Python).
  function compromise(cands) {
    const rows = cands;
    if (!rows.length) return null;
    const W = objCols.map((c) => (state.weights[c.key.slice(4)] === undefined ? 1 : state.weights[c.key.slice(4)]));
    const info = objCols.map((c, j) => {
      const f = rows.map((i) => c.sense * V[c.key][i]);     // minimised
      let kb = 0, worst = -Infinity;
      f.forEach((v, k) => { if (v < f[kb]) kb = k; if (v > worst) worst = v; });
      let to = "the worst value among them";
      const flt = state.filters[c.key];
      if (flt) { const lim = c.sense > 0 ? flt.hi : flt.lo; if (lim !== null) { worst = c.sense * lim; to = "the bound"; } }
      const span = worst - f[kb];
      return { c, f, best: f[kb], bestRow: rows[kb], worst, to, span, w: W[j] };
    });
    const wsum = W.reduce((a, b) => a + b, 0) || 1e-300;
    let best = -1, bestScore = Infinity;
    rows.forEach((i, k) => {
      let s = 0;
      info.forEach((o) => { const z = o.span > 0 ? (o.f[k] - o.best) / o.span : 0; s += o.w * z * z; });
      s = Math.sqrt(s / wsum);
      if (s < bestScore) { bestScore = s; best = k; }
    });
    const row = rows[best];
    return { row, id: D.ids[row], n: rows.length, score: bestScore, rows: info.map((o) => {
      const v = o.c.sense * o.f[best], b = o.c.sense * o.best;
      return { objective: o.c.key.slice(4), label: o.c.label, unit: unitOf(o.c), better: o.c.better, value: v, best: b,
               bestId: D.ids[o.bestRow], givesUp: o.c.better === "higher" ? b - v : v - b,
               scaleTo: o.c.sense * o.worst, scaleToIs: o.to, scaled: o.span > 0 ? (o.f[best] - o.best) / o.span : 0, weight: o.w };
    }) };
  }
  let lastChoice = null;
  function renderCompromise() {
    const cands = multi ? kept.filter((i) => D.merged[i]) : kept;
    const ch = compromise(cands);
    lastChoice = ch;
    const box = $("compromise");
    if (!ch) { box.innerHTML = `<p class="note">No feasible design meets the filters.</p>`; return; }
    const bounds = activeFilters().map(boundText).join("; ");
    const ws = ch.rows.map((r) => `${r.objective} ${r.weight}`).join(", ");
    box.innerHTML = `<div><span class="pick" id="compromise-id">${esc(ch.id)}</span> · ` +
      `<button class="small" type="button" data-open="${ch.row}">open</button> <button class="small" type="button" data-cmp="${ch.row}">+ compare</button></div>` +
      `<p class="note" id="compromise-method">${ch.n} of the ${feasIdx.length} front designs ${bounds ? `meet the filters (${esc(bounds)})` : "are left (no filter)"}` +
      `${multi ? " and lie on the merged front" : ""}. Each objective is scaled from the best of them (0) to the filter's bound where one limits it, ` +
      `else their worst (1); the smallest weighted root-mean-square (weights: ${esc(ws)}) wins.</p>` +
      `<table><tr><th>objective</th><th>this</th><th>gives up against the best</th></tr>` +
      ch.rows.map((r) => `<tr><td>${esc(r.label)}</td><td class="num">${fmt(r.value, 2)}</td><td>` +
        (r.givesUp <= 1e-9 * Math.max(1, Math.abs(r.best)) ? "the best" :
          `${fmt(r.givesUp, 2)} ${esc(r.unit)} ${r.better === "higher" ? "less" : "more"} (best ${fmt(r.best, 2)}, ${esc(r.bestId)})`) +
        `</td></tr>`).join("") + `</table>`;
  }
  $("compromise").addEventListener("click", (e) => {
    if (e.target.dataset.open) openDetail(Number(e.target.dataset.open));
    if (e.target.dataset.cmp) addCompare(Number(e.target.dataset.cmp));
  });

  // ------------------------------------------------------------ the filters as a command and as TOML
  function renderExport() {
    const dirs = [...new Set(D.runs.map((r) => r.shortlist_dir))];
    const q = (s) => (/^[A-Za-z0-9_./+-]+$/.test(s) ? s : `'${String(s).replace(/'/g, "'\\''")}'`);
    const where = activeFilters().map((k) => ` --where "${boundText(k)}"`).join("");
    const weights = Object.keys(state.weights).filter((k) => state.weights[k] !== 1).map((k) => ` --weight ${k}=${state.weights[k]}`).join("");
    $("export-cmd").textContent = `tiltopt shortlist ${dirs.map(q).join(" ")}${where}${weights} -o shortlist.parquet`;
    const lines = ["[targets]"];
    activeFilters().forEach((k) => {
      const c = colLookup[k], f = state.filters[k], parts = [];
      if (f.lo !== null) parts.push(`min = ${sig(f.lo)}`);
      if (f.hi !== null) parts.push(`max = ${sig(f.hi)}`);
      lines.push(`${c.where || k} = { ${parts.join(", ")} }`);
    });
    const wk = Object.keys(state.weights).filter((k) => state.weights[k] !== 1);
    if (wk.length) { lines.push("", "[targets.weights]"); wk.forEach((k) => lines.push(`${k} = ${Number(state.weights[k]).toFixed(3).replace(/0+$/, "0")}`)); }
    $("export-toml").textContent = lines.join("\n");
  }
  document.addEventListener("click", (e) => {
    const id = e.target.dataset && e.target.dataset.copy;
    if (!id) return;
    if (navigator.clipboard) navigator.clipboard.writeText($(id).textContent).catch(() => {});
  });

  // ------------------------------------------------------------ scatter matrix
  const traceRows = [];
  const curves = { designs: 0, infeasible: -1, outside: -1 };
  function hoverText(i) {
    return `<b>${esc(D.ids[i])}</b> · ${esc(D.runs[D.run[i]].id)}` + (D.feasible[i] ? "" : " · <i>infeasible</i>");
  }
  function splomTrace(idx, extra) {
    return Object.assign({
      type: "splom",
      dimensions: dims.map((k) => ({ label: axisLabel(colLookup[k]), values: idx.map((i) => val(k, i)) })),
      text: idx.map(hoverText), hovertemplate: "%{text}<br>%{x:.4g}, %{y:.4g}<extra></extra>",
      diagonal: { visible: false }, showupperhalf: false,
    }, extra);
  }
  const spread = (i) => 0.7 * ((i * 0.6180339887498949) % 1) - 0.35;
  function pointTrace(idx, extra) {
    if (plotKind === "matrix") return splomTrace(idx, extra);
    const key = dims[0];
    return Object.assign({
      type: "scatter", mode: "markers", x: idx.map((i) => (key ? val(key, i) : i)),
      y: idx.map((i) => (plotKind === "pair" ? val(dims[1], i) : spread(i))),
      text: idx.map(hoverText), hovertemplate: "%{text}<br>%{x:.4g}, %{y:.4g}<extra></extra>",
    }, extra);
  }
  // Only traces that hold points (an empty splom trace still costs its panels): the designs left, then those
  // outside the filters (grey), the infeasible ones when asked for, and one trace of the picked and the opened designs.
  function matrixTraces() {
    traceRows.length = 0;
    const t = [];
    const add = (rows, trace) => { t.push(trace); traceRows.push(rows); return t.length - 1; };
    if (plotKind === "strip" && dims.length) {
      t.push({ type: "histogram", x: kept.map((i) => val(dims[0], i)), yaxis: "y2", hoverinfo: "skip",
               marker: { color: "rgba(13, 124, 134, 0.16)", line: { width: 1, color: "rgba(13, 124, 134, 0.45)" } } });
      traceRows.push(null);
    }
    const size = kept.length > 3000 ? 3.5 : (kept.length > 300 ? 5 : 7);
    curves.outside = outside.length ? add(outside, pointTrace(outside, { name: "outside the filters",
      marker: { size: Math.max(size - 1.5, 2.5), color: OUT, opacity: 0.5 } })) : -1;
    curves.infeasible = keptInf.length && $("show-infeasible").checked ? add(keptInf, pointTrace(keptInf, { name: "infeasible",
      marker: { size: 4, color: GREY, opacity: 0.55 } })) : -1;
    const col0 = colourOf(kept);
    delete col0.colorbar;              // the colour key is drawn beside "Colour by" (plotly's colour bar is slow to draw)
    curves.designs = add(kept, pointTrace(kept, { name: "designs", marker: Object.assign({ size,
      line: { width: kept.length > 3000 ? 0 : 0.4, color: "#ffffff" }, showscale: false }, col0) }));
    renderColourKey(col0);
    const marks = state.compare.slice(), sym = marks.map(() => "square-open"), col = marks.map((_, k) => PICKS[k % PICKS.length]);
    if (state.selected >= 0) { marks.push(state.selected); sym.push("diamond-open"); col.push("#c8553d"); }
    if (marks.length) add(marks, pointTrace(marks, { name: "picked", hoverinfo: "skip", hovertemplate: null,
      marker: { size: 16, symbol: sym, color: col, line: { width: 2.5, color: col } } }));
    return t;
  }
  function axisLabel(c) {
    const text = withUnit(c) + (c.better ? (c.better === "higher" ? " ↑" : " ↓") : "");
    if (text.length <= 18) return text;
    const cut = text.lastIndexOf(" [");
    return cut > 0 ? `${text.slice(0, cut)}<br>${text.slice(cut + 1)}` : text;
  }
  function axisRange(key) {
    const [lo, hi] = rangeOf(key);
    const pad = (hi - lo) * 0.06 || Math.abs(hi) * 0.05 || 1;
    return [lo - pad, hi + pad];
  }
  function matrixLayout() {
    const lay = { margin: { l: 70, r: 24, t: 16, b: 70 }, hovermode: "closest", dragmode: "select", showlegend: false,
                  paper_bgcolor: "#fbfaf7", plot_bgcolor: "#ffffff", font: { size: 12, color: "#1d2733" } };
    if (plotKind !== "matrix") return plainLayout(lay);
    dims.forEach((k, j) => {
      const ax = { gridcolor: "#e6eaee", zeroline: false, range: axisRange(k), autorange: false };
      lay[`xaxis${j ? j + 1 : ""}`] = Object.assign({}, ax);
      lay[`yaxis${j ? j + 1 : ""}`] = Object.assign({}, ax);
    });
    return lay;
  }
  function plainLayout(lay) {
    const axis = (key) => ({ gridcolor: "#e6eaee", zeroline: false, automargin: true,
                             title: { text: key ? axisLabel(colLookup[key]).replace("<br>", " ") : "design" },
                             range: key ? axisRange(key) : undefined, autorange: key ? false : true });
    lay.dragmode = "zoom";
    lay.xaxis = axis(dims[0]);
    if (plotKind === "pair") lay.yaxis = axis(dims[1]);
    else {
      lay.yaxis = { domain: [0, 0.6], range: [-0.5, 0.5], showticklabels: false, showgrid: false, zeroline: false,
                    fixedrange: true, title: { text: "designs (spread to be seen)" } };
      lay.yaxis2 = { domain: [0.68, 1], anchor: "x", rangemode: "tozero", gridcolor: "#e6eaee", zeroline: false,
                     title: { text: "designs left" }, automargin: true };
    }
    return lay;
  }
  if (plotKind !== "matrix") $("view-matrix").textContent = plotKind === "pair" ? "Scatter plot" : "Strip and histogram";
  const matrixDiv = $("matrix");
  recount();
  performance.mark("tiltopt:setup");
  await Plotly.newPlot(matrixDiv, matrixTraces(), matrixLayout(), { responsive: true, displaylogo: false });
  performance.mark("tiltopt:plotted");
  matrixDiv.on("plotly_click", (ev) => {
    if (!ev || !ev.points || !ev.points.length) return;
    const p = ev.points.find((q) => q.curveNumber === curves.designs) || ev.points.find((q) => q.curveNumber === curves.infeasible) ||
      ev.points.find((q) => traceRows[q.curveNumber]);
    if (!p) return;
    const rows = traceRows[p.curveNumber];
    if (!rows || rows[p.pointIndex] === undefined) return;
    if (ev.event && ev.event.shiftKey) addCompare(rows[p.pointIndex]); else openDetail(rows[p.pointIndex]);
  });
  function redrawMatrix() { Plotly.react(matrixDiv, matrixTraces(), matrixLayout()); }

  // ------------------------------------------------------------ parallel coordinates (brushing = filters)
  const parDiv = $("parallel");
  let parDrawn = false, parDims = [], parRows = [];
  function drawParallel() {
    parRows = state.mergedOnly ? feasIdx.filter((i) => D.merged[i]) : feasIdx;
    parDims = [...objDims, ...shownFilters.filter((k) => !objDims.includes(k))];
    const col = colourOf(parRows);
    const pdims = parDims.map((k) => {
      const c = colLookup[k], f = state.filters[k], [lo, hi] = rangeOf(k);
      const d = { label: withUnit(c) + (c.better ? (c.better === "higher" ? " ↑" : " ↓") : ""), values: parRows.map((i) => val(k, i)), range: [lo, hi] };
      if (f) d.constraintrange = [f.lo === null ? lo : f.lo, f.hi === null ? hi : f.hi];
      return d;
    });
    const trace = { type: "parcoords", dimensions: pdims,
                    line: { color: col.color, colorscale: col.colorscale, cmin: col.cmin, cmax: col.cmax, showscale: true,
                            colorbar: Object.assign({}, col.colorbar, { orientation: "v", y: 0.5, x: 1.02 }) },
                    labelangle: -14, labelfont: { size: 12 }, rangefont: { size: 10 }, tickfont: { size: 11 } };
    Plotly.react(parDiv, [trace], { margin: { l: 70, r: 110, t: 90, b: 30 }, paper_bgcolor: "#fbfaf7", font: { color: "#1d2733" } },
                 { responsive: true, displaylogo: false });
    if (!parDrawn) {
      parDiv.on("plotly_restyle", () => {
        const dd = parDiv.data[0].dimensions;
        dd.forEach((d, k) => {
          const key = parDims[k];
          let cr = d.constraintrange;
          if (cr && Array.isArray(cr[0])) cr = [Math.min(...cr.map((r) => r[0])), Math.max(...cr.map((r) => r[1]))];
          const [lo, hi] = rangeOf(key);
          if (!cr) { delete state.filters[key]; return; }
          state.filters[key] = { lo: cr[0] <= lo ? null : cr[0], hi: cr[1] >= hi ? null : cr[1] };
          if (state.filters[key].lo === null && state.filters[key].hi === null) delete state.filters[key];
        });
        applyFilters("parallel");
      });
    }
    parDrawn = true;
  }

  function setView(v) {
    state.view = v;
    ["matrix", "parallel", "compare"].forEach((k) => { $(`view-${k}`).classList.toggle("active", v === k); $(k).hidden = v !== k; });
    $("view-hint").textContent = v === "parallel"
      ? "Drag along an axis to narrow the front (the same filter as on the left); drag an axis title to reorder."
      : v === "compare" ? "Designs picked with “+ compare” (or shift-click on a point), at the same lean and travel and the same scale."
        : "Hover a point for its values; click a point to open its design, shift-click to add it to the comparison. ↓ lower is better, ↑ higher is better.";
    if (v === "parallel") drawParallel();
    else if (v === "compare") drawCompare();
    else if (matrixDiv._fullLayout && state.started) Plotly.Plots.resize(matrixDiv);
  }
  $("view-matrix").addEventListener("click", () => setView("matrix"));
  $("view-parallel").addEventListener("click", () => setView("parallel"));
  $("view-compare").addEventListener("click", () => setView("compare"));
  sel.addEventListener("change", () => { state.colour = sel.value; redrawMatrix(); if (parDrawn) drawParallel(); });
  $("show-infeasible").addEventListener("change", () => { redrawMatrix(); updateCount(); });
  $("merged-only").addEventListener("change", (e) => { state.mergedOnly = e.target.checked; applyFilters("merged"); });

  // ------------------------------------------------------------ the detail of a design
  function getDetail(i) {
    const k = String(i);
    if (details[k]) return Promise.resolve(details[k]);
    if (!SERVED) return Promise.resolve(null);
    if (!pending[k]) {
      pending[k] = fetch(`detail/${i}.json`).then((r) => (r.ok ? r.json() : null)).then((d) => {
        if (d) details[k] = expandMarks(d, D.runs[D.run[i]]);
        delete pending[k];
        return d;
      }).catch(() => { delete pending[k]; return null; });
    }
    return pending[k];
  }
  const serveCmd = () => `tiltopt explore ${[...new Set(D.runs.map((r) => r.shortlist_dir))].join(" ")} --serve`;
  let cur = null;
  function closeDetail() {
    $("detail").hidden = true; $("splitter").hidden = true;
    $("layout").classList.remove("with-detail");
    if (state.foldedForDetail) { state.foldedForDetail = false; toggleFilters(true); }   // the detail folded them
    state.selected = -1; cur = null; redrawMatrix(); resizePlots();
  }
  $("detail-close").addEventListener("click", closeDetail);
  $("detail-dock").addEventListener("click", () => {
    const below = $("layout").classList.toggle("dock-below");
    $("detail-dock").textContent = below ? "dock right" : "dock below";
    resizePlots();
    if (cur) requestAnimationFrame(() => { drawState(); drawCurves(); });
  });
  $("detail-compare").addEventListener("click", () => { if (cur) addCompare(cur.i); });

  async function openDetail(i) {
    const run = D.runs[D.run[i]];
    state.selected = i;
    cur = { i, run, det: null, bounds: null };
    const lay = $("layout");
    $("detail").hidden = false; $("splitter").hidden = false;
    if (!lay.classList.contains("with-detail") && window.innerWidth < 1800 && !lay.classList.contains("dock-below") &&
        !lay.classList.contains("filters-closed")) { toggleFilters(false); state.foldedForDetail = true; }
    lay.classList.add("with-detail");
    $("detail").dataset.candidate = D.ids[i];
    $("detail-id").textContent = D.ids[i];
    $("detail-sub").innerHTML = `run <b>${esc(run.id)}</b> · template ${esc(run.template)} · ` +
      (D.feasible[i] ? (D.front[i] ? (multi ? (D.merged[i] ? "on the merged front" : "on its run's front, dominated on the merged front") : "on the front") : "feasible")
        : `<span style="color:#b3411f">infeasible: ${esc(D.reason[i] >= 0 ? D.reasons[D.reason[i]] : "constraint violated")}</span>`);
    $("sheet-cmd").textContent = run.sheet_cmd + D.ids[i];
    const ts = $("travel-select");
    ts.innerHTML = run.travel_mm.map((t, k) => `<option value="${k}">${fmt(t, 0)} mm</option>`).join("");
    let t0 = 0;
    run.travel_mm.forEach((t, k) => { if (Math.abs(t) < Math.abs(run.travel_mm[t0])) t0 = k; });
    ts.value = String(t0); state.travel = t0;
    const sl = $("lean-slider");
    sl.max = String(run.lean_deg.length - 1); sl.value = "0"; state.lean = 0;
    fillTables(i);
    redrawMatrix();
    resizePlots();
    const st = $("detail-status");
    st.className = "detail-status busy";
    st.textContent = details[String(i)] ? "" : (SERVED ? `computing the detail of ${D.ids[i]} …` : "");
    const det = await getDetail(i);
    if (!cur || cur.i !== i) return;        // another design was opened meanwhile
    cur.det = det;
    cur.bounds = det ? stateBounds(run, [det]) : null;
    st.className = "detail-status";
    st.innerHTML = det ? "" : (SERVED ? `The detail of ${esc(D.ids[i])} could not be computed (is <code>tiltopt explore --serve</code> still running?).`
      : `This page, opened from a file, holds the detail (drawings, curves, clearances) of ${Object.keys(details).length} designs. ` +
        `Every design's is computed when the page is served: <code>${esc(serveCmd())}</code>. The tables below are this design's.`);
    $("detail-notes").innerHTML = run.notes.map((n) => `<li>${esc(n)}</li>`).join("") +
      `<li>Red marks: clearances with the wheels straight ahead, measured in the front view between the wheel solids (tyre, rim and hub) ` +
      `and the member tubes (for members in the linkage plane this is the 3-D clearance at steer 0). The readout gives them beside the 3-D figures over the ` +
      `steer range, which the run's objectives and constraints use.</li>`;
    drawState(); drawCurves();
  }

  function fillTables(i) {
    const num = (c) => { const v = val(c.key, i); return fmt(v, Math.abs(v) >= 100 ? 1 : 3); };
    const rowsOf = (g) => D.columns.filter((c) => c.group === g && !(g === "metric" && c.alias && colLookup[c.alias].group === "objective")).map((c) =>
      `<tr><td>${esc(c.label)}${c.better ? ` <span class="muted">(${esc(betterText(c))})</span>` : ""}</td><td class="num">${num(c)}</td><td class="unit">${esc(unitOf(c))}</td></tr>`).join("");
    $("var-table").innerHTML = rowsOf("variable") || "<tr><td>none</td></tr>";
    $("metric-table").innerHTML = `<tr><th colspan="3">objectives</th></tr>` + rowsOf("objective") + `<tr><th colspan="3">metrics</th></tr>` + rowsOf("metric");
  }
  $("lean-slider").addEventListener("input", (e) => { state.lean = Number(e.target.value); drawState(); markCurves(); });
  $("travel-select").addEventListener("change", (e) => { state.travel = Number(e.target.value); drawState(); });

  // ------------------------------------------------------------ the front view (as tiltopt/reports/drawing.py)
  function wheelOutline(c, g, R, r, hub, n) {
    const out = [], rc = R - r, h = Math.max(hub, r);
    const ny = Math.cos(g), nz = -Math.sin(g), uy = Math.sin(g), uz = Math.cos(g);
    const put = (s, u) => out.push([c[0] + s * ny + u * uy, c[1] + s * nz + u * uz]);
    put(h, 0);
    for (let k = 0; k < n; k++) { const t = Math.PI * k / (n - 1); put(r * Math.cos(t), rc + r * Math.sin(t)); }
    put(-h, 0);
    for (let k = 0; k < n; k++) { const t = Math.PI * k / (n - 1); put(-r * Math.cos(t), -rc - r * Math.sin(t)); }
    return out;
  }
  function toGlobal(p, o) { const c = Math.cos(o[2]), s = Math.sin(o[2]); return [o[0] + c * p[0] + s * p[1], o[1] - s * p[0] + c * p[1]]; }
  function pointsOf(st) { const P = []; for (let k = 0; k < st.p.length; k += 2) P.push([st.p[k] / 10, st.p[k + 1] / 10]); return P; }
  function stateBounds(run, dets) {
    let y0 = Infinity, y1 = -Infinity, z1 = -Infinity;
    const grow = (p) => { y0 = Math.min(y0, p[0]); y1 = Math.max(y1, p[0]); z1 = Math.max(z1, p[1]); };
    dets.forEach((det) => det.s.forEach((row) => row.forEach((st) => {
      if (!st) return;
      const P = pointsOf(st);
      P.forEach(grow);
      run.spec.wheels.forEach((w, k) => wheelOutline(P[w.centre], st.c[k], det.wheels[k][0], det.wheels[k][1], det.wheels[k][2], 8).forEach(grow));
      if (run.shell) run.shell.forEach((q) => grow(toGlobal(q, st.o)));
    })));
    const span = Math.max(y1 - y0, z1, 100);
    return { y0: y0 - 0.05 * span, y1: y1 + 0.05 * span, z0: -0.04 * span, z1: z1 + 0.04 * span, span };
  }
  const markLabel = (m) => (m.mm >= 0 ? `${m.mm.toFixed(1)} mm` : `overlap ${(-m.mm).toFixed(1)} mm`);
  const MARK_SHORT = { other: "to members", carrier: "to own upright/arms", pair: "between wheels", tubes: "between tubes", ground: "ground" };
  const drawnMarks = (marks) => marks.filter((m) => (m.kind !== "pair" && m.kind !== "tubes") || m.mm < D.marks.drawn_within_mm);
  function niceLength(span) {
    const raw = Math.max(span, 1) / 5, mag = Math.pow(10, Math.floor(Math.log10(raw)));
    const ok = [1, 2, 2.5, 5].map((m) => m * mag).filter((v) => v <= raw);
    return ok.length ? Math.max(...ok) : mag;
  }
  function legendItems(spec, hasShell, hasMarks) {
    const items = [], seen = new Set();
    spec.bodies.forEach((b) => { if (!seen.has(b.kind)) { seen.add(b.kind); items.push(["body", b.colour, b.kind]); } });
    if (spec.links.length) items.push(["body", "#264653", "links"]);
    if (spec.springs.length) items.push(["spring", "#b8860b", "springs"]);
    items.push(["wheel", "#2b2b2b", "wheel solid (tyre, rim, hub)"]);
    if (hasShell) items.push(["shell", "#7d9cb3", `shell section at x = ${spec.station_x_mm} mm`]);
    if (hasMarks) items.push(["mark", RED, "clearance, wheels straight ahead, mm"]);
    return items;
  }
  function coil(a, b, amp) {
    const d = [b[0] - a[0], b[1] - a[1]], L = Math.hypot(d[0], d[1]) || 1, u = [d[0] / L, d[1] / L], nrm = [-u[1], u[0]];
    amp = Math.min(amp, 0.12 * L);
    const out = [a, [a[0] + d[0] * 0.15, a[1] + d[1] * 0.15]];
    for (let k = 1; k < 16; k++) { const f = 0.15 + 0.7 * k / 16, sg = k % 2 ? 1 : -1; out.push([a[0] + d[0] * f + nrm[0] * amp * sg, a[1] + d[1] * f + nrm[1] * amp * sg]); }
    out.push([a[0] + d[0] * 0.85, a[1] + d[1] * 0.85], b);
    return out;
  }
  // One state of one design as SVG. opts: {bounds, legend: bool, title}
  function frontViewSVG(run, det, t, l, opts) {
    const st = det.s[t][l];
    const lean = run.lean_deg[l];
    if (!st) {
      const why = det.status[t][l] || "not reached";
      return `<svg viewBox="0 0 400 60" data-lean="${lean}" data-travel="${run.travel_mm[t]}"><text x="10" y="35" fill="#b3411f" font-size="13">State not reached (lean ${fmt(lean, 1)} deg, travel ${fmt(run.travel_mm[t], 0)} mm): ${esc(why)}</text></svg>`;
    }
    const b = opts.bounds, spec = run.spec, P = pointsOf(st);
    const span = b.span, lw = span / 260, fs = span / 36;
    const marks = drawnMarks(det.marks[t][l] || []);
    const items = opts.legend === false ? [] : legendItems(spec, !!run.shell, marks.length > 0);
    const rows = []; let row = [], x = 0;
    const width = (b.y1 - b.y0);
    items.forEach((it) => { const w = fs * (1.6 + 0.52 * it[2].length) + fs * 1.2; if (row.length && x + w > width) { rows.push(row); row = []; x = 0; } row.push([it, x]); x += w; });
    if (row.length) rows.push(row);
    const legH = rows.length ? rows.length * fs * 1.35 + fs * 0.6 : 0;
    const vb = [b.y0, -(b.z1 + legH), b.y1 - b.y0, b.z1 + legH - b.z0 + fs * 1.6];
    const F = (v) => (Math.round(v * 100) / 100).toString();
    const X = (p) => `${F(p[0])},${F(-p[1])}`;
    const poly = (a) => a.map(X).join(" ");
    const s = [];
    s.push(`<svg xmlns="http://www.w3.org/2000/svg" viewBox="${F(vb[0])} ${F(vb[1])} ${F(vb[2])} ${F(vb[3])}" preserveAspectRatio="xMidYMid meet" ` +
           `data-lean="${lean}" data-travel="${run.travel_mm[t]}" font-family="Helvetica, Arial, sans-serif" class="frontview">`);
    s.push(`<rect x="${F(vb[0] - 2 * span)}" y="0" width="${F(vb[2] + 4 * span)}" height="${F(vb[3] + vb[1])}" fill="#efe9e1"/>`);
    s.push(`<line x1="${F(vb[0] - 2 * span)}" y1="0" x2="${F(vb[0] + vb[2] + 2 * span)}" y2="0" stroke="#6b5b4b" stroke-width="${F(lw * 1.2)}"/>`);
    if (run.shell) s.push(`<polygon class="shell" points="${poly(run.shell.map((q) => toGlobal(q, st.o)))}" fill="#7d9cb3" fill-opacity="0.12" stroke="#7d9cb3" stroke-width="${F(lw)}" stroke-dasharray="${F(lw * 6)},${F(lw * 3)}"/>`);
    spec.wheels.forEach((w, k) => s.push(`<polygon class="wheel" points="${poly(wheelOutline(P[w.centre], st.c[k], det.wheels[k][0], det.wheels[k][1], det.wheels[k][2], 14))}" fill="#2b2b2b" fill-opacity="0.18" stroke="#2b2b2b" stroke-width="${F(lw)}" stroke-linejoin="round"/>`));
    spec.bodies.forEach((bd) => { const h = bd.hull.map((k) => P[k]); if (h.length > 2) s.push(`<polygon class="body" points="${poly(h)}" fill="${bd.colour}" fill-opacity="0.10" stroke="none"><title>${esc(bd.name)}</title></polygon>`); });
    spec.tubes.forEach(([ia, ib, rad, body, name]) => s.push(`<polyline class="tube" points="${poly([P[ia], P[ib]])}" stroke="${body >= 0 ? spec.bodies[body].colour : "#264653"}" stroke-opacity="0.85" stroke-width="${F(2 * rad)}" stroke-linecap="round"><title>${esc(name)} (tube ${2 * rad} mm)</title></polyline>`));
    spec.springs.forEach(([a, c, name]) => s.push(`<polyline class="spring" points="${poly(coil(P[a], P[c], lw * 9))}" fill="none" stroke="#b8860b" stroke-width="${F(lw * 1.6)}"><title>${esc(name)}</title></polyline>`));
    spec.sliders.forEach(([a, c]) => s.push(`<polyline points="${poly([P[a], P[c]])}" stroke="#555" stroke-width="${F(lw * 1.2)}" stroke-dasharray="${F(lw * 3)},${F(lw * 2)}"/>`));
    spec.wheels.forEach((w) => { const c = P[w.centre]; s.push(`<circle cx="${F(c[0])}" cy="${F(-c[1])}" r="${F(lw * 2.5)}" fill="#2b2b2b"/>`); });
    spec.pivots.forEach(([k, name]) => { const c = P[k]; s.push(`<circle class="pivot" cx="${F(c[0])}" cy="${F(-c[1])}" r="${F(lw * 3.2)}" fill="#fff" stroke="#111" stroke-width="${F(lw * 1.1)}"><title>${esc(name)}</title></circle>`); });
    if (spec.datum >= 0) { const c = P[spec.datum], d = lw * 6; s.push(`<path d="M${F(c[0] - d)},${F(-c[1])}H${F(c[0] + d)}M${F(c[0])},${F(-c[1] + d)}V${F(-c[1] - d)}" stroke="#111" stroke-width="${F(lw)}"/>`); }
    marks.forEach((m) => {
      const p = m.p, q = m.q, d = [q[0] - p[0], q[1] - p[1]], L = Math.hypot(d[0], d[1]);
      const nrm = L > 1e-9 ? [-d[1] / L, d[0] / L] : [0, 1];
      const mid = [(p[0] + q[0]) / 2 + nrm[0] * fs * 0.6, (p[1] + q[1]) / 2 + nrm[1] * fs * 0.6];
      s.push(`<g class="mark" data-kind="${m.kind}"${m.wheel === null ? "" : ` data-wheel="${m.wheel}"`} data-mm="${m.mm}"><title>${esc(MARK_SHORT[m.kind])}: ${esc(markLabel(m))} (${esc(m.to)})</title>` +
        (L > 1e-9 ? `<line x1="${F(p[0])}" y1="${F(-p[1])}" x2="${F(q[0])}" y2="${F(-q[1])}" stroke="${RED}" stroke-width="${F(lw)}"/>` +
          `<circle cx="${F(p[0])}" cy="${F(-p[1])}" r="${F(lw * 1.4)}" fill="${RED}"/><circle cx="${F(q[0])}" cy="${F(-q[1])}" r="${F(lw * 1.4)}" fill="${RED}"/>` : "") +
        `<text x="${F(mid[0])}" y="${F(-mid[1])}" font-size="${F(fs * 0.9)}" fill="${RED}" text-anchor="middle" stroke="#ffffff" stroke-width="${F(fs * 0.22)}" paint-order="stroke">${esc(markLabel(m))}</text></g>`);
    });
    // scale bar, bottom right
    const Lb = niceLength(vb[2]), xb1 = vb[0] + vb[2] - fs * 0.8, xb0 = xb1 - Lb, yb = vb[1] + vb[3] - fs * 0.7, tk = fs * 0.35;
    s.push(`<g class="scalebar" data-mm="${Lb}" stroke="#1d2733" stroke-width="${F(lw * 1.2)}" fill="none"><path d="M${F(xb0)},${F(yb - tk)}V${F(yb)}H${F(xb1)}V${F(yb - tk)}M${F((xb0 + xb1) / 2)},${F(yb)}V${F(yb - tk * 0.6)}"/></g>` +
           `<text x="${F((xb0 + xb1) / 2)}" y="${F(yb - tk - fs * 0.25)}" font-size="${F(fs * 0.8)}" text-anchor="middle" fill="#1d2733">${Lb} mm</text>`);
    // legend, top
    if (rows.length) {
      s.push(`<g class="legend" font-size="${F(fs)}" fill="#1d2733">`);
      rows.forEach((r, k) => {
        const y = vb[1] + fs * 1.2 + k * fs * 1.35;
        r.forEach(([[kind, colour, text], xo]) => {
          const x0 = vb[0] + fs * 0.6 + xo;
          let sw;
          if (kind === "shell") sw = `<line x1="${F(x0)}" y1="${F(y - fs * 0.3)}" x2="${F(x0 + fs * 1.2)}" y2="${F(y - fs * 0.3)}" stroke="${colour}" stroke-width="${F(lw * 1.5)}" stroke-dasharray="${F(lw * 4)},${F(lw * 2)}"/>`;
          else if (kind === "spring" || kind === "mark") sw = `<line x1="${F(x0)}" y1="${F(y - fs * 0.3)}" x2="${F(x0 + fs * 1.2)}" y2="${F(y - fs * 0.3)}" stroke="${colour}" stroke-width="${F(lw * 2)}"/>`;
          else sw = `<rect x="${F(x0)}" y="${F(y - fs * 0.75)}" width="${F(fs * 1.2)}" height="${F(fs * 0.8)}" fill="${colour}" fill-opacity="${kind === "wheel" ? 0.35 : 0.85}" rx="${F(fs * 0.15)}"/>`;
          s.push(`<g class="key">${sw}<text x="${F(x0 + fs * 1.6)}" y="${F(y)}">${esc(text)}</text></g>`);
        });
      });
      s.push(`</g>`);
    }
    s.push(`<text x="${F(vb[0] + fs * 0.6)}" y="${F(yb)}" font-size="${F(fs * 0.85)}" fill="#1d2733">${opts.title ? esc(opts.title) + " · " : ""}lean ${fmt(lean, 1)} deg · travel ${fmt(run.travel_mm[t], 0)} mm · front view, mm</text>`);
    s.push("</svg>");
    return s.join("");
  }
  // The drawings of the detail panel. Another view (a side view, say) adds an entry:
  // {id, title, draw(run, det, travelIndex, leanIndex, opts) -> SVG string}; each gets its own box.
  const DRAWINGS = [{ id: "front", title: "front view", draw: frontViewSVG }];

  function drawState() {
    if (!cur) return;
    const { run, det } = cur;
    const lean = run.lean_deg[state.lean];
    $("lean-value").textContent = `${fmt(lean, 1)} deg`;
    const box = $("drawings");
    if (!det) { box.innerHTML = ""; $("state-readout").innerHTML = ""; return; }
    box.innerHTML = DRAWINGS.map((d) => `<div class="drawing" id="drawing${d.id === "front" ? "" : "-" + d.id}" data-view="${d.id}">` +
      d.draw(run, det, state.travel, state.lean, { bounds: cur.bounds }) + `</div>`).join("");
    $("state-readout").innerHTML = readout(run, det, state.travel, state.lean);
  }
  function readout(run, det, t, l) {
    const st = det.s[t][l];
    if (!st) return `<span class="bad">not reached: ${esc(det.status[t][l] || "")}</span>`;
    const c = det.curves, cl = det.clear, marks = det.marks[t][l] || [];
    const mk = (kind, w) => { const m = marks.find((q) => q.kind === kind && (w === undefined || q.wheel === w)); return m ? markLabel(m) : "–"; };
    const v3 = (a, w) => (a ? (a[t][l][w] === "inf" ? "nothing near" : fmt(a[t][l][w], 1) + " mm") : "–");
    const steer = cl ? cl.steer[t][l] : null;
    let s = `<div class="line">scrub ${fmt(c.scrub_mm[t][l], 2)} mm · heave ${fmt(c.heave_mm[t][l], 2)} mm · camber error L ${fmt(c.camber_error_left_deg[t][l], 2)} / R ${fmt(c.camber_error_right_deg[t][l], 2)} deg</div>`;
    s += `<table class="clear-table"><tr><th>clearance at this state</th><th>left wheel</th><th>right wheel</th></tr>`;
    if (cl) {
      if (cl.shell) s += `<tr><td>to the shell, 3-D over steer ±${fmt(steer, 0)} deg</td><td class="num">${v3(cl.shell, 0)}</td><td class="num">${v3(cl.shell, 1)}</td></tr>`;
      s += `<tr><td>to other members, 3-D over steer ±${fmt(steer, 0)} deg</td><td class="num">${v3(cl.other, 0)}</td><td class="num">${v3(cl.other, 1)}</td></tr>`;
    }
    s += `<tr><td>to other members, straight ahead (red)</td><td class="num drawn" data-kind="other" data-wheel="0">${mk("other", 0)}</td><td class="num drawn" data-kind="other" data-wheel="1">${mk("other", 1)}</td></tr>`;
    s += `<tr><td>to own upright and arms, straight ahead (red)</td><td class="num drawn" data-kind="carrier" data-wheel="0">${mk("carrier", 0)}</td><td class="num drawn" data-kind="carrier" data-wheel="1">${mk("carrier", 1)}</td></tr>`;
    if (cl) s += `<tr><td>to own upright and arms, 3-D over steer</td><td class="num">${v3(cl.carrier, 0)}</td><td class="num">${v3(cl.carrier, 1)}</td></tr>`;
    s += `</table><div class="line">between the wheels <span class="drawn" data-kind="pair">${mk("pair")}</span> · between tubes <span class="drawn" data-kind="tubes">${mk("tubes")}</span>` +
      ` · lowest tube above ground <span class="drawn" data-kind="ground">${mk("ground")}</span> (straight ahead${marks.some((m) => (m.kind === "pair" || m.kind === "tubes") && m.mm >= D.marks.drawn_within_mm) ? "; gaps over " + D.marks.drawn_within_mm + " mm are not drawn" : ""})</div>`;
    if (det.worst && det.worst.min_clearance_mm && fin(det.worst.min_clearance_mm.value)) {
      const w = det.worst.min_clearance_mm;
      s += `<div class="run-figure" id="run-figure">The run's min clearance (3-D, shell and other members, over the envelope and the steer range): ` +
        `<b>${fmt(w.value, 1)} mm</b>, ${w.wheel === 0 ? "left" : "right"} wheel at lean ${fmt(w.lean_deg, 1)} deg, travel ${fmt(w.travel_mm, 0)} mm.</div>`;
    }
    return s;
  }

  function clearanceCurve(det, t) {
    const cl = det.clear;
    if (cl) return cl.other[t].map((o, l) => { const a = [o[0], o[1]].concat(cl.shell ? cl.shell[t][l] : []).filter(fin); return a.length ? Math.min(...a) : null; });
    return det.marks[t].map((ms) => { const a = ms.filter((m) => m.kind === "other").map((m) => m.mm); return a.length ? Math.min(...a) : null; });
  }
  const CURVES = [
    ["curve-scrub", "scrub [mm]", (det, t) => [det.curves.scrub_mm[t]]],
    ["curve-heave", "heave [mm]", (det, t) => [det.curves.heave_mm[t]]],
    ["curve-camber", "camber error [deg] (L solid, R dashed)", (det, t) => [det.curves.camber_error_left_deg[t], det.curves.camber_error_right_deg[t]]],
    ["curve-clearance", null, (det, t) => [clearanceCurve(det, t)]],
  ];
  const clearanceTitle = (det) => (det.clear ? "smallest clearance to shell and members, 3-D over steer [mm]" : "smallest clearance to other members, straight ahead [mm]");
  function curveLayout(title, lean) {
    return { title: { text: title, font: { size: 12 }, x: 0.02, xanchor: "left" }, margin: { l: 48, r: 8, t: 28, b: 34 },
             xaxis: { title: { text: "lean [deg]", font: { size: 11 } }, zeroline: false, gridcolor: "#eef1f3" },
             yaxis: { zeroline: true, zerolinecolor: "#c9d1d8", gridcolor: "#eef1f3" }, paper_bgcolor: "#fff", plot_bgcolor: "#fff",
             legend: { orientation: "h", y: 1.28, x: 1, xanchor: "right", font: { size: 10 } }, font: { size: 11 },
             shapes: [{ type: "line", x0: lean, x1: lean, yref: "paper", y0: 0, y1: 1, line: { color: "#c8553d", width: 1, dash: "dot" } }] };
  }
  function drawCurves() {
    if (!cur) return;
    const { run, det } = cur;
    CURVES.forEach(([id, title, get]) => {
      const el = $(id);
      if (!det) { Plotly.purge(el); el.innerHTML = ""; return; }
      const traces = [];
      run.travel_mm.forEach((tr, t) => get(det, t).forEach((y, kk, arr) => traces.push({
        type: "scatter", mode: "lines+markers", x: run.lean_deg, y: y.map((v) => (fin(v) ? v : null)),
        name: `travel ${fmt(tr, 0)} mm` + (arr.length > 1 ? (kk ? " R" : " L") : ""), showlegend: kk === 0 && id === "curve-scrub",
        line: { color: D.palette[t % D.palette.length], dash: kk ? "dash" : "solid", width: 2 }, marker: { size: 4 },
        hovertemplate: `lean %{x:.1f} deg<br>%{y:.3f}<extra>travel ${fmt(tr, 0)} mm</extra>` })));
      Plotly.react(el, traces, curveLayout(title || clearanceTitle(det), run.lean_deg[state.lean]), { displayModeBar: false, responsive: true });
    });
  }
  function markCurves() {
    if (!cur || !cur.det) return;
    const lean = cur.run.lean_deg[state.lean];
    CURVES.forEach(([id]) => Plotly.relayout($(id), { "shapes[0].x0": lean, "shapes[0].x1": lean }));
  }

  // ------------------------------------------------------------ compare 2 to 4 designs
  function addCompare(i) {
    if (state.compare.includes(i)) return;
    if (state.compare.length >= 4) state.compare.shift();
    state.compare.push(i);
    $("compare-n").textContent = `(${state.compare.length})`;
    redrawMatrix();
    if (state.view === "compare") drawCompare();
  }
  function removeCompare(i) {
    state.compare = state.compare.filter((j) => j !== i);
    $("compare-n").textContent = `(${state.compare.length})`;
    redrawMatrix();
    drawCompare();
  }
  async function drawCompare() {
    const box = $("compare");
    const picks = state.compare.slice();
    if (picks.length < 2) {
      box.innerHTML = `<div class="empty">Pick two to four designs to compare: open a design and press “+ compare”, or shift-click points. ${picks.length ? `Picked: ${picks.map((i) => esc(D.ids[i])).join(", ")}.` : ""}</div>`;
      return;
    }
    const run0 = D.runs[D.run[picks[0]]];
    box.innerHTML = `<div class="cmp-controls"><label>Lean <input type="range" id="cmp-lean" min="0" max="${run0.lean_deg.length - 1}" step="1" value="${Math.min(state.cmpLean, run0.lean_deg.length - 1)}"></label>` +
      `<span class="val" id="cmp-lean-value"></span><label>Travel <select id="cmp-travel">${run0.travel_mm.map((t, k) => `<option value="${k}">${fmt(t, 0)} mm</option>`).join("")}</select></label>` +
      `<span class="note" id="cmp-status">${picks.some((i) => !details[String(i)]) ? (SERVED ? "computing …" : "") : ""}</span></div>` +
      `<div class="cmp-drawings" id="cmp-drawings" style="grid-template-columns:repeat(${picks.length}, minmax(0, 1fr))"></div>` +
      `<div class="cmp-curves"><div id="cmp-scrub" class="curve"></div><div id="cmp-heave" class="curve"></div><div id="cmp-camber" class="curve"></div><div id="cmp-clearance" class="curve"></div></div>` +
      `<div id="cmp-table"></div>`;
    if (!$("cmp-travel").querySelector(`option[value="${state.cmpTravel}"]`)) {
      let t0 = 0; run0.travel_mm.forEach((t, k) => { if (Math.abs(t) < Math.abs(run0.travel_mm[t0])) t0 = k; }); state.cmpTravel = t0;
    }
    $("cmp-travel").value = String(state.cmpTravel);
    $("cmp-lean").addEventListener("input", (e) => { state.cmpLean = Number(e.target.value); drawCompareStates(picks, dets); });
    $("cmp-travel").addEventListener("change", (e) => { state.cmpTravel = Number(e.target.value); drawCompareStates(picks, dets); drawCompareCurves(picks, dets); });
    $("cmp-table").innerHTML = compareTable(picks);
    const dets = await Promise.all(picks.map(getDetail));
    if (state.compare.join() !== picks.join()) return;
    const missing = picks.filter((_, k) => !dets[k]);
    $("cmp-status").innerHTML = missing.length ? `No detail of ${missing.map((i) => esc(D.ids[i])).join(", ")} in this page: serve it (<code>${esc(serveCmd())}</code>).` : "";
    drawCompareStates(picks, dets);
    drawCompareCurves(picks, dets);
  }
  // the lean and travel of the compare controls in each design's own grid (the nearest lean, the same travel or the nearest)
  function gridIndex(run, lean, travel) {
    let l = 0, t = 0;
    run.lean_deg.forEach((v, k) => { if (Math.abs(v - lean) < Math.abs(run.lean_deg[l] - lean)) l = k; });
    run.travel_mm.forEach((v, k) => { if (Math.abs(v - travel) < Math.abs(run.travel_mm[t] - travel)) t = k; });
    return [t, l];
  }
  function drawCompareStates(picks, dets) {
    const run0 = D.runs[D.run[picks[0]]];
    const lean = run0.lean_deg[state.cmpLean], travel = run0.travel_mm[state.cmpTravel];
    $("cmp-lean-value").textContent = `${fmt(lean, 1)} deg`;
    const have = picks.map((i, k) => [i, dets[k]]).filter(([, d]) => d);
    // one scale for every drawing: the bounds of all of them over all their states
    let bounds = null;
    have.forEach(([i, d]) => {
      const b = stateBounds(D.runs[D.run[i]], [d]);
      bounds = bounds ? { y0: Math.min(bounds.y0, b.y0), y1: Math.max(bounds.y1, b.y1), z0: Math.min(bounds.z0, b.z0), z1: Math.max(bounds.z1, b.z1) } : b;
    });
    if (bounds) bounds.span = Math.max(bounds.y1 - bounds.y0, bounds.z1, 100);
    $("cmp-drawings").innerHTML = picks.map((i, k) => {
      const run = D.runs[D.run[i]], d = dets[k];
      const head = `<h4><span><span class="swatch" style="background:${PICKS[k % PICKS.length]}"></span>${esc(D.ids[i])}</span>` +
        `<span><button class="small" type="button" data-open="${i}">open</button> <button class="small" type="button" data-remove="${i}">×</button></span></h4>` +
        `<div class="note">${esc(run.id)} · ${esc(run.template)}</div>`;
      if (!d) return `<div class="cmp-card" data-row="${i}">${head}<p class="note">no detail in this page</p></div>`;
      const [t, l] = gridIndex(run, lean, travel);
      return `<div class="cmp-card" data-row="${i}">${head}${frontViewSVG(run, d, t, l, { bounds })}</div>`;
    }).join("");
  }
  $("compare").addEventListener("click", (e) => {
    if (e.target.dataset.open) openDetail(Number(e.target.dataset.open));
    if (e.target.dataset.remove) removeCompare(Number(e.target.dataset.remove));
  });
  function drawCompareCurves(picks, dets) {
    const run0 = D.runs[D.run[picks[0]]], travel = run0.travel_mm[state.cmpTravel];
    CURVES.forEach(([id, title, get]) => {
      const el = $(id.replace("curve-", "cmp-"));
      const traces = [];
      picks.forEach((i, k) => {
        const d = dets[k];
        if (!d) return;
        const run = D.runs[D.run[i]], [t] = gridIndex(run, 0, travel);
        get(d, t).forEach((y, kk, arr) => traces.push({ type: "scatter", mode: "lines+markers", x: run.lean_deg, y: y.map((v) => (fin(v) ? v : null)),
          name: D.ids[i] + (arr.length > 1 ? (kk ? " R" : " L") : ""), showlegend: kk === 0 && id === "curve-scrub",
          line: { color: PICKS[k % PICKS.length], dash: kk ? "dash" : "solid", width: 2 }, marker: { size: 4 } }));
      });
      const first = dets.find(Boolean);
      Plotly.react(el, traces, curveLayout((title || (first ? clearanceTitle(first) : "clearance [mm]")) + ` · travel ${fmt(travel, 0)} mm`, run0.lean_deg[state.cmpLean]),
                   { displayModeBar: false, responsive: true });
    });
  }
  // variables and metrics side by side; a row whose values differ by more than 0.5 % of the front's range is marked (≠),
  // and so is each value that differs from the first design's; the best value of an objective row is bold
  function compareTable(picks) {
    const head = `<tr><th></th><th>figure</th>${picks.map((i, k) => `<th><span class="swatch" style="display:inline-block;width:9px;height:9px;background:${PICKS[k % PICKS.length]}"></span> ${esc(D.ids[i])}</th>`).join("")}<th>unit</th></tr>`;
    const group = (title, cols) => `<tr class="group"><td></td><td colspan="${picks.length + 2}">${title}</td></tr>` + cols.map((c) => {
      const vals = picks.map((i) => val(c.key, i));
      const [lo, hi] = rangeOf(c.key), tol = Math.max((hi - lo) * 0.005, 1e-9);
      const differs = vals.map((v) => fin(v) && fin(vals[0]) && Math.abs(v - vals[0]) > tol);
      const any = differs.some(Boolean) || vals.some((v) => fin(v) !== fin(vals[0]));
      let best = -1;
      if (c.better) vals.forEach((v, k) => { if (fin(v) && (best < 0 || (c.better === "lower" ? v < vals[best] : v > vals[best]))) best = k; });
      return `<tr data-key="${esc(c.key)}"${any ? ' class="differs"' : ""}><td class="marker">${any ? "≠" : ""}</td><td>${esc(c.label)}</td>` +
        vals.map((v, k) => `<td class="num${differs[k] ? " diff" : ""}${k === best && any ? " best" : ""}">${fmt(v, Math.abs(v) >= 100 ? 1 : 3)}</td>`).join("") +
        `<td class="unit">${esc(unitOf(c))}</td></tr>`;
    }).join("");
    const cols = (g) => D.columns.filter((c) => c.group === g && !(g === "metric" && c.alias && colLookup[c.alias].group === "objective"));
    return `<table class="cmp-table">${head}${group("objectives", cols("objective"))}${group("design variables", cols("variable"))}${group("metrics", cols("metric"))}</table>` +
      `<p class="note">≠: the designs differ (by more than 0.5 % of the front's range); shaded: differs from the first design; bold: the best of an objective.</p>`;
  }

  // ------------------------------------------------------------ layout: splitter, resizing
  function resizePlots() {
    requestAnimationFrame(() => {
      if (state.view === "matrix") Plotly.Plots.resize(matrixDiv);
      else if (state.view === "parallel") Plotly.Plots.resize(parDiv);
    });
  }
  (function splitter() {
    const sp = $("splitter");
    let x0 = 0, w0 = 0;
    const move = (e) => {
      const w = Math.max(360, Math.min(window.innerWidth * 0.7, w0 + (x0 - e.clientX)));
      document.documentElement.style.setProperty("--detail-w", `${w}px`);
    };
    const up = () => { document.removeEventListener("mousemove", move); document.removeEventListener("mouseup", up); resizePlots(); if (cur) { drawCurves(); } };
    sp.addEventListener("mousedown", (e) => {
      x0 = e.clientX; w0 = $("detail").getBoundingClientRect().width;
      document.addEventListener("mousemove", move); document.addEventListener("mouseup", up); e.preventDefault();
    });
  })();

  renderWeights();
  applyFilters("start");
  setView("matrix");
  state.started = true;
  performance.mark("tiltopt:ready");
  window.tiltoptExplorer = { data: D, values: V, state, openDetail, addCompare, setFilter, applyFilters, compromise, getDetail,
                             traceRows, curves, kept: () => kept.slice(), lastChoice: () => lastChoice, setView, DRAWINGS, ready: true,
                             readyAt: performance.now() };
})().catch((e) => { console.error("tiltopt explorer: " + (e && e.stack ? e.stack : e)); });
