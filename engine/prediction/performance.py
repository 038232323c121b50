"""How well a fitted Cox model predicts: discrimination, accuracy and calibration.

The risk score is the model's linear predictor (higher = earlier events expected); predicted
survival is S(t | x) = exp(-H0(t) exp(x'b)), with the Breslow baseline (per stratum).

- Harrell's C (engine.cox.concordance) and Uno's C (Uno et al. 2011, Stat Med 30:1105–1117): the
  share of comparable pairs ordered correctly, each pair whose earlier member had its event at
  T_i < tau weighted by 1 / G(T_i)^2, G the censoring distribution (engine.prediction.ipcw). Uno's
  C does
  not depend on the censoring pattern; tau defaults to the largest observed time.
- Cumulative/dynamic AUC at t: cases are events by t (weighted 1 / G(T_i)), controls subjects
  still event-free after t; the share of case-control pairs where the case scores higher (ties
  count one half).
- Brier score at t (Graf et al. 1999, Stat Med 18:2529–2545): mean squared difference between
  predicted survival and the observed status at t, events by t weighted 1 / G(T_i), subjects
  still followed after t weighted 1 / G(t). The integrated Brier score averages it over time:
  the trapezoid rule on INTEGRATION_POINTS evenly spaced times from the first observed time to
  the last chosen time, divided by that range (scikit-survival's integrated_brier_score on that
  grid). The Brier curve is a right-continuous step function, so this is within h/2 times its
  total variation of its exact mean; predicted survival is the Breslow step function, not
  interpolated between event times (lifelines' predict_survival_function interpolates, which
  moves the integral: DEVELOPERS.md). Beside them the same measures for the Kaplan–Meier curve
  of all subjects as a reference model without covariates (a useful model scores lower).
- Calibration at a time t: subjects in groups of predicted survival at t; per group the mean
  predicted survival beside the Kaplan–Meier estimate of the group, with its interval.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from engine.cox.concordance import pair_counts
from engine.cox.fit import CoxResult
from engine.cox.likelihood import baseline_hazard
from engine.errors import AnalysisError, preview_values
from engine.json_values import frame_records, json_float
from engine.prediction.ipcw import CensoringSurvival, censoring_survival
from engine.survival.curves import kaplan_meier, survival_at

INTEGRATION_POINTS = 100  # grid of the integrated Brier score: 100 times, 99 equal steps
CALIBRATION_GROUPS = 5


def uno_c(time, event, risk, *, tau: float | None = None, censoring=None) -> float:
    """Uno's censoring-weighted concordance up to ``tau`` (default: the largest time)."""
    time = np.asarray(time, dtype=float)
    event = np.asarray(event).astype(bool)
    censoring = censoring or censoring_survival(time, event)
    tau = float(time.max()) if tau is None else float(tau)
    concordant, comparable, _ = pair_counts(time, event, risk, earlier_only=True)
    with np.errstate(divide="ignore"):
        weight = np.where(event & (time < tau), 1.0 / censoring.at(time) ** 2, 0.0)
    total = float(weight @ comparable)
    if total == 0 or not np.isfinite(total):
        raise AnalysisError(
            f"Uno's concordance has no comparable pair before tau = {tau:g}: no event is "
            "followed by a longer time. Choose a larger tau or check the event column."
        )
    return float(weight @ concordant) / total


def cumulative_dynamic_auc(time, event, risk, times, *, censoring=None) -> np.ndarray:
    """Time-dependent AUC at each of ``times`` (cases: events by t; controls: alive after t)."""
    time = np.asarray(time, dtype=float)
    event = np.asarray(event).astype(bool)
    risk = np.asarray(risk, dtype=float)
    censoring = censoring or censoring_survival(time, event)
    with np.errstate(divide="ignore"):
        case_weight = np.where(event, 1.0 / censoring.at(time), 0.0)
    order = np.argsort(time, kind="stable")
    sorted_time = time[order]
    out = []
    for t in np.asarray(times, dtype=float):
        split = np.searchsorted(sorted_time, t, side="right")
        controls = np.sort(risk[order[split:]])
        cases = order[:split][event[order[:split]]]
        if len(controls) == 0 or len(cases) == 0:
            out.append(np.nan)
            continue
        below = np.searchsorted(controls, risk[cases], side="left")
        tied = np.searchsorted(controls, risk[cases], side="right") - below
        w = case_weight[cases]
        out.append(float(w @ (below + 0.5 * tied)) / (w.sum() * len(controls)))
    return np.asarray(out)


