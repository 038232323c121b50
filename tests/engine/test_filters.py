"""Row filters: each rule against a direct pandas expression, counts per filter, clear errors."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from engine.prepare.filters import FilterError, RowFilter, apply_filters


@pytest.fixture
def frame():
    return pd.DataFrame(
        {
            "age": [17.0, 18.0, 45.5, 80.0, 81.0, np.nan],
            "site": ["north", "south", None, "north", "east", "south"],
            "stage": [1, 2, 3, 1, 2, 4],
        }
    )


@pytest.mark.parametrize(
    ("row_filter", "kept_index"),
    [
        (RowFilter("age", "between", (18, 80)), [1, 2, 3]),
        (RowFilter("age", "between", (80, 18)), [1, 2, 3]),  # limits in either order
        (RowFilter("age", "at_least", (45.5,)), [2, 3, 4]),
        (RowFilter("age", "at_most", (18,)), [0, 1]),
        (RowFilter("age", "not_missing"), [0, 1, 2, 3, 4]),
        (RowFilter("site", "in", ("north", "east")), [0, 3, 4]),
        (RowFilter("site", "not_in", ("north",)), [1, 4, 5]),  # missing site dropped too
        (RowFilter("stage", "in", ("1", 2.0)), [0, 1, 3, 4]),  # numbers match as numbers
    ],
)
def test_each_rule_keeps_the_expected_rows(frame, row_filter, kept_index):
    outcome = apply_filters(frame, [row_filter])
    assert outcome.frame.equals(frame.loc[kept_index].reset_index(drop=True))
    assert outcome.excluded == ((row_filter.describe(), len(frame) - len(kept_index)),)


def test_filters_count_only_rows_still_present(frame):
    outcome = apply_filters(
        frame, [RowFilter("age", "not_missing"), RowFilter("site", "in", ("north",))]
    )
    assert outcome.to_dict() == {
        "rows_kept": 2,
        "excluded": [
            {"filter": "age not missing", "rows": 1},
            {"filter": "site is one of 'north'", "rows": 3},
        ],
    }


def test_no_filters_keeps_every_row(frame):
    outcome = apply_filters(frame, [])
    assert outcome.frame is frame
    assert outcome.excluded == ()


@pytest.mark.parametrize(
    ("data", "message"),
    [
        ({"column": "age", "rule": "near", "values": [1]}, "unknown rule 'near'"),
        ({"column": "age", "rule": "between", "values": [1]}, "takes 2 value"),
        ({"column": "site", "rule": "in", "values": []}, "needs at least one value"),
        ({"rule": "in"}, "must be an object with 'column'"),
    ],
)
def test_bad_filters_are_refused_when_read(data, message):
    with pytest.raises(FilterError, match=message):
        RowFilter.from_dict(data)


def test_unknown_column_and_non_numeric_limits_name_the_column(frame):
    with pytest.raises(FilterError, match="'weight': there is no such column"):
        apply_filters(frame, [RowFilter("weight", "not_missing")])
    with pytest.raises(FilterError, match="'age': the limits must be finite numbers"):
        apply_filters(frame, [RowFilter("age", "at_least", ("old",))])


def test_round_trip_through_dict():
    row_filter = RowFilter("age", "between", (18, 80))
    assert RowFilter.from_dict(row_filter.to_dict()) == row_filter


@given(
    st.lists(st.one_of(st.none(), st.floats(-100, 100)), min_size=1, max_size=40),
    st.floats(-100, 100),
    st.floats(-100, 100),
)
def test_kept_plus_excluded_equals_rows(values, low, high):
    frame = pd.DataFrame({"x": pd.Series(values, dtype=float)})
    outcome = apply_filters(frame, [RowFilter("x", "between", (low, high))])
    assert len(outcome.frame) + outcome.excluded[0][1] == len(frame)
    lo, hi = min(low, high), max(low, high)
    assert outcome.frame["x"].between(lo, hi).all()
