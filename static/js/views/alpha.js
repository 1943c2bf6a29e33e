// Alpha curves: alpha-if-deleted per item against the current alpha, the pruning path (whole pool or one
// subscale), the pool's omega family and each subscale's reliability with the fit of its one-factor model.
import { alphaIfDeleted, pruningPath } from "../charts.js";
import { actions, itemMeta, subscaleBlock, subscaleNames } from "../state.js";
import { clear, fmt, h, note, section, select, table } from "./dom.js";

const ci = (c) => (Array.isArray(c) && c.length === 2 ? `${fmt(c[0], 2)} to ${fmt(c[1], 2)}` : "—");
const pctOf = (v) => `${Math.round(v * 100)}%`;

// What omega hierarchical means for adding the items up, when the server gave no sentence of its own.
function omegaSentence(rel) {
  if (rel.omega_note) return rel.omega_note;
  const oh = rel.omega_hierarchical;
  if (oh == null) return "";
  return `Omega hierarchical ${fmt(oh)}: a general factor common to all items accounts for about ${pctOf(oh)} of the variance of the total score. `
    + (oh >= 0.5 ? "Adding all items up mostly measures that one thing; the subscales still differ beyond it."
      : "Less than half: the total score mixes several things; report the subscale scores rather than adding everything up.");
}

// One row per group factor: omega subscale (variance beyond the general factor), omega total of its items, H.
function groupTable(groups, sub) {
  const caption = "ω subscale: reliable variance of each group factor's items beyond the general factor";
  if (Array.isArray(groups) && groups.length) {
    return table(["Group factor", "Items", "ω subscale", "ω total", "H"], groups.map((g) => [g.factor ?? "—",
      Array.isArray(g.items) ? `${g.items.length}: ${g.items.join(", ")}` : "—", fmt(g.omega_hs), fmt(g.omega_total), fmt(g.h)]),
    { caption, className: "grid omega-subscale" });
  }
  return sub.length ? table(["Group factor", "ω subscale"], sub.map(([f, v]) => [f, fmt(v)]), { caption, className: "grid omega-subscale" }) : null;
}

/** The pool's omega family: omega total, hierarchical, ECV, H, omega subscale per group factor, unidimensional. */
function omegaFamily(rel) {
  const basis = rel.omega_basis;
  if (!basis) {
    return section("Omega and the total score", h("div", { id: "omega-family" },
      h("dl", { class: "facts" }, h("dt", { text: "ω (unidimensional)" }), h("dd", { text: fmt(rel.omega_total) })),
      note("This answer gives the omega of one factor fitted to the whole pool only.")));
  }
  const facts = [
    ["ω total", fmt(rel.omega_total), basis === "schmid_leiman" ? "Schmid-Leiman model with the retained factors" : "one-factor model"],
    ["ω hierarchical", fmt(rel.omega_hierarchical), "share of total-score variance owed to the general factor"],
    ["ECV", fmt(rel.ecv), "share of common variance owed to the general factor"],
    ["H (general factor)", fmt(rel.h), "construct replicability (Hancock & Mueller 2001)"],
    ["ω unidimensional", fmt(rel.omega_unidimensional), "one factor fitted to every item"],
  ];
  const shown = facts.filter(([k], i) => i < 2 || i === 4 || (k === "ECV" ? rel.ecv != null : rel.h != null));
  const sub = Object.entries(rel.omega_subscale || {});
  const box = h("div", { id: "omega-family" },
    h("dl", { class: "facts omega" }, shown.map(([k, v, why]) => [h("dt", { text: k }),
      h("dd", {}, h("span", { class: "v", text: v }), h("span", { class: "muted", text: ` ${why}` }))])),
    groupTable(rel.omega_groups, sub));
  const sentence = omegaSentence(rel);
  if (sentence) box.append(h("p", { class: "interpretation", id: "omega-note", text: sentence }));
  if (!rel.omega_note && (basis === "unavailable" || basis === "one_factor_only")) {
    box.append(note(basis === "unavailable" ? "No factor model could be fitted to these data: the omega family is not available."
      : "One factor was retained: omega total is the unidimensional omega and there is no hierarchical split."));
  }
  if (rel.alpha_ordinal != null || rel.omega_ordinal != null) {
    box.append(h("dl", { class: "facts ordinal" }, h("dt", { text: "ordinal α / ω" }),
      h("dd", { text: `${fmt(rel.alpha_ordinal)} / ${fmt(rel.omega_ordinal)}` })),
    note(rel.ordinal_note || "From the polychoric matrix: they describe the latent responses, not the observed sum score."));
  }
  if (rel.omega_source) box.append(h("p", { class: "muted", id: "omega-source", text: rel.omega_source }));
  box.append(h("p", { class: "muted", text: "Schmid & Leiman (1957); McDonald (1999); Zinbarg et al. (2005); ECV and H: Rodriguez, Reise & Haviland (2016), Hancock & Mueller (2001)." }));
  return section("Omega and the total score", box);
}

