"""Competing risks: cumulative incidence of each cause by the Aalen–Johansen estimator.

With several kinds of event, the probability of having had event j by time t is

    F_j(t) = sum over event times t_i <= t of S(t_i-) d_ji / n_i

where S is the Kaplan–Meier survival from any cause, d_ji the events of cause j at t_i and n_i the
number at risk. One minus the Kaplan–Meier curve that treats other causes as censored estimates
the risk in a world where the competing events could not happen, and so overstates F_j; it is
returned alongside for comparison only.

Variance: the delta-method (Greenwood-type) estimator given by Collett (2015, Modelling Survival
Data in Medical Research, 3rd ed., section 12.2.3; also Marubini and Valsecchi 1995, section
10.2), the one lifelines' AalenJohansenFitter uses, computed here with cumulative sums in O(n).
Pointwise intervals are built on the log(-log F) scale so they stay within (0, 1).

Cause-specific Cox models treat the other causes as censored: each estimates the effect of the
covariates on the hazard of one cause among those still free of every event
(engine.cox.fit.fit_cox).

Risk set convention, as in the Kaplan–Meier code: a subject is at risk at time t when
``entry < t <= time`` (``time >= t`` without entry times). Tied times of different causes are
handled as the estimator defines them (no jittering).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import norm

from engine.cox.fit import CoxResult, fit_cox
from engine.errors import AnalysisError, NoRowsError, every_group_missing, preview_values
from engine.json_values import frame_records
from engine.survival.risk_table import as_float_array, at_risk_at, checked_entry, group_codes

VARIANCE_METHOD = (
    "delta method (Greenwood-type), Collett 2015 section 12.2.3; intervals on the log(-log) scale"
)
TABLE_COLUMNS = [
    "group",
    "cause",
    "time",
    "n_at_risk",
    "n_events_cause",
    "n_events_any",
    "n_censored",
    "cumulative_incidence",
    "std_error",
    "lower",
    "upper",
    "one_minus_km",
]


@dataclass(frozen=True)
class CumulativeIncidence:
    """Cumulative incidence of each cause, overall or per group, as step functions in time."""

    causes: tuple[str, ...]
    groups: tuple[str, ...]  # empty when not split by group
    confidence_level: float
    variance_method: str
    table: pd.DataFrame  # TABLE_COLUMNS; group is None for all subjects together
    warning: str | None  # set when competing events exist: 1 - KM would overstate incidence
    # with delayed entry: each group's (or all rows') entry times, ascending, in table order
    entries: tuple[np.ndarray, ...] | None = None

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def to_dict(self) -> dict:
        return {
            "causes": list(self.causes),
            "groups": list(self.groups),
            "confidence_level": float(self.confidence_level),
            "variance_method": self.variance_method,
            "warning": self.warning,
            "table": frame_records(self.table),
        }

    def at(self, times) -> pd.DataFrame:
        """Cumulative incidence (with interval) at chosen times, per group and cause; the
        number at risk at t counts ``entry < t <= time`` (``risk_table.at_risk_at``, the rule
        of the curves' numbers at risk)."""
        times = np.asarray(times, dtype=float).reshape(-1)
        keys = ["group", "cause"]
        pieces = []
        piece, _ = pd.factorize(self.table["group"], use_na_sentinel=False)  # table order
        for (group, cause), rows in self.table.groupby(keys, sort=False, dropna=False):
            idx = np.searchsorted(rows["time"].to_numpy(), times, side="right") - 1
            picked = rows.iloc[np.maximum(idx, 0)]
            observed = (rows["n_events_any"] + rows["n_censored"]).to_numpy() > 0  # not the pad
            entries = None if self.entries is None else self.entries[piece[rows.index[0]]]
            n_at_risk = at_risk_at(
                rows["time"].to_numpy()[observed],
                rows["n_at_risk"].to_numpy()[observed],
                times,
                entries,
            )
            out = pd.DataFrame(
                {
                    "group": group,
                    "cause": cause,
                    "time": times,
                    "n_at_risk": n_at_risk,
                    "cumulative_incidence": picked["cumulative_incidence"].to_numpy(),
                    "lower": picked["lower"].to_numpy(),
                    "upper": picked["upper"].to_numpy(),
                }
            )
            before = idx < 0
            out.loc[before, ["cumulative_incidence", "lower", "upper"]] = 0.0
            pieces.append(out)
        return pd.concat(pieces, ignore_index=True)


def _cause_codes(cause, n: int) -> tuple[np.ndarray, tuple[str, ...]]:
    """Codes 0..k-1 for the causes (category order if Categorical, else sorted), -1 censored."""
    if isinstance(getattr(cause, "dtype", None), pd.CategoricalDtype):
        order = [str(c) for c in cause.cat.categories]
    else:
        order = None
    values = np.asarray(cause, dtype=object).reshape(-1)
    if values.shape[0] != n:
        raise AnalysisError(f"There are {values.shape[0]} causes for {n} times; give one per row.")
    raw_codes, uniques = pd.factorize(values, use_na_sentinel=True)  # None / NaN -> -1
    names = [str(u) for u in uniques]
    present = set(names)
    labels = tuple(c for c in order if c in present) if order else tuple(sorted(present))
    position = {name: i for i, name in enumerate(labels)}
    lookup = np.array([position[name] for name in names] + [-1], dtype=np.intp)
    return lookup[raw_codes], labels  # raw code -1 picks the trailing -1


def no_events_error() -> AnalysisError:
    """The one sentence for data in which no row has an event (memory and databases)."""
    return AnalysisError(
        "There are no events of any cause (every row is censored); cumulative incidence needs "
        "at least one event. Check the event coding."
    )


def _cause_counts(time, codes, n_causes: int, entry):
    """Per distinct time of one set of subjects: the times, rows leaving, events of each cause
    (times x causes) and rows at risk; the only things the estimate depends on."""
    times, key = np.unique(time, return_inverse=True)
    m = times.shape[0]
    removed = np.bincount(key, minlength=m)
    is_event = codes >= 0
    by_cause = np.bincount(
        key[is_event] * n_causes + codes[is_event], minlength=m * n_causes
    ).reshape(m, n_causes)
    at_risk = np.cumsum(removed[::-1])[::-1]
    if entry is not None:
        entered_after = np.searchsorted(times, entry, side="right")  # distinct times <= entry
        not_yet = np.cumsum(np.bincount(entered_after, minlength=m + 1)[::-1])[::-1][1:]
        at_risk = at_risk - not_yet
    return times, removed, by_cause, at_risk


def incidence_table(times, removed, by_cause, at_risk, z: float) -> dict[str, np.ndarray]:
    """Aalen–Johansen estimate for every cause from the per-time counts of ``_cause_counts``
    (a database gives the same counts; ``engine.aggregate.competing``)."""
    m, n_causes = by_cause.shape
    d_any = by_cause.sum(axis=1)
    n = at_risk.astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        hazard_any = np.where(n > 0, d_any / n, 0.0)
        surv = np.cumprod(1.0 - hazard_any)
        surv_lag = np.r_[1.0, surv[:-1]]
        # Greenwood-type term; zero when everyone at risk has the event (its weight F(t) - F(t_i)
        # is then zero at every later time, the estimate being constant from there on).
        a = np.where(n > d_any, d_any / (n * (n - d_any)), 0.0)
    # Every cause's curve starts at time 0, before anything has happened (unless a time is 0).
    pad = 1 if times[0] > 0 else 0
    zero = np.zeros(pad)

    def padded(values, first=0.0):
        return np.r_[np.full(pad, first, dtype=np.asarray(values).dtype), values]

    columns: dict[str, list] = {c: [] for c in TABLE_COLUMNS if c != "group"}
    columns["cause_code"] = columns.pop("cause")
    for j in range(n_causes):
        d_j = by_cause[:, j].astype(np.float64)
        with np.errstate(divide="ignore", invalid="ignore"):
            h_j = np.where(n > 0, d_j / n, 0.0)
            b = np.where(n > 0, surv_lag**2 * d_j * (n - d_j) / n**3, 0.0)
            c = np.where(n > 0, surv_lag * d_j / n**2, 0.0)
        cif = np.cumsum(surv_lag * h_j)
        cif = np.minimum(cif, 1.0)
        var = (
            cif**2 * np.cumsum(a)
            - 2 * cif * np.cumsum(a * cif)
            + np.cumsum(a * cif**2)
            + np.cumsum(b)
            - 2 * (cif * np.cumsum(c) - np.cumsum(c * cif))
        )
        var = np.maximum(var, 0.0)
        se = np.sqrt(var)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # exp(inf) -> bound 0
            log_f = np.log(cif)
            se_t = se / (cif * np.abs(log_f))
            centre = np.log(-log_f)
            lower = np.exp(-np.exp(centre + z * se_t))
            upper = np.exp(-np.exp(centre - z * se_t))
        # At 0 (nothing yet) or 1 (every subject had this cause) the estimate is its own bound.
        lower = np.where(cif <= 0, 0.0, np.where(cif >= 1, 1.0, lower))
        upper = np.where(cif <= 0, 0.0, np.where(cif >= 1, 1.0, upper))
        one_minus_km = 1.0 - np.cumprod(1.0 - h_j)
        values = {
            "cause_code": np.full(m + pad, j, dtype=np.intp),
            "time": np.r_[zero, times],
            "n_at_risk": padded(at_risk, at_risk[0]),
            "n_events_cause": padded(by_cause[:, j]),
            "n_events_any": padded(d_any),
            "n_censored": padded(removed - d_any),
            "cumulative_incidence": padded(cif),
            "std_error": padded(se),
            "lower": padded(lower),
            "upper": padded(upper),
            "one_minus_km": padded(one_minus_km),
        }
        for key_, array in values.items():
            columns[key_].append(array)
    return {k: np.concatenate(v) for k, v in columns.items()}


def aalen_johansen(
    time, cause, *, entry=None, group=None, confidence_level: float = 0.95
) -> CumulativeIncidence:
    """Cumulative incidence per cause from arrays; ``cause`` holds a cause name or None (censored).

    With ``group`` (a Categorical or array) the estimate is made within each group level, in
    category order; levels with no rows are left out.
    """
    if not 0 < confidence_level < 1:
        raise AnalysisError(f"Confidence level must lie in (0, 1); got {confidence_level!r}.")
    time = as_float_array(time, "_time")
    n = time.shape[0]
    if n == 0:
        raise NoRowsError()
    codes, causes = _cause_codes(cause, n)
    if not causes:
        raise no_events_error()
    if entry is not None:
        entry = checked_entry(entry, time)
    z = float(norm.ppf(0.5 + confidence_level / 2))
    if group is None:
        parts = [(None, None)]
    else:
        # rows without a group count in no group (as for the curves)
        series = group if isinstance(group, pd.Series) else pd.Series(group)
        codes_g, labels = group_codes(series, n, missing_as_extra=True)
        parts = [
            (str(label), codes_g == i) for i, label in enumerate(labels) if (codes_g == i).any()
        ]
    pieces, entries = [], []
    for label, mask in parts:
        sub_entry = entry if entry is None or mask is None else entry[mask]
        if mask is None:
            counts = _cause_counts(time, codes, len(causes), entry)
        else:
            counts = _cause_counts(time[mask], codes[mask], len(causes), sub_entry)
        pieces.append((label, incidence_table(*counts, z)))
        entries.append(None if sub_entry is None else np.sort(sub_entry))
    return incidence_result(pieces, causes, confidence_level, None if entry is None else entries)


def incidence_result(pieces, causes: tuple[str, ...], confidence_level: float, entries=None):
    """The ``CumulativeIncidence`` of (group label or None, ``incidence_table``) pieces, with
    delayed entry each piece's entry times (ascending) in ``entries``."""
    if not pieces:  # by group, and no row has a group
        raise every_group_missing(
            "Cumulative incidence", "Show it for all rows or choose another group column."
        )
    for label, arrays in pieces:
        arrays["group"] = np.full(arrays["time"].shape[0], label, dtype=object)
    merged = {k: np.concatenate([p[k] for _, p in pieces]) for k in pieces[0][1]}
    cause_code = merged.pop("cause_code")
    gap = merged["one_minus_km"] - merged["cumulative_incidence"]
    gaps = {c: float(gap[cause_code == j].max()) for j, c in enumerate(causes)}
    merged["cause"] = np.asarray(causes, dtype=object)[cause_code]
    table = pd.DataFrame({c: merged[c] for c in TABLE_COLUMNS})
    return CumulativeIncidence(
        causes=causes,
        groups=tuple(label for label, _ in pieces if label is not None),
        confidence_level=float(confidence_level),
        variance_method=VARIANCE_METHOD,
        table=table,
        warning=_overstatement_warning(gaps),
        entries=None if entries is None else tuple(entries),
    )


def _overstatement_warning(gaps: dict[str, float]) -> str | None:
    """Text shown when several causes exist; ``gaps`` = largest (1 - KM) - CIF per cause."""
    if len(gaps) < 2:
        return None
    worst = max(gaps, key=gaps.get)
    return (
        "There are competing events (" + ", ".join(gaps) + "). One minus the Kaplan–Meier "
        "curve that treats the other causes as censored overstates the cumulative incidence: it "
        "estimates the risk in a world where the competing events could not happen. Read the "
        "cumulative incidence (Aalen–Johansen) curves instead; here 1 − KM exceeds them by up to "
        f"{gaps[worst]:.3f} (cause {worst})."
    )


def cumulative_incidence(
    frame: pd.DataFrame, *, by_group: bool = True, confidence_level: float = 0.95
) -> CumulativeIncidence:
    """Cumulative incidence per cause from a prepared frame (``_time``, ``_cause`` or ``_event``).

    Without a ``_cause`` column the single event of ``_event`` is the only cause, named "event".
    ``_entry`` is honoured when present; ``_group`` splits the estimate when ``by_group``.
    """
    if "_cause" in frame.columns:
        cause = frame["_cause"]
    elif "_event" in frame.columns:
        cause = np.where(frame["_event"].to_numpy() == 1, "event", None)
    else:
        raise AnalysisError("Cumulative incidence needs an event column; set the event role first.")
    return aalen_johansen(
        frame["_time"],
        cause,
        entry=frame["_entry"] if "_entry" in frame.columns else None,
        group=frame["_group"] if by_group and "_group" in frame.columns else None,
        confidence_level=confidence_level,
    )


@dataclass(frozen=True)
class CauseSpecificCox:
    """One Cox model per cause, other causes censored; hazard ratios are cause-specific."""

    models: tuple[tuple[str, CoxResult], ...]

    def model(self, cause: str) -> CoxResult:
        for name, result in self.models:
            if name == cause:
                return result
        raise AnalysisError(f"No cause-specific model for {cause!r}; causes: {self.causes}.")

    @property
    def causes(self) -> tuple[str, ...]:
        return tuple(name for name, _ in self.models)

    def to_frame(self) -> pd.DataFrame:
        return pd.concat(
            [result.to_frame().assign(cause=name) for name, result in self.models],
            ignore_index=True,
        )

    def to_dict(self) -> dict:
        return {"models": [{"cause": name, **result.to_dict()} for name, result in self.models]}


def cause_specific_cox(
    frame: pd.DataFrame, covariates, *, causes=None, **cox_options
) -> CauseSpecificCox:
    """Fit engine.cox.fit.fit_cox for each cause with the other causes as censored.

    ``cox_options`` go to fit_cox unchanged (categorical, reference, strata, ties, confidence);
    ``_entry`` is used for delayed entry when the frame has it.
    """
    if "_cause" not in frame.columns:
        raise AnalysisError(
            "Cause-specific models need named causes: map the event values to causes first."
        )
    _, found = _cause_codes(frame["_cause"], len(frame))
    wanted = found if causes is None else tuple(causes)
    unknown = [c for c in wanted if c not in found]
    if unknown:
        raise AnalysisError(
            f"Cause(s) {preview_values(unknown)} do not occur among the rows' causes; "
            f"the causes are {preview_values(found)}."
        )
    if "_entry" in frame.columns:
        cox_options.setdefault("entry", "_entry")
    work = frame.copy()
    models = []
    for cause in wanted:
        work["_event"] = (work["_cause"].astype(object) == cause).astype(int)
        models.append((cause, fit_cox(work, covariates, **cox_options)))
    return CauseSpecificCox(tuple(models))
