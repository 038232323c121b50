"""The Cox model's design and per-time sums computed by a database.

``sql_design`` gives the ``Design`` of ``cox_design.build_design`` without its rows: complete
cases on the model's variables, rows dropped per variable, treatment coding with the level
checks, centre and scale, and the collinearity check from the design's moments. ``SqlCoxSource``
answers each Newton step with one GROUP BY over the checked rows.
"""

from __future__ import annotations

import uuid
from collections.abc import Sequence

import numpy as np
import pandas as pd

from engine.aggregate.concordance_counts import BinnedConcordance, concordance_from_counts
from engine.aggregate.cox_sums import CoxSums
from engine.aggregate.sql import counted, literal, number
from engine.aggregate.sql_checks import AggregatedData
from engine.cox.design import (
    Design,
    Term,
    check_collinearity,
    constant_in_every_group,
    level_checks,
    no_complete_rows,
)
from engine.cox.fit import drop_not_estimable
from engine.errors import AnalysisError, preview_values, shown_value
from engine.sorted_codes import sorted_codes

# Score bins for Harrell's C. With 1,000 equal-width bins the invented test data (normal scores)
# were up to 8.4e-5 from the exact C (bound about 1e-3), too close to the 1e-4 aimed at; with
# 5,000 see tests/aggregate/test_competing.py and the README. The bound is reported each time.
CONCORDANCE_BINS = 5000


def sql_design(
    data: AggregatedData,
    covariates: Sequence[str],
    *,
    categorical: Sequence[str] = (),
    reference=None,
    strata: str | None = None,
    event: str = "_event",
    clusters: bool = False,
) -> tuple[Design, str, np.ndarray, tuple[str, ...]]:
    """The design, the SQL of the model's rows (``_s``, ``_time``, ``_event``, ``_entry`` and
    the scaled columns ``z0``, ``z1``, ...), the scaled columns' bounds and the terms left out
    as not estimable within the strata of the column ``strata`` (as ``fit_cox`` does).
    ``event`` is the SQL of the event (1) or not (0): a cause-specific model's cause. With
    ``clusters`` the rows without an id are left out, as ``fit_cox(clusters=...)`` does."""
    source, cols = data.source, data.covariate_columns
    covariates = list(dict.fromkeys(covariates))
    reference = dict(reference or {})
    categorical = set(categorical)
    required = model_required(data, covariates, strata=bool(strata), clusters=clusters)
    names = (["_strata"] if strata else []) + (["_id"] if clusters else []) + covariates
    cells = model_cells(data, required, event)
    missing = ", ".join(
        f"SUM(CASE WHEN {c} IS NULL THEN _n ELSE 0 END) AS m{i}" for i, c in enumerate(required)
    )
    complete = " AND ".join(f"{c} IS NOT NULL" for c in required) or "TRUE"
    row = source.query(
        f"SELECT {missing}, SUM(CASE WHEN {complete} THEN _n ELSE 0 END) AS n "
        f"FROM ({cells}) AS cells"
    ).iloc[0]
    dropped = {n: counted(row[f"m{i}"]) for i, n in enumerate(names) if counted(row[f"m{i}"])}
    n_used = counted(row["n"])
    if n_used == 0:
        raise no_complete_rows(dropped)
    model_rows = f"SELECT * FROM ({cells}) AS cells WHERE {complete}"
    terms: list[Term] = []
    columns: list[str] = []
    levels: dict = {}
    level_counts: dict = {}
    warnings: list[str] = []
    for column in covariates:
        col = cols[column]
        if column not in categorical:
            terms.append(Term(column))
            columns.append(col)
            continue
        info = data.levels[column]
        found = source.query(f"SELECT {col} AS k, SUM(_n) AS n FROM ({model_rows}) AS m GROUP BY 1")
        by_key = dict(zip(found["k"], found["n"].astype(int), strict=True))
        categories = [str(v) for v in info.labels]
        counts = {c: by_key.get(k, 0) for c, k in zip(categories, info.keys, strict=True)}
        key_of = dict(zip(categories, info.keys, strict=True))
        ref = reference.get(column, categories[0] if categories else None)
        if str(ref) not in categories:
            raise AnalysisError(
                f"Reference level {shown_value(ref)} for '{column}' is not one of its levels "
                f"{preview_values(categories, 12)}; choose one of those."
            )
        ref = str(ref)
        if counts[ref] == 0:
            raise AnalysisError(
                f"Reference level {shown_value(ref)} of '{column}' has no rows among the complete "
                "cases; choose a reference level that has rows."
            )
        label_of = dict(zip(categories, info.labels, strict=True))
        kept = level_checks(column, categories, counts, ref, warnings, label_of.get)
        levels[column] = (ref, *kept)
        level_counts[column] = {c: int(counts[c]) for c in [ref, *kept]}
        for level in kept:
            terms.append(Term(column, level, ref))
            columns.append(f"(CASE WHEN {col} = {literal(key_of[level])} THEN 1.0 ELSE 0.0 END)")
    p = len(columns)
    sums = [f"SUM(_n * {c}) AS s{i}" for i, c in enumerate(columns)]
    sums += [
        f"SUM(_n * {columns[i]} * {columns[j]}) AS p{i}_{j}" for i in range(p) for j in range(i, p)
    ]
    sums += [f"MIN({c}) AS lo{i}, MAX({c}) AS hi{i}" for i, c in enumerate(columns)]
    moments = source.query(f"SELECT {', '.join(sums)} FROM ({model_rows}) AS m").iloc[0]
    center = np.array([float(moments[f"s{i}"]) / n_used for i in range(p)])
    second = np.zeros((p, p))
    for i in range(p):
        for j in range(i, p):
            second[i, j] = second[j, i] = float(moments[f"p{i}_{j}"]) / n_used
    covariance = second - np.outer(center, center)
    scale = np.sqrt(np.clip(np.diag(covariance), 0.0, None))
    low = np.array([float(moments[f"lo{i}"]) for i in range(p)])
    high = np.array([float(moments[f"hi{i}"]) for i in range(p)])
    design = Design(
        tuple(terms),
        np.zeros((0, p)),
        np.zeros(0, bool),
        dropped,
        levels,
        level_counts,
        (),
        center,
        scale,
    )
    warnings += check_collinearity(design, covariance)
    design = Design(
        tuple(terms),
        np.zeros((0, p)),
        np.zeros(0, bool),
        dropped,
        levels,
        level_counts,
        tuple(warnings),
        center,
        scale,
    )
    not_estimable: tuple[str, ...] = ()
    if strata:
        constant = _within_strata_constant(source, model_rows, columns, center)
        design, not_estimable = drop_not_estimable(design, constant, strata)
        keep = np.setdiff1d(np.arange(p), constant)
        columns, center, scale = [columns[j] for j in keep], center[keep], scale[keep]
        low, high = low[keep], high[keep]
    scaled = [
        f"(({c} - {number(center[i])}) / {number(scale[i])})" if scale[i] > 0 else "0.0"
        for i, c in enumerate(columns)
    ]
    with np.errstate(divide="ignore", invalid="ignore"):
        bounds = np.column_stack([(low - center) / scale, (high - center) / scale])
    bounds = np.nan_to_num(bounds, nan=0.0, posinf=0.0, neginf=0.0)
    strata_column = "_strata" if strata else data.source.dialect.text("NULL")
    entry = ", _entry" if data.has_entry else ""
    z = ", ".join(f"{c} AS z{i}" for i, c in enumerate(scaled))
    rows = (
        f"SELECT {strata_column} AS _s, _time, _event{entry}{', ' + z if z else ''}, _n "
        f"FROM ({model_rows}) AS m"
    )
    return design, rows, bounds, not_estimable


