// Loadings heatmap: items x factors (pattern, or structure on a toggle), grouped by primary factor.
import { cellsPrinted, factorCorrelations, heatKey, loadingsHeatmap, markHeatRow, purgeWithin } from "../charts.js";
import { findWarning, flagWord, flagsByItem, optionLabel, warningText, warningsByItem } from "../labels.js";
import { actions, allItems, itemMeta, loadingCutoff } from "../state.js";
import { clear, fmt, h, note, section, warningList } from "./dom.js";

function asMatrix(obj, items) {
  if (!obj) return null;
  if (Array.isArray(obj)) return obj;
  return items.map((n) => obj[n] || []);
}

export function ordered(efa) {
  const items = Object.keys(efa.loadings || {});
  const P = asMatrix(efa.loadings, items);
  const rows = items.map((n, i) => {
    const v = P[i];
    let best = 0;
    v.forEach((x, j) => { if (Math.abs(x) > Math.abs(v[best])) best = j; });
    return { name: n, primary: best, size: Math.abs(v[best] ?? 0), i };
  });
  rows.sort((a, b) => a.primary - b.primary || b.size - a.size || a.i - b.i);
  return rows;
}

// A rotation whose solution degenerated is not shown: its message stands where the loadings would be.
function degenerateBox(w) {
  return h("div", { class: "degenerate", id: "rotation-degenerate", role: "alert" },
    h("strong", { text: "This rotation's solution is not shown. " }), h("span", { text: w.message || "" }));
}

