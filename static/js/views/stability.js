// Stability and agreement: two waves (test-retest / parallel forms) and a rater table.
import { api } from "../api.js";
import { blandAltman, retestScatter } from "../charts.js";
import { allItems, keptItems } from "../state.js";
import { clear, current, fmt, h, note, section, select, table, warningList } from "./dom.js";

// The last results live in state.stability (the save-snapshot dialog offers them through lastStability()).
const retestSummary = (r) => `${r.recommended || "ICC"} ${num(val(r.icc?.[r.recommended]))} with ${r.second?.name || "the second wave"}`;
const agreementSummary = (r) => `${r.n_units} units, ${r.n_raters} raters`;

const num = (v, d = 3) => (typeof v === "number" ? fmt(v, d) : v == null ? "—" : String(v));
const ci = (c) => (Array.isArray(c) && c.length === 2 ? `${fmt(c[0], 2)} to ${fmt(c[1], 2)}` : "—");

export function parseRatings(text) {
  const lines = text.split(/\r?\n/).map((l) => l.trim()).filter(Boolean);
  if (!lines.length) return { ratings: [], units: [], hasUnits: false };
  const delim = lines[0].includes("\t") ? "\t" : lines[0].includes(";") ? ";" : ",";
  let rows = lines.map((l) => l.split(delim).map((c) => c.trim().replace(/^"|"$/g, "")));
  const isNum = (c) => c === "" || c === "NA" || c === "." || !Number.isNaN(Number(c));
  if (rows[0].some((c) => !isNum(c))) rows = rows.slice(1); // header
  let units = rows.map((_, i) => String(i + 1));
  const hasUnits = rows.length > 0 && rows.every((r) => !isNum(r[0]));
  if (hasUnits) { units = rows.map((r) => r[0]); rows = rows.map((r) => r.slice(1)); }
  const ratings = rows.map((r) => r.map((c) => (c === "" || c === "NA" || c === "." ? null : Number.isNaN(Number(c)) ? c : Number(c))));
  return { ratings, units, hasUnits };
}

const val = (v) => (v && typeof v === "object" && "value" in v ? v.value : v);

function iccTable(icc, recommended) {
  if (!icc || typeof icc !== "object") return null;
  if ("value" in icc && !("ICC(1,1)" in icc)) return icc.reason ? note(`ICC: ${icc.reason}`) : null;
  const rows = Object.entries(icc).filter(([, v]) => v && typeof v === "object" && "value" in v)
    .map(([form, v]) => [form === recommended ? `${form} (recommended)` : form, v.value == null ? (v.reason || "undefined") : num(v.value),
      ci(v.ci), num(v.f, 2), v.df1 == null ? "—" : `${num(v.df1, 0)}, ${num(v.df2, 0)}`,
      v.p == null ? "—" : v.p < 0.001 ? "< .001" : fmt(v.p, 3)]);
  return rows.length ? table(["ICC form", "Value", "95% CI", "F", "df", "p"], rows,
    { className: "grid icc", caption: "Intraclass correlations, McGraw & Wong (1996) names; ICC(1,1) is Shrout & Fleiss' one-way form." }) : null;
}

function pairsOf(r) {
  const p = r.scores;
  if (!Array.isArray(p) || !p.length) return null;
  const ids = r.score_ids || p.map((_, i) => `#${i + 1}`);
  return { ids, x: p.map((xy) => xy[0]), y: p.map((xy) => xy[1]) };
}

function withCi(v) {
  if (v == null) return "—";
  if (typeof v === "number") return num(v);
  if (v.value == null) return v.reason || "undefined";
  return v.ci ? `${num(v.value)} (${ci(v.ci)})` : num(v.value);
}

