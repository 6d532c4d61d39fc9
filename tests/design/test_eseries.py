"""IEC 60063 preferred values."""

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchlab.design.eseries import (nearest_preferred, preferred_at_least, series_decade, series_tolerance,
                                     series_values)
from benchlab.errors import InputError


def test_e24_exactly_as_the_standard_lists_it():
    # IEC 60063:2015, E24 table (two significant digits).
    listed = [1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
              3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1]
    assert list(series_decade("E24")) == listed


def test_e24_keeps_the_values_where_the_rounded_formula_disagrees():
    # IEC 60063:2015 lists 2.7 ... 4.7 and 8.2 although round(10^(i/24), 1) gives other values.
    formula = [round(10 ** (i / 24), 1) for i in range(24)]
    e24 = series_decade("E24")
    differing = {e24[i]: formula[i] for i in range(24) if abs(e24[i] - formula[i]) > 1e-9}
    assert differing == {2.7: 2.6, 3.0: 2.9, 3.3: 3.2, 3.6: 3.5, 3.9: 3.8, 4.3: 4.2, 4.7: 4.6, 8.2: 8.3}


def test_e12_e6_are_subsets_of_e24_as_listed():
    # IEC 60063:2015: E12 = 1.0 1.2 1.5 1.8 2.2 2.7 3.3 3.9 4.7 5.6 6.8 8.2; E6 = 1.0 1.5 2.2 3.3 4.7 6.8.
    assert list(series_decade("E12")) == [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2]
    assert list(series_decade("e6")) == [1.0, 1.5, 2.2, 3.3, 4.7, 6.8]


def test_e96_follows_the_formula_and_known_published_entries():
    # IEC 60063:2015: E96 values are round(100 x 10^(i/96)) / 100.
    e96 = series_decade("E96")
    assert len(e96) == 96
    for i, value in enumerate(e96):
        assert value == round(100 * 10 ** (i / 96)) / 100
    # a few entries as printed in the standard's E96 table (IEC 60063:2015)
    for value in (1.0, 1.02, 1.21, 2.49, 3.01, 4.99, 6.04, 8.06, 9.76):
        assert value in e96


def test_e192_exception_and_e48_subset():
    # IEC 60063:2015 lists 9.20 in E192 where the formula gives 9.19.
    e192 = series_decade("E192")
    assert 9.20 in e192 and 9.19 not in e192
    assert set(series_decade("E48")) <= set(e192)
    assert len(series_decade("E48")) == 48


def test_nearest_preferred_in_log_distance_across_decades():
    # log-scale midpoint of 1.1k and 1.2k is 1148.9 ohm: 1150 belongs to 1.2k, 1145 to 1.1k (IEC 60063 values)
    assert nearest_preferred(1150.0, "E24") == 1200.0
    assert nearest_preferred(1145.0, "E24") == 1100.0
    # 9.6 is nearer 10 (next decade) than 9.1 on a log scale
    assert nearest_preferred(9.6, "E24") == 10.0
    assert nearest_preferred(0.97, "E24") == 1.0
    assert nearest_preferred(1052.0, "E96") == 1050.0
    assert nearest_preferred(4650.0, "E24") == 4700.0


def test_preferred_at_least_and_range_listing():
    assert preferred_at_least(1001.0, "E24") == 1100.0
    assert preferred_at_least(1000.0, "E24") == 1000.0
    assert series_values("E24", 900, 1300) == [910.0, 1000.0, 1100.0, 1200.0, 1300.0]


def test_tolerances_common_practice():
    # common practice (no published source consulted): E24 parts are sold as 5 %, E96 as 1 %.
    assert series_tolerance("E24") == 0.05
    assert series_tolerance("E96") == 0.01


def test_bad_series_and_values_are_input_errors():
    with pytest.raises(InputError):
        series_decade("E25")
    with pytest.raises(InputError):
        nearest_preferred(-5.0)
    with pytest.raises(InputError):
        nearest_preferred(float("nan"))


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=1e-3, max_value=1e9), st.sampled_from(["E12", "E24", "E96"]))
def test_nearest_is_never_beaten_by_any_value_of_the_series(value, name):
    chosen = nearest_preferred(value, name)
    # brute force over three decades around the value
    candidates = series_values(name, value / 20, value * 20)
    best = min(abs(math.log(c / value)) for c in candidates)
    assert abs(math.log(chosen / value)) <= best + 1e-12
