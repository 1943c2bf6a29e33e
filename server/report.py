"""The printable record of a snapshot: one self-contained HTML page.

``render_report(snapshot, dataset)`` returns a whole HTML document with inline CSS and inline SVG charts
drawn here (no scripts, no outside URL, nothing fetched), so it can be saved, mailed, printed or attached
to an ethics application as it is. Every piece of user text (names, item wording, reasons, notes) goes
through ``html.escape``.
"""
from __future__ import annotations

import html
import math
import re
from collections.abc import Mapping, Sequence
from datetime import UTC, datetime

from . import __version__
from .stats.notes import warning_text

__all__ = ["CAUTIONS", "PURPOSE", "render_report"]

PURPOSE = (
    "Scalewright is a local dashboard for teams who build rating scales. It takes the responses to a draft "
    "item pool, shows item statistics, reliability coefficients and exploratory factor analyses, and helps "
    "the team decide which items to keep. This page is the record of one such decision (a snapshot): which "
    "items were kept, which were removed, in what order and why, and what the numbers were at that moment."
)

CAUTIONS = (
    ("Internal consistency (alpha, omega and the other coefficients here) describes how the items hang "
     "together in this sample; it is not evidence of validity, and it does not show that the scale measures "
     "what it was written to measure."),
    ("Exploratory factor analysis and the flags shown are aids to judgement. The thresholds are rules of "
     "thumb, and removing items because of them capitalises on chance in this sample: confirm the structure "
     "in new data."),
    ("A scale used for decisions about people (clinical, educational, hiring or similar) needs validity "
     "evidence, norms and review under the applicable professional testing standards and local rules before "
     "such use."),
    ("Report every removed item and the reason for its removal together with the final scale "
     "(Flake & Fried, 2020, on undisclosed measurement flexibility)."),
)

_CSS = """
:root { --ink:#1d232b; --muted:#5b6572; --line:#d5dae1; --accent:#2a5d9f; --omega:#b5541b; }
* { box-sizing: border-box; }
body { font: 13px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, Arial, sans-serif; color: var(--ink);
       margin: 0 auto; max-width: 1120px; padding: 24px; }
h1 { font-size: 22px; margin: 0 0 4px; }
h2 { font-size: 16px; margin: 28px 0 8px; border-bottom: 2px solid var(--ink); padding-bottom: 2px; }
h3 { font-size: 14px; margin: 16px 0 6px; }
p { margin: 6px 0; }
.muted { color: var(--muted); }
.mono { font-family: ui-monospace, "SFMono-Regular", Menlo, Consolas, monospace; word-break: break-all; }
table { border-collapse: collapse; margin: 6px 0 10px; max-width: 100%; }
th, td { border-bottom: 1px solid var(--line); padding: 3px 8px; text-align: left; vertical-align: top;
         overflow-wrap: break-word; }
thead { display: table-header-group; }
table.wrap { width: 100%; }
table.wrap td:first-child { overflow-wrap: anywhere; min-width: 3.5em; }
table.wrap th.num { white-space: normal; overflow-wrap: normal; hyphens: manual; }
th { background: #f1f3f6; font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
table.kv th { width: 16em; background: none; font-weight: 500; color: var(--muted); }
.flag { display: inline-block; border: 1px solid #a93226; color: #a93226; border-radius: 3px;
        padding: 0 4px; margin: 1px 2px 1px 0; font-size: 12px; overflow-wrap: anywhere; }
.heat td.num { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
.heat td.salient { font-weight: 700; }
.heat td.primary { text-decoration: underline; }
.heat .mark { margin-right: 2px; }
.caution { border-left: 4px solid #c0392b; background: #fbf1f0; padding: 8px 12px; margin: 8px 0;
           -webkit-print-color-adjust: exact; print-color-adjust: exact; }
.caution li { margin: 4px 0; }
.note { white-space: pre-wrap; }
span.text { overflow-wrap: anywhere; }
table.items td:nth-child(2) { min-width: 12em; }
svg { max-width: 100%; height: auto; }
svg text { font: 12px system-ui, Arial, sans-serif; fill: var(--ink); }
footer.page-foot { margin-top: 32px; border-top: 1px solid var(--line); padding-top: 8px; color: var(--muted); }
footer.page-foot > span { display: inline-block; margin-right: 1.5em; }
@page { size: auto; margin: 12mm 12mm 24mm; }
@media print {
  body { padding: 0; max-width: none; font-size: 12px; }
  th, td { padding: 2px 4px; }
  table.items td:nth-child(2) { min-width: 9em; }
  h2, h3 { break-after: avoid; }
  tr, svg, .keep, .caution, table.kv { break-inside: avoid; }
}
"""


# ---------------------------------------------------------------------------------------------- formatting
def _css_string(value) -> str:
    """A CSS string literal of any text: every character outside [A-Za-z0-9 .,:_-] as a CSS hex escape."""
    return '"' + "".join(c if c.isascii() and (c.isalnum() or c in " .,:_-") else f"\\{ord(c):x} "
                         for c in str(value)) + '"'


def _page_footer_css(snapshot_id, sha, version) -> str:
    """The printed footer on every page: @page margin boxes (drawn in the bottom margin, so they never cover
    the text; Chromium 131 and later). The snapshot id and the data set's SHA-256 on the left, the page
    number on the right."""
    left = _css_string(f"Snapshot {snapshot_id} \u00b7 data set SHA-256 {sha} \u00b7 Scalewright {version}")
    box = "font: 12px ui-monospace, Menlo, Consolas, monospace; color: #1d232b; vertical-align: top;"
    return ("@page { @bottom-left { content: " + left + "; " + box + " width: 80%; }"
            " @bottom-right { content: \"page \" counter(page) \" of \" counter(pages); " + box + " } }")


def _esc(value) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _num(value, digits: int = 3, bounded: bool = False) -> str:
    """A number for a table cell; missing or NaN as an en dash.

    One number style with the dashboard (``fmt`` in static/js/views/dom.js): ``bounded=True`` for values
    that cannot exceed 1 in size (correlations, loadings, communalities, alpha, omega, lambda, ECV, H,
    kappas, ICCs, shares, RMSR, RMSEA, p) drops the leading zero (.849, −.35). Counts, means, SDs,
    skew, kurtosis, the SEM, sums of squared loadings, chi-square, TLI and BIC keep their leading digit.
    """
    if value is None:
        return "&ndash;"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "&ndash;"
        if math.isinf(value):
            return "&infin;" if value > 0 else "&minus;&infin;"
        text = f"{value:.{digits}f}"
        if bounded:
            text = re.sub(r"^(-?)0\.", r"\1.", text)
        return text.replace("-", "&minus;")
    if isinstance(value, (list, tuple)) and all(_is_number(v) or v is None for v in value):
        return "[" + ", ".join(_num(v, digits, bounded) for v in value) + "]"
    return _value(value, digits, bounded)


def _r(value, digits: int = 3) -> str:
    """A coefficient bounded by 1 in the dashboard's style (.849); see ``_num``."""
    return _num(value, digits, bounded=True)


