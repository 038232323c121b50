"""``sorted_codes`` and ``stable_order`` against numpy's own unique and stable argsort (an exact
property: the same arrays)."""

import numpy as np
import pytest

from engine.sorted_codes import sorted_codes, stable_order


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_sorted_codes_equal_numpy_unique(seed):
    rng = np.random.default_rng(seed)
    values = np.round(rng.normal(0, 3, 20_000), 1)
    values[:5] = [np.inf, -np.inf, -0.0, 0.0, np.nan]
    distinct, codes = sorted_codes(values)
    expected, inverse = np.unique(values, return_inverse=True)
    np.testing.assert_array_equal(distinct, expected)  # NaN last in both, compared as equal
    np.testing.assert_array_equal(codes, inverse)


def test_sorted_codes_of_text_and_empty():
    distinct, codes = sorted_codes(np.array(["b", "a", "c", "a"], dtype=object))
    assert list(distinct) == ["a", "b", "c"] and list(codes) == [1, 0, 2, 0]
    distinct, codes = sorted_codes(np.array([], float))
    assert len(distinct) == 0 and len(codes) == 0


@pytest.mark.parametrize("n_codes", [3, 70_000])
def test_stable_order_equals_stable_argsort(n_codes):
    codes = np.random.default_rng(5).integers(0, n_codes, 50_000)
    np.testing.assert_array_equal(stable_order(codes, n_codes), np.argsort(codes, kind="stable"))
