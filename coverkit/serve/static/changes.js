// coverkit serve page, part 2: the change list. Each change is a scenario file entry {section, entry, label}, so
// the list saved as a scenario file and read back is the same list (label is worked out from the entry alone).
"use strict";
const SECTIONS = ["closure", "slowdown", "base_change"];
const DEFAULT_META = { name: "tried in coverkit serve", description: "changes made on the serve page" };
const plan = { meta: { ...DEFAULT_META }, changes: [], past: [], future: [] };

function corners(polygon) {
  const rings = polygon.type === "MultiPolygon" ? polygon.coordinates.map((p) => p[0]) : [polygon.coordinates[0]];
  return rings.reduce((n, r) => n + r.length - 1, 0);
}
function where(polygon) {
  return typeof polygon === "string" ? `the area of ${polygon}` : `a drawn area (${corners(polygon)} corners)`;
}
function describe(section, e) {
  if (section === "closure") {
    const bridges = e.only_bridges ? "the bridges of " : "";
    if (e.road_name !== undefined) return `close ${bridges}${[].concat(e.road_name).join(", ")}`;
    if (e.polygon !== undefined) return `close ${bridges}the roads in ${where(e.polygon)}`;
    if (e.edge_ids !== undefined) return `close ${bridges}${e.note || "roads " + e.edge_ids.join(", ")}`;
    if (e.way_ids !== undefined) return `close ${bridges}ways ${e.way_ids.join(", ")}`;
  }
  if (section === "slowdown") {
    const cls = e.road_class !== undefined ? [].concat(e.road_class).join(", ") + " roads" : "roads";
    const inside = e.polygon !== undefined ? ` in ${where(e.polygon)}` : "";
    return `slow ${cls}${inside} x${e.factor}`;
  }
  if (section === "base_change") {
    if (e.add) {
      const u = e.add.units ?? 1;
      return `new station ${e.add.id} at ${e.add.lon.toFixed(5)}, ${e.add.lat.toFixed(5)} ` +
        `(${u} unit${u === 1 ? "" : "s"})`;
    }
    if (e.remove) return `take out station ${e.remove}`;
    if (e.move) return `move station ${e.move.id} to ${e.move.lon.toFixed(5)}, ${e.move.lat.toFixed(5)}`;
    if (e.units) return `station ${e.units.id}: ${e.units.units} unit${e.units.units === 1 ? "" : "s"}`;
  }
  return `${section}: ${JSON.stringify(e)}`;
}
function change(section, entry) { return { section, entry, label: describe(section, entry) }; }

/** The change list as the scenario tables of the API bodies and scenario files (sections in file order). */
function scenarioBody(changes = plan.changes) {
  const body = { scenario: { ...plan.meta } };
  for (const s of SECTIONS) {
    const items = changes.filter((c) => c.section === s).map((c) => c.entry);
    if (items.length) body[s] = items;
  }
  return body;
}
/** A change list from scenario tables (the answer of /api/scenario/read). */
function changesFrom(tables) {
  const out = [];
  for (const s of SECTIONS) for (const e of tables[s] || []) out.push(change(s, e));
  return out;
}
/** The list `next` becomes current; the old one goes on the undo stack. */
function record(next) {
  plan.past.push(plan.changes);
  plan.future = [];
  plan.changes = next;
}
function undo() {
  if (!plan.past.length) return false;
  plan.future.push(plan.changes);
  plan.changes = plan.past.pop();
  return true;
}
function redo() {
  if (!plan.future.length) return false;
  plan.past.push(plan.changes);
  plan.changes = plan.future.pop();
  return true;
}
/** The next free new-station id (N1, N2 ...), clear of the study's bases and of stations already added. */
function nextStationId(baseIds) {
  const taken = new Set(baseIds);
  for (const c of plan.changes) if (c.entry.add) taken.add(c.entry.add.id);
  let k = 1;
  while (taken.has(`N${k}`)) k += 1;
  return `N${k}`;
}
function round6(x) { return Math.round(x * 1e6) / 1e6; }
