// amploop's what-if page: the Bode plots of every corner (plain canvas, no library); a
// fully-differential amplifier's common-mode loop in its own colour and dash-dot line.
AMP.bode = function (ui) {
  const { MAPPED, FD, engineering } = AMP;
  const $ = (id) => document.getElementById(id);
  const state = ui.state, CM_COLOUR = AMP.DATA.style.common_mode, CM_DASH = AMP.DATA.style.common_mode_dash;
  const mag = $("magnitude"), phase = $("phase");
  const PAD = { l: 52, r: 10, t: 18, b: 26 };
  const loops = (c) => (c.cm ? [c, c.cm] : [c]);
  const fMin = Math.min(...MAPPED.flatMap((c) => loops(c).map((l) => l.grid.f[0])));
  const fMax = Math.max(...MAPPED.flatMap((c) => loops(c).map((l) => l.grid.f[l.grid.n - 1])));
  const xOf = (canvas, f) => PAD.l + (canvas.width - PAD.l - PAD.r) * Math.log10(f / fMin) / Math.log10(fMax / fMin);
  const yOf = (canvas, range, v) => PAD.t + (canvas.height - PAD.t - PAD.b) * (range[1] - v) / (range[1] - range[0]);
  const ranges = { magnitude: [-80, 100], phase: [-360, 0] };

  function setRanges() {  // from the chosen values, fixed thereafter so that curves move, not axes
    let top = -Infinity, pLo = Infinity, pHi = -Infinity;
    for (const corner of MAPPED) {
      for (const loop of loops(corner)) {
        for (let k = 0; k < loop.grid.n; k++) {
          top = Math.max(top, 20 * loop.m[k] / Math.LN10);
          pLo = Math.min(pLo, loop.p[k]); pHi = Math.max(pHi, loop.p[k]);
        }
      }
    }
    if (Number.isFinite(top)) ranges.magnitude = [-80, 20 * Math.ceil((top + 5) / 20)];
    if (Number.isFinite(pLo)) ranges.phase = [Math.max(-540, 45 * Math.floor(pLo / 45)), Math.min(180, 45 * Math.ceil(pHi / 45))];
  }
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
  function curve(ctx, canvas, range, loop, values, toY, colour, width, dashed) {
    ctx.strokeStyle = colour; ctx.lineWidth = width;
    ctx.setLineDash(dashed ? CM_DASH.map((d) => d * Math.max(width, 1.2)) : []);
    ctx.beginPath();
    const f = loop.grid.f;
    for (let k = 0; k < loop.grid.n; k++) {
      const x = xOf(canvas, f[k]), y = yOf(canvas, range, toY(values[k]));
      if (k === 0) ctx.moveTo(x, y); else ctx.lineTo(x, y);
    }
    ctx.stroke();
    ctx.setLineDash([]);
  }
  // [differential colour, common-mode colour, width]: grey and faint CM blue for the rest
  const STYLE = { other: ["rgba(110,110,110,0.45)", "rgba(59,95,217,0.35)", 1], worst: ["#c53030", "#c53030", 2.4],
    picked: ["#2b6cb0", CM_COLOUR, 2.4] };
  function corner(ctx, canvas, range, c, values, toY, kind) {
    const [colour, cmColour, width] = STYLE[kind];
    curve(ctx, canvas, range, c, c[values], toY, colour, width, false);
    if (c.cm) curve(ctx, canvas, range, c.cm, c.cm[values], toY, cmColour, width, true);
  }
  function draw() {
    const what = FD ? "of both loops of every corner" : "of every corner";
    for (const [canvas, range, step, unit, title, values, toY, guide] of [
      [mag, ranges.magnitude, 20, " dB", "|T| " + what + " (predicted from the maps)", "m", (v) => 20 * v / Math.LN10, 0],
      [phase, ranges.phase, 45, "°", "∠T " + what + " (predicted from the maps)", "p", (v) => v, -180]]) {
      const ctx = canvas.getContext("2d");
      axes(ctx, canvas, range, step, unit, title, guide);
      ctx.save(); ctx.beginPath();
      ctx.rect(PAD.l, PAD.t, canvas.width - PAD.l - PAD.r, canvas.height - PAD.t - PAD.b); ctx.clip();
      const order = MAPPED.filter((c) => c.name !== state.worst && c.name !== state.picked);
      for (const c of order) corner(ctx, canvas, range, c, values, toY, "other");
      for (const [name, kind] of [[state.worst, "worst"], [state.picked, "picked"]]) {
        const c = MAPPED.find((k) => k.name === name);
        if (c && !(kind === "worst" && name === state.picked)) corner(ctx, canvas, range, c, values, toY, kind);
      }
      ctx.restore();
    }
    $("legend").innerHTML = '<span style="color:#c53030">■</span> the limiting corner (' + state.worst
      + (FD ? ", " + (state.limitingLoop === "common_mode" ? "common-mode" : "differential") + " loop" : "")
      + ') &nbsp; <span style="color:#2b6cb0">■</span> picked: ' + state.picked
      + " (click a curve or a row) &nbsp; grey: the other corners"
      + (FD ? ' &nbsp; solid: the differential loop, <span style="color:' + CM_COLOUR + '">dash-dot: the common-mode loop</span>' : "");
  }
  for (const [canvas, values, range, toY] of [[mag, "m", () => ranges.magnitude, (v) => 20 * v / Math.LN10],
    [phase, "p", () => ranges.phase, (v) => v]]) {
    canvas.addEventListener("click", (event) => {
      const box = canvas.getBoundingClientRect(), x = event.clientX - box.left, y = event.clientY - box.top;
      let best = null, distance = Infinity;
      for (const c of MAPPED) {
        for (const loop of loops(c)) {
          let k = 0, dk = Infinity;
          for (let j = 0; j < loop.grid.n; j++) { const d = Math.abs(xOf(canvas, loop.grid.f[j]) - x); if (d < dk) { dk = d; k = j; } }
          const d = Math.abs(yOf(canvas, range(), toY(loop[values][k])) - y);
          if (d < distance) { distance = d; best = c.name; }
        }
      }
      if (best) ui.pick(best);
    });
  }
  return { setRanges, draw };
};
