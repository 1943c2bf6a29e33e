"""The snapshot report: one self-contained page, no scripts, no outside URL, all user text escaped.

Built from a hand-made snapshot of the documented shape (issues 2, 3 and 4), so it does not depend on the
engine; tests/api/test_snapshots.py renders reports of real saved snapshots.
"""
from __future__ import annotations

import html
import re
from html.parser import HTMLParser
from pathlib import Path

import pytest

from server import __version__
from server.report import CAUTIONS, _css_string, _luminance, heat_colour, render_report

EVIL = "<script>alert('x')</script>"


def make_snapshot(**overrides) -> dict:
    items = ["Q1", "Q2", "Q3", "Q4"]
    analysis = {
        "dataset": {"id": "ds1", "name": "workshop.csv", "n_rows": 60},
        "settings": {"items": items, "missing": "pairwise", "correlation": "pearson", "extraction": "minres",
                     "rotation": "oblimin", "n_factors": 2, "seed": 1},
        "reliability": {"alpha": 0.8123, "alpha_ci": [0.7311, 0.8756], "alpha_standardized": 0.815,
                        "omega_total": 0.8302, "lambda2": 0.82, "lambda6": 0.83, "split_half": 0.79,
                        "mean_inter_item_r": 0.52, "scale_mean": 14.2, "scale_sd": 3.1, "sem": 1.3,
                        "n_complete": 58, "missing": "pairwise"},
        "items": [{"name": n, "n": 60, "mean": 3.1 + i / 10, "sd": 1.0, "skew": -0.2, "kurtosis": -0.5,
                   "floor": 0.05, "ceiling": 0.1, "counts": {"1": 3, "2": 10, "3": 20, "4": 20, "5": 7},
                   "item_rest_r": 0.6 - i / 20, "alpha_if_deleted": 0.78, "omega_if_deleted": 0.79}
                  for i, n in enumerate(items)],
        "constructs": {"belonging": {"alpha": 0.75, "alpha_ci": [0.6, 0.84], "omega_total": 0.76, "n_items": 2}},
        "efa": {"n_factors": 2, "factors": ["belonging", "F2"],
                "loadings": {"Q1": [0.81, 0.02], "Q2": [0.74, -0.35], "Q3": [0.05, 0.66], "Q4": [0.41, 0.38]},
                "factor_correlations": [[1.0, 0.31], [0.31, 1.0]],
                "communalities": {"Q1": 0.66, "Q2": 0.6, "Q3": 0.44, "Q4": 0.35},
                "fit": {"rmsr": 0.031}, "converged": True,
                "flags": [{"item": "Q4", "kind": "cross_loading", "message": "Q4 loads .41 and .38."}]},
        "warnings": ["Item Q3 has a " + EVIL + " warning."],
    }
    snap = {
        "id": "snap-1", "dataset_id": "ds1", "dataset_name": "workshop.csv", "dataset_sha256": "ab" * 32,
        "name": "After the March meeting", "author": "Team <b>A</b>", "note": "Note with " + EVIL,
        "items": items,
        "removed": [
            {"item": "Q5", "reason": "Cross-loads " + EVIL, "code": "cross-loading", "alpha_after": 0.80,
             "omega_after": 0.81, "n_items_after": 5},
            {"item": "Q6 & \"friends\"", "reason": "Too weak", "code": "weak", "alpha_after": 0.8123,
             "omega_after": 0.8302, "n_items_after": 4},
        ],
        "trail": [
            {"step": 0, "removed": None, "n_items": 6, "alpha": 0.79, "omega_total": 0.80},
            {"step": 1, "removed": "Q5", "n_items": 5, "alpha": 0.80, "omega_total": 0.81},
            {"step": 2, "removed": "Q6 & \"friends\"", "n_items": 4, "alpha": 0.8123, "omega_total": 0.8302},
        ],
        "settings": {"rotation": "oblimin", "n_factors": 2},
        "item_meta": [{"name": "Q1", "text": "I feel at home " + EVIL, "construct": "belonging", "reverse": False,
                       "min": 1, "max": 5},
                      {"name": "Q2", "text": "Nobody notices me", "construct": "belonging", "reverse": True,
                       "min": 1, "max": 5}],
        "analysis": analysis, "software_version": __version__, "created_at": "2026-12-02T01:00:00+00:00",
        "parent": None,
    }
    snap.update(overrides)
    return snap