function renderRetest(box, state) {
  const { retest: r, pick } = state.stability;
  if (!r) return;
  if (r.error) { box.append(note(r.error, "error")); return; }
  const pairs = pairsOf(r);
  const loa = r.limits_of_agreement || {};
  const loaPair = Array.isArray(loa) ? loa : [loa.lower, loa.upper];
  const count = (x) => (x == null ? "—" : typeof x === "object" ? x.count : x);
  const used = Array.isArray(r.items) ? r.items : [];
  const stale = pick.source === "current" && used.length && JSON.stringify(used) !== JSON.stringify(keptItems());
  const facts = [["Items scored", used.length ? `${used.length} (${r.score === "mean" ? "mean" : "sum"} score${r.snapshot ? `, snapshot ${r.snapshot.name || r.snapshot.id || r.snapshot}` : ""})` : "—"],
    ["Matched respondents", `${r.n_matched}${r.n != null && r.n !== r.n_matched ? ` (${r.n} with complete scores)` : ""}`],
    ["Only in the first wave", count(r.only_first)], ["Only in the second wave", count(r.only_second)],
    ["Pearson r (95% CI)", withCi(r.pearson_r)], ["Spearman ρ (95% CI)", withCi(r.spearman_rho)],
    ["SEM", num(val(r.sem), 2)], ["Smallest detectable change (MDC95)", num(val(r.mdc95), 2)],
    ["Mean difference (second − first)", num(r.mean_difference, 2)], ["Limits of agreement", ci(loaPair)]];
  if (stale) {
    box.append(note(`The kept items have changed since this comparison (it scored ${used.length}, ${keptItems().length} are kept now): compare the waves again.`, "error stale"));
  }
  box.append(h("dl", { class: "facts" }, facts.map(([k, v]) => [h("dt", { text: k }), h("dd", { text: String(v ?? "—") })])));
  if (r.recommended) {
    box.append(h("p", { class: "interpretation", id: "retest-reading",
      text: `${r.recommended}: ${num(val(r.icc?.[r.recommended]))}, read as ${r.interpretation || "—"} from its interval.` }));
    box.append(h("p", { class: "muted", text: `${r.recommended_why || ""} ${r.interpretation_source || ""}`.trim() }));
  }
  const t = iccTable(r.icc, r.recommended);
  if (t) box.append(t);
  if (pairs) {
    const sc = h("div", { class: "chart", id: "retest-scatter" });
    const ba = h("div", { class: "chart", id: "bland-altman" });
    box.append(h("div", { class: "two even" }, sc, ba));
    const label = r.score === "mean" ? "mean score" : "sum score";
    retestScatter(sc, { x: pairs.x, y: pairs.y, ids: pairs.ids, labelX: `first wave (${label})`, labelY: `second wave (${label})` });
    const means = pairs.x.map((x, i) => (x + pairs.y[i]) / 2);
    const diffs = pairs.x.map((x, i) => pairs.y[i] - x);
    blandAltman(ba, { means, diffs, ids: pairs.ids, meanDiff: r.mean_difference, loa: loaPair });
  }
  if (Array.isArray(r.per_item) && r.per_item.length) {
    const rec = r.recommended || "ICC(A,1)";
    box.append(h("details", { class: "per-item" }, h("summary", { text: `Per item (${r.per_item.length})` }),
      table(["Item", "n", `${rec}`, "95% CI", "Pearson r", "Mean difference"], r.per_item.map((it) => [
        it.item_second && it.item_second !== it.item ? `${it.item} / ${it.item_second}` : it.item, it.n ?? "—",
        it.icc?.[rec]?.value == null ? (it.icc?.[rec]?.reason || "—") : num(it.icc[rec].value), ci(it.icc?.[rec]?.ci),
        withCi(it.pearson_r), num(it.mean_difference, 2)]), { className: "grid" })));
  }
  const per = byConstructTables(r.by_construct);
  if (per) box.append(per);
  box.append(warningList(r.warnings));
}

