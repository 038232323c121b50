"""Checks of a fitted Cox model: proportional hazards, log-minus-log curves, functional form.

The proportional-hazards test is the Grambsch–Therneau (1994) approximation from scaled
Schoenfeld residuals r*_k = beta + d V r_k (d events, V the coefficients' covariance): with g the
transformed event times centred on their mean and u = sum_k g_k r*_k, a set J of terms gives
    T_J = u_J' (V_JJ)^-1 u_J / (d sum_k g_k^2)   on |J| degrees of freedom,
per term (|J| = 1), per variable (all levels of a categorical) and for all terms together.

The time scale g is named in words: "survival" (1 − the Kaplan–Meier estimate just before each
event time, the default), "rank" (the ranks of the event times), "time" (time as recorded) and
"log-time" (its logarithm).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from engine.cox.fit import ChiSquareTest, CoxResult, chi_square
from engine.cox.likelihood import baseline_hazard, event_means, row_totals
from engine.errors import AnalysisError, preview_values
from engine.survival.curves import kaplan_meier

TIME_SCALES = ("survival", "rank", "time", "log-time")
TIME_SCALE_WORDS = {
    "survival": "time transformed by the Kaplan–Meier estimate (1 − survival just before it)",
    "rank": "the ranks of the event times",
    "time": "time as recorded",
    "log-time": "the logarithm of time",
}
ALL_TERMS = "All terms together"  # the joint test's row label
FUNCTIONAL_FORM_BINS = 20


def _km_step(time: np.ndarray, event: np.ndarray, at: np.ndarray, side: str, entry=None):
    """Kaplan–Meier survival at each time in ``at``: just before it (``side="left"``) or at it
    (``side="right"``), from the shared estimator (rows at risk on (entry, time] with ``entry``)."""
    curve = kaplan_meier(time, event, entry=entry)
    survival = np.concatenate([[1.0], curve.survival])
    return survival[np.searchsorted(curve.time, at, side=side)]


def transform_times(time_scale: str, event_times, all_times, all_events, entry=None) -> np.ndarray:
    """The time scale g(t) at each event time for the proportional-hazards test; the survival
    scale counts a row at risk on (entry, time] when entry times are given (episodes, delayed
    entry), so splitting follow-up into episodes leaves it unchanged."""
    if time_scale == "time":
        return np.asarray(event_times, dtype=float)
    if time_scale == "log-time":
        if np.any(np.asarray(event_times) <= 0):
            raise AnalysisError(
                "The log-time scale needs positive event times; some events are at time 0. "
                "Use the survival, rank or time scale."
            )
        return np.log(event_times)
    if time_scale == "rank":
        return stats.rankdata(event_times)
    if time_scale == "survival":
        return 1 - _km_step(
            np.asarray(all_times), np.asarray(all_events), event_times, "left", entry
        )
    raise AnalysisError(
        f"Time scale {time_scale!r} of the proportional-hazards check is not known; use one of "
        f"{preview_values(TIME_SCALES)}."
    )


@dataclass(frozen=True)
class SchoenfeldResiduals:
    """Scaled Schoenfeld residuals, one row per event, one column per term (plus beta)."""

    table: pd.DataFrame  # row (frame index), time, stratum, transformed_time, one column per term
    raw: np.ndarray  # unscaled residuals, events x terms
    scaled: np.ndarray | None = None  # scaled residuals (beta(t)), events x terms

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def points(self, label: str) -> pd.DataFrame:
        """``x`` (time on the check's scale) and ``residual`` (beta(t)) of one term, for its
        plot: read by position, so a covariate named like a column here ("time") is no
        trouble."""
        labels = list(self.table.columns[4:])
        return pd.DataFrame(
            {
                "x": self.table.iloc[:, 3].to_numpy(),
                "residual": self.scaled[:, labels.index(label)],
            }
        )

    def to_dict(self) -> dict:
        clean = self.table.astype(object).where(self.table.notna(), None)
        return {str(k): list(v) for k, v in clean.to_dict(orient="list").items()}


def schoenfeld_residuals(result: CoxResult, time_scale: str = "survival") -> SchoenfeldResiduals:
    model = result.model
    layout = model.layout
    gamma = model.beta * model.scale
    ev = layout.event_rows
    means = event_means(layout, model.scaled, gamma, result.ties)
    raw = (model.scaled[ev] - means) * model.scale
    scaled = model.beta + layout.n_events * raw @ model.covariance
    event_times = layout.time[ev]
    g = transform_times(time_scale, event_times, layout.time, layout.event, model.entry)
    table = pd.DataFrame(
        {
            "row": model.used_index[layout.order[ev]],
            "time": event_times,
            "stratum": (
                np.asarray(model.strata_levels, dtype=object)[layout.stratum[ev]]
                if model.strata_levels
                else None
            ),
            "transformed_time": g,
        }
    )
    labels = [t.label for t in result.design.terms]
    table = pd.concat([table, pd.DataFrame(scaled, columns=labels)], axis=1)
    return SchoenfeldResiduals(table, raw, scaled)


@dataclass(frozen=True)
class PHTest:
    time_scale: str
    terms: tuple[ChiSquareTest, ...]  # one per term, named by its label
    variables: tuple[ChiSquareTest, ...]  # one per variable (joint over a categorical's levels)
    all_terms: ChiSquareTest  # every term at once

    @property
    def checks(self) -> tuple[ChiSquareTest, ...]:
        """Per variable, then all terms together: the rows a table of the check shows."""
        return (*self.variables, self.all_terms)

    def to_frame(self) -> pd.DataFrame:
        rows = [("term", t) for t in self.terms] + [("variable", t) for t in self.variables]
        rows.append(("all terms", self.all_terms))
        return pd.DataFrame(
            [{"tested": kind, **vars(t), "time_scale": self.time_scale} for kind, t in rows]
        )

    def to_dict(self) -> dict:
        """The command line's ``cox.ph_check``: the time scale, one test per variable and the
        joint test of all terms."""
        all_terms = self.all_terms.to_dict()
        del all_terms["variable"]
        return {
            "time_scale": self.time_scale,
            "terms": [t.to_dict() for t in self.variables],
            "all_terms": all_terms,
        }


def proportional_hazards_test(
    result: CoxResult,
    time_scale: str = "survival",
    residuals: SchoenfeldResiduals | None = None,
) -> PHTest:
    """Grambsch–Therneau test per term, per variable and for all terms together (see the
    module docstring)."""
    if residuals is None:
        residuals = schoenfeld_residuals(result, time_scale)
    g = residuals.table.iloc[:, 3].to_numpy(dtype=float)  # transformed_time, by position
    g = g - g.mean()
    d = result.model.layout.n_events
    covariance = result.model.covariance
    with np.errstate(over="ignore", invalid="ignore"):  # beyond floats: no test (NaN), below
        u = d * (g @ residuals.raw) @ covariance  # sum_k g_k r*_k (beta drops out: sum g_k = 0)
        denominator = d * float(g @ g)
    return ph_test_from_sums(u, denominator, covariance, result.design, time_scale)


def ph_test_from_sums(u, denominator, covariance, design, time_scale: str) -> PHTest:
    """The per-term, per-variable and GLOBAL tests from u = Σ g_k r*_k and d Σ g_k² (rows in
    memory and per-time sums give the same two quantities)."""

    def joint(name, cols):
        untestable = ChiSquareTest(name, float("nan"), len(cols), float("nan"))
        if not denominator > 0 or not np.all(np.isfinite(u[cols])):
            return untestable  # no spread of the time scale, or sums beyond floats
        block = covariance[np.ix_(cols, cols)]
        try:
            with np.errstate(over="ignore", invalid="ignore"):
                statistic = u[cols] @ np.linalg.solve(block, u[cols]) / denominator
        except np.linalg.LinAlgError:  # a singular block (a covariate equal to time): no test
            return untestable
        return chi_square(name, statistic, len(cols)) if np.isfinite(statistic) else untestable

    terms = tuple(joint(t.label, np.array([j])) for j, t in enumerate(design.terms))
    variables = tuple(joint(v, design.columns_of(v)) for v in design.variables)
    all_terms = joint(ALL_TERMS, np.arange(len(design.terms)))
    return PHTest(time_scale, terms, variables, all_terms)


@dataclass(frozen=True)
class LogMinusLog:
    """log(-log S(t)) against log t per level: parallel curves support proportional hazards."""

    table: pd.DataFrame  # level, time, survival, log_time, log_minus_log

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def to_dict(self) -> list[dict]:
        return self.table.astype(object).to_dict(orient="records")


def log_minus_log(
    frame: pd.DataFrame, variable: str, *, time_col: str = "_time", event_col: str = "_event"
) -> LogMinusLog:
    """Kaplan–Meier per level of ``variable`` at its event times, on the log-minus-log scale."""
    if variable not in frame.columns:
        raise AnalysisError(f"Column '{variable}' is not in the data; choose a categorical column.")
    present = frame[[variable, time_col, event_col]].dropna()
    values = pd.Categorical(present[variable])
    if len(values.categories) > 50:
        raise AnalysisError(
            f"'{variable}' has {len(values.categories)} levels; a log-minus-log plot needs a "
            "categorical variable with a few levels."
        )
    pieces = []
    for level in values.categories:
        rows = present[np.asarray(values == level)]
        time = rows[time_col].to_numpy(dtype=float)
        event = rows[event_col].to_numpy() == 1
        at = np.unique(time[event])
        at = at[at > 0]
        survival = _km_step(time, event, at, "right")
        keep = (survival > 0) & (survival < 1)
        pieces.append(
            pd.DataFrame(
                {
                    "level": str(level),
                    "time": at[keep],
                    "survival": survival[keep],
                    "log_time": np.log(at[keep]),
                    "log_minus_log": np.log(-np.log(survival[keep])),
                }
            )
        )
    return LogMinusLog(pd.concat(pieces, ignore_index=True))


@dataclass(frozen=True)
class MartingaleResiduals:
    """Residuals per row used, against each numeric covariate, for a functional-form plot.

    ``residual_null`` comes from the model without covariates (the usual choice for reading the
    form of a covariate's effect); ``residual`` from the fitted model. ``bins`` holds the mean
    null residual within quantile bins of each covariate, a simple smoother to draw over them.
    """

    table: pd.DataFrame  # row (frame index), variable, value, residual, residual_null
    bins: pd.DataFrame  # variable, value (bin mean), residual_null (bin mean), n

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def to_dict(self) -> dict:
        return {"bins": self.bins.astype(object).to_dict(orient="records")}


def martingale_residuals(result: CoxResult) -> MartingaleResiduals:
    model, design = result.model, result.design
    layout = model.layout
    eta = model.scaled @ (model.beta * model.scale)
    fitted = row_totals(layout, baseline_hazard(layout, eta)) * np.exp(eta)
    null = row_totals(layout, baseline_hazard(layout, np.zeros(len(eta))))
    residual = layout.event - fitted
    residual_null = layout.event - null
    x_sorted = design.matrix[layout.order]
    rows = model.used_index[layout.order]
    tables, bins = [], []
    for variable in design.variables:
        if variable in design.levels:
            continue
        value = x_sorted[:, design.columns_of(variable)[0]]
        tables.append(
            pd.DataFrame(
                {
                    "row": rows,
                    "variable": variable,
                    "value": value,
                    "residual": residual,
                    "residual_null": residual_null,
                }
            )
        )
        edges = np.unique(np.quantile(value, np.linspace(0, 1, FUNCTIONAL_FORM_BINS + 1)))
        which = np.clip(np.searchsorted(edges, value, side="right") - 1, 0, len(edges) - 2)
        count = np.bincount(which, minlength=len(edges) - 1)
        nonempty = count > 0
        bins.append(
            pd.DataFrame(
                {
                    "variable": variable,
                    "value": (np.bincount(which, value) / np.maximum(count, 1))[nonempty],
                    "residual_null": (np.bincount(which, residual_null) / np.maximum(count, 1))[
                        nonempty
                    ],
                    "n": count[nonempty],
                }
            )
        )
    columns = ["row", "variable", "value", "residual", "residual_null"]
    table = pd.concat(tables, ignore_index=True) if tables else pd.DataFrame(columns=columns)
    bin_frame = (
        pd.concat(bins, ignore_index=True)
        if bins
        else pd.DataFrame(columns=["variable", "value", "residual_null", "n"])
    )
    return MartingaleResiduals(table, bin_frame)
