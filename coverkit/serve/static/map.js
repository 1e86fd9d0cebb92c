// coverkit serve page, part 3: the map. Leaflet on a plain background (no tile server); every vector layer shares
// one canvas so a hover finds the top-most shape (areas under roads, roads under closures).
"use strict";
// the road colours: a sequential ramp, light = near, dark = far, sent with the study (GET /api/study: ramp,
// ramp_max_min) so the page and the static report share one ramp
let RAMP = [];
let RAMP_MAX_MIN = 1;
const UNREACHED = "#c5c8cc";
const CLOSED = "#d0257a";
const CHANGE_COLOUR = { lost: "#b8432f", gained: "#2d6fa3" };
const DEPTH_COLOUR = "#3d6f8e";
const GAP_COLOUR = { line: "#7d2650", fill: "#cf6c98" };
const DUE_COLOURS = ["#7896b4", "#c8a46a", "#82a97b", "#ad7ca3", "#d48d62", "#62a6a5", "#a4a3c4", "#c88080"];
const DENSITY = ["#f1edf4", "#d8c6e3", "#bb9dcd", "#9b72b5", "#784b99", "#552c79"];
const AREA_LAYERS = ["demand", "depth", "first_due", "gaps"];
const state = { study: null, tool: "look", answer: null, standard: null, demand: null, cache: {}, shown: {},
  highlight: null, density: null, settled: 0 };

const map = L.map("map", { preferCanvas: true, zoomSnap: 0.25, doubleClickZoom: true });
const canvas = L.canvas({ tolerance: 5, padding: 0.2 });
L.control.scale({ metric: true, imperial: false, position: "bottomleft" }).addTo(map);
const groups = { boundary: L.layerGroup().addTo(map), areas: L.layerGroup().addTo(map),
  changed: L.layerGroup().addTo(map), closed: L.layerGroup().addTo(map), labels: L.layerGroup().addTo(map),
  candidates: L.layerGroup(), bases: L.layerGroup().addTo(map) };
let roadsLayer = null;

function colourOf(minutes) {
  if (minutes === null || minutes === undefined) return UNREACHED;
  return RAMP[Math.min(RAMP.length - 1, Math.floor((minutes / RAMP_MAX_MIN) * RAMP.length))];
}
function unitOf(demand) {
  const d = state.study.demand.find((x) => x.name === demand);
  if (!d) return "";
  return d.unit || (d.kind === "incidents" ? "calls" : "people");
}
/** The demand layer the changed areas weigh (the first residents layer, as the server picks it). */
function residentsLayer() {
  return (state.study.demand.find((d) => d.kind === "residents") || state.study.demand[0]).name;
}
function changed() { return plan.changes.length > 0 && state.answer !== null; }

// -- roads --------------------------------------------------------------------------------------------------------
function drawRoads() {
  const after = changed() ? state.answer.road_minutes_after : null;
  roadsLayer.eachLayer((l) => {
    const p = l.feature.properties;
    l.setStyle({ color: colourOf(after ? after[p.piece] : p.minutes), weight: 2.5 });
  });
  groups.closed.clearLayers();
  if (changed() && state.answer.closed_roads) {
    L.geoJSON(state.answer.closed_roads, { renderer: canvas, interactive: false,
      style: { color: CLOSED, weight: 5, dashArray: "5 4", opacity: 0.95 } }).addTo(groups.closed);
  }
}
function roadTip(p) {
  const after = changed() ? state.answer.road_minutes_after[p.piece] : p.minutes;
  const m = after === null ? "not reached" : `${after.toFixed(1)} min from the nearest station`;
  return `${esc(p.name || "unnamed")} (${esc(p.road_class)}): ${m}`;
}

// -- stations and candidate sites ---------------------------------------------------------------------------------
function stationIcon(p) {
  const cls = p.id && plan.changes.some((c) => c.entry.add && c.entry.add.id === p.id) ? "station new" : "station";
  return L.divIcon({ className: cls, iconSize: [14, 14], iconAnchor: [7, 7],
    html: `<span class="station-label">${esc(p.id)} ${esc(p.name && p.name !== p.id ? p.name : "")}` +
      `${p.units !== undefined ? " &middot; " + p.units + "u" : ""}</span>` });
}
function drawBases() {
  groups.bases.clearLayers();
  const fc = changed() ? state.answer.bases_after : state.study.bases;
  for (const f of fc.features) {
    const [lon, lat] = f.geometry.coordinates;
    const m = L.marker([lat, lon], { icon: stationIcon(f.properties), draggable: state.tool === "move",
      keyboard: false, autoPan: false });
    m.feature = f;
    m.on("click", (ev) => { L.DomEvent.stopPropagation(ev); stationClicked(m, f.properties); });
    m.on("dragend", () => { const ll = m.getLatLng(); stationMoved(f.properties.id, ll.lng, ll.lat); });
    m.addTo(groups.bases);
    m.getElement().dataset.id = f.properties.id;
  }
}
function drawCandidates() {
  groups.candidates.clearLayers();
  const fc = state.study.candidates;
  if (!fc) return;
  for (const f of fc.features) {
    const [lon, lat] = f.geometry.coordinates;
    const on = state.highlight === f.properties.id;
    L.circleMarker([lat, lon], { renderer: canvas, radius: on ? 9 : 5, color: on ? "#e0a100" : "#5b4a2f",
      weight: on ? 3 : 1.5, fillColor: on ? "#ffd45c" : "#f2e6c9", fillOpacity: 1 })
      .bindTooltip(`candidate ${esc(f.properties.id)} ${esc(f.properties.name || "")}`, { permanent: on })
      .addTo(groups.candidates);
  }
}

