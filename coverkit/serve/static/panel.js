// coverkit serve page, part 5: the side panel - figures per standard x demand, per station, availability,
// candidate ranking and the change list.
"use strict";

function figureRow(f, row, responseS) {
  const unit = unitOf(f.demand);
  const shareAfter = row ? row.covered_share_after : f.covered_share;
  const frAfter = row ? row.fractile_response_s_after : f.fractile_response_s;
  const meetsAfter = row ? frAfter !== null && frAfter <= responseS : f.meets_standard;
  const verdict = (m) => `<span class="${m ? "meets" : "misses"}">${m ? "meets" : "misses"}</span>`;
  const moved = (w, p) => (row ? `${whole(w)} ${esc(unit)}<br><small>${whole(p)} points</small>` : "-");
  const tr = document.createElement("tr");
  tr.dataset.standard = f.standard;
  tr.dataset.demand = f.demand;
  tr.classList.toggle("picked", f.standard === state.standard && f.demand === state.demand);
  tr.innerHTML = `<td>${esc(f.standard)}</td><td>${esc(f.demand)}</td>` +
    `<td class="share">${row ? pct(f.covered_share) + " &rarr; " : ""}` +
    `<span class="share-now" data-value="${shareAfter}">${pct(shareAfter)}</span>` +
    `<br><small>${whole(row ? row.covered_after : f.covered)} of ${whole(f.demand_total)} ${esc(unit)}</small></td>` +
    `<td>${row ? mins(f.fractile_response_s) + " &rarr; " : ""}${mins(frAfter)}` +
    `<br><small>${(f.fractile * 100).toFixed(0)}th pct, limit ${mins(responseS)}</small></td>` +
    `<td>${row && meetsAfter !== f.meets_standard ? verdict(f.meets_standard) + " &rarr; " : ""}` +
    `${verdict(meetsAfter)}</td>` +
    `<td class="lost">${row ? moved(row.lost_weight, row.lost_points) : "-"}</td>` +
    `<td class="gained">${row ? moved(row.gained_weight, row.gained_points) : "-"}</td>`;
  return tr;
}
function showFigures() {
  const body = document.querySelector("#figures tbody");
  body.innerHTML = "";
  const response = Object.fromEntries(state.study.standards.map((s) => [s.name, s.response_s]));
  const rows = changed() ? state.answer.rows : null;
  for (const f of state.study.figures) {
    const r = rows ? rows.find((x) => x.standard === f.standard && x.demand === f.demand) : null;
    body.appendChild(figureRow(f, r, response[f.standard]));
  }
}

function showPerBase() {
  document.getElementById("base-for").textContent = `${state.standard}, ${state.demand}`;
  const body = document.querySelector("#per-base tbody");
  const pick = (rows) => (rows || []).filter((r) => r.standard === state.standard && r.demand === state.demand);
  const before = pick(state.study.per_base);
  if (!state.study.per_base) {
    body.innerHTML = `<tr><td colspan="4">this server gives no per-station figures</td></tr>`;
    return;
  }
  const after = changed() && state.answer.per_base_after ? pick(state.answer.per_base_after) : null;
  const ids = [...new Set([...before.map((r) => r.base_id), ...(after || []).map((r) => r.base_id)])];
  const unit = unitOf(state.demand);
  body.innerHTML = ids.map((id) => {
    const b = before.find((r) => r.base_id === id) || {};
    const a = after ? after.find((r) => r.base_id === id) || { first_due_demand: 0, first_due_share: 0,
      sole_cover: 0 } : undefined;
    const cell = (k, f) => `<td>${arrow(b[k], a ? a[k] : undefined, f)}</td>`;
    const amount = (x) => (x === undefined || x === null ? "-" : `${whole(x)} ${esc(unit)}`);
    return `<tr data-base="${esc(id)}"><td>${esc(id)}</td>${cell("first_due_demand", amount)}` +
      `${cell("first_due_share", pct)}${cell("sole_cover", amount)}</tr>`;
  }).join("");
  if (changed() && !state.answer.per_base_after) {
    body.insertAdjacentHTML("beforeend", `<tr><td colspan="4"><em>before the changes (this server gives no
      per-station figures after them)</em></td></tr>`);
  }
}

function showAvailability() {
  const av = state.study.availability;
  const box = document.getElementById("availability-box");
  box.hidden = !av;
  if (!av) return;
  const after = changed() ? state.answer.availability_after : undefined;
  document.getElementById("availability-for").textContent = `${av.standard}, ${av.demand}`;
  const s = av.summary || {};
  const sa = after ? after.summary || {} : undefined;
  // shares and probabilities read as percentages, times in seconds as minutes
  const fmt = (k) => (/(coverage|probability|workload)$/.test(k) ? pct : /_s$/.test(k) ? mins : num);
  document.querySelector("#availability-summary tbody").innerHTML = Object.keys(s)
    .filter((k) => typeof s[k] !== "object" && k !== "standard" && k !== "demand").map((k) =>
      `<tr><th>${esc(k.replaceAll("_", " "))}</th><td>${arrow(s[k], sa ? sa[k] : undefined, fmt(k))}</td></tr>`)
    .join("");
  const units = (after && after.units) || av.units || [];
  const cols = units.length ? Object.keys(units[0]) : [];
  document.querySelector("#availability-units thead").innerHTML =
    `<tr>${cols.map((c) => `<th>${esc(c.replaceAll("_", " "))}</th>`).join("")}</tr>`;
  document.querySelector("#availability-units tbody").innerHTML = units.map((u) =>
    `<tr>${cols.map((c) => `<td>${fmt(c)(u[c])}</td>`).join("")}</tr>`).join("");
}

function showChanges() {
  const list = document.getElementById("changes");
  list.innerHTML = plan.changes.map((c, i) => `<li data-section="${c.section}">${esc(c.label)} ` +
    `<button class="drop" data-index="${i}" title="take this change out">&times;</button></li>`).join("");
  list.querySelectorAll("button.drop").forEach((b) => (b.onclick = () => {
    const i = Number(b.dataset.index);
    apply(plan.changes.filter((_, k) => k !== i), `took out: ${plan.changes[i].label}`);
  }));
  document.getElementById("undo").disabled = !plan.past.length;
  document.getElementById("redo").disabled = !plan.future.length;
  document.getElementById("change-lines").innerHTML = changed() ?
    state.answer.changes.map((l) => `<li>${esc(l)}</li>`).join("") : "";
}

function showRank(answer) {
  const table = document.getElementById("rank-table");
  const unit = esc(answer.unit || unitOf(answer.demand));
  table.querySelector("thead").innerHTML = `<tr><th>#</th><th>site</th><th>adds (${unit})</th><th>adds share</th>` +
    `<th>covered after (${unit})</th></tr>`;
  table.querySelector("tbody").innerHTML = answer.candidates.map((c) =>
    `<tr data-id="${esc(c.id)}"><td>${c.rank}</td>` +
    `<td>${esc(c.id)} ${esc(c.name || "")}</td><td>${whole(c.adds)}</td><td>${pct(c.adds_share)}</td>` +
    `<td>${whole(c.covered_after)}</td></tr>`).join("");
  table.querySelectorAll("tbody tr").forEach((tr) => (tr.onclick = () => {
    state.highlight = tr.dataset.id;
    table.querySelectorAll("tbody tr").forEach((x) => x.classList.toggle("picked", x === tr));
    document.getElementById("show-candidates").checked = true;
    groups.candidates.addTo(map);
    drawCandidates();
    legend();
    const c = answer.candidates.find((x) => x.id === tr.dataset.id);
    map.panTo([c.lat, c.lon]);
  }));
}
