"""Codes of values in sorted order without sorting every value: a hash pass finds the distinct
values, only those are sorted. The same result as ``np.unique(values, return_inverse=True)``
(NaN last), several times faster on millions of cells with a few thousand distinct values."""

from __future__ import annotations

import numpy as np
import pandas as pd


def sorted_codes(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(distinct values in increasing order, each value's index among them)."""
    codes, distinct = pd.factorize(np.asarray(values), use_na_sentinel=False)
    distinct = np.asarray(distinct)
    order = np.argsort(distinct, kind="stable")
    rank = np.empty(len(distinct), np.int64)
    rank[order] = np.arange(len(distinct))
    return distinct[order], rank[codes]


def stable_order(codes: np.ndarray, n_codes: int) -> np.ndarray:
    """``np.argsort(codes, kind="stable")`` for codes in 0..n_codes-1, as 16-bit keys when they
    fit (numpy sorts those by radix, in one linear pass)."""
    codes = np.asarray(codes)
    if n_codes <= np.iinfo(np.uint16).max + 1:
        codes = codes.astype(np.uint16)
    return np.argsort(codes, kind="stable")