/** "Items X and Y share more than the single factor explains (residual r = .21)". */
export function residualSentence(fit) {
  const lr = fit?.largest_residual;
  if (!lr || lr.r == null || !Array.isArray(lr.items) || lr.items.length < 2) return "";
  const [x, y] = lr.items;
  return lr.r >= 0
    ? `Items ${x} and ${y} share more than the single factor explains (residual r = ${fmt(lr.r, 2)}).`
    : `Items ${x} and ${y} share less than the single factor implies (residual r = ${fmt(lr.r, 2)}).`;
}

/** Each subscale's alpha, omega, ordinal coefficients and the fit of its one-factor model. */
function subscaleReliability(a) {
  const cons = Object.entries(a.constructs || {});
  if (!cons.length) return section("Reliability per subscale", note("The codebook names no constructs."));
  // Residual correlations of .10 or more point to local dependence (common practice).
  const big = (b) => Math.abs(b.one_factor_fit?.largest_residual?.r ?? 0) >= 0.1;
  const sentences = cons.filter(([, b]) => big(b)).map(([name, b]) => [name, residualSentence(b.one_factor_fit)]).filter(([, t]) => t);
  const pair = (b) => {
    const lr = b.one_factor_fit?.largest_residual;
    return lr && lr.r != null && Array.isArray(lr.items) ? `${lr.items.join(" & ")} (${fmt(lr.r, 2)})` : "—";
  };
  const ordinal = cons.some(([, b]) => b.alpha_ordinal != null || b.omega_ordinal != null);
  const cols = ["Subscale", "Items", "α", "95% CI", "ω", ...(ordinal ? ["ordinal α", "ordinal ω"] : []), "one-factor RMSR", "largest residual"];
  const rows = cons.map(([name, b]) => [name, b.n_items ?? (b.items || []).length, fmt(b.alpha), ci(b.alpha_ci),
    fmt(b.omega_unidimensional ?? b.omega_total), ...(ordinal ? [fmt(b.alpha_ordinal), fmt(b.omega_ordinal)] : []),
    fmt(b.one_factor_fit?.rmsr), pair(b)]);
  const grouping = a.grouping;
  const how = grouping?.used === "factor" ? "Groups are the factors of the solution (no codebook constructs)."
    : grouping?.used === "pool" ? "Grouping is off: the pool is treated as one scale." : "Groups are the codebook's constructs.";
  return section("Reliability per subscale", h("div", { id: "subscale-reliability" },
    table(cols, rows, { caption: "Per subscale (active items); ω of the one-factor model of that subscale", className: "grid constructs" }),
    sentences.length ? h("ul", { class: "residuals" }, sentences.map(([name, t]) => h("li", {}, h("strong", { text: `${name}: ` }), t))) : null,
    h("p", { class: "muted", text: `${grouping ? how : ""} RMSR is the root mean square residual correlation of the one-factor model; a residual of .10 or more says the subscale is not quite one-dimensional.${grouping?.note ? ` ${grouping.note}` : ""}`.trim() })));
}

