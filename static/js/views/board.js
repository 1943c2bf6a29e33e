// The item board: one row per item, keep/drop toggle, the numbers that argue for or against it.
import { flagWord, flagsByItem, warningsByItem } from "../labels.js";
import { actions, allItems, itemMeta, robustnessResult, subscaleBlock, subscaleNames } from "../state.js";
import { clear, fmt, h, note, pct, select } from "./dom.js";

// The share of resamples with this flag (a whole percent), when a finished run for the current items exists; else null.
function flagRate(name, kind) {
  const run = robustnessResult();
  const row = run?.current ? run.result.items.find((x) => x.name === name) : null;
  return row ? Math.round((row.flags?.[kind] ?? 0) * 100) : null;
}

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
    case "codebook": return itemMeta(name)?.construct || ""; // the codebook construct
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

// The highest correlation of an item with the rest of another subscale, and that subscale's name.
function closestOther(row) {
  let best = null;
  for (const [group, r] of Object.entries(row?.r_other || {})) if (r != null && (best == null || r > best[1])) best = [group, r];
  return best;
}

/** The loading columns of one item in an analysis answer: its primary factor (largest absolute pattern
 * loading, signed), its loading on the factor labelled with its own codebook construct, and its highest
 * correlation with the rest of another subscale (from the subscale block that holds it). */
export function loadingColumns(answer, name, construct) {
  const out = { primary_factor: null, primary_loading: null, own_loading: null, mismatch: false,
    r_other_max: null, r_other_group: null, own_rest_r: null };
  const efa = answer?.efa;
  const v = efa?.loadings && !Array.isArray(efa.loadings) ? efa.loadings[name] : null;
  if (Array.isArray(v) && v.length) {
    let best = 0;
    v.forEach((x, j) => { if (Math.abs(x ?? 0) > Math.abs(v[best] ?? 0)) best = j; });
    const labels = efa.factors || v.map((_, j) => `Factor ${j + 1}`);
    out.primary_factor = labels[best] ?? `Factor ${best + 1}`;
    out.primary_loading = v[best] ?? null;
    const own = construct ? labels.indexOf(construct) : -1;
    out.own_loading = own >= 0 ? v[own] ?? null : null;
    out.mismatch = Boolean(construct) && out.primary_factor !== construct;
  }
  // the item's own subscale block (by its construct when grouped so, else whichever group holds it)
  const blocks = answer?.constructs || {};
  const holds = (b) => Array.isArray(b?.item_table) && b.item_table.some((r) => r.name === name);
  const block = holds(blocks[construct]) ? blocks[construct] : Object.values(blocks).find(holds);
  const row = block ? block.item_table.find((r) => r.name === name) : null;
  const other = closestOther(row);
  if (other) [out.r_other_group, out.r_other_max] = other;
  out.own_rest_r = row?.item_rest_r ?? null;
  return out;
}

