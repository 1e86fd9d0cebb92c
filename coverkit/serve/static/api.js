// coverkit serve page, part 1: talking to the JSON API, number words and the status line.
// Planning estimates only - not for live dispatch or routing.
"use strict";
const TOKEN = new URLSearchParams(location.search).get("token") || "";

/** An API error; `missing` is true when the server has no such route (an older server: the feature degrades). */
class ApiError extends Error {
  constructor(message, status) {
    super(message);
    this.status = status;
    this.missing = status === 404 || status === 405;
  }
}
async function failure(r) {
  const body = await r.json().catch(() => null);
  const text = body && body.error ? body.error : `${r.status} ${r.statusText}`;
  return new ApiError(text, r.status);
}
async function getJSON(url) {
  const r = await fetch(url);
  if (!r.ok) throw await failure(r);
  return r.json();
}
/** POST `body` (an object: JSON; a string: sent as is) and read the answer as json, text or blob. */
async function post(url, body, as = "json") {
  const text = typeof body === "string";
  const r = await fetch(url, { method: "POST", headers: { "Content-Type": text ? "text/plain" : "application/json",
    Authorization: "Bearer " + TOKEN }, body: text ? body : JSON.stringify(body) });
  if (!r.ok) throw await failure(r);
  return as === "json" ? r.json() : as === "text" ? r.text() : r.blob();
}
function download(blob, name) {
  const a = document.createElement("a");
  a.href = URL.createObjectURL(blob);
  a.download = name;
  document.body.appendChild(a);
  a.click();
  a.remove();
  setTimeout(() => URL.revokeObjectURL(a.href), 10000);
}
function q(value) { return encodeURIComponent(value); }

function say(text, kind = "note") {
  const el = document.getElementById("message");
  el.textContent = text || "";
  el.className = text ? kind : "";
}
function esc(s) {
  return String(s ?? "").replace(/[&<>"']/g, (c) => ({ "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;",
    "'": "&#39;" })[c]);
}
function pct(x) { return x === null || x === undefined ? "-" : (x * 100).toFixed(1) + " %"; }
function mins(s) { return s === null || s === undefined ? "not reached" : (s / 60).toFixed(1) + " min"; }
function whole(x) { return x === null || x === undefined ? "-" : Math.round(x).toLocaleString("en"); }
function num(x) {
  if (x === null || x === undefined) return "-";
  if (typeof x !== "number") return esc(x);
  return Number.isInteger(x) ? x.toLocaleString("en") : x.toLocaleString("en", { maximumFractionDigits: 3 });
}
/** "a -> b" when the value changed, else the value once. */
function arrow(before, after, f) {
  return after === undefined || f(before) === f(after) ? f(before) : `${f(before)} &rarr; ${f(after)}`;
}
