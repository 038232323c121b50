"""The row filters chosen on the *Row filters* page: which rules a column offers, the live count of
rows a filter would keep, and putting a list of filters in use for every page and the report.

The rules are those of ``engine.prepare.filters`` (the ones a recipe stores), so a filter made here
is
saved in the recipe and replayed by ``python -m app analyze --recipe`` unchanged. The table in use
becomes the filtered copy (``share_section.filtered_table``, with a fingerprint of its own so
every cached result is keyed on the rows kept) and the table as read is kept beside it. Nothing
here imports streamlit: the tests call these functions on a plain dict.
"""

from __future__ import annotations

from collections.abc import MutableMapping, Sequence

import pandas as pd

from app import share_section, state
from engine.errors import HazelError
from engine.prepare.filters import FilterOutcome, RowFilter, apply_filters

# rule -> words on the page
RULE_WORDS = {
    "in": "is one of",
    "not_in": "is none of",
    "between": "is between (inclusive)",
    "at_least": "is at least",
    "at_most": "is at most",
    "not_missing": "is not missing",
}
NUMERIC_RULES = ("between", "at_least", "at_most")
MAX_LISTED_VALUES = 500  # values offered for "is one of" (the most frequent first)


def rules_for(series: pd.Series) -> list[str]:
    """The rules that make sense for a column: number limits only for numeric columns."""
    numeric = pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series)
    listed = ["in", "not_in"]
    return [*listed, *NUMERIC_RULES, "not_missing"] if numeric else [*listed, "not_missing"]


def listed_values(series: pd.Series) -> list[str]:
    """The values a column holds, as text, most frequent first (for "is one of")."""
    counts = series.dropna().astype("string").value_counts()
    return [str(v) for v in counts.index[:MAX_LISTED_VALUES]]


def in_use(session: MutableMapping) -> tuple[RowFilter, ...]:
    return tuple(session.get(share_section.FILTERS, ()))


def outcome(session: MutableMapping, filters: Sequence[RowFilter] | None = None) -> FilterOutcome:
    """The rows the filters (those in use unless given) keep of the table as read, and the rows
    each one removed, in order."""
    table = share_section.source_table(session)
    return apply_filters(table.frame, in_use(session) if filters is None else tuple(filters))


def preview(session: MutableMapping, candidate: RowFilter) -> tuple[int, int]:
    """(rows kept, rows removed) if ``candidate`` were added after the filters in use."""
    result = outcome(session, (*in_use(session), candidate))
    return len(result.frame), result.excluded[-1][1]


def set_filters(session: MutableMapping, filters: Sequence[RowFilter]) -> FilterOutcome:
    """Put ``filters`` in use on every page (none: the table as read). Filters that would leave
    no rows are refused with a message and change nothing."""
    filters = tuple(filters)
    source = share_section.source_table(session)
    if source is None:
        raise HazelError("Open a data file first; filters choose rows of the table in use.")
    in_use = share_section.filtered_table(source, filters)  # refuses filters that keep no row
    session[share_section.FILTERS] = filters
    session[state.TABLE] = in_use
    if filters:
        session[share_section.SOURCE_TABLE] = source
    elif share_section.SOURCE_TABLE in session:
        del session[share_section.SOURCE_TABLE]  # (AppTest's session state has no pop)
    return apply_filters(source.frame, filters)


def make_filter(column: str, rule: str, values: Sequence) -> RowFilter:
    """A filter from the page's inputs, checked as a recipe's would be (``FilterError``)."""
    return RowFilter.from_dict({"column": column, "rule": rule, "values": list(values)})


def forget_filters(session: MutableMapping) -> None:
    """A new table: filters of the old one mean nothing."""
    for key in (share_section.FILTERS, share_section.SOURCE_TABLE):
        if key in session:
            del session[key]
