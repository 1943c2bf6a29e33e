// Settings: every change refits. The controls, their help and the defaults are the server's
// (GET /api/options, kept in state.options); flag thresholds are heuristics and are labelled as such.
import { actions, allItems, itemMeta, settingDefaults, thresholdDefaults } from "../state.js";
import { optionLabel, settingName, thresholdLabel } from "../labels.js";
import { clear, h, note, section, select } from "./dom.js";

const capital = (text) => text.charAt(0).toUpperCase() + text.slice(1);

// One control for a served setting: a select for a choice, a number box for a number, a checkbox for a flag.
function control(o, value) {
  const id = `set-${o.name}`;
  if (o.type === "choice") {
    return select((o.choices || []).map((c) => [c.value, c.label ?? String(c.value)]), value,
      (v) => actions.setSetting(o.name, v), { id });
  }
  if (o.type === "boolean") {
    return h("input", { type: "checkbox", id, checked: Boolean(value), onchange: (e) => actions.setSetting(o.name, e.target.checked) });
  }
  if (o.type === "integer" || o.type === "number") {
    return h("input", { type: "number", id, value: value == null ? "" : String(value), min: o.min, max: o.max,
      step: o.type === "integer" ? "1" : o.step ?? "any", placeholder: o.default == null ? "automatic" : null,
      onchange: (e) => {
        const raw = e.target.value.trim();
        const v = Number(raw);
        if (raw === "") actions.setSetting(o.name, o.default ?? null);
        else if (!Number.isNaN(v)) actions.setSetting(o.name, v);
      } });
  }
  return h("input", { type: "text", id, value: value == null ? "" : String(value),
    onchange: (e) => actions.setSetting(o.name, e.target.value) });
}

export function render(container, state) {
  clear(container);
  if (!state.options) {
    const why = state.optionsError ? state.optionsError.message : "They have not arrived yet.";
    container.append(section("Analysis settings", note(`The settings could not be read from the server (GET /api/options): ${why}`, "error")));
    return;
  }
  const s = state.settings;
  const row = (label, ctrl, help) => h("div", { class: "setting" }, h("label", { for: ctrl.id, class: "label", text: label }), ctrl,
    h("p", { class: "muted", text: help || "" }));
  const rows = state.options.settings.map((o) => row(o.label || capital(settingName(o.name)), control(o, s[o.name]), o.help));

  const defaults = thresholdDefaults();
  const served = state.analysis?.efa?.thresholds || state.analysis?.settings?.thresholds || {};
  const extra = Object.entries(served).filter(([k, v]) => !(k in defaults) && typeof v === "number")
    .map(([k, v]) => ({ name: k, default: v }));
  const thresholdInputs = [...state.options.thresholds, ...extra].map((t) => {
    const key = t.name;
    const def = t.default;
    const current = state.thresholds[key] ?? served[key] ?? def;
    const changedHere = state.thresholds[key] != null && state.thresholds[key] !== def;
    const label = `${thresholdLabel(key)}${t.source ? ` (${t.source})` : ""}`;
    return h("div", { class: "threshold-row" },
      h("label", { class: `threshold${changedHere ? " changed" : ""}`, title: t.help || null }, h("span", { text: label }),
        h("span", { class: "threshold-input" },
          h("input", { type: "number", step: t.step ?? "0.05", min: t.min, max: t.max, value: String(current), id: `th-${key}`,
            onchange: (e) => { const v = Number(e.target.value); if (e.target.value !== "" && !Number.isNaN(v)) actions.setThreshold(key, v === def ? null : v); } }),
          h("span", { class: "muted default", text: changedHere ? `default ${def}` : "" }))),
      t.help ? h("p", { class: "muted threshold-help", id: `th-help-${key}`, text: t.help }) : null);
  });
  const declared = new Set(state.reverse ?? (state.meta?.items || []).filter((it) => it.reverse).map((it) => it.name));
  const reverseBoxes = allItems().map((n, i) => h("label", { class: "chip", title: itemMeta(n)?.text || "" },
    h("input", { type: "checkbox", id: `rev-${i}`, checked: declared.has(n), onchange: () => actions.toggleReverse(n) }), ` ${n}`));

  container.append(section("Analysis settings",
    note("Every change refits the analysis for everyone watching; the settings are part of the page address."),
    rows,
    h("fieldset", { class: "thresholds" }, h("legend", { text: "Flag thresholds (rules of thumb, not laws)" }), thresholdInputs,
      h("button", { type: "button", text: "Back to the defaults", onclick: () => actions.resetThresholds() })),
    h("fieldset", { class: "reverse" }, h("legend", { text: "Reverse-keyed items (scored as min + max − answer)" }), reverseBoxes,
      state.reverse ? h("button", { type: "button", text: "Use the codebook's choice", onclick: () => actions.resetReverse() }) : null),
    h("p", { class: "muted", id: "settings-defaults",
      text: `Defaults: ${Object.entries(settingDefaults()).map(([k, v]) => `${settingName(k)} ${optionLabel(k, v)}`).join(", ")}.` })));
}
