// coverkit serve page, part 6: the tools and the start. Every change goes to the server first (POST /api/compare);
// a refused change (say a station off the road network) shows the server's line and leaves the plan as it was.
"use strict";
const AFTER_LAYERS = ["gaps", "first_due", "depth"];
const TOOL_HELP = {
  look: "",
  add: "Click the map where the new station should stand (it snaps to the nearest road).",
  move: "Drag a station to its new place.",
  remove: "Click a station to take it out of service.",
  units: "Click a station to set how many units it holds.",
  close: "Click a road to close it (both directions).",
  "close-area": "Click the corners of the area to close; double-click or Enter ends, Esc cancels.",
  "slow-area": "Click the corners of the area to slow; double-click or Enter ends, Esc cancels.",
};
let queue = Promise.resolve();
/** Jobs that touch the plan or the map run one after another (a click while computing waits its turn); the page
 * counts each one done in `body[data-ready]`. */
function serial(job) {
  queue = queue.then(job).catch((e) => say(e.message, "warn")).then(settle);
  return queue;
}
function settle() {
  state.settled += 1;
  document.body.dataset.ready = String(state.settled);
}
function wantedLayers() { return AFTER_LAYERS.filter((n) => document.getElementById(`show-${n}`).checked); }
async function compute(changes) {
  if (!changes.length) return null;
  const layers = wantedLayers();
  const url = `/api/compare?standard=${q(state.standard)}${layers.length ? "&layers=" + layers.join(",") : ""}`;
  return post(url, scenarioBody(changes));
}
async function redraw() {
  drawRoads();
  drawBases();
  await drawAreas();
  showFigures();
  showPerBase();
  showAvailability();
  showChanges();
}
function staleRank() {
  const body = document.querySelector("#rank-table tbody");
  if (body.children.length) body.innerHTML = `<tr><td colspan="5">the changes moved on: rank again</td></tr>`;
}
/** Make `next` the change list once the server has answered for it; a refusal changes nothing. */
function apply(next, note = "", meta = null) {
  return serial(async () => {
    say("computing ...");
    const old = plan.meta;
    try {
      if (meta) plan.meta = meta;
      const answer = await compute(next);
      record(next);
      state.answer = answer;
      say(note);
      staleRank();
    } catch (e) {
      plan.meta = old;
      say(`${e.message} Nothing changed.`, "warn");
    }
    await redraw();
  });
}
function push(section, entry) { return apply([...plan.changes, change(section, entry)]); }
function step(move) {
  return serial(async () => {
    if (move()) {
      try {
        state.answer = await compute(plan.changes);
        say("");
      } catch (e) {
        state.answer = null;
        say(e.message, "warn");
      }
      staleRank();
      await redraw();
    }
  });
}
/** Again with the same changes (another standard, or a layer the answer lacks). */
function again() {
  return serial(async () => {
    try { state.answer = await compute(plan.changes); } catch (e) { say(e.message, "warn"); }
    await redraw();
  });
}

// -- tools ----------------------------------------------------------------------------------------------------------
function setTool(tool) {
  state.tool = tool;
  document.querySelectorAll("#tools button").forEach((b) => b.classList.toggle("on", b.dataset.tool === tool));
  say(TOOL_HELP[tool]);
  cancelSketch();
  if (tool === "close-area") startSketch(closeArea);
  if (tool === "slow-area") startSketch(slowArea);
  drawBases();
}
function closeArea(polygon) {
  push("closure", { polygon }).then(() => state.tool === "close-area" && startSketch(closeArea));
}
function slowArea(polygon) {
  const factor = Number(document.getElementById("area-factor").value);
  push("slowdown", { polygon, factor }).then(() => state.tool === "slow-area" && startSketch(slowArea));
}
function stationClicked(marker, p) {
  if (state.tool === "remove") push("base_change", { remove: p.id });
  if (state.tool === "units") askUnits(marker, p);
}
function stationMoved(id, lon, lat) { push("base_change", { move: { id, lon: round6(lon), lat: round6(lat) } }); }
function askUnits(marker, p) {
  const form = L.DomUtil.create("form", "units-form");
  form.innerHTML = `<label>units at ${esc(p.id)} ` +
    `<input type="number" min="0" step="1" value="${p.units ?? 1}"></label>` +
    ` <button type="submit">set</button>`;
  L.DomEvent.disableClickPropagation(form);
  const pop = L.popup({ offset: [0, -4] }).setLatLng(marker.getLatLng()).setContent(form).openOn(map);
  const input = form.querySelector("input");
  setTimeout(() => { input.focus(); input.select(); }, 0);
  form.onsubmit = (ev) => {
    ev.preventDefault();
    const units = Number(input.value);
    if (!Number.isInteger(units) || units < 0) { say("Units are a whole number, 0 or more.", "warn"); return; }
    map.closePopup(pop);
    push("base_change", { units: { id: p.id, units } });
  };
}
function mapClicked(ev) {
  if (sketching()) { addCorner(ev.latlng); return; }
  if (state.tool !== "add") return;
  const ids = state.study.bases.features.map((f) => f.properties.id);
  push("base_change", { add: { id: nextStationId(ids), lon: round6(ev.latlng.lng), lat: round6(ev.latlng.lat),
    units: 1 } });
}
function roadClicked(ev, p) {
  if (state.tool !== "close" || sketching()) return;
  L.DomEvent.stopPropagation(ev);
  push("closure", { edge_ids: p.edge_ids, note: `${p.name || "unnamed " + p.road_class} (piece ${p.piece})` });
}

