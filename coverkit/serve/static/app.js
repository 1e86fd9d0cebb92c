// coverkit serve page: the study's roads, bases and areas from the JSON API, drawn with Leaflet on a plain
// background (no tile server). Planning estimates only - not for live dispatch or routing.
"use strict";
const TOKEN = new URLSearchParams(location.search).get("token") || "";
// sequential ramp, light = near, dark = far (cividis stops, matplotlib's perceptual colormap)
const RAMP = ["#fee838", "#d3c164", "#a59c74", "#7c7b78", "#575d6d", "#31446b", "#00224e"];
const RAMP_MAX_MIN = 14;
const CHANGE_COLOUR = { lost: "#b2182b", gained: "#2166ac" };
const state = { study: null, tool: "look", changes: [], undone: [], answer: null, standard: null, added: 0 };
const map = L.map("map", { preferCanvas: true, zoomSnap: 0.25 });
L.control.scale({ metric: true, imperial: false }).addTo(map);
const groups = { boundary: L.layerGroup().addTo(map), roads: L.layerGroup().addTo(map), areas: L.layerGroup().addTo(map),
  changed: L.layerGroup().addTo(map), bases: L.layerGroup().addTo(map) };
let roadsLayer = null;

function colourOf(minutes) {
  if (minutes === null || minutes === undefined) return "#c5c8cc";
  const i = Math.min(RAMP.length - 1, Math.floor((minutes / RAMP_MAX_MIN) * RAMP.length));
  return RAMP[i];
}
function say(text) { document.getElementById("message").textContent = text || ""; }
async function getJSON(url) {
  const r = await fetch(url);
  const body = await r.json();
  if (!r.ok) throw new Error(body.error || r.statusText);
  return body;
}
async function post(url, body, as = "json") {
  const r = await fetch(url, { method: "POST", headers: { "Content-Type": "application/json",
    Authorization: "Bearer " + TOKEN }, body: JSON.stringify(body) });
  if (!r.ok) { const e = await r.json().catch(() => ({ error: r.statusText })); throw new Error(e.error); }
  return as === "json" ? r.json() : r.text();
}

function legend() {
  const stops = RAMP.map((c) => `<span style="background:${c}"></span>`).join("");
  document.getElementById("legend").innerHTML =
    `<div>Roads: minutes from the nearest base</div><div class="legend-ramp">${stops}</div>` +
    `<div class="legend-ticks"><span>0</span><span>${RAMP_MAX_MIN / 2}</span><span>${RAMP_MAX_MIN}+ min</span></div>` +
    `<div><span style="color:${CHANGE_COLOUR.lost}">&#9632;</span> loses coverage ` +
    `<span style="color:${CHANGE_COLOUR.gained}">&#9632;</span> gains coverage</div>`;
}

function drawRoads(minutesAfter) {
  roadsLayer.eachLayer((l) => {
    const p = l.feature.properties;
    const m = minutesAfter ? minutesAfter[p.piece] : p.minutes;
    const closed = closedEdges().has(p.edge_ids[0]);
    l.setStyle({ color: closed ? "#d6336c" : colourOf(m), weight: closed ? 5 : 2.5, dashArray: closed ? "4 4" : null });
  });
}
function closedEdges() {
  const s = new Set();
  for (const c of state.changes) if (c.kind === "close") c.edge_ids.forEach((e) => s.add(e));
  return s;
}

function drawBases() {
  groups.bases.clearLayers();
  const fc = state.answer ? state.answer.bases_after : state.study.bases;
  L.geoJSON(fc, {
    pointToLayer: (f, ll) => L.circleMarker(ll, { radius: 7, color: "#24313f", weight: 2, fillColor: "#ffffff",
      fillOpacity: 1 }),
    onEachFeature: (f, layer) => {
      layer.bindTooltip(`${f.properties.id} ${f.properties.name || ""}`, { permanent: true, direction: "right",
        className: "base-label" });
      layer.on("click", (ev) => { L.DomEvent.stopPropagation(ev); if (state.tool === "remove") push({ kind: "remove",
        id: f.properties.id }); });
    },
  }).addTo(groups.bases);
}