export function render(container, state) {
  // The drawn heatmap and factor-correlation chart are kept across re-renders (a refit): the heatmap's SVG is
  // then updated in place (only what changed is written) instead of drawn from nothing.
  // The drawn heatmap also stays where it is in the page (its panel, grid and keyboard box are reused, the rest
  // is replaced around them): a chart taken out and put back is styled and laid out again from nothing (30-80 ms
  // more per redraw at 250 items), and the keyboard focus on the box stays put.
  const drawn = container.querySelector(":scope > section.panel > .heat-layout > #heat-keys > #heatmap.heat-chart");
  const place = drawn ? { heat: drawn, keys: drawn.parentElement, layout: drawn.parentElement.parentElement,
    panel: drawn.parentElement.parentElement.parentElement } : null;
  const kept = place ? { heatmap: drawn } : {};
  for (const [id, drawnClass] of [["heatmap", "heat-chart"], ["phi", "phi-chart"]]) {
    const el = container.querySelector(`#${id}.${drawnClass}`);
    if (el && !kept[id]) { el.remove(); kept[id] = el; }
  }
  if (!place) clear(container);
  const efa = state.analysis?.efa;
  const degenerate = findWarning(state.analysis, "rotation_degenerate");
  if (!efa || !efa.loadings || !Object.keys(efa.loadings).length) {
    clear(container);
    const others = (efa?.warnings || []).filter((w) => w?.code !== "rotation_degenerate");
    container.append(section("Loadings", degenerate ? degenerateBox(degenerate) : null,
      others.length || !degenerate ? note(others.map(warningText).join(" ") || "No factor solution yet.") : null));
    return;
  }
  const items = Object.keys(efa.loadings);
  const showStructure = state.structure && efa.structure;
  const M = asMatrix(showStructure ? efa.structure : efa.loadings, items);
  const index = Object.fromEntries(items.map((n, i) => [n, i]));
  const flags = flagsByItem(state.analysis);
  const warned = warningsByItem(state.analysis);
  const factors = efa.factors || M[0].map((_, j) => `F${j + 1}`);
  const byFactor = ordered(efa);
  const pool = Object.fromEntries(allItems().map((n, i) => [n, i]));
  const order = state.heat.poolOrder
    ? [...byFactor].sort((x, y) => (pool[x.name] ?? x.i) - (pool[y.name] ?? y.i) || x.i - y.i) : byFactor;
  const cut = loadingCutoff();
  const rows = order.map(({ name, primary }) => {
    const construct = itemMeta(name)?.construct || "";
    const mismatch = Boolean(construct) && factors[primary] !== construct;
    const values = M[index[name]];
    return {
      name, construct, primary, mismatch, text: itemMeta(name)?.text || "", values,
      label: construct ? `${name} · ${construct}${mismatch ? " ≠" : ""}` : name,
      cells: values.map((v) => (v == null || Math.abs(v) < cut ? "" : fmt(v, 2))),
      flagged: Boolean(flags[name]?.length || warned[name]?.length),
      flagText: [...(flags[name] || []).map((f) => `${flagWord(f.kind)}: ${f.message}`),
        ...(warned[name] || []).map((w) => `${w.word}: ${w.message}`)].join(" · "),
    };
  });
  const names = rows.map((r) => r.name);
  if (state.heat.row && !names.includes(state.heat.row)) state.heat.row = null;
  const readOut = (name) => {
    const r = rows[names.indexOf(name)];
    if (!r) return "";
    const own = r.construct ? ` (${r.construct}${r.mismatch ? `; loads most on ${factors[r.primary]}` : ""})` : "";
    return `${name}${own}: “${r.text}” Loadings: ${factors.map((f, j) => `${f} ${fmt(r.values[j], 2)}`).join(", ")}.`;
  };

  const toggle = h("div", { class: "segmented", role: "group", "aria-label": "Which loadings" },
    h("button", { class: showStructure ? "" : "on", "aria-pressed": String(!showStructure), id: "show-pattern", text: "Pattern",
      onclick: () => actions.setStructure(false) }),
    h("button", { class: showStructure ? "on" : "", "aria-pressed": String(Boolean(showStructure)), id: "show-structure", text: "Structure",
      disabled: !efa.structure, onclick: () => actions.setStructure(true) }));
  const heat = kept.heatmap || h("div", { class: "chart", id: "heatmap" });
  // The selected (keyboard) or pointed-at row in words: name, construct, wording and every loading, unrounded by the cut-off.
  const rowLine = h("p", { class: "heat-hover", id: "heat-row", "aria-live": "polite",
    text: state.heat.row ? readOut(state.heat.row) : "Point at a row, or focus the heatmap and use ↑/↓ (Enter opens the row)." });
  const pickBar = h("div", { class: "pick-bar", id: "pick-bar", "aria-live": "polite" });
  const showPick = (name) => {
    clear(pickBar);
    if (!name) return;
    const m = itemMeta(name) || {};
    const f = flags[name] || [];
    const r = rows[names.indexOf(name)];
    pickBar.append(...[h("strong", { text: name }), m.construct ? h("span", { class: "muted", text: ` (${m.construct})` }) : null,
      " ", h("span", { class: "pick-wording", text: m.text || "" }),
      r ? h("span", { class: "muted", text: ` · ${factors.map((x, j) => `${x} ${fmt(r.values[j], 2)}`).join(", ")}` }) : null,
      f.length ? h("span", { class: "muted", text: ` · ${f.map((x) => x.message).join(" ")}` }) : null, " ",
      h("button", { class: "primary", id: "pick-drop", text: `Drop ${name}`, onclick: () => {
        // the analysis request leaves first; the focus (a style and layout pass) follows
        clear(pickBar); actions.toggle(name); document.getElementById("heat-keys")?.focus({ preventScroll: true });
      } }),
      " ", h("button", { id: "pick-close", text: "Close", onclick: () => { clear(pickBar); document.getElementById("heat-keys")?.focus({ preventScroll: true }); } }),
    ].filter(Boolean));
  };
  const selectRow = (name) => {
    state.heat.row = name;
    rowLine.textContent = readOut(name);
    markHeatRow(heat, names.indexOf(name));
  };
  const keys = place ? place.keys : h("div", { class: "heat-keys", id: "heat-keys", tabindex: 0, role: "group",
    "aria-label": "Loadings heatmap. Up and down arrows select a row, Enter opens it (with its Drop button), Escape closes it.",
    "aria-describedby": "heat-row" }, heat);
  if (keys._onKeys) keys.removeEventListener("keydown", keys._onKeys); // a reused box: this render's rows
  keys._onKeys = (e) => {
    if (e.target !== keys) return;
    if (e.key === "ArrowDown" || e.key === "ArrowUp") {
      e.preventDefault();
      if (!names.length) return;
      const i = names.indexOf(state.heat.row);
      const next = i < 0 ? (e.key === "ArrowDown" ? 0 : names.length - 1) : Math.max(0, Math.min(names.length - 1, i + (e.key === "ArrowDown" ? 1 : -1)));
      selectRow(names[next]);
    } else if (e.key === "Enter" && state.heat.row) {
      e.preventDefault();
      showPick(state.heat.row);
      document.getElementById("pick-drop")?.focus({ preventScroll: true });
    } else if (e.key === "Escape") clear(pickBar);
  };
  keys.addEventListener("keydown", keys._onKeys);
  const cutOption = (state.options?.display || []).find((o) => o.name === "loading_cutoff");
  const cutInput = h("input", { type: "number", id: "loading-cutoff", step: "0.05", min: cutOption?.min ?? 0, max: cutOption?.max ?? 1,
    value: String(cut), title: cutOption?.help || null,
    onchange: (e) => {
      const v = Number(e.target.value);
      const lo = cutOption?.min ?? 0;
      const hi = cutOption?.max ?? 1;
      if (e.target.value === "" || Number.isNaN(v)) { e.target.value = String(cut); return; }
      const next = Math.min(hi, Math.max(lo, v));
      if (next !== loadingCutoff()) actions.setHeatmap({ cutoff: next }); // a blur after the redraw changes nothing
    } });
  const orderToggle = h("div", { class: "segmented", role: "group", "aria-label": "Row order" },
    h("button", { class: state.heat.poolOrder ? "" : "on", "aria-pressed": String(!state.heat.poolOrder), id: "heat-order-factor",
      text: "By factor", onclick: () => actions.setHeatmap({ poolOrder: false }) }),
    h("button", { class: state.heat.poolOrder ? "on" : "", "aria-pressed": String(state.heat.poolOrder), id: "heat-order-pool",
      text: "Pool order", onclick: () => actions.setHeatmap({ poolOrder: true }) }));
  const drawPhi = Boolean(efa.factor_correlations && efa.factor_correlations.length > 1);
  const phi = (drawPhi && kept.phi) || h("div", { class: "chart small", id: "phi" });
  const side = h("div", { class: "side" }, heatKey(h), phi);
  if (efa.communalities) {
    const comm = asMatrix(efa.communalities, items);
    side.append(h("p", { class: "muted", text: "Lowest communalities (the share of an item's variance the factors explain):" }));
    const lows = items.map((n, i) => [n, Array.isArray(efa.communalities) ? comm[i] : efa.communalities[n]])
      .filter(([, c]) => c != null).sort((x, y) => x[1] - y[1]).slice(0, 4);
    side.append(h("ul", { class: "plain" }, lows.map(([n, c]) => h("li", { text: `${n}: ${fmt(c, 2)}` }))));
  }
  const fit = efa.fit || {};
  const fitText = [optionLabel("extraction", efa.extraction || state.settings.extraction),
    `${optionLabel("rotation", efa.rotation || state.settings.rotation)} rotation`,
    fit.rmsr != null ? `RMSR ${fmt(fit.rmsr, 3)}` : null, fit.rmsea != null ? `RMSEA ${fmt(fit.rmsea, 3)}` : null,
    fit.tli != null ? `TLI ${fmt(fit.tli, 3)}` : null, efa.converged === false ? "did not converge" : null].filter(Boolean).join(" · ");

  const layout = h("div", { class: "heat-layout" }, place ? null : keys, side);
  const panel = section(`Loadings: ${efa.n_factors} factor${efa.n_factors === 1 ? "" : "s"}`,
    h("div", { class: "toolbar heat-options" }, toggle,
      h("label", { for: "loading-cutoff" }, `${cutOption?.label || "Hide loadings below"} `), cutInput,
      orderToggle, h("span", { class: "muted", text: fitText })),
    degenerate ? degenerateBox(degenerate) : null,
    h("p", { class: "muted", text: `${state.heat.poolOrder ? "Items in pool order, a rule between codebook constructs" : "Items are grouped by the factor they load on most"}; beside each item its codebook construct, ≠ when it loads most on another factor; ⚑ marks a flagged item (hover for why). ${cellsPrinted(rows.length, factors.length) ? `Loadings smaller than ${fmt(cut, 2)} are left blank (the hover still gives them).` : "With this many items the cells carry colour only: point at a row (or use ↑/↓) for its values."} Blue is negative, orange positive. Click a row to drop that item.` }),
    pickBar, rowLine, layout,
    warningList(efa.warnings, "About this solution"));
  if (!place) container.append(panel);
  else { // the new panel's parts go around the drawn grid; the new side column beside the drawn heatmap's box
    for (const node of [...container.childNodes]) if (node !== place.panel) { purgeWithin(node); node.remove(); }
    for (const node of [...place.panel.childNodes]) if (node !== place.layout) { purgeWithin(node); node.remove(); }
    for (const node of [...place.layout.childNodes]) if (node !== place.keys) { purgeWithin(node); node.remove(); }
    const parts = [...panel.childNodes];
    const at = parts.indexOf(layout);
    place.layout.before(...parts.slice(0, at));
    place.layout.after(...parts.slice(at + 1));
    place.layout.append(side);
  }
  loadingsHeatmap(heat, { rows, factors, groups: state.heat.poolOrder ? rows.map((r) => r.construct) : order.map((r) => r.primary),
    onPick: (name) => { selectRow(name); showPick(name); }, onHover: (name) => { rowLine.textContent = readOut(name); },
    selected: state.heat.row ? names.indexOf(state.heat.row) : null,
    title: showStructure ? "Structure (item-factor correlations)" : "Pattern loadings" })
    .then(() => heat.setAttribute("data-rendered", String((state.renders.loadings += 1))));
  if (drawPhi) factorCorrelations(phi, { factors, matrix: efa.factor_correlations });
  else {
    phi.append(note(efa.n_factors > 1 ? "Orthogonal rotation: the factors are uncorrelated by construction." : "One factor: no factor correlations."));
  }
}
