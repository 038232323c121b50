"""Any result table rounded for a manuscript, by the rules of ``engine.wording``.

The app's tables hold exact values under their result keys (``hazard_ratio``, ``p_value``,
``survival_12_lower``...). For a Word table or an Excel sheet each column is rounded by what it
holds, judged from its name and, for interval limits, from the other columns of the table:

- p-values (``p``, ``p_value``, ``p_…``, ``…_p``): 3 decimals, "< 0.001", "> 0.999";
- hazard ratios and other ratios (and the limits beside them): 2 decimals, 2 significant
  figures below 0.1;
- survival, incidence, probabilities and power (and their limits): percentages, 1 decimal;
- a column already in percent (``percent``): 1 decimal and a % sign;
- test statistics, coefficients, standard errors, AIC, standardised differences: 2 decimals;
- times, medians, restricted means, quartiles, means and SDs (and their limits): 1 decimal;
  a missing median or median limit is "not reached";
- degrees of freedom as written (1, 2.5); whole-number columns as whole numbers;
- any other number: 3 significant figures (a house rule for what the manuscript rules do not
  cover); any other missing value: an empty cell;
- no non-zero value is shown as zero: where the decimals above would round it to 0, it gets 2
  significant figures (an SE of 0.0048 is "0.0048", a survival of 0.00001 "0.0010%");
- a column of notes (``…_reason``, ``note``, ``method``) is text, even when every cell is empty.

Headers become Hazel's words: ``p_value`` → "p", ``se_model`` → "Standard error
(model-based)", ``rmst_lower`` → "Restricted mean, lower limit", ``survival_12`` →
"Survival at 12"; a name with capitals, spaces or other signs is kept as it is.
"""

from __future__ import annotations

import math
import re
from decimal import Decimal

import pandas as pd

from engine.wording import (
    NOT_REACHED,
    format_nonzero,
    format_p,
    format_percent,
    format_plain,
    format_ratio,
    format_significant,
)

P, RATIO, PERCENT, PERCENT_SCALED, STATISTIC, TIME, DF, COUNT, OTHER, TEXT = (
    "p", "ratio", "percent", "percent scaled", "statistic", "time", "df", "count", "other", "text",
)  # fmt: skip
LIMITS = {"lower", "upper", "low", "high", "ci"}
_RATIO_WORDS = {"ratio", "hr", "exp"}
_PERCENT_WORDS = {"survival", "incidence", "probability", "power", "km", "cif"}
_STATISTIC_WORDS = {
    "statistic", "chi2", "chisq", "z", "aic", "bic", "loglik", "likelihood", "coef",
    "coefficient", "se", "standardized", "standardised", "concordance", "f", "delta",
}  # fmt: skip
_TIME_WORDS = {
    "time", "median", "rmst", "tau", "horizon", "landmark", "q1", "q3", "mean", "sd", "tick",
    "interval", "follow", "start", "end", "entry", "quantile", "months", "weeks", "days", "years",
}  # fmt: skip
_TEXT_WORDS = {"reason", "note", "notes", "method", "label", "warning", "warnings"}
_COUNT_WORDS = {"n", "events", "censored", "at", "risk", "rows", "count", "subjects", "missing"}
# Result keys in Hazel's words (the pages' own headers), whole keys first, then word by word.
HEADERS = {
    "p": "p",
    "p_value": "p",
    "p_bh": "p (Benjamini–Hochberg)",
    "p_holm": "p (Holm)",
    "hazard_ratio": "Hazard ratio",
    "at_risk": "At risk",
    "n_at_risk": "At risk",
    "n_events_cause": "Events of the cause",
    "n_events_any": "Events of any cause",
    "one_minus_km": "1 − Kaplan–Meier",
    "coef": "Coefficient",
    "se": "Standard error",
    "se_model": "Standard error (model-based)",
    "std_error": "Standard error",
    "std_err": "Standard error",
    "z": "Wald z",
    "df": "Degrees of freedom",
    "sd": "SD",
    "aic": "AIC",
    "delta_aic": "Δ AIC",
    "log_likelihood": "Log-likelihood",
    "n_parameters": "Parameters",
    "rmst": "Restricted mean",
    "tau": "Horizon",
    "auc": "AUC",
    "brier": "Brier score",
    "brier_km": "Brier score, Kaplan–Meier only",
    "events_exact": "Events (exact)",
    "subjects_control": "Subjects, control",
    "subjects_experimental": "Subjects, experimental",
    "alpha": "Significance level (α)",
    "group_a": "First group",
    "group_b": "Second group",
    "lower": "Lower limit",
    "upper": "Upper limit",
    "n": "n",
    "q1": "Q1",
    "q3": "Q3",
}
_WORDS = {
    "coef": "coefficient", "se": "standard error", "rmst": "restricted mean", "km": "Kaplan–Meier",
    "lr": "likelihood-ratio", "aic": "AIC", "auc": "AUC", "sd": "SD", "df": "degrees of freedom",
    "z": "Wald z", "nonlinearity": "non-linearity", "cif": "cumulative incidence",
}  # fmt: skip
_SUFFIXES = {
    "_lower": ", lower limit", "_upper": ", upper limit", "_p_value": " p", "_p": " p",
    "_reason": ", note", "_df": ", degrees of freedom", "_statistic": " statistic",
}  # fmt: skip
_AT_TIME = re.compile(r"([a-z0-9_]+?)_(\d+(?:\.\d+)?(?:e[+-]?\d+)?)")