def _value(value, digits: int = 3, bounded: bool = False) -> str:
    """Any JSON value as escaped, readable HTML (``bounded`` as in ``_num``)."""
    if value is None or _is_number(value) or isinstance(value, bool):
        return _num(value, digits, bounded)
    if isinstance(value, str):
        return _esc(value) if value else "&ndash;"
    if isinstance(value, Mapping):
        if not value:
            return "&ndash;"
        return "; ".join(f"{_esc(_label(k))}: {_value(v, digits, bounded)}" for k, v in value.items())
    if isinstance(value, (list, tuple)):
        if not value:
            return "&ndash;"
        if all(_is_number(v) or v is None for v in value):
            return _num(value, digits, bounded)
        return ", ".join(_value(v, digits, bounded) for v in value)
    return _esc(value)


_LABELS = {
    "alpha": "Cronbach's alpha",
    "alpha_standardized": "Standardized alpha",
    "omega_total": "McDonald's omega (total)",
    "omega_hierarchical": "Omega hierarchical",
    "lambda2": "Guttman's lambda 2",
    "lambda6": "Guttman's lambda 6",
    "split_half": "Split-half (Spearman-Brown corrected)",
    "mean_inter_item_r": "Mean inter-item correlation",
    "scale_mean": "Scale mean",
    "scale_sd": "Scale SD",
    "sem": "Standard error of measurement",
    "n_items": "Items",
    "n_complete": "Complete cases",
    "missing": "Missing-data policy",
    "n_factors": "Factors (blank: as parallel analysis suggests)",
    "pa_iterations": "Parallel-analysis iterations",
    "pa_variant": "Parallel-analysis eigenvalues (components or reduced-matrix factors)",
    "gamma": "Oblimin gamma (0 = quartimin)",
    "excluded": "Items left out (no variance)",
    "thresholds": "Flag thresholds changed from the defaults",
    "reverse": "Reverse-keyed items (scored min + max - answer)",
    "correlation": "Correlations for the factor analysis",
    "extraction": "Factor extraction",
    "rotation": "Rotation",
    "seed": "Random seed (parallel analysis, rotation starts)",
    "kmo": "Kaiser-Meyer-Olkin (KMO)",
    "inter_item_r_range": "Range of inter-item correlations",
    "items_for_80": "Items needed for alpha .80 (Spearman-Brown)",
    "items_for_90": "Items needed for alpha .90 (Spearman-Brown)",
    "min_pairwise_n": "Smallest pairwise n",
    "min_pair_n": "Smallest pairwise n",
    "n_complete_rows": "Complete cases",
    "rmsr": "RMSR",
    "rmsea": "RMSEA",
    "tli": "TLI",
    "bic": "BIC",
}


#: Keys whose values are not bounded by 1 in size: printed with their leading digit (see ``_num``).
_UNBOUNDED = {"scale_mean", "scale_sd", "sem", "n_items", "n_complete", "n_complete_rows", "items_for_80",
              "items_for_90", "min_pairwise_n", "min_pair_n", "chi2", "df", "chi2_correction", "tli", "bic",
              "n", "k", "mean", "sd", "skew", "kurtosis", "ss_loadings", "missing"}


def _bounded(key) -> bool:
    return str(key) not in _UNBOUNDED


def _label(key) -> str:
    key = str(key)
    return _LABELS.get(key, key.replace("_", " ").capitalize())


def _kv_table(pairs: Sequence[tuple[str, str]]) -> str:
    rows = "".join(f"<tr><th scope=\"row\">{k}</th><td>{v}</td></tr>" for k, v in pairs)
    return f"<table class=\"kv\">{rows}</table>"


def _table(header: Sequence[str], rows: Sequence[Sequence[str]], num_cols: set[int] = frozenset(),
           cls: str = "") -> str:
    head = "".join(f"<th class=\"num\">{h}</th>" if i in num_cols else f"<th>{h}</th>"
                   for i, h in enumerate(header))
    body = "".join(
        "<tr>" + "".join(f"<td class=\"num\">{c}</td>" if i in num_cols else f"<td>{c}</td>"
                         for i, c in enumerate(row)) + "</tr>"
        for row in rows)
    cls_attr = f" class=\"{cls}\"" if cls else ""
    return f"<table{cls_attr}><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


# ----------------------------------------------------------------------------------------------- sections
_RELIABILITY_ORDER = ("alpha", "alpha_standardized", "omega_total", "omega_hierarchical", "lambda2",
                      "lambda6", "split_half", "mean_inter_item_r", "scale_mean", "scale_sd", "sem",
                      "n_items", "n_complete", "missing")


#: Keys of a reliability block that are bookkeeping, not results to print.
_RELIABILITY_SKIP = {"k", "n", "ci_level", "loadings", "warnings", "items", "min_pair_n"}

#: Keys shown in the omega family (issue 11) rather than in the list of coefficients.
_OMEGA_KEYS = {"omega_total", "omega_unidimensional", "omega_hierarchical", "omega_subscale", "omega_groups", "ecv",
               "h", "omega_basis", "omega_note", "omega_source", "alpha_ordinal", "omega_ordinal", "ordinal_note",
               "item_table", "pruning_path", "one_factor_fit", "basis"}


def _reliability_pairs(block: Mapping) -> list[tuple[str, str]]:
    """The coefficients of a reliability block. Without ``omega_basis`` (snapshots saved before issue 11) the
    stored omega is the one-factor omega of all kept items and is labelled as unidimensional."""
    pairs = []
    shown = set(_RELIABILITY_SKIP)
    if "omega_basis" in block:
        shown |= _OMEGA_KEYS
    if "min_pairwise_n" not in block and "min_pair_n" in block:
        shown.discard("min_pair_n")
    keys = [k for k in _RELIABILITY_ORDER if k in block] + [k for k in block if k not in _RELIABILITY_ORDER]
    for key in keys:
        if key in shown or key.endswith("_ci") and key[:-3] in block:
            continue
        shown.add(key)
        text = _value(block[key], bounded=_bounded(key))
        ci = block.get(f"{key}_ci")
        if ci is not None:
            lo, hi = (ci.get("lower"), ci.get("upper")) if isinstance(ci, Mapping) else (tuple(ci) + (None, None))[:2]
            level = block.get("ci_level", 0.95) if key == "alpha" else 0.95
            level = f"{level * 100:.0f}%" if _is_number(level) else "95%"
            text += f" <span class=\"muted\">({level} CI {_num(lo, bounded=True)} to {_num(hi, bounded=True)})</span>"
        label = "Omega (unidimensional)" if key == "omega_total" and "omega_basis" not in block else _label(key)
        pairs.append((_esc(label), text))
    return pairs


_OMEGA_BASIS = {"schmid_leiman": "Schmid-Leiman transformation of the oblique solution with the retained factors",
                "one_factor": "one factor retained: omega total is the unidimensional omega",
                "one_factor_only": "no factor model fitted: omega total is the unidimensional omega",
                "unavailable": "no factor model could be fitted"}


