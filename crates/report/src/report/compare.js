// fringeflow comparison page: volumes of one capture (two outputs, or every
// setting of a dispersion sweep); any two of them on the same frame under
// one window/level, side by side or blinking, and their difference. Ours,
// inline.
"use strict";
(async function () {
  const D = JSON.parse(document.getElementById("ff-data").textContent);
  const $ = (id) => document.getElementById(id);
  const W = D.alines, H = D.depth, N = D.frames, Q = D.max_q + 1;
  const b64 = (s) => { const t = atob(s); const u = new Uint8Array(t.length); for (let i = 0; i < t.length; i++) u[i] = t.charCodeAt(i); return u; };
  const inflate = async (u) => new Uint8Array(await new Response(new Blob([u]).stream().pipeThrough(new DecompressionStream("deflate"))).arrayBuffer());
  const unpack = (b) => { const n = b.length / 2, q = new Uint16Array(n); for (let i = 0; i < n; i++) q[i] = (b[i] << 8) | b[n + i]; return q; };
  const vols = await Promise.all(D.sides.map((side) => Promise.all(side.frames.map(async (s) => unpack(await inflate(b64(s)))))));
  const dbOf = (q) => D.base_db + q * D.step_db;
  const st = { frame: 0, black: D.black, range: D.range, diff: 20, mode: "side", shown: 0, pick: D.pick.slice() };
  const label = (k) => `${k === 0 ? "A" : "B"}: ${D.sides[st.pick[k]].name}`;
  let cssW, cssH;
  if (D.aline_spacing_um) { const wu = W * D.aline_spacing_um, hu = H * D.depth_spacing_um, s = Math.min(460 / wu, 520 / hu); cssW = wu * s; cssH = hu * s; }
  else { cssW = Math.min(460, Math.max(300, W)); cssH = Math.min(520, Math.max(300, H)); }
  for (const id of ["canvas-a", "canvas-b", "canvas-blink", "canvas-diff"]) { const c = $(id); c.width = W; c.height = H; c.style.width = cssW + "px"; c.style.height = cssH + "px"; }
  function grey(cid, q) {
    const c = $(cid).getContext("2d"), img = c.createImageData(W, H), p = img.data, t = new Uint8ClampedArray(Q);
    for (let k = 0; k < Q; k++) t[k] = Math.max(0, Math.min(255, Math.round((dbOf(k) - st.black) * 255 / st.range)));
    for (let i = 0; i < W * H; i++) { const g = t[Math.min(q[i], Q - 1)]; p[4 * i] = g; p[4 * i + 1] = g; p[4 * i + 2] = g; p[4 * i + 3] = 255; }
    c.putImageData(img, 0, 0);
  }
  function difference() {
    const a = vols[st.pick[0]][st.frame], b = vols[st.pick[1]][st.frame];
    const c = $("canvas-diff").getContext("2d"), img = c.createImageData(W, H), p = img.data;
    for (let i = 0; i < W * H; i++) {
      const t = Math.max(-1, Math.min(1, (a[i] - b[i]) * D.step_db / st.diff));
      const fade = Math.round(255 * (1 - Math.abs(t)));
      p[4 * i] = t >= 0 ? 255 : fade; p[4 * i + 1] = fade; p[4 * i + 2] = t <= 0 ? 255 : fade; p[4 * i + 3] = 255;
    }
    c.putImageData(img, 0, 0);
  }
  const fig = (k) => { const f = D.sides[st.pick[k]].figures[st.frame]; return `entropy ${f.entropy.toFixed(4)} nats (lower is sharper); FWHM of the brightest interface ${f.fwhm_um === null ? "—" : f.fwhm_um.toFixed(2) + " µm"}`; };
  function draw() {
    $("frame-out").textContent = `${st.frame} of ${N - 1}`;
    $("black-out").textContent = st.black.toFixed(2); $("range-out").textContent = st.range.toFixed(2); $("diff-out").textContent = st.diff.toFixed(1);
    $("name-a").textContent = label(0); $("name-b").textContent = label(1);
    grey("canvas-a", vols[st.pick[0]][st.frame]); grey("canvas-b", vols[st.pick[1]][st.frame]);
    $("fig-a").textContent = fig(0); $("fig-b").textContent = fig(1);
    grey("canvas-blink", vols[st.pick[st.shown]][st.frame]);
    $("canvas-blink").dataset.side = st.shown === 0 ? "A" : "B";
    $("blink-name").textContent = label(st.shown); $("blink-fig").textContent = fig(st.shown);
    $("side").hidden = st.mode !== "side"; $("blink").hidden = st.mode !== "blink";
    difference();
    for (const row of document.querySelectorAll("tr[data-side]")) {
      row.classList.toggle("picked-a", +row.dataset.side === st.pick[0]); row.classList.toggle("picked-b", +row.dataset.side === st.pick[1]);
    }
  }
  const fr = $("frame"), bl = $("black"), rg = $("range"), dr = $("diff-range");
  fr.max = N - 1; bl.min = D.base_db; bl.max = dbOf(D.max_q); rg.min = 1; rg.max = Math.max(60, Math.ceil(dbOf(D.max_q) - D.base_db));
  bl.value = st.black; rg.value = st.range; dr.value = st.diff;
  fr.addEventListener("input", () => { st.frame = +fr.value; draw(); });
  bl.addEventListener("input", () => { st.black = +bl.value; draw(); });
  rg.addEventListener("input", () => { st.range = +rg.value; draw(); });
  dr.addEventListener("input", () => { st.diff = +dr.value; draw(); });
  $("mode-side").addEventListener("click", () => { st.mode = "side"; draw(); });
  $("mode-blink").addEventListener("click", () => { st.mode = "blink"; draw(); });
  for (const [k, id] of [[0, "pick-a"], [1, "pick-b"]]) {
    const sel = $(id);
    if (!sel) continue;
    D.sides.forEach((side, i) => { const o = document.createElement("option"); o.value = i; o.textContent = side.name; sel.appendChild(o); });
    sel.value = st.pick[k];
    sel.addEventListener("change", () => { st.pick[k] = +sel.value; draw(); });
  }
  // A row of a settings table (tr data-side="i"): click shows it as B, shift-click as A.
  for (const row of document.querySelectorAll("tr[data-side]")) {
    row.style.cursor = "pointer";
    row.addEventListener("click", (e) => { const k = e.shiftKey ? 0 : 1; st.pick[k] = +row.dataset.side; const sel = $(k === 0 ? "pick-a" : "pick-b"); if (sel) sel.value = st.pick[k]; draw(); });
  }
  const toggle = () => { st.shown = 1 - st.shown; draw(); };
  $("toggle").addEventListener("click", toggle);
  document.addEventListener("keydown", (e) => {
    if (e.key === "b") { toggle(); e.preventDefault(); }
    if (e.key === "ArrowRight" && st.frame < N - 1) { st.frame++; fr.value = st.frame; draw(); }
    if (e.key === "ArrowLeft" && st.frame > 0) { st.frame--; fr.value = st.frame; draw(); }
  });
  draw();
  window.fringeflowCompare = { st, vols, data: D };
  document.body.dataset.ready = "1";
})().catch((e) => { document.body.dataset.ready = "error"; console.error(e); const p = document.createElement("p"); p.className = "warnings"; p.textContent = "The comparison could not start: " + e; document.body.prepend(p); });
