// amploop's what-if page: every corner's loop gain predicted from its compensation map,
// and its margins read as amploop.analysis.margins.loop_margins reads them; a
// fully-differential amplifier's common-mode loop likewise, from its own map.

"use strict";
const AMP = (function () {
  const DATA = JSON.parse(document.getElementById("amploop-data").textContent);
  const DEVICE = DATA.device;               // a MOSFET stands in for Rc: the knob is its size
  const SECOND = DEVICE ? "size" : "rc";    // the fragment's name of the second knob
  const LN10 = Math.log(10.0);

  // ---- numbers: SPICE suffixes in (amploop.spice.units.parse_value), engineering out ----
  const SUFFIXES = Object.entries(DATA.suffixes);  // "meg" and "mil" before "m", as in Python
  const UNIT_TAILS = ["", "f", "h", "v", "a", "s", "hz", "ohm", "ohms"];
  const NUMBER = /^\s*([+-]?)((?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)([a-zA-Z]*)\s*$/;
  function parseValue(text) {
    const match = NUMBER.exec(String(text));
    if (!match) return null;
    let scale = 1.0, tail = match[3].toLowerCase();
    for (const [suffix, factor] of SUFFIXES) {
      if (tail.startsWith(suffix)) { scale = factor; tail = tail.slice(suffix.length); break; }
    }
    if (!UNIT_TAILS.includes(tail)) return null;
    const value = parseFloat(match[1] + match[2]) * scale;
    return Number.isFinite(value) ? value : null;
  }
  const PREFIXES = [[1e12, "T"], [1e9, "G"], [1e6, "M"], [1e3, "k"], [1, ""], [1e-3, "m"],
    [1e-6, "µ"], [1e-9, "n"], [1e-12, "p"], [1e-15, "f"], [1e-18, "a"]];
  function engineering(value, unit, digits) {
    if (value === null || value === undefined || Number.isNaN(value)) return "–";
    if (!Number.isFinite(value)) return (value > 0 ? "inf" : "-inf") + (unit ? " " + unit : "");
    if (value === 0) return ("0 " + unit).trim();
    const magnitude = Number(Math.abs(value).toPrecision(digits));
    let [scale, prefix] = PREFIXES[PREFIXES.length - 1];
    for ([scale, prefix] of PREFIXES) if (magnitude >= scale) break;
    const mantissa = Number((Math.sign(value) * magnitude / scale).toPrecision(digits));
    return (String(mantissa) + " " + prefix + unit).trim();
  }
  const SPICE_LETTERS = [[1e9, "g"], [1e6, "meg"], [1e3, "k"], [1, ""], [1e-3, "m"],
    [1e-6, "u"], [1e-9, "n"], [1e-12, "p"], [1e-15, "f"]];
  function spiceText(value, digits) {  // for the typed fields and the fragment
    if (value === 0) return "0";
    for (const [scale, letter] of SPICE_LETTERS) {
      if (Math.abs(value) >= scale * 0.999999999) {
        return String(Number((value / scale).toPrecision(digits))) + letter;
      }
    }
    return String(Number(value.toPrecision(digits)));
  }

  // ---- the maps -------------------------------------------------------------------------
  function decode(text) {
    const bytes = Uint8Array.from(atob(text), (ch) => ch.charCodeAt(0));
    const view = new DataView(bytes.buffer), out = new Float64Array(bytes.length / 8);
    for (let k = 0; k < out.length; k++) out[k] = view.getFloat64(8 * k, true);
    return out;
  }
  const GRIDS = DATA.grids.map((text) => {
    const f = decode(text), n = f.length;
    const x = new Float64Array(n), w = new Float64Array(n);
    for (let k = 0; k < n; k++) { x[k] = Math.log10(f[k]); w[k] = 2 * Math.PI * f[k]; }
    return { f, x, w, n };
  });
  // one loop's map and its scratch arrays: a corner's differential (or only) loop is the
  // corner itself, its common-mode loop corner.cm, of the same shape
  function withMap(loop, grid, coef) {
    loop.grid = GRIDS[grid];
    loop.coef = decode(coef);
    const n = loop.grid.n;
    loop.re = new Float64Array(n); loop.im = new Float64Array(n);
    loop.m = new Float64Array(n); loop.p = new Float64Array(n);
    return loop;
  }
  const CORNERS = DATA.corners.map((c) => {
    const corner = { name: c.name, status: c.status, simulated: c.simulated, r_ref: c.r_ref,
      configuration: c.configuration, cmSimulated: c.cm_simulated };
    if (c.coef !== undefined) withMap(corner, c.grid, c.coef);
    if (c.cm_coef !== undefined) corner.cm = withMap({ name: c.name, r_ref: c.r_ref }, c.cm_grid, c.cm_coef);
    return corner;
  });
  const MAPPED = CORNERS.filter((c) => c.coef !== undefined);
  const FD = MAPPED.some((c) => c.cm !== undefined);  // both loops shown

  function branchResistance(corner, second) {  // ohms, as this corner sees the knob
    if (!DEVICE) return second;
    const ratio = DEVICE.size === "l" ? second / DEVICE.size_ref : DEVICE.size_ref / second;
    return corner.r_ref * ratio;
  }

  // T = (A·zs + B·scc) / (zs + D·scc), scc = jωCc, zs = 1 + jωCcRc: the map multiplied
  // through by s·Cc (amploop.analysis.compmap.CompensationMap.loop_gain_values), over c
  function evaluate(corner, cc, rc, step, re, im) {
    const q = corner.coef, w0 = corner.grid.w, n = corner.grid.n;
    for (let k = 0, j = 0; k < n; k += step, j++) {
      const w = w0[k] * cc, wr = w * rc, o = 6 * k;
      const nr = q[o] - q[o + 1] * wr - q[o + 3] * w;
      const ni = q[o + 1] + q[o] * wr + q[o + 2] * w;
      const dr = 1 - q[o + 5] * w, di = wr + q[o + 4] * w;
      const d2 = dr * dr + di * di;
      re[j] = (nr * dr + ni * di) / d2;
      im[j] = (ni * dr - nr * di) / d2;
    }
  }

  // ln|T| (finite) and the phase unwrapped as numpy.unwrap does, in degrees
  function logAxes(re, im, n, m, p) {
    let correction = 0, previous = 0;
    for (let k = 0; k < n; k++) {
      const value = Math.log(Math.hypot(re[k], im[k]));
      m[k] = Number.isFinite(value) ? value : -745.0;
      const angle = Math.atan2(im[k], re[k]);
      if (k > 0) {
        const dd = angle - previous;
        let ddmod = (dd + Math.PI) % (2 * Math.PI);  // numpy.mod: the divisor's sign
        if (ddmod < 0) ddmod += 2 * Math.PI;
        ddmod -= Math.PI;
        if (ddmod === -Math.PI && dd > 0) ddmod = Math.PI;
        if (Math.abs(dd) >= Math.PI) correction += ddmod - dd;
      }
      previous = angle;
      p[k] = (angle + correction) * (180 / Math.PI);
    }
  }

  // ---- margins: amploop.analysis.margins, the same local cubics in log f ------------------
  function windowStart(i, n) { return Math.min(Math.max(i - 1, 0), Math.max(n - 4, 0)); }
  function cubicAt(x, y, n, i, xq) {
    const lo = windowStart(i, n), hi = Math.min(lo + 4, n);
    let total = 0.0;
    for (let j = lo; j < hi; j++) {
      let weight = 1.0;
      for (let k = lo; k < hi; k++) if (k !== j) weight *= (xq - x[k]) / (x[j] - x[k]);
      total += weight * y[j];
    }
    return total;
  }
  function solve4(a, b) {  // Gaussian elimination with partial pivoting, a 4×4 (rows)
    for (let c = 0; c < 4; c++) {
      let best = c;
      for (let r = c + 1; r < 4; r++) if (Math.abs(a[r][c]) > Math.abs(a[best][c])) best = r;
      [a[c], a[best]] = [a[best], a[c]]; [b[c], b[best]] = [b[best], b[c]];
      for (let r = c + 1; r < 4; r++) {
        const f = a[r][c] / a[c][c];
        for (let k = c; k < 4; k++) a[r][k] -= f * a[c][k];
        b[r] -= f * b[c];
      }
    }
    const out = [0, 0, 0, 0];
    for (let r = 3; r >= 0; r--) {
      let s = b[r];
      for (let k = r + 1; k < 4; k++) s -= a[r][k] * out[k];
      out[r] = s / a[r][r];
    }
    return out;  // highest power first, as numpy.vander
  }
  function poly(c, t) { return ((c[0] * t + c[1]) * t + c[2]) * t + c[3]; }
  function bisect(c, lo, hi) {
    let flo = poly(c, lo);
    for (let it = 0; it < 200; it++) {
      const mid = 0.5 * (lo + hi);
      if (mid <= lo || mid >= hi) break;
      const fm = poly(c, mid);
      if (fm === 0) return mid;
      if ((fm < 0) === (flo < 0)) { lo = mid; flo = fm; } else hi = mid;
    }
    return 0.5 * (lo + hi);
  }
  function realRoots(c, lo, hi) {  // the cubic's real roots in [lo, hi]
    const edges = [lo];
    const qa = 3 * c[0], qb = 2 * c[1], qc = c[2];  // its turning points split the interval
    if (qa !== 0) {
      const disc = qb * qb - 4 * qa * qc;
      if (disc >= 0) {
        const r = Math.sqrt(disc);
        for (const t of [(-qb - r) / (2 * qa), (-qb + r) / (2 * qa)].sort((u, v) => u - v)) {
          if (t > lo && t < hi) edges.push(t);
        }
      }
    } else if (qb !== 0) {
      const t = -qc / qb;
      if (t > lo && t < hi) edges.push(t);
    }
    edges.push(hi);
    const roots = [];
    for (let k = 0; k + 1 < edges.length; k++) {
      const a = edges[k], b = edges[k + 1], fa = poly(c, a), fb = poly(c, b);
      if (fa === 0) roots.push(a);
      else if ((fa < 0) !== (fb < 0) && fb !== 0) roots.push(bisect(c, a, b));
      if (k + 2 === edges.length && fb === 0) roots.push(b);
    }
    return roots;
  }
  function cubicRoot(x, y, n, i, level) {
    const lo = windowStart(i, n), a = x[i], h = x[i + 1] - x[i];
    const rows = [], rhs = [];
    for (let j = 0; j < 4; j++) {
      const t = (x[lo + j] - a) / h;
      rows.push([t * t * t, t * t, t, 1]); rhs.push(y[lo + j] - level);
    }
    const real = realRoots(solve4(rows, rhs), -1e-12, 1.0 + 1e-12);
    if (real.length === 0) return null;
    const d0 = y[i] - level, d1 = y[i + 1] - level, line = d0 / (d0 - d1);
    let best = real[0];
    for (const r of real) if (Math.abs(r - line) < Math.abs(best - line)) best = r;
    return a + h * Math.min(Math.max(best, 0.0), 1.0);
  }
  function roots(x, y, n, level) {
    const found = [];
    for (let i = 0; i + 1 < n; i++) {
      const d0 = y[i] - level, d1 = y[i + 1] - level;
      if (!(d0 === 0 || Math.sign(d0) * Math.sign(d1) < 0)) continue;
      if (d0 === 0) { found.push([i, x[i]]); continue; }
      let root = n >= 4 ? cubicRoot(x, y, n, i, level) : null;
      if (root === null) root = x[i] + (x[i + 1] - x[i]) * d0 / (d0 - d1);
      found.push([i, root]);
    }
    return found;
  }
  function margins(x, m, p, n, re, im) {
    let pm = null, ugf = null, gm = null, pcf = null;
    for (const [i, xr] of roots(x, m, n, 0.0)) {
      const value = 180.0 + cubicAt(x, p, n, i, xr);
      if (pm === null || value < pm) { pm = value; ugf = 10 ** xr; }
    }
    const levels = new Set();
    let previous = Math.floor((p[0] + 180.0) / 360.0);
    for (let k = 0; k < n; k++) {
      const q = (p[k] + 180.0) / 360.0, turns = Math.floor(q);
      if (k > 0 && turns !== previous) levels.add(Math.max(turns, previous));
      if (q === turns) levels.add(turns);
      previous = turns;
    }
    const crossings = [];
    for (const turn of levels) {
      for (const [i, xr] of roots(x, p, n, -180.0 + 360.0 * turn)) {
        crossings.push([10 ** xr, -20.0 / LN10 * cubicAt(x, m, n, i, xr)]);
      }
    }
    crossings.sort((u, v) => u[0] - v[0] || u[1] - v[1]);
    for (const [f, value] of crossings) if (gm === null || value < gm) { gm = value; pcf = f; }
    return { dc_loop_gain_db: 20.0 * Math.log10(Math.hypot(re[0], im[0])), unity_gain_hz: ugf,
      phase_margin_deg: pm, gain_margin_db: gm, phase_crossover_hz: pcf };
  }

  function predictLoop(loop, cc, second) {
    const g = loop.grid;
    evaluate(loop, cc, branchResistance(loop, second), 1, loop.re, loop.im);
    logAxes(loop.re, loop.im, g.n, loop.m, loop.p);
    loop.figures = margins(g.x, loop.m, loop.p, g.n, loop.re, loop.im);
    return loop.figures;
  }
  // the corner's (differential) figures; its common-mode loop's land in corner.cm.figures
  function predict(corner, cc, second) {
    if (corner.cm) predictLoop(corner.cm, cc, second);
    return predictLoop(corner, cc, second);
  }

  // the targets as amploop.strategy.worst.meets_target holds them: the main phase margin
  // and gain margin, and the common-mode loop's own where given (a gain margin missing
  // from the loop gain passes)
  const present = (v) => v !== undefined && v !== null;
  const TARGET = DATA.target;
  const HAS_TARGET = present(TARGET.phase_margin_deg);
  function meetsBounds(figures, pmBound, gmBound) {
    if (present(pmBound) && (figures.phase_margin_deg === null || figures.phase_margin_deg < pmBound)) return false;
    return !(present(gmBound) && figures.gain_margin_db !== null && figures.gain_margin_db < gmBound);
  }
  function meetsLoop(figures, loop) {  // loop: "differential" or "common_mode"
    if (loop === "common_mode") {
      return meetsBounds(figures, TARGET.common_mode_phase_margin_deg, TARGET.common_mode_gain_margin_db);
    }
    return meetsBounds(figures, TARGET.phase_margin_deg, TARGET.gain_margin_db);
  }
  function meets(figures, cmFigures) {  // null without a target
    if (!HAS_TARGET) return null;
    return meetsLoop(figures, "differential") && (!cmFigures || meetsLoop(cmFigures, "common_mode"));
  }
  // which loop limits, as amploop.strategy.worst.limiting_loop: the common-mode loop when
  // its worst phase margin has less slack over its target than the differential loop's
  function limitingLoop(pm, cmPm) {
    if (cmPm === null || cmPm === undefined) return "differential";
    const mainBound = HAS_TARGET ? TARGET.phase_margin_deg : 0.0;
    const cmBound = HAS_TARGET ? TARGET.common_mode_phase_margin_deg : 0.0;
    if (!present(cmBound)) return "differential";
    return cmPm - cmBound < pm - mainBound ? "common_mode" : "differential";
  }

  return { DATA, DEVICE, SECOND, CORNERS, MAPPED, GRIDS, FD, parseValue, engineering, spiceText,
    predict, evaluate, logAxes, margins, meets, meetsLoop, limitingLoop, branchResistance, present };
})();
