// coverkit serve page, part 4: drawing an area on the map. Click adds a corner, double-click or Enter ends
// (three corners at least), Esc cancels; the area goes to `done` as a GeoJSON Polygon in lon/lat degrees.
"use strict";
const sketch = { points: [], line: null, done: null };

function startSketch(done) {
  cancelSketch();
  sketch.done = done;
  sketch.line = L.polygon([], { renderer: canvas, color: "#1b1b1b", weight: 2, dashArray: "6 4", fillOpacity: 0.1,
    interactive: false }).addTo(map);
  map.doubleClickZoom.disable();
  map.getContainer().classList.add("sketching");
}
function sketching() { return sketch.done !== null; }
function addCorner(latlng) {
  const last = sketch.points[sketch.points.length - 1];
  // the two clicks of a double-click land on one spot: keep one corner
  if (last && map.latLngToContainerPoint(last).distanceTo(map.latLngToContainerPoint(latlng)) < 4) return;
  sketch.points.push(latlng);
  sketch.line.setLatLngs(sketch.points);
}
function cancelSketch() {
  if (sketch.line) sketch.line.remove();
  sketch.points = [];
  sketch.line = null;
  sketch.done = null;
  map.doubleClickZoom.enable();
  map.getContainer().classList.remove("sketching");
}
function finishSketch() {
  if (!sketching()) return;
  if (sketch.points.length < 3) { say("An area needs three corners at least: click more, or Esc to cancel.", "warn");
    return; }
  const ring = sketch.points.map((p) => [round6(p.lng), round6(p.lat)]);
  ring.push(ring[0]);
  const done = sketch.done;
  cancelSketch();
  done({ type: "Polygon", coordinates: [ring] });
}
map.on("dblclick", (ev) => { if (sketching()) { L.DomEvent.stop(ev); addCorner(ev.latlng); finishSketch(); } });
document.addEventListener("keydown", (ev) => {
  if (!sketching() || ev.target.tagName === "INPUT") return;
  if (ev.key === "Enter") { ev.preventDefault(); finishSketch(); }
  if (ev.key === "Escape") { setTool("look"); say("Drawing cancelled: nothing changed."); }
});
