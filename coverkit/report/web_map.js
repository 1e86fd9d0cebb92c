// coverkit report map: draws the layers inlined in the report (no fetch, no tiles) with the inlined Leaflet.
// Planning estimates only - not for live dispatch or routing.
"use strict";
function coverkitMap(id) {
  const root = document.getElementById(id);
  const data = JSON.parse(document.getElementById(id + "-data").textContent);
  const canvas = root.querySelector(".ckmap-canvas");
  const panel = root.querySelector(".ckmap-panel");
  const map = L.map(canvas, { zoomSnap: 0.25, attributionControl: false });
  L.control.scale({ metric: true, imperial: false, position: "topright" }).addTo(map);
  const order = [["ck-areas", 405], ["ck-roads", 415], ["ck-changed", 425], ["ck-closed", 435], ["ck-bases", 445]];
  for (const [name, z] of order) map.createPane(name).style.zIndex = String(z);
  const group = L.layerGroup().addTo(map);
  const standards = Object.keys(data.standards);
  const num = (x) => (x === null || x === undefined ? "-" : Math.round(x).toLocaleString("en"));
  const ENTITY = { "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;" };
  const esc = (s) => String(s).replace(/[&<>"]/g, (c) => ENTITY[c]);

  // -- the panel: standard, state (before / after), layers, legend
  const boxes = [["roads", "Roads: minutes from the nearest base", true], ["bases", "Bases", true],
    ["labels", "Base names", true], ["gaps", "Gaps", true], ["first_due", "First-due areas", false]];
  if (standards.some((s) => Object.values(data.standards[s]).some((v) => v && v.depth))) {
    boxes.push(["depth", "Coverage depth", false]);
  }
  if (Object.keys(data.changed).length) boxes.push(["changed", "Areas losing / gaining coverage", true]);
  if (data.closed_roads) boxes.push(["closed", "Closed roads", true]);
  if (data.boundary) boxes.push(["boundary", "Study boundary", true]);
  let html = `<fieldset><legend>Standard</legend><select name="standard">` +
    standards.map((s) => `<option value="${esc(s)}">${esc(s)}</option>`).join("") + `</select>` +
    `<div class="ckmap-std-text"></div></fieldset>`;
  if (data.states.length > 1) {
    html += `<fieldset><legend>Show</legend>` + data.states.map((s, i) => `<label><input type="radio" name="state" ` +
      `value="${s}"${i === data.states.length - 1 ? " checked" : ""}> ${s}</label>`).join("") + `</fieldset>`;
  }
  html += `<fieldset><legend>Layers</legend>` + boxes.map(([k, label, on]) => `<label><input type="checkbox" ` +
    `name="${k}"${on ? " checked" : ""}> ${esc(label)}</label>`).join("") + `</fieldset>`;
  const stops = data.ramp.map((c) => `<span style="background:${c}"></span>`).join("");
  html += `<fieldset><legend>Key</legend><div class="ckmap-ramp">${stops}</div><div class="ckmap-ticks">` +
    `<span>0</span><span>${data.ramp_max_min / 2}</span><span>${data.ramp_max_min}+ min</span></div>` +
    `<div><span style="color:${data.unreached}">&#9632;</span> not reached</div>` +
    (Object.keys(data.changed).length ? `<div><span style="color:${data.change_colour.lost}">&#9632;</span> loses ` +
      `coverage <span style="color:${data.change_colour.gained}">&#9632;</span> gains coverage</div>` : "") +
    `<div>Hover a base or an area for its figures.</div></fieldset>`;
  panel.innerHTML = html;

  const on = (k) => { const b = panel.querySelector(`input[name="${k}"]`); return !!b && b.checked; };
  const state = () => {
    const r = panel.querySelector('input[name="state"]:checked');
    return r ? r.value : data.states[0];
  };
  const roadColour = (stop) => (stop === null || stop < 0 ? data.unreached : data.ramp[stop]);

  function baseTip(p, std) {
    let t = `<b>${esc(p.id)}</b> ${esc(p.name || "")}`;
    const figs = (p.figures || {})[std] || {};
    for (const [dem, f] of Object.entries(figs)) {
      const u = data.units[dem] || "";
      t += `<br><i>${esc(dem)}</i><br>&nbsp; first-due ${num(f.first_due_demand)} ${u}` +
        (f.first_due_share === null ? "" : ` (${(f.first_due_share * 100).toFixed(1)} %)`) +
        `, ${num(f.first_due_covered)} in standard<br>&nbsp; sole cover ${num(f.sole_cover)}; ` +
        `reaches ${num(f.reaches_in_standard)} in standard`;
    }
    return t;
  }
  function gapTip(p) {
    let t = `<b>Gap ${p.gap_id}</b>`;
    for (const [k, v] of Object.entries(p)) {
      if (k.startsWith("uncovered_")) t += `<br>uncovered ${k.slice(10)}: ${num(v)}`;
    }
    return t + `<br>area ${p.area_km2 === null ? "-" : p.area_km2.toFixed(2)} km&sup2;`;
  }
  function changedTip(p) {
    return `<b>${p.change === "lost" ? "Loses" : "Gains"} coverage</b> (area ${p.area_id})<br>demand ${num(p.weight)}` +
      ` in ${num(p.points)} points` +
      (p.incidents === null || p.incidents === undefined ? "" : `; ${num(p.incidents)} calls`) +
      `<br>area ${p.area_km2.toFixed(2)} km&sup2;`;
  }

  function redraw() {
    group.clearLayers();
    const std = panel.querySelector('select[name="standard"]').value;
    const st = state();
    const layers = data.standards[std][st] || data.standards[std][data.states[0]];
    panel.querySelector(".ckmap-std-text").textContent = data.standards[std].text;
    if (on("boundary")) {
      L.geoJSON(data.boundary, { interactive: false, pane: "ck-areas", style: { color: "#5b6470", weight: 1.5,
        fill: false, dashArray: "6 4" } }).addTo(group);
    }
    if (on("depth") && layers.depth) {
      L.geoJSON(layers.depth, { pane: "ck-areas", style: (f) => ({ stroke: false, fillColor: "#2f6e8e",
        fillOpacity: 0.06 + 0.13 * Math.min(f.properties.depth, 4) }),
      onEachFeature: (f, l) => l.bindTooltip(`covered by ${f.properties.depth} base(s)`, { sticky: true }) })
        .addTo(group);
    }
    if (on("first_due")) {
      L.geoJSON(layers.first_due, { pane: "ck-areas", style: { color: "#3b3355", weight: 1.2, fill: true,
        fillOpacity: 0.02, dashArray: "3 3" }, onEachFeature: (f, l) => l.bindTooltip(
        `First due: ${esc(f.properties.base_id || f.properties.status)}<br>` +
        `${f.properties.area_km2.toFixed(1)} km&sup2;`,
        { sticky: true }) }).addTo(group);
    }
    if (on("roads")) {
      L.geoJSON(data.roads, { pane: "ck-roads", interactive: false,
        style: (f) => ({ color: roadColour(f.properties[st] ?? f.properties[data.states[0]]), weight: 2.2 }) })
        .addTo(group);
    }
    if (on("gaps")) {
      L.geoJSON(layers.gaps, { pane: "ck-areas", style: { color: "#9a4a12", weight: 1, fillColor: "#ee8b3a",
        fillOpacity: 0.4 }, onEachFeature: (f, l) => l.bindTooltip(gapTip(f.properties), { sticky: true }) })
        .addTo(group);
    }
    if (on("changed") && data.changed[std]) {
      L.geoJSON(data.changed[std], { pane: "ck-changed",
        style: (f) => ({ color: data.change_colour[f.properties.change],
        weight: 1, fillOpacity: 0.45 }), onEachFeature: (f, l) => l.bindTooltip(changedTip(f.properties),
        { sticky: true }) }).addTo(group);
    }
    if (on("closed") && data.closed_roads) {
      L.geoJSON(data.closed_roads, { pane: "ck-closed", style: { color: "#c0267a", weight: 5, dashArray: "5 4" },
        onEachFeature: (f, l) => l.bindTooltip(`closed: ${esc(f.properties.name || f.properties.road_class)}`) })
        .addTo(group);
    }
    const bases = data.bases[st] || data.bases[data.states[0]];
    if (on("bases")) {
      L.geoJSON(bases, { pointToLayer: (f, ll) => L.circleMarker(ll, { pane: "ck-bases", radius: 7, color: "#1f2a36",
        weight: 2, fillColor: "#ffffff", fillOpacity: 1 }),
      onEachFeature: (f, l) => l.bindTooltip(baseTip(f.properties, std)) })
        .addTo(group);
    }
    if (on("labels")) {
      for (const f of bases.features) {
        const [x, y] = f.geometry.coordinates;
        L.tooltip({ permanent: true, direction: "right", offset: [8, 0], className: "ckmap-label", interactive: false,
          pane: "ck-bases" })
          .setLatLng([y, x]).setContent(esc(f.properties.id)).addTo(group);
      }
    }
    root.dataset.drawn = String((root.dataset.drawn | 0) + 1);
  }
  panel.addEventListener("change", redraw);
  const extent = L.geoJSON(data.boundary || data.roads).getBounds();
  map.fitBounds(extent.isValid() ? extent : L.latLngBounds([[-1, -1], [1, 1]]));
  redraw();
  (window.coverkitMaps = window.coverkitMaps || {})[id] = { map, data, redraw };
}