// One compact table per construct of the chosen items (issue 11): the recommended ICC, its interval, SEM.
function byConstructTables(blocks) {
  const entries = Object.entries(blocks || {});
  if (!entries.length) return null;
  return h("div", { class: "by-construct", id: "retest-by-construct" }, h("h3", { text: "Per subscale" }),
    h("div", { class: "by-construct-grid" }, entries.map(([name, b]) => {
      if (!b || typeof b !== "object") return null;
      const rec = b.recommended || "ICC(A,1)";
      const icc = b.icc?.[rec];
      const items = Array.isArray(b.items) ? b.items.length : null;
      const rows = [[`${rec}${b.interpretation ? ` (${b.interpretation})` : ""}`, icc?.value == null ? (icc?.reason || b.reason || "undefined") : num(icc.value), ci(icc?.ci)],
        ["Pearson r", b.pearson_r?.value == null && b.pearson_r?.reason ? b.pearson_r.reason : num(val(b.pearson_r)), ci(b.pearson_r?.ci)], ["SEM", num(val(b.sem), 2), "—"], ["Smallest detectable change (MDC95)", num(val(b.mdc95), 2), "—"]];
      return table(["", "Value", "95% CI"], rows, { className: "grid by-construct-table",
        caption: `${name}${items != null ? ` (${items} item${items === 1 ? "" : "s"}` : ""}${b.n != null ? `, n ${b.n})` : items != null ? ")" : ""}` });
    })));
}

// Cohen's kappa for every pair of raters (three or more), with the mean over the pairs (Light 1971).
function pairwiseCohenTable(pc) {
  if (!pc || typeof pc !== "object" || !pc.kappa || !Array.isArray(pc.kappa.pairs)) return null;
  const weighted = ["linear", "quadratic"].filter((w) => Array.isArray(pc[w]?.pairs));
  const cell = (p) => (p == null ? "—" : p.kappa == null ? (p.reason || "undefined") : `${num(p.kappa)}${p.ci ? ` (${ci(p.ci)})` : ""}`);
  const key = (p) => JSON.stringify(p.raters);
  const lookup = Object.fromEntries(weighted.map((w) => [w, Object.fromEntries(pc[w].pairs.map((p) => [key(p), p]))]));
  const rows = pc.kappa.pairs.map((p) => [`${p.raters[0]} & ${p.raters[1]}`, cell(p), ...weighted.map((w) => cell(lookup[w][key(p)])), p.n_units ?? "—"]);
  rows.push([pc.kappa.mean_name || "Mean (Light's κ)", num(pc.kappa.mean), ...weighted.map((w) => num(pc[w].mean)), pc.kappa.n_units ?? "—"]);
  const notes = ["linear", "quadratic"].filter((w) => pc[w] && !Array.isArray(pc[w].pairs) && pc[w].reason).map((w) => `${w} weights: ${pc[w].reason}`);
  return h("div", { id: "pairwise-cohen" },
    table(["Rater pair", "Cohen's κ (95% CI)", ...weighted.map((w) => `weighted κ, ${w}`), "Units"], rows,
      { className: "grid pairwise-cohen", caption: "Cohen's κ for every pair of raters (Cohen 1960; weighted: Cohen 1968); the mean over the pairs is Light's (1971) κ." }),
    notes.length ? note(notes.join(" ")) : null);
}

