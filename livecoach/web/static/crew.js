// livecoach crew view: live numbers, charts and logs from the module's WebSocket.
// Read-only: the page never sends anything but the WebSocket handshake.
"use strict";

const QUIET_AFTER_S = 3;      // no message for this long: every value is shown as old
const MAX_LOG = 200;

const S = {
  ride: {},
  plan: null,
  planVersion: -1,
  fields: [],
  col: {},
  points: [],
  notices: [],
  state: null,
  lastMessageMs: 0,
  updates: 0,
  link: "connecting",
  retryMs: 500,
  drawPending: false,
};

const CHANNEL_NAMES = {
  "ble.cycling_power": "Power meter",
  "ble.csc": "Wheel speed",
  "ble.heart_rate": "Heart rate",
  "serial.gps": "GPS",
  "serial.mcu": "Sensor board",
  "csv": "CSV ride",
};

// ------------------------------------------------------------------ helpers
const $ = (id) => document.getElementById(id);
const isNum = (x) => typeof x === "number" && isFinite(x);
function fmt(x, digits) { return isNum(x) ? x.toFixed(digits) : "–"; }
function setText(id, text) { const el = $(id); if (el && el.textContent !== text) el.textContent = text; }
function kmh(mps) { return isNum(mps) ? mps * 3.6 : null; }

// --------------------------------------------------------------- data intake
function setFields(fields) {
  S.fields = fields;
  S.col = {};
  fields.forEach((name, i) => { S.col[name] = i; });
}

function takeHello(msg) {
  setFields(msg.fields || []);
  S.points = msg.points || [];
  S.notices = msg.notices || [];
  S.state = msg.state;
  maybeFetchPlan(msg.plan_version);
}

function takeUpdate(msg) {
  if (msg.points && msg.points.length) {
    S.points.push(...msg.points);
    if (S.points.length > 8000) S.points.splice(0, S.points.length - 8000);
  }
  if (msg.notices && msg.notices.length) {
    S.notices.push(...msg.notices);
    if (S.notices.length > MAX_LOG) S.notices.splice(0, S.notices.length - MAX_LOG);
  }
  if (msg.state) S.state = msg.state;
  maybeFetchPlan(msg.plan_version);
}

function maybeFetchPlan(version) {
  if (version === undefined || version === S.planVersion) return;
  S.planVersion = version;
  fetch("/api/plan", { cache: "no-store" })
    .then((r) => r.json())
    .then((plan) => {
      S.plan = plan;
      document.body.dataset.planPoints = plan ? String(plan.distance_m.length) : "0";
      scheduleDraw();
    })
    .catch(() => { S.planVersion = -1; });
}

function connect() {
  const scheme = location.protocol === "https:" ? "wss://" : "ws://";
  const ws = new WebSocket(scheme + location.host + "/ws");
  ws.onopen = () => { S.retryMs = 500; };
  ws.onmessage = (ev) => {
    let msg;
    try { msg = JSON.parse(ev.data); } catch (e) { return; }
    if (msg.type === "hello") takeHello(msg);
    else if (msg.type === "update") takeUpdate(msg);
    else return;
    S.lastMessageMs = Date.now();
    S.updates += 1;
    setLink("live");
    document.body.dataset.updates = String(S.updates);
    scheduleDraw();
  };
  ws.onclose = () => {
    setLink("lost");
    setTimeout(connect, S.retryMs);
    S.retryMs = Math.min(S.retryMs * 2, 5000);
  };
  ws.onerror = () => { try { ws.close(); } catch (e) { /* closing anyway */ } };
}

function setLink(link) {
  S.link = link;
  document.body.dataset.link = link;
  const el = $("link");
  el.dataset.link = link;
  el.textContent = { live: "live", quiet: "no data", lost: "reconnecting…", connecting: "connecting…" }[link];
}

