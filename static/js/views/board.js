// The item board: one row per item, keep/drop toggle, the numbers that argue for or against it.
import { flagWord, flagsByItem } from "../labels.js";
import { actions, allItems, itemMeta } from "../state.js";
import { clear, fmt, h, note, pct, select } from "./dom.js";

function countsOf(row) {
  const c = row?.counts;
  if (!c) return [];
  if (Array.isArray(c)) return c.map((v, i) => (typeof v === "object" ? [v.value ?? v.category ?? i, v.count ?? v.n ?? 0] : [i + 1, v]));
  return Object.entries(c).map(([k, v]) => [k, v]).sort((a, b) => Number(a[0]) - Number(b[0]));
}

function distBar(row) {
  const counts = countsOf(row);
  const total = counts.reduce((s, [, n]) => s + (n || 0), 0);
  const bar = h("div", { class: "dist", role: "img",
    "aria-label": total ? `Answers: ${counts.map(([k, n]) => `${k}: ${n}`).join(", ")}` : "no answers" });
  if (!total) return bar;
  const max = Math.max(...counts.map(([, n]) => n || 0));
  counts.forEach(([k, n], i) => {
    const shade = counts.length > 1 ? i / (counts.length - 1) : 0.5;
    bar.append(h("span", { title: `${k}: ${n} (${pct(n / total)})`,
      style: { height: `${Math.max(2, Math.round((n / max) * 100))}%`, background: `hsl(198, ${30 + shade * 40}%, ${72 - shade * 42}%)` } }));
  });
  return bar;
}

function sortValue(state, key, name, row, flags, order) {
  switch (key) {
    case "name": return name;
    case "construct": return itemMeta(name)?.construct || "";
    case "flags": return -(flags[name]?.length || 0);
    case "order": return order;
    default: {
      // A dropped item keeps the value it had when it was last active, so it stays where it was on a sorted
      // board instead of jumping to the end (and taking the keyboard focus with it).
      const r = row || state.lastRows[name];
      return r ? r[key] ?? -Infinity : Infinity;
    }
  }
}

