"""When a factor model applies and how many factors are extracted (rules moved out of the analysis)."""
from __future__ import annotations

import pytest

from server.stats.efa import cap_factors, check_factor_model, max_factors
from server.stats.errors import InputError


def test_more_respondents_than_items_are_needed():
    with pytest.raises(InputError) as err:
        check_factor_model(10, 10)
    assert err.value.code == "too_few_rows" and "n = 10, k = 10" in err.value.message
    check_factor_model(11, 10)


def test_at_least_three_items_unless_only_rows_are_checked():
    with pytest.raises(InputError) as err:
        check_factor_model(100, 2)
    assert err.value.code == "too_few_items"
    check_factor_model(100, 2, min_items=0)


def test_at_most_half_the_items_as_factors():
    assert [max_factors(k) for k in (1, 2, 3, 9, 24)] == [1, 1, 1, 4, 12]  # common practice: >= 2 items per factor
    assert cap_factors(3, 9) == (3, None)
    m, warning = cap_factors(40, 24)
    assert m == 12 and warning.code == "too_many_factors"
    assert warning.message == "40 factors is too many for 24 items; 12 were extracted."
