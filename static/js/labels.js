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