def _within_strata_constant(source, model_rows: str, columns: list[str], center) -> list[int]:
    """``cox_design.within_strata_constant`` from one GROUP BY: each column's max − min per
    stratum."""
    if not columns:
        return []
    spans = ", ".join(f"MIN({c}) AS lo{i}, MAX({c}) AS hi{i}" for i, c in enumerate(columns))
    found = source.query(f"SELECT _strata, {spans} FROM ({model_rows}) AS m GROUP BY 1")
    spread = np.column_stack(
        [
            found[f"hi{i}"].to_numpy(float) - found[f"lo{i}"].to_numpy(float)
            for i in range(len(columns))
        ]
    )
    return constant_in_every_group(spread, center)


def model_required(data: AggregatedData, covariates, *, strata: bool, clusters: bool) -> list:
    """The checked cells' columns a model row must have: strata, id, then the covariates (the
    order of ``fit_cox``'s complete cases and of its rows dropped per variable)."""
    columns = [data.covariate_columns[c] for c in covariates]
    return (["_strata"] if strata else []) + (["_has_id"] if clusters else []) + columns


def model_cells(data: AggregatedData, columns: Sequence[str], event: str = "_event") -> str:
    """The SQL of the used rows merged into cells of identical (time, event, entry, model
    columns) with their count ``_n``; ``event`` is the SQL of the model's event (a
    cause-specific model's cause).

    Where the backend can keep a temporary table (DuckDB, Spark) the merge runs once and
    everything after it (missing values, level counts, moments, every Newton step) reads the
    cells: a registry's rows repeat a few thousand days and a few covariate values, so the
    cells are far fewer than the rows, and a cell of n identical rows adds n times the same
    terms, so the sums are exact. Elsewhere (a read-only PostgreSQL session) each query reads
    the checked rows, each a cell of one.
    """
    keys = ["_time", "_event"] + (["_entry"] if data.has_entry else [])
    keys += list(dict.fromkeys(columns))
    listed = ", ".join(keys)
    picked = listed.replace("_event", f"{event} AS _event", 1) if event != "_event" else listed
    rows = f"SELECT {picked}, _n FROM ({data.clean}) AS checked WHERE _reason IS NULL"
    merged = data.source.materialize(
        f"SELECT {listed}, CAST(SUM(_n) AS BIGINT) AS _n FROM ({rows}) AS r GROUP BY {listed}",
        f"hazel_model_cells_{uuid.uuid4().hex[:12]}",  # one per model: a session may hold more
    )
    return f"SELECT * FROM {merged}" if merged else rows


