// Hold-out confirmation: explore on one half of the respondents, fit the structure as a confirmatory model
// on the other half (POST /api/datasets/{id}/confirmation). Fit indices in plain words beside the
// conventional cut-offs (Hu & Bentler 1999), the confirmed loadings, and what does not fit.
import { api } from "../api.js";
import { analysisRequest } from "../state.js";
import { clear, current, fmt, h, note, section, select, table, warningList } from "./dom.js";

const STRUCTURES = [["codebook", "Codebook constructs"], ["exploration", "Primary factors of the exploration half"]];
const SPLITS = [["0.5", "half and half"], ["0.3", "30 % explore, 70 % confirm"], ["0.7", "70 % explore, 30 % confirm"],
  ["", "no split: all respondents confirm (codebook only)"]];
const WORDS = {
  cfi: "CFI: how much better than a model of uncorrelated items, 0 to 1 (Bentler 1990)",
  tli: "TLI: the same, penalised for model size (Tucker & Lewis 1973)",
  rmsea: "RMSEA: misfit per degree of freedom, 0 is perfect (Steiger 1990)",
  srmr: "SRMR: average gap between observed and implied correlations",
};

function meets(value, cut) {
  if (value == null || !cut) return "—";
  const ok = cut.op === ">=" ? value >= cut.value : value <= cut.value;
  return ok ? "within the convention" : "outside the convention";
}

function fitTable(a) {
  const f = a.fit || {};
  const rows = ["cfi", "tli", "rmsea", "srmr"].map((k) => {
    const cut = a.cutoffs?.[k];
    const shown = k === "rmsea" && f.rmsea_ci ? `${fmt(f.rmsea)} [${fmt(f.rmsea_ci[0])}, ${fmt(f.rmsea_ci[1])}]` : fmt(f[k]);
    return [WORDS[k], shown, cut ? `${cut.op} ${fmt(cut.value, 2)} (${cut.source}, a convention)` : "—", meets(f[k], cut)];
  });
  rows.unshift([`Chi-square test of exact fit (${f.df ?? "—"} df)`, f.chisq == null ? "—" : fmt(f.chisq, 1),
    "p above .05 would mean no detectable misfit; large samples reject almost any model",
    f.p == null ? "—" : (f.p < 0.001 ? "p < .001" : `p ${fmt(f.p)}`)]);
  return table(["Index", "Value", "Convention", "Reading"], rows, { className: "grid confirmation-fit" });
}

function loadingsTable(a) {
  return table(["Factor", "Item", "Standardized loading", "SE"],
    (a.loadings || []).map((r) => [r.factor, r.item, fmt(r.std), fmt(r.se)]), { className: "grid confirmation-loadings" });
}

function misfit(a) {
  const res = (a.largest_residuals || []).slice(0, 5).map((r) => [(r.items || []).join(" – "), fmt(r.observed), fmt(r.implied), fmt(r.residual)]);
  const mi = (a.modification_indices || []).map((m) => [
    m.kind === "loading" ? `${m.item} also loads on ${m.factor}` : `${(m.items || []).join(" and ")} share something the factors miss`,
    fmt(m.mi, 1), fmt(m.sepc_all, 2)]);
  return h("div", { class: "two" },
    h("div", {}, h("h3", { text: "Largest residual correlations" }),
      table(["Items", "Observed", "Implied", "Residual"], res, { className: "grid confirmation-residuals" })),
    h("div", {}, h("h3", { text: "Largest modification indices" }),
      table(["What the model leaves out", "MI", "Standardized change"], mi, { className: "grid confirmation-mi" })));
}

function congruenceTable(a) {
  if (!a.congruence) return null;
  const cut = a.cutoffs?.congruence;
  return h("div", {}, h("h3", { text: "Do the two halves find the same factors? (Tucker's congruence)" }),
    table(["Exploration factor", "Matched factor of the other half", "Congruence", "Reading"],
      a.congruence.map((c) => [c.factor, c.matched ?? "—", fmt(c.congruence), meets(c.congruence, cut)]),
      { className: "grid confirmation-congruence" }),
    cut ? h("p", { class: "muted", text: `Convention: ${cut.op} ${fmt(cut.value, 2)} means equal factors (${cut.source}).` }) : null);
}

function renderAnswer(box, state) {
  const c = state.confirmation;
  const a = c.answer;
  if (!a || c.answerFor !== state.dataset) return; // an answer about another dataset is not shown
  if (a.error) { box.append(note(a.error, "error")); return; }
  const sizes = a.n_exploration == null
    ? `All ${a.n_confirmation} respondents confirm (no exploration half)`
    : `${a.n_exploration} respondents explored, ${a.n_confirmation} held out to confirm`;
  box.append(h("p", { class: "interpretation", id: "confirmation-reading",
    text: `${sizes}; ${a.n_confirmation_complete} answered every item of the model. Structure: ${a.structure_source}, `
      + `${Object.keys(a.structure || {}).length} factor(s). ${a.covariance}` }));
  if (a.fitted) {
    box.append(h("h3", { text: "Fit of the structure on the held-out respondents" }), fitTable(a),
      h("h3", { text: "Confirmed loadings" }), loadingsTable(a), misfit(a));
  } else {
    box.append(note("The model could not be fitted; the notes below say why.", "error"));
  }
  const cg = congruenceTable(a);
  if (cg) box.append(cg);
  const w = warningList(a.warnings);
  if (w) box.append(w);
}

export function render(container, state) {
  clear(container);
  const c = state.confirmation;
  const box = h("div", { class: "result", id: "confirmation-result" });
  const run = h("button", { class: "primary", id: "run-confirmation", text: "Confirm on held-out respondents", disabled: c.busy,
    onclick: async () => {
      const body = { ...analysisRequest(), structure: c.structure, split: c.split === "" ? null : Number(c.split) };
      c.busy = true; run.disabled = true; run.textContent = "Fitting…";
      c.answerFor = state.dataset;
      try { c.answer = await api.confirm(state.dataset, body); c.asked = body; } catch (e) { c.answer = { error: e.message }; }
      c.busy = false; run.disabled = false; run.textContent = "Confirm on held-out respondents";
      const now = current(run);
      now.disabled = false; now.textContent = "Confirm on held-out respondents";
      const shown = current(box);
      clear(shown); renderAnswer(shown, state);
    } });
  container.append(section("Hold-out confirmation",
    h("p", { class: "muted", text: "Split the respondents at random (the analysis seed), explore on one part with the "
      + "current settings, and fit the structure as a confirmatory factor model (correlated factors, maximum likelihood) "
      + "on the respondents who were not used to find it (Boateng et al. 2018)." }),
    h("div", { class: "toolbar" },
      h("label", {}, "Structure ", select(STRUCTURES, c.structure, (v) => { c.structure = v; }, { id: "confirmation-structure" })),
      h("label", {}, "Split ", select(SPLITS, c.split, (v) => { c.split = v; }, { id: "confirmation-split" })),
      run),
    box));
  renderAnswer(box, state);
}