export function render(container, state) {
  const a = state.analysis;
  const keep = new Set(allItems().filter((n) => !state.dropped.includes(n)));
  const rows = Object.fromEntries((a?.items || []).map((r) => [r.name, r]));
  const flags = flagsByItem(a);
  const alpha = a?.reliability?.alpha;
  const constructs = [...new Set((state.meta?.items || []).map((it) => it.construct).filter(Boolean))];
  const kinds = [...new Set((a?.efa?.flags || []).map((f) => f.kind))];

  let names = allItems().map((n, i) => ({ n, i }));
  if (state.filter.construct) names = names.filter(({ n }) => (itemMeta(n)?.construct || "") === state.filter.construct);
  if (state.filter.flag === "any") names = names.filter(({ n }) => flags[n]?.length);
  else if (state.filter.flag === "dropped") names = names.filter(({ n }) => !keep.has(n));
  else if (state.filter.flag) names = names.filter(({ n }) => (flags[n] || []).some((f) => f.kind === state.filter.flag));
  const { key, dir } = state.sort;
  names.sort((x, y) => {
    const vx = sortValue(state, key, x.n, rows[x.n], flags, x.i);
    const vy = sortValue(state, key, y.n, rows[y.n], flags, y.i);
    return (vx < vy ? -1 : vx > vy ? 1 : x.i - y.i) * dir;
  });

  const head = (label, k, title) => {
    const active = state.sort.key === k && k !== "order";
    return h("th", { scope: "col", "aria-sort": active ? (dir > 0 ? "ascending" : "descending") : "none" },
      h("button", { class: "sort", title: title || `Sort by ${label}`, text: label + (active ? (dir > 0 ? " ▲" : " ▼") : ""),
        onclick: () => actions.sortBy(k) }));
  };

  const tbody = h("tbody");
  for (const { n } of names) {
    const m = itemMeta(n) || {};
    const r = rows[n];
    const kept = keep.has(n);
    const itemFlags = kept ? flags[n] || [] : [];
    const better = kept && r && alpha != null && r.alpha_if_deleted != null && r.alpha_if_deleted > alpha;
    const tr = h("tr", { class: `item ${kept ? "kept" : "dropped"}`, tabindex: 0, dataset: { item: n },
      "aria-label": `${n}${kept ? "" : " (dropped)"}: ${m.text || ""}` },
    h("td", {}, h("button", { class: `toggle ${kept ? "on" : "off"}`, role: "switch", "aria-checked": String(kept),
      title: kept ? `Drop ${n} (D)` : `Restore ${n} (D)`, text: kept ? "keep" : "dropped",
      onclick: (e) => { e.stopPropagation(); state.board.focus = n; actions.toggle(n); } })),
    h("th", { scope: "row", class: "name",
      title: kept && r ? `n ${r.n ?? "—"} · mean ${fmt(r.mean, 2)} · sd ${fmt(r.sd, 2)}${r.skew != null ? ` · skew ${fmt(r.skew, 2)}` : ""}` : null }, n, m.reverse || (state.reverse || []).includes(n) ? h("span", { class: "rev", title: "reverse-keyed", text: " ↺" }) : null),
    h("td", { class: "wording", text: m.text || "" }),
    h("td", { class: "construct", text: m.construct || "—" }),
    h("td", { class: "num", text: kept && r ? fmt(r.item_rest_r, 2) : "—" }),
    h("td", { class: `num ${better ? "better" : ""}`,
      title: kept && r ? `${better ? "Alpha would rise without this item. " : ""}Omega without it: ${fmt(r.omega_if_deleted)}` : null,
      text: kept && r ? fmt(r.alpha_if_deleted, 3) : "—" }),
    h("td", { class: "num", text: kept && r ? `${pct(r.floor)} / ${pct(r.ceiling)}` : "—" }),
    h("td", {}, kept && r ? distBar(r) : null),
    h("td", { class: "flags" }, itemFlags.map((f) => h("span", { class: `flag ${f.kind}`, tabindex: 0, role: "note",
      "aria-label": `${flagWord(f.kind)}: ${f.message}`, dataset: { tip: f.message }, text: flagWord(f.kind) }))));
    tr.addEventListener("keydown", (e) => onKey(state, e, n, tr));
    tr.addEventListener("focus", () => { state.board.focus = n; });
    tbody.append(tr);
  }

  clear(container);
  container.append(h("div", { class: "board-tools" },
    h("label", {}, "Construct ", select([["", "all"], ...constructs.map((c) => [c, c])], state.filter.construct,
      (v) => actions.filter({ construct: v }), { id: "filter-construct" })),
    h("label", {}, "Show ", select([["", "every item"], ["any", "flagged items"], ...kinds.map((k) => [k, `flag: ${flagWord(k)}`]),
      ["dropped", "dropped items"]], state.filter.flag, (v) => actions.filter({ flag: v }), { id: "filter-flag" })),
    h("span", { class: "muted keys", text: "Keys: ↑/↓ move · D or Space drops/restores · Ctrl+Z undo · Ctrl+Y redo" })));
  if (!names.length) container.append(note("No item matches this filter."));
  container.append(h("div", { class: "table-wrap board-wrap" }, h("table", { class: "board", id: "item-board" },
    h("thead", {}, h("tr", {},
      h("th", { scope: "col", text: "" }), head("Item", "name"), head("Wording", "order", "Pool order"), head("Construct", "construct"),
      head("Item-rest r", "item_rest_r", "Corrected item-total correlation"),
      head("α if dropped", "alpha_if_deleted", "Alpha of the scale without this item"),
      head("Floor / ceiling", "ceiling", "Share of answers at the lowest / highest option"),
      h("th", { scope: "col", text: "Answers" }), head("Flags", "flags", "Heuristic flags from the factor analysis"))),
    tbody)));
  const focusName = state.board.focus;
  if (focusName && container.contains(document.activeElement) === false && document.activeElement === document.body) {
    const again = tbody.querySelector(`tr[data-item="${CSS.escape(focusName)}"]`);
    if (again) again.focus({ preventScroll: true });
  }
}

function onKey(state, e, name, tr) {
  if (e.target.tagName === "SELECT" || e.target.tagName === "INPUT") return;
  if (e.key === "ArrowDown" || e.key === "j") { e.preventDefault(); tr.nextElementSibling?.focus(); }
  else if (e.key === "ArrowUp" || e.key === "k") { e.preventDefault(); tr.previousElementSibling?.focus(); }
  else if ((e.key === "d" || e.key === "D" || e.key === " " || e.key === "Delete") && e.target === tr) {
    e.preventDefault(); state.board.focus = name; actions.toggle(name);
  }
}