class Collector(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def parse(page: str) -> Collector:
    c = Collector()
    c.feed(page)
    c.close()
    return c


def test_report_is_self_contained_without_scripts_or_outside_urls():
    page = render_report(make_snapshot(), {"name": "workshop.csv", "sha256": "ab" * 32, "n_rows": 60})
    assert page.startswith("<!DOCTYPE html>")
    doc = parse(page)
    names = [t for t, _ in doc.tags]
    assert "script" not in names
    assert not {"link", "img", "iframe", "object", "embed", "base", "form"} & set(names)
    for tag, attrs in doc.tags:
        assert not any(a.startswith("on") for a in attrs), (tag, attrs)  # no event handlers
        assert not any(a in ("src", "href") for a in attrs), (tag, attrs)
    assert "http://" not in page and "https://" not in page
    assert "svg" in names and "polyline" in names  # the alpha/omega trail, drawn inline


def test_all_user_text_is_escaped_and_shown_as_text():
    page = render_report(make_snapshot(), {})
    assert EVIL not in page
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in page
    text = "".join(parse(page).text)
    assert "Cross-loads " + EVIL in text          # the reason reads as written
    assert "Note with " + EVIL in text
    assert "I feel at home " + EVIL in text
    assert "Team <b>A</b>" in text                # author's markup is text, not bold
    assert "Q6 & \"friends\"" in text


def test_report_contents():
    page = render_report(make_snapshot(), {"name": "workshop.csv", "sha256": "ab" * 32, "n_rows": 60})
    text = " ".join(parse(page).text)
    assert "ab" * 32 in text
    assert "workshop.csv" in text
    assert "Scalewright is a local dashboard" in text
    assert f"Scalewright {__version__}" in text
    for caution in CAUTIONS:
        assert caution in text
    assert "validity" in text and "professional testing standards" in text
    assert ".812" in text and ".731 to .876" in text  # alpha with its interval, written as the dashboard does
    assert ".830" in text                             # omega
    # removed items in order, with reasons, codes and coefficients after each step
    assert text.index("Cross-loads") < text.index("Too weak")
    assert "cross-loading" in text and "weak" in text
    assert ".800" in text and ".810" in text
    # item table with wording, loading table with a flag, factor correlations
    assert "Nobody notices me" in text
    assert "cross_loading" in text
    assert ".31" in text
    assert "belonging" in text
    assert "rotation" in text.lower() and "oblimin" in text


def test_report_without_factor_solution_or_removals():
    snap = make_snapshot(removed=[], trail=[])
    snap["analysis"] = {k: v for k, v in snap["analysis"].items() if k != "efa"}
    page = render_report(snap, {})
    assert "No items were removed" in page
    assert "No factor solution was stored" in page
    assert "<script" not in page


def test_report_tolerates_nan_and_missing_values():
    snap = make_snapshot()
    snap["analysis"]["reliability"]["omega_total"] = None
    snap["analysis"]["efa"]["loadings"]["Q1"] = [float("nan"), 0.1]
    snap["trail"][1]["omega_total"] = None
    page = render_report(snap, {})
    assert "&ndash;" in page
    assert "<svg" in page


def test_report_notes_a_changed_dataset_hash():
    page = render_report(make_snapshot(), {"name": "workshop.csv", "sha256": "cd" * 32})
    assert "different SHA-256" in page


# ---- issue 11: the omega family, per-subscale sections, and snapshots saved before them
def make_subscale_snapshot() -> dict:
    snap = make_snapshot()
    rel = snap["analysis"]["reliability"]
    rel.update(omega_total=0.861, omega_hierarchical=0.612, omega_unidimensional=0.8302, ecv=0.55, h=0.83,
               omega_subscale={"belonging": 0.21, "F2": 0.34}, omega_groups=[], omega_basis="schmid_leiman",
               omega_note="Omega hierarchical .61: about 61% of the total score's variance is owed to one "
                          "general factor.", omega_source="minres, oblimin, 2 factors")
    evil_group = "pride " + EVIL
    snap["analysis"]["items_scope"] = "pool"
    snap["analysis"]["items_note"] = "Item-rest r in 'items' are whole-pool figures."
    snap["analysis"]["constructs"] = {
        "belonging": {"items": ["Q1", "Q2"], "n_items": 2, "alpha": 0.75, "alpha_ci": [0.6, 0.84],
                      "omega_total": 0.76, "omega_unidimensional": 0.76,
                      "one_factor_fit": {"rmsr": 0.0412, "largest_residual": {"r": 0.213, "items": ["Q1", "Q2"]}},
                      "item_table": [{"name": "Q1", "item_rest_r": 0.6012, "alpha_if_deleted": 0.7123,
                                      "omega_if_deleted": 0.7234, "r_other": {evil_group: 0.4456}},
                                     {"name": "Q2", "item_rest_r": 0.5511, "alpha_if_deleted": 0.7011,
                                      "omega_if_deleted": 0.7022, "r_other": {evil_group: 0.6677}}],
                      "pruning_path": []},
        evil_group: {"items": ["Q3", "Q4"], "n_items": 2, "alpha": 0.66, "omega_total": 0.67,
                     "omega_unidimensional": 0.67, "one_factor_fit": {"rmsr": 0.02, "largest_residual": None},
                     "item_table": [{"name": "Q3", "item_rest_r": 0.49, "alpha_if_deleted": None,
                                     "omega_if_deleted": None, "r_other": {"belonging": 0.1}}],
                     "pruning_path": []},
    }
    return snap


def test_report_shows_the_omega_family_and_its_sentence():
    page = render_report(make_subscale_snapshot(), {})
    text = " ".join(parse(page).text)
    assert "Omega hierarchical" in text and ".612" in text
    assert "Explained common variance (ECV)" in text and ".550" in text
    assert "Hancock & Mueller 2001" in text and ".830" in text
    assert "Omega subscale, belonging" in text and ".210" in text
    assert "Omega (unidimensional: one factor for every item)" in text
    assert "Schmid-Leiman transformation" in text and ".861" in text
    assert "about 61% of the total score's variance" in text  # the stored omega_note, as written
    assert "Omega (unidimensional)" not in text.replace("Omega (unidimensional:", "")  # new snapshots: no old label
    # the family is not repeated in the generic list of coefficients
    assert "Omega basis" not in text and "Omega source" not in text


def test_report_has_a_section_per_subscale_with_its_item_table_and_fit():
    page = render_report(make_subscale_snapshot(), {})
    text = " ".join(parse(page).text)
    assert "Subscales" in text and "Subscale: belonging" in text
    assert "Subscale: pride " + EVIL in text          # a construct name is text
    assert EVIL not in page
    belonging = text[text.index("Subscale: belonging"):text.index("Subscale: pride")]
    assert ".60" in belonging and ".712" in belonging and ".723" in belonging  # Q1's within-subscale figures
    assert ".67 (pride " + EVIL + ")" in belonging    # Q2's highest r with another subscale, named
    assert "Items Q1 and Q2 share more than the single factor explains (residual r = .21)." in belonging
    assert "One-factor RMSR .041" in belonging
    assert "Whole-pool figures" in text               # the pool item table says what it is
    assert "One-factor RMSR" in text                  # and the by-construct table carries the fit


def test_report_of_an_old_snapshot_labels_its_omega_unidimensional():
    snap = make_snapshot()                            # stored before issue 11: no omega_basis, no item tables
    assert "omega_basis" not in snap["analysis"]["reliability"]
    page = render_report(snap, {})
    text = " ".join(parse(page).text)
    assert "Omega (unidimensional)" in text and ".830" in text  # the stored number, as stored
    assert "McDonald's omega (total)" not in text
    assert "Omega hierarchical" not in text
    assert "Subscale:" not in text


# ---- issue 12: the report prints, in the dashboard's number style and colours, in our own words
ROOT = Path(__file__).resolve().parents[1]


def body_text(page: str) -> str:
    """The visible text (the <style> block left out)."""
    return " ".join(parse(page[page.index("<body>"):]).text)


def cells(page: str, table_class: str) -> list[tuple[dict, str]]:
    """(attributes, text) of each <td> of the first table with the class."""
    start = page.index(f"<table class=\"{table_class}\"")
    table = page[start:page.index("</table>", start)]
    return [(dict(re.findall(r'(\w+)="([^"]*)"', attrs)), html.unescape(re.sub(r"<[^>]+>", "", inner)))
            for attrs, inner in re.findall(r"<td([^>]*)>(.*?)</td>", table)]


def test_coefficients_are_written_without_a_leading_zero_and_other_numbers_with_it():
    page = render_report(make_snapshot(), {})
    text = " ".join(body_text(page).split())
    # bounded by 1: correlations, loadings, alpha, omega, shares (fmt in static/js/views/dom.js)
    assert "Cronbach's alpha .812 (95% CI .731 to .876)" in text
    assert "Standardized alpha .815" in text and "Mean inter-item correlation .520" in text
    heat = {t.replace("\u25b8", "") for _, t in cells(page, "heat")}
    assert {".81", ".02", ".74", "\u2212.35", ".66", ".41", ".38"} <= heat   # loadings, negative with a minus
    assert ".66" in heat and ".35" in heat                                  # communalities
    assert not re.search(r"(^|[^\d])0\.\d", " ".join(heat))
    items = [t for _, t in cells(page, "wrap items")]
    assert ".05" in items and ".10" in items and ".60" in items and ".780" in items  # floor, ceiling, r, alpha
    # not bounded: counts, means, SDs, skew, kurtosis, the scale mean and SD, the SEM keep the leading digit
    assert "Scale mean 14.200" in text and "Scale SD 3.100" in text and "Standard error of measurement 1.300" in text
    assert "3.10" in items and "1.00" in items and "\u22120.20" in items and "\u22120.50" in items and "60" in items
    assert "0.812" not in text and "0.830" not in text


def dashboard_scale() -> list[tuple[float, tuple[int, int, int]]]:
    """The loadings heatmap's colour scale, read from static/js/charts.js (plotly: 0 is -1, 1 is +1)."""
    src = (ROOT / "static" / "js" / "charts.js").read_text(encoding="utf-8")
    stops = re.search(r"const DIVERGING = \[(.*?)\];", src).group(1)
    return [(float(x) * 2 - 1, tuple(int(c[i:i + 2], 16) for i in (0, 2, 4)))
            for x, c in re.findall(r'\[([\d.]+), "#([0-9a-fA-F]{6})"\]', stops)]


def test_loading_colours_follow_the_dashboards_scale_and_never_stand_alone():
    scale = dashboard_scale()
    assert len(scale) == 5
    for value, rgb in scale:
        assert heat_colour(value)[0] == rgb  # the same colour at each stop of the dashboard's scale
    page = render_report(make_snapshot(), {})
    by_text = {t.replace("\u25b8", ""): a for a, t in cells(page, "heat") if "style" in a}
    positive = re.search(r"rgb\((\d+),(\d+),(\d+)\)", by_text[".81"]["style"]).groups()
    negative = re.search(r"rgb\((\d+),(\d+),(\d+)\)", by_text["\u2212.35"]["style"]).groups()
    assert int(positive[0]) > int(positive[2])   # positive: the dashboard's brown end (red above blue)
    assert int(negative[2]) > int(negative[0])   # negative: the dashboard's blue end
    # the number is in the cell; a salient loading (.30 or more in size) is bold, each item's largest marked
    assert "salient" in by_text[".81"]["class"] and "primary" in by_text[".81"]["class"]
    assert "salient" in by_text["\u2212.35"]["class"] and "primary" not in by_text["\u2212.35"]["class"]
    assert "salient" not in by_text[".02"]["class"]
    assert page.count("\u25b8</span>") == 4        # one mark per item (Q1 to Q4)
    # text on every shade keeps a contrast of at least 4.5:1 (WCAG 2.1 AA)
    for i in range(-100, 101):
        rgb, ink = heat_colour(i / 100)
        lum, ink_lum = _luminance(rgb), (0.0 if ink == "#000" else 1.0)
        assert (max(lum, ink_lum) + 0.05) / (min(lum, ink_lum) + 0.05) >= 4.5, i


def test_variance_table_and_settings_are_in_our_own_words():
    snap = make_snapshot()
    snap["analysis"]["efa"]["variance"] = {"ss_loadings": [1.234, 0.987], "proportion": [0.3086, 0.2468],
                                           "cumulative": [0.3086, 0.5554], "basis": "sum of squared loadings"}
    snap["analysis"]["settings"].update(gamma=0.0, n_factors=None, pa_iterations=500, pa_variant="components",
                                        reverse=["Q2"], excluded=[], thresholds=None)
    snap["analysis"]["retention"] = {"suggested": 2}
    page = render_report(snap, {})
    text = body_text(page)
    for word in ("SS loadings", "Ss loadings", "Proportion Var", "Cumulative Var", "Proportion", "Cumulative var",
                 "fa(", "nfactors", "fm=", "rotate=", "Variance explained"):
        assert word not in text, word
    assert not re.search(r"\w+\s*=\s*\"?\w+\"?\s*,", text)  # no option written like a call's arguments
    assert "What each factor explains" in text
    assert ("Factor Sum of squared loadings Share of the items' variance Cumulative share "
            "belonging 1.234 .309 .309 F2 0.987 .247 .555") in " ".join(text.split())
    settings = text[text.index("Analysis settings"):text.index("Reliability of the kept items")]
    settings = " ".join(settings.split())
    for line in ("Correlations Pearson", "Missing answers pairwise deletion",
                 "Factors extracted 2 (parallel analysis suggested 2)", "Extraction minimum residual (minres)",
                 "Rotation oblimin (gamma 0)", "Parallel analysis 500 random data sets, eigenvalues of components",
                 "Reverse-keyed items (scored min + max \u2212 answer) Q2", "Items left out (no variance) none",
                 "Flag thresholds the defaults"):
        assert line in settings, line
    snap["analysis"]["settings"]["n_factors"] = 2
    snap["analysis"]["retention"] = {"suggested": 3}
    settings = body_text(render_report(snap, {}))
    assert "Factors extracted 2 (set by the team; parallel analysis suggested 3)" in " ".join(settings.split())


@pytest.mark.parametrize("stamp", ["2026-12-02T01:00:00+00:00", "2026-12-02T03:00:00+02:00", "2026-12-02T01:00:00Z",
                                   "2026-12-02T01:00:00.123456"])
def test_each_time_is_written_once_with_one_zone(stamp):
    text = body_text(render_report(make_snapshot(created_at=stamp), {}))
    assert text.count("2026-12-02 01:00:00 UTC") == 2        # the header and the record, the same words
    assert "+00:00" not in text and "+02:00" not in text and "T01:00" not in text and "Z UTC" not in text
    stamps = re.findall(r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d UTC", text)
    assert len(stamps) == text.count("UTC") == 3               # two saves and the generation time
    assert not re.search(r"UTC\W*UTC", text)


def test_each_subscale_has_its_own_section_with_wording_and_coefficients():
    snap = make_subscale_snapshot()
    snap["item_meta"] += [{"name": "Q3", "text": "I am proud of < what we make", "construct": "pride",
                           "reverse": False}]
    page = render_report(snap, {})
    sections = re.findall(r"<section class=\"subscale\">(.*?)</section>", page, flags=re.S)
    assert len(sections) == 2
    belonging, pride = (" ".join(parse(s).text) for s in sections)
    assert belonging.startswith("Subscale: belonging")
    assert "Cronbach's alpha .750  (95% interval .600 to .840)" in belonging
    assert "Omega (one factor) .760" in belonging
    assert "I feel at home " + EVIL in belonging and "Nobody notices me" in belonging
    assert "(reverse-keyed)" in belonging                      # Q2
    assert "Q3" not in belonging and "Q1" not in pride
    assert pride.startswith("Subscale: pride " + EVIL)
    assert "I am proud of < what we make" in pride and "I am proud of &lt; what we make" in sections[1]
    assert "Cronbach's alpha .660" in pride and "Omega (one factor) .670" in pride


def test_every_printed_page_carries_the_snapshot_and_data_hashes():
    page = render_report(make_snapshot(), {"sha256": "ab" * 32})
    style = page[page.index("<style>"):page.index("</style>")]
    box = re.search(r"@page \{ @bottom-left \{ content: (\"[^\"]*\")", style).group(1)
    assert "snap-1" in box and "ab" * 32 in box and "Snapshot" in box and "SHA-256" in box
    assert "counter(page)" in style                               # and the page number
    # the on-screen footer says the same at the end of the page
    foot = " ".join(parse(page[page.index("<footer"):]).text)
    assert "snap-1" in foot and "ab" * 32 in foot


def test_the_page_footer_cannot_break_out_of_its_css_string():
    page = render_report(make_snapshot(id="x\"; } </style><script>alert(1)</script>"), {})
    assert "<script>" not in page and page.count("</style>") == 1
    assert _css_string("a\"b</style>") == "\"a\\22 b\\3c \\2f style\\3e \""


def test_cautions_stay_and_user_text_is_escaped_everywhere():
    snap = make_subscale_snapshot()
    page = render_report(snap, {})
    text = body_text(page)
    assert "it is not evidence of validity" in text and "professional testing standards and local rules" in text
    assert EVIL not in page and "<b>A</b>" not in page


def _interval_block(est, low, high, bca=None):
    return {"estimate": est, "percentile": {"low": low, "high": high, "method": "percentile"},
            "bca": None if bca is None else {"low": bca[0], "high": bca[1], "method": "bca"}}


def test_report_shows_the_resampling_run_kept_with_the_snapshot():
    snap = make_snapshot()
    snap["resampling"] = {
        "run_id": "r1", "n_resamples": 200, "seed": 77, "n_failed": 0, "level": 0.95, "same_items": True,
        "settings": {"correlation": "pearson", "rotation": "oblimin", "seed": 77},
        "items": [
            {"name": "Q<1>", "flags": {"cross_loading": 0.41, "weak_loading": 0.05},
             "flags_full_sample": ["cross_loading"], "early_removal": 0.3},
            {"name": "Q2", "flags": {"weak_loading": 0.09}, "flags_full_sample": [], "early_removal": 0.0},
            {"name": "Q3", "flags": {}, "flags_full_sample": [], "early_removal": 0.0},
        ],
        "coefficients": {"alpha": _interval_block(0.849, 0.8123, 0.8771, (0.8101, 0.8759)),
                         "omega_total": _interval_block(0.861, 0.83, 0.89),
                         "omega_hierarchical": _interval_block(0.702, 0.61, 0.77)},
        "subscales": [{"name": "Mood", "alpha": _interval_block(0.8, 0.75, 0.85),
                       "omega": _interval_block(0.81, 0.76, 0.86)}],
        "retention": {"parallel": [{"n_factors": 2, "count": 150, "rate": 0.75},
                                   {"n_factors": 3, "count": 50, "rate": 0.25}],
                      "map": [{"n_factors": 2, "count": 200, "rate": 1.0}], "full_sample": {"parallel": 2, "map": 2}},
        "bca_note": "BCa for alpha only.",
    }
    page = render_report(snap, {})
    text = body_text(page)
    assert "Resampling stability" in text
    assert "200 times (seed 77)" in text
    # items with a flag rate of at least 10 % are listed, escaped; Q2 (9 %) and Q3 are not
    assert "Q&lt;1&gt;" in page and "Q<1>" not in page
    assert "cross-loads in 41" in text and "weak in 5" in text
    start = page.index("<h2>Resampling stability")
    section = page[start:page.index("</section>", start)]
    assert "Q2" not in section and "Q3" not in section
    # coefficients in the dashboard's style, without the leading zero; BCa where given
    assert ".849 (percentile .812 to .877; BCa .810 to .876)" in text
    assert ".702 (percentile .610 to .770)" in text
    assert "Mood: omega" in text
    assert "75" in section and "25" in section  # parallel analysis: 2 factors in 75 %, 3 in 25 %
    # a report without a run has no such section
    assert "Resampling stability" not in body_text(render_report(make_snapshot(), {}))
