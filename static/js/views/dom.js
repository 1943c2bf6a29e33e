// Tiny DOM helpers. Strings always enter the page as text (textContent), never as HTML.
import { purgeWithin } from "../charts.js";

export function h(tag, attrs = {}, ...children) {
  const el = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs || {})) {
    if (v == null || v === false) continue;
    if (k === "class") el.className = v;
    else if (k === "text") el.textContent = v;
    else if (k === "value" && el.tagName === "TEXTAREA") el.value = v;
    else if (k === "style" && typeof v === "object") Object.assign(el.style, v);
    else if (k.startsWith("on") && typeof v === "function") el.addEventListener(k.slice(2), v);
    else if (k === "dataset") Object.assign(el.dataset, v);
    else if (k in el && typeof v !== "string") el[k] = v;
    else el.setAttribute(k, v === true ? "" : String(v));
  }
  append(el, children);
  return el;
}

function append(el, children) {
  for (const c of children.flat(Infinity)) {
    if (c == null || c === false) continue;
    el.append(c instanceof Node ? c : document.createTextNode(String(c)));
  }
}

// The element now in the page in place of `el` (the same id), or `el`: a handler that awaited a request writes
// into the view as it is now, even if it was drawn again meanwhile (after a refit, or the item list arriving).
export function current(el) {
  return el.isConnected || !el.id ? el : document.getElementById(el.id) || el;
}

export function clear(el) {
  purgeWithin(el);
  while (el.firstChild) el.removeChild(el.firstChild);
  return el;
}

export function fmt(v, digits = 3) {
  if (v == null || Number.isNaN(v)) return "—";
  return Number(v).toFixed(digits).replace(/^(-?)0\./, "$1.");
}

export function pct(v) { return v == null ? "—" : `${Math.round(v * 100)}%`; }

export function section(title, ...children) {
  return h("section", { class: "panel" }, h("h2", { text: title }), ...children);
}

export function note(text, kind = "") { return h("p", { class: `note ${kind}`.trim(), text }); }

export function warningList(warnings, title = "Things to know") {
  if (!warnings || !warnings.length) return null;
  return h("details", { class: "warnings", open: warnings.length <= 3 },
    h("summary", { text: `${title} (${warnings.length})` }),
    // H1 (issue 10): warnings are {code, message, items}; old snapshots and upload notes are plain strings.
    h("ul", {}, warnings.map((w) => h("li", { text: w != null && typeof w === "object" ? String(w.message ?? w.code ?? "") : String(w ?? "") }))));
}

export function table(columns, rows, { caption, className = "grid" } = {}) {
  return h("table", { class: className },
    caption ? h("caption", { text: caption }) : null,
    h("thead", {}, h("tr", {}, columns.map((c) => h("th", { scope: "col", text: c })))),
    h("tbody", {}, rows.map((r) => h("tr", {}, r.map((cell) => (cell instanceof Node ? h("td", {}, cell) : h("td", { text: cell ?? "—" })))))));
}

export function select(options, value, onchange, attrs = {}) {
  return h("select", { ...attrs, onchange: (e) => onchange(e.target.value) },
    options.map(([v, label]) => h("option", { value: v, selected: String(v) === String(value), text: label })));
}