function renderAgreement(box, state) {
  const { agreement: r, pick } = state.stability;
  if (!r) return;
  if (r.error) { box.append(note(r.error, "error")); return; }
  const rows = [];
  const add = (label, v) => {
    if (v == null) return;
    if (typeof v === "number") rows.push([label, num(v), "—", ""]);
    else if (typeof v === "object" && "value" in v) {
      rows.push([label, v.value == null ? "undefined" : num(v.value), ci(v.ci), v.value == null ? (v.reason || "") : (v.label || "")]);
    }
  };
  // Percent agreement is a share of units: shown as a percentage with its count, not as a coefficient.
  const pa = r.percent_agreement;
  const paValue = pa && typeof pa === "object" ? pa.value : pa;
  if (paValue != null) {
    const counted = pa && typeof pa === "object" && pa.n_agree != null && pa.n_units != null ? ` (${pa.n_agree} of ${pa.n_units} units)` : "";
    rows.push(["Percent agreement (all raters agree)", `${(paValue * 100).toFixed(1)}%${counted}`, "—", ""]);
  } else if (pa && typeof pa === "object") add("Percent agreement (all raters agree)", pa);
  // With more than two raters Cohen's kappas do not apply; one line says so instead of three.
  const wk = r.weighted_kappa || {};
  const cohenOff = r.cohen_kappa && r.cohen_kappa.value == null;
  if (cohenOff && [wk.linear, wk.quadratic].every((x) => !x || (x.value == null && x.reason === r.cohen_kappa.reason))) {
    add("Cohen's κ (unweighted and weighted)", r.cohen_kappa);
  } else {
    add("Cohen's κ", r.cohen_kappa);
    add("Weighted κ (linear)", wk.linear); add("Weighted κ (quadratic)", wk.quadratic);
  }
  add("Fleiss' κ", r.fleiss_kappa);
  add(`Krippendorff's α (${r.level || pick.level})`, r.krippendorff_alpha);
  box.append(h("p", { text: `${r.n_units} units, ${r.n_raters} raters${r.n_missing ? `, ${r.n_missing} missing ratings` : ""}.` }));
  const conventions = [r.conventions?.kappa_labels || "κ readings: Landis & Koch (1977) bands, a convention rather than a finding.",
    r.krippendorff_alpha?.value != null ? (r.conventions?.alpha_labels || r.krippendorff_alpha.label_source) : null].filter(Boolean);
  box.append(table(["Coefficient", "Value", "95% CI", "Reading"], rows, { className: "grid agreement",
    caption: conventions.map((t, i) => (i === 0 && !/^κ/.test(t) ? `κ readings: ${t}` : i === 1 ? `α reading: ${t}` : t)).join(" · ") }));
  const pairwise = pairwiseCohenTable(r.pairwise_cohen);
  if (pairwise) box.append(pairwise);
  const t = iccTable(r.icc, r.recommended);
  if (t) box.append(t);
  box.append(warningList(r.warnings));
}

