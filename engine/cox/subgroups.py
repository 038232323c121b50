"""Subgroup effects: a two-level treatment's hazard ratio within the levels of other variables.

Each row of the table is a Cox model of the treatment alone fitted on one subgroup (the model's
strata, entry times and clusters kept), so it equals a separate fit on those rows. The
interaction test for a variable is the likelihood-ratio test of the model with treatment,
subgroup and their product terms against the model without the products, on the rows where
both are known (df = levels - 1). Numeric variables with more than a few distinct values are cut
at their quantiles into groups of about equal size.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.cox.fit import ChiSquareTest, chi_square, fit_cox
from engine.errors import AnalysisError, HazelError, preview_values
from engine.json_values import json_float
from engine.prepare.columns import cut_at_quantiles

CAUTION = (
    "Subgroup results are exploratory. With many subgroups some differences arise by chance "
    "alone (multiplicity), and a hazard ratio that looks different in one subgroup is not "
    "evidence that the treatment works differently there: judge that by the interaction test, "
    "and read any subgroup finding as a question for a new study, not an answer."
)
FEW_DISTINCT = 5  # a numeric variable with at most this many values is used level by level
TREATMENT = "_treatment"  # 0/1 indicator of the second treatment level
SUBGROUP = "_subgroup"


@dataclass(frozen=True)
class SubgroupRow:
    variable: str | None  # None for the row of all subjects
    level: str | None
    n: int  # subjects (distinct ids when rows are episodes)
    events: int
    hazard_ratio: float | None
    lower: float | None
    upper: float | None
    p_value: float | None
    note: str | None = None  # why no hazard ratio is given

    def to_dict(self) -> dict:
        return {
            "variable": self.variable,
            "level": self.level,
            "n": int(self.n),
            "events": int(self.events),
            **{
                k: json_float(getattr(self, k))
                for k in ("hazard_ratio", "lower", "upper", "p_value")
            },
            "note": self.note,
        }


@dataclass(frozen=True)
class SubgroupResult:
    treatment: str  # e.g. "arm: B vs A"
    overall: SubgroupRow
    rows: tuple[SubgroupRow, ...]
    interactions: tuple[ChiSquareTest, ...]
    caution: str = CAUTION

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([vars(r) for r in (self.overall, *self.rows)])

    def to_dict(self) -> dict:
        return {
            "treatment": self.treatment,
            "overall": self.overall.to_dict(),
            "rows": [r.to_dict() for r in self.rows],
            "interactions": [t.to_dict() for t in self.interactions],
            "caution": self.caution,
        }


def subgroup_levels(values: pd.Series, groups: int, name: str) -> pd.Series:
    """The subgroup of each row: a category's levels, a numeric column's few values, or a
    numeric column cut at its quantiles into ``groups`` groups."""
    if isinstance(values.dtype, pd.CategoricalDtype):
        return values.cat.remove_unused_categories()
    numbers = pd.to_numeric(values, errors="coerce")
    numeric = pd.api.types.is_numeric_dtype(values) or bool(
        numbers.notna().sum() == values.notna().sum()
    )
    if numeric and numbers.nunique() > FEW_DISTINCT:
        return cut_at_quantiles(numbers, groups, name)
    kept = values.astype("string").astype(object).where(values.notna())
    if numeric:
        order = sorted(numbers.dropna().unique())
        text = [f"{v:g}" for v in order]
        kept = numbers.map(lambda v: None if pd.isna(v) else f"{v:g}")
        return pd.Series(pd.Categorical(kept, categories=text), index=values.index, name=name)
    from engine.prepare.roles import natural_sort_key

    levels = sorted(kept.dropna().unique(), key=natural_sort_key)
    return pd.Series(pd.Categorical(kept, categories=levels), index=values.index, name=name)


def fit_subgroups(
    frame: pd.DataFrame,
    variables: Mapping[str, pd.Series],
    *,
    treatment: str = "_group",
    treatment_name: str = "treatment",
    groups: int = 2,
    **cox_options,
) -> SubgroupResult:
    """Hazard ratio of the treatment's second level against its first in every level of each
    variable (``variables``: name -> values aligned with ``frame``), and interaction tests.
    ``cox_options`` go to ``fit_cox`` (strata, entry, clusters, ties, confidence, variance)."""
    if not variables:
        raise AnalysisError("Subgroup effects need at least one subgroup variable; choose one.")
    arms = frame[treatment]
    arms = arms.astype("category") if not isinstance(arms.dtype, pd.CategoricalDtype) else arms
    present = [c for c in arms.cat.categories if (arms == c).any()]
    if len(present) != 2:
        raise AnalysisError(
            f"Subgroup effects compare two treatment groups, but '{treatment_name}' has "
            f"{len(present)} level(s) with rows ({preview_values(present, 8)}); choose a group "
            "column with exactly two levels."
        )
    control, active = present
    work = frame.assign(
        **{TREATMENT: np.where(arms.isna(), np.nan, (arms == active).to_numpy(dtype=float))}
    )
    options = {**cox_options, "without_each": False}
    clusters = options.get("clusters")
    overall = _row(work, None, None, options, clusters)
    rows, interactions = [], []
    for name, values in variables.items():
        levels = subgroup_levels(pd.Series(values, index=frame.index), groups, name)
        with_level = work.assign(**{SUBGROUP: levels})
        for level in levels.cat.categories:
            inside = with_level[(levels == level).to_numpy()]
            rows.append(_row(inside, name, str(level), options, clusters))
        interactions.append(_interaction(with_level, name, levels, options))
    return SubgroupResult(
        treatment=f"{treatment_name}: {active} vs {control}",
        overall=overall,
        rows=tuple(rows),
        interactions=tuple(interactions),
    )


def _row(rows: pd.DataFrame, variable, level, options, clusters) -> SubgroupRow:
    known = rows[rows[TREATMENT].notna()]
    n = int(known[clusters].nunique()) if clusters else len(known)
    events = int(known["_event"].sum())
    arm_events = known.groupby(known[TREATMENT])["_event"].sum()
    if len(arm_events) < 2 or (arm_events == 0).any():
        return SubgroupRow(variable, level, n, events, None, None, None, None, _NO_EVENTS)
    try:
        term = fit_cox(known, [TREATMENT], **options).terms[0]
    except HazelError as exc:
        return SubgroupRow(variable, level, n, events, None, None, None, None, str(exc))
    return SubgroupRow(
        variable, level, n, events, term.hazard_ratio, term.lower, term.upper, term.p_value
    )


_NO_EVENTS = "no events in one of the treatment groups: no hazard ratio"


def _interaction(with_level: pd.DataFrame, name: str, levels: pd.Series, options):
    """LR test of treatment-by-subgroup product terms (df = levels - 1)."""
    rows = with_level[with_level[TREATMENT].notna() & levels.notna().to_numpy()]
    kept = [c for c in levels.cat.categories if (rows[SUBGROUP] == c).any()]
    if len(kept) < 2:
        return ChiSquareTest(name, float("nan"), 0, float("nan"))
    products = {
        f"_product_{j}": rows[TREATMENT].to_numpy() * (rows[SUBGROUP] == level).to_numpy()
        for j, level in enumerate(kept[1:])
    }
    rows = rows.assign(**products, **{SUBGROUP: rows[SUBGROUP].cat.set_categories(kept)})
    main = [TREATMENT, SUBGROUP]
    try:
        without = fit_cox(rows, main, categorical=[SUBGROUP], **options)
        with_products = fit_cox(rows, [*main, *products], categorical=[SUBGROUP], **options)
    except HazelError:
        return ChiSquareTest(name, float("nan"), len(kept) - 1, float("nan"))
    return chi_square(name, 2 * (with_products.loglik - without.loglik), len(kept) - 1)