async function drawAreas() {
  groups.areas.clearLayers();
  const std = encodeURIComponent(state.standard);
  const want = [["show-depth", "depth"], ["show-due", "first_due"], ["show-gaps", "gaps"]];
  for (const [box, name] of want) {
    if (!document.getElementById(box).checked) continue;
    const fc = await getJSON(`/api/layers/${name}?standard=${std}`);
    L.geoJSON(fc, { interactive: false, style: (f) => areaStyle(name, f.properties) }).addTo(groups.areas);
  }
}
function areaStyle(name, p) {
  if (name === "gaps") return { color: "#7a1f3d", weight: 1, fillColor: "#c2577a", fillOpacity: 0.35 };
  if (name === "depth") { const d = Math.min(p.depth, 4); return { stroke: false, fillColor: "#335c81",
    fillOpacity: 0.08 + 0.12 * d }; }
  return { color: "#445", weight: 1, fill: false, dashArray: "2 3" };
}
function drawChanged() {
  groups.changed.clearLayers();
  if (!state.answer || !document.getElementById("show-changed").checked) return;
  L.geoJSON(state.answer.changed_areas, { interactive: false, style: (f) => ({ color: CHANGE_COLOUR[f.properties.change],
    weight: 1, fillOpacity: 0.4 }) }).addTo(groups.changed);
}

function pct(x) { return x === null ? "-" : (x * 100).toFixed(1) + " %"; }
function mins(s) { return s === null ? "not reached" : (s / 60).toFixed(1) + " min"; }
function figures() {
  const body = document.querySelector("#figures tbody");
  body.innerHTML = "";
  const response = Object.fromEntries(state.study.standards.map((s) => [s.name, s.response_s]));
  const rows = state.answer ? state.answer.rows : null;
  state.study.figures.forEach((f, i) => {
    const r = rows ? rows.find((x) => x.standard === f.standard && x.demand === f.demand) : null;
    const tr = document.createElement("tr");
    tr.dataset.standard = f.standard; tr.dataset.demand = f.demand;
    const after = r ? r.covered_share_after : f.covered_share;
    const fr = r ? r.fractile_response_s_after : f.fractile_response_s;
    const meets = fr !== null && fr <= response[f.standard];
    tr.innerHTML = `<td>${f.standard}</td><td>${f.demand}</td>` +
      `<td class="share">${r ? pct(f.covered_share) + " &rarr; " : ""}<span class="share-now" data-value="${after}">${pct(after)}</span></td>` +
      `<td>${r ? mins(f.fractile_response_s) + " &rarr; " : ""}${mins(fr)} (${(f.fractile * 100).toFixed(0)}th)</td>` +
      `<td class="${meets ? "meets" : "misses"}">${meets ? "meets" : "misses"}</td>`;
    body.appendChild(tr);
  });
}

function scenarioBody() {
  const body = { scenario: { name: "tried in coverkit serve", description: "changes made on the serve page" } };
  const closure = [], base_change = [];
  for (const c of state.changes) {
    if (c.kind === "close") closure.push({ edge_ids: c.edge_ids, note: c.label });
    if (c.kind === "add") base_change.push({ add: { id: c.id, lon: c.lon, lat: c.lat, units: 1 } });
    if (c.kind === "remove") base_change.push({ remove: c.id });
  }
  if (closure.length) body.closure = closure;
  if (base_change.length) body.base_change = base_change;
  return body;
}
function describe(c) {
  if (c.kind === "add") return `add station ${c.id} at ${c.lon.toFixed(5)}, ${c.lat.toFixed(5)}`;
  if (c.kind === "remove") return `remove station ${c.id}`;
  return `close ${c.label}`;
}
function listChanges() {
  document.getElementById("changes").innerHTML = state.changes.map((c) => `<li>${describe(c)}</li>`).join("");
  document.getElementById("change-lines").innerHTML = state.answer ?
    state.answer.changes.map((l) => `<li>${l}</li>`).join("") : "";
}

