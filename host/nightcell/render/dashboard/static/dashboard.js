// nightcell's class page: tiles pushed by the server as server-sent events. Every text that came from a board or a
// user (labels, marks, messages) is written with textContent, never as HTML.
"use strict";

(function () {
  const pageKey = document.querySelector('meta[name="nightcell-page-key"]').content;
  const controlOn = document.querySelector('meta[name="nightcell-control"]').content === "on";
  const tilesBox = document.getElementById("tiles");
  const alertsBox = document.getElementById("alerts");
  const tiles = new Map(); // port -> {root, parts}
  let controlToken = "";
  let lastState = null;
  let receivedAt = 0;

  function el(tag, cls, text) {
    const e = document.createElement(tag);
    if (cls) e.className = cls;
    if (text !== undefined) e.textContent = text;
    return e;
  }

  function duration(seconds) {
    if (seconds === null || seconds === undefined || !isFinite(seconds)) return "unknown";
    const s = Math.round(seconds);
    if (s >= 86400) return Math.floor(s / 86400) + " d " + Math.floor((s % 86400) / 3600) + " h";
    if (s >= 3600) return Math.floor(s / 3600) + " h " + Math.floor((s % 3600) / 60) + " min";
    if (s >= 60) return Math.floor(s / 60) + " min";
    return s + " s";
  }

  function post(path, body, extra) {
    const headers = Object.assign({"Content-Type": "application/json", "X-Page-Key": pageKey}, extra || {});
    return fetch(path, {method: "POST", headers: headers, body: JSON.stringify(body || {})})
      .then(r => r.json().then(j => ({ok: r.ok, body: j})));
  }

  function makeTile(port) {
    const root = el("article", "tile");
    root.dataset.port = port;
    const head = el("div", "tile-head");
    const label = el("h2", "label");
    const state = el("span", "state");
    head.append(label, state);
    const who = el("p", "who");
    const reading = el("div", "reading");
    const valueBox = el("div");
    const value = el("div", "value", "—");
    const unit = el("div", "unit", "absorbance");
    valueBox.append(value, unit);
    const svg = document.createElementNS("http://www.w3.org/2000/svg", "svg");
    svg.setAttribute("class", "trend");
    svg.setAttribute("viewBox", "0 0 100 40");
    svg.setAttribute("preserveAspectRatio", "none");
    svg.setAttribute("role", "img");
    svg.setAttribute("aria-label", "absorbance trend");
    const line = document.createElementNS("http://www.w3.org/2000/svg", "polyline");
    svg.append(line);
    reading.append(valueBox, svg);
    const facts = el("dl", "facts");
    const parts = {};
    for (const [key, name] of [["mark", "last mark"], ["samples", "samples this run"], ["journal", "journal"],
                               ["answer", "last answer"]]) {
      const dd = el("dd");
      dd.dataset.fact = key;
      facts.append(el("dt", "", name), dd);
      parts[key] = dd;
    }
    const fill = el("span", "fill");
    const fillBar = el("span");
    fill.append(fillBar);
    const journalText = el("span");
    parts.journal.append(journalText, fill);
    const alerts = el("ul", "tile-alerts");
    const sync = el("p", "tile-sync");
    root.append(head, who, reading, facts, alerts, sync);
    Object.assign(parts, {root, label, state, who, value, unit, line, alerts, sync, fill, fillBar, journalText});
    if (controlOn) {
      const box = el("div", "tile-controls");
      box.hidden = true;
      const input = el("input");
      input.placeholder = "label";
      input.maxLength = 32;
      box.append(input);
      for (const action of ["start", "stop", "blank"]) {
        const b = el("button", "quiet", action);
        b.type = "button";
        b.addEventListener("click", () => {
          post("/api/control", {port: port, action: action, label: input.value}, {"X-Control-Token": controlToken})
            .then(r => { parts.sync.textContent = r.ok ? action + ": done" : action + ": " + r.body.error; });
        });
        box.append(b);
      }
      root.append(box);
      parts.controls = box;
    }
    tilesBox.append(root);
    return parts;
  }

  function drawTrend(line, values) {
    const pts = [];
    const finite = values.filter(v => v !== null && isFinite(v));
    if (finite.length < 1) { line.setAttribute("points", ""); return; }
    let lo = Math.min(...finite), hi = Math.max(...finite);
    if (hi - lo < 0.01) { const mid = (hi + lo) / 2; lo = mid - 0.005; hi = mid + 0.005; }
    const n = Math.max(values.length - 1, 1);
    values.forEach((v, i) => {
      if (v === null || !isFinite(v)) return;
      pts.push((100 * i / n).toFixed(2) + "," + (38 - 36 * (v - lo) / (hi - lo)).toFixed(2));
    });
    line.setAttribute("points", pts.join(" "));
  }

  function markText(m) {
    if (!m) return "none seen";
    let t = m.kind.replace("_", " ");
    if (m.label) t += " “" + m.label + "”";
    if (m.value) t += " (" + m.value + ")";
    return t + " at " + m.boot + ":" + m.seq;
  }

  function syncText(s) {
    if (!s) return "";
    if (s.phase === "waiting") return "sync: waiting its turn";
    if (s.phase === "syncing") {
      const pct = s.total ? Math.round(100 * s.done / s.total) + " %" : "starting";
      return "sync: " + pct + ", " + s.records + " records";
    }
    if (s.phase === "done") return "sync: done, " + s.records + " records, " + s.new_rows + " new rows";
    if (s.phase === "failed") return "sync failed: " + s.error;
    return "";
  }

  function updateTile(t, sync) {
    let p = tiles.get(t.port);
    if (!p) { p = makeTile(t.port); tiles.set(t.port, p); }
    const cls = t.state.replace(/ /g, "-");
    p.root.className = "tile st-" + cls;
    p.root.dataset.state = t.state;
    p.root.dataset.device = t.device || "";
    p.label.textContent = t.label || t.device || t.port;
    p.state.textContent = t.state + (t.paused_for ? " (" + t.paused_for + ")" : "");
    p.who.textContent = (t.device || "no answer yet") + " · " + t.port + (t.run_label ? " · run “" + t.run_label + "”" : "");
    const a = t.absorbance && t.absorbance.length ? t.absorbance[0] : null;
    const sd = t.absorbance_sd;
    // rounded at the first significant digit of the reading-to-reading scatter (3 decimals until it is known)
    const decimals = sd ? Math.max(1, Math.min(4, -Math.floor(Math.log10(sd)))) : 3;
    p.value.textContent = a === null ? "—" : a.toFixed(decimals);
    p.value.dataset.absorbance = a === null ? "" : String(a);
    p.value.dataset.decimals = String(decimals);
    p.unit.textContent = "absorbance" + (sd && a !== null ? " ± " + sd.toPrecision(1) + " (scatter)" : "");
    drawTrend(p.line, t.trend || []);
    p.mark.textContent = markText(t.last_mark);
    p.samples.textContent = t.samples_run === null || t.samples_run === undefined ? "—" : String(t.samples_run);
    const j = t.journal;
    if (j) {
      const pct = 100 * j.fraction;
      const pctText = pct < 10 ? pct.toFixed(1) : Math.round(pct).toString();
      let left;
      if (j.full) left = "FULL: sync now";
      else if (j.wall_seconds_left !== null) left = "full in about " + duration(j.wall_seconds_left);
      else if (t.state === "logging") left = "full in: estimating";
      else left = "not filling";
      p.journalText.textContent = pctText + " % used · " + left;
      p.fillBar.style.width = Math.min(100, Math.max(0, pct)) + "%";
      p.fill.className = "fill" + (pct >= 80 ? " high" : "");
    } else {
      p.journalText.textContent = "—";
      p.fillBar.style.width = "0%";
    }
    p.answer.dataset.age = t.age_s === null ? "" : String(t.age_s);
    p.alerts.replaceChildren(...t.alerts.map(al => {
      const li = el("li");
      li.dataset.code = al.code;
      li.append(el("b", "", al.title + ":"), document.createTextNode(" " + al.detail));
      return li;
    }));
    p.sync.textContent = syncText(sync);
    if (p.controls) p.controls.hidden = !controlToken;
  }

  function tickAges() {
    if (!lastState) return;
    const extra = (Date.now() - receivedAt) / 1000;
    for (const t of lastState.tiles) {
      const p = tiles.get(t.port);
      if (!p) continue;
      p.answer.textContent = t.age_s === null ? "never" : duration(t.age_s + extra) + " ago";
    }
  }

  function show(state) {
    lastState = state;
    receivedAt = Date.now();
    document.getElementById("db-path").textContent = state.db;
    const end = document.getElementById("planned-end");
    if (state.planned_end_unix) {
      const at = new Date(state.planned_end_unix * 1000);
      end.textContent = "· runs end " + at.toLocaleTimeString([], {hour: "2-digit", minute: "2-digit"}) + " (in " +
        duration(state.planned_end_unix - state.server_unix) + ")";
    } else {
      end.textContent = "";
    }
    const syncing = state.sync.running;
    document.getElementById("sync-all").disabled = syncing;
    for (const t of state.tiles) updateTile(t, state.sync.boards[t.port]);
    alertsBox.replaceChildren(...state.alerts.map(al => {
      const li = el("li");
      li.dataset.code = al.code;
      li.dataset.port = al.port;
      li.append(el("span", "who", al.label || al.device || al.port), el("b", "", al.title + ": "),
                document.createTextNode(al.detail));
      return li;
    }));
    if (!state.alerts.length) alertsBox.append(el("li", "none", "none: every board answers, with a blank, light and room"));
    const count = document.getElementById("alert-count");
    count.textContent = String(state.alerts.length);
    count.className = "count" + (state.alerts.length ? " some" : "");
    tickAges();
  }

  function connect() {
    const linkState = document.getElementById("link-state");
    const source = new EventSource("/api/events?key=" + encodeURIComponent(pageKey));
    source.addEventListener("tiles", ev => {
      linkState.textContent = "live";
      linkState.className = "link-state";
      show(JSON.parse(ev.data));
    });
    source.onerror = () => {
      linkState.textContent = "lost the server: is `nightcell benches` still running? retrying…";
      linkState.className = "link-state lost";
    };
  }

  document.getElementById("sync-all").addEventListener("click", () => {
    document.getElementById("sync-all").disabled = true;
    post("/api/sync", {}).then(r => {
      if (!r.ok) document.getElementById("sync-note").textContent = r.body.error;
    });
  });
  if (controlOn) {
    document.getElementById("control-bar").hidden = false;
    document.getElementById("control-use").addEventListener("click", () => {
      controlToken = document.getElementById("control-token").value.trim();
      document.getElementById("control-token").value = "";
      document.getElementById("control-note").textContent = controlToken ? "controls on for this page" : "no token";
      if (lastState) show(lastState);
    });
  }
  setInterval(tickAges, 1000);
  connect();
})();
