// Loadings heatmap: items x factors (pattern, or structure on a toggle), grouped by primary factor.
import { factorCorrelations, loadingsHeatmap } from "../charts.js";
import { findWarning, flagWord, flagsByItem, optionLabel, warningText, warningsByItem } from "../labels.js";
import { actions, itemMeta } from "../state.js";
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
  clear(container);
  const efa = state.analysis?.efa;
  const degenerate = findWarning(state.analysis, "rotation_degenerate");
  if (!efa || !efa.loadings || !Object.keys(efa.loadings).length) {
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
  const order = ordered(efa);
  const rows = order.map(({ name }) => ({
    name, text: itemMeta(name)?.text || "", values: M[index[name]],
    flagged: Boolean(flags[name]?.length || warned[name]?.length),
    flagText: [...(flags[name] || []).map((f) => `${flagWord(f.kind)}: ${f.message}`),
      ...(warned[name] || []).map((w) => `${w.word}: ${w.message}`)].join(" · "),
  }));

  const toggle = h("div", { class: "segmented", role: "group", "aria-label": "Which loadings" },
    h("button", { class: showStructure ? "" : "on", "aria-pressed": String(!showStructure), id: "show-pattern", text: "Pattern",
      onclick: () => actions.setStructure(false) }),
    h("button", { class: showStructure ? "on" : "", "aria-pressed": String(Boolean(showStructure)), id: "show-structure", text: "Structure",
      disabled: !efa.structure, onclick: () => actions.setStructure(true) }));
  const heat = h("div", { class: "chart", id: "heatmap" });
  const pickBar = h("div", { class: "pick-bar", id: "pick-bar", "aria-live": "polite" });
  const showPick = (name) => {
    clear(pickBar);
    if (!name) return;
    const m = itemMeta(name) || {};
    const f = flags[name] || [];
    pickBar.append(...[h("strong", { text: name }), " ", h("span", { text: m.text || "" }),
      f.length ? h("span", { class: "muted", text: ` · ${f.map((x) => x.message).join(" ")}` }) : null, " ",
      h("button", { class: "primary", id: "pick-drop", text: `Drop ${name}`, onclick: () => { clear(pickBar); actions.toggle(name); } }),
      " ", h("button", { text: "Close", onclick: () => clear(pickBar) })].filter(Boolean));
  };
  const phi = h("div", { class: "chart small", id: "phi" });
  const side = h("div", { class: "side" }, phi);
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

  container.append(section(`Loadings: ${efa.n_factors} factor${efa.n_factors === 1 ? "" : "s"}`,
    h("div", { class: "toolbar" }, toggle, h("span", { class: "muted", text: fitText })),
    degenerate ? degenerateBox(degenerate) : null,
    h("p", { class: "muted", text: "Items are grouped by the factor they load on most; ⚑ marks a flagged item (hover for why). Blue is negative, orange positive. Click a row to drop that item." }),
    pickBar,
    h("div", { class: "heat-layout" }, heat, side),
    warningList(efa.warnings, "About this solution")));
  loadingsHeatmap(heat, { rows, factors, groups: order.map((r) => r.primary), onPick: showPick, title: showStructure ? "Structure (item-factor correlations)" : "Pattern loadings" })
    .then(() => heat.setAttribute("data-rendered", String((state.renders.loadings += 1))));
  if (efa.factor_correlations && efa.factor_correlations.length > 1) {
    factorCorrelations(phi, { factors, matrix: efa.factor_correlations });
  } else {
    phi.append(note(efa.n_factors > 1 ? "Orthogonal rotation: the factors are uncorrelated by construction." : "One factor: no factor correlations."));
  }
}