export function render(container, state) {
  clear(container);
  const st = state.stability;
  const { pick } = st;
  const datasets = state.datasets.map((d) => [d.id, d.name || d.id]);
  if (pick.wavesFor !== state.dataset) { pick.wavesFor = state.dataset; pick.first = null; pick.second = null; } // another pool opened
  pick.first ||= state.dataset;
  if (!pick.second) {
    // The likeliest second wave: another file (not a copy of this one) that holds this pool's items and
    // has an ID column to match respondents by. A re-upload of the same file made a useless default.
    const here = state.datasets.find((d) => d.id === state.dataset) || {};
    const mine = new Set(allItems());
    const likely = (d) => (d.sha256 && d.sha256 === here.sha256 ? 0 : 4) + ((d.items || []).some((it) => mine.has(it.name)) ? 2 : 0)
      + (d.id_column ? 1 : 0);
    const others = state.datasets.filter((d) => d.id !== state.dataset);
    pick.second = others.length ? others.reduce((best, d) => (likely(d) > likely(best) ? d : best)).id : null;
  }
  const retestBox = h("div", { class: "result", id: "retest-result" });
  const run = h("button", { class: "primary", id: "run-retest", text: "Compare the waves", onclick: async () => {
    run.disabled = true;
    try {
      const body = { second: pick.second, score: pick.score };
      if (pick.source === "current") Object.assign(body, { first: pick.first, items: keptItems(), reverse: state.reverse ?? undefined });
      else Object.assign(body, { snapshot: pick.source });
      if (pick.byConstruct) body.by_construct = true;
      const other = pick.itemsSecond.split(/[,;\s]+/).map((x) => x.trim()).filter(Boolean);
      if (other.length) body.items_second = other; // parallel forms: the other form's items, in the same order
      const answer = await api.retest(body);
      Object.assign(st, { retest: answer, retestAsked: { ...body, first: body.first || answer.first?.id }, retestSummary: retestSummary(answer) });
    } catch (e) { st.retest = { error: e.message }; }
    run.disabled = false;
    current(run).disabled = false;
    const box = current(retestBox);
    clear(box); renderRetest(box, state);
  } });
  const textArea = h("textarea", { id: "ratings-text", rows: 8, cols: 50, placeholder: "One row per unit, one column per rater (comma or tab separated); a header row and a first column of unit labels are recognised; empty = missing.",
    oninput: (e) => { pick.text = e.target.value; } });
  textArea.value = pick.text;
  const fileIn = h("input", { type: "file", accept: ".csv,.tsv,.txt", id: "ratings-file", onchange: async (e) => {
    const f = e.target.files[0]; if (!f) return;
    pick.text = await f.text(); current(textArea).value = pick.text; pick.file = f; pick.fileText = pick.text;
  } });
  const agreeBox = h("div", { class: "result", id: "agreement-result" });
  const example = h("button", { id: "ratings-example", text: "Use the invented example (3 coordinators, 40 logs)", onclick: async () => {
    try {
      pick.text = await api.demoRatings(); current(textArea).value = pick.text; pick.file = null; pick.level = "ordinal";
    } catch (e) { st.agreement = { error: e.message }; const box = current(agreeBox); clear(box); renderAgreement(box, state); }
  } });
  const runAgree = h("button", { class: "primary", id: "run-agreement", text: "Compute agreement", onclick: async () => {
    runAgree.disabled = true;
    try {
      if (pick.file && pick.text === pick.fileText) { // the uploaded file as it is: the server reads it
        const form = new FormData();
        form.append("file", pick.file, pick.file.name);
        form.append("level", pick.level);
        form.append("id_column", parseRatings(pick.text).hasUnits ? "yes" : "no");
        st.agreement = await api.agreementUpload(form);
      } else {
        st.agreement = await api.agreement({ ratings: parseRatings(pick.text).ratings, level: pick.level });
      }
      st.agreementAsked = { ratings: parseRatings(pick.text).ratings, level: pick.level };
      st.agreementSummary = agreementSummary(st.agreement);
    } catch (e) { st.agreement = { error: e.message }; }
    runAgree.disabled = false;
    current(runAgree).disabled = false;
    const box = current(agreeBox);
    clear(box); renderAgreement(box, state);
  } });
  container.append(
    section("Test-retest or parallel forms",
      note("Scores are built from the chosen items, scored the same way in both waves; respondents are matched by their ID column."),
      h("div", { class: "toolbar" },
        h("label", {}, "Items ", select([["current", `kept now (${keptItems().length})`],
          ...pick.snapshots.map((sn) => [sn.id, `snapshot: ${sn.name} (${(sn.items || []).length})`])], pick.source,
        (v) => { pick.source = v; }, { id: "retest-items" })),
        h("label", {}, "First wave ", select(datasets, pick.first, (v) => { pick.first = v; }, { id: "wave-first" })),
        h("label", {}, "Second wave ", select(datasets, pick.second, (v) => { pick.second = v; }, { id: "wave-second" })),
        h("label", {}, "Score ", select([["sum", "sum"], ["mean", "mean"]], pick.score, (v) => { pick.score = v; })),
        h("label", {}, h("input", { type: "checkbox", id: "retest-by-construct-toggle", checked: Boolean(pick.byConstruct),
          onchange: (e) => { pick.byConstruct = e.target.checked; } }), " per subscale"), run),
      h("div", { class: "toolbar" }, h("label", {}, "Parallel forms: the second form's items, in the same order (leave empty for a retest) ",
        h("input", { id: "items-second", size: 40, value: pick.itemsSecond, placeholder: "e.g. B1, B2, B3",
          oninput: (e) => { pick.itemsSecond = e.target.value; } }))),
      retestBox),
    section("Rater agreement",
      h("div", { class: "toolbar" }, h("label", {}, "Upload ", fileIn),
        h("label", {}, "Level ", select([["nominal", "nominal"], ["ordinal", "ordinal"], ["interval", "interval"], ["ratio", "ratio"]], pick.level, (v) => { pick.level = v; })),
        runAgree, example),
      textArea, agreeBox));
  renderRetest(retestBox, state);
  renderAgreement(agreeBox, state);
  if (pick.snapshotsFor !== state.dataset && state.dataset) {
    pick.snapshotsFor = state.dataset;
    api.listSnapshots(state.dataset).then((got) => {
      pick.snapshots = Array.isArray(got) ? got : [];
      if (pick.snapshots.length && container.isConnected && state.view === "stability") render(container, state);
    }).catch(() => {});
  }
}
