"""Column profile and the quantile cut used for "a numeric column cut into groups"."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from engine.errors import RoleError
from engine.prepare.columns import column_profile, cut_at_quantiles


def test_profile_counts_missing_and_distinct_values():
    frame = pd.DataFrame(
        {"age": [50.0, None, 61.5, 50.0], "arm": ["a", "b", None, "a"], "flag": [True, False] * 2}
    )
    profile = column_profile(frame).set_index("column")
    assert profile.loc["age", ["type", "missing", "distinct"]].tolist() == ["number", 1, 2]
    assert profile.loc["arm", ["type", "missing", "distinct"]].tolist() == ["text", 1, 2]
    assert profile.loc["flag", "type"] == "true/false"
    assert profile.loc["age", "examples"] == "50.0, 61.5"


def test_quartiles_of_distinct_values_give_equal_groups():
    values = pd.Series(np.arange(1, 101, dtype=float), name="score")
    groups = cut_at_quantiles(values, 4)
    assert groups.value_counts(sort=False).tolist() == [25, 25, 25, 25]
    assert str(groups.cat.categories[0]).startswith("score [1, ")
    assert groups.cat.ordered


@given(
    st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=2, max_size=200),
    st.integers(2, 6),
)
def test_each_value_lies_between_its_group_quantile_edges(values, k):
    series = pd.Series(values, name="x")
    if series.nunique() < 2:
        with pytest.raises(RoleError):
            cut_at_quantiles(series, k)
        return
    groups = cut_at_quantiles(series, k)
    edges = np.unique(np.quantile(series, np.linspace(0, 1, k + 1)))
    codes = groups.cat.codes.to_numpy()
    x = series.to_numpy()
    assert len(groups.cat.categories) == len(edges) - 1
    # exact property of a quantile cut: each value lies in (lower edge, upper edge] of its group,
    # the first group closed at the minimum, computed here from numpy's quantiles
    assert (x <= edges[codes + 1]).all()
    assert ((x > edges[codes]) | ((codes == 0) & (x == edges[0]))).all()
    assert len(set(groups.cat.categories)) == len(groups.cat.categories)


def test_missing_values_stay_missing_and_text_is_refused():
    groups = cut_at_quantiles(pd.Series([1.0, None, 3.0, 4.0, 5.0], name="x"), 2)
    assert groups.isna().tolist() == [False, True, False, False, False]
    with pytest.raises(RoleError, match=r"'x' must be numeric.*'high'"):
        cut_at_quantiles(pd.Series(["1", "high", "3"], name="x"), 2)
    with pytest.raises(RoleError, match="at least 2 groups"):
        cut_at_quantiles(pd.Series([1.0, 2.0], name="x"), 1)
