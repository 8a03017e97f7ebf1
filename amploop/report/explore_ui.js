// amploop's what-if page: the controls, the table, the plots (plain canvas, no library).
(function () {
  const { DATA, DEVICE, SECOND, CORNERS, MAPPED, parseValue, engineering, spiceText,
    predict, evaluate, logAxes, meets, branchResistance } = AMP;
  const $ = (id) => document.getElementById(id);
  const FIG = DATA.labels.figures, ROLES = DATA.labels.roles;
  const KEYS = ["dc_loop_gain_db", "unity_gain_hz", "phase_margin_deg", "gain_margin_db"];
  const SECOND_LABEL = DEVICE ? DEVICE.name + " " + DEVICE.size : ROLES.rc;
  const SECOND_UNIT = DEVICE ? (DEVICE.size === "m" ? "" : "m") : "Ω";
  const [ccLo, ccHi] = DATA.bounds.cc;
  const [secLo, secHi] = DATA.bounds.rc;
  const secLog = DEVICE !== null && secLo > 0;
  const state = { cc: null, second: null, picked: null, worst: null, ms: null };

  // ---- sliders: Cc on a log scale, Rc linear (a device's size on a log scale) ------------
  const STEPS = 1000;
  const toSlider = (v, lo, hi, log) => Math.round(STEPS * (log ? Math.log(v / lo) / Math.log(hi / lo)
    : (v - lo) / (hi - lo)));
  const fromSlider = (s, lo, hi, log) => (log ? lo * (hi / lo) ** (s / STEPS) : lo + (hi - lo) * s / STEPS);
  const knobs = {
    cc: { slider: $("cc-slider"), text: $("cc-text"), shown: $("cc-shown"), lo: ccLo, hi: ccHi, log: true,
      unit: "F" },
    second: { slider: $("rc-slider"), text: $("rc-text"), shown: $("rc-shown"), lo: secLo, hi: secHi,
      log: secLog, unit: SECOND_UNIT },
  };
  $("cc-name").textContent = ROLES.cc;
  $("rc-name").textContent = SECOND_LABEL;
  if (secHi === secLo) knobs.second.slider.disabled = true;

  function setValues(cc, second, source) {
    state.cc = cc; state.second = second;
    for (const [name, value] of [["cc", cc], ["second", second]]) {
      const knob = knobs[name];
      if (source !== knob.slider && knob.hi > knob.lo) {
        knob.slider.value = Math.min(STEPS, Math.max(0, toSlider(value, knob.lo, knob.hi, knob.log)));
      }
      if (source !== knob.text) knob.text.value = spiceText(value, 4);
      knob.text.style.color = "";
      const outside = value < knob.lo * (1 - 1e-12) || value > knob.hi * (1 + 1e-12);
      knob.shown.textContent = engineering(value, knob.unit, 4) + (outside ? " (outside the job's bounds)" : "");
    }
    const fragment = "#cc=" + spiceText(cc, 7) + "&" + SECOND + "=" + spiceText(second, 7);
    try { history.replaceState(null, "", fragment); } catch (e) { location.hash = fragment; }
    redraw();
  }
  for (const name of ["cc", "second"]) {
    const knob = knobs[name];
    knob.slider.addEventListener("input", () => {
      const v = fromSlider(Number(knob.slider.value), knob.lo, knob.hi, knob.log);
      if (name === "cc") setValues(v, state.second, knob.slider); else setValues(state.cc, v, knob.slider);
    });
    knob.text.addEventListener("change", () => {
      const v = parseValue(knob.text.value);
      if (v === null || v < 0 || (name === "cc" && v === 0) || (DEVICE && name === "second" && v <= 0)) {
        knob.text.style.color = "#c53030";
        $("state").textContent = "not a value: " + knob.text.value + " (a number with a SPICE suffix: f p n u m k meg g t)";
        $("state").className = "bad";
        return;
      }
      if (name === "cc") setValues(v, state.second, knob.text); else setValues(state.cc, v, knob.text);
    });
  }

  // ---- the jumps: the netlist's values, the chosen ones, each simulated point ------------
  function jump(label, values, simulated) {
    if (!values || values.cc === undefined) return;
    const button = document.createElement("button");
    button.textContent = label;
    if (simulated) { button.className = "simulated"; button.title = "simulated by the run"; }
    button.addEventListener("click", () => setValues(values.cc, values.rc !== undefined ? values.rc : state.second));
    $("jumps").appendChild(button);
  }
  jump("netlist values", DATA.netlist, false);
  jump("chosen values", DATA.values, DATA.command === "tune");
  for (const h of DATA.history) jump(h.step + ". " + h.label + " (simulated)", h.values, true);

  function samePoint(values) {
    const close = (a, b) => Math.abs(a - b) <= 1e-9 * Math.max(Math.abs(a), Math.abs(b), 1e-30);
    return values && values.cc !== undefined && close(values.cc, state.cc)
      && close(values.rc !== undefined ? values.rc : 0, state.second);
  }

  // ---- the margins table -----------------------------------------------------------------
  const HEAD = ["corner", ...KEYS.map((k) => FIG[k]), "target", "simulated at the chosen values: " + FIG.phase_margin_deg];
  $("margins").tHead.innerHTML = "<tr>" + HEAD.map((h) => "<th>" + h + "</th>").join("") + "</tr>";
  const rows = new Map();
  for (const corner of CORNERS) {
    const tr = document.createElement("tr");
    tr.dataset.corner = corner.name;
    const cells = { name: document.createElement("td") };
    cells.name.textContent = corner.name;
    tr.appendChild(cells.name);
    for (const key of [...KEYS, "target", "simulated"]) {
      const td = document.createElement("td");
      if (KEYS.includes(key)) td.dataset.key = key;
      cells[key] = td; tr.appendChild(td);
    }
    const simulated = corner.simulated.phase_margin_deg;
    cells.simulated.dataset.simulatedKey = "phase_margin_deg";
    cells.simulated.textContent = simulated === null || simulated === undefined ? "–" : simulated.toFixed(2);
    if (corner.coef === undefined) cells.target.textContent = "no map (" + corner.status + ")";
    tr.addEventListener("click", () => pick(corner.name));
    $("margins").tBodies[0].appendChild(tr);
    rows.set(corner.name, { tr, cells });
  }
  const SHOW = {
    dc_loop_gain_db: (v) => v.toFixed(2), unity_gain_hz: (v) => engineering(v, "Hz", 4),
    phase_margin_deg: (v) => v.toFixed(2), gain_margin_db: (v) => v.toFixed(2),
  };

  function redraw() {
    const started = performance.now();
    let worst = null, worstPm = Infinity;  // no 0 dB crossing counts as the worst
    for (const corner of MAPPED) {
      const pm = predict(corner, state.cc, state.second).phase_margin_deg;
      const key = pm === null ? -Infinity : pm;
      if (worst === null || key < worstPm) { worst = corner; worstPm = key; }
    }
    state.worst = worst ? worst.name : null;
    if (state.picked === null) state.picked = state.worst;
    let allMet = true;
    for (const corner of MAPPED) {
      const { tr, cells } = rows.get(corner.name);
      for (const key of KEYS) {
        const v = corner.figures[key];
        cells[key].dataset.value = v === null ? "" : String(v);
        cells[key].textContent = v === null ? "–" : SHOW[key](v);
      }
      const met = meets(corner.figures);
      if (met === false) allMet = false;
      cells.target.textContent = met === null ? "" : met ? "met" : "missed";
      cells.target.className = met === null ? "" : met ? "met" : "miss";
      cells.target.dataset.met = String(met);
      tr.classList.toggle("worst", corner.name === state.worst);
      tr.dataset.worst = String(corner.name === state.worst);
      tr.classList.toggle("picked", corner.name === state.picked);
      cells.name.textContent = corner.name + (corner.name === state.worst ? "  ◀ worst" : "");
    }
    describeState(allMet);
    drawBode();
    drawMapMarkers();
    state.ms = performance.now() - started;
    document.body.dataset.redrawMs = state.ms.toFixed(3);
  }

  function describeState(allMet) {
    const box = $("state");
    const worst = MAPPED.find((c) => c.name === state.worst);
    const pm = worst && worst.figures.phase_margin_deg;
    let text = "Predicted from the compensation maps: worst phase margin "
      + (pm === null || pm === undefined ? "–" : pm.toFixed(2) + "°") + " at corner " + state.worst + "; target "
      + (DATA.target.phase_margin_deg !== undefined ? (allMet ? "met at every corner" : "missed") : "not set") + ".";
    let cls = allMet ? "" : "bad";
    const point = DATA.history.filter((h) => samePoint(h.values)).pop();
    if (point) {
      text += " This point was simulated (step " + point.step + ", " + point.label + "): the simulation's worst phase margin "
        + (point.worst_phase_margin_deg === null ? "–" : point.worst_phase_margin_deg.toFixed(2) + "°")
        + (point.worst_corner ? " at corner " + point.worst_corner : "") + ".";
      cls = "simulated";
    } else {
      text += " Nothing was simulated at this point.";
    }
    if (DEVICE) text += " " + DEVICE.name + "'s resistance at another size is scaled from its sample by the square law: a prediction the tool verifies, not an exact one.";
    box.textContent = text;
    box.className = cls;
  }

  function pick(name) {
    state.picked = name;
    for (const [n, row] of rows) row.tr.classList.toggle("picked", n === name);
    drawBode();
    buildMapImage();
    drawMapMarkers();
  }

  // ---- Bode plots ---------------------------------------------------------------------
  const mag = $("magnitude"), phase = $("phase");
  const PAD = { l: 52, r: 10, t: 18, b: 26 };
  const fMin = Math.min(...MAPPED.map((c) => c.grid.f[0])), fMax = Math.max(...MAPPED.map((c) => c.grid.f[c.grid.n - 1]));
  const xOf = (canvas, f) => PAD.l + (canvas.width - PAD.l - PAD.r) * Math.log10(f / fMin) / Math.log10(fMax / fMin);
  const ranges = { magnitude: [-80, 100], phase: [-360, 0] };
  function setRanges() {  // from the chosen values, fixed thereafter so that curves move, not axes
    let top = -Infinity, pLo = Infinity, pHi = -Infinity;
    for (const corner of MAPPED) {
      for (let k = 0; k < corner.grid.n; k++) {
        top = Math.max(top, 20 * corner.m[k] / Math.LN10);
        pLo = Math.min(pLo, corner.p[k]); pHi = Math.max(pHi, corner.p[k]);
      }
    }
    if (Number.isFinite(top)) ranges.magnitude = [-80, 20 * Math.ceil((top + 5) / 20)];
    if (Number.isFinite(pLo)) ranges.phase = [Math.max(-540, 45 * Math.floor(pLo / 45)), Math.min(180, 45 * Math.ceil(pHi / 45))];
  }
  const yOf = (canvas, range, v) => PAD.t + (canvas.height - PAD.t - PAD.b) * (range[1] - v) / (range[1] - range[0]);
  function axes(ctx, canvas, range, step, unit, title, guide) {
    ctx.clearRect(0, 0, canvas.width, canvas.height);
    ctx.font = "11px sans-serif"; ctx.fillStyle = "#444"; ctx.strokeStyle = "#e6e6e6"; ctx.lineWidth = 1;
    ctx.fillText(title, PAD.l, 12);
    for (let d = Math.ceil(Math.log10(fMin)); d <= Math.floor(Math.log10(fMax)); d++) {
      const x = xOf(canvas, 10 ** d);
      ctx.beginPath(); ctx.moveTo(x, PAD.t); ctx.lineTo(x, canvas.height - PAD.b); ctx.stroke();
      ctx.fillText(engineering(10 ** d, "Hz", 3), x - 14, canvas.height - 8);
    }
    for (let v = Math.ceil(range[0] / step) * step; v <= range[1]; v += step) {
      const y = yOf(canvas, range, v);
      ctx.strokeStyle = v === guide ? "#999" : "#e6e6e6";
      ctx.beginPath(); ctx.moveTo(PAD.l, y); ctx.lineTo(canvas.width - PAD.r, y); ctx.stroke();
      ctx.fillText(v + unit, 4, y + 4);
    }
  }
  function curve(ctx, canvas, range, corner, values, toY, colour, width) {
    ctx.strokeStyle = colour; ctx.lineWidth = width; ctx.beginPath();
    const f = corner.grid.f;
    for (let k = 0; k < corner.grid.n; k++) {
      const x = xOf(canvas, f[k]), y = yOf(canvas, range, toY(values[k]));
      if (k === 0) ctx.moveTo(x, y); else ctx.lineTo(x, y);
    }
    ctx.stroke();
  }
  const STYLE = { other: ["rgba(110,110,110,0.45)", 1], worst: ["#c53030", 2.4], picked: ["#2b6cb0", 2.4] };
  function drawBode() {
    for (const [canvas, range, step, unit, title, values, toY, guide] of [
      [mag, ranges.magnitude, 20, " dB", "|T| of every corner (predicted from the maps)", "m", (v) => 20 * v / Math.LN10, 0],
      [phase, ranges.phase, 45, "°", "∠T of every corner (predicted from the maps)", "p", (v) => v, -180]]) {
      const ctx = canvas.getContext("2d");
      axes(ctx, canvas, range, step, unit, title, guide);
      ctx.save(); ctx.beginPath();
      ctx.rect(PAD.l, PAD.t, canvas.width - PAD.l - PAD.r, canvas.height - PAD.t - PAD.b); ctx.clip();
      const order = MAPPED.filter((c) => c.name !== state.worst && c.name !== state.picked);
      for (const c of order) curve(ctx, canvas, range, c, c[values], toY, ...STYLE.other);
      for (const [name, kind] of [[state.worst, "worst"], [state.picked, "picked"]]) {
        const c = MAPPED.find((k) => k.name === name);
        if (c && !(kind === "worst" && name === state.picked)) curve(ctx, canvas, range, c, c[values], toY, ...STYLE[kind]);
      }
      ctx.restore();
    }
    $("legend").innerHTML = '<span style="color:#c53030">■</span> the limiting corner (' + state.worst
      + ') &nbsp; <span style="color:#2b6cb0">■</span> picked: ' + state.picked
      + " (click a curve or a row) &nbsp; grey: the other corners";
  }
  for (const [canvas, values, range, toY] of [[mag, "m", () => ranges.magnitude, (v) => 20 * v / Math.LN10],
    [phase, "p", () => ranges.phase, (v) => v]]) {
    canvas.addEventListener("click", (event) => {
      const box = canvas.getBoundingClientRect(), x = event.clientX - box.left, y = event.clientY - box.top;
      let best = null, distance = Infinity;
      for (const c of MAPPED) {
        let k = 0, dk = Infinity;
        for (let j = 0; j < c.grid.n; j++) { const d = Math.abs(xOf(canvas, c.grid.f[j]) - x); if (d < dk) { dk = d; k = j; } }
        const d = Math.abs(yOf(canvas, range(), toY(c[values][k])) - y);
        if (d < distance) { distance = d; best = c.name; }
      }
      if (best) pick(best);
    });
  }

  // ---- the compensation map of the picked corner ------------------------------------------
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
  function gridFigures(corner, cc, second, step, scratch) {
    const n = Math.ceil(corner.grid.n / step);
    evaluate(corner, cc, branchResistance(corner, second), step, scratch.re, scratch.im);
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
  function scratchFor(corner, step) {
    const n = corner.grid.n, x = new Float64Array(Math.ceil(n / step));
    for (let k = 0, j = 0; k < n; k += step, j++) x[j] = corner.grid.x[k];
    return { x, re: new Float64Array(n), im: new Float64Array(n), m: new Float64Array(n), p: new Float64Array(n) };
  }
  let feasible = null;  // every corner meets the target, on the grid (computed once)
  function computeFeasible() {
    const target = DATA.target;
    if (target.phase_margin_deg === undefined || target.phase_margin_deg === null) return;
    const step = MAPPED.length <= 10 ? 2 : 4;
    feasible = new Uint8Array(NX * NY).fill(1);
    for (const corner of MAPPED) {
      const scratch = scratchFor(corner, step);
      for (let i = 0; i < NX; i++) {
        for (let j = 0; j < NY; j++) {
          if (!feasible[i * NY + j]) continue;
          const [pm, gm] = gridFigures(corner, ccAt(i), secAt(j), step, scratch);
          const gmOk = target.gain_margin_db === undefined || target.gain_margin_db === null || gm >= target.gain_margin_db;
          if (!(pm >= target.phase_margin_deg) || !gmOk) feasible[i * NY + j] = 0;
        }
      }
    }
  }
  function pmColour(pm) {
    if (Number.isNaN(pm)) return "rgb(235,235,235)";
    const t = Math.min(Math.max(pm / 90, 0), 1);
    return "rgb(" + Math.round(60 + 180 * t) + "," + Math.round(70 + 170 * t) + "," + Math.round(140 + 105 * t) + ")";
  }
  function buildMapImage() {
    const ctx = mapImage.getContext("2d"), W = mapImage.width, H = mapImage.height;
    ctx.clearRect(0, 0, W, H);
    const corner = MAPPED.find((c) => c.name === state.picked);
    if (!corner) return;
    const scratch = scratchFor(corner, 2), pmGrid = new Float64Array(NX * NY);
    for (let i = 0; i < NX; i++) for (let j = 0; j < NY; j++) pmGrid[i * NY + j] = gridFigures(corner, ccAt(i), secAt(j), 2, scratch)[0];
    const cellW = (W - MP.l - MP.r) / (NX - 1), cellH = (H - MP.t - MP.b) / (NY - 1);
    for (let i = 0; i < NX; i++) {
      for (let j = 0; j < NY; j++) {
        const x = mx(ccAt(i)) - cellW / 2, y = my(secAt(j)) - cellH / 2;
        ctx.fillStyle = pmColour(pmGrid[i * NY + j]); ctx.fillRect(x, y, cellW + 0.6, cellH + 0.6);
        if (feasible && feasible[i * NY + j]) { ctx.fillStyle = "rgba(56,161,105,0.55)"; ctx.fillRect(x, y, cellW + 0.6, cellH + 0.6); }
      }
    }
    ctx.strokeStyle = "#222"; ctx.lineWidth = 1.2;  // the picked corner's target line
    const level = DATA.target.phase_margin_deg;
    for (let i = 0; level !== undefined && i < NX; i++) {
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
  function drawMapMarkers() {
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
    setValues(ccLo * (ccHi / ccLo) ** fx, second);
  });
  $("map-legend").innerHTML = "Shade: phase margin of the picked corner (dark 0°, light 90°); black line: its target "
    + "phase margin; <span style=\"color:#38a169\">green</span>: every corner meets the target (predicted). "
    + "<span style=\"color:#2b6cb0\">■</span> simulated points of the run, <span style=\"color:#c05621\">★</span> chosen values, "
    + "<span style=\"color:#805ad5\">▲</span> netlist values, ○ the point shown. Click to go there.";

  // ---- start: the fragment's values, else the chosen ones ---------------------------------
  function fromFragment() {
    const params = new URLSearchParams(location.hash.replace(/^#/, ""));
    const cc = params.has("cc") ? parseValue(params.get("cc")) : null;
    const second = params.has(SECOND) ? parseValue(params.get(SECOND)) : null;
    return { cc, second };
  }
  function start() {
    const f = fromFragment();
    const base = DATA.values.cc !== undefined ? DATA.values : DATA.netlist;
    const cc = f.cc !== null && f.cc > 0 ? f.cc : base.cc;
    const second = f.second !== null && f.second >= 0 ? f.second : (base.rc !== undefined ? base.rc : secLo);
    for (const corner of MAPPED) predict(corner, base.cc, base.rc !== undefined ? base.rc : secLo);
    setRanges();
    state.picked = DATA.limiting && MAPPED.some((c) => c.name === DATA.limiting) ? DATA.limiting : null;
    if (state.picked === null && MAPPED.length) state.picked = MAPPED[0].name;
    computeFeasible();
    buildMapImage();
    setValues(cc, second);
    document.body.dataset.ready = "1";
  }
  window.addEventListener("hashchange", () => {
    const f = fromFragment();
    if (f.cc !== null && f.second !== null && !(samePoint({ cc: f.cc, rc: f.second }))) setValues(f.cc, f.second);
  });
  $("summary").textContent = "job " + DATA.job + ": " + DATA.command + " (" + (DATA.strategy || "") + "), " + DATA.status
    + "; " + MAPPED.length + " of " + CORNERS.length + " corners with a compensation map; target phase margin "
    + (DATA.target.phase_margin_deg !== undefined ? DATA.target.phase_margin_deg + "°" : "none")
    + (DATA.target.gain_margin_db !== undefined && DATA.target.gain_margin_db !== null ? ", gain margin " + DATA.target.gain_margin_db + " dB" : "");
  $("notes").innerHTML = "<p><b>What is predicted, what was simulated.</b> Every curve and every figure of the table is "
    + "predicted from each corner's compensation map: three simulations per corner, between which the loop gain is "
    + "exactly bilinear in the branch impedance Rc + 1/sCc. The margins are read off the predicted loop gain as amploop "
    + "reads them off a simulated one. The last column and the blue points are simulations of the run. The map is exact "
    + "while the operating point does not depend on Cc and Rc (the branch carries no DC current)"
    + (DEVICE ? "; a MOSFET standing in for Rc is scaled by the square law and its capacitances move with its size, so "
      + "here the map is an estimate, which is why the tool verifies by simulation" : "")
    + ". Sign-off stays with your own models and flow.</p>";
  AMP.ui = { state, setValues, redraw, pick };
  start();
})();
