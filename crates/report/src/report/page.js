// fringeflow report: the frame browser, window/level, geometry, profiles
// and en face view of one output, from the data embedded in this page
// (16-bit steps of 0.1 dB in two byte planes, zlib, base64). No network,
// no libraries.
"use strict";
(async function () {
  const D = JSON.parse(document.getElementById("ff-data").textContent);
  const $ = (id) => document.getElementById(id);
  // viridis (matplotlib, CC0): 32 stops, interpolated linearly.
  const VIRIDIS = [{{VIRIDIS}}];
  const W = D.alines, H = D.depth, N = D.data.length;
  const b64 = (s) => { const t = atob(s); const u = new Uint8Array(t.length); for (let i = 0; i < t.length; i++) u[i] = t.charCodeAt(i); return u; };
  const inflate = async (u) => new Uint8Array(await new Response(new Blob([u]).stream().pipeThrough(new DecompressionStream("deflate"))).arrayBuffer());
  const planes = await Promise.all(D.data.map((s) => inflate(b64(s))));
  const frames = planes.map((b) => { const n = b.length / 2, q = new Uint16Array(n); for (let i = 0; i < n; i++) q[i] = (b[i] << 8) | b[n + i]; return q; });
  const Q = D.max_q + 1;
  const dbOf = (q) => D.base_db + q * D.step_db;
  const depthOf = (z) => D.first_depth_um + z * D.depth_spacing_um;
  const fmt = (v, d) => (Math.abs(v) < 1e-9 ? 0 : v).toFixed(d);
  const state = { frame: 0, black: D.levels[0][0], range: D.levels[0][1] - D.levels[0][0], cmap: "grey", aline: null };

  // Geometry: CSS size from the depth spacing and, when known, the lateral step.
  const MAXW = 900, MAXH = 680;
  const heightUm = H * D.depth_spacing_um;
  let cssW, cssH, pxPerUmDepth, pxPerUmLateral = null;
  if (D.aline_spacing_um) {
    const widthUm = W * D.aline_spacing_um;
    const s = Math.min(MAXW / widthUm, MAXH / heightUm);
    cssW = widthUm * s; cssH = heightUm * s; pxPerUmDepth = s; pxPerUmLateral = s;
    $("geometry-note").textContent = `True aspect: ${fmt(D.depth_spacing_um, 3)} µm per depth pixel (in air), ${fmt(D.aline_spacing_um, 3)} µm per A-line.`;
  } else {
    cssH = Math.min(MAXH, Math.max(300, H)); pxPerUmDepth = cssH / heightUm;
    cssW = Math.min(MAXW, Math.max(400, W));
    $("geometry-note").textContent = `Depth to scale (${fmt(D.depth_spacing_um, 3)} µm per pixel, in air); lateral scale unknown: A-line index across, so the aspect is not physical. Set [input] aline_spacing_um to draw it to scale.`;
  }
  const canvas = $("bscan"), ctx = canvas.getContext("2d");
  canvas.width = W; canvas.height = H;
  canvas.style.width = cssW + "px"; canvas.style.height = cssH + "px";
  const LEFT = 62, BOTTOM = 40;
  const stage = $("stage");
  stage.style.paddingLeft = LEFT + "px"; stage.style.paddingBottom = BOTTOM + "px";

  const niceStep = (span, n) => { const raw = span / n; const m = Math.pow(10, Math.floor(Math.log10(raw))); for (const f of [1, 2, 5, 10]) if (f * m >= raw) return f * m; return 10 * m; };
  function drawAxes() {
    const svg = $("axes");
    svg.setAttribute("width", LEFT + cssW); svg.setAttribute("height", cssH + BOTTOM);
    let s = "";
    const z0 = D.first_depth_um, z1 = depthOf(H);
    const dz = niceStep(z1 - z0, 8);
    for (let z = Math.ceil(z0 / dz) * dz; z <= z1 + 1e-9; z += dz) {
      const y = (z - z0) * pxPerUmDepth;
      s += `<line x1="${LEFT - 6}" x2="${LEFT}" y1="${y}" y2="${y}"/><text x="${LEFT - 9}" y="${y + 4}" text-anchor="end">${+z.toFixed(3)}</text>`;
    }
    s += `<text transform="translate(12,${cssH / 2}) rotate(-90)" text-anchor="middle">depth (µm, in air)</text>`;
    if (pxPerUmLateral) {
      const widthMm = W * D.aline_spacing_um / 1000;
      const dx = niceStep(widthMm, 6);
      for (let x = 0; x <= widthMm + 1e-9; x += dx) {
        const px = LEFT + x * 1000 * pxPerUmLateral;
        s += `<line x1="${px}" x2="${px}" y1="${cssH}" y2="${cssH + 6}"/><text x="${px}" y="${cssH + 18}" text-anchor="middle">${+x.toFixed(3)}</text>`;
      }
      s += `<text x="${LEFT + cssW / 2}" y="${cssH + 34}" text-anchor="middle">lateral position (mm)</text>`;
    } else {
      const da = niceStep(W, 6);
      for (let a = 0; a <= W; a += da) {
        const px = LEFT + (a / W) * cssW;
        s += `<line x1="${px}" x2="${px}" y1="${cssH}" y2="${cssH + 6}"/><text x="${px}" y="${cssH + 18}" text-anchor="middle">${a}</text>`;
      }
      s += `<text x="${LEFT + cssW / 2}" y="${cssH + 34}" text-anchor="middle">A-line index (lateral scale unknown)</text>`;
    }
    s += `<path d="M${LEFT},0 V${cssH} H${LEFT + cssW}"/>`;
    svg.innerHTML = s;
    // Depth scale bar: about a quarter of the depth shown, in the image's lower left.
    const bar = niceStep(heightUm / 5, 1);
    const barPx = bar * pxPerUmDepth;
    const sb = $("scale-bar"), sl = $("scale-label");
    sb.style.left = (LEFT + 10) + "px"; sb.style.top = (cssH - 10 - barPx) + "px"; sb.style.height = barPx + "px";
    sb.dataset.um = bar;
    sl.style.left = (LEFT + 18) + "px"; sl.style.top = (cssH - 10 - barPx / 2 - 8) + "px";
    sl.textContent = `${+bar.toFixed(3)} µm`;
  }

  function colour(g) {
    if (state.cmap === "grey") return [g, g, g];
    const t = (g / 255) * (VIRIDIS.length / 3 - 1), i = Math.min(Math.floor(t), VIRIDIS.length / 3 - 2), f = t - i;
    return [0, 1, 2].map((c) => Math.round(VIRIDIS[3 * i + c] * (1 - f) + VIRIDIS[3 * i + 3 + c] * f));
  }
  // grey = round((dB − black)·255/range), clamped to 0–255: the mapping the
  // B-scan PNGs use (log.json black_db/white_db), here on the embedded steps.
  function table() {
    const t = new Uint8ClampedArray(Q * 3);
    for (let q = 0; q < Q; q++) {
      const g = Math.max(0, Math.min(255, Math.round((dbOf(q) - state.black) * 255 / state.range)));
      t.set(colour(g), 3 * q);
    }
    return t;
  }
  function paint(target, values, w, h) {
    const c = target.getContext("2d"), img = c.createImageData(w, h), L = table(), p = img.data;
    for (let i = 0; i < w * h; i++) { const q = 3 * Math.min(values[i], Q - 1); p[4 * i] = L[q]; p[4 * i + 1] = L[q + 1]; p[4 * i + 2] = L[q + 2]; p[4 * i + 3] = 255; }
    c.putImageData(img, 0, 0);
  }
  function drawColourbar() {
    const cb = $("colourbar"), c = cb.getContext("2d");
    for (let y = 0; y < 256; y++) { const [r, g, b] = colour(255 - y); c.fillStyle = `rgb(${r},${g},${b})`; c.fillRect(0, y, 18, 1); }
    $("cb-top").textContent = `${fmt(state.black + state.range, 1)} dB`;
    $("cb-mid").textContent = `${fmt(state.black + state.range / 2, 1)} dB`;
    $("cb-bottom").textContent = `${fmt(state.black, 1)} dB`;
  }
  function draw() {
    paint(canvas, frames[state.frame], W, H);
    drawColourbar();
    $("frame-out").textContent = `${state.frame + 1} of ${N} (frame ${D.frames_shown[state.frame]})`;
    $("black-out").textContent = fmt(state.black, 2);
    $("range-out").textContent = fmt(state.range, 2);
    canvas.dataset.frame = D.frames_shown[state.frame];
    if (state.aline !== null) profile(state.aline);
    if (N > 1) enFace();
  }

  // Controls.
  const fr = $("frame"), bl = $("black"), rg = $("range");
  fr.max = N - 1;
  const top = dbOf(D.max_q);
  bl.min = D.base_db; bl.max = top; rg.min = 1; rg.max = Math.max(60, Math.ceil(top - D.base_db));
  const sync = () => { fr.value = state.frame; bl.value = state.black; rg.value = state.range; };
  fr.addEventListener("input", () => { state.frame = +fr.value; draw(); });
  bl.addEventListener("input", () => { state.black = +bl.value; draw(); });
  rg.addEventListener("input", () => { state.range = +rg.value; draw(); });
  $("cmap").addEventListener("change", (e) => { state.cmap = e.target.value; draw(); });
  $("logged").addEventListener("click", () => { const [b, w] = D.levels[state.frame]; state.black = b; state.range = w - b; sync(); draw(); });
  document.addEventListener("keydown", (e) => {
    if (e.target.tagName === "INPUT" && e.target.type !== "range") return;
    if (e.key === "ArrowRight" && state.frame < N - 1) { state.frame++; sync(); draw(); e.preventDefault(); }
    if (e.key === "ArrowLeft" && state.frame > 0) { state.frame--; sync(); draw(); e.preventDefault(); }
  });
  $("frames-note").textContent = D.frames_shown.length === D.frames_total
    ? `All ${D.frames_total} stored frames are embedded.`
    : `${D.frames_shown.length} of ${D.frames_total} stored frames embedded (every ${D.frame_step}th); the rest are in volume.h5. Set [output] report_frame_step = 1 to embed all.`;
  $("data-note").textContent = `Embedded data: dB in ${D.step_db} dB steps from ${fmt(D.base_db, 2)} dB (the noise floor; lower values show as it) to ${fmt(top, 2)} dB.`;

  // Hover and click.
  const at = (e) => { const r = canvas.getBoundingClientRect(); return [Math.min(W - 1, Math.max(0, Math.floor((e.clientX - r.left) / r.width * W))), Math.min(H - 1, Math.max(0, Math.floor((e.clientY - r.top) / r.height * H)))]; };
  canvas.addEventListener("mousemove", (e) => {
    const [a, z] = at(e), q = frames[state.frame][z * W + a];
    const lateral = D.aline_spacing_um ? `, ${fmt(a * D.aline_spacing_um / 1000, 3)} mm` : "";
    $("readout").textContent = `A-line ${a}${lateral} · depth ${fmt(depthOf(z), 1)} µm · ${q === 0 ? "≤ " : ""}${fmt(dbOf(q), 2)} dB`;
  });
  canvas.addEventListener("click", (e) => { state.aline = at(e)[0]; profile(state.aline); });

  function profile(a) {
    const f = frames[state.frame], v = new Array(H);
    let peak = 0;
    for (let z = 0; z < H; z++) { v[z] = dbOf(f[z * W + a]); if (v[z] > v[peak]) peak = z; }
    const PW = 900, PH = 260, L = 56, B = 36, T = 24;
    const lo = D.base_db, hi = dbOf(D.max_q), z0 = D.first_depth_um, z1 = depthOf(H - 1);
    const X = (z) => L + (depthOf(z) - z0) / (z1 - z0 || 1) * (PW - L - 10), Y = (d) => T + (hi - d) / (hi - lo) * (PH - T - B);
    let s = `<svg width="${PW}" height="${PH}" class="axis" id="profile-plot"><path style="stroke:#0072b2" d="M${v.map((d, z) => `${X(z).toFixed(1)},${Y(d).toFixed(1)}`).join(" L")}"/>`;
    const dd = niceStep(hi - lo, 6);
    for (let d = Math.ceil(lo / dd) * dd; d <= hi; d += dd) s += `<line x1="${L - 5}" x2="${L}" y1="${Y(d)}" y2="${Y(d)}"/><text x="${L - 8}" y="${Y(d) + 4}" text-anchor="end">${+d.toFixed(2)}</text>`;
    const dz = niceStep(z1 - z0, 8);
    for (let z = Math.ceil(z0 / dz) * dz; z <= z1; z += dz) { const x = L + (z - z0) / (z1 - z0) * (PW - L - 10); s += `<line x1="${x}" x2="${x}" y1="${PH - B}" y2="${PH - B + 5}"/><text x="${x}" y="${PH - B + 17}" text-anchor="middle">${+z.toFixed(3)}</text>`; }
    s += `<path d="M${L},${T} V${PH - B} H${PW - 10}"/><text x="${(PW + L) / 2}" y="${PH - 4}" text-anchor="middle">depth (µm, in air)</text><text transform="translate(12,${(PH - B + T) / 2}) rotate(-90)" text-anchor="middle">dB</text>`;
    s += `<circle cx="${X(peak)}" cy="${Y(v[peak])}" r="4" style="fill:none;stroke:#d55e00;stroke-width:2"/></svg>`;
    $("profile").innerHTML = `<h2>Depth profile</h2><p id="profile-peak" data-aline="${a}" data-frame="${D.frames_shown[state.frame]}" data-peak-um="${depthOf(peak)}">A-line ${a} of frame ${D.frames_shown[state.frame]}: peak ${fmt(v[peak], 2)} dB at ${fmt(depthOf(peak), 2)} µm</p>` + s;
  }

  // En face: mean dB over a depth slab of every embedded frame.
  function enFace() {
    const t = +$("slab-top").value, b = +$("slab-bottom").value;
    const za = Math.max(0, Math.round((Math.min(t, b) - D.first_depth_um) / D.depth_spacing_um)), zb = Math.min(H - 1, Math.round((Math.max(t, b) - D.first_depth_um) / D.depth_spacing_um));
    $("slab-top-out").textContent = fmt(depthOf(za), 1); $("slab-bottom-out").textContent = fmt(depthOf(zb), 1);
    const out = new Uint16Array(N * W);
    for (let k = 0; k < N; k++) for (let a = 0; a < W; a++) {
      let sum = 0; for (let z = za; z <= zb; z++) sum += frames[k][z * W + a];
      out[k * W + a] = Math.round(sum / (zb - za + 1));
    }
    paint($("en-face"), out, W, N);
  }
  if (N > 1) {
    $("en-face-section").hidden = false;
    const ef = $("en-face"); ef.width = W; ef.height = N;
    const rowPx = D.position_spacing_um && pxPerUmLateral ? D.position_spacing_um * D.frame_step * pxPerUmLateral : Math.max(4, Math.min(24, 300 / N));
    ef.style.width = cssW + "px"; ef.style.height = (rowPx * N) + "px";
    $("en-face-note").textContent = `Mean of the embedded dB steps over the slab, one row per embedded frame${D.position_spacing_um && pxPerUmLateral ? " (to scale)" : " (rows stretched; slow-axis scale unknown)"}.`;
    for (const id of ["slab-top", "slab-bottom"]) { const el = $(id); el.min = D.first_depth_um; el.max = depthOf(H - 1); el.step = D.depth_spacing_um; el.addEventListener("input", enFace); }
    $("slab-top").value = D.slab_um[0]; $("slab-bottom").value = D.slab_um[1];
  }

  drawAxes(); sync(); draw();
  window.fringeflowReport = { state, frames, data: D };
  document.body.dataset.ready = "1";
})().catch((e) => { document.body.dataset.ready = "error"; const p = document.createElement("p"); p.className = "warnings"; p.textContent = "The viewer could not start: " + e; document.body.prepend(p); console.error(e); });
