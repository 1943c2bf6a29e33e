"""AnalysisSettings: the one home of choices, defaults, limits and thresholds, checked once."""
from __future__ import annotations

import pytest

from server.analysis.settings import OPTIONS, AnalysisSettings
from server.stats.errors import InputError
from server.stats.flags import DEFAULT_THRESHOLDS

NAMES = ["a", "b", "c", "d", "e"]


def build(request=None, **kw):
    return AnalysisSettings.build(request, names=NAMES, **kw)


def test_defaults_come_from_the_options_table():
    s = build({})
    for o in OPTIONS:
        assert getattr(s, o.name) == o.default
    assert s.items == tuple(NAMES) and s.reverse == () and s.excluded == () and s.thresholds is None
    assert s.seed == 20261202 and s.pa_iterations == 500  # one seed default, a number
    assert build({"seed": None, "correlation": None}) == s  # None takes the default


def test_items_keep_the_dataset_order_and_constant_items_are_excluded():
    s = build({"items": ["e", "a", "c"]}, constant=["c"])
    assert s.items == ("a", "e") and s.excluded == ("c",)
    assert build({"items": ["e", "a"]}).key() == build({"items": ["a", "e"]}).key()
    assert build({"reverse": ["d", "b"]}).reverse == ("b", "d")
    assert build({}, declared_reverse=["c"]).reverse == ("c",)
    assert build({"reverse": []}, declared_reverse=["c"]).reverse == ()


@pytest.mark.parametrize("request_, code, word", [
    ({"items": ["a", "zz"]}, "unknown_item", "zz"),
    ({"items": ["a", "a", "b"]}, "duplicate_item", "a"),
    ({"items": ["a"]}, "too_few_items", "2"),
    ({"reverse": ["zz"]}, "unknown_item", "zz"),
    ({"rotation": "sideways"}, "bad_option", "rotation"),
    ({"n_factors": 0}, "bad_option", "n_factors"),
    ({"n_factors": 2.5}, "bad_option", "n_factors"),
    ({"pa_iterations": 9}, "bad_option", "pa_iterations"),
    ({"gamma": 2}, "bad_option", "gamma"),
    ({"seed": -1}, "bad_option", "seed"),
    ({"seed": True}, "bad_option", "seed"),
    ({"thresholds": {"primary_min": 4}}, "bad_threshold", "primary_min"),
    ({"thresholds": {"nope": 0.1}}, "bad_threshold", "nope"),
    ({"colour": "red"}, "unknown_setting", "colour"),
])
def test_bad_settings_are_refused_with_a_code(request_, code, word):
    with pytest.raises(InputError) as err:
        build(request_)
    assert err.value.code == code and word in err.value.message


def test_too_few_items_names_the_excluded_ones():
    with pytest.raises(InputError) as err:
        build({"items": ["a", "c"]}, constant=["c"])
    assert err.value.code == "too_few_items" and "c had no variance" in err.value.message


def test_describe_serves_every_option_and_threshold_once():
    d = AnalysisSettings.describe()
    assert [o["name"] for o in d["settings"]] == [o.name for o in OPTIONS]
    by = {o["name"]: o for o in d["settings"]}
    assert by["correlation"]["choices"][1] == {"value": "polychoric", "label": "Polychoric (ordinal answers)"}
    assert by["pa_iterations"] == {**by["pa_iterations"], "type": "integer", "default": 500, "min": 10, "max": 5000}
    assert by["n_factors"]["default"] is None and (by["n_factors"]["min"], by["n_factors"]["max"]) == (1, 50)
    assert all(o["help"] for o in d["settings"])
    th = {t["name"]: t for t in d["thresholds"]}
    assert {k: t["default"] for k, t in th.items()} == DEFAULT_THRESHOLDS
    assert th["primary_min"]["source"] == "Howard 2016" and th["primary_min"]["default"] == 0.4  # Howard 2016
    assert th["item_rest_min"]["min"] == -1 and all(t["help"] and t["label"] for t in d["thresholds"])


def test_to_dict_is_the_answer_settings_section():
    s = build({"thresholds": {"primary_min": 0.5}, "n_factors": 2})
    assert s.to_dict() == {"items": NAMES, "reverse": [], "excluded": [], "missing": "pairwise",
                           "correlation": "pearson", "extraction": "minres", "rotation": "oblimin", "gamma": 0.0,
                           "n_factors": 2, "thresholds": {"primary_min": 0.5}, "pa_iterations": 500,
                           "pa_variant": "components", "pa_iterations_polychoric": 30,
                           "zero_cell_correction": 0.5, "grouping": "construct", "seed": 20261202}
