// The live view polls live.json a few times a second and draws the newest frame.
// Colours match the daemon's PNG snapshots (daemon/liveview.go).
"use strict";

const pollMs = 250;
const background = "rgb(24,26,31)", cell = "rgb(46,50,60)", arrowColour = "rgb(120,224,168)";
const negative = [38, 92, 204], neutral = [236, 236, 232], positive = [206, 52, 40];

let geometry = null;
const history = []; // [wavefront rms m, Strehl estimate]

function diverging(t) {
  t = Math.max(-1, Math.min(1, t));
  const b = t < 0 ? negative : positive;
  t = Math.abs(t);
  const c = neutral.map((a, i) => Math.round(a + t * (b[i] - a)));
  return `rgb(${c[0]},${c[1]},${c[2]})`;
}

// peak returns max |v|, 0 for an all-zero (flat) vector.
function peak(v) {
  let p = 0;
  for (const x of v) p = Math.max(p, Math.abs(x));
  return p;
}

// cellBox returns the canvas rectangle of grid cell index of an n-grid, row 0 at the bottom.
function cellBox(canvas, n, index, gap) {
  const s = canvas.width / n, r = Math.floor(index / n), c = index % n;
  return [c * s + gap, (n - 1 - r) * s + gap, s - 2 * gap, s - 2 * gap];
}

function drawCommands(cmd) {
  const cv = document.getElementById("commands"), g = cv.getContext("2d"), n = geometry.actuators_across;
  g.fillStyle = background;
  g.fillRect(0, 0, cv.width, cv.height);
  const scale = peak(cmd) || 1;
  geometry.actuator_cells.forEach((c, i) => {
    g.fillStyle = diverging(cmd[i] / scale);
    g.fillRect(...cellBox(cv, n, c, cv.width / n >= 8 ? 1 : 0));
  });
  show("cmdscale", peak(cmd) ? `(blue −${(scale * 1e9).toFixed(1)} nm … red +${(scale * 1e9).toFixed(1)} nm)` : "(flat)");
}

function drawSlopes(slopes) {
  const cv = document.getElementById("slopes"), g = cv.getContext("2d"), n = geometry.subapertures;
  g.fillStyle = background;
  g.fillRect(0, 0, cv.width, cv.height);
  const scale = peak(slopes) || 1, s = cv.width / n;
  g.strokeStyle = arrowColour;
  g.lineWidth = 1;
  geometry.valid_subapertures.forEach((c, k) => {
    const [x, y, w, h] = cellBox(cv, n, c, 1);
    g.fillStyle = cell;
    g.fillRect(x, y, w, h);
    const cx = x + w / 2, cy = y + h / 2;
    const dx = slopes[2 * k] / scale * 0.45 * s, dy = -slopes[2 * k + 1] / scale * 0.45 * s;
    g.beginPath();
    g.moveTo(cx, cy);
    g.lineTo(cx + dx, cy + dy);
    const len = Math.hypot(dx, dy);
    if (len >= 3) {
      const a = Math.atan2(dy, dx), head = Math.max(2, 0.3 * len);
      for (const sgn of [1, -1]) {
        g.moveTo(cx + dx, cy + dy);
        g.lineTo(cx + dx - head * Math.cos(a + sgn * Math.PI / 6), cy + dy - head * Math.sin(a + sgn * Math.PI / 6));
      }
    }
    g.stroke();
  });
  show("slopescale", `(longest arrow ${(peak(slopes) * 1e6).toFixed(2)} µrad)`);
}

function drawHistory() {
  const cv = document.getElementById("history"), g = cv.getContext("2d");
  g.fillStyle = background;
  g.fillRect(0, 0, cv.width, cv.height);
  if (history.length < 2) return;
  const top = Math.max(...history.map(h => h[0])) || 1;
  const plot = (sel, max, colour) => {
    g.strokeStyle = colour;
    g.beginPath();
    history.forEach((h, i) => {
      const x = i * cv.width / (history.length - 1), y = cv.height - 4 - sel(h) / max * (cv.height - 8);
      i ? g.lineTo(x, y) : g.moveTo(x, y);
    });
    g.stroke();
  };
  plot(h => h[0], top, "rgb(230,192,96)");
  plot(h => h[1], 1, arrowColour);
}

function show(id, text, cls) {
  const el = document.getElementById(id);
  el.textContent = text;
  if (cls !== undefined) el.className = cls;
}

let psfBusy = false;
function refreshPSF(enabled) {
  const img = document.getElementById("psf");
  if (!enabled) {
    show("psfnote", "— no bench configured");
    return;
  }
  if (psfBusy) return;
  psfBusy = true;
  const next = new Image();
  next.onload = async () => {
    img.src = next.src;
    psfBusy = false;
    try {
      const r = await fetch("snapshot/contrast.json", { cache: "no-store" });
      const c = await r.json();
      show("contrast", c.separations_lambda_over_d.map((s, i) => `${s} λ/D ${c.contrast[i].toExponential(1)}`).join(", ") || "—");
    } catch (e) {
      show("contrast", "—");
    }
    show("psfnote", "");
  };
  next.onerror = () => { show("psfnote", "— bench not reachable"); psfBusy = false; };
  next.src = "snapshot/psf.png?t=" + Date.now();
}

async function poll() {
  try {
    const r = await fetch("live.json" + (geometry ? "?geometry=" + geometry.id : ""), { cache: "no-store" });
    if (!r.ok) throw new Error(await r.text());
    const f = await r.json();
    if (f.geometry) geometry = f.geometry;
    const s = f.sample;
    drawCommands(s.commands);
    drawSlopes(s.slopes);
    history.push([s.residual_wavefront_rms_m, s.strehl_estimate]);
    if (history.length > 240) history.shift();
    drawHistory();
    show("state", s.state, s.state);
    show("frame", String(s.frame));
    show("sloperms", `${(s.residual_slope_rms_rad * 1e6).toFixed(3)} µrad`);
    show("wfrms", `${(s.residual_wavefront_rms_m * 1e9).toFixed(1)} nm`);
    show("strehl", `${s.strehl_estimate.toFixed(3)} at ${(s.science_wavelength_m * 1e6).toFixed(2)} µm`);
    show("saturated", String(s.saturated_actuators));
    show("rtc", `${(s.rtc_latency_s * 1e6).toFixed(1)} µs`);
    show("status", `${geometry.subapertures}×${geometry.subapertures} subapertures, ${geometry.actuator_cells.length} actuators, ${geometry.pupil_diameter_m} m pupil`);
    refreshPSF(f.psf);
  } catch (e) {
    show("status", "waiting for the loop daemon: " + e.message);
  }
  setTimeout(poll, pollMs);
}

poll();
