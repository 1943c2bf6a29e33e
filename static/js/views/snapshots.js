// Save-snapshot dialog, the snapshot list, compare, restore and the downloads.
import { api } from "../api.js";
import { actions, analysisRequest, itemMeta, keptItems, lastStability, robustnessResult } from "../state.js";
import { clear, fmt, h, note, section, table, warningList } from "./dom.js";

export const CODES = [["", "—"], ["cross-loading", "cross-loading"], ["weak", "weak"], ["belongs-elsewhere", "belongs elsewhere"],
  ["redundant", "redundant"], ["wording", "wording"], ["floor-ceiling", "floor/ceiling"], ["other", "other"]];
const CODE_OF_FLAG = { cross_loading: "cross-loading", weak_loading: "weak", misplaced: "belongs-elsewhere", reverse_suspect: "wording", heywood: "other",
  near_duplicate: "redundant", floor_ceiling: "floor-ceiling" };

// Every flag message ends with the same caution; in a reason it is noise (the report says it once).
const CAUTION = /\s*These thresholds are heuristics, not tests\.\s*/g;

export function defaultReason(state, item) {
  const flags = state.lastFlags[item] || [];
  if (flags.length) {
    return { reason: flags.map((f) => String(f.message || "").replace(CAUTION, " ").trim()).join(" "),
      code: CODE_OF_FLAG[flags[0].kind] || "other" };
  }
  const row = state.lastRows[item];
  if (row && row.alpha != null && row.alpha_if_deleted != null && row.alpha_if_deleted > row.alpha) {
    return { reason: `Alpha rose without it (from ${fmt(row.alpha)} to ${fmt(row.alpha_if_deleted)}).`, code: "" };
  }
  return { reason: "", code: "" };
}

// Items dropped before this page saw them active (e.g. opened from a shared link): ask the server how
// they looked in the whole pool with the current settings, so their reasons can be pre-filled too.
async function learnUnseen(state) {
  const unseen = state.dropped.filter((n) => !(n in state.lastFlags));
  if (!unseen.length || !state.dataset) return;
  const body = analysisRequest();
  delete body.items;
  try {
    const answer = await api.analyse(state.dataset, body);
    const flags = answer?.efa?.flags || [];
    const alpha = answer?.reliability?.alpha;
    for (const it of answer?.items || []) {
      if (!unseen.includes(it.name)) continue;
      state.lastFlags[it.name] = flags.filter((f) => f.item === it.name);
      state.lastRows[it.name] = { ...it, alpha };
    }
  } catch { /* the reasons stay empty; the team types them */ }
}

export async function openDialog(state) {
  const dlg = document.getElementById("snapshot-dialog");
  await learnUnseen(state);
  const body = clear(dlg.querySelector(".dialog-body"));
  const removed = [...state.dropped];
  body.append(h("p", { text: `${keptItems().length} items kept, ${removed.length} removed. Give each removal a reason: it goes into the record and the report.` }));
  const list = h("ol", { class: "reasons" });
  const fit = (ta) => { ta.style.height = "auto"; ta.style.height = `${Math.min(ta.scrollHeight + 2, 200)}px`; };
  const areas = [];
  for (const item of removed) {
    const d = defaultReason(state, item);
    const area = h("textarea", { class: "reason-text", name: `reason-${item}`, value: d.reason, required: true, rows: 2,
      dataset: { item }, placeholder: "Why it goes (required)", "aria-label": `Reason for removing ${item}`,
      oninput: (e) => fit(e.target) });
    areas.push(area);
    list.append(h("li", {},
      h("label", { class: "reason" }, h("span", { class: "reason-item" }, h("strong", { text: item }),
        h("span", { class: "muted wording", text: itemMeta(item)?.text || "" })),
        area,
        h("select", { class: "reason-code", dataset: { item }, "aria-label": `Reason code for ${item}` },
          CODES.map(([v, label]) => h("option", { value: v, text: label, selected: v === d.code }))))));
  }
  if (removed.length) body.append(list); else body.append(note("No items removed: the snapshot records the full pool."));
  if (state.parentSnapshot) body.append(h("p", { class: "muted", text: `It will be recorded as a revision of “${state.parentSnapshot.name}”.` }));
  const st = lastStability();
  if (st.retest) body.append(h("label", { class: "include" }, h("input", { type: "checkbox", id: "snap-include-retest", checked: true }),
    ` Include the test-retest result (${st.retestSummary}); it is recomputed for the kept items.`));
  if (st.agreement) body.append(h("label", { class: "include" }, h("input", { type: "checkbox", id: "snap-include-agreement", checked: true }),
    ` Include the rater agreement (${st.agreementSummary}).`));
  const run = robustnessResult();
  if (run?.current && state.robustness.run?.state === "done") body.append(h("label", { class: "include" },
    h("input", { type: "checkbox", id: "snap-include-resampling", checked: true }),
    ` Include the resampling run (${run.result.n_resamples} resamples, seed ${run.result.seed}).`));
  // A fresh snapshot starts blank: a second one must not inherit the first one's name and note.
  dlg.querySelector("#snap-name").value = "";
  dlg.querySelector("#snap-note").value = "";
  dlg.querySelector("#snap-method").value = "mean";
  dlg.querySelector("#snap-min-share").value = "80";
  dlg.querySelector("#snap-author").value = state.who || "";
  dlg.querySelector(".dialog-error").textContent = "";
  dlg.showModal();
  for (const a of areas) { fit(a); a.scrollTop = 0; a.setSelectionRange(0, 0); }
}