// ------------------------------------------------------------------- numbers
function renderNumbers() {
  const st = S.state || {};
  const old = S.link !== "live";
  const speedStale = st.speed_stale !== false || old;
  const powerStale = st.power_stale !== false || old;
  setText("v-speed", fmt(kmh(st.speed_mps), 1));
  setText("v-speed-ms", fmt(st.speed_mps, 2));
  setText("v-plan-speed", fmt(kmh(st.planned_speed_mps), 1));
  $("t-speed").classList.toggle("stale", speedStale);
  setText("v-power", fmt(st.power_w, 0));
  setText("v-target", fmt(st.target_power_w, 0));
  setText("v-cadence", fmt(st.cadence_rpm, 0));
  $("t-power").classList.toggle("stale", powerStale);
  setText("v-totrap", isNum(st.distance_to_trap_m) ? fmt(Math.max(0, st.distance_to_trap_m), 0) : "–");
  setText("v-dist", fmt(st.distance_m, 0));
  setText("v-pred", fmt(kmh(st.predicted_trap_speed_mps), 1));
  setText("v-plantrap", fmt(kmh(st.planned_trap_speed_mps), 1));
  setText("v-trapspeed", isNum(st.trap_speed_mps) ? fmt(kmh(st.trap_speed_mps), 2) + " km/h" : "–");
  setText("v-wbal", isNum(st.w_prime_balance_j) ? fmt(st.w_prime_balance_j / 1000, 1) : "–");
  const total = st.w_prime_j || S.ride.w_prime_j;
  const frac = isNum(st.w_prime_balance_j) && total ? Math.max(0, Math.min(1, st.w_prime_balance_j / total)) : 0;
  const bar = $("v-wbal-bar");
  bar.style.width = (frac * 100).toFixed(1) + "%";
  bar.classList.toggle("low", frac < 0.2);
  setText("v-cda", fmt(st.cda_m2, 4));
  setText("v-cda-sd", fmt(st.cda_sd_m2, 4));
  setText("v-cda-prior", fmt(S.ride.prior_cda_m2, 4));
  setText("v-crr", fmt(st.crr, 5));
  setText("v-crr-sd", fmt(st.crr_sd, 5));
  setText("v-crr-prior", fmt(S.ride.prior_crr, 5));
  setText("v-cue", st.cue || "–");
  setText("v-cue-text", st.cue_text || (st.alarms && st.alarms.length ? st.alarms[st.alarms.length - 1] : "–"));
  for (const id of ["t-trap", "t-pred", "t-wbal", "t-cda", "t-crr", "t-cue"]) $(id).classList.toggle("stale", old);
  const phase = $("phase");
  phase.dataset.phase = st.phase || "waiting";
  setText("phase", st.phase === "runup" ? "run-up" : (st.phase || "waiting"));
}

function renderSensors() {
  const st = S.state || {};
  const body = $("sensor-table").tBodies[0];
  const rows = (st.sensors || []).map((h) => {
    const tr = document.createElement("tr");
    tr.dataset.channel = h.channel;
    const stale = h.stale || S.link !== "live";
    if (stale) tr.classList.add("stale");
    if (!h.link_up) tr.classList.add("down");
    const state = !h.link_up ? "link down" : (h.stale ? "stale" : (S.link !== "live" ? "old" : "ok"));
    const cells = [CHANNEL_NAMES[h.channel] || h.channel, null,
      isNum(h.age_s) ? fmt(h.age_s, 1) + " s ago" : "never",
      String(h.accepted), String(h.rejected),
      h.gaps ? h.gaps + " (longest " + fmt(h.longest_gap_s, 1) + " s)" : "0"];
    cells.forEach((text, i) => {
      const td = document.createElement("td");
      if (i === 1) {
        const b = document.createElement("span");
        b.className = "badge";
        b.textContent = state;
        td.appendChild(b);
      } else {
        td.textContent = text;
      }
      tr.appendChild(td);
    });
    return tr;
  });
  body.replaceChildren(...rows);
}

function renderLog() {
  const list = $("cue-log");
  const items = S.notices.slice(-MAX_LOG).reverse().map((n) => {
    const li = document.createElement("li");
    li.className = n.kind;
    for (const [cls, text] of [["t", fmt(n.t_s, 1) + " s"], ["kind", n.kind], ["text", n.text]]) {
      const span = document.createElement("span");
      span.className = cls;
      span.textContent = text;
      li.appendChild(span);
    }
    return li;
  });
  list.replaceChildren(...items);
}

// -------------------------------------------------------------------- charts
function niceStep(span, count) {
  const raw = span / Math.max(1, count);
  const mag = Math.pow(10, Math.floor(Math.log10(raw)));
  const r = raw / mag;
  return (r < 1.5 ? 1 : r < 3 ? 2 : r < 7 ? 5 : 10) * mag;
}

function extent(arrays, pad) {
  let lo = Infinity, hi = -Infinity;
  for (const a of arrays) for (const v of a) if (isNum(v)) { if (v < lo) lo = v; if (v > hi) hi = v; }
  if (!isFinite(lo)) return null;
  if (hi - lo < 1e-12) { const d = Math.abs(hi) * 0.05 || 1; lo -= d; hi += d; }
  const p = (hi - lo) * (pad || 0.06);
  return [lo - p, hi + p];
}

function tickLabel(v, step) {
  const digits = Math.max(0, -Math.floor(Math.log10(step) + 1e-9));
  return v.toFixed(Math.min(6, digits));
}

