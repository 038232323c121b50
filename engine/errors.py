"""Errors the engine raises for bad input.

Every class subclasses ``ValueError`` so callers can catch input problems in one place, and every
message names the column or file, the rule broken, the values seen and what to try next.
"""

from __future__ import annotations


class HazelError(ValueError):
    """Base class: the input cannot be used as given."""


class FileReadError(HazelError):
    """The file cannot be read as a table (empty, binary, no rows, duplicate headers...)."""


class ImportOptionError(FileReadError):
    """An import option cannot work as given (a separator of two characters, a quote as the
    separator, a decimal mark other than '.' or ','); ``option`` names the field."""

    def __init__(self, message: str, option: str):
        super().__init__(message)
        self.option = option


class FileTooLargeError(FileReadError):
    """The file is larger than the configured limit."""


class RoleError(HazelError):
    """A column role is missing, names an unknown column, or the column's values do not fit it."""

    def __init__(self, message: str, column: str | None = None, values: list | None = None):
        super().__init__(message)
        self.column = column
        self.values = list(values) if values is not None else []


class EventCodingError(RoleError):
    """The event column's values cannot be mapped to event / censored without the caller's help."""


class AnalysisError(HazelError):
    """An analysis cannot be computed on this data (too few rows, no events, a model that fails)."""


class NoRowsError(AnalysisError):
    """No row is left to analyse (every row excluded by the checks, a filter or a selection):
    one message for every estimator, so an empty input never reaches a numpy reduction."""

    def __init__(self, message: str = "") -> None:
        super().__init__(
            message or "There are no rows to analyse; check the exclusions in the data report."
        )


class SettingError(AnalysisError):
    """The settings ask for something the roles cannot give (a spline of a column that is not a
    numeric covariate, an effect allowed to change that is not in the model): the request, not
    the data, is wrong, so a run stops with the message instead of leaving a section out."""


def shown_value(value) -> str:
    """One value from the data as a message shows it: quoted text, a number as written (1.5, not
    np.float64(1.5)); invisible characters appear as escapes ('A\\u200b')."""
    return repr(_plain(value))


def every_group_missing(analysis: str, instead: str) -> AnalysisError:
    """The one sentence for an analysis by group on data where no row has a group."""
    return AnalysisError(
        f"{analysis} by group leaves out the rows without a group, and every row's group is "
        f"missing. {instead}"
    )


def preview_values(values, limit: int = 5) -> str:
    """Show a few offending values in a message, quoted, with a count of the rest."""
    values = list(values)
    shown = ", ".join(shown_value(v) for v in values[:limit])
    rest = len(values) - limit
    return shown + (f" and {rest} more" if rest > 0 else "")


def _plain(value):
    """numpy scalars as Python values, so messages show 2 rather than np.int64(2)."""
    return value.item() if hasattr(value, "dtype") and hasattr(value, "item") else value