export async function submitDialog(state) {
  const dlg = document.getElementById("snapshot-dialog");
  const err = dlg.querySelector(".dialog-error");
  const removed = state.dropped.map((item) => {
    const text = dlg.querySelector(`.reason-text[data-item="${CSS.escape(item)}"]`);
    const code = dlg.querySelector(`.reason-code[data-item="${CSS.escape(item)}"]`);
    const r = { item, reason: text ? text.value.trim() : "" };
    if (code && code.value) r.code = code.value;
    return r;
  });
  const missing = removed.filter((r) => !r.reason).map((r) => r.item);
  if (missing.length) { err.textContent = `Give a reason for: ${missing.join(", ")}.`; return false; }
  const share = Number(dlg.querySelector("#snap-min-share").value);
  if (!Number.isFinite(share) || share <= 0 || share > 100) {
    err.textContent = `The minimum answered share must be above 0 and at most 100 %; it reads “${dlg.querySelector("#snap-min-share").value}”.`;
    return false;
  }
  const body = {
    name: dlg.querySelector("#snap-name").value.trim() || `Trim of ${new Date().toLocaleString()}`,
    author: dlg.querySelector("#snap-author").value.trim(),
    note: dlg.querySelector("#snap-note").value.trim(),
    items: keptItems(), removed,
    parent: state.parentSnapshot ? state.parentSnapshot.id : null,
    scoring_method: dlg.querySelector("#snap-method").value === "sum" ? "sum" : "mean",
    min_answered_share: share / 100,
    settings: { ...state.settings, reverse: state.reverse, thresholds: Object.keys(state.thresholds).length ? state.thresholds : null },
  };
  const st = lastStability();
  const stability = {};
  if (st.retest && dlg.querySelector("#snap-include-retest")?.checked) {
    const { second, score, items_second: itemsSecond } = st.retest;
    stability.retest = { second, score, ...(itemsSecond ? { items_second: itemsSecond } : {}) };
  }
  if (st.agreement && dlg.querySelector("#snap-include-agreement")?.checked) stability.agreement = st.agreement;
  if (Object.keys(stability).length) body.stability = stability;
  const run = robustnessResult();
  if (run?.current && dlg.querySelector("#snap-include-resampling")?.checked) body.resampling_run_id = state.robustness.run.run_id;
  try {
    const saved = await api.saveSnapshot(state.dataset, body);
    state.parentSnapshot = { id: saved.id, name: saved.name || body.name };
    dlg.close();
    state.snapshots.message = `Saved “${saved.name || body.name}”.`;
    actions.broadcast("snapshot", `saved snapshot ${saved.name || body.name}`);
    actions.show("snapshots");
    return true;
  } catch (e) {
    err.textContent = e.message;
    return false;
  }
}

async function load(state) {
  const got = await api.listSnapshots(state.dataset);
  state.snapshots.list = Array.isArray(got) ? got : got.snapshots || [];
}

function coef(s, key) {
  if (typeof s[key] === "number") return s[key];
  const rel = s.reliability || s.results?.reliability || s.analysis?.reliability || s.summary || {};
  return rel[key];
}

