// Start: upload a response file (+ optional codebook), see intake warnings and the detected items,
// or open an existing dataset (the demo among them).
import { api } from "../api.js";
import { actions } from "../state.js";
import { clear, h, note, section, table, warningList } from "./dom.js";

// state.start.upload is the last upload ({record} or {error}); state.start.form what was chosen and typed,
// kept across re-renders: after a refused file the team fixes one field and tries again instead of
// picking both files a second time.

function restoreFile(input, file) {
  if (!file) return;
  try { const dt = new DataTransfer(); dt.items.add(file); input.files = dt.files; } catch { /* an old browser: pick again */ }
}

export function render(container, state) {
  clear(container);
  const kept = state.start.form;
  const responsesInput = h("input", { type: "file", id: "file-responses", name: "file",
    accept: ".csv,.tsv,.txt,.xlsx,text/csv,text/tab-separated-values" });
  const codebookInput = h("input", { type: "file", id: "file-codebook", name: "codebook", accept: ".csv,.xlsx,text/csv" });
  const nameInput = h("input", { type: "text", id: "upload-name", placeholder: "the file name", size: 24, maxlength: 200 });
  const missing = h("input", { type: "text", id: "missing-codes", placeholder: "e.g. -9, 99", size: 10 });
  const idColumn = h("input", { type: "text", id: "id-column", placeholder: "e.g. respondent", size: 14 });
  const smin = h("input", { type: "number", id: "scale-min", placeholder: "from data", step: "any", size: 6 });
  const smax = h("input", { type: "number", id: "scale-max", placeholder: "from data", step: "any", size: 6 });
  const chosen = h("p", { class: "chosen", text: "No file chosen yet." });
  restoreFile(responsesInput, kept.responses);
  restoreFile(codebookInput, kept.codebook);
  nameInput.value = kept.name || "";
  missing.value = kept.missing; idColumn.value = kept.idColumn; smin.value = kept.smin; smax.value = kept.smax;
  const remember = () => {
    kept.responses = responsesInput.files[0] || null; kept.codebook = codebookInput.files[0] || null;
    kept.name = nameInput.value; kept.missing = missing.value; kept.idColumn = idColumn.value; kept.smin = smin.value; kept.smax = smax.value;
  };
  for (const el of [nameInput, missing, idColumn, smin, smax]) el.addEventListener("input", remember);

  const showChosen = () => {
    const f = responsesInput.files[0];
    const c = codebookInput.files[0];
    chosen.textContent = f ? `Responses: ${f.name}${c ? ` · codebook: ${c.name}` : ""}` : "No file chosen yet.";
    remember();
  };
  showChosen();
  responsesInput.addEventListener("change", showChosen);
  codebookInput.addEventListener("change", showChosen);

  const drop = h("div", { class: "dropzone", tabindex: 0, role: "button",
    title: "Drop a response file here, or press Enter to choose one" },
  h("strong", { text: "Drop a response file here" }),
  h("span", { text: " (CSV, TSV or XLSX: one row per respondent, one column per item). A second file named like *codebook* is taken as the codebook." }));
  drop.addEventListener("click", () => responsesInput.click());
  drop.addEventListener("keydown", (e) => { if (e.key === "Enter" || e.key === " ") { e.preventDefault(); responsesInput.click(); } });
  drop.addEventListener("dragover", (e) => { e.preventDefault(); drop.classList.add("over"); });
  drop.addEventListener("dragleave", () => drop.classList.remove("over"));
  drop.addEventListener("drop", (e) => {
    e.preventDefault();
    drop.classList.remove("over");
    const files = [...e.dataTransfer.files];
    const cb = files.find((f) => /codebook|items|key/i.test(f.name));
    const resp = files.find((f) => f !== cb) || files[0];
    const dtR = new DataTransfer(); if (resp) dtR.items.add(resp); responsesInput.files = dtR.files;
    if (cb && cb !== resp) { const dtC = new DataTransfer(); dtC.items.add(cb); codebookInput.files = dtC.files; }
    showChosen();
  });

  const status = h("div", { class: "upload-status", "aria-live": "polite" });
  const submit = h("button", { class: "primary", type: "submit", id: "upload-button", text: "Read the file" });
  const form = h("form", { class: "upload", onsubmit: async (e) => {
    e.preventDefault();
    // A file chosen while the view was being drawn again (the dataset list arrives after the first drawing) went
    // to the input that was replaced; its change was still remembered in `kept`.
    const f = responsesInput.files[0] || kept.responses;
    if (!f) { status.textContent = "Choose a response file first."; return; }
    const fd = new FormData();
    fd.append("file", f, f.name);
    const cb = codebookInput.files[0] || kept.codebook;
    if (cb) fd.append("codebook", cb, cb.name);
    if (nameInput.value.trim()) fd.append("name", nameInput.value.trim());
    if (missing.value.trim()) fd.append("missing_codes", missing.value.trim());
    if (idColumn.value.trim()) fd.append("id_column", idColumn.value.trim());
    if (smin.value !== "") fd.append("scale_min", smin.value);
    if (smax.value !== "") fd.append("scale_max", smax.value);
    submit.disabled = true;
    const progress = uploadProgress(status);
    try {
      state.start.upload = { record: await actions.upload(fd, progress.update) };
      Object.assign(kept, { responses: null, codebook: null, name: "", missing: "", idColumn: "", smin: "", smax: "" });
    } catch (err) {
      state.start.upload = { error: err };
    } finally {
      progress.stop();
      submit.disabled = false;
    }
    render(container, state);
  } },
  drop,
  h("div", { class: "fields" },
    h("label", {}, "Responses ", responsesInput),
    h("label", {}, "Codebook (optional: item, text, construct, reverse, min, max) ", codebookInput),
    h("label", {}, "Name (optional; default: the file name) ", nameInput),
    h("label", {}, "Missing-value codes ", missing),
    h("label", {}, "ID column ", idColumn),
    h("label", {}, "Lowest answer ", smin),
    h("label", {}, "Highest answer ", smax)),
  chosen, submit, status);

  const lastUpload = state.start.upload;
  if (lastUpload) container.append(uploadResult(state, lastUpload));
  container.append(section(lastUpload?.record ? "Bring another file" : "Bring a draft item pool",
    note("Files stay on this machine: they are read by the Scalewright server you started and kept in its data folder."),
    form));

  const rows = state.datasets.map((d) => [
    h("button", { class: "link", text: d.name || d.id, onclick: () => actions.openDataset(d.id) }),
    d.n_rows ?? d.meta?.n_rows ?? "—",
    (d.items || d.meta?.items || []).length || d.n_items || "—",
    (d.created_at || "").replace("T", " ").slice(0, 16),
    h("button", { class: "delete-dataset", id: `delete-${d.id}`, text: "Delete…", "aria-label": `Delete ${d.name || d.id}…`,
      onclick: () => askDelete(container, state, d) }),
  ]);
  const demoButton = h("button", { id: "open-demo", text: "Open the invented demo (community workshop pool)",
    onclick: () => actions.openDemo() });
  container.append(section("Open a dataset",
    deleteConfirm(container, state),
    rows.length ? table(["Dataset", "Respondents", "Items", "Added (UTC)", ""], rows, { className: "grid datasets" })
      : note("No datasets yet. Upload one above, or open the demo: an invented pool of 24 statements with a few planted problems."),
    h("div", { class: "toolbar" }, demoButton)));
}