// spec: {x: [lo, hi], y: [lo, hi], xLabel, yLabel, series: [...], spans: [...]}
// series: {kind: "line"|"band", xs, ys | (lo, hi), color, width, dash}
function drawChart(canvas, spec) {
  const dpr = window.devicePixelRatio || 1;
  const w = canvas.clientWidth, h = canvas.clientHeight;
  if (!w || !h) return 0;
  if (canvas.width !== Math.round(w * dpr) || canvas.height !== Math.round(h * dpr)) {
    canvas.width = Math.round(w * dpr);
    canvas.height = Math.round(h * dpr);
  }
  const g = canvas.getContext("2d");
  g.setTransform(dpr, 0, 0, dpr, 0, 0);
  g.clearRect(0, 0, w, h);
  const m = { l: 58, r: 12, t: 8, b: 34 };
  const pw = w - m.l - m.r, ph = h - m.t - m.b;
  g.font = "12px system-ui, sans-serif";
  g.fillStyle = "#5d6b75";
  if (!spec.x || !spec.y) {
    g.fillText("waiting for data…", m.l + 8, m.t + 20);
    return 0;
  }
  const [x0, x1] = spec.x, [y0, y1] = spec.y;
  const X = (v) => m.l + (v - x0) / (x1 - x0) * pw;
  const Y = (v) => m.t + ph - (v - y0) / (y1 - y0) * ph;
  for (const sp of spec.spans || []) {
    g.fillStyle = sp.color;
    const a = Math.max(m.l, X(sp.from)), b = Math.min(m.l + pw, X(sp.to));
    if (b > a) g.fillRect(a, m.t, b - a, ph);
  }
  // grid and ticks
  g.strokeStyle = "#e7e1d6";
  g.lineWidth = 1;
  g.fillStyle = "#5d6b75";
  g.textAlign = "right";
  g.textBaseline = "middle";
  const ys = niceStep(y1 - y0, 5);
  for (let v = Math.ceil(y0 / ys) * ys; v <= y1 + 1e-12; v += ys) {
    const y = Math.round(Y(v)) + 0.5;
    g.beginPath(); g.moveTo(m.l, y); g.lineTo(m.l + pw, y); g.stroke();
    g.fillText(tickLabel(v, ys), m.l - 6, y);
  }
  g.textAlign = "center";
  g.textBaseline = "top";
  const xs = niceStep(x1 - x0, Math.max(3, Math.floor(pw / 90)));
  for (let v = Math.ceil(x0 / xs) * xs; v <= x1 + 1e-9; v += xs) {
    const x = Math.round(X(v)) + 0.5;
    g.beginPath(); g.moveTo(x, m.t); g.lineTo(x, m.t + ph); g.stroke();
    g.fillText(tickLabel(v, xs), x, m.t + ph + 5);
  }
  g.fillText(spec.xLabel || "", m.l + pw / 2, m.t + ph + 19);
  g.save();
  g.translate(13, m.t + ph / 2);
  g.rotate(-Math.PI / 2);
  g.textBaseline = "middle";
  g.fillText(spec.yLabel || "", 0, 0);
  g.restore();
  // data, clipped to the plot area
  g.save();
  g.beginPath(); g.rect(m.l, m.t, pw, ph); g.clip();
  let drawn = 0;
  for (const s of spec.series) {
    if (s.kind === "band") {
      let run = [];
      const flush = () => {
        if (run.length > 1) {
          g.beginPath();
          run.forEach(([x, lo], i) => (i ? g.lineTo(X(x), Y(lo)) : g.moveTo(X(x), Y(lo))));
          for (let i = run.length - 1; i >= 0; i--) g.lineTo(X(run[i][0]), Y(run[i][2]));
          g.closePath();
          g.fillStyle = s.color;
          g.fill();
        }
        run = [];
      };
      for (let i = 0; i < s.xs.length; i++) {
        if (isNum(s.xs[i]) && isNum(s.lo[i]) && isNum(s.hi[i])) run.push([s.xs[i], s.lo[i], s.hi[i]]);
        else flush();
      }
      flush();
      continue;
    }
    g.strokeStyle = s.color;
    g.lineWidth = s.width || 2;
    g.setLineDash(s.dash || []);
    g.beginPath();
    let pen = false;
    for (let i = 0; i < s.xs.length; i++) {
      const x = s.xs[i], y = s.ys[i];
      if (!isNum(x) || !isNum(y)) { pen = false; continue; }   // a gap: stale or unknown
      if (pen) g.lineTo(X(x), Y(y)); else g.moveTo(X(x), Y(y));
      pen = true;
      drawn += 1;
    }
    g.stroke();
    g.setLineDash([]);
  }
  g.restore();
  g.strokeStyle = "#b9b1a3";
  g.strokeRect(m.l + 0.5, m.t + 0.5, pw, ph);
  return drawn;
}

function column(name, scale) {
  const i = S.col[name];
  if (i === undefined) return [];
  return S.points.map((p) => (isNum(p[i]) ? p[i] * (scale || 1) : null));
}