export function render(container, state) {
  clear(container);
  const a = state.analysis;
  if (!a) { container.append(note("No analysis yet.")); return; }
  const rel = a.reliability || {};
  const block = subscaleBlock(a);
  const groups = subscaleNames(a);
  const scope = block || rel;
  const itemRows = block ? block.item_table.map((r) => ({ ...r, text: itemMeta(r.name)?.text || "" })) : a.items || [];
  const curve = h("div", { class: "chart", id: "alpha-curve" });
  const pickBar = h("div", { class: "pick-bar", id: "pick-bar", "aria-live": "polite" });
  const showPick = (name) => {
    clear(pickBar);
    const row = itemRows.find((r) => r.name === name);
    if (!row) return;
    pickBar.append(...[h("strong", { text: name }), " ", h("span", { text: itemMeta(name)?.text || "" }),
      h("span", { class: "muted", text: ` · alpha without it ${fmt(row.alpha_if_deleted)} (now ${fmt(scope.alpha)})` }), " ",
      h("button", { class: "primary", id: "pick-drop", text: `Drop ${name}`, onclick: () => { clear(pickBar); actions.toggle(name); } }),
      " ", h("button", { text: "Close", onclick: () => clear(pickBar) })].filter(Boolean));
  };
  const path = h("div", { class: "chart", id: "pruning-path", dataset: { scope: block ? state.subscale : "" } });
  const sb = rel.spearman_brown || rel.projection || {};
  const need80 = block ? block.items_for_80 : sb.items_for_80 ?? sb["0.8"] ?? rel.items_for_80;
  const need90 = block ? block.items_for_90 : sb.items_for_90 ?? sb["0.9"] ?? rel.items_for_90;
  const omegaLabel = block ? "ω (one factor)" : rel.omega_basis === "schmid_leiman" ? "ω total (Schmid-Leiman)"
    : rel.omega_basis ? "ω total (McDonald)" : "ω (unidimensional)";
  const facts = [
    ["α (Cronbach)", fmt(scope.alpha)], ["95% CI (Feldt)", scope.alpha_ci ? `${fmt(scope.alpha_ci[0])} to ${fmt(scope.alpha_ci[1])}` : "—"],
    ["standardized α", fmt(scope.alpha_standardized)], [omegaLabel, fmt(block ? block.omega_unidimensional ?? block.omega_total : rel.omega_total)],
    ["Guttman λ2 / λ6", `${fmt(scope.lambda2)} / ${fmt(scope.lambda6)}`], ["split-half (S-B)", fmt(scope.split_half)],
    ["mean inter-item r", fmt(scope.mean_inter_item_r)], ["SEM", fmt(scope.sem, 2)],
    ["items for α .80 / .90", `${need80 ?? "—"} / ${need90 ?? "—"}`], ["complete cases", scope.n_complete ?? "—"],
  ];
  if (block?.one_factor_fit) facts.push(["one-factor RMSR", fmt(block.one_factor_fit.rmsr)]);
  const fitSentence = block ? residualSentence(block.one_factor_fit) : "";
  const scopeText = block
    ? `Subscale “${state.subscale}”: the curve and the pruning path are computed within its ${(block.items || []).length} active items.`
    : "Whole pool: every active item counted as one scale.";
  const tools = groups.length ? h("div", { class: "toolbar" },
    h("label", {}, "Figures for ", select([["", "Whole pool"], ...groups.map((g) => [g, g])], block ? state.subscale : "",
      (v) => actions.setSubscale(v), { id: "alpha-subscale" })),
    h("span", { class: "muted", id: "alpha-scope", text: scopeText })) : null;
  container.append(section(block ? `Alpha curves: ${state.subscale}` : "Alpha curves", tools, pickBar,
    h("div", { class: "two" }, curve, h("div", {},
      h("dl", { class: "facts", id: "alpha-facts" }, facts.map(([k, v]) => [h("dt", { text: k }), h("dd", { text: String(v) })])),
      fitSentence ? h("p", { class: "interpretation", text: fitSentence }) : null)),
    path,
    h("p", { class: "muted", text: "The pruning path drops, at each step, the item whose removal leaves the highest alpha. Where it levels off is where a short form stops paying for its brevity. Alpha rising is not the same as the scale measuring the right thing." })),
  omegaFamily(rel), subscaleReliability(a));
  const what = block ? `“${state.subscale}”` : "the scale";
  alphaIfDeleted(curve, { items: itemRows, alpha: scope.alpha, onPick: showPick,
    title: `Alpha if each item is dropped (above the line: ${what} is better without it)` })
    .then(() => curve.setAttribute("data-rendered", String((state.renders.alpha += 1))));
  const p = (block ? block.pruning_path : a.pruning_path) || [];
  const n = itemRows.length;
  const full = p.length && p[0].removed == null ? p
    : [{ removed: null, n_items: n, alpha: scope.alpha, omega_total: block ? block.omega_unidimensional ?? block.omega_total : rel.omega_total }, ...p];
  if (full.length) pruningPath(path, { path: full, title: block ? `Pruning path within “${state.subscale}”: dropping the item that costs least, one at a time` : undefined });
}
