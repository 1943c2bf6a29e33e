// Save-snapshot dialog, the snapshot list, compare, restore and the downloads.
import { api } from "../api.js";
import { actions, analysisRequest, keptItems, state } from "../state.js";
import { clear, fmt, h, note, section, table, warningList } from "./dom.js";
import { lastStability } from "./stability.js";

export const CODES = [["", "—"], ["cross-loading", "cross-loading"], ["weak", "weak"], ["belongs-elsewhere", "belongs elsewhere"],
  ["redundant", "redundant"], ["wording", "wording"], ["floor-ceiling", "floor/ceiling"], ["other", "other"]];
const CODE_OF_FLAG = { cross_loading: "cross-loading", weak_loading: "weak", misplaced: "belongs-elsewhere", reverse_suspect: "wording", heywood: "other",
  near_duplicate: "redundant", floor_ceiling: "floor-ceiling" };

let snapshots = [];
let compareWith = null;
let comparison = null;
let message = null;

export function defaultReason(item) {
  const flags = state.lastFlags[item] || [];
  if (flags.length) return { reason: flags.map((f) => f.message).join(" "), code: CODE_OF_FLAG[flags[0].kind] || "other" };
  const row = state.lastRows[item];
  if (row && row.alpha != null && row.alpha_if_deleted != null && row.alpha_if_deleted > row.alpha) {
    return { reason: `Alpha rose without it (from ${fmt(row.alpha)} to ${fmt(row.alpha_if_deleted)}).`, code: "" };
  }
  return { reason: "", code: "" };
}

// Items dropped before this page saw them active (e.g. opened from a shared link): ask the server how
// they looked in the whole pool with the current settings, so their reasons can be pre-filled too.
async function learnUnseen() {
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
      state.lastRows[it.name] = { alpha_if_deleted: it.alpha_if_deleted, alpha, item_rest_r: it.item_rest_r };
    }
  } catch { /* the reasons stay empty; the team types them */ }
}