// The upload's progress in `status`: a bar and the megabytes while the file travels, then "reading the file"
// with the seconds counted while the server reads it (a large file takes a while; nothing looks frozen).
function uploadProgress(status) {
  const bar = h("progress", { id: "upload-progress", max: 100, value: 0, "aria-label": "Upload progress" });
  const words = h("span", { id: "upload-progress-text", text: "Sending the file…" });
  clear(status).append(bar, " ", words);
  const mb = (b) => (b / 1e6).toFixed(1);
  let readingSince = null;
  let timer = null;
  const reading = () => {
    const s = Math.floor((performance.now() - readingSince) / 1000);
    words.textContent = `Sent. Reading the file on the server…${s >= 1 ? ` ${s} s` : ""}`;
  };
  return {
    update({ phase, loaded, total }) {
      if (phase === "sending" && readingSince == null) {
        if (total) {
          const pct = Math.min(100, Math.round((loaded / total) * 100));
          bar.value = pct;
          words.textContent = `Sending the file… ${pct} % (${mb(loaded)} of ${mb(total)} MB)`;
        } else {
          bar.removeAttribute("value");
          words.textContent = `Sending the file… ${mb(loaded)} MB`;
        }
      } else if (phase === "reading" && readingSince == null) {
        bar.value = 100;
        status.dataset.phase = "reading";
        readingSince = performance.now();
        reading();
        timer = setInterval(reading, 1000);
      }
    },
    stop() { clearInterval(timer); },
  };
}