function courseRange() {
  const end = S.ride.trap_exit_m || (S.plan && S.plan.distance_m[S.plan.distance_m.length - 1]);
  const ridden = column("distance_m").filter(isNum);
  const hi = Math.max(end || 0, ridden.length ? Math.max(...ridden) : 0);
  return hi > 0 ? [0, hi * 1.01] : null;
}

function trapSpan() {
  const a = S.ride.trap_entry_m, b = S.ride.trap_exit_m;
  return isNum(a) && isNum(b) ? [{ from: a, to: b, color: "#f3d9a0" }] : [];
}

function drawCharts() {
  const dist = column("distance_m");
  const plan = S.plan;
  const planD = plan ? plan.distance_m : [];
  // speed along the course
  const speed = column("speed_mps", 3.6);
  const planV = plan ? plan.speed_mps.map((v) => (isNum(v) ? v * 3.6 : null)) : [];
  let n = drawChart($("c-speed"), {
    x: courseRange(), y: extent([speed, planV]), xLabel: "distance from the start, m", yLabel: "km/h",
    spans: trapSpan(),
    series: [
      { kind: "line", xs: planD, ys: planV, color: "#8a96a0", width: 2, dash: [6, 4] },
      { kind: "line", xs: dist, ys: speed, color: "#0c5c63", width: 2.5 },
    ],
  });
  document.body.dataset.points = String(n);
  // power along the course
  const power = column("power_w");
  const target = column("target_power_w");
  const planP = plan ? plan.power_w : [];
  drawChart($("c-power"), {
    x: courseRange(), y: extent([power, target, planP]), xLabel: "distance from the start, m", yLabel: "W",
    spans: trapSpan(),
    series: [
      { kind: "line", xs: planD, ys: planP, color: "#8a96a0", width: 1.5, dash: [6, 4] },
      { kind: "line", xs: dist, ys: target, color: "#c98a10", width: 2 },
      { kind: "line", xs: dist, ys: power, color: "#0c5c63", width: 1.5 },
    ],
  });
  // the estimates against time, with their ±2σ band
  const t = column("t_s");
  const t0 = t.find(isNum);
  const tr = t.map((v) => (isNum(v) ? v - t0 : null));
  for (const [id, est, sd, prior, label] of [["c-cda", "cda_m2", "cda_sd_m2", S.ride.prior_cda_m2, "m²"],
    ["c-crr", "crr", "crr_sd", S.ride.prior_crr, "Crr"]]) {
    const e = column(est), s = column(sd);
    const lo = e.map((v, i) => (isNum(v) && isNum(s[i]) ? v - 2 * s[i] : null));
    const hi = e.map((v, i) => (isNum(v) && isNum(s[i]) ? v + 2 * s[i] : null));
    const xr = tr.filter(isNum);
    const x = xr.length > 1 ? [0, Math.max(...xr) * 1.02 || 1] : null;
    const priorLine = isNum(prior) && x ? { kind: "line", xs: x, ys: [prior, prior], color: "#b3122e", width: 1.2, dash: [3, 3] } : null;
    drawChart($(id), {
      x, y: extent([e, lo, hi, isNum(prior) ? [prior] : []]), xLabel: "time since the first value, s", yLabel: label,
      series: [
        { kind: "band", xs: tr, lo, hi, color: "rgba(12, 92, 99, 0.18)" },
        ...(priorLine ? [priorLine] : []),
        { kind: "line", xs: tr, ys: e, color: "#0c5c63", width: 2 },
      ],
    });
  }
}

// ------------------------------------------------------------------- driving
function draw() {
  S.drawPending = false;
  renderNumbers();
  renderSensors();
  renderLog();
  drawCharts();
}

function scheduleDraw() {
  if (S.drawPending) return;
  S.drawPending = true;
  requestAnimationFrame(draw);
}

function watchQuiet() {
  const age = S.lastMessageMs ? (Date.now() - S.lastMessageMs) / 1000 : null;
  const quiet = age !== null && age > QUIET_AFTER_S;
  if (quiet && S.link === "live") { setLink("quiet"); scheduleDraw(); }
  $("nodata").hidden = !(quiet || (S.link === "lost" && S.lastMessageMs));
  setText("nodata-s", age === null ? "–" : age.toFixed(0));
}

function start() {
  fetch("/api/ride", { cache: "no-store" })
    .then((r) => r.json())
    .then((ride) => {
      S.ride = ride || {};
      setText("ride-vehicle", S.ride.vehicle || "vehicle");
      setText("ride-course", S.ride.course || "course");
      scheduleDraw();
    })
    .catch(() => {});
  connect();
  setInterval(watchQuiet, 1000);
  window.addEventListener("resize", scheduleDraw);
}

start();
