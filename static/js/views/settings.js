// Settings: every change refits. Flag thresholds are heuristics and are labelled as such.
import { DEFAULT_SETTINGS, actions, allItems, itemMeta, state } from "../state.js";
import { clear, h, note, section, select } from "./dom.js";

export const THRESHOLDS = [
  ["primary_min", 0.40, "Weak: primary loading below (Howard 2016)"],
  ["communality_min", 0.20, "Weak: communality below"],
  ["cross_min", 0.30, "Cross-loading: a second loading of at least (Howard 2016)"],
  ["cross_gap", 0.20, "Cross-loading: and less than this below the primary (Howard 2016)"],
  ["item_rest_min", 0.0, "Reverse suspect: item-rest r below"],
  ["redundant_r", 0.80, "Near-duplicate: inter-item r of at least"],
  ["extreme_share", 0.50, "Floor/ceiling: share of answers at one end of at least"],
  ["heywood_communality", 0.995, "Heywood: communality of at least"],
];

export function render(container) {
  clear(container);
  const s = state.settings;
  const row = (label, control, help) => h("div", { class: "setting" }, h("label", {}, h("span", { class: "label", text: label }), control),
    h("p", { class: "muted", text: help }));
  const served = state.analysis?.efa?.thresholds || state.analysis?.settings?.thresholds || {};
  const known = new Set(THRESHOLDS.map(([k]) => k));
  const extra = Object.entries(served).filter(([k, v]) => !known.has(k) && typeof v === "number")
    .map(([k, v]) => [k, v, k.replace(/_/g, " ")]);
  const thresholdInputs = [...THRESHOLDS, ...extra].map(([key, def, label]) => {
    const current = state.thresholds[key] ?? served[key] ?? def;
    return h("label", { class: "threshold" }, h("span", { text: label }),
      h("input", { type: "number", step: "0.05", min: "-1", max: "1", value: String(current), id: `th-${key}`,
        onchange: (e) => { const v = Number(e.target.value); if (!Number.isNaN(v)) actions.setThreshold(key, v === def ? null : v); } }));
  });
  const declared = new Set(state.reverse ?? (state.meta?.items || []).filter((it) => it.reverse).map((it) => it.name));
  const reverseBoxes = allItems().map((n) => h("label", { class: "chip", title: itemMeta(n)?.text || "" },
    h("input", { type: "checkbox", checked: declared.has(n), onchange: () => actions.toggleReverse(n) }), ` ${n}`));

  container.append(section("Analysis settings",
    note("Every change refits the analysis for everyone watching; the settings are part of the page address."),
    row("Correlation", select([["pearson", "Pearson"], ["polychoric", "Polychoric (ordinal answers)"]], s.correlation,
      (v) => actions.setSetting("correlation", v), { id: "set-correlation" }),
    "Polychoric treats answers as ordered categories of a continuous opinion; slower, and warned about when categories are sparse."),
    row("Extraction", select([["minres", "Minimum residual"], ["ml", "Maximum likelihood"], ["paf", "Principal axis"]], s.extraction,
      (v) => actions.setSetting("extraction", v), { id: "set-extraction" }), "ML adds chi-square, RMSEA and TLI."),
    row("Rotation", select([["oblimin", "Oblimin (quartimin)"], ["promax", "Promax"], ["geomin", "Geomin"], ["varimax", "Varimax (orthogonal)"], ["none", "None"]],
      s.rotation, (v) => actions.setSetting("rotation", v), { id: "set-rotation" }), "Oblique rotations let the factors correlate, as constructs of one scale usually do."),
    row("Missing answers", select([["pairwise", "Pairwise (every answer counts)"], ["listwise", "Listwise (complete respondents only)"]],
      s.missing, (v) => actions.setSetting("missing", v), { id: "set-missing" }), "Pairwise uses all answers per pair of items."),
    h("fieldset", { class: "thresholds" }, h("legend", { text: "Flag thresholds (rules of thumb, not laws)" }), thresholdInputs,
      h("button", { type: "button", text: "Back to the defaults", onclick: () => actions.resetThresholds() })),
    h("fieldset", { class: "reverse" }, h("legend", { text: "Reverse-keyed items (scored as min + max − answer)" }), reverseBoxes,
      state.reverse ? h("button", { type: "button", text: "Use the codebook's choice", onclick: () => actions.resetReverse() }) : null),
    h("p", { class: "muted", text: `Defaults: ${Object.entries(DEFAULT_SETTINGS).map(([k, v]) => `${k} ${v ?? "auto"}`).join(", ")}.` })));
}