export async function render(container, state) {
  // The list arrives later: a user who has moved to another view by then keeps it (the container is shared).
  if (state.view !== "snapshots") return;
  // drawn again (a refit, the item list arriving): the list shown stays until the new one is drawn, so nothing
  // under the pointer disappears for the length of a request
  if (!container.querySelector(":scope > section #open-snapshot")) {
    clear(container);
    container.append(section("Snapshots", note("Loading…")));
  }
  let failed = null;
  try { await load(state); } catch (e) { failed = e; }
  if (state.view !== "snapshots") return;
  if (failed) { clear(container).append(section("Snapshots", note(failed.message, "error"))); return; }
  clear(container);
  const { list: snapshots, compareWith, comparison, message } = state.snapshots;
  const rows = snapshots.map((s) => {
    const kept = (s.items || []).length;
    const removed = (s.removed || []).length;
    const actionsCell = h("span", { class: "actions" },
      h("button", { text: "Restore", title: "Load this snapshot's items and settings", onclick: () => actions.restoreSnapshot(s.id) }),
      h("a", { href: api.reportUrl(s.id), target: "_blank", rel: "noopener", text: "Report" }),
      h("a", { href: api.scoringKeyUrl(s.id), download: "", text: "Scoring key" }),
      h("button", { text: compareWith === s.id ? "Comparing…" : "Compare", "aria-pressed": String(compareWith === s.id),
        onclick: () => pickCompare(container, state, s.id) }));
    const parent = s.parent ? snapshots.find((x) => x.id === s.parent) : null;
    return [h("span", { class: "snap-name" }, h("span", { text: s.name || s.id }),
      s.parent ? h("span", { class: "muted lineage", text: ` ↳ revises ${parent ? parent.name : s.parent}` }) : null), s.author || "—", (s.created_at || "").replace("T", " ").slice(0, 16),
      `${kept} kept / ${removed} removed`, fmt(coef(s, "alpha")), fmt(coef(s, "omega_total")), s.note || "", actionsCell];
  });
  container.append(section("Snapshots",
    message ? h("p", { class: "ok", role: "status", text: message }) : null,
    h("div", { class: "toolbar" }, h("button", { class: "primary", id: "open-snapshot", text: "Save a snapshot…", onclick: () => openDialog(state) }),
      h("span", { class: "muted", text: "A snapshot is permanent: the kept items, every removal with its reason, the settings and the numbers at that moment." })),
    rows.length ? h("div", { class: "table-scroll" }, table(["Name", "By", "Saved (UTC)", "Items", "α", "ω", "Note", ""], rows,
      { className: "grid snapshots", caption: "Newest first" }))
      : note("No snapshots yet."),
    compareWith ? note("Pick a second snapshot to compare with.") : null,
    comparison ? renderComparison(comparison) : null,
    snapshots.length ? sideBySidePicker(container, state) : null,
    state.snapshots.sideBySide ? renderSideBySide(state.snapshots.sideBySide) : null));
  state.snapshots.message = null;
}

async function pickCompare(container, state, id) {
  const page = state.snapshots;
  if (!page.compareWith) { page.compareWith = id; page.comparison = null; render(container, state); return; }
  if (page.compareWith === id) { page.compareWith = null; render(container, state); return; }
  // Always from the older snapshot to the newer one, whichever was clicked first.
  const when = (x) => page.list.find((sn) => sn.id === x)?.created_at || "";
  const [older, newer] = when(page.compareWith) <= when(id) ? [page.compareWith, id] : [id, page.compareWith];
  try { page.comparison = await api.compareSnapshots(older, newer); } catch (e) { page.comparison = { error: e.message }; }
  page.compareWith = null;
  render(container, state);
}

// Plain names for the coefficients the compare route returns.
export const COEFFICIENT_NAMES = {
  n_items: "Items", alpha: "α (Cronbach)", alpha_standardized: "standardized α", omega_total: "ω total (McDonald)",
  lambda2: "Guttman λ2", lambda6: "Guttman λ6", split_half: "split-half (Spearman-Brown)", mean_inter_item_r: "mean inter-item r",
  scale_mean: "scale mean", scale_sd: "scale SD", sem: "standard error of measurement", n_complete: "complete cases",
};
const COUNTS = new Set(["n_items", "n_complete"]);
const TWO_DECIMALS = new Set(["scale_mean", "scale_sd", "sem"]);

function signed(v, digits) {
  if (v == null || Number.isNaN(v)) return "—";
  if (Math.abs(v) < 0.5 * 10 ** -digits) return digits ? `±${fmt(0, digits)}` : "0";
  const body = digits ? fmt(Math.abs(v), digits) : String(Math.abs(v));
  return `${v > 0 ? "+" : "−"}${body}`;
}

