// rotorwatch status page: polls the JSON API and draws on <canvas>. Plain JS, no dependencies.
"use strict";

(function () {
  const STATE_WORDS = {
    alarm: "Alarm", warning: "Warning", sensor_fault: "Sensor fault", no_data: "No data",
    learning: "Learning", normal: "Normal", stopped: "Stopped", suppressed: "Suppressed",
  };
  const FAMILY = {
    shaft: { label: "Shaft 1x…4x", color: "#0e7c86" },
    blade_pass: { label: "Blade pass", color: "#9a6a12" },
    bpfo: { label: "BPFO", color: "#a23b84" },
    bpfi: { label: "BPFI", color: "#3d63c9" },
    bsf: { label: "BSF", color: "#4f8a2a" },
    ftf: { label: "FTF", color: "#7d6b57" },
    electrical: { label: "2xLF (electrical)", color: "#c0392b" },
  };
  const DEFAULT_FAMILIES = {
    acceleration: ["shaft", "blade_pass", "electrical"],
    velocity: ["shaft", "blade_pass", "electrical"],
    envelope: ["bpfo", "bpfi", "bsf", "ftf", "electrical"],
  };
  const QUANTITY_WORD = { acceleration: "acceleration", velocity: "velocity", envelope: "envelope" };
  const SPANS_HZ = [50, 100, 200, 500, 1000, 2000, 5000, 10000, 20000];
  const LABEL_ROWS = 4, LABEL_ROW_PX = 14, LABEL_FONT_PX = 11, LABEL_GAP_PX = 5;  // marker labels above the spectrum

  const ui = {
    overview: null,
    machine: null,
    point: null,
    pointData: null,
    trendData: null,
    pointRevision: null,
    quantity: "velocity",
    scale: "linear",
    span: {},                       // quantity -> "auto" | number
    families: JSON.parse(JSON.stringify(DEFAULT_FAMILIES)),
    trendValue: "overall",
    pollTimer: null,
    lastOk: 0,
    token: null,
  };
  window.__rwErrors = [];
  window.addEventListener("error", (e) => window.__rwErrors.push(String(e.message || e)));
  window.addEventListener("unhandledrejection", (e) => window.__rwErrors.push(String(e.reason)));

  const $ = (sel, root) => (root || document).querySelector(sel);
  const css = (name) => getComputedStyle(document.documentElement).getPropertyValue(name).trim();
  const stateColor = (s) => css("--st-" + (s || "no_data")) || "#8d929b";

  function el(tag, attrs, children) {
    const node = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs || {})) {
      if (v === null || v === undefined || v === false) continue;
      if (k === "text") node.textContent = v;
      else if (k === "html") node.innerHTML = v;
      else if (k.startsWith("on")) node.addEventListener(k.slice(2), v);
      else node.setAttribute(k, v === true ? "" : String(v));
    }
    for (const c of children || []) if (c) node.append(c);
    return node;
  }

  function fmt(x, digits) {
    if (x === null || x === undefined || !isFinite(x)) return "–";
    const d = digits || 3;
    const a = Math.abs(x);
    if (a !== 0 && (a < 1e-3 || a >= 1e5)) return x.toExponential(d - 1);
    return Number(x.toPrecision(d)).toLocaleString("en-US", { maximumFractionDigits: 6 });
  }
  const unitText = (u) => (u || "").replace(/\^2/g, "²");
  const MONTHS = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"];
  const pad = (n) => String(n).padStart(2, "0");
  const clock = (t) => (t === null || t === undefined) ? "–" :
    new Date(t * 1000).toLocaleTimeString("en-GB", { hour12: false });
  const day = (t) => { const d = new Date(t * 1000); return d.getDate() + " " + MONTHS[d.getMonth()]; };
  // a moment in time: the clock alone when it is today (agent's "now"), else with the date
  function when(t) {
    if (t === null || t === undefined) return "–";
    const now = ui.overview ? ui.overview.now_s : Date.now() / 1000;
    if (day(t) === day(now) && Math.abs(now - t) < 86400) return clock(t);
    const d = new Date(t * 1000);
    return day(t) + " " + pad(d.getHours()) + ":" + pad(d.getMinutes());
  }
  function ago(s) {
    if (s === null || s === undefined) return "never";
    if (s < 90) return Math.round(s) + " s ago";
    if (s < 5400) return Math.round(s / 60) + " min ago";
    return Math.round(s / 3600) + " h ago";
  }

  // --------------------------------------------------------------- state tiles (our own symbols)
  // A tile holds a little trace: calm for normal, taller for warning, a spiky burst for alarm,
  // broken for a sensor fault, dotted while learning, flat when stopped, empty without data.
  const TRACE = {
    normal: '<path d="M4 12 Q6.5 10.4 9 12 T14 12 T19 12" />',
    warning: '<path d="M4 12 Q6.5 6.5 9 12 T14 12 T19 12" />',
    alarm: '<path d="M3.5 12 L6 5 L8.5 19 L11 4 L13.5 19.5 L16 6 L18.5 12 L20.5 12" />',
    sensor_fault: '<path d="M4 12 Q6 9 8 12" /><path d="M10.2 17 L13.6 7" /><path d="M15.5 12 Q17.5 15 19.5 12" />',
    learning: '<path d="M4 12 Q6.5 9.5 9 12 T14 12 T19 12" stroke-dasharray="1.6 2.2" />',
    stopped: '<path d="M4 12 H20" />',
    no_data: '<path d="M9 12 H15" />',
    suppressed: '<path d="M4 12 H20" stroke-dasharray="2 2.5" />',
  };
  function tileSVG(state, big) {
    const s = TRACE[state] ? state : "no_data";
    const hollow = s === "no_data" || s === "suppressed";
    const fill = hollow ? "none" : stateColor(s);
    const stroke = hollow ? stateColor(s) : "#ffffff";
    return '<svg class="tile' + (big ? " big" : "") + ' st-' + s + '" viewBox="0 0 24 24" role="img" aria-label="' +
      STATE_WORDS[s] + '"><rect x="1" y="1" width="22" height="22" rx="5" fill="' + fill + '" stroke="' +
      stateColor(s) + '" stroke-width="' + (hollow ? 1.6 : 0) + '"/><g fill="none" stroke="' + stroke +
      '" stroke-width="2" stroke-linecap="round" stroke-linejoin="round">' + TRACE[s] + "</g></svg>";
  }
  function tile(state, big) { const span = el("span", { html: tileSVG(state, big) }); return span.firstChild; }
  const word = (state) => el("span", { class: "word st-" + (state || "no_data"), text: STATE_WORDS[state] || state });

  // ISO 20816-3 zone ruler: four tinted segments on a scale to 1.6 x the C/D boundary, a pointer at the reading.
  function zoneRuler(value, iso, zone) {
    const [ab, bc, cd] = iso.boundaries_mm_s;
    const top = cd * 1.6, w = 128, h = 22, y = 9, bh = 7, x = (v) => 4 + (w - 22) * Math.min(v, top) / top;
    const segs = [[0, ab, "--zone-a"], [ab, bc, "--zone-b"], [bc, cd, "--zone-c"], [cd, top, "--zone-d"]];
    let svg = '<svg class="ruler" viewBox="0 0 ' + w + " " + h + '" role="img" aria-label="ISO zone ' + (zone || "none") + '">';
    for (const [a, b, v] of segs) svg += '<rect x="' + x(a) + '" y="' + y + '" width="' + (x(b) - x(a)) + '" height="' + bh + '" fill="' + css(v) + '"/>';
    ["A", "B", "C", "D"].forEach((z, i) => {
      const mid = (x(segs[i][0]) + x(segs[i][1])) / 2;
      svg += '<text x="' + mid + '" y="' + (h - 0.5) + '" font-size="6.5" text-anchor="middle" fill="#8a909b">' + z + "</text>";
    });
    if (value !== null && value !== undefined && isFinite(value)) {
      const px = x(value);
      svg += '<path d="M' + (px - 4) + " 1 L" + (px + 4) + " 1 L" + px + " " + (y + 1) + ' Z" fill="#1c2230"/>';
      svg += '<line x1="' + px + '" x2="' + px + '" y1="' + y + '" y2="' + (y + bh) + '" stroke="#1c2230" stroke-width="1.5"/>';
    }
    if (zone) {
      svg += '<circle cx="' + (w - 8) + '" cy="11" r="7.5" fill="#1c2230"/><text x="' + (w - 8) + '" y="14.5" font-size="10" font-weight="700" text-anchor="middle" fill="#f3f1ec">' + zone + "</text>";
    }
    return el("span", { html: svg + "</svg>" }).firstChild;
  }

  // --------------------------------------------------------------- fetching
  async function getJSON(url) {
    const r = await fetch(url, { cache: "no-cache", headers: { Accept: "application/json" } });
    if (!r.ok) throw new Error(url + ": HTTP " + r.status);
    return r.json();
  }

  function setLink(state, text, title) {
    const link = $("#link");
    link.dataset.link = state;
    link.title = title || "";
    // restart the beat animation on every good poll
    if (state === "live") { const b = $(".beat", link); b.style.animation = "none"; void b.offsetWidth; b.style.animation = ""; }
    $("#link-text").textContent = text;
  }

  async function poll() {
    let ov;
    try {
      ov = await getJSON("/api/overview");
    } catch (err) {
      setLink("lost", "no answer from the agent");
      schedule(ui.overview ? ui.overview.poll_interval_s : 3);
      return;
    }
    ui.overview = ov;
    ui.lastOk = Date.now();
    const inp = ov.input || {};
    renderClockNotice(inp);
    const anyStale = ov.machines.some((m) => m.stale && m.age_s !== null);
    if (inp.state === "ended") setLink("ended", "input ended · last state held", inp.reason);
    else setLink(anyStale ? "stale" : "live", anyStale ? "agent answers, data stale" : "live · " + clock(ov.now_s));
    renderOverview(ov);
    ensureSelection(ov);
    const m = ov.machines.find((x) => x.id === ui.machine);
    if (m && (ui.pointRevision !== m.revision + ":" + ui.point || !ui.pointData)) {
      await loadPoint();
    }
    document.body.dataset.ready = "1";
    document.body.dataset.revision = String(ov.revision);
    schedule(ov.poll_interval_s || 3);
  }
  function schedule(s) {
    clearTimeout(ui.pollTimer);
    ui.pollTimer = setTimeout(poll, Math.max(0.5, s) * 1000);
  }

  async function loadPoint() {
    if (!ui.machine || !ui.point) return;
    const key = encodeURIComponent(ui.machine) + "/" + encodeURIComponent(ui.point);
    try {
      const [pd, td] = await Promise.all([getJSON("/api/point/" + key), getJSON("/api/trend/" + key)]);
      if (pd.machine !== ui.machine || pd.point !== ui.point) return;  // selection moved meanwhile
      ui.pointData = pd;
      ui.trendData = td;
      ui.pointRevision = pd.revision + ":" + ui.point;
      renderPoint();
    } catch (err) {
      setLink("lost", "point data unavailable");
    }
  }

  // Simulated or recorded input carries its own time, faster than the wall clock: say so wherever a
  // date or time of the data is shown.
  function renderClockNotice(inp) {
    const box = $("#clock-notice");
    const sped = inp.clock && inp.clock !== "wall";
    box.hidden = !sped;
    box.dataset.clock = inp.clock || "wall";
    if (!sped) { $("#events-hint").textContent = "newest first"; return; }
    box.textContent = inp.notice;
    box.title = "Dates and times of readings on this page are the " + (inp.clock === "simulated" ? "simulation's" : "recording's") +
      " own" + (inp.speedup > 1 ? ", running " + fmt(inp.speedup, 6) + " times faster than the wall clock" : "") +
      "; the clock in the corner is the wall clock.";
    $("#events-hint").textContent = "newest first · " + inp.notice;
  }
  function dataTimeNote() {
    const inp = (ui.overview && ui.overview.input) || {};
    return inp.clock === "simulated" ? " (simulated time)" : inp.clock === "recording" ? " (recording time)" : "";
  }

  // --------------------------------------------------------------- selection
  function ensureSelection(ov) {
    const sel = $("#point-select");
    const options = [];
    for (const m of ov.machines) for (const p of m.points) options.push([m.id + "/" + p.id, m.id + " · " + p.name]);
    const sig = options.map((o) => o[0]).join("|");
    if (sel.dataset.sig !== sig) {
      sel.replaceChildren(...options.map(([v, t]) => el("option", { value: v, text: t })));
      sel.dataset.sig = sig;
    }
    const valid = (m, p) => ov.machines.some((x) => x.id === m && x.points.some((y) => y.id === p));
    if (!valid(ui.machine, ui.point)) {
      const h = new URLSearchParams(location.hash.slice(1));
      if (valid(h.get("m"), h.get("p"))) { ui.machine = h.get("m"); ui.point = h.get("p"); }
      else if (options.length) { [ui.machine, ui.point] = options[0][0].split("/"); }
      ui.pointData = null;
    }
    sel.value = ui.machine + "/" + ui.point;
    markSelected();
  }
  function select(machineId, pointId) {
    if (machineId === ui.machine && pointId === ui.point) return;
    ui.machine = machineId; ui.point = pointId; ui.pointData = null; ui.trendData = null; ui.pointRevision = null;
    history.replaceState(null, "", "#m=" + encodeURIComponent(machineId) + "&p=" + encodeURIComponent(pointId));
    $("#point-select").value = machineId + "/" + pointId;
    markSelected();
    loadPoint();
  }
  function markSelected() {
    document.querySelectorAll(".points li").forEach((li) => {
      li.setAttribute("aria-selected", String(li.dataset.machine === ui.machine && li.dataset.point === ui.point));
    });
  }

  // --------------------------------------------------------------- overview (left rail)
  function renderOverview(ov) {
    $("#site-name").textContent = ov.site.name || ov.site.agent_id;
    $("#agent-id").textContent = "agent " + ov.site.agent_id;
    document.title = worstState(ov) + " · " + (ov.site.name || ov.site.agent_id) + " · rotorwatch";
    const cards = ov.machines.map((m) => {
      const points = m.points.map((p) => el("li", {
        "data-machine": m.id, "data-point": p.id, "data-state": p.state,
        "data-overall": p.overall_mm_s === null ? "" : p.overall_mm_s, "data-zone": p.zone || "",
        title: unitText(p.reason), onclick: () => select(m.id, p.id),
      }, [
        tile(p.state),
        el("span", { class: "pt-name", text: p.name }),
        el("div", { class: "pt-sub" }, [
          el("span", { class: "pt-state" }, [word(p.state), document.createTextNode(p.sensor && !p.sensor.ok && p.sensor.fault ? " · " + p.sensor.fault : ""),
            pendingNote(p.values, "inline")]),
          el("span", { class: "pt-overall", text: p.overall_mm_s === null ? "–" : fmt(p.overall_mm_s) + " mm/s" }),
          zoneRuler(p.overall_mm_s, m.iso, p.zone),
        ]),
      ]));
      const facts = [
        el("span", {}, [document.createTextNode("speed "), el("b", { text: m.rpm === null ? "–" : fmt(m.rpm, 4) + " r/min" }),
          document.createTextNode(m.rpm_source ? " (" + m.rpm_source + ")" : "")]),
        el("span", { class: m.stale && m.age_s !== null ? "stale" : "", text: m.age_s === null ? "no update yet" : "updated " + ago(m.age_s) + (m.stale ? " · stale" : "") }),
        el("span", { text: "ISO group " + m.iso.group + ", " + m.iso.support }),
      ];
      return el("article", { class: "machine st-" + m.state, "data-machine": m.id, "data-state": m.state }, [
        el("div", { class: "machine-head" }, [
          tile(m.state, true),
          el("div", {}, [
            el("div", { class: "machine-name", text: m.name }),
            el("div", { class: "machine-state" }, [word(m.state)]),
          ]),
        ]),
        el("div", { class: "reason", text: unitText(m.reason) }),
        el("div", { class: "facts" }, facts),
        el("ul", { class: "points" }, points),
      ]);
    });
    $("#machines").replaceChildren(...cards);
    markSelected();
    renderEvents(ov.events);
    const actions = $("#actions");
    actions.hidden = !(ov.actions && ov.actions.length);
    $("#ack-button").hidden = !(ov.actions || []).includes("acknowledge");
    $("#snap-button").hidden = !(ov.actions || []).includes("snapshot");
  }
  function worstState(ov) {
    const order = ["alarm", "warning", "sensor_fault", "no_data", "learning", "normal", "stopped"];
    let best = order.length - 1;
    for (const m of ov.machines) { const i = order.indexOf(m.state); if (i >= 0 && i < best) best = i; }
    return STATE_WORDS[order[best]];
  }

  function renderEvents(events) {
    const list = $("#events");
    if (!events || !events.length) {
      list.replaceChildren(el("li", { class: "none", text: "No state changes since the agent started." }));
      return;
    }
    list.replaceChildren(...events.slice(0, 60).map((e) => el("li", { "data-to": e.to }, [
      el("time", { text: when(e.time_s) }),
      tile(e.to),
      el("span", {}, [
        el("b", { text: e.machine + (e.point ? "/" + e.point : "") + " " + e.value + ": " }),
        document.createTextNode((STATE_WORDS[e.from] || e.from) + " → " + (STATE_WORDS[e.to] || e.to) +
          (e.reading !== null ? " at " + fmt(e.reading) + " " + unitText(e.unit) : "")),
      ]),
      el("span", { class: "ev-reason", text: unitText(e.reason) }),
    ])));
  }

  // --------------------------------------------------------------- point detail
  function renderPoint() {
    const pd = ui.pointData;
    if (!pd) return;
    const head = $("#point-head");
    const overall = el("div", { class: "overall-big" }, [
      el("div", { class: "num", text: pd.overall_mm_s === null || pd.overall_mm_s === undefined ? "–" : fmt(pd.overall_mm_s) }),
      el("div", { class: "unit", text: "mm/s RMS overall" + (pd.zone ? " · zone " + pd.zone : "") }),
    ]);
    head.replaceChildren(
      tile(pd.state, true),
      el("div", { class: "ph-text" }, [
        el("div", { class: "title" }, [document.createTextNode(pd.name + "  "), word(pd.state), pendingNote(pd.values, "inline")]),
        el("div", { class: "reason", text: unitText(pd.reason) + (pd.time_s ? " · analyzed " + when(pd.time_s) + dataTimeNote() : "") }),
      ]),
      overall,
    );
    head.dataset.state = pd.state;
    renderControls();
    drawSpectrum();
    renderValues();
    drawWaveform();
    renderTrendSelect();
    drawTrend();
  }

  function renderControls() {
    const pd = ui.pointData;
    document.querySelectorAll("#quantity-seg button").forEach((b) => {
      b.setAttribute("aria-pressed", String(b.dataset.q === ui.quantity));
      b.disabled = !(pd && pd.spectra && pd.spectra[b.dataset.q]);
    });
    document.querySelectorAll("#scale-seg button").forEach((b) => b.setAttribute("aria-pressed", String(b.dataset.scale === ui.scale)));
    const spec = pd && pd.spectra ? pd.spectra[ui.quantity] : null;
    const sel = $("#span-select");
    const fmax = spec ? spec.fmax_hz : null;
    const opts = [["auto", "auto"]].concat(SPANS_HZ.filter((s) => fmax && s < fmax).map((s) => [String(s), fmt(s) + " Hz"]));
    if (fmax) opts.push(["full", "full " + fmt(fmax) + " Hz"]);
    const sig = opts.map((o) => o[0]).join("|");
    if (sel.dataset.sig !== sig) { sel.replaceChildren(...opts.map(([v, t]) => el("option", { value: v, text: t }))); sel.dataset.sig = sig; }
    sel.value = String(ui.span[ui.quantity] || "auto");
    // marker chips for the families this point has
    const have = new Set((pd && pd.markers ? pd.markers : []).map((m) => m.family));
    const chips = Object.keys(FAMILY).filter((f) => have.has(f)).map((f) => {
      const on = ui.families[ui.quantity].includes(f);
      const bearing = (pd.markers.find((m) => m.family === f) || {}).bearing;
      return el("button", { type: "button", class: "chip", "aria-pressed": String(on), "data-family": f,
        title: bearing ? "bearing " + bearing : "", onclick: () => toggleFamily(f) }, [
        el("span", { class: "sw", html: "" }), document.createTextNode(FAMILY[f].label),
      ]);
    });
    $("#marker-chips").replaceChildren(...chips);
    chips.forEach((c) => { c.firstChild.style.background = FAMILY[c.dataset.family].color; });
  }
  function toggleFamily(f) {
    const list = ui.families[ui.quantity];
    const i = list.indexOf(f);
    if (i >= 0) list.splice(i, 1); else list.push(f);
    renderControls();
    drawSpectrum();
  }

  // --------------------------------------------------------------- canvas helpers
  function canvasFor(plotId) {
    const plot = document.getElementById(plotId);
    const canvas = $("canvas", plot);
    const dpr = window.devicePixelRatio || 1;
    const w = Math.max(50, plot.clientWidth), h = Math.max(50, plot.clientHeight);
    if (canvas.width !== Math.round(w * dpr) || canvas.height !== Math.round(h * dpr)) {
      canvas.width = Math.round(w * dpr); canvas.height = Math.round(h * dpr);
    }
    const ctx = canvas.getContext("2d");
    ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    ctx.clearRect(0, 0, w, h);
    return { plot, canvas, ctx, w, h };
  }
  function niceStep(range, target) {
    const raw = range / Math.max(1, target), mag = Math.pow(10, Math.floor(Math.log10(raw)));
    const n = raw / mag;
    return (n < 1.5 ? 1 : n < 3.5 ? 2 : n < 7.5 ? 5 : 10) * mag;
  }
  function axes(ctx, box, xTicks, yTicks, xLabel, yLabel) {
    ctx.save();
    ctx.font = "11px " + css("--sans");
    ctx.fillStyle = css("--ink-3");
    ctx.strokeStyle = css("--rule-soft");
    ctx.lineWidth = 1;
    for (const [v, px, label] of yTicks) {
      ctx.beginPath(); ctx.moveTo(box.x0, px + 0.5); ctx.lineTo(box.x1, px + 0.5); ctx.stroke();
      ctx.textAlign = "right"; ctx.textBaseline = "middle"; ctx.fillText(label, box.x0 - 6, px);
    }
    for (const [v, px, label] of xTicks) {
      ctx.beginPath(); ctx.moveTo(px + 0.5, box.y0); ctx.lineTo(px + 0.5, box.y1); ctx.stroke();
      ctx.textBaseline = "top";
      ctx.textAlign = px > box.x1 - 24 ? "right" : px < box.x0 + 24 ? "left" : "center";
      ctx.fillText(label, px, box.y1 + 5);
    }
    ctx.strokeStyle = css("--rule");
    ctx.strokeRect(box.x0 + 0.5, box.y0 + 0.5, box.x1 - box.x0, box.y1 - box.y0);
    ctx.fillStyle = css("--ink-2");
    ctx.textAlign = "right"; ctx.textBaseline = "bottom";
    if (xLabel) ctx.fillText(xLabel, box.x1, box.y1 + 26);
    if (yLabel) {  // along the axis, left of the tick labels: the space above the plot is the markers'
      ctx.save(); ctx.translate(12, (box.y0 + box.y1) / 2); ctx.rotate(-Math.PI / 2);
      ctx.textAlign = "center"; ctx.textBaseline = "middle"; ctx.fillText(yLabel, 0, 0);
      ctx.restore();
    }
    ctx.restore();
  }
  function linearTicks(lo, hi, target, toPx, digits) {
    const step = niceStep(hi - lo, target), out = [];
    for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) out.push([v, toPx(v), fmt(v, digits || 3)]);
    return out;
  }
  const REGION_FILL = { normal: "rgba(47,117,102,0.10)", warning: "rgba(191,130,14,0.20)", alarm: "rgba(173,41,70,0.20)",
    learning: "rgba(106,94,166,0.10)", null: "rgba(85,93,108,0.08)" };

  // --------------------------------------------------------------- spectrum
  function spanFor(spec, pd) {
    const choice = ui.span[ui.quantity] || "auto";
    if (choice === "full") return spec.fmax_hz;
    if (choice !== "auto") return Math.min(Number(choice), spec.fmax_hz);
    if (ui.quantity === "velocity") {
      const ov = (pd.regions || []).find((r) => r.kind === "overall");
      if (ov) return Math.min(spec.fmax_hz, ov.parts_hz[0][1] * 1.05);
    }
    return spec.fmax_hz;
  }

  function drawSpectrum() {
    const pd = ui.pointData;
    const plot = $("#spectrum");
    const spec = pd && pd.spectra ? pd.spectra[ui.quantity] : null;
    $(".empty", plot).hidden = !!spec;
    const { ctx, w, h } = canvasFor("spectrum");
    if (!spec) {
      Object.assign(plot.dataset, { drawn: "0", quantity: ui.quantity, points: "0", markers: "0", regions: "0" });
      $("#spectrum-info").textContent = "";
      return;
    }
    const fams = ui.families[ui.quantity];
    const shown = (pd.markers || []).filter((m) => fams.includes(m.family) && m.freq_hz > 0 && m.freq_hz <= spanFor(spec, pd));
    const box = { x0: 62, x1: w - 12, y0: 22 + LABEL_ROW_PX, y1: h - 30 };  // y0 grows with the label rows
    const fmax = spanFor(spec, pd);
    const f = spec.freqs_hz, a = spec.amplitude;
    let ymax = 0, ymin = Infinity, nIn = 0;
    for (let i = 0; i < f.length; i++) {
      if (f[i] > fmax) break;
      const v = a[i];
      if (v === null) continue;
      nIn++;
      if (v > ymax) ymax = v;
      if (v > 0 && v < ymin) ymin = v;
    }
    if (!(ymax > 0)) ymax = 1;
    const log = ui.scale === "log";
    let yLo, yHi;
    if (log) {
      yHi = Math.pow(10, Math.ceil(Math.log10(ymax * 1.5)));
      yLo = Math.max(isFinite(ymin) ? Math.pow(10, Math.floor(Math.log10(ymin))) : yHi / 1e4, yHi / 1e5);
    } else { yLo = 0; yHi = ymax * 1.12; }
    const X = (v) => box.x0 + (box.x1 - box.x0) * v / fmax;
    // marker labels above the plot: fundamentals first, each on the first of at most LABEL_ROWS rows
    // where it overlaps nothing, kept inside the canvas; the plot starts below the rows used. A label
    // that finds no room is left out (its flag and line stay) and counted.
    const placed = [];
    let hidden = 0;
    ctx.save();
    ctx.font = LABEL_FONT_PX + "px " + css("--sans");
    for (const m of shown.slice().sort((p, q) => (p.k - q.k) || (p.freq_hz - q.freq_hz))) {
      const px = Math.round(X(m.freq_hz)) + 0.5;
      const tw = ctx.measureText(m.label).width;
      const left = Math.min(Math.max(px - tw / 2, 2), w - 2 - tw);
      let row = -1;
      for (let r = 0; r < LABEL_ROWS && row < 0; r++) {
        if (!placed.some((l) => l.row === r && left < l.x + l.w + LABEL_GAP_PX && l.x < left + tw + LABEL_GAP_PX)) row = r;
      }
      if (row < 0) { hidden++; continue; }
      placed.push({ row, x: left, w: tw, label: m.label, k: m.k, family: m.family, px });
    }
    ctx.restore();
    box.y0 = 22 + LABEL_ROW_PX * Math.max(1, ...placed.map((l) => l.row + 1));
    for (const l of placed) { l.base = box.y0 - 9 - l.row * LABEL_ROW_PX; l.y = l.base - LABEL_FONT_PX; l.h = LABEL_FONT_PX + 2; }
    const Y = log
      ? (v) => box.y1 - (box.y1 - box.y0) * (Math.log10(Math.max(v, yLo)) - Math.log10(yLo)) / (Math.log10(yHi) - Math.log10(yLo))
      : (v) => box.y1 - (box.y1 - box.y0) * (v - yLo) / (yHi - yLo);

    // band regions first (behind everything)
    let nRegions = 0;
    ctx.save();
    for (const r of pd.regions || []) {
      if (r.quantity !== ui.quantity) continue;
      for (const [lo, hi] of r.parts_hz) {
        if (lo >= fmax) continue;
        nRegions++;
        const x0 = X(lo), x1 = Math.max(X(Math.min(hi, fmax)), x0 + 2);
        if (r.kind === "band") {
          ctx.fillStyle = REGION_FILL[r.state] || REGION_FILL.null;
          ctx.fillRect(x0, box.y0, x1 - x0, box.y1 - box.y0);
        } else {
          // the overall range and the demodulation band: a bracket under the top edge
          ctx.strokeStyle = css("--ink-3"); ctx.lineWidth = 1.2;
          const yb = box.y0 + 8;
          ctx.beginPath(); ctx.moveTo(x0, yb + 5); ctx.lineTo(x0, yb); ctx.lineTo(x1, yb); ctx.lineTo(x1, yb + 5); ctx.stroke();
          ctx.fillStyle = css("--ink-2"); ctx.font = "11px " + css("--sans"); ctx.textAlign = "left"; ctx.textBaseline = "bottom";
          ctx.fillText(r.kind === "overall" ? "overall " + fmt(lo) + "–" + fmt(hi) + " Hz" : "envelope band " + fmt(lo) + "–" + fmt(hi) + " Hz",
            Math.min(x0 + 4, box.x1 - 150), yb + 16);
        }
      }
    }
    ctx.restore();

    const xt = linearTicks(0, fmax, Math.max(4, Math.floor((box.x1 - box.x0) / 90)), X, 4);
    let yt;
    if (log) {
      yt = [];
      for (let e = Math.round(Math.log10(yLo)); e <= Math.round(Math.log10(yHi)); e++) yt.push([Math.pow(10, e), Y(Math.pow(10, e)), fmt(Math.pow(10, e), 1)]);
    } else yt = linearTicks(0, yHi, 5, Y);
    axes(ctx, box, xt, yt, "Hz", unitText(spec.unit) + " RMS");

    // marker lines BEHIND the trace, light: a marker never hides the peak it marks
    ctx.save();
    ctx.beginPath(); ctx.rect(box.x0, box.y0, box.x1 - box.x0, box.y1 - box.y0); ctx.clip();
    for (const m of shown) {
      const px = Math.round(X(m.freq_hz)) + 0.5;
      ctx.strokeStyle = FAMILY[m.family].color;
      ctx.globalAlpha = m.k === 1 ? 0.55 : 0.35;
      ctx.setLineDash(m.k === 1 ? [] : [3, 3]);
      ctx.lineWidth = 1;
      ctx.beginPath(); ctx.moveTo(px, box.y0); ctx.lineTo(px, box.y1); ctx.stroke();
    }
    ctx.restore();

    // trace
    ctx.save();
    ctx.beginPath(); ctx.rect(box.x0, box.y0, box.x1 - box.x0, box.y1 - box.y0); ctx.clip();
    ctx.beginPath();
    let started = false;
    for (let i = 0; i < f.length && f[i] <= fmax * 1.001; i++) {
      if (a[i] === null) continue;
      const px = X(f[i]), py = Y(a[i]);
      if (!started) { ctx.moveTo(px, box.y1); ctx.lineTo(px, py); started = true; } else ctx.lineTo(px, py);
    }
    ctx.strokeStyle = css("--trace"); ctx.lineWidth = 1.3; ctx.lineJoin = "round"; ctx.stroke();
    ctx.restore();

    // flags on top of the plot edge, then the labels placed above
    ctx.save();
    ctx.font = LABEL_FONT_PX + "px " + css("--sans"); ctx.textBaseline = "alphabetic"; ctx.textAlign = "left";
    for (const m of shown) {
      const px = Math.round(X(m.freq_hz)) + 0.5;
      ctx.fillStyle = FAMILY[m.family].color;
      ctx.beginPath(); ctx.moveTo(px - 3.5, box.y0 - 7); ctx.lineTo(px + 3.5, box.y0 - 7); ctx.lineTo(px, box.y0); ctx.closePath(); ctx.fill();
    }
    for (const l of placed) {
      ctx.fillStyle = FAMILY[l.family].color;
      ctx.globalAlpha = l.k === 1 ? 1 : 0.8;
      ctx.fillText(l.label, l.x, l.base);
      if (l.row > 0) {  // a thin leader from the label down to its flag, past the rows below
        ctx.globalAlpha = 0.45; ctx.strokeStyle = FAMILY[l.family].color; ctx.lineWidth = 1;
        ctx.beginPath(); ctx.moveTo(l.px, l.base + 2); ctx.lineTo(l.px, box.y0 - 7); ctx.stroke();
      }
      ctx.globalAlpha = 1;
    }
    ctx.restore();
    const nMarkers = shown.length;

    Object.assign(plot.dataset, { drawn: "1", quantity: ui.quantity, scale: ui.scale, points: String(nIn),
      markers: String(nMarkers), regions: String(nRegions), spanHz: String(fmax), revision: String(pd.revision),
      labels: JSON.stringify(placed.map((l) => ({ label: l.label, k: l.k, family: l.family, x: l.x, y: l.y, w: l.w, h: l.h, px: l.px }))),
      labelsHidden: String(hidden),
      geometry: JSON.stringify({ x0: box.x0, x1: box.x1, y0: box.y0, y1: box.y1, fmax, yLo, yHi, log, width: w, height: h }) });
    $("#spectrum-info").textContent = spec.n_lines + " lines · Δf " + fmt(spec.resolution_hz) + " Hz · " +
      (pd.rpm ? fmt(pd.rpm, 4) + " r/min" : "speed unknown");
    ui.spectrumGeom = { box, X, fmax, f, a, unit: spec.unit };
  }

  function spectrumHover(ev) {
    const g = ui.spectrumGeom, pd = ui.pointData;
    const out = $("#spectrum-readout");
    if (!g || !pd) return;
    const rect = ev.currentTarget.getBoundingClientRect();
    const x = ev.clientX - rect.left;
    if (x < g.box.x0 || x > g.box.x1) { out.textContent = ""; return; }
    const fHz = (x - g.box.x0) / (g.box.x1 - g.box.x0) * g.fmax;
    // the largest line within +/- 3 px
    const tol = 3 * g.fmax / (g.box.x1 - g.box.x0);
    let best = -1;
    for (let i = 0; i < g.f.length; i++) {
      if (g.f[i] < fHz - tol) continue;
      if (g.f[i] > fHz + tol) break;
      if (best < 0 || g.a[i] > g.a[best]) best = i;
    }
    if (best < 0) { out.textContent = fmt(fHz, 4) + " Hz"; return; }
    const near = (pd.markers || []).filter((m) => ui.families[ui.quantity].includes(m.family) && Math.abs(m.freq_hz - g.f[best]) <= Math.max(tol, g.f[best] * 0.03));
    out.textContent = fmt(g.f[best], 5) + " Hz  " + fmt(g.a[best], 3) + " " + unitText(g.unit) +
      (near.length ? "  ≈ " + near.map((m) => m.label + (m.bearing ? " " + m.bearing : "")).join(", ") : "");
  }

  // --------------------------------------------------------------- values table
  function gaugeSVG(row) {
    const top = row.alarm ? row.alarm * 1.3 : row.warning ? row.warning * 1.6 : (row.value || 1) * 1.5;
    const w = 160, h = 16, x = (v) => 1 + (w - 2) * Math.min(Math.max(v, 0), top) / top;
    let s = '<svg class="gauge" viewBox="0 0 ' + w + " " + h + '" preserveAspectRatio="none">';
    s += '<rect x="1" y="5" width="' + (w - 2) + '" height="6" rx="3" fill="#ece8dc"/>';
    if (row.value !== null) s += '<rect x="1" y="5" width="' + Math.max(2, x(row.value) - 1) + '" height="6" rx="3" fill="' + stateColor(row.state === "normal" ? "normal" : row.state) + '"/>';
    if (row.warning) s += '<rect x="' + (x(row.warning) - 1) + '" y="1" width="2" height="14" fill="' + stateColor("warning") + '"/>';
    if (row.alarm) s += '<rect x="' + (x(row.alarm) - 1) + '" y="1" width="2" height="14" fill="' + stateColor("alarm") + '"/>';
    return s + "</svg>";
  }
  // A value at or above a level whose on-delay is still running: "alarm pending".
  function pendingNote(rows, how) {
    const p = (rows || []).filter((r) => r.pending);
    if (!p.length) return null;
    const kind = p.some((r) => r.pending === "alarm") ? "alarm" : "warning";
    const names = p.filter((r) => r.pending === kind).map((r) => r.name).join(", ");
    return el("span", { class: "pending pending-" + kind + (how === "inline" ? " inline" : ""), "data-pending": kind,
      title: names + " at or above its " + kind + " level, waiting out the on-delay",
      text: (how === "inline" ? " · " : "") + kind + " pending" });
  }
  function renderValues() {
    const pd = ui.pointData;
    const rows = (pd.values || []).map((r) => el("tr", {
      "data-value": r.name, "data-state": r.state, "data-reading": r.value === null ? "" : r.value,
      "data-pending": r.pending || "",
      "aria-selected": String(r.name === ui.trendValue),
      title: r.baseline !== null ? "baseline " + fmt(r.baseline) + " " + unitText(r.unit) : "no baseline yet",
      onclick: () => { ui.trendValue = r.name; if (pd.spectra && pd.spectra[r.quantity]) ui.quantity = r.quantity; renderPoint(); },
    }, [
      el("td", {}, [tile(r.state)]),
      el("td", {}, [el("span", { class: "vname", text: r.name }), el("span", { class: "vq", text: QUANTITY_WORD[r.quantity] || r.quantity }),
        r.pending ? el("span", { class: "pending pending-" + r.pending, title: "at or above its " + r.pending +
          " level, waiting out the on-delay", text: r.pending + " pending (on-delay)" }) : null]),
      el("td", { class: "num" }, [el("span", { class: "reading", text: fmt(r.value) }), document.createTextNode(" "), el("span", { class: "unit", text: unitText(r.unit) })]),
      el("td", { html: gaugeSVG(r) }),
      el("td", { class: "num levels", text: fmt(r.warning) + " / " + fmt(r.alarm) + (r.latched ? " · held" : "") }),
    ]));
    $("#values tbody").replaceChildren(...rows);
    const fnd = (pd.findings || []).map((f) => f.kind && f.kind !== "bearing"
      // shaft, drive, flow, electrical and gear findings: their sentence, severity in mm/s and confidence
      ? el("div", { class: "finding" }, [
        el("b", { text: f.name + ": " }),
        document.createTextNode(f.sentence + " Severity " + fmt(f.severity_mm_s) + " mm/s, confidence " + f.confidence + "."),
      ])
      : el("div", { class: "finding" }, [
      el("b", { text: f.name + " on " + f.bearing + ": " }),
      document.createTextNode("severity " + fmt(f.severity_m_s2) + " " + unitText("m/s^2") + " (envelope), line at " +
        fmt(f.measured_hz, 4) + " Hz (expected " + fmt(f.expected_hz, 4) + " Hz), " + f.harmonics_found +
        " harmonic(s), " + fmt(f.prominence_db, 3) + " dB over the local floor"),
    ]));
    $("#findings").replaceChildren(...fnd);
  }

  // --------------------------------------------------------------- waveform
  function drawWaveform() {
    const pd = ui.pointData;
    const plot = $("#waveform");
    const wf = pd.waveform;
    $(".empty", plot).hidden = !!wf;
    const { ctx, w, h } = canvasFor("waveform");
    const st = pd.stats;
    const stats = $("#wave-stats");
    stats.replaceChildren(...(st ? [["Peak", st.peak_m_s2, "m/s²"], ["RMS", st.rms_m_s2, "m/s²"], ["Crest", st.crest_factor, ""],
      ["Kurtosis", st.kurtosis, ""], ["Mean", st.mean_m_s2, "m/s²"]] : []).map(([k, v, u]) =>
      el("div", {}, [el("dt", { text: k }), el("dd", { text: fmt(v) + (u ? " " + u : "") })])),
      // with a tach: 1x and 2x locked to the pulse, velocity RMS, phase at the pulse and the locked frequency
      ...(pd.orders || []).map((o) => el("div", { class: "order", "data-order": o.order }, [
        el("dt", { text: o.order + " (tach)" }),
        el("dd", { text: fmt(o.velocity_mm_s) + " mm/s ∠ " + fmt(o.phase_deg, 4) + "° at " + fmt(o.frequency_hz, 5) + " Hz" })])));
    if (!wf) { plot.dataset.drawn = "0"; $("#waveform-info").textContent = ""; return; }
    const box = { x0: 58, x1: w - 12, y0: 24, y1: h - 30 };
    let amax = 0;
    for (const v of wf.values) if (v !== null && Math.abs(v) > amax) amax = Math.abs(v);
    amax = amax > 0 ? amax * 1.1 : 1;
    const tmax = wf.t_ms.length ? wf.t_ms[wf.t_ms.length - 1] : 1;
    const X = (t) => box.x0 + (box.x1 - box.x0) * t / (tmax || 1);
    const Y = (v) => box.y0 + (box.y1 - box.y0) * (amax - v) / (2 * amax);
    axes(ctx, box, linearTicks(0, tmax, 6, X), linearTicks(-amax, amax, 4, Y), "ms", "m/s²");
    ctx.save();
    ctx.strokeStyle = css("--ink-3"); ctx.beginPath(); ctx.moveTo(box.x0, Y(0)); ctx.lineTo(box.x1, Y(0)); ctx.stroke();
    ctx.beginPath();
    wf.t_ms.forEach((t, i) => { const v = wf.values[i] === null ? 0 : wf.values[i]; if (i === 0) ctx.moveTo(X(t), Y(v)); else ctx.lineTo(X(t), Y(v)); });
    ctx.strokeStyle = css("--trace"); ctx.lineWidth = 1; ctx.stroke();
    ctx.restore();
    plot.dataset.drawn = "1";
    plot.dataset.points = String(wf.values.length);
    $("#waveform-info").textContent = "last " + fmt(wf.span_s * 1000) + " ms of " + fmt(wf.fs_hz / 1000, 4) + " kHz samples";
  }

  // --------------------------------------------------------------- trend
  function renderTrendSelect() {
    const td = ui.trendData;
    const sel = $("#trend-select");
    const names = td ? td.series.map((s) => s.name) : [];
    if (!names.includes(ui.trendValue) && names.length) ui.trendValue = names[0];
    const sig = names.join("|");
    if (sel.dataset.sig !== sig) { sel.replaceChildren(...names.map((n) => el("option", { value: n, text: n }))); sel.dataset.sig = sig; }
    sel.value = ui.trendValue;
  }
  function drawTrend() {
    const td = ui.trendData;
    const plot = $("#trend");
    const { ctx, w, h } = canvasFor("trend");
    const s = td ? td.series.find((x) => x.name === ui.trendValue) : null;
    renderProjection();
    if (!td || !s || !td.time_s.length) { plot.dataset.samples = "0"; return; }
    const t = td.time_s;
    const box = { x0: 58, x1: w - 12, y0: 24, y1: h - 30 };
    let ymax = 0;
    for (const arr of [s.values, s.warning, s.alarm]) for (const v of arr) if (v !== null && v > ymax) ymax = v;
    ymax = ymax > 0 ? ymax * 1.15 : 1;
    const t0 = t[0], t1 = t.length > 1 ? t[t.length - 1] : t0 + 1;
    const X = (v) => box.x0 + (box.x1 - box.x0) * (v - t0) / (t1 - t0 || 1);
    const Y = (v) => box.y1 - (box.y1 - box.y0) * v / ymax;
    const span = t1 - t0;
    const long = span > 86400;
    const target = Math.max(3, Math.floor((box.x1 - box.x0) / (long ? 110 : 80)));
    const STEPS = [1, 2, 5, 10, 15, 30, 60, 120, 300, 600, 900, 1800, 3600, 7200, 10800, 21600, 43200,
      86400, 172800, 345600, 604800, 1209600, 2592000];
    const step = STEPS.find((st) => span / st <= target) || 2592000;
    const label = (v) => step >= 86400 ? day(v) : long ? day(v) + " " + clock(v).slice(0, 5) : clock(v).slice(0, step >= 60 ? 5 : 8);
    // whole days start at local midnight
    const offset = new Date(t0 * 1000).getTimezoneOffset() * 60;
    const xt = [];
    for (let v = Math.ceil((t0 - offset) / step) * step + offset; v <= t1 && xt.length < 40; v += step) xt.push([v, X(v), label(v)]);
    axes(ctx, box, xt, linearTicks(0, ymax, 4, Y), dataTimeNote().trim(), unitText(s.unit));
    ctx.save();
    const stepLine = (arr, color) => {
      ctx.beginPath(); let on = false;
      arr.forEach((v, i) => {
        if (v === null) { on = false; return; }
        const x = X(t[i]), y = Y(v);
        if (!on) { ctx.moveTo(x, y); on = true; } else { ctx.lineTo(x, Y(arr[i - 1])); ctx.lineTo(x, y); }
      });
      ctx.strokeStyle = color; ctx.setLineDash([6, 4]); ctx.lineWidth = 1.5; ctx.stroke(); ctx.setLineDash([]);
    };
    stepLine(s.warning, stateColor("warning"));
    stepLine(s.alarm, stateColor("alarm"));
    ctx.beginPath(); let on = false;
    s.values.forEach((v, i) => { if (v === null) { on = false; return; } if (!on) { ctx.moveTo(X(t[i]), Y(v)); on = true; } else ctx.lineTo(X(t[i]), Y(v)); });
    ctx.strokeStyle = css("--trace"); ctx.lineWidth = 1.6; ctx.stroke();
    if (s.values.length <= 120) {
      s.values.forEach((v, i) => {
        if (v === null) return;
        ctx.fillStyle = stateColor(s.state[i] || "normal");
        ctx.beginPath(); ctx.arc(X(t[i]), Y(v), 2.6, 0, 2 * Math.PI); ctx.fill();
      });
    }
    ctx.restore();
    plot.dataset.samples = String(s.values.length);
    plot.dataset.value = s.name;
    plot.dataset.last = String(s.values[s.values.length - 1]);
    ui.trendGeom = { box, X, t, s };
  }
  // the selected value's time to its levels, from its recent trend (alarms.projection)
  function renderProjection() {
    const out = $("#trend-projection");
    const row = ((ui.pointData && ui.pointData.values) || []).find((r) => r.name === ui.trendValue);
    const p = row ? row.projection : null;
    out.dataset.status = p ? p.status : "";
    out.textContent = p ? "Time to level: " + unitText(p.text) : "";
  }
  function trendHover(ev) {
    const g = ui.trendGeom, out = $("#trend-readout");
    if (!g) return;
    const x = ev.clientX - ev.currentTarget.getBoundingClientRect().left;
    let best = -1, bd = Infinity;
    g.t.forEach((tt, i) => { const d = Math.abs(g.X(tt) - x); if (d < bd) { bd = d; best = i; } });
    if (best < 0 || bd > 30) { out.textContent = ""; return; }
    out.textContent = when(g.t[best]) + "  " + fmt(g.s.values[best]) + " " + unitText(g.s.unit) + "  (" + (STATE_WORDS[g.s.state[best]] || g.s.state[best] || "–") + ")";
  }

  // --------------------------------------------------------------- actions (only with a token on the agent)
  async function action(kind) {
    const out = $("#action-result");
    let token = ui.token || sessionStorage.getItem("rw-token");
    if (!token) { token = window.prompt("Token for " + kind + " (from the agent's token file):"); if (!token) return; }
    const r = await fetch("/api/" + kind + "/" + encodeURIComponent(ui.machine), {
      method: "POST", headers: { "Content-Type": "application/json", Authorization: "Bearer " + token },
      body: JSON.stringify({ point: ui.point, value: kind === "acknowledge" ? ui.trendValue : null }),
    });
    const body = await r.json().catch(() => ({}));
    if (r.status === 401) { sessionStorage.removeItem("rw-token"); ui.token = null; out.textContent = "wrong token"; return; }
    if (r.ok) { ui.token = token; sessionStorage.setItem("rw-token", token); }
    out.textContent = r.ok ? (body.detail || kind + " done") : (body.error || "failed: HTTP " + r.status);
  }

  // --------------------------------------------------------------- legend of the symbols
  const LEGEND = [
    ["normal", "every value below its levels"],
    ["learning", "learning the healthy baseline"],
    ["warning", "a value passed its warning level"],
    ["alarm", "a value passed its alarm level"],
    ["sensor_fault", "the sensor or its cable, not the machine"],
    ["stopped", "machine below its running speed"],
    ["no_data", "nothing received yet"],
  ];
  function renderLegend() {
    const items = LEGEND.map(([s, text]) => el("li", {}, [tile(s), word(s), el("span", { class: "lg-text", text })]));
    $("#legend").replaceChildren(
      el("h2", { text: "Reading this page" }),
      el("ul", { class: "legend-list" }, items),
      el("p", { class: "legend-zone", text: "The bar under each point is the ISO 20816-3 zone scale of its overall velocity: " +
        "A new machine, B long-term operation, C limited time, D damage likely. The pointer is the reading." }),
    );
  }

  // --------------------------------------------------------------- wiring
  function init() {
    renderLegend();
    document.querySelectorAll("#quantity-seg button").forEach((b) => b.addEventListener("click", () => { ui.quantity = b.dataset.q; renderControls(); drawSpectrum(); }));
    document.querySelectorAll("#scale-seg button").forEach((b) => b.addEventListener("click", () => { ui.scale = b.dataset.scale; renderControls(); drawSpectrum(); }));
    $("#span-select").addEventListener("change", (e) => { ui.span[ui.quantity] = e.target.value; drawSpectrum(); });
    $("#point-select").addEventListener("change", (e) => { const [m, p] = e.target.value.split("/"); select(m, p); });
    $("#trend-select").addEventListener("change", (e) => { ui.trendValue = e.target.value; renderValues(); drawTrend(); });
    $("#spectrum canvas").addEventListener("mousemove", spectrumHover);
    $("#spectrum canvas").addEventListener("mouseleave", () => { $("#spectrum-readout").textContent = ""; });
    $("#trend canvas").addEventListener("mousemove", trendHover);
    $("#trend canvas").addEventListener("mouseleave", () => { $("#trend-readout").textContent = ""; });
    $("#ack-button").addEventListener("click", () => action("acknowledge"));
    $("#snap-button").addEventListener("click", () => action("snapshot"));
    let resizeTimer = null;
    window.addEventListener("resize", () => { clearTimeout(resizeTimer); resizeTimer = setTimeout(() => { if (ui.pointData) { drawSpectrum(); drawWaveform(); drawTrend(); } }, 150); });
    document.querySelectorAll("#scale-seg button").forEach((b) => b.setAttribute("aria-pressed", String(b.dataset.scale === ui.scale)));
    poll();
  }
  document.addEventListener("DOMContentLoaded", init);
})();