export function render(container, state) {
  const a = state.analysis;
  const keep = new Set(allItems().filter((n) => !state.dropped.includes(n)));
  // On a subscale the figures are that subscale's own item analysis (issue 11); otherwise the whole pool's.
  const block = subscaleBlock(a);
  const groups = subscaleNames(a);
  // The descriptives (floor, ceiling, answers) stay the pool row's; the item-total figures are the subscale's.
  const pool = Object.fromEntries((a?.items || []).map((r) => [r.name, r]));
  const cols = (n) => loadingColumns(a, n, itemMeta(n)?.construct || pool[n]?.construct);
  const rows = block ? Object.fromEntries(block.item_table.map((r) => {
    const other = closestOther(r);
    return [r.name, { ...pool[r.name], ...r, ...cols(r.name), r_other_max: other ? other[1] : null, r_other_group: other ? other[0] : null,
      own_rest_r: r.item_rest_r }];
  })) : Object.fromEntries(Object.entries(pool).map(([n, r]) => [n, { ...r, ...cols(n) }]));
  const showOther = Boolean(block) || groups.length > 0;
  const flags = flagsByItem(a);
  const itemWarnings = warningsByItem(a);
  const alpha = block ? block.alpha : a?.reliability?.alpha;
  const showConstruct = !block || a?.grouping?.used === "factor"; // on a construct's own board the column says one thing
  const constructs = [...new Set((state.meta?.items || []).map((it) => it.construct).filter(Boolean))];
  const kinds = [...new Set((a?.efa?.flags || []).map((f) => f.kind))];

  let names = allItems().map((n, i) => ({ n, i }));
  if (block) {
    const members = new Set(block.items || block.item_table.map((r) => r.name));
    names = names.filter(({ n }) => members.has(n) || (!keep.has(n) && itemMeta(n)?.construct === state.subscale));
  }
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
    const itemWarns = kept ? itemWarnings[n] || [] : [];
    const elsewhere = kept && r && r.r_other_max != null && r.own_rest_r != null && r.r_other_max > r.own_rest_r;
    const negative = kept && r && r.item_rest_r != null && r.item_rest_r < 0;
    const own = m.construct || r?.construct || "";
    const better = kept && r && alpha != null && r.alpha_if_deleted != null && r.alpha_if_deleted > alpha;
    const tr = h("tr", { class: `item ${kept ? "kept" : "dropped"}`, tabindex: 0, dataset: { item: n },
      "aria-label": `${n}${kept ? "" : " (dropped)"}: ${m.text || ""}` },
    // The button says what a click does; the row's state is the word beside the name ("dropped") and its pattern.
    h("td", {}, h("button", { class: `toggle ${kept ? "on" : "off"}`, "aria-label": kept ? `Drop ${n}` : `Restore ${n}`,
      title: kept ? `Drop ${n} (D)` : `Restore ${n} (D)`, text: kept ? "Drop" : "Restore",
      onclick: (e) => { e.stopPropagation(); state.board.focus = n; actions.toggle(n); } })),
    h("th", { scope: "row", class: "name",
      title: kept && r ? `n ${r.n ?? "—"} · mean ${fmt(r.mean, 2)} · sd ${fmt(r.sd, 2)}${r.skew != null ? ` · skew ${fmt(r.skew, 2)}` : ""}` : null }, n, m.reverse || (state.reverse || []).includes(n) ? h("span", { class: "rev", title: "reverse-keyed", text: " ↺" }) : null,
    kept ? null : h("span", { class: "state-word", text: " dropped" })),
    h("td", { class: "wording", text: m.text || "" }),
    showConstruct ? h("td", { class: "codebook-construct", text: m.construct || "—" }) : null,
    h("td", { class: `num item-rest ${negative ? "negative" : ""}`,
      title: negative ? "negative: the item runs against the rest (check its wording and reverse key)" : null,
      "aria-label": negative ? `${fmt(r.item_rest_r, 2)}, negative: the item runs against the rest` : null },
    negative ? h("span", { class: "neg-mark", "aria-hidden": "true", text: "▼ " }) : null, kept && r ? fmt(r.item_rest_r, 2) : "—"),
    h("td", { class: `num ${better ? "better" : ""}`,
      title: kept && r && better ? "Alpha would rise without this item." : null,
      text: kept && r ? fmt(r.alpha_if_deleted, 3) : "—" }),
    h("td", { class: "num omega-if", text: kept && r ? fmt(r.omega_if_deleted, 3) : "—" }),
    h("td", { class: `num primary-factor ${kept && r?.mismatch ? "mismatch" : ""}`,
      title: kept && r?.mismatch ? `${n} loads most on “${r.primary_factor}”, not on its own construct “${own}”.` : null },
    kept && r?.mismatch ? h("span", { class: "mismatch-mark", role: "img", "aria-label": `not its own construct (${own})`, text: "≠ " }) : null,
    kept && r && r.primary_loading != null ? `${fmt(r.primary_loading, 2)} ${r.primary_factor}` : "—"),
    h("td", { class: "num own-loading", title: kept && r && own && r.own_loading == null ? `No factor carries the label “${own}”.` : null,
      text: kept && r && r.own_loading != null ? fmt(r.own_loading, 2) : "—" }),
    showOther ? h("td", { class: `num r-other ${elsewhere ? "elsewhere" : ""}`,
      title: elsewhere ? `${n} correlates more with the rest of “${r.r_other_group}” than with the rest of its own subscale.` : null },
    elsewhere ? h("span", { class: "elsewhere-mark", role: "img", "aria-label": "higher than with its own subscale", text: "↗ " }) : null,
    kept && r && r.r_other_max != null ? `${fmt(r.r_other_max, 2)} ${r.r_other_group}` : "—") : null,
    h("td", { class: "num", text: kept && r ? `${pct(r.floor)} / ${pct(r.ceiling)}` : "—" }),
    h("td", {}, kept && r ? distBar(r) : null),
    h("td", { class: "flags" }, itemFlags.map((f) => h("span", { class: `flag ${f.kind}`, tabindex: 0, role: "note",
      "aria-label": `${flagWord(f.kind)}${flagRate(n, f.kind) == null ? "" : ` in ${flagRate(n, f.kind)} % of resamples`}: ${f.message}`,
      dataset: { tip: f.message }, text: `${flagWord(f.kind)}${flagRate(n, f.kind) == null ? "" : ` · ${flagRate(n, f.kind)} %`}` })),
    itemWarns.map((w) => h("span", { class: `flag warn ${w.code}`, tabindex: 0, role: "note",
      "aria-label": `${w.word}: ${w.message}`, dataset: { tip: w.message, code: w.code }, text: w.word }))));
    tr.addEventListener("keydown", (e) => onKey(state, e, n, tr));
    tr.addEventListener("focus", () => { state.board.focus = n; });
    tbody.append(tr);
  }

  clear(container);
  const scope = block
    ? `Subscale “${state.subscale}” (${(block.items || []).length} active items, α ${fmt(block.alpha)}): item-rest r, α and ω if dropped are computed within this subscale; the last column is the item's highest correlation with the rest of another subscale.`
    : `Whole-pool figures: item-rest r, α and ω if dropped treat every active item as one scale.${groups.length ? " Choose a subscale under “Figures for” for its own item analysis." : ""}`;
  container.append(h("div", { class: "board-tools" },
    groups.length ? h("label", {}, "Figures for ", select([["", "Whole pool"], ...groups.map((g) => [g, g])], block ? state.subscale : "",
      (v) => actions.setSubscale(v), { id: "subscale" })) : null,
    h("label", {}, "Construct ", select([["", "all"], ...constructs.map((c) => [c, c])], state.filter.construct,
      (v) => actions.filter({ construct: v }), { id: "filter-construct" })),
    h("label", {}, "Show ", select([["", "every item"], ["any", "flagged items"], ...kinds.map((k) => [k, `flag: ${flagWord(k)}`]),
      ["dropped", "dropped items"]], state.filter.flag, (v) => actions.filter({ flag: v }), { id: "filter-flag" })),
    h("span", { class: "muted keys", text: "Keys: ↑/↓ move · D or Space drops/restores · Ctrl+Z undo · Ctrl+Y redo" })));
  container.append(h("p", { class: `board-scope ${block ? "subscale" : "pool"}`, id: "board-scope", text: scope }));
  if (!names.length) container.append(note("No item matches this filter."));
  container.append(h("div", { class: "table-wrap board-wrap" }, h("table", { class: "board", id: "item-board" },
    h("thead", {}, h("tr", {},
      h("th", { scope: "col", text: "" }), head("Item", "name"), head("Wording", "order", "Pool order"), showConstruct ? head("Construct", "codebook") : null,
      head("Item-rest r", "item_rest_r", "Corrected item-total correlation"),
      head("α if dropped", "alpha_if_deleted", block ? "Alpha of the subscale without this item" : "Alpha of the scale without this item"),
      head("ω if dropped", "omega_if_deleted", block ? "Omega of the subscale without this item" : "Omega of the scale without this item"),
      head("Primary factor", "primary_loading", "The factor the item loads on most (pattern loading, signed); ≠ marks a factor other than the item's own construct"),
      head("Own-construct loading", "own_loading", "Pattern loading on the factor labelled with the item's codebook construct (— when no factor carries that label)"),
      showOther ? head("Closest other subscale", "r_other_max", "Highest correlation with the rest of another subscale (higher than the item-rest r within its own subscale: it may belong there)") : null,
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