// -- forms and buttons -----------------------------------------------------------------------------------------------
function fillNames(roads) {
  const names = state.study.road_names ||
    [...new Set(roads.features.map((f) => f.properties.name).filter(Boolean))].sort();
  const bridges = state.study.bridge_names || [];
  const only = document.getElementById("only-bridges");
  const fill = () => { document.getElementById("road-names").innerHTML = (only.checked ? bridges : names)
    .map((n) => `<option value="${esc(n)}">`).join(""); };
  only.onchange = fill;
  fill();
  const classes = state.study.road_classes ||
    [...new Set(roads.features.map((f) => f.properties.road_class))].sort();
  // local streets first: the class a planner slows most often (snow, works)
  document.getElementById("road-class").innerHTML = classes.map((c) =>
    `<option${c === "residential" ? " selected" : ""}>${esc(c)}</option>`).join("");
  document.getElementById("by-name").onsubmit = (ev) => {
    ev.preventDefault();
    const name = document.getElementById("road-name").value.trim();
    if (!name) { say("Type a road or bridge name first.", "warn"); return; }
    push("closure", { road_name: name, only_bridges: only.checked });
  };
  document.getElementById("slow-class").onsubmit = (ev) => {
    ev.preventDefault();
    const factor = Number(document.getElementById("class-factor").value);
    push("slowdown", { road_class: [document.getElementById("road-class").value], factor });
  };
}
async function orSay(job, missing) {
  try { await job(); } catch (e) { say(e.missing ? missing : e.message, "warn"); }
}
function wireButtons() {
  document.getElementById("undo").onclick = () => step(undo);
  document.getElementById("redo").onclick = () => step(redo);
  document.getElementById("save").onclick = () => orSay(async () => {
    if (!plan.changes.length) { say("Nothing to save: make a change first.", "warn"); return; }
    const text = await post("/api/scenario.toml", scenarioBody(), "text");
    download(new Blob([text], { type: "application/toml" }), "scenario.toml");
    say("Saved scenario.toml (run it with coverkit compare).");
  }, "This server cannot write scenario files.");
  document.getElementById("load").onchange = (ev) => orSay(async () => {
    const file = ev.target.files[0];
    ev.target.value = "";
    if (!file) return;
    const tables = (await post("/api/scenario/read", await file.text())).scenario;
    await apply(changesFrom(tables), `Read ${file.name}.`, { ...tables.scenario });
  }, "This server cannot read scenario files yet.");
  document.getElementById("export").onclick = () => orSay(async () => {
    say("writing the GeoPackage ...");
    const blob = await post(`/api/export.gpkg?standard=${q(state.standard)}`, scenarioBody(), "blob");
    download(blob, "coverkit-state.gpkg");
    say("Saved coverkit-state.gpkg.");
  }, "This server cannot export a GeoPackage yet.");
  document.getElementById("rank").onclick = () => orSay(async () => {
    say("ranking the candidate sites ...");
    showRank(await post(`/api/rank?standard=${q(state.standard)}&demand=${q(state.demand)}`, scenarioBody()));
    say("");
  }, "This server does not rank candidate sites yet.");
}
function wireLayers() {
  for (const name of [...AFTER_LAYERS, "demand"]) {
    document.getElementById(`show-${name}`).onchange = (ev) => {
      const lacking = AFTER_LAYERS.includes(name) && ev.target.checked && changed() && !state.answer[`${name}_after`];
      if (lacking) again(); else serial(drawAreas);
    };
  }
  document.getElementById("show-changed").onchange = () => { drawChanged(); legend(); };
  document.getElementById("show-candidates").onchange = (ev) => {
    if (ev.target.checked) groups.candidates.addTo(map); else groups.candidates.remove();
    legend();
  };
}
function wireSelectors(study) {
  const std = document.getElementById("standard");
  std.innerHTML = study.standards.map((s) => `<option title="${esc(s.text)}">${esc(s.name)}</option>`).join("");
  std.onchange = () => { state.standard = std.value; if (changed()) again(); else serial(redraw); };
  const dem = document.getElementById("demand");
  dem.innerHTML = study.demand.map((d) => `<option>${esc(d.name)}</option>`).join("");
  dem.onchange = () => { state.demand = dem.value; serial(redraw); };
}

async function start() {
  const [study, roads] = await Promise.all([getJSON("/api/study"), getJSON("/api/layers/roads")]);
  state.study = study;
  RAMP = study.ramp;
  RAMP_MAX_MIN = study.ramp_max_min;
  state.standard = study.standards[0].name;
  state.demand = study.demand[0].name;
  document.getElementById("study-name").textContent = study.name;
  document.getElementById("caution").textContent = study.caution;
  roadsLayer = L.geoJSON(roads, { renderer: canvas, style: { weight: 2.5 },
    onEachFeature: (f, l) => {
      l.bindTooltip(() => roadTip(f.properties), { sticky: true });
      l.on("click", (ev) => roadClicked(ev, f.properties));
    } }).addTo(map);
  map.fitBounds(roadsLayer.getBounds());
  drawRoads();
  drawBases();
  requestAnimationFrame(() => { document.body.dataset.firstRenderMs = performance.now().toFixed(0); });
  map.on("click", mapClicked);
  document.querySelectorAll("#tools button").forEach((b) => (b.onclick = () => setTool(b.dataset.tool)));
  if (!study.candidates) {
    document.getElementById("rank").disabled = true;
    document.getElementById("show-candidates").disabled = true;
  } else drawCandidates();
  wireSelectors(study);
  wireLayers();
  wireButtons();
  fillNames(roads);
  if (study.layers.includes("boundary")) {
    L.geoJSON(await getJSON("/api/layers/boundary"), { renderer: canvas, interactive: false,
      style: { color: "#5d6673", weight: 1.5, fill: false } }).addTo(groups.boundary);
    restack();
  }
  await serial(redraw);
}
start().catch((e) => say("Could not load the study: " + e.message, "warn"));