export async function openDialog() {
  const dlg = document.getElementById("snapshot-dialog");
  await learnUnseen();
  const body = clear(dlg.querySelector(".dialog-body"));
  const removed = [...state.dropped];
  body.append(h("p", { text: `${keptItems().length} items kept, ${removed.length} removed. Give each removal a reason: it goes into the record and the report.` }));
  const list = h("ol", { class: "reasons" });
  for (const item of removed) {
    const d = defaultReason(item);
    list.append(h("li", {},
      h("label", { class: "reason" }, h("strong", { text: item }),
        h("textarea", { class: "reason-text", name: `reason-${item}`, value: d.reason, required: true, rows: 2,
          dataset: { item }, placeholder: "Why it goes (required)", "aria-label": `Reason for removing ${item}` }),
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
  dlg.querySelector("#snap-author").value = state.who || "";
  dlg.querySelector(".dialog-error").textContent = "";
  dlg.showModal();
}

export async function submitDialog() {
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
  const body = {
    name: dlg.querySelector("#snap-name").value.trim() || `Trim of ${new Date().toLocaleString()}`,
    author: dlg.querySelector("#snap-author").value.trim(),
    note: dlg.querySelector("#snap-note").value.trim(),
    items: keptItems(), removed,
    parent: state.parentSnapshot ? state.parentSnapshot.id : null,
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
  try {
    const saved = await api.saveSnapshot(state.dataset, body);
    state.parentSnapshot = { id: saved.id, name: saved.name || body.name };
    dlg.close();
    message = `Saved “${saved.name || body.name}”.`;
    actions.broadcast("snapshot", `saved snapshot ${saved.name || body.name}`);
    actions.show("snapshots");
    return true;
  } catch (e) {
    err.textContent = e.message;
    return false;
  }
}

async function load() {
  const got = await api.listSnapshots(state.dataset);
  snapshots = Array.isArray(got) ? got : got.snapshots || [];
}

function coef(s, key) {
  if (typeof s[key] === "number") return s[key];
  const rel = s.reliability || s.results?.reliability || s.analysis?.reliability || s.summary || {};
  return rel[key];
}

export async function render(container) {
  clear(container);
  container.append(section("Snapshots", note("Loading…")));
  try { await load(); } catch (e) { clear(container).append(section("Snapshots", note(e.message, "error"))); return; }
  clear(container);
  const rows = snapshots.map((s) => {
    const kept = (s.items || []).length;
    const removed = (s.removed || []).length;
    const actionsCell = h("span", { class: "actions" },
      h("button", { text: "Restore", title: "Load this snapshot's items and settings", onclick: () => actions.restoreSnapshot(s.id) }),
      h("a", { href: api.reportUrl(s.id), target: "_blank", rel: "noopener", text: "Report" }),
      h("a", { href: api.scoringKeyUrl(s.id), download: "", text: "Scoring key" }),
      h("button", { text: compareWith === s.id ? "Comparing…" : "Compare", "aria-pressed": String(compareWith === s.id),
        onclick: () => pickCompare(container, s.id) }));
    const parent = s.parent ? snapshots.find((x) => x.id === s.parent) : null;
    return [h("span", { class: "snap-name" }, h("span", { text: s.name || s.id }),
      s.parent ? h("span", { class: "muted lineage", text: ` ↳ revises ${parent ? parent.name : s.parent}` }) : null), s.author || "—", (s.created_at || "").replace("T", " ").slice(0, 16),
      `${kept} kept / ${removed} removed`, fmt(coef(s, "alpha")), fmt(coef(s, "omega_total")), s.note || "", actionsCell];
  });
  container.append(section("Snapshots",
    message ? h("p", { class: "ok", role: "status", text: message }) : null,
    h("div", { class: "toolbar" }, h("button", { class: "primary", id: "open-snapshot", text: "Save a snapshot…", onclick: () => openDialog() }),
      h("span", { class: "muted", text: "A snapshot is permanent: the kept items, every removal with its reason, the settings and the numbers at that moment." })),
    rows.length ? table(["Name", "By", "Saved", "Items", "α", "ω", "Note", ""], rows, { className: "grid snapshots", caption: "Newest first" })
      : note("No snapshots yet."),
    compareWith ? note("Pick a second snapshot to compare with.") : null,
    comparison ? renderComparison(comparison) : null));
  message = null;
}

async function pickCompare(container, id) {
  if (!compareWith) { compareWith = id; comparison = null; render(container); return; }
  if (compareWith === id) { compareWith = null; render(container); return; }
  try { comparison = await api.compareSnapshots(compareWith, id); } catch (e) { comparison = { error: e.message }; }
  compareWith = null;
  render(container);
}

function renderComparison(c) {
  if (c.error) return note(c.error, "error");
  const parts = [];
  const added = c.items_added || c.added || [];
  const removed = c.items_removed || c.removed || [];
  parts.push(h("p", { text: `Items added: ${added.length ? added.map((x) => x.item || x).join(", ") : "none"}. Items removed: ${removed.length ? removed.map((x) => x.item || x).join(", ") : "none"}.` }));
  const changes = c.coefficients || c.coefficient_changes || {};
  const show = (k, v) => (k === "n_items" || k === "n_complete" ? (v ?? "—") : fmt(v));
  const rows = Object.entries(changes).map(([k, v]) => (typeof v === "object" && v !== null
    ? [k.replace(/_/g, " "), show(k, v.a), show(k, v.b), show(k, v.change)] : [k, "", "", fmt(v)]));
  if (rows.length) parts.push(table(["Coefficient", "First", "Second", "Change"], rows, { className: "grid" }));
  const lc = c.loadings || [];
  const labelsA = c.a?.factors || [];
  const labelsB = c.b?.factors || [];
  const moved = lc.filter((r) => r.primary_a && r.primary_b)
    .map((r) => ({ ...r, shift: Math.abs((r.primary_b.loading ?? 0) - (r.primary_a.loading ?? 0)) + (r.primary_a.factor !== r.primary_b.factor ? 1 : 0) }))
    .sort((x, y) => y.shift - x.shift).slice(0, 12);
  if (moved.length) {
    parts.push(table(["Item", "Primary before", "Primary after"], moved.map((r) => [r.item,
      `${labelsA[r.primary_a.factor] ?? `F${r.primary_a.factor + 1}`} ${fmt(r.primary_a.loading, 2)}`,
      `${labelsB[r.primary_b.factor] ?? `F${r.primary_b.factor + 1}`} ${fmt(r.primary_b.loading, 2)}`]),
    { className: "grid", caption: "Items whose main loading moved most" }));
  }
  parts.push(warningList(c.warnings));
  return h("div", { class: "comparison", id: "comparison" }, h("h3", { text: `Comparing ${c.a?.name || c.first?.name || "first"} with ${c.b?.name || c.second?.name || "second"}` }), parts);
}