function renderComparison(c) {
  if (c.error) return note(c.error, "error");
  const parts = [];
  const nameA = c.a?.name || c.first?.name || "first";
  const nameB = c.b?.name || c.second?.name || "second";
  const added = c.items_added || c.added || [];
  const removed = c.items_removed || c.removed || [];
  parts.push(h("p", { text: `From “${nameA}” to “${nameB}”: items brought back ${added.length ? added.map((x) => x.item || x).join(", ") : "none"}; items removed ${removed.length ? removed.map((x) => x.item || x).join(", ") : "none"}.` }));
  const changes = c.coefficients || c.coefficient_changes || {};
  const show = (k, v) => (COUNTS.has(k) ? (v ?? "—") : fmt(v, TWO_DECIMALS.has(k) ? 2 : 3));
  const rows = Object.entries(changes).map(([k, v]) => (typeof v === "object" && v !== null
    ? [COEFFICIENT_NAMES[k] || k.replace(/_/g, " "), show(k, v.a), show(k, v.b), signed(v.change, COUNTS.has(k) ? 0 : TWO_DECIMALS.has(k) ? 2 : 3)]
    : [COEFFICIENT_NAMES[k] || k, "", "", fmt(v)]));
  if (rows.length) parts.push(table(["Coefficient", nameA, nameB, "Change"], rows, { className: "grid compare-coefficients" }));
  const settings = Object.entries(c.settings_changed || {});
  if (settings.length) {
    const v = (x) => (x == null ? "—" : Array.isArray(x) ? (x.join(", ") || "none") : typeof x === "object" ? JSON.stringify(x) : String(x));
    parts.push(table(["Setting", nameA, nameB], settings.map(([k, x]) => [k.replace(/_/g, " "), v(x.a), v(x.b)]),
      { className: "grid compare-settings", caption: "Settings that differ" }));
  }
  const lc = c.loadings || [];
  const labelsA = c.a?.factors || [];
  const labelsB = c.b?.factors || [];
  const all = lc.filter((r) => r.primary_a && r.primary_b)
    .map((r) => ({ ...r, switched: r.primary_a.factor !== r.primary_b.factor,
      shift: Math.abs((r.primary_b.loading ?? 0) - (r.primary_a.loading ?? 0)) }));
  // Only moves worth a look: another main factor, or a main loading that changed by .05 or more.
  const moved = all.filter((r) => r.switched || r.shift >= 0.05).sort((x, y) => (y.switched - x.switched) || (y.shift - x.shift)).slice(0, 12);
  if (moved.length) {
    parts.push(table(["Item", `Main loading in “${nameA}”`, `Main loading in “${nameB}”`], moved.map((r) => [r.item,
      `${labelsA[r.primary_a.factor] ?? `F${r.primary_a.factor + 1}`} ${fmt(r.primary_a.loading, 2)}`,
      `${labelsB[r.primary_b.factor] ?? `F${r.primary_b.factor + 1}`} ${fmt(r.primary_b.loading, 2)}`]),
    { className: "grid compare-loadings", caption: "Items whose main loading moved (another factor, or by .05 or more)" }));
  } else if (all.length) {
    parts.push(note(`No kept item changed its main factor or moved its main loading by .05 or more (${all.length} items in both).`));
  }
  parts.push(warningList(c.warnings));
  return h("div", { class: "comparison", id: "comparison" }, h("h3", { text: `Comparing “${nameA}” (older) with “${nameB}”` }), parts);
}


// ---------------------------------------------------------------- two forms side by side (issue 12)
const CURRENT = "current";

function sideBySidePicker(container, state) {
  const page = state.snapshots;
  const list = page.list;
  if (page.sbsLeft == null || !list.some((s) => s.id === page.sbsLeft)) page.sbsLeft = (list[1] || list[0]).id;
  if (page.sbsRight == null || (page.sbsRight !== CURRENT && !list.some((s) => s.id === page.sbsRight))) {
    page.sbsRight = list.length > 1 ? list[0].id : CURRENT;
  }
  const options = list.map((s) => h("option", { value: s.id, text: `${s.name || s.id} (${(s.items || []).length} items)` }));
  const left = h("select", { id: "sbs-left", onchange: (e) => { page.sbsLeft = e.target.value; } }, options);
  const right = h("select", { id: "sbs-right", onchange: (e) => { page.sbsRight = e.target.value; } },
    list.map((s) => h("option", { value: s.id, text: `${s.name || s.id} (${(s.items || []).length} items)` })),
    h("option", { value: CURRENT, text: "The current view (not saved)" }));
  left.value = page.sbsLeft;
  right.value = page.sbsRight;
  const show = async () => {
    if (page.sbsLeft === page.sbsRight) { page.sideBySide = { error: "Pick two different forms." }; render(container, state); return; }
    try {
      page.sideBySide = page.sbsRight === CURRENT
        ? await api.sideBySideCurrent(page.sbsLeft, analysisRequest())
        : await api.sideBySide(page.sbsLeft, page.sbsRight);
    } catch (e) { page.sideBySide = { error: e.message }; }
    await render(container, state);
    document.getElementById("side-by-side")?.scrollIntoView({ block: "start" });
  };
  return h("div", { class: "toolbar sbs-picker", id: "sbs-picker" },
    h("strong", { text: "Two forms side by side:" }),
    h("label", {}, "Left ", left), h("label", {}, "Right ", right),
    h("button", { id: "sbs-show", text: "Show side by side", onclick: show }));
}