def brier_scores(time, event, survival, times, *, censoring=None) -> np.ndarray:
    """Brier score at each of ``times``; ``survival[:, j]`` is each subject's predicted S(t_j)
    (a 1-D array is one prediction used for every subject and time column alike)."""
    time = np.asarray(time, dtype=float)
    event = np.asarray(event).astype(bool)
    times = np.asarray(times, dtype=float)
    censoring = censoring or censoring_survival(time, event)
    with np.errstate(divide="ignore"):
        weight_y = 1.0 / censoring.at(time)
        weight_t = 1.0 / censoring.at(times)
    survival = np.asarray(survival, dtype=float)
    out = np.empty(len(times))
    for j, t in enumerate(times):
        s = survival[:, j] if survival.ndim == 2 else survival[j]
        case = event & (time <= t)
        control = time > t
        terms = np.where(case, s**2 * weight_y, 0.0) + np.where(
            control, (1.0 - s) ** 2 * weight_t[j], 0.0
        )
        out[j] = terms.mean()
    return out


def integrate(times, values) -> float:
    """Trapezoid-rule mean of ``values`` over [times[0], times[-1]]; NaN (not computed) for a
    grid of no width, where a mean over time has no meaning."""
    times = np.asarray(times, dtype=float)
    if not times[-1] > times[0]:
        return float("nan")
    return float(np.trapezoid(values, times) / (times[-1] - times[0]))


@dataclass(frozen=True)
class CoxPredictions:
    """Linear predictor and Breslow cumulative baseline (per stratum) of a fitted Cox model,
    on the rows it used, in its sorted order."""

    time: np.ndarray
    event: np.ndarray
    stratum: np.ndarray
    linear_predictor: np.ndarray  # centred
    baseline_times: tuple[np.ndarray, ...]  # per stratum: event times
    baseline_cumulative: tuple[np.ndarray, ...]

    def survival(self, t: float) -> np.ndarray:
        """Each subject's predicted S(t)."""
        cumulative = np.zeros(len(self.time))
        for code, (times, values) in enumerate(
            zip(self.baseline_times, self.baseline_cumulative, strict=True)
        ):
            idx = np.searchsorted(times, t, side="right") - 1
            here = self.stratum == code
            cumulative[here] = values[idx] if idx >= 0 else 0.0
        with np.errstate(over="ignore", invalid="ignore"):  # exp(eta) beyond floats
            hazard = cumulative * np.exp(self.linear_predictor)
        return np.where(cumulative > 0, np.exp(-hazard), 1.0)  # none before the first event


def cox_predictions(result: CoxResult) -> CoxPredictions:
    model = result.model
    layout = model.layout
    eta = model.scaled @ (model.beta * model.scale)
    increments = baseline_hazard(layout, eta)
    levels = max(len(model.strata_levels), 1)
    times, values = [], []
    for code in range(levels):
        here = layout.group_stratum == code
        times.append(layout.group_time[here])
        values.append(np.cumsum(increments[here]))
    return CoxPredictions(
        time=layout.time,
        event=layout.event,
        stratum=layout.stratum,
        linear_predictor=eta,
        baseline_times=tuple(times),
        baseline_cumulative=tuple(values),
    )


@dataclass(frozen=True)
class PerformanceResult:
    times: tuple[float, ...]
    tau: float
    harrell_c: float
    harrell_c_se: float
    uno_c: float
    auc: tuple[float, ...]
    brier: tuple[float, ...]
    brier_km: tuple[float, ...]
    integrated_brier: float
    integrated_brier_km: float
    integration_range: tuple[float, float]
    calibration_time: float
    calibration: pd.DataFrame  # risk_group, n, events, predicted, observed, lower, upper
    optimism: object | None = None  # engine.prediction.optimism.OptimismResult

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame(
            {
                "time": list(self.times),
                "auc": list(self.auc),
                "brier": list(self.brier),
                "brier_km": list(self.brier_km),
            }
        )

    def to_dict(self) -> dict:
        return {
            "times": [float(t) for t in self.times],
            "auc": [json_float(v) for v in self.auc],
            "brier": [json_float(v) for v in self.brier],
            "brier_km": [json_float(v) for v in self.brier_km],
            "integrated_brier": json_float(self.integrated_brier),
            "integrated_brier_km": json_float(self.integrated_brier_km),
            "integration_range": [float(v) for v in self.integration_range],
            "harrell_c": json_float(self.harrell_c),
            "harrell_c_se": json_float(self.harrell_c_se),
            "uno_c": json_float(self.uno_c),
            "tau": float(self.tau),
            "calibration_time": float(self.calibration_time),
            "calibration": frame_records(self.calibration),
            "optimism": None if self.optimism is None else self.optimism.to_dict(),
        }


