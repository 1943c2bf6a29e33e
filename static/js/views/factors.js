// How many factors: scree against the parallel-analysis threshold, MAP, and the override.
import { mapCurve, scree } from "../charts.js";
import { actions } from "../state.js";
import { clear, fmt, h, note, section, table } from "./dom.js";

export function render(container, state) {
  clear(container);
  const a = state.analysis;
  const ret = a?.retention;
  if (!ret) { container.append(note("No retention analysis yet.")); return; }
  const par = ret.parallel || {};
  const map = ret.map || {};
  const fac = a.factorability || {};
  const chosen = a.efa?.n_factors;
  const k = (a.items || []).length;
  const options = [["", `automatic (parallel analysis: ${ret.suggested ?? par.n_factors ?? "?"})`]];
  for (let m = 1; m <= Math.max(1, Math.floor(k / 2)); m += 1) options.push([String(m), `${m} factor${m === 1 ? "" : "s"}`]);
  const pick = h("select", { id: "n-factors", onchange: (e) => actions.setSetting("n_factors", e.target.value ? Number(e.target.value) : null) },
    options.map(([v, label]) => h("option", { value: v, text: label, selected: String(state.settings.n_factors ?? "") === v })));
  const screeEl = h("div", { class: "chart", id: "scree" });
  const mapEl = h("div", { class: "chart", id: "map" });
  const kaiser = typeof ret.kaiser === "object" && ret.kaiser !== null ? ret.kaiser.n_factors : ret.kaiser;
  container.append(section("How many factors",
    h("div", { class: "toolbar" }, h("label", {}, "Factors to extract ", pick),
      h("span", { class: "muted", text: `now: ${chosen ?? "—"}` })),
    table(["Rule", "Keeps", "Note"], [
      ["Parallel analysis (Horn 1965)", par.n_factors ?? "—", `observed eigenvalues above the 95th percentile of eigenvalues from ${par.method === "permuted_ordinal"
        ? "random ordinal data with the observed answer distribution of each item, correlated the same way (polychoric; Garrido, Abad & Ponsoda 2013)"
        : "random normal data of the same size"} (${/factor/i.test(par.variant || "") ? "common-factor" : "principal-component"} eigenvalues)`],
      ["Velicer's MAP (1976)", map.n_factors ?? "—", "lowest average squared partial correlation"],
      ["Eigenvalues above 1 (Kaiser)", kaiser ?? "—", "shown for comparison only; it tends to keep too many"],
    ], { className: "grid" }),
    h("div", { class: "two" }, screeEl, mapEl),
    h("p", { class: "muted", text: `Factorability: KMO ${fmt(fac.kmo, 2)}${fac.bartlett ? `; Bartlett χ² ${fmt(fac.bartlett.chi2, 1)} on ${fac.bartlett.df} df, p ${fac.bartlett.p < 0.001 ? "< .001" : fmt(fac.bartlett.p, 3)}` : ""}.` })));
  scree(screeEl, { observed: par.observed || [], threshold: par.threshold || [], suggested: ret.suggested ?? par.n_factors, chosen });
  if (map.values && map.values.length) mapCurve(mapEl, { values: map.values, best: map.n_factors });
}