def _words(name: str) -> list[str]:
    return [w for w in re.split(r"[^a-z0-9]+", str(name).lower()) if w]


def plain_header(name) -> str:
    """A result key in Hazel's words: 'hazard_ratio' -> 'Hazard ratio', 'se_model' ->
    'Standard error (model-based)', 'survival_12_lower' -> 'Survival at 12, lower limit';
    any other text is kept as it is."""
    text = str(name)
    if not re.fullmatch(r"[a-z0-9_.+-]+", text) or not re.search(r"[a-z]", text):
        return text
    words = _key_words(text)
    if re.match(r"[a-z](\W|$)", words):  # a symbol (p, n) keeps its case
        return words
    return words[:1].upper() + words[1:]


def _key_words(key: str) -> str:
    if key in HEADERS:
        return HEADERS[key]
    for suffix, words in _SUFFIXES.items():
        if key.endswith(suffix) and len(key) > len(suffix):
            return _key_words(key[: -len(suffix)]) + words
    at = _AT_TIME.fullmatch(key)
    if at:
        return f"{_key_words(at.group(1))} at {at.group(2)}"
    if key.startswith("n_") and len(key) > 2:  # n_kept -> 'Kept': a count says so by itself
        return _key_words(key[2:])
    return " ".join(_WORDS.get(w, w) for w in key.split("_") if w)


def column_kinds(frame: pd.DataFrame, title: str = "") -> dict[str, str]:
    """What each column holds, for rounding (see the module's rules). Interval limits and a
    bare ``estimate`` follow the ratio or probability beside them, else the table's ``title``
    ("survival-curve-values"), else count as times."""
    own = {str(c): _own_kind(str(c), frame[c]) for c in frame.columns}
    context = next((k for k in (RATIO, PERCENT) if k in own.values()), None)
    if context is None:
        hinted = _own_kind(title, pd.Series([0.0])) if title else TIME
        if "hazard" in _words(title):  # a cumulative hazard: no unit, not a probability
            hinted = STATISTIC
        context = hinted if hinted in (RATIO, PERCENT, STATISTIC) else TIME
    out = {}
    for column, kind in own.items():
        if kind == "limit":
            kind = context
        out[column] = kind
    return out


def _own_kind(name: str, series: pd.Series) -> str:
    numeric = pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series)
    if not numeric and not series.isna().all():  # (a column of missing values: by its name)
        return TEXT
    words = _words(name)
    if words and words[-1] in _TEXT_WORDS:  # 'median_reason' is text even when all empty
        return TEXT
    lowered = name.lower()
    if lowered in ("p", "p_value", "pvalue") or lowered.startswith("p_") or lowered.endswith("_p"):
        return P
    if words == ["df"] or lowered.endswith("_df"):
        return DF
    if "percent" in words:
        return PERCENT_SCALED
    if _RATIO_WORDS & set(words):
        return RATIO
    if _PERCENT_WORDS & set(words):
        return PERCENT
    if _STATISTIC_WORDS & set(words) or lowered in ("difference",):
        return STATISTIC
    if _TIME_WORDS & set(words):
        return TIME
    if set(words) <= LIMITS | {"estimate"} and words:
        return "limit"
    if pd.api.types.is_integer_dtype(series) or (_COUNT_WORDS & set(words) and _whole(series)):
        return COUNT
    return OTHER


def _whole(series: pd.Series) -> bool:
    values = pd.to_numeric(series, errors="coerce").dropna()
    return bool(len(values)) and bool((values == values.round()).all())


def format_cell(value, kind: str, column: str = "") -> str:
    """One value as a manuscript shows it."""
    if kind == TEXT:
        missing = value is None or (isinstance(value, float) and math.isnan(value))
        return "" if missing else str(value)
    if value is None or pd.isna(value):
        return NOT_REACHED if kind == TIME and "median" in _words(column) else ""
    value = float(value)
    if kind == P:
        return format_p(value)
    if kind == RATIO:
        return format_ratio(value)
    if kind == PERCENT:
        text = format_percent(value)
        if value == 0 or not text.endswith("%") or Decimal(text[:-1]) != 0:
            return text
        return f"{format_significant(float(Decimal(repr(value)).scaleb(2)), 2)}%"
    if kind == PERCENT_SCALED:
        return f"{format_nonzero(value, 1)}%"
    if kind == STATISTIC:
        return format_nonzero(value, 2)
    if kind == TIME:
        return format_nonzero(value, 1)
    if kind == DF:
        return format_plain(value)
    if kind == COUNT:
        return f"{round(value)}"
    return format_significant(value, 3)


def manuscript_frame(frame: pd.DataFrame, title: str = "") -> pd.DataFrame:
    """``frame`` with every cell rounded and written as text, under plain-word headers
    (``title``, the table's name, only guides the rounding of interval limits)."""
    kinds = column_kinds(frame, title)
    columns, used = {}, set()
    for column in frame.columns:
        kind = kinds[str(column)]
        header = plain_header(column)
        header = str(column) if header in used else header
        used.add(header)
        columns[header] = [format_cell(v, kind, str(column)) for v in frame[column].tolist()]
    return pd.DataFrame(columns, index=range(len(frame)), dtype=object)
