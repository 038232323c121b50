"""Date columns: parsing without the nanosecond range limit, date-format checks, implausible dates.

pandas stores timestamps as nanoseconds, which covers only 1677-09-21 to 2262-04-11, and a
difference of two such timestamps overflows past 292 years. Registry exports hold placeholder
dates such as 0001-01-01 and 9999-12-31, so Hazel keeps dates as whole seconds
(``datetime64[s]``, years 1 to 9999 and far beyond) and parses the cells pandas cannot hold with
the Python date parser. Each distinct value is parsed once.
"""

from __future__ import annotations

import datetime
import re
import warnings

import numpy as np
import pandas as pd
from dateutil import parser as date_parser
from pandas.tseries.api import guess_datetime_format

from engine.errors import RoleError, preview_values

# Dates before this (1900-01-01 itself is a common placeholder) or after today are implausible
# for a study of people or machines still followed today (common practice in registry checks).
EARLIEST_PLAUSIBLE = np.datetime64("1900-01-02", "s")
IMPLAUSIBLE_CHOICES = ("warn", "exclude")
_ISO_START = re.compile(r"^[0-9]{4}-[0-9]{2}-[0-9]{2}")
_UTC_OFFSET = re.compile(
    r"[0-9]{2}:[0-9]{2}(?::[0-9]{2}(?:\.[0-9]+)?)?\s*(?:Z|[+-][0-9]{2}(?::?[0-9]{2})?)$"
)
_FOUR_DIGITS = re.compile(r"(?<![0-9])([0-9]{4})(?![0-9])")
_NS_YEARS = (1678, 2261)  # whole years inside pandas' nanosecond range
FORMAT_SAMPLE = 2000  # distinct texts a column's layout is judged from


def check_date_format(date_format: str | None) -> None:
    """Refuse a format that cannot parse anything: a bad or repeated directive, a stray %."""
    if date_format is None:
        return
    problem = None
    if not date_format.strip():
        problem = "it is empty"
    else:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                pd.to_datetime(pd.Series(["2000-01-01"]), format=date_format, errors="coerce")
        except re.error as exc:
            problem = (
                f"a directive appears twice ({exc.msg})"
                if "redefinition" in str(exc)
                else (str(exc))
            )
        except (ValueError, TypeError) as exc:
            problem = str(exc)
    if problem:
        raise RoleError(
            f"The date format {date_format!r} cannot be used: {problem}. Write it with "
            "directives such as %d/%m/%Y or %Y-%m-%d %H:%M (each directive once; %% for a "
            "literal %), or leave it empty to detect the format.",
            values=[date_format],
        )


def parse_dates(series: pd.Series, date_format: str | None, day_first: bool) -> np.ndarray:
    """``datetime64[s]`` per row (NaT where missing or unreadable); times with a UTC offset are
    converted to UTC, so a column mixing offsets gives true durations."""
    if pd.api.types.is_datetime64_any_dtype(series):
        if getattr(series.dt, "tz", None) is not None:
            series = series.dt.tz_convert("UTC").dt.tz_localize(None)
        return series.to_numpy().astype("datetime64[s]")
    codes, uniques = pd.factorize(series, use_na_sentinel=True)
    parsed = _parse_values(list(uniques), date_format, day_first)
    if len(parsed) == 0:
        return np.full(len(series), np.datetime64("NaT"), dtype="datetime64[s]")
    out = parsed[np.where(codes >= 0, codes, 0)]
    out[codes < 0] = np.datetime64("NaT")
    return out


def _parse_values(values: list, date_format: str | None, day_first: bool) -> np.ndarray:
    out = np.full(len(values), np.datetime64("NaT"), dtype="datetime64[s]")
    text_at, texts = [], []
    for i, value in enumerate(values):
        if isinstance(value, datetime.date):  # datetime.datetime and pd.Timestamp too
            out[i] = _from_python(value)
        elif isinstance(value, np.datetime64):
            out[i] = value.astype("datetime64[s]")
        else:
            text_at.append(i)
            texts.append(str(value).strip())
    if not texts:
        return out
    if date_format is None and is_iso_column(texts):
        out[text_at] = parse_iso_texts(texts, day_first)
        return out
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fast = pd.to_datetime(
            pd.Series(texts, dtype=object),
            format=date_format or column_format(texts, day_first),
            dayfirst=day_first,
            errors="coerce",
            utc=True,
        )
    fast = fast.dt.tz_localize(None).to_numpy().astype("datetime64[s]")
    for i, text, value in zip(text_at, texts, fast, strict=True):
        out[i] = value if not np.isnat(value) else _slow_parse(text, date_format, day_first)
    return out


def _layout_sample(texts: list[str]) -> list[str]:
    """Up to FORMAT_SAMPLE distinct texts spread evenly over the column (all of a smaller one):
    what a column's layout is judged from, never its first cell alone."""
    if len(texts) <= FORMAT_SAMPLE:
        return texts
    step = len(texts) / FORMAT_SAMPLE
    return [texts[int(i * step)] for i in range(FORMAT_SAMPLE)]


def is_iso_column(texts: list[str]) -> bool:
    """Whether a text date column is read as ISO 8601 (automatic format): at least half of its
    distinct texts (or of an even sample of them) start YYYY-MM-DD. Each value is then read on
    its own by ``parse_iso_texts``, so a partial date (2020, 2020-06) is its first day."""
    sample = _layout_sample(texts)
    iso = sum(bool(_ISO_START.match(t.strip())) for t in sample)
    return bool(sample) and 2 * iso >= len(sample)