async function recompute() {
  if (!state.changes.length) { state.answer = null; return; }
  state.answer = await post(`/api/compare?standard=${encodeURIComponent(state.standard)}`, scenarioBody());
}
async function refresh() {
  drawRoads(state.answer ? state.answer.road_minutes_after : null);
  drawBases(); drawChanged(); figures(); listChanges();
}
async function push(change) {
  state.changes.push(change);
  say("computing...");
  try { await recompute(); state.undone = []; say(""); }
  catch (e) { state.changes.pop(); say(e.message + " Nothing changed."); }
  await refresh();
  document.body.dataset.ready = String(Date.now());
}
async function undoRedo(from, to) {
  if (!from.length) return;
  to.push(from.pop());
  try { await recompute(); say(""); } catch (e) { say(e.message); }
  await refresh();
  document.body.dataset.ready = String(Date.now());
}

function setTool(tool) {
  state.tool = tool;
  document.querySelectorAll("#tools button").forEach((b) => b.classList.toggle("on", b.dataset.tool === tool));
  say({ add: "Click the map where the station should stand (it snaps to the nearest road).",
    remove: "Click a station to take it out of service.", close: "Click a road to close it (both directions).",
    look: "" }[tool]);
}

async function start() {
  const study = await getJSON("/api/study");
  state.study = study;
  state.standard = study.standards[0].name;
  document.getElementById("study-name").textContent = study.name;
  document.getElementById("caution").textContent = study.caution;
  const sel = document.getElementById("standard");
  sel.innerHTML = study.standards.map((s) => `<option>${s.name}</option>`).join("");
  sel.title = study.standards[0].text;
  sel.onchange = async () => { state.standard = sel.value; sel.title = study.standards[sel.selectedIndex].text;
    try { await recompute(); } catch (e) { say(e.message); } await drawAreas(); await refresh(); };
  if (study.layers.includes("boundary")) {
    L.geoJSON(await getJSON("/api/layers/boundary"), { interactive: false, style: { color: "#6b7280", weight: 1.5,
      fill: false } }).addTo(groups.boundary);
  }
  const roads = await getJSON("/api/layers/roads");
  roadsLayer = L.geoJSON(roads, {
    onEachFeature: (f, layer) => layer.on("click", (ev) => {
      if (state.tool !== "close") return;
      L.DomEvent.stopPropagation(ev);
      const p = f.properties;
      push({ kind: "close", edge_ids: p.edge_ids, label: `${p.name || "unnamed " + p.road_class} (piece ${p.piece})` });
    }),
  }).addTo(groups.roads);
  map.fitBounds(roadsLayer.getBounds());
  map.on("click", (ev) => {
    if (state.tool !== "add") return;
    state.added += 1;
    push({ kind: "add", id: `N${state.added}`, lon: ev.latlng.lng, lat: ev.latlng.lat });
  });
  document.querySelectorAll("#tools button").forEach((b) => (b.onclick = () => setTool(b.dataset.tool)));
  ["show-gaps", "show-due", "show-depth"].forEach((id) => (document.getElementById(id).onchange = drawAreas));
  document.getElementById("show-changed").onchange = drawChanged;
  document.getElementById("undo").onclick = () => undoRedo(state.changes, state.undone);
  document.getElementById("redo").onclick = () => undoRedo(state.undone, state.changes);
  document.getElementById("save").onclick = async () => {
    if (!state.changes.length) { say("Nothing to save: make a change first."); return; }
    const text = await post("/api/scenario.toml", scenarioBody(), "text");
    const a = document.createElement("a");
    a.href = URL.createObjectURL(new Blob([text], { type: "application/toml" }));
    a.download = "scenario.toml"; a.click();
  };
  legend();
  await refresh();
  document.body.dataset.ready = String(Date.now());
}
start().catch((e) => say("could not load the study: " + e.message));
