// wellspan operations page. Vanilla JS, no dependencies. Every value taken from the API is put
// into the page with textContent, never parsed as HTML; charts are SVG drawn by the service.
"use strict";

// ?refresh=SECONDS changes the period (at least 2 s; default 30 s)
const REFRESH_MS = Math.max(2, Number(new URLSearchParams(location.search).get("refresh")) || 30) * 1000;
const HORIZON_H = 720;
const KEY = "wellspan.key", ACTOR = "wellspan.actor", VIEW = "wellspan.view", ASSET = "wellspan.asset";
const $ = (id) => document.getElementById(id);
const state = { caps: null, timer: null, view: "fleet", asset: null };

class ApiError extends Error {
  constructor(status, detail, type) { super(detail); this.status = status; this.type = type || ""; }
  get missing() { return this.status === 405 || this.type.endsWith(":not-available-yet") ||
    (this.status === 404 && this.type.endsWith(":not-found") && this.message === "Not Found"); }
}

async function api(path, options = {}) {
  const headers = { Authorization: "Bearer " + sessionStorage.getItem(KEY) };
  if (options.body !== undefined) headers["Content-Type"] = "application/json";
  const resp = await fetch(path, {
    method: options.method || "GET", headers, cache: "no-store",
    body: options.body === undefined ? undefined : JSON.stringify(options.body),
  });
  if (resp.ok) return options.text ? resp.text() : resp.json();
  let detail = resp.statusText, type = "";
  try { const p = await resp.json(); detail = p.detail || detail; type = p.type || ""; } catch (e) { /* not JSON */ }
  const err = new ApiError(resp.status, detail, type);
  if (resp.status === 401) askForKey("The API key was refused: " + detail + ". Enter another key.");
  throw err;
}

function el(tag, text, cls) {
  const node = document.createElement(tag);
  if (text !== undefined && text !== null) node.textContent = String(text);
  if (cls) node.className = cls;
  return node;
}

function show(node, message) { node.textContent = message; node.hidden = !message; }

const fmt = {
  pct: (p) => (p === null || p === undefined ? "—" : (100 * p).toFixed(p < 0.1 ? 1 : 0) + " %"),
  num: (v, d = 2) => (v === null || v === undefined ? "—" : Number(v).toFixed(d)),
  hours: (h) => (h === null || h === undefined ? "—" : h >= 48 ? (h / 24).toFixed(1) + " days" : h.toFixed(0) + " h"),
  time: (iso) => (iso ? iso.replace("T", " ").replace(/:\d\d(\.\d+)?(Z|\+00:00)$/, " UTC") : "—"),
};

function notAvailable(what) { return what + " not available yet: this service does not offer it."; }

// ---- key handling -------------------------------------------------------------------------

function askForKey(message) {
  stopTimer();
  document.body.classList.add("no-key");
  $("main").hidden = true;
  $("key-panel").hidden = false;
  show($("key-error"), message || "");
  $("key-input").value = "";
  $("key-input").focus();
}