def _omega_section(rel: Mapping) -> str:
    """The omega family of the kept items (Schmid & Leiman 1957; McDonald 1999; Zinbarg et al. 2005)."""
    if not rel:
        return ""
    if "omega_basis" not in rel:
        return ("<p class=\"muted\">Saved before omega hierarchical was computed: the omega above is the omega of "
                "one factor fitted to every kept item (unidimensional). On items written for several subscales it "
                "can read low even when each subscale is reliable.</p>")
    basis = rel.get("omega_basis")
    pairs = [("Omega total", f"{_r(rel.get('omega_total'))} <span class=\"muted\">("
              f"{_esc(_OMEGA_BASIS.get(basis, basis))})</span>"),
             ("Omega hierarchical", _r(rel.get("omega_hierarchical"))),
             ("Explained common variance (ECV)", _r(rel.get("ecv"))),
             ("Construct replicability H (general factor; Hancock &amp; Mueller 2001)", _r(rel.get("h"))),
             ("Omega (unidimensional: one factor for every item)", _r(rel.get("omega_unidimensional")))]
    sub = rel.get("omega_subscale")
    if isinstance(sub, Mapping):
        pairs += [(f"Omega subscale, {_esc(k)}", _r(v)) for k, v in sub.items()]
    if rel.get("alpha_ordinal") is not None or rel.get("omega_ordinal") is not None:
        pairs += [("Ordinal alpha", _r(rel.get("alpha_ordinal"))), ("Ordinal omega", _r(rel.get("omega_ordinal")))]
    out = ["<h3>Omega and the total score</h3>", _kv_table(pairs)]
    if rel.get("omega_note"):
        out.append(f"<p class=\"omega-note\">{_esc(rel['omega_note'])}</p>")
    if rel.get("ordinal_note"):
        out.append(f"<p class=\"muted\">{_esc(rel['ordinal_note'])}</p>")
    if rel.get("omega_source"):
        out.append(f"<p class=\"muted\">{_esc(rel['omega_source'])}</p>")
    out.append("<p class=\"muted\">Schmid &amp; Leiman (1957); McDonald (1999); "
               "Zinbarg, Revelle, Yovel &amp; Li (2005).</p>")
    return "".join(out)


def _residual_sentence(fit) -> str:
    """'Items X and Y share more than the single factor explains (residual r = .21).'"""
    lr = fit.get("largest_residual") if isinstance(fit, Mapping) else None
    if not isinstance(lr, Mapping) or not _is_number(lr.get("r")) or len(lr.get("items") or []) < 2:
        return ""
    x, y = (str(i) for i in lr["items"][:2])
    verb = "share more than the single factor explains" if lr["r"] >= 0 else "share less than the single factor implies"
    return f"Items {_esc(x)} and {_esc(y)} {verb} (residual r = {_r(lr['r'], 2)})."


def _subscales_section(constructs, meta: Mapping[str, Mapping]) -> str:
    """One section per codebook subscale: its coefficients, one-factor fit and its own item table (issue 11)."""
    if not isinstance(constructs, Mapping):
        return ""
    parts = []
    for name, block in constructs.items():
        if not isinstance(block, Mapping) or not isinstance(block.get("item_table"), list):
            continue
        ci = block.get("alpha_ci")
        lo, hi = (ci.get("lower"), ci.get("upper")) if isinstance(ci, Mapping) else (
            (tuple(ci) + (None, None))[:2] if isinstance(ci, (list, tuple)) else (None, None))
        level = block.get("ci_level", 0.95)
        level = f"{level * 100:.0f}%" if _is_number(level) else "95%"
        alpha = _r(block.get("alpha"))
        if ci is not None:
            alpha += f" <span class=\"muted\">({level} interval {_r(lo)} to {_r(hi)})</span>"
        fit = block.get("one_factor_fit")
        pairs = [("Items", _num(block.get("n_items", len(block.get("items") or []) or None))),
                 ("Cronbach's alpha", alpha),
                 ("Omega (one factor)", _r(block.get("omega_unidimensional", block.get("omega_total"))))]
        if block.get("alpha_ordinal") is not None:
            pairs += [("Ordinal alpha", _r(block.get("alpha_ordinal"))),
                      ("Ordinal omega", _r(block.get("omega_ordinal")))]
        if isinstance(fit, Mapping) and fit.get("rmsr") is not None:
            pairs.append(("One-factor RMSR", _r(fit.get("rmsr"))))
        rows = []
        for r in block["item_table"]:
            if not isinstance(r, Mapping):
                continue
            others = {k: v for k, v in (r.get("r_other") or {}).items() if _is_number(v)}
            best = max(others.items(), key=lambda kv: kv[1]) if others else None
            m = meta.get(str(r.get("name"))) or {}
            wording = f"<span class=\"text\">{_esc(m.get('text') or '')}</span>"
            if m.get("reverse"):
                wording += " <span class=\"muted\">(reverse-keyed)</span>"
            rows.append([_esc(r.get("name")), wording,
                         _r(r.get("item_rest_r"), 2), _r(r.get("alpha_if_deleted")),
                         _r(r.get("omega_if_deleted")),
                         f"{_r(best[1], 2)} ({_esc(best[0])})" if best else "&ndash;"])
        sentence = _residual_sentence(fit)
        parts.append("<section class=\"subscale\">"
                     f"<h3>Subscale: {_esc(name)}</h3><div class=\"keep\">{_kv_table(pairs)}"
                     + (f"<p>{sentence}</p>" if sentence else "") + "</div>"
                     + (_table(["Item", "Wording", "Item-rest r (within)", "Alpha if deleted", "Omega if deleted",
                                "Highest r with another subscale"], rows, num_cols={2, 3, 4, 5}, cls="wrap")
                        if rows else "")
                     + "</section>")
    if not parts:
        return ""
    return ("<section><h2>Subscales</h2><p class=\"muted\">Each subscale's own item analysis: item-rest r against "
            "the rest of that subscale, alpha and omega of the subscale without the item, and each item's highest "
            "correlation with the rest of another subscale (higher than its own item-rest r: it may belong "
            "there).</p>" + "".join(parts) + "</section>")


def _trail(snapshot: Mapping) -> list[dict]:
    """The steps of the removal trail: the start (all items) and the state after each removal."""
    trail = snapshot.get("trail")
    if isinstance(trail, list) and trail:
        return [dict(t) for t in trail]
    steps = []
    for i, r in enumerate(snapshot.get("removed") or [], start=1):
        steps.append({"step": i, "removed": r.get("item"), "alpha": r.get("alpha_after"),
                      "omega_total": r.get("omega_after"), "n_items": r.get("n_items_after")})
    return steps


