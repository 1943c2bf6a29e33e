// Workspace: download a backup of everything, import one (merge), and read the audit log.
import { api } from "../api.js";
import { clear, h, note, section, table } from "./dom.js";

const ACTIONS = {
  upload: "uploaded a dataset", delete: "deleted a dataset", snapshot: "saved a snapshot",
  snapshot_restore: "restored a snapshot", backup: "downloaded a backup", restore: "imported a backup",
  schema_upgrade: "upgraded the database", import_earlier_store: "copied the earlier folder store into scalewright.db",
};
// state.workspace: onlyThis (the log filter) and message ({text, error}, shown once after an import).

const short = (sha) => (sha ? `${String(sha).slice(0, 12)}…` : "");
const plural = (n, word) => `${n} ${word}${n === 1 ? "" : "s"}`;

function detailText(e) {
  const d = e.details || {};
  const parts = [];
  if (d.name) parts.push(`“${d.name}”`);
  if (d.filename) parts.push(d.filename);
  if (d.n_rows != null && d.n_items != null && e.action !== "snapshot") parts.push(`${d.n_rows} × ${d.n_items}`);
  if (d.removed && d.removed.length) parts.push(`removed ${d.removed.join(", ")}`);
  if (d.sha256) parts.push(`SHA-256 ${short(d.sha256)}`);
  if (d.dataset_sha256) parts.push(`data SHA-256 ${short(d.dataset_sha256)}`);
  if (d.zip_sha256) parts.push(`zip SHA-256 ${short(d.zip_sha256)}`);
  if (d.datasets_added) parts.push(`added ${plural(d.datasets_added.length, "dataset")}, ${plural((d.snapshots_added || []).length, "snapshot")}`);
  else if (d.datasets != null) parts.push(`${plural(d.datasets, "dataset")}, ${plural(d.snapshots || 0, "snapshot")}`);
  if (d.from != null && d.to != null) parts.push(`schema ${d.from} → ${d.to}`);
  return parts.join(" · ");
}

function datasetName(state, id) {
  if (!id) return "";
  const d = state.datasets.find((x) => x.id === id);
  return d ? d.name : `${id} (deleted)`;
}

function importForm(container, state) {
  const input = h("input", { type: "file", id: "workspace-file", accept: ".zip,application/zip" });
  const button = h("button", { type: "submit", id: "workspace-import", text: "Import" });
  return h("form", { class: "toolbar", onsubmit: async (ev) => {
    ev.preventDefault();
    const f = input.files[0];
    if (!f) { state.workspace.message = { text: "Choose a backup zip first.", error: true }; render(container, state); return; }
    const fd = new FormData();
    fd.append("file", f, f.name);
    button.disabled = true;
    try {
      const r = await api.importWorkspace(fd);
      state.workspace.message = { text: `Imported ${f.name}: added ${plural(r.datasets_added.length, "dataset")} and ${plural(r.snapshots_added.length, "snapshot")}; `
        + `skipped ${plural(r.datasets_skipped.length, "dataset")} and ${plural(r.snapshots_skipped.length, "snapshot")} already here.` };
      try { state.datasets = await api.listDatasets(); } catch { /* the start view reloads them */ }
    } catch (err) {
      state.workspace.message = { text: `Not imported: ${err.message}`, error: true };
    }
    render(container, state);
  } }, h("label", {}, "Backup zip ", input), button);
}

export async function render(container, state) {
  if (state.view !== "workspace") return; // as in the snapshots view: the container is shared by every view
  const page = state.workspace;
  const { onlyThis, message } = page;
  let log;
  try {
    log = await api.audit(onlyThis && state.dataset ? { dataset_id: state.dataset } : {});
  } catch (e) {
    log = { error: e.message };
  }
  if (state.view !== "workspace") return;
  clear(container);
  container.append(section("Back up and move this workspace",
    note("One zip holds the database, every uploaded file byte for byte and a manifest with their SHA-256 hashes. "
      + "Import it here to add its datasets and snapshots to this workspace, or restore it into an empty folder with "
      + "scalewright restore --data-dir DIR FILE.zip."),
    h("div", { class: "toolbar" },
      h("a", { class: "button", id: "workspace-backup", href: api.backupUrl(state.who), download: "", text: "Download a backup (.zip)",
        onclick: (ev) => { ev.currentTarget.href = api.backupUrl(state.who); } })), // the name as it is now
    importForm(container, state),
    message ? h("p", { class: message.error ? "error" : "ok", role: message.error ? "alert" : "status", id: "workspace-message", text: message.text }) : null));
  page.message = null;

  const filter = state.dataset ? h("label", {}, h("input", { type: "checkbox", id: "audit-only-this", checked: onlyThis,
    onchange: (ev) => { page.onlyThis = ev.target.checked; render(container, state); } }), " only this dataset") : null;
  let body;
  if (log.error) body = note(log.error, "error");
  else if (!log.length) body = note("Nothing recorded yet.");
  else {
    body = h("div", { class: "table-scroll" }, table(["#", "When (UTC)", "Who", "What", "Dataset", "Details"],
      log.map((e) => [String(e.seq), (e.at || "").replace("T", " ").slice(0, 19), e.who || "—", ACTIONS[e.action] || e.action,
        datasetName(state, e.dataset_id), detailText(e)]),
      { className: "grid audit", caption: "Newest first" }));
  }
  container.append(section("Audit log",
    note("Uploads, deletions, snapshots, restores, backups and imports, with who (the name in “You are”), when and the files' hashes. "
      + "The log cannot be edited and keeps entries about deleted datasets."),
    filter, body));
}