function coefficientLine(form) {
  if (!form.k) return h("p", { class: "sbs-coef muted", text: "No item of this subscale in this form." });
  const ci = form.alpha_ci || [];
  const interval = ci[0] != null && ci[1] != null ? ` (interval ${fmt(ci[0])} to ${fmt(ci[1])})` : "";
  return h("p", { class: "sbs-coef" },
    h("span", { text: `${form.k} items · α ${fmt(form.alpha)}${interval}` }),
    h("span", { text: ` · ω total ${fmt(form.omega_total)}` }),
    // a subscale has no ω hierarchical of its own (its group factor is the only one): say nothing rather than "not computed"
    form.omega_hierarchical == null ? null : h("span", { text: ` · ω hierarchical ${fmt(form.omega_hierarchical)}` }));
}

function formColumn(form, name, only) {
  const onlySet = new Set(only);
  const rows = form.items.map((it) => {
    const here = onlySet.has(it.name);
    return h("tr", { class: here ? "sbs-only-row" : null },
      h("th", { scope: "row" }, h("span", { text: it.name }),
        it.reverse ? h("span", { class: "sbs-rev", text: " (reversed)" }) : null,
        here ? h("span", { class: "sbs-only", text: " ◆ only here" }) : null),
      h("td", { class: "sbs-text", text: it.text || "—" }),
      h("td", { class: "num", text: it.loading == null ? "—" : `${fmt(it.loading, 2)} ${it.primary_factor ?? ""}`.trim() }),
      h("td", { class: "num", text: fmt(it.item_rest_r, 2) }));
  });
  return h("div", { class: "sbs-col" },
    h("h5", { text: name }),
    form.items.length
      ? h("table", { class: "grid sbs-items" },
        h("thead", {}, h("tr", {}, ["Item", "Wording", "Main loading (factor)", "Item-rest r"].map((c) => h("th", { scope: "col", text: c })))),
        h("tbody", {}, rows))
      : null,
    coefficientLine(form));
}

function renderSideBySide(d) {
  if (d.error) return h("div", { id: "side-by-side-error" }, note(d.error, "error"));
  const nameL = d.left?.name || "left";
  const nameR = d.right?.name || "right";
  const when = (f) => (f.id === CURRENT ? "not saved" : `saved ${(f.saved_at || "").replace("T", " ").slice(0, 16)} UTC`);
  const total = (f, name) => {
    const ci = f.alpha_ci || [];
    return [name, String(f.k ?? "—"), `${fmt(f.alpha)}${ci[0] != null && ci[1] != null ? ` (${fmt(ci[0])} to ${fmt(ci[1])})` : ""}`,
      fmt(f.omega_total), f.omega_hierarchical == null ? "not computed" : fmt(f.omega_hierarchical)];
  };
  return h("div", { class: "side-by-side", id: "side-by-side" },
    h("div", { class: "sbs-head" },
      h("h3", { text: `“${nameL}” beside “${nameR}”` }),
      h("button", { class: "sbs-print", id: "sbs-print", text: "Print", onclick: () => window.print() })),
    h("p", { class: "muted", text: `Left: ${nameL}, ${d.left.n_items} items, ${when(d.left)}. Right: ${nameR}, ${d.right.n_items} items, ${when(d.right)}. An item in one form only is marked “◆ only here”.` }),
    d.differences?.length ? h("ul", { class: "sbs-differences" }, d.differences.map((t) => h("li", { text: t }))) : null,
    d.subscales.map((s) => h("section", { class: "sbs-subscale", dataset: { subscale: s.name } },
      h("h4", { text: `${s.name}: ${s.both.length} items in both, ${s.only_left.length} only left, ${s.only_right.length} only right` }),
      h("div", { class: "sbs-pair" }, formColumn(s.left, nameL, s.only_left), formColumn(s.right, nameR, s.only_right)))),
    table(["Whole form", "Items", "α (interval)", "ω total", "ω hierarchical"], [total(d.total.left, nameL), total(d.total.right, nameR)],
      { className: "grid sbs-total" }));
}
