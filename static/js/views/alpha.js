// Alpha curves: alpha-if-deleted per item against the current alpha, the pruning path, per-construct coefficients.
import { alphaIfDeleted, pruningPath } from "../charts.js";
import { actions, itemMeta } from "../state.js";
import { clear, fmt, h, note, section, table } from "./dom.js";

export function render(container, state) {
  clear(container);
  const a = state.analysis;
  if (!a) { container.append(note("No analysis yet.")); return; }
  const rel = a.reliability || {};
  const curve = h("div", { class: "chart", id: "alpha-curve" });
  const pickBar = h("div", { class: "pick-bar", id: "pick-bar", "aria-live": "polite" });
  const showPick = (name) => {
    clear(pickBar);
    const row = (a.items || []).find((r) => r.name === name);
    if (!row) return;
    pickBar.append(...[h("strong", { text: name }), " ", h("span", { text: itemMeta(name)?.text || "" }),
      h("span", { class: "muted", text: ` · alpha without it ${fmt(row.alpha_if_deleted)} (now ${fmt(rel.alpha)})` }), " ",
      h("button", { class: "primary", id: "pick-drop", text: `Drop ${name}`, onclick: () => { clear(pickBar); actions.toggle(name); } }),
      " ", h("button", { text: "Close", onclick: () => clear(pickBar) })].filter(Boolean));
  };
  const path = h("div", { class: "chart", id: "pruning-path" });
  const cons = Object.entries(a.constructs || {});
  const consTable = cons.length
    ? table(["Construct", "Items", "α", "95% CI", "ω total"], cons.map(([name, b]) => [
      name, b.n_items ?? (b.items || []).length, fmt(b.alpha), b.alpha_ci ? `${fmt(b.alpha_ci[0], 2)} to ${fmt(b.alpha_ci[1], 2)}` : "—",
      fmt(b.omega_total)]), { caption: "Per construct (active items)", className: "grid constructs" })
    : note("The codebook names no constructs.");
  const sb = rel.spearman_brown || rel.projection || {};
  const need80 = sb.items_for_80 ?? sb["0.8"] ?? rel.items_for_80;
  const need90 = sb.items_for_90 ?? sb["0.9"] ?? rel.items_for_90;
  const facts = [
    ["α (Cronbach)", fmt(rel.alpha)], ["95% CI (Feldt)", rel.alpha_ci ? `${fmt(rel.alpha_ci[0])} to ${fmt(rel.alpha_ci[1])}` : "—"],
    ["standardized α", fmt(rel.alpha_standardized)], ["ω total (McDonald)", fmt(rel.omega_total)],
    ["Guttman λ2 / λ6", `${fmt(rel.lambda2)} / ${fmt(rel.lambda6)}`], ["split-half (S-B)", fmt(rel.split_half)],
    ["mean inter-item r", fmt(rel.mean_inter_item_r)], ["SEM", fmt(rel.sem, 2)],
    ["items for α .80 / .90", `${need80 ?? "—"} / ${need90 ?? "—"}`], ["complete cases", rel.n_complete ?? "—"],
  ];
  container.append(section("Alpha curves", pickBar,
    h("div", { class: "two" }, curve, h("div", {}, consTable,
      h("dl", { class: "facts" }, facts.map(([k, v]) => [h("dt", { text: k }), h("dd", { text: String(v) })])))),
    path,
    h("p", { class: "muted", text: "The pruning path drops, at each step, the item whose removal leaves the highest alpha. Where it levels off is where a short form stops paying for its brevity. Alpha rising is not the same as the scale measuring the right thing." })));
  alphaIfDeleted(curve, { items: a.items || [], alpha: rel.alpha, onPick: showPick }).then(() => curve.setAttribute("data-rendered", String((state.renders.alpha += 1))));
  const p = a.pruning_path || [];
  const full = p.length && p[0].removed == null ? p : [{ removed: null, n_items: (a.items || []).length, alpha: rel.alpha, omega_total: rel.omega_total }, ...p];
  pruningPath(path, { path: full });
}
