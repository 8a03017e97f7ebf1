// amploop's what-if page: the compensation map of the picked corner (its phase margin over
// Cc and Rc), where every corner meets the target (of both loops, for a fully-differential
// amplifier), and the run's points on it.
AMP.mapView = function (ui) {
  const { DATA, MAPPED, FD, engineering, evaluate, logAxes, branchResistance, meetsLoop, present } = AMP;
  const { state, ROLES, SECOND_LABEL, SECOND_UNIT, secLog, ccLo, ccHi, secLo, secHi } = ui;
  const $ = (id) => document.getElementById(id);
  const CM_COLOUR = DATA.style.common_mode;
  const mapCanvas = $("map"), MP = { l: 58, r: 12, t: 20, b: 34 }, NX = 48, NY = 36;
  const mapImage = document.createElement("canvas");
  mapImage.width = mapCanvas.width; mapImage.height = mapCanvas.height;
  const secMin = secHi > secLo ? secLo : (secLo > 0 ? secLo / 2 : 0), secMax = secHi > secLo ? secHi : Math.max(2 * secHi, 1);
  const ccAt = (i) => ccLo * (ccHi / ccLo) ** (i / (NX - 1));
  const secAt = (j) => (secLog ? secMin * (secMax / secMin) ** (j / (NY - 1)) : secMin + (secMax - secMin) * j / (NY - 1));
  const mx = (cc) => MP.l + (mapCanvas.width - MP.l - MP.r) * Math.log(cc / ccLo) / Math.log(ccHi / ccLo);
  const my = (v) => mapCanvas.height - MP.b - (mapCanvas.height - MP.t - MP.b)
    * (secLog ? Math.log(v / secMin) / Math.log(secMax / secMin) : (v - secMin) / (secMax - secMin));

  // margins on a grid as amploop.analysis.margins.grid_margins reads them (linear in log f)
  function gridFigures(loop, cc, second, step, scratch) {
    const n = Math.ceil(loop.grid.n / step);
    evaluate(loop, cc, branchResistance(loop, second), step, scratch.re, scratch.im);
    logAxes(scratch.re, scratch.im, n, scratch.m, scratch.p);
    const x = scratch.x, m = scratch.m, p = scratch.p;
    let pm = Infinity, gm = Infinity;
    for (let k = 0; k + 1 < n; k++) {
      if ((m[k] >= 0) !== (m[k + 1] >= 0)) {
        const t = m[k] / (m[k] - m[k + 1]);
        pm = Math.min(pm, 180 + p[k] + t * (p[k + 1] - p[k]));
      }
      const q0 = (p[k] + 180) / 360, q1 = (p[k + 1] + 180) / 360, k0 = Math.floor(q0), k1 = Math.floor(q1);
      if (k0 !== k1) {
        const t = (Math.max(k0, k1) - q0) / (q1 - q0);
        gm = Math.min(gm, -20 / Math.LN10 * (m[k] + t * (m[k + 1] - m[k])));
      }
    }
    return [pm === Infinity ? NaN : pm, gm];
  }
  function scratchFor(loop, step) {
    const n = loop.grid.n, x = new Float64Array(Math.ceil(n / step));
    for (let k = 0, j = 0; k < n; k += step, j++) x[j] = loop.grid.x[k];
    return { x, re: new Float64Array(n), im: new Float64Array(n), m: new Float64Array(n), p: new Float64Array(n) };
  }
  // the loops held to a target: [loop of a corner, "differential" | "common_mode"]
  const held = (corner) => (corner.cm ? [[corner, "differential"], [corner.cm, "common_mode"]] : [[corner, "differential"]]);

  let feasible = null;  // every corner meets the target in every loop, on the grid (computed once)
  function computeFeasible() {
    if (!present(DATA.target.phase_margin_deg)) return;
    const step = MAPPED.length * (FD ? 2 : 1) <= 10 ? 2 : 4;
    feasible = new Uint8Array(NX * NY).fill(1);
    for (const corner of MAPPED) {
      for (const [loop, which] of held(corner)) {
        const scratch = scratchFor(loop, step);
        for (let i = 0; i < NX; i++) {
          for (let j = 0; j < NY; j++) {
            if (!feasible[i * NY + j]) continue;
            const [pm, gm] = gridFigures(loop, ccAt(i), secAt(j), step, scratch);
            const figures = { phase_margin_deg: Number.isNaN(pm) ? null : pm, gain_margin_db: gm === Infinity ? null : gm };
            if (!meetsLoop(figures, which)) feasible[i * NY + j] = 0;
          }
        }
      }
    }
  }
  function pmColour(pm) {
    if (Number.isNaN(pm)) return "rgb(235,235,235)";
    const t = Math.min(Math.max(pm / 90, 0), 1);
    return "rgb(" + Math.round(60 + 180 * t) + "," + Math.round(70 + 170 * t) + "," + Math.round(140 + 105 * t) + ")";
  }
  function pmGridOf(loop) {
    const scratch = scratchFor(loop, 2), grid = new Float64Array(NX * NY);
    for (let i = 0; i < NX; i++) for (let j = 0; j < NY; j++) grid[i * NY + j] = gridFigures(loop, ccAt(i), secAt(j), 2, scratch)[0];
    return grid;
  }
  function contour(ctx, pmGrid, level, colour) {  // where the phase margin crosses level
    if (!present(level)) return;
    const cellW = (mapImage.width - MP.l - MP.r) / (NX - 1), cellH = (mapImage.height - MP.t - MP.b) / (NY - 1);
    ctx.strokeStyle = colour; ctx.lineWidth = 1.2;
    for (let i = 0; i < NX; i++) {
      for (let j = 0; j < NY; j++) {
        const here = pmGrid[i * NY + j] >= level;
        if (i + 1 < NX && here !== (pmGrid[(i + 1) * NY + j] >= level)) {
          const x = (mx(ccAt(i)) + mx(ccAt(i + 1))) / 2;
          ctx.beginPath(); ctx.moveTo(x, my(secAt(j)) - cellH / 2); ctx.lineTo(x, my(secAt(j)) + cellH / 2); ctx.stroke();
        }
        if (j + 1 < NY && here !== (pmGrid[i * NY + j + 1] >= level)) {
          const y = (my(secAt(j)) + my(secAt(j + 1))) / 2;
          ctx.beginPath(); ctx.moveTo(mx(ccAt(i)) - cellW / 2, y); ctx.lineTo(mx(ccAt(i)) + cellW / 2, y); ctx.stroke();
        }
      }
    }
  }
  function buildMapImage() {
    const ctx = mapImage.getContext("2d"), W = mapImage.width, H = mapImage.height;
    ctx.clearRect(0, 0, W, H);
    const corner = MAPPED.find((c) => c.name === state.picked);
    if (!corner) return;
    const pmGrid = pmGridOf(corner);
    const cellW = (W - MP.l - MP.r) / (NX - 1), cellH = (H - MP.t - MP.b) / (NY - 1);
    for (let i = 0; i < NX; i++) {
      for (let j = 0; j < NY; j++) {
        const x = mx(ccAt(i)) - cellW / 2, y = my(secAt(j)) - cellH / 2;
        ctx.fillStyle = pmColour(pmGrid[i * NY + j]); ctx.fillRect(x, y, cellW + 0.6, cellH + 0.6);
        if (feasible && feasible[i * NY + j]) { ctx.fillStyle = "rgba(56,161,105,0.55)"; ctx.fillRect(x, y, cellW + 0.6, cellH + 0.6); }
      }
    }
    contour(ctx, pmGrid, DATA.target.phase_margin_deg, "#222");  // the picked corner's target lines
    if (corner.cm) contour(ctx, pmGridOf(corner.cm), DATA.target.common_mode_phase_margin_deg, CM_COLOUR);
    ctx.font = "11px sans-serif"; ctx.fillStyle = "#444";
    ctx.fillText("compensation map of " + corner.name + " (predicted)", MP.l, 13);
    for (let d = Math.floor(Math.log10(ccLo)); d <= Math.floor(Math.log10(ccHi)); d++) {
      for (const mult of [1, 2, 5]) {
        const v = mult * 10 ** d;
        if (v >= ccLo && v <= ccHi) ctx.fillText(engineering(v, "F", 2), mx(v) - 12, H - MP.b + 14);
      }
    }
    ctx.fillText(ROLES.cc, W / 2, H - 4);
    for (let j = 0; j < NY; j += 7) ctx.fillText(engineering(secAt(j), SECOND_UNIT, 3), 2, my(secAt(j)) + 4);
    ctx.fillText(SECOND_LABEL, 2, MP.t - 4 > 10 ? H - MP.b + 28 : 12);
  }
  function marker(ctx, cc, second, shape, colour, size) {
    const x = mx(cc), y = my(second);
    ctx.fillStyle = colour; ctx.strokeStyle = colour; ctx.lineWidth = 2; ctx.beginPath();
    if (shape === "square") ctx.rect(x - size / 2, y - size / 2, size, size);
    else if (shape === "triangle") { ctx.moveTo(x, y - size); ctx.lineTo(x + size, y + size * 0.7); ctx.lineTo(x - size, y + size * 0.7); ctx.closePath(); }
    else if (shape === "star") {
      for (let k = 0; k < 10; k++) {
        const r = k % 2 ? size * 0.45 : size, a = -Math.PI / 2 + k * Math.PI / 5;
        if (k === 0) ctx.moveTo(x + r * Math.cos(a), y + r * Math.sin(a)); else ctx.lineTo(x + r * Math.cos(a), y + r * Math.sin(a));
      }
      ctx.closePath();
    } else { ctx.arc(x, y, size, 0, 2 * Math.PI); ctx.stroke(); return; }
    ctx.fill();
  }
  function drawMarkers() {
    const ctx = mapCanvas.getContext("2d");
    ctx.clearRect(0, 0, mapCanvas.width, mapCanvas.height);
    ctx.drawImage(mapImage, 0, 0);
    for (const h of DATA.history) if (h.values.rc !== undefined) marker(ctx, h.values.cc, h.values.rc, "square", "#2b6cb0", 7);
    if (DATA.netlist.cc !== undefined) marker(ctx, DATA.netlist.cc, DATA.netlist.rc, "triangle", "#805ad5", 6);
    if (DATA.values.cc !== undefined) marker(ctx, DATA.values.cc, DATA.values.rc, "star", "#c05621", 10);
    marker(ctx, state.cc, state.second, "ring", "#000", 7);
  }
  mapCanvas.addEventListener("click", (event) => {
    const box = mapCanvas.getBoundingClientRect(), x = event.clientX - box.left, y = event.clientY - box.top;
    const fx = (x - MP.l) / (mapCanvas.width - MP.l - MP.r), fy = (mapCanvas.height - MP.b - y) / (mapCanvas.height - MP.t - MP.b);
    if (fx < 0 || fx > 1 || fy < 0 || fy > 1) return;
    const second = secLog ? secMin * (secMax / secMin) ** fy : secMin + (secMax - secMin) * fy;
    ui.setValues(ccLo * (ccHi / ccLo) ** fx, second);
  });
  $("map-legend").innerHTML = "Shade: phase margin of the picked corner" + (FD ? "'s differential loop" : "")
    + " (dark 0°, light 90°); black line: its target phase margin"
    + (FD && present(DATA.target.common_mode_phase_margin_deg)
      ? "; <span style=\"color:" + CM_COLOUR + "\">blue line</span>: its common-mode loop's target" : "")
    + "; <span style=\"color:#38a169\">green</span>: every corner meets the target"
    + (FD ? " in both loops" : "") + " (predicted). "
    + "<span style=\"color:#2b6cb0\">■</span> simulated points of the run, <span style=\"color:#c05621\">★</span> chosen values, "
    + "<span style=\"color:#805ad5\">▲</span> netlist values, ○ the point shown. Click to go there.";
  return { computeFeasible, buildMapImage, drawMarkers, feasibleAt: (i, j) => feasible && feasible[i * NY + j], ccAt, secAt, NX, NY };
};
