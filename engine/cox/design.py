"""The Cox model's design: complete cases, treatment coding, and checks that name the variable."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from engine.errors import AnalysisError, NoRowsError, preview_values, shown_value
from engine.text_safety import visible_text
from engine.wording import term_label

SMALL_LEVEL_ROWS = 5  # common practice: a level this small gives an unstable hazard ratio
VIF_LIMIT = 10.0  # common practice: variance inflation above 10 signals near-collinearity


def no_complete_rows(dropped: Mapping[str, int]) -> AnalysisError:
    """The error of a model left without a complete case, in words: no row at all (every row
    excluded before the model), or the rows each variable lacks."""
    if not any(dropped.values()):
        return NoRowsError(
            "There are no rows to fit the model on: every row was excluded before the model "
            "(see the exclusions in the data report)."
        )
    missing = ", ".join(
        f"{visible_text(str(name))} in {count:,} row(s)"
        for name, count in sorted(dropped.items(), key=lambda item: -item[1])
        if count
    )
    return AnalysisError(
        f"No row has every model variable present (missing: {missing}); remove the variable "
        "with most missing values or fill it in."
    )


@dataclass(frozen=True)
class Term:
    """One column of the design: a numeric variable, or one non-reference level of a categorical."""

    variable: str
    level: str | None = None
    reference: str | None = None

    @property
    def label(self) -> str:
        """'variable', or 'variable: level vs reference' (``engine.wording.term_label``)."""
        return term_label(self.variable, self.level, self.reference)


@dataclass(frozen=True)
class Design:
    terms: tuple[Term, ...]
    matrix: np.ndarray  # used rows x terms, in the frame's row order
    used: np.ndarray  # bool mask over the frame's rows
    dropped: dict  # variable (or role column) -> rows dropped because it was missing
    levels: dict  # categorical variable -> (reference, *other levels kept)
    level_counts: dict  # categorical variable -> {level: rows used}
    warnings: tuple[str, ...]
    center: np.ndarray  # column means over the rows used
    scale: np.ndarray  # column standard deviations over the rows used

    @property
    def variables(self) -> tuple[str, ...]:
        return tuple(dict.fromkeys(t.variable for t in self.terms))

    def columns_of(self, variable: str) -> np.ndarray:
        return np.array([i for i, t in enumerate(self.terms) if t.variable == variable])


def level_checks(column: str, levels, counts, ref, warnings: list[str], label=None) -> list:
    """The levels of a categorical covariate kept beside its reference (those with rows among
    the complete cases), with the warnings on empty and small levels appended to ``warnings``;
    an error when only the reference has rows. ``label`` shows a level (default: itself).
    Shared by the design from rows and from a database's counts."""
    label = label or (lambda level: level)
    empty = [label(c) for c in levels if counts[c] == 0]
    if empty:
        warnings.append(
            f"'{column}': level(s) {preview_values(empty)} have no rows among the complete "
            "cases and are left out of the model."
        )
    kept = [c for c in levels if counts[c] > 0 and c != ref]
    if not kept:
        raise AnalysisError(
            f"Categorical covariate '{column}' has a single level ({shown_value(label(ref))}) "
            "among the complete cases, so it cannot be estimated; remove it from the covariates."
        )
    small = [
        f"{shown_value(label(c))} ({int(counts[c])} rows)"
        for c in [ref, *kept]
        if counts[c] < SMALL_LEVEL_ROWS
    ]
    if small:
        warnings.append(
            f"'{column}': level(s) {', '.join(small)} have fewer than {SMALL_LEVEL_ROWS} rows "
            "(common practice); their hazard ratios are unreliable. Consider merging levels."
        )
    return kept


def _as_categorical(frame: pd.DataFrame, column: str) -> pd.Categorical:
    values = frame[column]
    if isinstance(values.dtype, pd.CategoricalDtype):
        return pd.Categorical(values)
    return pd.Categorical(values.astype("string").astype(object).where(values.notna()))