class SqlCoxSource:
    """Per-(stratum, time) sums at β by one GROUP BY over the model's rows in the database.

    The rows are the model's cells (``model_cells``), each weighted by its count ``_n``; where
    the backend keeps tables, their scaled design columns are computed once, not every step.
    """

    def __init__(self, data: AggregatedData, rows: str, bounds: np.ndarray, strata_labels):
        self.has_entry = "_entry" in rows
        kept = data.source.materialize(rows, f"hazel_model_design_{uuid.uuid4().hex[:12]}")
        rows = f"SELECT * FROM {kept}" if kept else rows
        self.kept = kept is not None  # one row per distinct cell, not per row of the data
        self.source, self.rows, self.bounds = data.source, rows, bounds
        self.n_columns = len(bounds)
        self.strata_code = {k: i for i, k in enumerate(strata_labels or ())}
        self.passes = 0

    def _stratum_codes(self, keys) -> np.ndarray:
        if not self.strata_code:
            return np.zeros(len(keys), np.int64)
        return pd.Series(keys, dtype=object).map(self.strata_code).to_numpy(np.int64)

    def sums(self, beta: np.ndarray, columns: np.ndarray) -> CoxSums:
        d = self.source.dialect
        q = len(columns)
        z = [f"z{int(c)}" for c in columns]
        bounds = self.bounds[columns]
        # w = exp(eta - shift) <= 1 with shift the largest eta the bounds allow
        shift = float(np.sum(np.maximum(beta * bounds[:, 0], beta * bounds[:, 1]))) if q else 0.0
        eta = " + ".join(f"{number(b)} * {c}" for b, c in zip(beta, z, strict=True)) or "0.0"
        weight = d.exp(f"{eta} - {number(shift)}")
        inner = f"SELECT _s, _time, _event, _n{', _entry' if self.has_entry else ''}"
        inner += "".join(f", {c}" for c in z) + f", {weight} AS w FROM ({self.rows}) AS r"
        total = d.total

        def block(prefix: str, mask: str) -> list[str]:
            m = f"_n * {mask} * " if mask else "_n * "
            out = [f"{total(m + 'w')} AS {prefix}0"]
            out += [f"{total(m + 'w * ' + c)} AS {prefix}1_{i}" for i, c in enumerate(z)]
            out += [
                f"{total(m + 'w * ' + z[i] + ' * ' + z[j])} AS {prefix}2_{i}_{j}"
                for i in range(q)
                for j in range(i, q)
            ]
            return out

        parts = ["_s", "_time AS t", "SUM(_n) AS n", "SUM(_n * _event) AS d"]
        parts += [f"{total('_n * _event * ' + c)} AS x{i}" for i, c in enumerate(z)]
        parts += block("s", "") + block("e", "_event")
        exits = self.source.query(
            f"SELECT {', '.join(parts)} FROM ({inner}) AS weighted GROUP BY 1, 2 ORDER BY 1, 2"
        )
        self.passes += 1
        stratum = self._stratum_codes(exits["_s"])
        order = np.lexsort((exits["t"].to_numpy(float), stratum))
        exits = exits.iloc[order].reset_index(drop=True)
        s0, s1, s2 = _block(exits, "s", q)
        d0, d1, d2 = _block(exits, "e", q)
        extra = {}
        if self.has_entry:
            entered = self.source.query(
                f"SELECT _s, _entry AS t, {', '.join(block('s', ''))} FROM ({inner}) AS weighted "
                "GROUP BY 1, 2 ORDER BY 1, 2"
            )
            self.passes += 1
            e_stratum = self._stratum_codes(entered["_s"])
            e_order = np.lexsort((entered["t"].to_numpy(float), e_stratum))
            entered = entered.iloc[e_order].reset_index(drop=True)
            e0, e1, e2 = _block(entered, "s", q)
            extra = dict(
                entry_stratum=e_stratum[e_order],
                entry_time=entered["t"].to_numpy(float),
                e0=e0,
                e1=e1,
                e2=e2,
            )
        event_x = (
            np.column_stack([exits[f"x{i}"].to_numpy(float) for i in range(q)])
            if q
            else (np.zeros((len(exits), 0)))
        )
        return CoxSums(
            stratum[order],
            exits["t"].to_numpy(float),
            exits["n"].to_numpy(np.int64),
            exits["d"].to_numpy(np.int64),
            event_x,
            s0,
            s1,
            s2,
            d0,
            d1,
            d2,
            shift,
            **extra,
        )

    def concordance(self, beta: np.ndarray, bins: int = CONCORDANCE_BINS) -> BinnedConcordance:
        """Harrell's C of the linear predictor at ``beta`` (on the scaled design): each
        distinct score its own bin when there are at most ``bins`` of them, otherwise ``bins``
        equal-width bins between the smallest and largest score; one pass for the bins (two
        with delayed entry) besides the range."""
        z = [f"z{i}" for i in range(self.n_columns)]
        eta = " + ".join(f"{number(b)} * {c}" for b, c in zip(beta, z, strict=True)) or "0.0"
        scored = f"SELECT _s, _time, _event, _n{', _entry' if self.has_entry else ''}, "
        scored += f"{eta} AS eta FROM ({self.rows}) AS r"
        distinct = self.source.query(
            f"SELECT COUNT(*) AS n FROM (SELECT DISTINCT eta FROM ({scored}) AS s "
            f"LIMIT {bins + 1}) AS v"
        )
        exact = int(distinct["n"].iloc[0]) <= bins
        if exact:
            key = "eta"
        else:
            span = self.source.query(f"SELECT MIN(eta) AS lo, MAX(eta) AS hi FROM ({scored}) s")
            lo, hi = float(span["lo"].iloc[0]), float(span["hi"].iloc[0])
            width = number(bins / (hi - lo))
            key = f"LEAST(CAST(FLOOR((eta - {number(lo)}) * {width}) AS BIGINT), {bins - 1})"
        stratum = "_s" if self.strata_code else "NULL"  # no text column of NULLs to fetch

        def counts_of(columns: str, keys: str) -> dict:
            """Rows per (stratum, bin, ...). The kept cells need no merging for exact bins: the
            counting below adds up cells that share a bin and a time, pair by pair the same."""
            if exact and self.kept:
                return self.source.query_columns(f"SELECT {columns}, _n AS n FROM ({scored}) r")
            return self.source.query_columns(
                f"SELECT {columns}, CAST(SUM(_n) AS BIGINT) AS n FROM ({scored}) AS r "
                f"GROUP BY {keys}"
            )

        exits = counts_of(f"{stratum} AS s, {key} AS b, _time AS t, _event AS e", "1, 2, 3, 4")
        self.passes += 1
        entries = None
        if self.has_entry:
            entries = counts_of(f"{stratum} AS s, {key} AS b, _entry AS t", "1, 2, 3")
            self.passes += 1
        if exact:
            scores, exit_bins = sorted_codes(np.asarray(exits["b"], float))
            n_bins = len(scores)

            def coded(columns):
                if columns is exits:
                    return exit_bins
                return np.searchsorted(scores, np.asarray(columns["b"], float))
        else:
            n_bins = bins

            def coded(columns):
                return np.asarray(columns["b"], np.int64)

        exit_cells = {
            "stratum": self._stratum_codes(exits["s"]),
            "bin": coded(exits),
            "time": np.asarray(exits["t"], float),
            "event": np.asarray(exits["e"], np.int64),
            "rows": np.asarray(exits["n"], np.int64),
        }
        entry_cells = None
        if entries is not None:
            entry_cells = {
                "stratum": self._stratum_codes(entries["s"]),
                "bin": coded(entries),
                "entry": np.asarray(entries["t"], float),
                "rows": np.asarray(entries["n"], np.int64),
            }
        return concordance_from_counts(exit_cells, entry_cells, n_bins, exact=exact)


def _block(frame: pd.DataFrame, prefix: str, q: int):
    g = len(frame)
    s0 = frame[f"{prefix}0"].to_numpy(float)
    s1 = np.zeros((g, q))
    s2 = np.zeros((g, q, q))
    for i in range(q):
        s1[:, i] = frame[f"{prefix}1_{i}"].to_numpy(float)
        for j in range(i, q):
            s2[:, i, j] = s2[:, j, i] = frame[f"{prefix}2_{i}_{j}"].to_numpy(float)
    return s0, s1, s2