def _trail_svg(steps: Sequence[Mapping]) -> str:
    """Alpha and omega over the removal steps as an inline SVG line chart."""
    series = [("alpha", "alpha", "var(--accent)", ""), ("omega_total", "omega", "var(--omega)", "5 3")]
    values = [s.get(key) for s in steps for key, *_ in series]
    values = [v for v in values if _is_number(v) and math.isfinite(v)]
    if len(steps) < 2 or not values:
        return ""
    width, height = 680, 280
    left, right, top, bottom = 52, 110, 16, 74
    lo, hi = min(values), max(values)
    lo = math.floor((lo - 0.01) * 20) / 20
    hi = math.ceil((hi + 0.01) * 20) / 20
    if hi - lo < 0.1:
        hi = lo + 0.1
    n = len(steps)

    def x(i: int) -> float:
        return left + (width - left - right) * (i / (n - 1))

    def y(v: float) -> float:
        return top + (height - top - bottom) * (1 - (v - lo) / (hi - lo))

    parts = [(f"<svg role=\"img\" aria-label=\"Alpha and omega after each removal\" width=\"{width}\" "
             f"height=\"{height}\" viewBox=\"0 0 {width} {height}\">")]
    # grid and y axis
    tick = 0.05 if hi - lo <= 0.4 else 0.1
    t = math.ceil(lo / tick - 1e-9) * tick
    while t <= hi + 1e-9:
        yy = y(t)
        parts.append(f"<line x1=\"{left}\" x2=\"{width - right}\" y1=\"{yy:.1f}\" y2=\"{yy:.1f}\" "
                     f"stroke=\"#e3e6ea\"/>")
        parts.append(f"<text x=\"{left - 6}\" y=\"{yy + 4:.1f}\" text-anchor=\"end\">{_r(t, 2)}</text>")
        t += tick
    parts.append(f"<line x1=\"{left}\" x2=\"{left}\" y1=\"{top}\" y2=\"{height - bottom}\" stroke=\"#555\"/>")
    parts.append(f"<line x1=\"{left}\" x2=\"{width - right}\" y1=\"{height - bottom}\" "
                 f"y2=\"{height - bottom}\" stroke=\"#555\"/>")
    # x labels: start, then the item removed at each step
    for i, s in enumerate(steps):
        label = "all items" if i == 0 and not s.get("removed") else f"\u2212 {s.get('removed')}"
        if len(label) > 18:
            label = label[:17] + "\u2026"
        xx = x(i)
        parts.append(f"<line x1=\"{xx:.1f}\" x2=\"{xx:.1f}\" y1=\"{height - bottom}\" "
                     f"y2=\"{height - bottom + 4}\" stroke=\"#555\"/>")
        parts.append(f"<text x=\"{xx:.1f}\" y=\"{height - bottom + 14}\" text-anchor=\"end\" "
                     f"transform=\"rotate(-35 {xx:.1f} {height - bottom + 14})\">{_esc(label)}</text>")
    # lines
    for li, (key, name, colour, dash) in enumerate(series):
        pts = [(x(i), y(s[key])) for i, s in enumerate(steps)
               if _is_number(s.get(key)) and math.isfinite(s[key])]
        if not pts:
            continue
        dash_attr = f" stroke-dasharray=\"{dash}\"" if dash else ""
        parts.append(f"<polyline fill=\"none\" stroke=\"{colour}\" stroke-width=\"2\"{dash_attr} points=\""
                     + " ".join(f"{px:.1f},{py:.1f}" for px, py in pts) + "\"/>")
        for px, py in pts:
            parts.append(f"<circle cx=\"{px:.1f}\" cy=\"{py:.1f}\" r=\"3\" fill=\"{colour}\"/>")
        ly = top + 10 + 18 * li
        lx = width - right + 14
        parts.append(f"<line x1=\"{lx}\" x2=\"{lx + 22}\" y1=\"{ly}\" y2=\"{ly}\" stroke=\"{colour}\" "
                     f"stroke-width=\"2\"{dash_attr}/>")
        parts.append(f"<text x=\"{lx + 28}\" y=\"{ly + 4}\">{name}</text>")
    parts.append("</svg>")
    return "".join(parts)


#: The dashboard's loading scale (``DIVERGING`` in static/js/charts.js): blue negative, white at zero, brown positive.
HEAT_SCALE = ((-1.0, (0x1b, 0x4f, 0x72)), (-0.5, (0x6c, 0x9e, 0xc2)), (0.0, (0xf7, 0xf5, 0xf0)),
              (0.5, (0xe7, 0xa3, 0x5f)), (1.0, (0x8f, 0x3f, 0x0c)))

#: A loading at least this large in size is printed bold (.30, common practice; the heatmap's default cut-off).
SALIENT_LOADING = 0.30


def _luminance(rgb: Sequence[int]) -> float:
    def lin(c: float) -> float:
        c = c / 255
        return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4
    r, g, b = (lin(c) for c in rgb)
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def heat_colour(value: float) -> tuple[tuple[int, int, int], str]:
    """The cell colour of a loading on the dashboard's scale and the text colour (black or white) with
    the higher contrast on it (WCAG 2.1 relative luminance)."""
    v = max(-1.0, min(1.0, float(value)))
    for (x0, c0), (x1, c1) in zip(HEAT_SCALE, HEAT_SCALE[1:]):
        if v <= x1:
            t = (v - x0) / (x1 - x0)
            rgb = tuple(round(a + (b - a) * t) for a, b in zip(c0, c1))
            break
    lum = _luminance(rgb)
    ink = "#000" if (lum + 0.05) / 0.05 >= 1.05 / (lum + 0.05) else "#fff"
    return rgb, ink  # type: ignore[return-value]


def _heat_style(value) -> str:
    if not _is_number(value) or not math.isfinite(value):
        return ""
    (r, g, b), ink = heat_colour(value)
    return f" style=\"background: rgb({r},{g},{b}); color: {ink};\""


def _per_item(value, items: Sequence[str]) -> dict:
    if isinstance(value, Mapping):
        return dict(value)
    if isinstance(value, (list, tuple)) and len(value) == len(items):
        return dict(zip(items, value))
    return {}


def _factor_labels(efa: Mapping, n: int) -> list[str]:
    labels = efa.get("factors") or []
    out = []
    for i in range(n):
        lab = labels[i] if i < len(labels) else None
        if isinstance(lab, Mapping):
            lab = lab.get("label") or lab.get("name") or lab.get("construct")
        out.append(str(lab) if lab not in (None, "") else f"F{i + 1}")
    return out


#: The variance table's columns, in our own words (keys as ``stats.efa`` stores them).
_VARIANCE_WORDS = (("ss_loadings", "Sum of squared loadings"), ("proportion", "Share of the items' variance"),
                   ("cumulative", "Cumulative share"))