def build_design(
    frame: pd.DataFrame,
    covariates: Sequence[str],
    *,
    categorical: Sequence[str] = (),
    reference: Mapping[str, object] | None = None,
    required: Sequence[str] = (),
) -> Design:
    """Complete cases on ``required`` role columns and the covariates, then treatment coding."""
    covariates = list(dict.fromkeys(covariates))
    reference = dict(reference or {})
    missing_columns = [c for c in [*covariates, *required] if c not in frame.columns]
    if missing_columns:
        raise AnalysisError(
            f"The Cox model names column(s) {preview_values(missing_columns)} that the data does "
            f"not have. Available columns: {preview_values(list(frame.columns), 12)}."
        )
    unknown_categorical = sorted(set(categorical) - set(covariates))
    if unknown_categorical:
        raise AnalysisError(
            f"Column(s) {preview_values(unknown_categorical)} are marked categorical but are not "
            "among the covariates; add them to the covariates or unmark them."
        )
    categorical = set(categorical) | {
        c for c in covariates if isinstance(frame[c].dtype, pd.CategoricalDtype)
    }
    for column in covariates:
        if column not in categorical and not pd.api.types.is_numeric_dtype(frame[column]):
            bad = frame[column][pd.to_numeric(frame[column], errors="coerce").isna()].dropna()
            raise AnalysisError(
                f"Covariate '{column}' is not numeric (values such as "
                f"{preview_values(bad.unique())}); mark it as categorical or fix those values."
            )
    dropped = {}
    used = np.ones(len(frame), dtype=bool)
    for column in [*required, *covariates]:
        missing = frame[column].isna().to_numpy()
        if column not in categorical and column in covariates:
            with np.errstate(invalid="ignore"):
                missing |= ~np.isfinite(frame[column].to_numpy(dtype=float, na_value=np.nan))
        if missing.any():
            dropped[column] = int(missing.sum())
        used &= ~missing
    if not used.any():
        raise no_complete_rows(dropped)

    terms: list[Term] = []
    columns: list[np.ndarray] = []
    levels: dict = {}
    level_counts: dict = {}
    warnings: list[str] = []
    for column in covariates:
        if column not in categorical:
            terms.append(Term(column))
            columns.append(frame[column].to_numpy(dtype=float, na_value=np.nan)[used])
            continue
        values = _as_categorical(frame, column)[used]
        counts = pd.Series(values).value_counts(sort=False)
        counts = counts.reindex(values.categories, fill_value=0)
        ref = reference.get(column, values.categories[0] if len(values.categories) else None)
        if ref not in list(values.categories):
            matched = [c for c in values.categories if str(c) == str(ref)]
            if not matched:
                raise AnalysisError(
                    f"Reference level {shown_value(ref)} for '{column}' is not one of its levels "
                    f"{preview_values(list(values.categories), 12)}; choose one of those."
                )
            ref = matched[0]
        if counts[ref] == 0:
            raise AnalysisError(
                f"Reference level {shown_value(ref)} of '{column}' has no rows among the complete "
                "cases; choose a reference level that has rows."
            )
        kept = level_checks(column, list(values.categories), counts, ref, warnings)
        levels[column] = (str(ref), *(str(c) for c in kept))
        level_counts[column] = {str(c): int(counts[c]) for c in [ref, *kept]}
        codes = np.asarray(values.astype(object))
        for level in kept:
            terms.append(Term(column, str(level), str(ref)))
            columns.append((codes == level).astype(float))
    matrix = np.column_stack(columns) if columns else np.zeros((int(used.sum()), 0))
    center = matrix.mean(axis=0)
    centred = matrix - center
    with np.errstate(over="ignore", invalid="ignore"):  # an overflowing spread: refused below
        covariance = centred.T @ centred / len(matrix)
        scale = np.sqrt(np.diag(covariance))
    del centred
    design = Design(tuple(terms), matrix, used, dropped, levels, level_counts, (), center, scale)
    warnings += check_collinearity(design, covariance)
    return Design(
        tuple(terms), matrix, used, dropped, levels, level_counts, tuple(warnings), center, scale
    )


def without_terms(design: Design, drop: Sequence[int]) -> Design:
    """The design with the term columns ``drop`` left out (levels and counts follow)."""
    keep = np.setdiff1d(np.arange(len(design.terms)), np.asarray(drop, dtype=int))
    terms = tuple(design.terms[j] for j in keep)
    variables = {t.variable for t in terms}
    levels = {}
    for variable, (ref, *rest) in design.levels.items():
        kept = [level for level in rest if Term(variable, level, ref) in terms]
        if kept:
            levels[variable] = (ref, *kept)
    counts = {k: v for k, v in design.level_counts.items() if k in levels}
    return replace(
        design,
        terms=terms,
        matrix=design.matrix[:, keep],
        levels={k: v for k, v in levels.items() if k in variables},
        level_counts=counts,
        center=design.center[keep],
        scale=design.scale[keep],
    )


