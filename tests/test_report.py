"""The snapshot report: one self-contained page, no scripts, no outside URL, all user text escaped.

Built from a hand-made snapshot of the documented shape (issues 2, 3 and 4), so it does not depend on the
engine; tests/api/test_snapshots.py renders reports of real saved snapshots.
"""
from __future__ import annotations

from html.parser import HTMLParser

from server import __version__
from server.report import CAUTIONS, render_report

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
    assert "0.812" in text and "0.731 to 0.876" in text.replace("\u2212", "-")  # alpha with its interval
    assert "0.830" in text                                                      # omega
    # removed items in order, with reasons, codes and coefficients after each step
    assert text.index("Cross-loads") < text.index("Too weak")
    assert "cross-loading" in text and "weak" in text
    assert "0.800" in text and "0.810" in text
    # item table with wording, loading table with a flag, factor correlations
    assert "Nobody notices me" in text
    assert "cross_loading" in text
    assert "0.31" in text
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
    assert "Omega hierarchical" in text and "0.612" in text
    assert "Explained common variance (ECV)" in text and "0.550" in text
    assert "Hancock & Mueller 2001" in text and "0.830" in text
    assert "Omega subscale, belonging" in text and "0.210" in text
    assert "Omega (unidimensional: one factor for every item)" in text
    assert "Schmid-Leiman transformation" in text and "0.861" in text
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
    assert "0.60" in belonging and "0.712" in belonging and "0.723" in belonging  # Q1's within-subscale figures
    assert "0.67 (pride " + EVIL + ")" in belonging   # Q2's highest r with another subscale, named
    assert "Items Q1 and Q2 share more than the single factor explains (residual r = 0.21)." in belonging
    assert "one-factor RMSR 0.041" in belonging
    assert "Whole-pool figures" in text               # the pool item table says what it is
    assert "One-factor RMSR" in text                  # and the by-construct table carries the fit


def test_report_of_an_old_snapshot_labels_its_omega_unidimensional():
    snap = make_snapshot()                            # stored before issue 11: no omega_basis, no item tables
    assert "omega_basis" not in snap["analysis"]["reliability"]
    page = render_report(snap, {})
    text = " ".join(parse(page).text)
    assert "Omega (unidimensional)" in text and "0.830" in text  # the stored number, as stored
    assert "McDonald's omega (total)" not in text
    assert "Omega hierarchical" not in text
    assert "Subscale:" not in text