def column_format(texts: list[str], day_first: bool) -> str | None:
    """The layout most of a non-ISO column's distinct texts (or an even sample) are written in,
    as a strptime format; None when no text looks like a date (pandas then reads each)."""
    guesses: dict[str, int] = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for text in _layout_sample(texts):
            try:
                guess = guess_datetime_format(text, dayfirst=day_first)
            except (ValueError, TypeError):
                guess = None
            if guess:
                guess = _in_order(guess, day_first)
                guesses[guess] = guesses.get(guess, 0) + 1
    return max(guesses, key=guesses.get) if guesses else None


def _in_order(layout: str, day_first: bool) -> str:
    """A guessed layout with day and month in the order chosen (the day-first switch decides
    the order; a text readable only the other way fails and is named by the checks)."""
    if "%d" not in layout or "%m" not in layout:
        return layout
    if (layout.index("%d") < layout.index("%m")) != day_first:
        return layout.replace("%d", "\0").replace("%m", "%d").replace("\0", "%m")
    return layout


def parse_iso_texts(texts: list[str], day_first: bool) -> np.ndarray:
    """Stripped texts of a column read as ISO 8601, each on its own (with or without a time,
    an offset); a year pandas cannot hold goes to the Python parser."""
    fast = _iso(texts)
    return np.array(
        [
            value if not np.isnat(value) else _slow_parse(text, None, day_first)
            for text, value in zip(texts, fast, strict=True)
        ],
        dtype="datetime64[s]",
    )


def _iso(texts: list[str]) -> np.ndarray:
    """ISO 8601 dates and times; a UTC offset is applied, a value without one is taken as UTC."""
    series = pd.Series(texts, dtype=object)
    out = np.full(len(texts), np.datetime64("NaT"), dtype="datetime64[s]")
    # Parsed apart: pandas gives a value without an offset the offset of the value before it.
    aware = series.str.contains(_UTC_OFFSET).to_numpy(dtype=bool)
    for part in (aware, ~aware):
        if part.any():
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                parsed = pd.to_datetime(series[part], format="ISO8601", errors="coerce", utc=True)
            out[part] = parsed.dt.tz_localize(None).to_numpy().astype("datetime64[s]")
    return out


def _slow_parse(text: str, date_format: str | None, day_first: bool) -> np.datetime64:
    """A date pandas cannot hold (a year outside 1678-2261), read by the Python parser."""
    years = [int(y) for y in _FOUR_DIGITS.findall(text)]
    if not any(y < _NS_YEARS[0] or y > _NS_YEARS[1] for y in years):
        return np.datetime64("NaT")
    try:
        if date_format:
            value = datetime.datetime.strptime(text, date_format)
        else:
            value = date_parser.parse(text, dayfirst=day_first, default=datetime.datetime(1, 1, 1))
    except (ValueError, OverflowError, TypeError):
        return np.datetime64("NaT")
    return _from_python(value)


def _from_python(value: datetime.date) -> np.datetime64:
    if isinstance(value, datetime.datetime) and value.tzinfo is not None:
        offset = value.utcoffset() or datetime.timedelta(0)
        value = value.replace(tzinfo=None) - offset
    if isinstance(value, pd.Timestamp):
        value = value.to_pydatetime()
    return np.datetime64(value, "s")


def duration_days(start: np.ndarray, end: np.ndarray) -> np.ndarray:
    """end - start in days as float (NaN where either is missing); exact over any span."""
    return (end - start) / np.timedelta64(1, "D")


def implausible(values: np.ndarray, today: datetime.date | None = None) -> np.ndarray:
    """True where a date is before 1900 (1900-01-01 included) or after today."""
    today = today or datetime.date.today()
    latest = np.datetime64(today + datetime.timedelta(days=1), "s")
    with np.errstate(invalid="ignore"):
        return ~np.isnat(values) & ((values < EARLIEST_PLAUSIBLE) | (values >= latest))


def implausible_note(columns: dict[str, np.ndarray], rows: int, excluded: bool) -> str:
    """The sentence for rows with implausible dates, with a count per column and examples."""
    counts, examples = {}, []
    for column, values in columns.items():
        flagged = implausible(values)
        if flagged.any():
            counts[column] = int(flagged.sum())
            examples.extend(np.unique(values[flagged])[:3])
    return implausible_text(counts, examples, rows, excluded)


def implausible_text(counts: dict[str, int], examples, rows: int, excluded: bool) -> str:
    """``implausible_note`` from its parts: flagged rows per column and the first few flagged
    dates (``datetime64[s]``), as a database gives them."""
    today = datetime.date.today().isoformat()
    parts = [f"{count} in {column!r}" for column, count in counts.items()]
    examples = [str(v)[:10] for v in examples]
    what = (
        "They are left out (reason 'implausible date')."
        if excluded
        else "They are kept; check them, or choose to leave such rows out (implausible dates: "
        "exclude)."
    )
    return (
        f"{rows} row(s) have a date before 1900 (1900-01-01 included, a common placeholder) or "
        f"after today ({today}): {', '.join(parts)}, such as {preview_values(examples, 3)}. " + what
    )


def check_implausible_choice(choice: str) -> None:
    if choice not in IMPLAUSIBLE_CHOICES:
        raise RoleError(
            f"Implausible dates must be handled by 'warn' or 'exclude'; got {choice!r}.",
            values=[choice],
        )
