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

export const OPTIONS = {
  correlation: [["pearson", "Pearson"], ["polychoric", "Polychoric (ordinal answers)"]],
  extraction: [["minres", "Minimum residual"], ["ml", "Maximum likelihood"], ["paf", "Principal axis"]],
  rotation: [["oblimin", "Oblimin (quartimin)"], ["promax", "Promax"], ["geomin", "Geomin"], ["varimax", "Varimax (orthogonal)"], ["none", "None"]],
  missing: [["pairwise", "Pairwise (every answer counts)"], ["listwise", "Listwise (complete respondents only)"]],
};

/** The words a person reads for a setting's value ("Maximum likelihood" for "ml"). */
export function optionLabel(key, value) {
  if (key === "n_factors") return value == null ? "automatic" : String(value);
  const found = (OPTIONS[key] || []).find(([v]) => v === value);
  return found ? found[1] : String(value);
}

/** The label of a flag threshold ("Weak: primary loading below"), without its source. */
export function thresholdLabel(key) {
  const found = THRESHOLDS.find(([k]) => k === key);
  return found ? found[2].replace(/\s*\([^)]*\d{4}\)$/, "") : key.replace(/_/g, " ");
}

export function render(container) {
  clear(container);
  const s = state.settings;
  const row = (label, control, help) => h("div", { class: "setting" }, h("label", { for: control.id, class: "label", text: label }), control,
    h("p", { class: "muted", text: help }));
  const served = state.analysis?.efa?.thresholds || state.analysis?.settings?.thresholds || {};
  const known = new Set(THRESHOLDS.map(([k]) => k));
  const extra = Object.entries(served).filter(([k, v]) => !known.has(k) && typeof v === "number")
    .map(([k, v]) => [k, v, k.replace(/_/g, " ")]);
  const thresholdInputs = [...THRESHOLDS, ...extra].map(([key, def, label]) => {
    const current = state.thresholds[key] ?? served[key] ?? def;
    const changedHere = state.thresholds[key] != null && state.thresholds[key] !== def;
    return h("label", { class: `threshold${changedHere ? " changed" : ""}` }, h("span", { text: label }),
      h("span", { class: "threshold-input" },
        h("input", { type: "number", step: "0.05", min: "-1", max: "1", value: String(current), id: `th-${key}`,
          onchange: (e) => { const v = Number(e.target.value); if (e.target.value !== "" && !Number.isNaN(v)) actions.setThreshold(key, v === def ? null : v); } }),
        h("span", { class: "muted default", text: changedHere ? `default ${def}` : "" })));
  });
  const declared = new Set(state.reverse ?? (state.meta?.items || []).filter((it) => it.reverse).map((it) => it.name));
  const reverseBoxes = allItems().map((n, i) => h("label", { class: "chip", title: itemMeta(n)?.text || "" },
    h("input", { type: "checkbox", id: `rev-${i}`, checked: declared.has(n), onchange: () => actions.toggleReverse(n) }), ` ${n}`));

  container.append(section("Analysis settings",
    note("Every change refits the analysis for everyone watching; the settings are part of the page address."),
    row("Correlation", select(OPTIONS.correlation, s.correlation,
      (v) => actions.setSetting("correlation", v), { id: "set-correlation" }),
    "Polychoric treats answers as ordered categories of a continuous opinion; warned about when categories are sparse. It applies to the factor sections; alpha and omega always rest on the observed answers (the sum score people get)."),
    row("Extraction", select(OPTIONS.extraction, s.extraction,
      (v) => actions.setSetting("extraction", v), { id: "set-extraction" }), "ML adds chi-square, RMSEA and TLI."),
    row("Rotation", select(OPTIONS.rotation, s.rotation, (v) => actions.setSetting("rotation", v), { id: "set-rotation" }), "Oblique rotations let the factors correlate, as constructs of one scale usually do."),
    row("Missing answers", select(OPTIONS.missing, s.missing, (v) => actions.setSetting("missing", v), { id: "set-missing" }), "Pairwise uses every answer available for each pair of items; listwise keeps only respondents who answered every item."),
    h("fieldset", { class: "thresholds" }, h("legend", { text: "Flag thresholds (rules of thumb, not laws)" }), thresholdInputs,
      h("button", { type: "button", text: "Back to the defaults", onclick: () => actions.resetThresholds() })),
    h("fieldset", { class: "reverse" }, h("legend", { text: "Reverse-keyed items (scored as min + max − answer)" }), reverseBoxes,
      state.reverse ? h("button", { type: "button", text: "Use the codebook's choice", onclick: () => actions.resetReverse() }) : null),
    h("p", { class: "muted", text: `Defaults: ${Object.entries(DEFAULT_SETTINGS).map(([k, v]) => `${k === "n_factors" ? "number of factors" : k} ${optionLabel(k, v)}`).join(", ")}.` })));
}
