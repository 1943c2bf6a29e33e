// Words shared by several views: flag names, setting and option labels (from the served options),
// warning text. Not a view: it renders nothing.
import { state } from "./state.js";

export const FLAG_WORDS = {
  cross_loading: "cross-loads", weak_loading: "weak", misplaced: "elsewhere", heywood: "Heywood",
  reverse_suspect: "reverse?", near_duplicate: "duplicate?", floor_ceiling: "floor/ceiling",
};
export const flagWord = (kind) => FLAG_WORDS[kind] || String(kind || "flag").replace(/_/g, " ");

/** The flags of an analysis answer, grouped by item. */
export function flagsByItem(analysis) {
  const out = {};
  for (const f of analysis?.efa?.flags || []) (out[f.item] ||= []).push(f);
  return out;
}

// How a setting is named in a sentence ("set missing answers to Listwise").
const SETTING_NAMES = { correlation: "correlation", extraction: "extraction", rotation: "rotation", missing: "missing answers",
  n_factors: "number of factors", pa_iterations: "parallel-analysis iterations", pa_variant: "parallel-analysis eigenvalues",
  gamma: "oblimin gamma", seed: "random seed" };

/** The served description of a setting ({name, type, default, choices?, min?, max?, help}), or undefined. */
export const settingOption = (key) => (state.options?.settings || []).find((o) => o.name === key);

/** A setting's name in running text ("missing answers"). */
export function settingName(key) {
  const o = settingOption(key);
  if (o?.label) return o.label.charAt(0).toLowerCase() + o.label.slice(1);
  return SETTING_NAMES[key] || String(key).replace(/_/g, " ");
}

/** The words a person reads for a setting's value ("Maximum likelihood" for "ml"). */
export function optionLabel(key, value) {
  if (value == null) return "automatic";
  const found = (settingOption(key)?.choices || []).find((c) => String(c.value) === String(value));
  return found ? found.label : String(value);
}

/** The label of a flag threshold ("Weak: primary loading below"), without its source. */
export function thresholdLabel(key) {
  const found = (state.options?.thresholds || []).find((t) => t.name === key);
  return found?.label || String(key).replace(/_/g, " ");
}

/** A warning's text: analysis answers give {code, message, items}; older snapshots keep plain sentences. */
export const warningText = (w) => (w != null && typeof w === "object" ? String(w.message ?? w.code ?? "") : String(w ?? ""));

// Coded warnings that concern particular items: the chip shown on those items' board and heatmap rows.
export const WARNING_WORDS = {
  factor_few_items: "factor has few items", polychoric_empty_cells: "empty cell", polychoric_zero_cell_correction: "empty cell",
  polychoric_boundary: "boundary r", polychoric_sparse_category: "sparse category", rotation_degenerate: "degenerate rotation",
};

/** Every coded warning of an answer (top level, correlations, factor solution), each (code, items) once. */
export function codedWarnings(analysis) {
  const seen = new Set();
  const out = [];
  for (const w of [...(analysis?.warnings || []), ...(analysis?.correlations?.warnings || []), ...(analysis?.efa?.warnings || [])]) {
    if (w == null || typeof w !== "object" || !w.code) continue;
    const key = JSON.stringify([w.code, w.items || [], w.message]);
    if (!seen.has(key)) { seen.add(key); out.push(w); }
  }
  return out;
}

/** The item-level warnings of an answer (codes in WARNING_WORDS), grouped by item: {item: [{code, word, message}]}. */
export function warningsByItem(analysis) {
  const out = {};
  for (const w of codedWarnings(analysis)) {
    if (!WARNING_WORDS[w.code]) continue;
    for (const it of w.items || []) {
      const list = (out[it] ||= []);
      if (!list.some((x) => x.code === w.code && x.message === w.message)) list.push({ code: w.code, word: WARNING_WORDS[w.code], message: w.message });
    }
  }
  return out;
}

/** The warning with this code (first found), or undefined. */
export const findWarning = (analysis, code) => codedWarnings(analysis).find((w) => w.code === code);
