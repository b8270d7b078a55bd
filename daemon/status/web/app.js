// glowgate status page. Every text that comes from the gateway or its
// configuration is written with textContent, never as HTML.
(function () {
  "use strict";

  const C2 = 0.014388;            // m·K, ITS-90 second radiation constant
  const SPARK_MS = 10 * 60e3;     // sparkline span
  const TREND_MS = 60 * 60e3;     // detail trend span
  const STALE_MS = 10e3;          // a reading older than this marks the tile stale
  const TOKEN_KEY = "glowgate.token";
  const NAME_KEY = "glowgate.operator";
  const PRIORITIES = ["urgent", "critical", "emergency", "high", "medium", "low"];
  const CHANNEL_COLOURS = ["#78c2ff", "#ffb45a", "#b48cff", "#5cbf7a", "#ff7fa8", "#e6e06a", "#5fd3c8", "#c9c9c9"];

  const st = {
    gateway: "", version: "", actions: false, seq: 0, clockOffset: 0,
    heads: [],              // head info, display order
    info: new Map(),        // name -> head info
    latest: new Map(),      // name -> {reading, glow}
    spark: new Map(),       // name -> {t: [], v: []}, last SPARK_MS
    alarms: [],
    alarmSig: "",
    health: null,
    tiles: new Map(),       // name -> tile elements
    detail: null,           // name of the head shown in detail, or null
    dhist: null,            // detail history {t, temp, raw, frac: [[]]}
    es: null,
    msgTimer: 0,
    dirty: new Set(),       // heads whose tiles need drawing
    frame: 0,
  };

  // ---------- small helpers ----------
  const $ = (id) => document.getElementById(id);
  function el(tag, cls, text) {
    const e = document.createElement(tag);
    if (cls) e.className = cls;
    if (text !== undefined && text !== null) e.textContent = String(text);
    return e;
  }
  function clear(e) { while (e.firstChild) e.removeChild(e.firstChild); }
  function unitLabel(u) { return u === "degC" ? "°C" : (u || ""); }
  function fmtT(v) { return v === null || v === undefined || !isFinite(v) ? "—" : v.toFixed(1); }
  function fmtPct(v) { return v === null || v === undefined || !isFinite(v) ? "—" : (100 * v).toFixed(1) + " %"; }
  function fmtNum(v, d) { return v === null || v === undefined || !isFinite(v) ? "—" : Number(v).toFixed(d); }
  function fmtSig(v) { return v === null || v === undefined || !isFinite(v) ? "—" : Number(v).toPrecision(4); }
  function toK(v, unit) { return unit === "K" ? v : v + 273.15; }
  function serverNow() { return Date.now() + st.clockOffset; }
  function fmtAge(ms) {
    const s = Math.max(0, Math.round(ms / 1000));
    if (s < 120) return s + " s";
    if (s < 7200) return Math.round(s / 60) + " min";
    return Math.round(s / 3600) + " h";
  }
  function fmtTime(iso) {
    if (!iso) return "";
    const d = new Date(iso);
    return isNaN(d) ? "" : d.toLocaleString();
  }
  function priorityClass(p) {
    p = String(p || "").toLowerCase();
    if (p === "urgent" || p === "critical" || p === "emergency") return "urgent";
    return ["high", "medium", "low"].includes(p) ? p : "other";
  }
  function priorityRank(p) {
    const i = PRIORITIES.indexOf(String(p || "").toLowerCase());
    return i < 0 ? PRIORITIES.length : (i < 3 ? 0 : i - 2);
  }
  // Alarm states as the gateway names them (ISA-18.2 / IEC 62682).
  const QUIET = ["normal", "shelved", "suppressed", "out_of_service"];
  const NEEDS_ACK = ["unacknowledged", "rtn_unacknowledged", "latched"];
  function shelvedNow(a, now) { return a.state === "shelved" || !!(a.shelved_until && Date.parse(a.shelved_until) > now); }
  // In alarm: the condition is present (an unknown state counts as present).
  function alarmActive(a, now) {
    return !QUIET.includes(a.state) && a.state !== "rtn_unacknowledged" && a.state !== "latched" && !shelvedNow(a, now);
  }
  // Listed: in alarm, or awaiting the operator.
  function alarmListed(a, now) { return !QUIET.includes(a.state) && !shelvedNow(a, now); }
  function alarmShelved(a, now) { return shelvedNow(a, now); }
  function minFraction(r) {
    let m = null;
    for (const c of r.channels || []) {
      if (c.signal_fraction !== null && isFinite(c.signal_fraction) && (m === null || c.signal_fraction < m)) m = c.signal_fraction;
    }
    return m;
  }

  async function getJSON(path) {
    const res = await fetch(path, { cache: "no-store", credentials: "same-origin" });
    if (!res.ok) throw new Error(path + ": " + res.status);
    return res.json();
  }

  // ---------- state loading and the live stream ----------
  async function loadState() {
    const s = await getJSON("api/state");
    st.gateway = s.gateway; st.version = s.version; st.actions = !!s.actions; st.seq = s.seq;
    const now = Date.parse(s.now);
    if (isFinite(now)) st.clockOffset = now - Date.now();
    $("gateway").textContent = s.gateway ? "glowgate · " + s.gateway : "glowgate";
    document.title = s.gateway ? s.gateway + " · glowgate" : "glowgate";
    $("version").textContent = s.version || "";
    setHeads(s.heads || []);
    for (const ev of s.readings || []) st.latest.set(ev.reading.head, ev);
    setAlarms(s.alarms || []);
    setHealth(s.health);
    renderSession();
    try {
      const h = await getJSON("api/history?minutes=10&step=5");
      for (const e of h.heads || []) {
        const sp = { t: [], v: [] };
        for (let i = 0; i < e.t.length; i++) { sp.t.push(e.t[i]); sp.v.push(e.temperature[i]); }
        st.spark.set(e.head, sp);
      }
    } catch (e) { /* sparklines fill from the live stream */ }
    for (const name of st.info.keys()) st.dirty.add(name);
    schedule();
    route();
  }

  function connect() {
    if (st.es) st.es.close();
    const es = new EventSource("api/events?since=" + encodeURIComponent(st.seq));
    st.es = es;
    es.onopen = () => setChip($("live"), "live", "ok");
    es.onerror = () => setChip($("live"), "reconnecting", "warn");
    es.addEventListener("readings", (m) => {
      let list;
      try { list = JSON.parse(m.data); } catch (e) { return; }
      for (const ev of list) onReading(ev);
      if (m.lastEventId) st.seq = m.lastEventId;
      schedule();
    });
    es.addEventListener("heads", (m) => { setHeads(JSON.parse(m.data)); route(); });
    es.addEventListener("alarms", (m) => setAlarms(JSON.parse(m.data)));
    es.addEventListener("health", (m) => setHealth(JSON.parse(m.data)));
    es.addEventListener("resync", () => { loadState().catch(() => {}); });
  }

  function onReading(ev) {
    const r = ev.reading;
    st.latest.set(r.head, ev);
    const t = Date.parse(r.time);
    if (isFinite(t)) {
      let sp = st.spark.get(r.head);
      if (!sp) { sp = { t: [], v: [] }; st.spark.set(r.head, sp); }
      pushPoint(sp.t, [sp.v], t, [r.temperature]);
      trim(sp.t, [sp.v], t - SPARK_MS);
      if (st.detail === r.head && st.dhist) {
        const h = st.dhist;
        const fr = (r.channels || []).map((c) => c.signal_fraction);
        pushPoint(h.t, [h.temp, h.raw].concat(h.frac), t, [r.temperature, r.raw_temperature].concat(fr));
        trim(h.t, [h.temp, h.raw].concat(h.frac), t - TREND_MS);
      }
    }
    st.dirty.add(r.head);
  }

  // pushPoint keeps at most one point per second: a reading in the same
  // second as the last point replaces it.
  function pushPoint(ts, series, t, vals) {
    const n = ts.length;
    if (n > 0 && t < ts[n - 1]) return;
    if (n > 0 && Math.floor(t / 1000) === Math.floor(ts[n - 1] / 1000)) {
      ts[n - 1] = t;
      series.forEach((s, i) => { s[n - 1] = vals[i] === undefined ? null : vals[i]; });
      return;
    }
    ts.push(t);
    series.forEach((s, i) => s.push(vals[i] === undefined ? null : vals[i]));
  }
  function trim(ts, series, from) {
    let k = 0;
    while (k < ts.length && ts[k] < from) k++;
    if (k > 0) { ts.splice(0, k); series.forEach((s) => s.splice(0, k)); }
  }

  function schedule() {
    if (!st.frame) st.frame = requestAnimationFrame(draw);
  }
  function draw() {
    st.frame = 0;
    for (const name of st.dirty) updateTile(name);
    if (st.detail && st.dirty.has(st.detail)) drawDetail();
    st.dirty.clear();
  }

  // ---------- heads and tiles ----------
  function setHeads(list) {
    st.heads = list;
    st.info = new Map(list.map((h) => [h.name, h]));
    for (const name of Array.from(st.latest.keys())) if (!st.info.has(name)) st.latest.delete(name);
    const box = $("tiles");
    clear(box);
    st.tiles.clear();
    for (const h of list) {
      const t = makeTile(h);
      st.tiles.set(h.name, t);
      box.appendChild(t.root);
      st.dirty.add(h.name);
    }
    if (list.length === 0) box.appendChild(el("p", "muted", "No heads configured."));
    schedule();
  }

  function makeTile(h) {
    const root = el("a", "tile");
    root.href = "#/head/" + encodeURIComponent(h.name);
    root.dataset.head = h.name;
    const head = el("div", "tile-head");
    const name = el("span", "tile-name", h.name);
    const quality = el("span", "quality");
    head.append(name, quality);
    const desc = el("div", "tile-desc", h.description || "\u00a0");
    desc.title = h.description || "";
    const main = el("div", "tile-main");
    const swatch = el("span", "swatch");
    swatch.setAttribute("aria-hidden", "true");
    const tw = el("span");
    const temp = el("span", "temp", "—");
    const unit = el("span", "unit", unitLabel(h.unit));
    tw.append(temp, unit);
    main.append(swatch, tw);
    const barRow = el("div", "bar-row");
    const sf = el("div", "sf");
    const sfFill = el("span");
    sf.appendChild(sfFill);
    const sfLabel = el("span", "", "signal —");
    barRow.append(sf, sfLabel);
    const facts = el("div", "facts-row");
    const ng = el("span");
    const age = el("span", "age");
    facts.append(ng, age);
    const flags = el("div", "flags");
    const spark = el("canvas", "spark");
    spark.height = 42;
    const alarms = el("div", "tile-alarms");
    root.append(head, desc, main, barRow, facts, flags, spark, alarms);
    return { root, quality, swatch, temp, unit, sf, sfFill, sfLabel, ng, age, flags, spark, alarms };
  }

  function updateTile(name) {
    const t = st.tiles.get(name);
    if (!t) return;
    const ev = st.latest.get(name);
    const info = st.info.get(name) || {};
    if (ev) {
      const r = ev.reading;
      t.temp.textContent = fmtT(r.temperature);
      t.unit.textContent = unitLabel(r.unit || info.unit);
      t.quality.textContent = r.quality || "";
      t.quality.className = "quality " + (r.quality || "");
      t.root.classList.remove("q-good", "q-uncertain", "q-bad");
      if (r.quality) t.root.classList.add("q-" + r.quality);
      t.swatch.style.backgroundColor = ev.glow || "#000";
      t.swatch.title = ev.glow ? "glow colour of a blackbody at this temperature" :
        (r.temperature === null ? "no temperature" : "no visible glow below about 525 °C");
      const f = minFraction(r);
      t.sfFill.style.width = f === null ? "0" : Math.max(0, Math.min(100, 100 * f)).toFixed(1) + "%";
      t.sf.classList.toggle("low", f !== null && f < 0.2);
      t.sfLabel.textContent = "signal " + fmtPct(f);
      t.ng.textContent = r.nongrey !== undefined && r.nongrey !== null ? "non-grey " + fmtNum(r.nongrey, 1) + " K" : "";
      clear(t.flags);
      for (const fl of r.flags || []) t.flags.appendChild(el("span", "flag", fl));
    }
    updateAge(name);
    drawSpark(t.spark, st.spark.get(name));
    renderTileAlarms(name);
  }

  function updateAge(name) {
    const t = st.tiles.get(name);
    const ev = st.latest.get(name);
    if (!t) return;
    if (!ev) { t.age.textContent = "no reading yet"; t.root.classList.add("stale"); return; }
    const age = serverNow() - Date.parse(ev.reading.time);
    const stale = isFinite(age) && age > STALE_MS;
    t.root.classList.toggle("stale", stale);
    t.age.textContent = stale ? "no reading for " + fmtAge(age) : "";
  }

  function renderTileAlarms(name) {
    const t = st.tiles.get(name);
    if (!t) return;
    clear(t.alarms);
    const now = serverNow();
    const counts = new Map();
    for (const a of st.alarms) {
      if (a.head === name && alarmActive(a, now)) counts.set(a.priority, (counts.get(a.priority) || 0) + 1);
    }
    const prios = Array.from(counts.keys()).sort((a, b) => priorityRank(a) - priorityRank(b));
    for (const p of prios) {
      const b = el("span", "prio " + priorityClass(p), counts.get(p) + " " + p);
      t.alarms.appendChild(b);
    }
  }

  // ---------- canvas drawing ----------
  function setupCanvas(c) {
    const dpr = window.devicePixelRatio || 1;
    // The CSS height is the height attribute as written in the page (kept
    // in data-h, since the attribute itself becomes the pixel height).
    if (!c.dataset.h) c.dataset.h = c.getAttribute("height") || "150";
    const w = Math.max(50, c.clientWidth);
    const h = Math.max(20, Number(c.dataset.h));
    if (c.width !== Math.round(w * dpr) || c.height !== Math.round(h * dpr)) {
      c.width = Math.round(w * dpr);
      c.height = Math.round(h * dpr);
      c.style.height = h + "px";
    }
    const g = c.getContext("2d");
    g.setTransform(dpr, 0, 0, dpr, 0, 0);
    g.clearRect(0, 0, w, h);
    return { g, w, h };
  }
  function css(name) { return getComputedStyle(document.documentElement).getPropertyValue(name).trim() || "#888"; }
  function range(arrays) {
    let lo = Infinity, hi = -Infinity;
    for (const a of arrays) for (const v of a) if (v !== null && isFinite(v)) { if (v < lo) lo = v; if (v > hi) hi = v; }
    return [lo, hi];
  }

  function drawSpark(c, sp) {
    const { g, w, h } = setupCanvas(c);
    if (!sp || sp.t.length < 2) return;
    const t1 = serverNow(), t0 = t1 - SPARK_MS;
    let [lo, hi] = range([sp.v]);
    if (!isFinite(lo)) return;
    if (hi - lo < 2) { const m = (hi + lo) / 2; lo = m - 1; hi = m + 1; }
    const x = (t) => ((t - t0) / (t1 - t0)) * (w - 2) + 1;
    const y = (v) => h - 3 - ((v - lo) / (hi - lo)) * (h - 6);
    g.strokeStyle = css("--temp");
    g.lineWidth = 1.5;
    polyline(g, sp.t, sp.v, x, y, 5000);
  }

  // polyline draws the series, breaking it at nulls and at gaps longer
  // than maxGap ms.
  function polyline(g, ts, vs, x, y, maxGap) {
    g.beginPath();
    let pen = false, prev = -Infinity;
    for (let i = 0; i < ts.length; i++) {
      const v = vs[i];
      if (v === null || !isFinite(v) || ts[i] - prev > maxGap) pen = false;
      if (v !== null && isFinite(v)) {
        if (pen) g.lineTo(x(ts[i]), y(v)); else g.moveTo(x(ts[i]), y(v));
        pen = true;
      }
      prev = ts[i];
    }
    g.stroke();
  }

  function niceTicks(lo, hi, n) {
    const span = hi - lo;
    if (!(span > 0)) return [lo];
    const step0 = span / n;
    const mag = Math.pow(10, Math.floor(Math.log10(step0)));
    const step = [1, 2, 5, 10].map((k) => k * mag).find((s) => s >= step0) || 10 * mag;
    const out = [];
    for (let v = Math.ceil(lo / step) * step; v <= hi + 1e-9 * span; v += step) out.push(Number(v.toPrecision(12)));
    // A step rounded up to 5 may leave a single line: ask for more.
    return out.length < 3 && n < 16 ? niceTicks(lo, hi, 2 * n) : out;
  }

  // chart draws time series over [t0, t1] with axes; series: [{v: [], colour, width}].
  function chart(c, ts, series, t0, t1, opts) {
    const { g, w, h } = setupCanvas(c);
    const padL = 56, padR = 10, padT = 8, padB = 22;
    let [lo, hi] = opts.range || range(series.map((s) => s.v));
    const axis = css("--line"), muted = css("--muted");
    g.font = "11px system-ui, sans-serif";
    if (!isFinite(lo)) {
      g.fillStyle = muted;
      g.fillText("no data yet", padL, padT + 14);
      return;
    }
    if (hi - lo < (opts.minSpan || 1e-9)) { const m = (hi + lo) / 2, s = (opts.minSpan || 1) / 2; lo = m - s; hi = m + s; }
    const pad = (hi - lo) * 0.06; lo -= pad; hi += pad;
    if (opts.floor !== undefined) lo = Math.max(lo, opts.floor);
    const x = (t) => padL + ((t - t0) / (t1 - t0)) * (w - padL - padR);
    const y = (v) => padT + (1 - (v - lo) / (hi - lo)) * (h - padT - padB);
    g.strokeStyle = axis; g.fillStyle = muted; g.lineWidth = 1;
    g.textAlign = "right"; g.textBaseline = "middle";
    for (const v of niceTicks(lo, hi, 4)) {
      g.beginPath(); g.moveTo(padL, y(v)); g.lineTo(w - padR, y(v)); g.stroke();
      g.fillText(opts.fmt ? opts.fmt(v) : String(v), padL - 6, y(v));
    }
    g.textAlign = "center"; g.textBaseline = "top";
    const span = t1 - t0;
    const stepMin = span > 30 * 60e3 ? 10 : 2;
    const first = Math.ceil(t0 / (stepMin * 60e3)) * stepMin * 60e3;
    for (let t = first; t <= t1; t += stepMin * 60e3) {
      const d = new Date(t);
      g.fillText(String(d.getHours()).padStart(2, "0") + ":" + String(d.getMinutes()).padStart(2, "0"), x(t), h - padB + 5);
    }
    g.save();
    g.beginPath(); g.rect(padL, padT, w - padL - padR, h - padT - padB); g.clip();
    for (const s of series) {
      g.strokeStyle = s.colour; g.lineWidth = s.width || 1.5;
      polyline(g, ts, s.v, x, y, 5000);
    }
    g.restore();
    if (opts.unit) { g.textAlign = "left"; g.textBaseline = "top"; g.fillStyle = muted; g.fillText(opts.unit, 4, 2); }
  }

  // Planck's law, relative: λ⁻⁵ / (exp(c2/λT) − 1), λ in m, T in K.
  function planck(lm, tK) {
    const x = C2 / (lm * tK);
    return x > 700 ? 0 : Math.pow(lm, -5) / Math.expm1(x);
  }

  function drawSpectrum(c, r) {
    const { g, w, h } = setupCanvas(c);
    const muted = css("--muted"), axis = css("--line");
    g.font = "11px system-ui, sans-serif";
    const chans = (r && r.channels || []).filter((ch) => ch.wavelength_um > 0);
    const tr = r ? r.raw_temperature : null;
    $("d-spec-t").textContent = tr === null || tr === undefined ? "—" : fmtT(tr) + " " + unitLabel(r.unit);
    if (!r || tr === null || tr === undefined || !isFinite(tr) || chans.length === 0) {
      g.fillStyle = muted; g.fillText("no ratio temperature to draw", 12, 20);
      return;
    }
    const tK = toK(tr, r.unit);
    const lmin = Math.min(...chans.map((ch) => ch.wavelength_um)), lmax = Math.max(...chans.map((ch) => ch.wavelength_um));
    // The span around the channels, half as wide again on each side.
    const margin = 0.5 * (lmax - lmin) + 0.1;
    const a = Math.max(0.2, lmin - margin), b = lmax + margin;
    const wien = 2897.77 / tK; // µm, Wien's displacement law
    $("d-spec-peak").textContent = "blackbody peak at " + wien.toFixed(2) + " µm";
    const padL = 40, padR = 12, padT = 22, padB = 26;
    const N = 160;
    let peak = 0;
    const xs = [], ys = [];
    for (let i = 0; i <= N; i++) {
      const l = a + (b - a) * i / N;
      const v = planck(l * 1e-6, tK);
      xs.push(l); ys.push(v); if (v > peak) peak = v;
    }
    if (!(peak > 0)) return;
    const fr = chans.map((ch) => ch.signal_fraction).filter((f) => f !== null && isFinite(f) && f > 0);
    const mean = fr.length ? fr.reduce((s, f) => s + f, 0) / fr.length : null;
    const pts = chans.map((ch) => ({
      l: ch.wavelength_um, name: ch.name,
      v: mean && ch.signal_fraction !== null && isFinite(ch.signal_fraction) ? planck(ch.wavelength_um * 1e-6, tK) / peak * ch.signal_fraction / mean : null,
    }));
    let top = 1.1;
    for (const p of pts) if (p.v !== null && p.v * 1.1 > top) top = p.v * 1.1;
    const x = (l) => padL + (l - a) / (b - a) * (w - padL - padR);
    const y = (v) => padT + (1 - v / top) * (h - padT - padB);
    g.strokeStyle = axis; g.fillStyle = muted; g.lineWidth = 1;
    g.textAlign = "right"; g.textBaseline = "middle";
    for (const v of niceTicks(0, top, 4)) { g.beginPath(); g.moveTo(padL, y(v)); g.lineTo(w - padR, y(v)); g.stroke(); g.fillText(v.toFixed(1), padL - 5, y(v)); }
    g.textAlign = "center"; g.textBaseline = "top";
    for (const l of niceTicks(a, b, 6)) g.fillText(String(l), x(l), h - padB + 5);
    g.textBaseline = "top";
    g.textAlign = "right"; g.fillText("λ / µm", w - padR, 2);
    g.textAlign = "left"; g.fillText("relative radiance", 4, 2);
    g.strokeStyle = css("--temp"); g.lineWidth = 2;
    g.beginPath();
    xs.forEach((l, i) => { const yy = y(ys[i] / peak); if (i) g.lineTo(x(l), yy); else g.moveTo(x(l), yy); });
    g.stroke();
    g.textAlign = "center"; g.textBaseline = "bottom";
    pts.forEach((p, i) => {
      const col = CHANNEL_COLOURS[i % CHANNEL_COLOURS.length];
      g.strokeStyle = col; g.setLineDash([3, 3]);
      g.beginPath(); g.moveTo(x(p.l), padT); g.lineTo(x(p.l), h - padB); g.stroke();
      g.setLineDash([]);
      if (p.v !== null) {
        g.fillStyle = col;
        g.beginPath(); g.arc(x(p.l), y(p.v), 5, 0, 2 * Math.PI); g.fill();
      }
      g.fillStyle = col;
      g.fillText(p.name, x(p.l), padT - 6);
    });
  }

  // ---------- detail view ----------
  async function openDetail(name) {
    st.detail = name;
    st.dhist = null;
    $("overview").hidden = true;
    $("detail").hidden = false;
    fillDetailStatic(name);
    drawDetail();
    try {
      const h = await getJSON("api/history?head=" + encodeURIComponent(name) + "&minutes=60");
      if (st.detail !== name) return;
      st.dhist = { t: h.t, temp: h.temperature, raw: h.raw_temperature, frac: h.signal_fraction || [], channels: h.channels || [] };
    } catch (e) {
      st.dhist = { t: [], temp: [], raw: [], frac: [], channels: [] };
    }
    drawDetail();
  }

  function fillDetailStatic(name) {
    const info = st.info.get(name) || { name };
    $("d-name").textContent = name;
    $("d-desc").textContent = info.description || "";
    const parts = [];
    if (info.line) parts.push("line " + info.line);
    if (info.range_min !== null && info.range_min !== undefined && info.range_max !== null && info.range_max !== undefined) {
      parts.push("range " + info.range_min + " to " + info.range_max + " " + unitLabel(info.unit));
    }
    if (info.channels && info.channels.length) parts.push(info.channels.map((c) => c.name + " " + c.wavelength_um + " µm").join(", "));
    $("d-line").textContent = parts.join(" · ");
    fillKV($("d-settings"), info.settings);
    fillKV($("d-calibration"), info.calibration);
    document.title = name + " · " + (st.gateway || "glowgate");
  }

  function fillKV(table, obj) {
    const body = table.tBodies[0];
    clear(body);
    const keys = obj && typeof obj === "object" ? Object.keys(obj).sort() : [];
    if (keys.length === 0) {
      const tr = el("tr"); tr.appendChild(el("td", "muted", "none given")); tr.appendChild(el("td")); body.appendChild(tr);
      return;
    }
    for (const k of keys) {
      const v = obj[k];
      const tr = el("tr");
      tr.appendChild(el("td", "", k));
      tr.appendChild(el("td", "", v !== null && typeof v === "object" ? JSON.stringify(v) : String(v)));
      body.appendChild(tr);
    }
  }

  function drawDetail() {
    const name = st.detail;
    if (!name) return;
    const ev = st.latest.get(name);
    const r = ev ? ev.reading : null;
    const info = st.info.get(name) || {};
    const unit = unitLabel(r ? r.unit : info.unit);
    $("d-temp").textContent = r ? fmtT(r.temperature) : "—";
    $("d-unit").textContent = unit;
    const q = $("d-quality");
    q.textContent = r ? r.quality : "no reading";
    q.className = "quality " + (r ? r.quality : "");
    $("d-swatch").style.backgroundColor = ev && ev.glow ? ev.glow : "#000";
    const flags = $("d-flags");
    clear(flags);
    for (const f of (r && r.flags) || []) flags.appendChild(el("span", "flag", f));

    // Channels
    const cb = $("d-channels").tBodies[0];
    clear(cb);
    for (const c of (r && r.channels) || []) {
      const tr = el("tr");
      tr.append(el("td", "", c.name), el("td", "num", fmtNum(c.wavelength_um, 3) + " µm"), el("td", "num", fmtSig(c.signal)),
        el("td", "num", fmtPct(c.signal_fraction)), el("td", "num", fmtT(c.brightness_temperature) + " " + unit));
      cb.appendChild(tr);
    }
    // Pair temperatures
    const pb = $("d-pairs").tBodies[0];
    clear(pb);
    const pairs = (r && r.pair_temperatures) || [];
    for (const p of pairs) {
      const tr = el("tr");
      tr.append(el("td", "", p.pair), el("td", "num", fmtT(p.temperature) + " " + unit));
      pb.appendChild(tr);
    }
    if (pairs.length === 0) {
      const tr = el("tr"); tr.appendChild(el("td", "muted", r ? "one pair only: " + fmtT(r.raw_temperature) + " " + unit : "—")); tr.appendChild(el("td")); pb.appendChild(tr);
    }
    $("d-nongrey").textContent = r && r.nongrey !== undefined && r.nongrey !== null ? "non-grey index (spread of pair temperatures): " + fmtNum(r.nongrey, 2) + " K" : "";
    drawSpectrum($("d-spectrum"), r);

    // Alarms of this head
    const da = $("d-alarms");
    clear(da);
    const now = serverNow();
    for (const a of st.alarms) {
      if (a.head === name && alarmListed(a, now)) {
        const s = el("span", "prio " + priorityClass(a.priority), a.priority + ": " + a.name);
        s.title = a.message || "";
        da.appendChild(s);
      }
    }

    // Trends
    const h = st.dhist;
    const t1 = serverNow(), t0 = t1 - TREND_MS;
    if (h) {
      chart($("d-trend"), h.t, [{ v: h.raw, colour: css("--raw"), width: 1 }, { v: h.temp, colour: css("--temp"), width: 2 }], t0, t1,
        { minSpan: 2, unit: unit, fmt: (v) => v.toFixed(Math.abs(v) >= 100 ? 0 : 1) });
      chart($("d-frac"), h.t, h.frac.map((v, i) => ({ v, colour: CHANNEL_COLOURS[i % CHANNEL_COLOURS.length] })), t0, t1,
        { minSpan: 0.05, floor: 0, unit: "%", fmt: (v) => (100 * v).toFixed(0) });
      const lg = $("d-frac-legend");
      clear(lg);
      (h.channels || []).forEach((c, i) => {
        const k = el("span", "key"); k.style.backgroundColor = CHANNEL_COLOURS[i % CHANNEL_COLOURS.length];
        lg.append(k, document.createTextNode(c));
      });
    }
  }

  // ---------- alarms ----------
  function setAlarms(list) {
    st.alarms = list;
    renderAlarms();
    for (const name of st.tiles.keys()) renderTileAlarms(name);
    if (st.detail) { st.dirty.add(st.detail); schedule(); }
  }

  // alarmSig names the alarms listed and shelved now: the list is drawn
  // again when it changes (a shelving ran out), not on every tick, so a
  // choice being made in it is not reset.
  function alarmSig(now) {
    return st.alarms.map((a) => (alarmListed(a, now) ? "L" : alarmShelved(a, now) ? "S" : "-") + a.head + "\u0000" + a.name).join("\u0001");
  }

  function renderAlarms() {
    const now = serverNow();
    st.alarmSig = alarmSig(now);
    const listed = st.alarms.filter((a) => alarmListed(a, now));
    const shelved = st.alarms.filter((a) => alarmShelved(a, now));
    const ul = $("alarms");
    clear(ul);
    for (const a of listed) ul.appendChild(alarmItem(a, false));
    $("no-alarms").hidden = listed.length > 0;
    $("alarm-count").textContent = listed.length ? "(" + listed.length + ")" : "";
    const sb = $("shelved");
    clear(sb);
    for (const a of shelved) sb.appendChild(alarmItem(a, true));
    $("shelved-box").hidden = shelved.length === 0;
    $("shelved-count").textContent = "(" + shelved.length + ")";
  }

  function alarmItem(a, shelved) {
    const li = el("li", "alarm " + (a.state || ""));
    li.dataset.head = a.head;
    li.dataset.alarm = a.name;
    const top = el("div", "alarm-top");
    top.appendChild(el("span", "prio " + priorityClass(a.priority), a.priority || "—"));
    const name = el("span", "alarm-name", a.name);
    const head = el("a", "", a.head);
    head.href = "#/head/" + encodeURIComponent(a.head);
    top.append(name, head);
    li.appendChild(top);
    if (a.message) li.appendChild(el("div", "alarm-msg", a.message));
    let meta = (a.state || "").replace(/^rtn_/, "returned, ").replace(/_/g, " ");
    if (a.since) meta += " since " + fmtTime(a.since);
    if (shelved && a.shelved_until) meta = "shelved until " + fmtTime(a.shelved_until);
    li.appendChild(el("div", "alarm-meta", meta));
    if (signedIn()) {
      const act = el("div", "alarm-actions");
      if (shelved) {
        act.appendChild(actionButton("Unshelve", { kind: "unshelve", head: a.head, alarm: a.name }));
      } else {
        if (NEEDS_ACK.includes(a.state)) {
          const b = actionButton(a.state === "latched" ? "Reset" : "Acknowledge", { kind: "acknowledge", head: a.head, alarm: a.name });
          b.classList.add("primary", "ack");
          act.appendChild(b);
        }
        const sel = el("select");
        sel.setAttribute("aria-label", "shelve for");
        for (const [m, label] of [[15, "15 min"], [60, "1 h"], [240, "4 h"], [480, "8 h"]]) {
          const o = el("option", "", label); o.value = String(m); sel.appendChild(o);
        }
        const b = el("button", "shelve", "Shelve");
        b.type = "button";
        b.addEventListener("click", () => act_({ kind: "shelve", head: a.head, alarm: a.name, minutes: Number(sel.value) }, b));
        act.append(sel, b);
      }
      li.appendChild(act);
    }
    return li;
  }

  function actionButton(label, body) {
    const b = el("button", "", label);
    b.type = "button";
    b.addEventListener("click", () => act_(body, b));
    return b;
  }

  async function act_(body, button) {
    const token = sessionStorage.getItem(TOKEN_KEY);
    if (!token) return;
    body.by = sessionStorage.getItem(NAME_KEY) || "";
    button.disabled = true;
    try {
      const res = await fetch("api/action", {
        method: "POST", credentials: "same-origin", cache: "no-store",
        headers: { "Authorization": "Bearer " + token, "Content-Type": "application/json" },
        body: JSON.stringify(body),
      });
      if (res.ok) {
        showMsg(body.kind + " sent for " + body.alarm + " on " + body.head, false);
      } else {
        const text = (await res.text()).trim();
        showMsg(text || ("refused (" + res.status + ")"), true);
        if (res.status === 401 || res.status === 403) { signOut(); }
      }
    } catch (e) {
      showMsg("no answer from the gateway", true);
    } finally {
      button.disabled = false;
    }
  }

  function showMsg(text, err) {
    const m = $("action-msg");
    m.textContent = text;
    m.className = "msg" + (err ? " err" : "");
    m.hidden = false;
    clearTimeout(st.msgTimer);
    st.msgTimer = setTimeout(() => { m.hidden = true; }, err ? 20000 : 6000);
  }

  // ---------- health ----------
  function setChip(e, text, cls) { e.textContent = text; e.className = "chip " + (cls || ""); }

  function setHealth(h) {
    if (!h) return;
    st.health = h;
    setChip($("broker"), h.broker_connected ? "broker connected" : "broker down", h.broker_connected ? "ok" : "err");
    const old = h.outbox_oldest_s > 0 ? ", oldest " + fmtAge(h.outbox_oldest_s * 1000) : "";
    setChip($("outbox"), "outbox " + h.outbox_depth + old, h.outbox_depth > 0 ? "warn" : "ok");
    const s = $("health-status");
    s.textContent = h.status === "ok" ? "All good" : "Degraded";
    s.className = "health-status " + h.status;
    const ul = $("health-reasons");
    clear(ul);
    for (const r of h.reasons || []) ul.appendChild(el("li", "", r));
    const dl = $("health-pub");
    clear(dl);
    const facts = [
      ["broker", h.broker_connected ? (h.broker || "connected") : "disconnected"],
      ["outbox", h.outbox_depth + " waiting" + (h.outbox_oldest_s > 0 ? ", oldest " + fmtAge(h.outbox_oldest_s * 1000) : "")],
      ["published", String(h.published)],
      ["dropped", String(h.outbox_dropped)],
    ];
    for (const [k, v] of facts) dl.append(el("dt", "", k), el("dd", "", v));
    const tb = $("lines").tBodies[0];
    clear(tb);
    for (const l of h.lines || []) {
      const tr = el("tr", l.failing > 0 ? "failing" : "");
      tr.append(el("td", "", l.name), el("td", "num", l.failing ? l.failing + "/" + l.heads + " failing" : String(l.heads)),
        el("td", "num", fmtNum(l.polls_per_s, 1)), el("td", "num", fmtNum(l.failures_per_s, 2)),
        el("td", "num", fmtNum(l.mean_ms, l.mean_ms >= 100 ? 0 : 1)), el("td", "num", fmtNum(100 * l.busy, 0) + " %"));
      tb.appendChild(tr);
    }
    $("lines").hidden = !(h.lines && h.lines.length);
  }

  // ---------- operator session ----------
  function signedIn() { return st.actions && !!sessionStorage.getItem(TOKEN_KEY); }

  function renderSession() {
    $("login").hidden = !st.actions || signedIn();
    $("session").hidden = !signedIn();
    $("session-who").textContent = sessionStorage.getItem(NAME_KEY) || "operator";
    renderAlarms();
  }

  function signOut() {
    sessionStorage.removeItem(TOKEN_KEY);
    renderSession();
  }

  async function signIn(ev) {
    ev.preventDefault();
    const token = $("op-token").value;
    const name = $("op-name").value.trim();
    const msg = $("login-msg");
    if (!token) { msg.textContent = "enter the operator token"; return; }
    msg.textContent = "checking…";
    try {
      const res = await fetch("api/session", { method: "POST", credentials: "same-origin", cache: "no-store", headers: { "Authorization": "Bearer " + token } });
      if (res.status === 204) {
        sessionStorage.setItem(TOKEN_KEY, token);
        sessionStorage.setItem(NAME_KEY, name);
        $("op-token").value = "";
        msg.textContent = "";
        renderSession();
      } else {
        msg.textContent = res.status === 403 || res.status === 401 ? "token refused" : "sign-in failed (" + res.status + ")";
        $("op-token").value = "";
        $("op-token").focus();
      }
    } catch (e) {
      msg.textContent = "no answer from the gateway";
    }
  }

  // ---------- routing ----------
  function route() {
    const m = /^#\/head\/(.+)$/.exec(location.hash);
    if (m) {
      let name;
      try { name = decodeURIComponent(m[1]); } catch (e) { name = null; }
      if (name !== null && name !== st.detail) { openDetail(name); return; }
      if (name !== null) return;
    }
    st.detail = null;
    st.dhist = null;
    $("detail").hidden = true;
    $("overview").hidden = false;
    document.title = st.gateway ? st.gateway + " · glowgate" : "glowgate";
    for (const name of st.tiles.keys()) st.dirty.add(name);
    schedule();
  }

  // ---------- start ----------
  function start() {
    $("login").addEventListener("submit", signIn);
    $("logout").addEventListener("click", signOut);
    window.addEventListener("hashchange", route);
    window.addEventListener("resize", () => { for (const n of st.tiles.keys()) st.dirty.add(n); if (st.detail) st.dirty.add(st.detail); schedule(); });
    setInterval(() => {
      for (const name of st.tiles.keys()) { updateAge(name); drawSpark(st.tiles.get(name).spark, st.spark.get(name)); }
      if (alarmSig(serverNow()) !== st.alarmSig) {
        renderAlarms();
        for (const name of st.tiles.keys()) renderTileAlarms(name);
      }
      if (st.detail) { st.dirty.add(st.detail); schedule(); }
    }, 5000);
    loadState().then(connect, () => {
      setChip($("live"), "gateway unreachable", "err");
      setTimeout(start2, 3000);
    });
  }
  function start2() {
    loadState().then(connect, () => setTimeout(start2, 3000));
  }
  start();
})();