// -- area layers ----------------------------------------------------------------------------------------------------
async function baseLayer(name) {
  const key = name === "demand" ? `demand/${state.demand}` : `${name}/${state.standard}`;
  if (!state.cache[key]) {
    const url = name === "demand" ? `/api/layers/demand?demand=${q(state.demand)}` :
      `/api/layers/${name}?standard=${q(state.standard)}`;
    state.cache[key] = await getJSON(url);
  }
  return state.cache[key];
}
/** The layer to draw: the after state once the plan changed (when the server gives it), else the base layer. */
async function areaLayer(name) {
  if (name !== "demand" && changed()) {
    const after = state.answer[`${name}_after`];
    if (after) return { fc: after, before: false };
    return { fc: await baseLayer(name), before: true };
  }
  return { fc: await baseLayer(name), before: false };
}
function perBaseRows() {
  const rows = (changed() && state.answer.per_base_after) || state.study.per_base || [];
  return rows.filter((r) => r.standard === state.standard && r.demand === state.demand);
}
function areaStyle(name, p) {
  if (name === "gaps") return { color: GAP_COLOUR.line, weight: 1, fillColor: GAP_COLOUR.fill, fillOpacity: 0.4 };
  if (name === "depth") return { stroke: false, fillColor: DEPTH_COLOUR, fillOpacity: Math.min(p.depth, 4) * 0.12 };
  if (name === "demand") return { stroke: false, fillColor: densityColour(p.per_km2), fillOpacity: 0.75 };
  // one colour a station: the study's stations keep theirs whatever the changes, new ones follow
  const ids = state.study.bases.features.map((f) => f.properties.id);
  if (changed()) {
    for (const f of state.answer.bases_after.features) if (!ids.includes(f.properties.id)) ids.push(f.properties.id);
  }
  const i = Math.max(0, ids.indexOf(p.base_id));
  const c = DUE_COLOURS[i % DUE_COLOURS.length];
  return { color: c, weight: 1.5, fillColor: c, fillOpacity: p.status === "reached" ? 0.22 : 0.08 };
}
function areaTip(name, p) {
  if (name === "gaps") {
    const counts = Object.keys(p).filter((k) => k.startsWith("uncovered_"))
      .map((k) => `${whole(p[k])} ${esc(k.slice("uncovered_".length))}`);
    return `gap ${p.gap_id}: ${counts.join(", ")} not covered (${num(p.area_km2)} km&sup2;)`;
  }
  if (name === "depth") return `reached by ${p.depth} station${p.depth === 1 ? "" : "s"} within the standard`;
  if (name === "demand") return `${num(p.per_km2)} ${esc(p.unit || unitOf(state.demand))} per km&sup2;`;
  const row = perBaseRows().find((r) => r.base_id === p.base_id);
  const due = row ? `: first-due ${whole(row.first_due_demand)} ${esc(unitOf(state.demand))}` : "";
  return `first-due area of ${esc(p.base_id)}${due} (${num(p.area_km2)} km&sup2;, ${esc(p.status)})`;
}
function densityBreaks(fc) {
  const v = fc.features.map((f) => f.properties.per_km2).filter((x) => x > 0).sort((a, b) => a - b);
  if (!v.length) return [0];
  // class edges at quantiles of the cells (so the light classes are not empty), rounded to 2 significant digits
  const edges = [1, 2, 3, 4, 5].map((k) => v[Math.min(v.length - 1, Math.floor((k / DENSITY.length) * v.length))]);
  return [...new Set(edges.map((x) => Number(x.toPrecision(2))))];
}
function densityColour(x) {
  const b = state.density || [];
  let i = 0;
  while (i < b.length && x >= b[i]) i += 1;
  return DENSITY[Math.min(i, DENSITY.length - 1)];
}
async function drawAreas() {
  const drawn = [];
  state.shown = {};
  for (const name of AREA_LAYERS) {
    if (!document.getElementById(`show-${name}`).checked) continue;
    let got;
    try { got = await areaLayer(name); } catch (e) {
      document.getElementById(`show-${name}`).checked = false;
      say(e.missing ? `This server gives no ${name.replace("_", "-")} layer yet.` : e.message, "warn");
      continue;
    }
    if (name === "demand") state.density = densityBreaks(got.fc);
    state.shown[name] = got;
    drawn.push(L.geoJSON(got.fc, { renderer: canvas, style: (f) => areaStyle(name, f.properties),
      onEachFeature: (f, l) => l.bindTooltip(areaTip(name, f.properties), { sticky: true }) }));
  }
  groups.areas.clearLayers();
  groups.labels.clearLayers();
  drawn.forEach((l) => l.addTo(groups.areas));
  if (state.shown.gaps) gapLabels(drawn[drawn.length - 1]);
  drawChanged();
  legend();
}
function gapLabels(layer) {
  layer.eachLayer((l) => {
    L.marker(l.getBounds().getCenter(), { interactive: false, keyboard: false,
      icon: L.divIcon({ className: "gap-label", iconSize: null, html: String(l.feature.properties.gap_id) }) })
      .addTo(groups.labels);
  });
}
function drawChanged() {
  groups.changed.clearLayers();
  if (changed() && document.getElementById("show-changed").checked) {
    L.geoJSON(state.answer.changed_areas, { renderer: canvas,
      style: (f) => ({ color: CHANGE_COLOUR[f.properties.change], weight: 1, fillOpacity: 0.4 }),
      onEachFeature: (f, l) => {
        const p = f.properties;
        l.bindTooltip(`${p.change === "lost" ? "loses" : "gains"} coverage: ${whole(p.weight)} ` +
          `${esc(unitOf(residentsLayer()))} at ${whole(p.points)} demand points` +
          `${p.incidents !== null && p.incidents !== undefined ? ", " + whole(p.incidents) + " calls" : ""}` +
          ` (${num(p.area_km2)} km&sup2;)`, { sticky: true });
      } }).addTo(groups.changed);
  }
  restack();
}
/** Draw order on the shared canvas: areas, changed areas, roads, closed roads. */
function restack() {
  groups.changed.eachLayer((l) => l.bringToFront());
  if (roadsLayer) roadsLayer.bringToFront();
  groups.closed.eachLayer((l) => l.bringToFront());
}