function takeKeyFromFragment() {
  const m = /(?:^#|&)key=([^&]+)/.exec(location.hash);
  if (!m) return;
  sessionStorage.setItem(KEY, decodeURIComponent(m[1]));
  // the key must not linger in the address bar, the history or a shared screenshot
  history.replaceState(null, "", location.pathname + location.search);
}

async function start() {
  $("key-panel").hidden = true;
  document.body.classList.remove("no-key");
  show($("status"), "");
  try {
    state.caps = await api("/dashboard/capabilities");
  } catch (err) {
    if (err.status !== 401) show($("status"), "The service could not be reached: " + err.message);
    return;
  }
  $("main").hidden = false;
  selectView(sessionStorage.getItem(VIEW) || "fleet");
  await refresh();
  stopTimer();
  state.timer = setInterval(refresh, REFRESH_MS);
}

function stopTimer() { if (state.timer) clearInterval(state.timer); state.timer = null; }

function selectView(view) {
  const redraw = view === "asset" && state.view !== "asset" && state.asset;
  state.view = view;
  sessionStorage.setItem(VIEW, view);
  for (const v of ["fleet", "asset", "alerts"]) {
    $("view-" + v).hidden = v !== view;
    $("tab-" + v).setAttribute("aria-pressed", String(v === view));
  }
  // charts drawn while their view was hidden had no width to fit
  if (redraw && state.caps) renderAsset(state.asset).catch(() => {});
}

async function refresh() {
  const jobs = [renderFleet(), renderAlerts()];
  if (state.asset) jobs.push(renderAsset(state.asset));
  const results = await Promise.allSettled(jobs);
  const failed = results.find((r) => r.status === "rejected" && r.reason.status !== 401);
  show($("status"), failed ? "Part of the page could not be loaded: " + failed.reason.message : "");
  $("updated").textContent = "updated " + new Date().toLocaleTimeString();
}

// ---- fleet --------------------------------------------------------------------------------

async function fleetRows() {
  if (state.caps.routes.fleet_risk) {
    try {
      const body = await api("/v1/fleet/risk?horizon_h=" + HORIZON_H);
      return { items: body.items, note: "" };
    } catch (err) { if (!err.missing) throw err; }
  }
  const body = await api("/v1/assets?limit=1000");
  const items = body.items.map((a) => ({ asset_id: a.asset_id, site_id: a.site }));
  return { items, note: notAvailable("Forecasts") + " Assets are listed by name, not by risk." };
}

async function renderFleet() {
  const { items, note } = await fleetRows();
  show($("fleet-note"), note);
  const rows = items.map((a) => {
    const tr = el("tr");
    tr.dataset.asset = a.asset_id;
    if (a.asset_id === state.asset) tr.className = "selected";
    const link = el("button", a.asset_id, "asset-link");
    link.type = "button";
    link.addEventListener("click", () => openAsset(a.asset_id));
    const first = el("td"); first.append(link); tr.append(first);
    tr.append(el("td", a.site_id, "col-site"));
    const risk = el("td", fmt.pct(a.probability_within_horizon), "num risk");
    if (typeof a.probability_within_horizon === "number") {
      const bar = el("span", null, "bar"), fill = el("span");
      fill.style.width = Math.round(100 * Math.min(1, Math.max(0, a.probability_within_horizon))) + "%";
      bar.append(fill); risk.append(bar);
    }
    tr.append(risk);
    tr.append(el("td", a.status && a.status !== "forecast" ? a.status.replace(/_/g, " ") : fmt.hours(a.p50_h), "num"));
    tr.append(el("td", fmt.num(a.health_index), "num"));
    tr.append(el("td", a.likely_fault ? a.likely_fault + (a.fault_confidence != null ? " (" + fmt.pct(a.fault_confidence) + ")" : "") : "—"));
    const zone = el("td");
    if (a.zone) { const z = el("span", a.zone, "zone zone-" + a.zone); z.title = "vibration severity zone " + a.zone; zone.append(z); }
    else zone.textContent = "—";
    tr.append(zone);
    tr.append(el("td", a.anomaly_over_limit == null ? "—" : a.anomaly_over_limit ? "over limit" : "normal",
      a.anomaly_over_limit ? "flag-on" : ""));
    tr.append(el("td", fmt.time(a.as_of)));
    return tr;
  });
  if (!rows.length) { const tr = el("tr"); const td = el("td", "No assets are registered yet."); td.colSpan = 9; tr.append(td); rows.push(tr); }
  $("fleet-table").tBodies[0].replaceChildren(...rows);
}

// ---- asset --------------------------------------------------------------------------------

function openAsset(id) {
  state.asset = id;
  sessionStorage.setItem(ASSET, id);
  for (const tr of $("fleet-table").tBodies[0].rows) tr.classList.toggle("selected", tr.dataset.asset === id);
  selectView("asset");
  renderAsset(id).catch((err) => show($("status"), "The asset could not be loaded: " + err.message));
}

function sanitizeSvg(text) {
  const doc = new DOMParser().parseFromString(text, "image/svg+xml");
  const root = doc.documentElement;
  if (root.nodeName !== "svg" || doc.getElementsByTagName("parsererror").length) return null;
  for (const bad of root.querySelectorAll("script, foreignObject")) bad.remove();
  for (const node of root.querySelectorAll("*")) {
    for (const attr of [...node.attributes]) if (/^on/i.test(attr.name) || /href$/i.test(attr.name)) node.removeAttribute(attr.name);
  }
  return document.importNode(root, true);
}

async function loadChart(figureId, path, what, offered = true) {
  const figure = $(figureId);
  // the page shows what the JSON API offers: no chart of data it has no route for
  if (!offered) { figure.replaceChildren(el("p", notAvailable(what), "note")); return; }
  try {
    // drawn for the figure's width in pixels, so that its text keeps the page's size
    const width = Math.max(320, Math.min(2400, Math.round(figure.clientWidth / 10) * 10 - 10));
    const node = sanitizeSvg(await api(path + (path.includes("?") ? "&" : "?") + "width=" + width, { text: true }));
    figure.replaceChildren(node || el("p", what + ": the chart could not be read.", "muted"));
  } catch (err) {
    if (err.status === 401) return;
    figure.replaceChildren(el("p", err.missing ? notAvailable(what) : what + ": " + err.message, "note"));
  }
}

function fact(dl, term, value) { dl.append(el("dt", term), el("dd", value)); }

async function renderForecast(id) {
  const dl = document.createDocumentFragment();  // filled, then swapped in at once
  $("diag-evidence").replaceChildren();
  $("ttf-facts").replaceChildren();
  if (!state.caps.routes.time_to_failure) {
    show($("ttf-status"), notAvailable("Forecasts"));
    show($("diag-summary"), notAvailable("Diagnosis"));
    return;
  }
  let t;
  try { t = await api("/v1/assets/" + encodeURIComponent(id) + "/time-to-failure?risk=0.1&horizon_h=" + HORIZON_H); }
  catch (err) {
    show($("ttf-status"), err.missing ? notAvailable("Forecasts") : "Forecast: " + err.message);
    show($("diag-summary"), "");
    return;
  }
  show($("ttf-status"), t.message || t.status);
  if (t.forecast) {
    const f = t.forecast;
    fact(dl, "Failure within " + fmt.hours(f.horizon_h), fmt.pct(f.probability_within_horizon));
    fact(dl, "P10 / P50 / P90", fmt.hours(f.p10_h) + " / " + fmt.hours(f.p50_h) + " / " + fmt.hours(f.p90_h));
    fact(dl, "P50 reached", fmt.time(f.p50_at));
    if (f.latest_maintenance_at) fact(dl, "Maintain by (" + fmt.pct(f.risk) + " risk)", fmt.time(f.latest_maintenance_at));
  }
  if (t.health_index != null) fact(dl, "Health index", fmt.num(t.health_index) + (t.failure_threshold != null ? " of " + fmt.num(t.failure_threshold) : ""));
  if (t.failure_mode) fact(dl, "Failure mode", t.failure_mode);
  if (t.anomaly) fact(dl, "Anomaly score", fmt.num(t.anomaly.score) + " (limit " + fmt.num(t.anomaly.control_limit) + ")" + (t.anomaly.over_limit ? " — over limit" : ""));
  fact(dl, "As of", fmt.time(t.as_of));
  $("ttf-facts").replaceChildren(dl);
  const d = t.diagnosis;
  show($("diag-summary"), d ? d.fault + " (confidence " + fmt.pct(d.confidence) + ")" : "No diagnosis yet.");
  if (d) $("diag-evidence").replaceChildren(...(d.evidence || []).map((e) => el("li", e)));
}

async function renderAsset(id) {
  const path = "/dashboard/assets/" + encodeURIComponent(id);
  const asset = await api("/v1/assets/" + encodeURIComponent(id));
  if (state.asset !== id) return;
  $("asset-title").textContent = asset.asset_id;
  $("asset-empty").hidden = true;
  $("asset-body").hidden = false;
  $("asset-meta").textContent = [asset.site, asset.asset_class, asset.description,
    "last window " + fmt.time(asset.last_window_start)].filter(Boolean).join(" · ");
  await Promise.all([
    renderForecast(id),
    loadChart("health-chart", path + "/health.svg?days=60", "Health-index trend and forecasts", state.caps.routes.health),
    loadChart("diagnosis-chart", path + "/diagnosis.svg", "Diagnosis indicator levels", state.caps.routes.diagnosis),
    loadChart("indicator-chart", path + "/indicators.svg?days=7", "Key indicators"),
  ]);
}

// ---- alerts -------------------------------------------------------------------------------

async function renderAlerts() {
  const body = $("alerts-table").tBodies[0];
  if (!state.caps.routes.alerts) {
    show($("alerts-note"), notAvailable("Alerts"));
    body.replaceChildren();
    $("alert-count").textContent = "";
    return;
  }
  let page;
  try { page = await api("/v1/alerts?state=live&limit=200"); }
  catch (err) {
    if (!err.missing) throw err;
    show($("alerts-note"), notAvailable("Alerts"));
    body.replaceChildren();
    return;
  }
  show($("alerts-note"), state.caps.may_operate ? "" :
    "This key may only read: acknowledging or resolving an alert needs a key with the operate scope.");
  $("alert-count").textContent = page.items.length ? String(page.items.length) : "";
  const rows = page.items.map((a) => {
    const tr = el("tr");
    tr.dataset.alert = a.alert_id;
    const st = el("td"); st.append(el("span", a.state, "alert-state"));
    if (a.acknowledged_by) st.append(el("div", "by " + a.acknowledged_by, "muted"));
    tr.append(el("td", a.severity, "sev-" + a.severity), st, el("td", a.asset_id || a.gateway_id || "—", "nowrap"));
    const what = el("td"); what.append(el("strong", a.title));
    const detail = describe(a.detail); if (detail) what.append(el("div", detail, "muted"));
    tr.append(what, el("td", fmt.time(a.opened_at)));
    const actions = el("td"); const box = el("div", null, "actions");
    if (a.state === "open") box.append(actionButton(a, "acknowledge", "Acknowledge"));
    if (a.state !== "resolved") box.append(actionButton(a, "resolve", "Resolve"));
    actions.append(box); tr.append(actions);
    return tr;
  });
  if (!rows.length) { const tr = el("tr"); const td = el("td", "No open alerts."); td.colSpan = 6; tr.append(td); rows.push(tr); }
  body.replaceChildren(...rows);
}

// an alert's detail: plain text, or the readings behind it as "name: value" pairs
function describe(detail) {
  if (detail === null || detail === undefined) return "";
  if (typeof detail !== "object") return String(detail);
  return Object.entries(detail).filter(([, v]) => v !== null && v !== "")
    .map(([k, v]) => k.replace(/_/g, " ") + ": " + (typeof v === "object" ? JSON.stringify(v)
      : /^\d{4}-\d\d-\d\dT/.test(v) ? fmt.time(String(v)) : v)).join(" · ");
}

function actionButton(alert, action, label) {
  const b = el("button", label);
  b.type = "button";
  b.dataset.action = action;
  b.addEventListener("click", async () => {
    const by = $("actor").value.trim();
    if (!by) { show($("alert-action"), "Enter your name under “Acting as” first: it is recorded with the alert."); $("actor").focus(); return; }
    b.disabled = true;
    try {
      await api("/v1/alerts/" + encodeURIComponent(alert.alert_id) + "/" + action, { method: "POST", body: { by, note: "" } });
      show($("alert-action"), (action === "acknowledge" ? "Acknowledged: " : "Resolved: ") + alert.title);
      await renderAlerts();
    } catch (err) {
      b.disabled = false;
      if (err.status === 403) show($("alert-action"), "Not allowed: this API key lacks the operate scope needed to " + action + " alerts. Use a key with the operate scope.");
      else if (err.missing) show($("alert-action"), notAvailable("Acknowledging and resolving alerts is"));
      else if (err.status !== 401) show($("alert-action"), "Could not " + action + " the alert: " + err.message);
    }
  });
  return b;
}

// ---- wiring -------------------------------------------------------------------------------

document.addEventListener("DOMContentLoaded", () => {
  for (const b of document.querySelectorAll("[data-view]")) b.addEventListener("click", () => selectView(b.dataset.view));
  $("refresh").addEventListener("click", refresh);
  $("change-key").addEventListener("click", () => { sessionStorage.removeItem(KEY); askForKey(""); });
  $("key-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    sessionStorage.setItem(KEY, $("key-input").value.trim());
    start();
  });
  $("actor").value = sessionStorage.getItem(ACTOR) || "";
  $("actor").addEventListener("change", () => sessionStorage.setItem(ACTOR, $("actor").value.trim()));
  let resizing = null;  // redraw the charts for a new width once the resizing stops
  window.addEventListener("resize", () => {
    clearTimeout(resizing);
    resizing = setTimeout(() => { if (state.asset && state.view === "asset" && state.caps) renderAsset(state.asset); }, 300);
  });
  state.asset = sessionStorage.getItem(ASSET);
  takeKeyFromFragment();
  if (sessionStorage.getItem(KEY)) start(); else askForKey("");
});