def _loadings_section(efa: Mapping, items: Sequence[str]) -> str:
    loadings = efa.get("loadings")
    if isinstance(loadings, Mapping):
        rows = {str(k): list(v) for k, v in loadings.items()}
        order = [i for i in items if i in rows] + [k for k in rows if k not in items]
    elif isinstance(loadings, list):
        order = list(efa.get("items") or items)
        rows = dict(zip(order, loadings))
    else:
        return "<p class=\"muted\">No factor solution was stored with this snapshot.</p>"
    n_factors = max((len(v) for v in rows.values()), default=0)
    labels = _factor_labels(efa, n_factors)
    communalities = _per_item(efa.get("communalities"), order)
    flags: dict[str, list[Mapping]] = {}
    for f in efa.get("flags") or []:
        if isinstance(f, Mapping):
            flags.setdefault(str(f.get("item")), []).append(f)
    head = ["Item"] + [_esc(lab) for lab in labels] + ["h\u00b2", "Flags"]
    body = []
    for item in order:
        vals = rows[item]
        finite = [abs(v) for v in vals if _is_number(v) and math.isfinite(v)]
        primary = max(finite) if finite else None
        cells = [f"<td>{_esc(item)}</td>"]
        for v in vals:
            cls = "num"
            mark = ""
            if _is_number(v) and math.isfinite(v) and abs(v) >= SALIENT_LOADING:
                cls += " salient"
            if primary is not None and _is_number(v) and abs(v) == primary:
                cls += " primary"
                mark = "<span class=\"mark\" title=\"largest loading of the item\">\u25b8</span>"
            cells.append(f"<td class=\"{cls}\"{_heat_style(v)}>{mark}{_r(v, 2)}</td>")
        cells += ["<td class=\"num\"></td>"] * (n_factors - len(vals))
        cells.append(f"<td class=\"num\">{_r(communalities.get(item), 2)}</td>")
        tags = "".join(f"<span class=\"flag\" title=\"{_esc(f.get('message'))}\">{_esc(f.get('kind'))}</span>"
                       for f in flags.get(item, []))
        cells.append(f"<td>{tags}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    num_idx = set(range(1, n_factors + 2))
    head_html = "".join(f"<th class=\"num\">{h}</th>" if i in num_idx else f"<th>{h}</th>"
                        for i, h in enumerate(head))
    out = [f"<table class=\"heat\"><thead><tr>{head_html}</tr></thead><tbody>{''.join(body)}</tbody></table>",
           ("<p class=\"muted\">Pattern loadings, coloured as in the dashboard's heatmap: brown for positive, "
            "blue for negative, deeper with the size of the loading. Each number is printed in its cell; loadings "
            "of .30 or more in size are bold (common practice) and the largest loading of each item is marked "
            "\u25b8. h\u00b2 is the communality.</p>")]
    all_flags = [f for item in order for f in flags.get(item, [])]
    all_flags += [f for k, fl in flags.items() if k not in rows for f in fl]
    if all_flags:
        out.append("<h3>Flags</h3>")
        out.append(_table(["Item", "Kind", "Message"],
                          [[_esc(f.get("item")), _esc(f.get("kind")), _esc(f.get("message"))] for f in all_flags]))
        out.append("<p class=\"muted\">Flags follow rules of thumb (e.g. the .40/.30/.20 cross-loading heuristic, "
                   "Howard 2016) with the thresholds shown in the settings; they are prompts for discussion.</p>")
    phi = efa.get("factor_correlations")
    out.append("<h3>Factor correlations</h3>")
    if isinstance(phi, list) and phi and all(isinstance(r, list) for r in phi):
        out.append(_table([""] + [_esc(lab) for lab in labels[:len(phi)]],
                          [[_esc(labels[i] if i < len(labels) else f"F{i + 1}")] + [_r(v, 2) for v in row]
                           for i, row in enumerate(phi)],
                          num_cols=set(range(1, len(phi) + 1))))
    else:
        out.append("<p class=\"muted\">None: the rotation is orthogonal or there is a single factor.</p>")
    variance = efa.get("variance")
    fit = efa.get("fit")
    pairs = []
    if isinstance(variance, Mapping):
        cols = [(key, word) for key, word in _VARIANCE_WORDS
                if isinstance(variance.get(key), list) and len(variance[key]) == n_factors]
        rows = [[_esc(lab)] + [_num(variance[key][i], 3, bounded=_bounded(key)) for key, _ in cols]
                for i, lab in enumerate(labels)]
        if cols:
            out.append("<h3>What each factor explains</h3>")
            out.append(_table(["Factor"] + [word for _, word in cols], rows, num_cols=set(range(1, len(cols) + 1))))
        if variance.get("basis"):
            out.append(f"<p class=\"muted\">{_esc(variance['basis'])}</p>")
    elif variance is not None:
        pairs.append(("Variance explained", _value(variance)))
    if isinstance(fit, Mapping):
        pairs += [(_esc(_label(k)), _value(v, bounded=_bounded(k))) for k, v in fit.items()]
    if "converged" in efa:
        pairs.append(("Converged", _value(efa.get("converged"))))
    if pairs:
        out.append("<h3>Fit</h3>")
        out.append(_kv_table(pairs))
    return "".join(out)


_ITEM_COLUMNS = (("n", "n", 0), ("mean", "Mean", 2), ("sd", "SD", 2), ("skew", "Skew", 2),
                 ("kurtosis", "Kurtosis", 2), ("floor", "Floor", 2), ("ceiling", "Ceiling", 2),
                 ("item_rest_r", "Item-rest r", 2), ("alpha_if_deleted", "Alpha if deleted", 3),
                 ("omega_if_deleted", "Omega if deleted", 3))
_ITEM_FIXED = ("Item", "Wording")


def _items_section(rows: Sequence[Mapping], meta: Mapping[str, Mapping]) -> str:
    if not rows:
        return "<p class=\"muted\">No item statistics were stored with this snapshot.</p>"
    cols = [c for c in _ITEM_COLUMNS if any(c[0] in r for r in rows)]
    header = list(_ITEM_FIXED) + [label for _, label, _ in cols]
    body = []
    for r in rows:
        name = r.get("name", r.get("item"))
        m = meta.get(str(name)) or r
        about = [f"subscale {_esc(m['construct'])}"] if m.get("construct") else []
        about += ["reverse-keyed"] if m.get("reverse") else []
        wording = f"<span class=\"text\">{_esc(m.get('text') or '')}</span>"
        if about:
            wording += f" <span class=\"muted about\">({', '.join(about)})</span>"
        body.append([_esc(name), wording]
                    + [_num(r.get(key), digits if digits else 3, bounded=_bounded(key)) for key, _, digits in cols])
    return _table(header, body, num_cols=set(range(len(_ITEM_FIXED), len(_ITEM_FIXED) + len(cols))), cls="wrap items")


def _removed_section(snapshot: Mapping) -> str:
    removed = snapshot.get("removed") or []
    steps = _trail(snapshot)
    parts = []
    if not removed:
        return "<p>No items were removed: the snapshot keeps the whole pool that was analysed.</p>"
    start = steps[0] if steps and not steps[0].get("removed") else None
    if start:
        parts.append(f"<p>Starting from {_num(start.get('n_items'))} items (the kept items plus every removed "
                     f"one): alpha {_r(start.get('alpha'))}, omega {_r(start.get('omega_total'))}.</p>")
    svg = _trail_svg(steps)
    if svg:
        parts.append(svg)
    rows = []
    for i, r in enumerate(removed, start=1):
        rows.append([str(i), _esc(r.get("item")), _esc(r.get("code") or ""),
                     f"<span class=\"note\">{_esc(r.get('reason'))}</span>",
                     _num(r.get("n_items_after")), _r(r.get("alpha_after")), _r(r.get("omega_after"))])
    parts.append(_table(["Step", "Removed item", "Code", "Reason", "Items left", "Alpha after", "Omega after"],
                        rows, num_cols={0, 4, 5, 6}))
    return "".join(parts)


def _constructs_section(constructs) -> str:
    if isinstance(constructs, Mapping):
        entries = list(constructs.items())
    elif isinstance(constructs, list):
        entries = [(c.get("construct", c.get("name")), c) for c in constructs if isinstance(c, Mapping)]
    else:
        return ""
    if not entries:
        return ""
    any_fit = any(isinstance(b, Mapping) and isinstance(b.get("one_factor_fit"), Mapping) for _, b in entries)
    rows = []
    for name, block in entries:
        if not isinstance(block, Mapping):
            continue
        rel = block.get("reliability", block)
        ci = rel.get("alpha_ci")
        fit = rel.get("one_factor_fit") if isinstance(rel.get("one_factor_fit"), Mapping) else {}
        rows.append([_esc(name), _num(rel.get("n_items", len(block.get("items") or []) or None)),
                     _r(rel.get("alpha")), _r(ci, 3) if ci is not None else "&ndash;",
                     _r(rel.get("omega_unidimensional", rel.get("omega_total")))]
                    + ([_r(fit.get("rmsr"))] if any_fit else []))
    if not rows:
        return ""
    header = ["Construct", "Items", "Alpha", "95% CI", "Omega (one factor)"] + (["One-factor RMSR"] if any_fit else [])
    return "<h3>By construct</h3>" + _table(header, rows, num_cols=set(range(1, len(header))))


_SETTING_WORDS = {"construct": "by codebook subscale",
                  "minres": "minimum residual (minres)", "ml": "maximum likelihood", "paf": "principal axis",
                  "pearson": "Pearson", "polychoric": "polychoric", "pairwise": "pairwise deletion",
                  "listwise": "listwise deletion", "components": "components (Horn 1965)",
                  "factors": "reduced-matrix factors"}


def _settings_pairs(settings: Mapping, efa: Mapping | None = None, retention: Mapping | None = None
                    ) -> list[tuple[str, str]]:
    """The analysis settings as a labelled list in plain words."""
    efa = efa or {}
    out: list[tuple[str, str]] = []
    done = {"items"}

    def word(v) -> str:
        return _esc(_SETTING_WORDS.get(v, v)) if isinstance(v, str) else _value(v)

    if "correlation" in settings:
        out.append(("Correlations", word(settings["correlation"])))
    if "missing" in settings:
        out.append(("Missing answers", word(settings["missing"])))
    if "n_factors" in settings or efa.get("n_factors") is not None:
        chosen, fitted = settings.get("n_factors"), efa.get("n_factors")
        suggested = (retention or {}).get("suggested")
        notes = ["set by the team"] if chosen is not None else ["as parallel analysis suggests"]
        if suggested is not None:
            notes = (notes if chosen is not None else []) + [f"parallel analysis suggested {_num(suggested)}"]
        text = f"{_num(fitted if fitted is not None else chosen)} ({'; '.join(notes)})"
        out.append(("Factors extracted", text))
    if "extraction" in settings:
        out.append(("Extraction", word(settings["extraction"])))
    if "rotation" in settings:
        rot = settings["rotation"]
        text = "none (unrotated)" if rot == "none" else word(rot)
        if rot == "oblimin" and _is_number(settings.get("gamma")):
            text += f" (gamma {settings['gamma']:g})"
        out.append(("Rotation", text))
    if "pa_iterations" in settings or "pa_variant" in settings:
        pa = []
        if settings.get("pa_iterations") is not None:
            pa.append(f"{_num(settings['pa_iterations'])} random data sets")
        if settings.get("pa_variant"):
            pa.append(f"eigenvalues of {word(settings['pa_variant'])}")
        out.append(("Parallel analysis", ", ".join(pa) or "&ndash;"))
    if "reverse" in settings:
        rev = settings["reverse"]
        out.append(("Reverse-keyed items (scored min + max \u2212 answer)",
                    _esc(", ".join(map(str, rev))) if rev else "none"))
    if "excluded" in settings:
        exc = settings["excluded"]
        out.append(("Items left out (no variance)", _esc(", ".join(map(str, exc))) if exc else "none"))
    if "thresholds" in settings:
        th = settings["thresholds"]
        out.append(("Flag thresholds", _value(th, bounded=True) if th else "the defaults"))
    done |= {"correlation", "missing", "n_factors", "extraction", "rotation", "gamma", "pa_iterations", "pa_variant",
             "reverse", "excluded", "thresholds"}
    for k, v in settings.items():
        if k in done:
            continue
        out.append((_esc(_label(k)), word(v) if v not in (None, [], {}) else "&ndash;"))
    return out


def _when(stamp) -> str:
    """An ISO time stamp written once, in UTC, with its zone once: '2026-12-02 02:50:07 UTC'."""
    try:
        t = datetime.fromisoformat(str(stamp))
    except ValueError:
        return _esc(stamp)
    if t.tzinfo is None:
        t = t.replace(tzinfo=UTC)
    return t.astimezone(UTC).strftime("%Y-%m-%d %H:%M:%S UTC")


def _coef(v) -> str:
    """A coefficient block {value, ci, reason} as 'value (lo to hi)' or the reason it is undefined."""
    if not isinstance(v, Mapping):
        return _r(v)
    if v.get("value") is None:
        return _esc(v.get("reason") or "undefined")
    ci = v.get("ci")
    ci_txt = f" (95% CI {_r(ci[0])} to {_r(ci[1])})" if isinstance(ci, (list, tuple)) and len(ci) == 2 else ""
    label = f" &middot; {_esc(v['label'])}" if v.get("label") else ""
    return f"{_r(v['value'])}{ci_txt}{label}"


def _icc_rows(icc: Mapping, recommended) -> list[list[str]]:
    rows = []
    for form, v in icc.items():
        if not (isinstance(v, Mapping) and "value" in v):
            continue
        name = f"{_esc(form)} (recommended)" if form == recommended else _esc(form)
        rows.append([name, _coef(v), _num(v.get("f"), 2),
                     f"{_num(v.get('df1'), 0)}, {_num(v.get('df2'), 0)}" if v.get("df1") is not None else "&ndash;"])
    return rows


def _stability_section(stability) -> str:
    """Test-retest / parallel forms and rater agreement stored with the snapshot (issue 6)."""
    if not isinstance(stability, Mapping) or not stability:
        return ""
    parts = ["<section><h2>Stability and agreement</h2>"]
    rt = stability.get("retest")
    if isinstance(rt, Mapping):
        first, second = rt.get("first") or {}, rt.get("second") or {}
        kind = "Parallel forms" if rt.get("parallel_forms") else "Test-retest"
        loa = rt.get("limits_of_agreement") or {}
        parts.append(f"<h3>{kind}: {_esc(first.get('name'))} and {_esc(second.get('name'))}</h3>")
        parts.append(_kv_table([
            ("Matched respondents", _num(rt.get("n_matched"), 0)),
            ("With complete scores", _num(rt.get("n"), 0)),
            ("Score", _esc(rt.get("score") or "sum")),
            ("Pearson r", _coef(rt.get("pearson_r"))),
            ("Spearman rho", _coef(rt.get("spearman_rho"))),
            ("Recommended ICC", f"{_esc(rt.get('recommended'))}: {_esc(rt.get('interpretation'))}"),
            ("SEM", _num((rt.get("sem") or {}).get("value") if isinstance(rt.get("sem"), Mapping) else rt.get("sem"))),
            ("Smallest detectable change (MDC95)",
             _num((rt.get("mdc95") or {}).get("value") if isinstance(rt.get("mdc95"), Mapping) else rt.get("mdc95"))),
            ("Mean difference (second - first)", _num(rt.get("mean_difference"))),
            ("Limits of agreement (Bland & Altman 1986)",
             f"{_num(loa.get('lower'))} to {_num(loa.get('upper'))}" if isinstance(loa, Mapping) else "&ndash;"),
        ]))
        icc = rt.get("icc") or {}
        if isinstance(icc, Mapping):
            parts.append(_table(["ICC form (McGraw &amp; Wong 1996)", "Value", "F", "df"],
                                _icc_rows(icc, rt.get("recommended")), num_cols={2}))
    ag = stability.get("agreement")
    if isinstance(ag, Mapping):
        parts.append(f"<h3>Rater agreement ({_num(ag.get('n_units'), 0)} units, {_num(ag.get('n_raters'), 0)} "
                     f"raters, {_esc(ag.get('level'))} level)</h3>")
        rows = [["Percent agreement", _coef(ag.get("percent_agreement"))]]
        if ag.get("cohen_kappa"):
            rows.append(["Cohen's kappa", _coef(ag.get("cohen_kappa"))])
        wk = ag.get("weighted_kappa") or {}
        if isinstance(wk, Mapping):
            rows += [[f"Weighted kappa ({k})", _coef(v)] for k, v in wk.items() if v]
        if ag.get("fleiss_kappa"):
            rows.append(["Fleiss' kappa", _coef(ag.get("fleiss_kappa"))])
        rows.append(["Krippendorff's alpha", _coef(ag.get("krippendorff_alpha"))])
        parts.append(_table(["Coefficient", "Value"], rows))
        parts.append("<p class=\"muted\">Verbal labels follow Landis &amp; Koch (1977) for kappas: a convention, "
                     "not a test.</p>")
    parts.append("</section>")
    return "".join(parts)


#: Short words for the flag kinds in the resampling section (the dashboard's labels.js uses the same words).
_FLAG_WORDS = {"cross_loading": "cross-loads", "weak_loading": "weak", "misplaced": "elsewhere", "heywood": "Heywood",
               "reverse_suspect": "reverse?", "near_duplicate": "duplicate?", "floor_ceiling": "floor/ceiling"}
#: Items are listed in the resampling section when one of their flags comes back at least this often.
_RESAMPLING_LIST_RATE = 0.10  # our own cut for a short report; common practice has none


def _share(value) -> str:
    """A share of resamples as a whole percent ('41 %')."""
    return f"{round(value * 100)}&nbsp;%" if _is_number(value) else "&ndash;"


def _interval(c) -> str:
    """A resampled coefficient {estimate, percentile, bca} as 'estimate (low to high)' plus BCa when given."""
    if not isinstance(c, Mapping):
        return "&ndash;"
    p = c.get("percentile") or {}
    text = f"{_r(c.get('estimate'))} (percentile {_r(p.get('low'))} to {_r(p.get('high'))}"
    b = c.get("bca") or {}
    if isinstance(b, Mapping) and b.get("low") is not None:
        text += f"; BCa {_r(b.get('low'))} to {_r(b.get('high'))}"
    return text + ")"


def _resampling_section(res) -> str:
    """The resampling run kept with the snapshot (issue 13): flag rates, coefficient intervals, factor counts."""
    if not isinstance(res, Mapping) or not res:
        return ""
    s = res.get("settings") or {}
    parts = ["<section><h2>Resampling stability</h2>",
             f"<p>The respondents were drawn again with replacement {_num(res.get('n_resamples'), 0)} times "
             f"(seed {_num(res.get('seed'), 0)}) and the whole analysis was repeated on each draw with the same "
             "settings; factors were matched to those of all respondents before counting. A flag that comes back in "
             "most draws is a firm reason to act; one that comes and goes sits near its threshold.</p>"]
    if not res.get("same_items", True):
        parts.append(f"<p class=\"muted\">The run was made for an earlier item set ({len(res.get('run_items') or [])} "
                     "items), not exactly the kept items of this snapshot.</p>")
    parts.append(_kv_table([
        ("Resamples", _num(res.get("n_resamples"), 0)),
        ("Seed", _num(res.get("seed"), 0)),
        ("Resamples that could not be analysed", _num(res.get("n_failed"), 0)),
        ("Settings", _esc(", ".join(f"{k}: {v}" for k, v in s.items() if v is not None and k != "seed"))),
        ("Finished", _when(res.get("finished_at"))),
    ]))
    rows = []
    for row in res.get("items") or []:
        flags = row.get("flags") or {}
        if not flags or max(flags.values()) < _RESAMPLING_LIST_RATE:
            continue
        words = "; ".join(f"{_esc(_FLAG_WORDS.get(k, k))} in {_share(v)}"
                          for k, v in sorted(flags.items(), key=lambda kv: -kv[1]))
        full = ", ".join(_esc(_FLAG_WORDS.get(k, k)) for k in row.get("flags_full_sample") or []) or "none"
        rows.append([_esc(row.get("name")), full, words, _share(row.get("early_removal"))])
    parts.append(f"<h3>Flags that come back in at least {_share(_RESAMPLING_LIST_RATE)} of resamples</h3>")
    parts.append(_table(["Item", "Flags on all respondents", "Share of resamples with each flag",
                         "Among the first quarter removed"], rows, num_cols={3}) if rows
                 else "<p class=\"muted\">No flag came back that often.</p>")
    level = res.get("level")
    coef = res.get("coefficients") or {}
    crow = [[name, _interval(coef.get(key))] for key, name in
            (("alpha", "Alpha"), ("omega_total", "Omega total"), ("omega_hierarchical", "Omega hierarchical"))]
    for sub in res.get("subscales") or []:
        crow += [[f"{_esc(sub.get('name'))}: alpha", _interval(sub.get("alpha"))],
                 [f"{_esc(sub.get('name'))}: omega", _interval(sub.get("omega"))]]
    parts.append(f"<h3>Intervals of the coefficients ({_share(level) if _is_number(level) else '95&nbsp;%'})</h3>")
    parts.append(_table(["Coefficient", "All respondents (interval over the resamples)"], crow))
    if res.get("bca_note"):
        parts.append(f"<p class=\"muted\">{_esc(res.get('bca_note'))}</p>")
    ret = res.get("retention") or {}
    full = ret.get("full_sample") or {}
    counts = sorted({d.get("n_factors") for key in ("parallel", "map") for d in ret.get(key) or []
                     if _is_number(d.get("n_factors"))})

    def rate(key, m):
        return next((d.get("rate") for d in ret.get(key) or [] if d.get("n_factors") == m), 0)

    parts.append("<h3>Number of factors suggested across resamples</h3>")
    parts.append(_table(["Factors", f"Parallel analysis (all respondents: {_num(full.get('parallel'), 0)})",
                         f"MAP (all respondents: {_num(full.get('map'), 0)})"],
                        [[str(m), _share(rate("parallel", m)), _share(rate("map", m))] for m in counts],
                        num_cols={0, 1, 2}))
    parts.append("</section>")
    return "".join(parts)


# -------------------------------------------------------------------------------------------------- report
def render_report(snapshot: dict, dataset: dict) -> str:
    """Render a snapshot as one self-contained, printable HTML page.

    Parameters
    ----------
    snapshot : dict
        A stored snapshot: ``name``, ``author``, ``note``, ``items``, ``removed`` (in order, each with
        ``item``, ``reason``, ``code``, ``alpha_after``, ``omega_after``), ``trail``, ``settings``,
        ``analysis`` (the full analysis of the kept items), ``item_meta``, ``dataset_sha256``,
        ``software_version``, ``created_at``, ``id``, ``parent``.
    dataset : dict
        The data set's record (``name``, ``sha256``, ``n_rows``...); may be empty when the data set has
        been deleted, in which case the name and hash stored with the snapshot are shown.

    Returns
    -------
    str
        An HTML5 document with inline CSS and inline SVG: no scripts, no external resources. All user
        text is escaped with ``html.escape``.
    """
    dataset = dataset or {}
    analysis = snapshot.get("analysis") or {}
    reliability = analysis.get("reliability") or {}
    efa = analysis.get("efa") or {}
    items = [str(i) for i in snapshot.get("items") or []]
    meta = {str(m.get("name")): m for m in snapshot.get("item_meta") or [] if isinstance(m, Mapping)}
    settings = analysis.get("settings") or snapshot.get("settings") or {}
    title = f"Scalewright snapshot: {snapshot.get('name') or 'untitled'}"
    ds_name = dataset.get("name") or snapshot.get("dataset_name") or "(unnamed data set)"
    sha = snapshot.get("dataset_sha256") or dataset.get("sha256")
    sha_note = ""
    if dataset.get("sha256") and snapshot.get("dataset_sha256") and dataset["sha256"] != snapshot["dataset_sha256"]:
        sha_note = (" <strong>The data set now on the server has a different SHA-256 "
                    f"({_esc(dataset['sha256'])}).</strong>")
    n_rows = dataset.get("n_rows") or (analysis.get("dataset") or {}).get("n_rows")
    generated = _when(datetime.now(UTC).replace(microsecond=0).isoformat())
    version = snapshot.get("software_version") or __version__

    parts = [
        "<!DOCTYPE html>",
        "<html lang=\"en\"><head><meta charset=\"utf-8\">",
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">",
        f"<title>{_esc(title)}</title>",
        f"<style>{_CSS}{_page_footer_css(snapshot.get('id') or '', sha or '', version)}</style></head><body>",
        f"<header><h1>{_esc(title)}</h1>",
        f"<p class=\"muted\">Saved {_when(snapshot.get('created_at') or '')}"
        + (f" by {_esc(snapshot.get('author'))}" if snapshot.get("author") else "")
        + f" &middot; {len(items)} items kept, {len(snapshot.get('removed') or [])} removed</p></header>",
        f"<section><h2>What this is</h2><p>{_esc(PURPOSE)}</p></section>",
        "<section><h2>Snapshot and data set</h2>",
        _kv_table([
            ("Snapshot", _esc(snapshot.get("name"))),
            ("Snapshot id", f"<span class=\"mono\">{_esc(snapshot.get('id'))}</span>"),
            ("Parent snapshot", f"<span class=\"mono\">{_esc(snapshot.get('parent'))}</span>"
             if snapshot.get("parent") else "&ndash;"),
            ("Author", _esc(snapshot.get("author")) if snapshot.get("author") else "&ndash;"),
            ("Saved", _when(snapshot.get("created_at"))),
            ("Note", f"<span class=\"note\">{_esc(snapshot.get('note'))}</span>"
             if snapshot.get("note") else "&ndash;"),
            ("Data set", _esc(ds_name)),
            ("Data set SHA-256", f"<span class=\"mono\">{_esc(sha)}</span>{sha_note}"),
            ("Respondents", _num(n_rows)),
            ("Kept items", _esc(", ".join(items))),
            ("Software", f"Scalewright {_esc(version)}"),
        ]),
        "</section>",
        "<section><h2>Analysis settings</h2>",
        _kv_table(_settings_pairs(settings, efa, analysis.get("retention")))
        if settings else "<p class=\"muted\">Defaults.</p>",
        "</section>",
        "<section><h2>Reliability of the kept items</h2>",
        _kv_table(_reliability_pairs(reliability)) if reliability
        else "<p class=\"muted\">No reliability results were stored.</p>",
        _omega_section(reliability),
        _constructs_section(analysis.get("constructs")),
        "</section>",
        "<section><h2>Removed items, in order</h2>",
        _removed_section(snapshot),
        "</section>",
        "<section><h2>Item statistics</h2>",
        ("<p class=\"muted\">Whole-pool figures: item-rest r, alpha and omega if deleted treat every kept item as "
         "one scale; each subscale's own figures are under Subscales below.</p>"
         if analysis.get("items_scope") == "pool" else ""),
        _items_section(analysis.get("items") or [], meta),
        "</section>",
        _subscales_section(analysis.get("constructs"), meta),
        "<section><h2>Factor loadings</h2>",
        ("<p class=\"muted\">How the factors were extracted and rotated is listed under Analysis settings.</p>"
         if efa else ""),
        _loadings_section(efa, items) if efa else "<p class=\"muted\">No factor solution was stored.</p>",
        "</section>",
        _stability_section(snapshot.get("stability")),
        _resampling_section(snapshot.get("resampling")),
    ]
    warnings = [warning_text(w) for w in (analysis.get("warnings") or []) if w]  # coded objects or old sentences
    if warnings:
        parts.append("<section><h2>Warnings from the analysis</h2><ul>"
                     + "".join(f"<li>{_esc(w)}</li>" for w in warnings) + "</ul></section>")
    parts += [
        "<section><h2>Cautions</h2><div class=\"caution\"><ul>",
        "".join(f"<li>{_esc(c)}</li>" for c in CAUTIONS),
        "</ul></div></section>",
        (f"<footer class=\"page-foot\"><span>Snapshot <span class=\"mono\">{_esc(snapshot.get('id'))}</span></span> "
         f"<span>Data set SHA-256 <span class=\"mono\">{_esc(sha)}</span></span> "
         f"<span>Scalewright {_esc(version)}, report generated {generated}</span></footer>"),
        "</body></html>",
    ]
    return "\n".join(p for p in parts if p)