// -- legend -----------------------------------------------------------------------------------------------------
function legend() {
  const stops = RAMP.map((c) => `<span style="background:${c}"></span>`).join("");
  const sw = (c, text, extra = "") => `<div><i style="background:${c};${extra}"></i> ${text}</div>`;
  let html = `<b>Roads</b>: minutes from the nearest station${changed() ? " (after the changes)" : ""}` +
    `<div class="legend-ramp">${stops}</div><div class="legend-ticks"><span>0</span><span>${RAMP_MAX_MIN / 2}</span>` +
    `<span>${RAMP_MAX_MIN}+ min</span></div>` + sw(UNREACHED, "not reached") +
    sw(CLOSED, "closed road", "height:4px") +
    `<div><i class="dot"></i> station <i class="dot new"></i> new station</div>`;
  if (map.hasLayer(groups.candidates)) html += `<div><i class="dot cand"></i> candidate site</div>`;
  const before = (n) => (state.shown[n] && state.shown[n].before ? " <em>(before the changes)</em>" : "");
  if (state.shown.depth) html += sw(DEPTH_COLOUR, `coverage depth: darker = more stations in reach${before("depth")}`,
    "opacity:.5");
  if (state.shown.gaps) html += sw(GAP_COLOUR.fill, `gap (numbered) in ${esc(state.standard)}${before("gaps")}`);
  if (state.shown.first_due) html += sw(DUE_COLOURS[0], `first-due area, one colour a station${before("first_due")}`);
  if (state.shown.demand && state.density) {
    const b = state.density;
    html += `<b>Demand</b>: ${esc(state.demand)}, ${esc(unitOf(state.demand))} per km&sup2;` +
      DENSITY.slice(0, b.length + 1).map((c, i) => sw(c, i === 0 ? `under ${num(b[0])}` :
        i === b.length ? `${num(b[i - 1])} and over` : `${num(b[i - 1])} - ${num(b[i])}`)).join("");
  }
  if (changed() && document.getElementById("show-changed").checked) {
    html += sw(CHANGE_COLOUR.lost, "loses coverage", "opacity:.6") + sw(CHANGE_COLOUR.gained, "gains coverage",
      "opacity:.6");
  }
  document.getElementById("legend").innerHTML = html;
}