// Deleting a dataset: an in-page confirmation (state.start.deleting) that names the dataset and says what
// goes with it. The server removes the response file and codebook; saved snapshots stay (immutable).
async function askDelete(container, state, d) {
  state.start.deleting = { id: d.id, name: d.name || d.id, snapshots: null, error: null };
  render(container, state);
  document.getElementById("delete-keep")?.focus();
  try {
    const snaps = await api.listSnapshots(d.id);
    if (state.start.deleting?.id === d.id) { state.start.deleting.snapshots = snaps.length; render(container, state); }
  } catch { /* the count is a courtesy: the sentence without it is still true */ }
}

function deleteConfirm(container, state) {
  const del = state.start.deleting;
  if (!del || !state.datasets.some((d) => d.id === del.id)) return null;
  const n = del.snapshots;
  const snaps = n == null ? "Its saved snapshots are kept"
    : n === 0 ? "It has no saved snapshots" : `Its ${n} saved snapshot${n === 1 ? " is" : "s are"} kept`;
  const cancel = () => { state.start.deleting = null; render(container, state); };
  const confirm = h("button", { class: "danger", id: "delete-confirm", text: `Delete “${del.name}”`, onclick: async () => {
    confirm.disabled = true;
    try {
      if (state.start.upload?.record?.id === del.id) state.start.upload = null;
      state.start.deleting = null;
      await actions.deleteDataset(del.id); // re-renders the page
    } catch (err) {
      state.start.deleting = { ...del, error: err.message };
      render(container, state);
    }
  } });
  return h("div", { class: "delete-confirm", id: "delete-dialog", role: "alertdialog", "aria-labelledby": "delete-title",
    "aria-describedby": "delete-what", onkeydown: (e) => { if (e.key === "Escape") cancel(); } },
  h("p", { id: "delete-title", class: "delete-title", text: `Delete the dataset “${del.name}”?` }),
  h("p", { id: "delete-what", text: `Its response file and codebook are removed from this machine's data folder and it leaves this list; `
    + `if it is open, the page goes back here. ${snaps}${n === 0 ? "." : ": their record, report and scoring key still open, "
    + "but their responses can no longer be exported."} The deletion is written to the workspace log. It cannot be undone.` }),
  del.error ? h("p", { class: "error", role: "alert", text: `Not deleted: ${del.error}` }) : null,
  h("div", { class: "toolbar" }, confirm, h("button", { id: "delete-keep", text: "Keep it", onclick: cancel })));
}

function uploadResult(state, { record, error }) {
  if (error) {
    const details = Object.entries(error.details || {}).filter(([, v]) => v != null && !(Array.isArray(v) && !v.length));
    const shown = (v) => (Array.isArray(v) ? v.join(", ") : typeof v === "object" ? JSON.stringify(v) : String(v));
    return h("section", { class: "panel upload-error", id: "upload-error" }, h("h2", { text: "The file could not be read" }),
      h("p", { class: "error", role: "alert", text: error.message }),
      h("p", { class: "muted", text: "Your files and the fields below are still filled in: correct what the message names and read the file again." }),
      details.length ? h("details", {}, h("summary", { text: "Details for a bug report" }),
        h("ul", {}, details.map(([k, v]) => h("li", { text: `${k.replace(/_/g, " ")}: ${shown(v)}` })))) : null);
  }
  const items = record.items || [];
  const constructs = new Set(items.map((it) => it.construct).filter(Boolean));
  return section(`Read: ${record.name}`,
    h("div", { class: "toolbar" },
      h("p", { text: `${record.n_rows} respondents, ${items.length} items${constructs.size ? `, ${constructs.size} constructs` : ""}.` }),
      h("button", { class: "primary", id: "open-uploaded", text: "Start trimming", onclick: () => { state.start.upload = null; actions.openDataset(record.id); } })),
    warningList(record.warnings, "What the reader noticed"),
    table(["Item", "Wording", "Construct", "Reverse", "Range", "Missing"],
      items.map((it) => [it.name, it.text || "", it.construct || "—", it.reverse ? "yes" : "", `${it.min}–${it.max}`, it.n_missing ?? 0]),
      { className: "grid preview" }));
}