def _checked_times(times, time: np.ndarray, what: str = "Performance times (--performance)"):
    """The chosen times, sorted, each within follow-up; ``what`` names the setting they come
    from in the message (the performance times, or the calibration time)."""
    arr = np.unique(np.asarray(list(times), dtype=float))
    if arr.size == 0:
        raise AnalysisError(
            "Prediction performance needs at least one time (for example --performance 12,24)."
        )
    first, last = float(time.min()), float(time.max())
    bad = arr[(arr < first) | (arr >= last) | ~np.isfinite(arr)]
    if bad.size:
        raise AnalysisError(
            f"{what} {preview_values(bad)} {'lies' if bad.size == 1 else 'lie'} outside the "
            "follow-up: each must be at "
            f"least {first:g} (the first observed time) and below {last:g} (the last). "
            "Choose times within follow-up."
        )
    return arr


def calibration_table(
    predictions: CoxPredictions, t: float, *, groups: int = CALIBRATION_GROUPS, confidence=0.95
) -> pd.DataFrame:
    """Mean predicted survival at ``t`` against the Kaplan–Meier estimate, per risk group
    (groups of equal size by predicted survival, group 1 the highest predicted risk)."""
    if not 2 <= int(groups) <= 20:
        raise AnalysisError(f"The number of risk groups must be 2 to 20; got {groups!r}.")
    predicted = predictions.survival(t)
    n = len(predicted)
    rank = np.argsort(np.argsort(predicted, kind="stable"), kind="stable")
    group = rank * int(groups) // n  # 0 = lowest predicted survival
    rows = []
    for g in range(int(groups)):
        here = group == g
        if not here.any():
            continue
        curve = kaplan_meier(predictions.time[here], predictions.event[here], confidence=confidence)
        at = survival_at(curve, [t]).frame.iloc[0]
        rows.append(
            {
                "risk_group": g + 1,
                "n": int(here.sum()),
                "events": int(predictions.event[here].sum()),
                "predicted": float(predicted[here].mean()),
                "observed": json_float(at["survival"]),
                "lower": json_float(at["lower"]),
                "upper": json_float(at["upper"]),
            }
        )
    return pd.DataFrame(rows)


def prediction_performance(
    result: CoxResult,
    times,
    *,
    tau: float | None = None,
    calibration_time: float | None = None,
    risk_groups: int = CALIBRATION_GROUPS,
    confidence: float = 0.95,
) -> PerformanceResult:
    """Every measure above for a fitted Cox model, on the rows it was fitted to (apparent
    performance; engine.prediction.optimism corrects C and the calibration slope for optimism)."""
    if result.model.layout.has_entry:
        raise AnalysisError(
            "Prediction performance is not available with delayed entry (an entry-time role): "
            "its censoring weights assume everyone is followed from time 0."
        )
    pred = cox_predictions(result)
    time, event, risk = pred.time, pred.event, pred.linear_predictor
    chosen = _checked_times(times, time)
    censoring: CensoringSurvival = censoring_survival(time, event)
    tau_value = float(time.max()) if tau is None else float(tau)
    if not time.min() < tau_value <= time.max():
        raise AnalysisError(
            f"tau (--tau) = {tau_value:g} must lie within follow-up ({time.min():g} to "
            f"{time.max():g})."
        )
    survival = np.column_stack([pred.survival(t) for t in chosen])
    km = kaplan_meier(time, event)
    km_at = survival_at(km, chosen).frame["survival"].to_numpy()
    grid = np.linspace(float(time.min()), float(chosen.max()), INTEGRATION_POINTS)
    grid_model = brier_scores(
        time, event, np.column_stack([pred.survival(t) for t in grid]), grid, censoring=censoring
    )
    grid_km = brier_scores(
        time, event, survival_at(km, grid).frame["survival"].to_numpy(), grid, censoring=censoring
    )
    when = chosen[0] if calibration_time is None else float(calibration_time)
    _checked_times([when], time, "The calibration time (--calibration-time)")
    harrell = result.concordance
    return PerformanceResult(
        times=tuple(float(t) for t in chosen),
        tau=tau_value,
        harrell_c=harrell.concordance,
        harrell_c_se=harrell.standard_error,
        uno_c=uno_c(time, event, risk, tau=tau_value, censoring=censoring),
        auc=tuple(cumulative_dynamic_auc(time, event, risk, chosen, censoring=censoring)),
        brier=tuple(brier_scores(time, event, survival, chosen, censoring=censoring)),
        brier_km=tuple(brier_scores(time, event, km_at, chosen, censoring=censoring)),
        integrated_brier=integrate(grid, grid_model),
        integrated_brier_km=integrate(grid, grid_km),
        integration_range=(float(grid[0]), float(grid[-1])),
        calibration_time=float(when),
        calibration=calibration_table(pred, when, groups=risk_groups, confidence=confidence),
    )