def within_strata_constant(design: Design, codes: np.ndarray) -> list[int]:
    """Columns of the design that take one value within every stratum (``codes``: the stratum
    of each used row). A stratified partial likelihood compares subjects only within their
    stratum, so such a term has no information: its coefficient is not estimable."""
    if len(design.terms) == 0:
        return []
    order = np.argsort(codes, kind="stable")
    sorted_codes = codes[order]
    starts = np.flatnonzero(np.r_[True, sorted_codes[1:] != sorted_codes[:-1]])
    matrix = design.matrix[order]
    spread = np.maximum.reduceat(matrix, starts, axis=0) - np.minimum.reduceat(
        matrix, starts, axis=0
    )
    return constant_in_every_group(spread, design.center)


def constant_in_every_group(spread: np.ndarray, center: np.ndarray) -> list[int]:
    """Columns whose spread (max − min, one row per group) is nil in every group, to the
    tolerance of the constant-covariate check; the rows may come from memory or a database."""
    tolerance = 1e-12 * (1 + np.abs(center))
    return [int(j) for j in np.flatnonzero(np.all(spread <= tolerance, axis=0))]


def check_collinearity(design: Design, covariance: np.ndarray) -> list[str]:
    """Raise for constant or exactly collinear terms; warn for near-collinear variables."""
    spread = design.scale
    if len(spread) == 0:
        return []
    tiny = spread <= 1e-12 * (1 + np.abs(design.center))
    constant = [design.terms[j].label for j in np.flatnonzero(tiny)]
    if constant:
        raise AnalysisError(
            f"Covariate(s) {preview_values(constant)} take a single value among the rows used, so "
            "their effect cannot be estimated; remove them from the covariates."
        )
    huge = ~np.isfinite(spread) | ~np.isfinite(design.center)
    with np.errstate(invalid="ignore", over="ignore"):
        corr = covariance / np.outer(spread, spread)
    huge |= ~np.all(np.isfinite(corr), axis=0)
    if huge.any():
        names = list(dict.fromkeys(design.terms[j].variable for j in np.flatnonzero(huge)))
        largest = float(np.max(np.abs(design.matrix[:, huge])))
        raise AnalysisError(
            f"Covariate(s) {preview_values(names)} hold values too large to model (up to "
            f"{largest:.3g}): their spread overflows. Rescale them (for example divide by a "
            "power of ten) or check those values."
        )
    try:
        eigenvalues, eigenvectors = np.linalg.eigh(corr)
    except np.linalg.LinAlgError as exc:
        raise AnalysisError(
            f"The covariates {preview_values(list(design.variables), 8)} could not be checked "
            "for collinearity (the computation did not converge); check them for extreme "
            "values."
        ) from exc
    if eigenvalues[0] < 1e-10 * max(eigenvalues[-1], 1.0):
        involved = np.abs(eigenvectors[:, 0]) > 1e-3
        names = list(dict.fromkeys(design.terms[j].label for j in np.flatnonzero(involved)))
        raise AnalysisError(
            f"Covariates {preview_values(names, 8)} are exactly collinear (one is a linear "
            "combination of the others among the rows used); remove one of them."
        )
    warnings = []
    variables = design.variables
    if len(variables) > 1:
        log_det_all = np.linalg.slogdet(corr)[1]
        for variable in variables:
            own = design.columns_of(variable)
            rest = np.setdiff1d(np.arange(len(corr)), own)
            log_gvif = (
                np.linalg.slogdet(corr[np.ix_(own, own)])[1]
                + np.linalg.slogdet(corr[np.ix_(rest, rest)])[1]
                - log_det_all
            )
            vif = float(np.exp(log_gvif / len(own)))  # generalised VIF per degree of freedom
            if vif > VIF_LIMIT:
                warnings.append(
                    f"'{variable}' is nearly collinear with other covariates (variance inflation "
                    f"{vif:.1f} > {VIF_LIMIT:g}, common practice); its hazard ratio is imprecise."
                )
    return warnings
