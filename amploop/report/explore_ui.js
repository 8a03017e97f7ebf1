// amploop's what-if page: the controls, the margins table (both loops of a
// fully-differential amplifier, the points grouped by configuration), the state line; it
// draws through AMP.bode and AMP.mapView and starts the page.
(function () {
  const { DATA, DEVICE, SECOND, CORNERS, MAPPED, FD, parseValue, engineering, spiceText,
    predict, meets, meetsLoop, limitingLoop, present } = AMP;
  const $ = (id) => document.getElementById(id);
  const FIG = DATA.labels.figures, CM_FIG = DATA.labels.cm_figures, ROLES = DATA.labels.roles;
  const KEYS = ["dc_loop_gain_db", "unity_gain_hz", "phase_margin_deg", "gain_margin_db"];
  const CM_KEYS = FD ? KEYS.map((k) => "common_mode." + k) : [];
  const SECOND_LABEL = DEVICE ? DEVICE.name + " " + DEVICE.size : ROLES.rc;
  const SECOND_UNIT = DEVICE ? (DEVICE.size === "m" ? "" : "m") : "Ω";
  const [ccLo, ccHi] = DATA.bounds.cc;
  const [secLo, secHi] = DATA.bounds.rc;
  const secLog = DEVICE !== null && secLo > 0;
  // worst: the limiting corner (of the limiting loop); diffWorst, cmWorst: each loop's
  const state = { cc: null, second: null, picked: null, worst: null, diffWorst: null, cmWorst: null,
    limitingLoop: "differential", ms: null };

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

  // ---- the margins table: one row per point, under a heading row per configuration ---------
  const SIMULATED = FD ? ["simulated", "cm_simulated"] : ["simulated"];
  const HEAD = ["corner", ...KEYS.map((k) => FIG[k]), ...CM_KEYS.map((k) => CM_FIG[k.split(".")[1]]), "target",
    "simulated at the chosen values: " + FIG.phase_margin_deg, ...(FD ? ["simulated: " + CM_FIG.phase_margin_deg] : [])];
  $("margins").tHead.innerHTML = "<tr>" + HEAD.map((h, k) => "<th" + (k > KEYS.length && k <= KEYS.length + CM_KEYS.length
    ? ' class="cm"' : "") + ">" + h + "</th>").join("") + "</tr>";
  const rows = new Map();
  const configurations = [...new Set(CORNERS.map((c) => c.configuration).filter((k) => present(k)))];
  const groups = configurations.length ? configurations.map((k) => [k, CORNERS.filter((c) => c.configuration === k)])
    : [[null, CORNERS]];
  const ungrouped = CORNERS.filter((c) => configurations.length && !present(c.configuration));
  if (ungrouped.length) groups.push(["(none)", ungrouped]);
  for (const [configuration, members] of groups) {
    if (configuration !== null) {
      const head = document.createElement("tr");
      head.className = "group"; head.dataset.configuration = configuration;
      head.innerHTML = '<th colspan="' + HEAD.length + '"></th>';
      head.firstChild.textContent = "configuration " + configuration + " (" + members.length
        + (members.length === 1 ? " point)" : " points)");
      $("margins").tBodies[0].appendChild(head);
    }
    for (const corner of members) addRow(corner, configuration);
  }
  function addRow(corner, configuration) {
    const tr = document.createElement("tr");
    tr.dataset.corner = corner.name;
    if (configuration !== null) tr.dataset.configuration = configuration;
    const cells = { name: document.createElement("td") };
    cells.name.textContent = corner.name;
    tr.appendChild(cells.name);
    for (const key of [...KEYS, ...CM_KEYS, "target", ...SIMULATED]) {
      const td = document.createElement("td");
      if (KEYS.includes(key) || CM_KEYS.includes(key)) td.dataset.key = key;
      if (CM_KEYS.includes(key)) td.classList.add("cm");
      cells[key] = td; tr.appendChild(td);
    }
    for (const key of SIMULATED) {
      const figures = key === "simulated" ? corner.simulated : corner.cmSimulated;
      const simulated = figures ? figures.phase_margin_deg : null;
      cells[key].dataset.simulatedKey = (key === "simulated" ? "" : "common_mode.") + "phase_margin_deg";
      cells[key].textContent = simulated === null || simulated === undefined ? "–" : simulated.toFixed(2);
    }
    if (corner.coef === undefined) cells.target.textContent = "no map (" + corner.status + ")";
    tr.addEventListener("click", () => pick(corner.name));
    $("margins").tBodies[0].appendChild(tr);
    rows.set(corner.name, { tr, cells });
  }
  const SHOW = {
    dc_loop_gain_db: (v) => v.toFixed(2), unity_gain_hz: (v) => engineering(v, "Hz", 4),
    phase_margin_deg: (v) => v.toFixed(2), gain_margin_db: (v) => v.toFixed(2),
  };
  function smallest(figuresOf) {  // the corner of the smallest phase margin (none counts as the smallest)
    let worst = null, worstPm = Infinity;
    for (const corner of MAPPED) {
      const figures = figuresOf(corner);
      if (!figures) continue;
      const key = figures.phase_margin_deg === null ? -Infinity : figures.phase_margin_deg;
      if (worst === null || key < worstPm) { worst = corner; worstPm = key; }
    }
    return worst;
  }
  function targetWords(corner) {
    const met = meets(corner.figures, corner.cm && corner.cm.figures);
    if (met !== false || !corner.cm) return [met, met === null ? "" : met ? "met" : "missed"];
    const diff = !meetsLoop(corner.figures, "differential"), cm = !meetsLoop(corner.cm.figures, "common_mode");
    return [met, "missed (" + (diff && cm ? "both loops" : diff ? "differential" : "common-mode") + ")"];
  }

  function redraw() {
    const started = performance.now();
    for (const corner of MAPPED) predict(corner, state.cc, state.second);
    const diffWorst = smallest((c) => c.figures), cmWorst = FD ? smallest((c) => c.cm && c.cm.figures) : null;
    state.diffWorst = diffWorst ? diffWorst.name : null;
    state.cmWorst = cmWorst ? cmWorst.name : null;
    state.limitingLoop = cmWorst && diffWorst
      ? limitingLoop(diffWorst.figures.phase_margin_deg, cmWorst.cm.figures.phase_margin_deg) : "differential";
    state.worst = state.limitingLoop === "common_mode" ? state.cmWorst : state.diffWorst;
    if (state.picked === null) state.picked = state.worst;
    let allMet = true;
    for (const corner of MAPPED) {
      const { tr, cells } = rows.get(corner.name);
      for (const key of [...KEYS, ...CM_KEYS]) {
        const cm = key.startsWith("common_mode."), figures = cm ? corner.cm && corner.cm.figures : corner.figures;
        const v = figures ? figures[cm ? key.slice(12) : key] : null;
        cells[key].dataset.value = v === null ? "" : String(v);
        cells[key].textContent = v === null ? "–" : SHOW[cm ? key.slice(12) : key](v);
      }
      const [met, words] = targetWords(corner);
      if (met === false) allMet = false;
      cells.target.textContent = words;
      cells.target.className = met === null ? "" : met ? "met" : "miss";
      cells.target.dataset.met = String(met);
      tr.classList.toggle("worst", corner.name === state.worst);
      tr.dataset.worst = String(corner.name === state.diffWorst);
      if (FD) tr.dataset.cmWorst = String(corner.name === state.cmWorst);
      tr.classList.toggle("picked", corner.name === state.picked);
      cells.name.textContent = corner.name + (corner.name === state.diffWorst ? "  ◀ worst" : "")
        + (FD && corner.name === state.cmWorst ? "  ◀ worst CM" : "");
    }
    describeState(allMet);
    bode.draw();
    mapView.drawMarkers();
    state.ms = performance.now() - started;
    document.body.dataset.redrawMs = state.ms.toFixed(3);
  }

  function describeState(allMet) {
    const box = $("state");
    const worst = MAPPED.find((c) => c.name === state.diffWorst), cmWorst = MAPPED.find((c) => c.name === state.cmWorst);
    const degrees = (v) => (v === null || v === undefined ? "–" : v.toFixed(2) + "°");
    let text = "Predicted from the compensation maps: worst " + (FD ? "differential " : "") + "phase margin "
      + degrees(worst && worst.figures.phase_margin_deg) + " at corner " + state.diffWorst
      + (FD && cmWorst ? ", worst common-mode phase margin " + degrees(cmWorst.cm.figures.phase_margin_deg) + " at corner "
        + state.cmWorst + "; the " + (state.limitingLoop === "common_mode" ? "common-mode" : "differential")
        + " loop limits" : "")
      + "; target " + (present(DATA.target.phase_margin_deg) ? (allMet ? "met at every corner"
        + (FD ? " in both loops" : "") : "missed") : "not set") + ".";
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
    bode.draw();
    mapView.buildMapImage();
    mapView.drawMarkers();
  }
  const bode = AMP.bode({ state, pick });
  const mapView = AMP.mapView({ state, setValues, ROLES, SECOND_LABEL, SECOND_UNIT, secLog, ccLo, ccHi, secLo, secHi });

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
    bode.setRanges();
    state.picked = DATA.limiting && MAPPED.some((c) => c.name === DATA.limiting) ? DATA.limiting : null;
    if (FD) {  // the limiting loop's worst corner at the chosen values
      const d = smallest((c) => c.figures), m = smallest((c) => c.cm && c.cm.figures);
      if (d && m) state.picked = limitingLoop(d.figures.phase_margin_deg, m.cm.figures.phase_margin_deg) === "common_mode" ? m.name : d.name;
    }
    if (state.picked === null && MAPPED.length) state.picked = MAPPED[0].name;
    mapView.computeFeasible();
    mapView.buildMapImage();
    setValues(cc, second);
    document.body.dataset.ready = "1";
  }
  window.addEventListener("hashchange", () => {
    const f = fromFragment();
    if (f.cc !== null && f.second !== null && !(samePoint({ cc: f.cc, rc: f.second }))) setValues(f.cc, f.second);
  });
  $("summary").textContent = "job " + DATA.job + ": " + DATA.command + " (" + (DATA.strategy || "") + "), " + DATA.status
    + "; " + MAPPED.length + " of " + CORNERS.length + " corners with a compensation map"
    + (FD ? " of each loop (fully-differential: the differential and the common-mode loop)" : "")
    + (configurations.length ? " in " + configurations.length + " configurations (" + configurations.join(", ") + ")" : "")
    + "; target phase margin "
    + (present(DATA.target.phase_margin_deg) ? DATA.target.phase_margin_deg + "°" : "none")
    + (present(DATA.target.gain_margin_db) ? ", gain margin " + DATA.target.gain_margin_db + " dB" : "")
    + (FD && present(DATA.target.common_mode_phase_margin_deg) ? "; common-mode phase margin " + DATA.target.common_mode_phase_margin_deg + "°" : "")
    + (FD && present(DATA.target.common_mode_gain_margin_db) ? ", common-mode gain margin " + DATA.target.common_mode_gain_margin_db + " dB" : "");
  $("notes").innerHTML = "<p><b>What is predicted, what was simulated.</b> Every curve and every figure of the table is "
    + "predicted from each corner's compensation map: three simulations per corner, between which the loop gain is "
    + "exactly bilinear in the branch impedance Rc + 1/sCc. The margins are read off the predicted loop gain as amploop "
    + "reads them off a simulated one. "
    + (FD ? "A fully-differential amplifier's common-mode loop has maps of its own, read from the same three simulations "
      + "(both halves carry the same Cc and Rc, so its loop gain too is bilinear in that one impedance). " : "")
    + "The simulated column" + (FD ? "s" : "") + " and the blue points are simulations of the run. The map is exact "
    + "while the operating point does not depend on Cc and Rc (the branch carries no DC current)"
    + (DEVICE ? "; a MOSFET standing in for Rc is scaled by the square law and its capacitances move with its size, so "
      + "here the map is an estimate, which is why the tool verifies by simulation" : "")
    + ". Sign-off stays with your own models and flow.</p>";
  AMP.ui = { state, setValues, redraw, pick, bode, mapView };
  start();
})();
