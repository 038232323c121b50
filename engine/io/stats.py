"""Files of statistical packages: SPSS ``.sav``/``.zsav``, Stata ``.dta``, SAS ``.sas7bdat`` and
SAS transport ``.xpt``, read with pyreadstat into the same raw table as a CSV file.

A registry or trial office often sends these instead of CSV, with the meaning of codes kept in
the file's value labels (1 = "female") and a descriptive label for each variable. Hazel uses them
so that the same data give the same numbers whatever the format:

- value labels become the column's values (category names) when every value present has a
  label; a column with labels on only some of its values keeps its numbers (a continuous column
  with one labelled special code must stay numeric). The codes are kept on the table
  (``value_labels``) so the Column roles page can show them;
- user-defined missing values (SPSS) and extended missing values (Stata ``.a``-``.z``, SAS
  ``.A``-``.Z``) count as missing, as do empty text cells and the missing-value markers of the
  import options, exactly as in a text file;
- dates and date-times arrive as dates (``datetime64``), whole-number columns without missing
  values as integers (a CSV of the same data reads them so);
- variable labels are kept (``column_labels``) for the pages and the report.

The format is recognised by the file's first bytes; a file whose name claims one of these formats
but whose content is something else is refused with a message that says so, and an SPSS file in
its password-protected wrapper (``ENCRYPTED`` at byte 8, as the PSPP documentation of the
encrypted-file wrapper describes) is refused before the reader sees it.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from engine.errors import FileReadError
from engine.io.text import missing_token_variants

HEAD_BYTES = 96  # enough for every signature below

# file_format -> (name of the program, file-name suffixes)
STATS_FORMATS: dict[str, tuple[str, tuple[str, ...]]] = {
    "sav": ("SPSS", (".sav",)),
    "zsav": ("SPSS", (".zsav",)),
    "dta": ("Stata", (".dta",)),
    "sas7bdat": ("SAS", (".sas7bdat",)),
    "xpt": ("SAS transport", (".xpt", ".xport")),
}
_SUFFIX_FORMAT = {s: fmt for fmt, (_, suffixes) in STATS_FORMATS.items() for s in suffixes}
# The two 32-byte sas7bdat signatures the reader itself accepts (read from pyreadstat's
# ReadStat build: symbols sas7bdat_magic_number and sas7bdat_magic_number_alt).
_SAS7BDAT_MAGICS = (
    bytes(12) + bytes.fromhex("c2ea8160b31411cfbd92080009c7318c181f1011"),
    bytes(28) + bytes.fromhex("181f1011"),
)
_XPT_MAGICS = (
    b"HEADER RECORD*******LIBRARY HEADER RECORD!!!!!!!",
    b"HEADER RECORD*******LIBV8   HEADER RECORD!!!!!!!",
)
_OLD_STATA_VERSIONS = range(0x66, 0x74)  # .dta formats 102-115 (before the XML-like header)


@dataclass(frozen=True)
class StatsFile:
    """A statistical-package file read into raw columns, with what the file said about them."""

    frame: pd.DataFrame
    notes: tuple[str, ...] = ()
    column_labels: dict[str, str] = field(default_factory=dict)
    # column -> ((code as text, label), ...) as stored in the file, applied or not
    value_labels: dict[str, tuple[tuple[str, str], ...]] = field(default_factory=dict)


def content_format(head: bytes) -> str | None:
    """The statistical format the first bytes show, or None."""
    if head[:4] == b"$FL2":
        return "sav"
    if head[:4] == b"$FL3":
        return "zsav"
    if head.startswith(b"<stata_dta>"):
        return "dta"
    if len(head) >= 4 and head[0] in _OLD_STATA_VERSIONS and head[1] in (1, 2) and head[2] == 1:
        return "dta"
    if head[:32] in _SAS7BDAT_MAGICS:
        return "sas7bdat"
    if head.startswith(_XPT_MAGICS):
        return "xpt"
    return None


def detect_stats_format(name: str, head: bytes) -> tuple[str | None, tuple[str, ...]]:
    """(format, notes) when the file is a statistical-package file, (None, ()) when it is not.

    Raises when the name claims such a format that the content does not have, and for an SPSS
    file in its password-protected wrapper."""
    suffix = Path(name).suffix.lower()
    if head[8:17] == b"ENCRYPTED":
        raise FileReadError(
            f"{name} is a password-protected (encrypted) SPSS file, which Hazel cannot open. "
            "Open it in SPSS with its password and save it again without encryption "
            "(File > Save As, untick 'Encrypt file with password'), or export it as CSV."
        )
    found = content_format(head)
    claimed = _SUFFIX_FORMAT.get(suffix)
    if found is None:
        if claimed is not None:
            program = STATS_FORMATS[claimed][0]
            raise FileReadError(
                f"{name} has the extension of a {program} file ({suffix}) but its content is "
                f"not one ({_looks_like(head)}). Check that this is the file you meant; if it "
                "was renamed, give it the extension of what it really is."
            )
        return None, ()
    notes: tuple[str, ...] = ()
    if claimed is None or STATS_FORMATS[claimed][0] != STATS_FORMATS[found][0]:
        program = STATS_FORMATS[found][0]
        notes = (
            f"{name} is named like {suffix or 'a file without extension'} but its content is "
            f"{program} data; it was read as {program}.",
        )
    return found, notes


def _looks_like(head: bytes) -> str:
    if head.startswith(b"PK\x03\x04"):
        return "it looks like an Excel workbook or another zip file"
    if head.startswith(b"PAR1"):
        return "it looks like a Parquet file"
    if not head:
        return "it is empty"
    if all(32 <= b < 127 or b in (9, 10, 13) for b in head[:64]):
        return "it looks like text, perhaps CSV"
    other = content_format(head)
    if other is not None:
        return f"it looks like a {STATS_FORMATS[other][0]} file"
    return "its first bytes match no format Hazel reads"


def read_stats(path: Path | None, data: bytes | None, file_format: str, encoding, tokens, name):
    """Read one statistical-package file (a path, or bytes written to a private temporary file,
    since the reader takes only paths) into a ``StatsFile``."""
    if path is not None:
        return _read_path(path, file_format, encoding, tokens, name)
    handle, temp = tempfile.mkstemp(suffix=STATS_FORMATS[file_format][1][0], prefix="hazel-")
    try:
        with os.fdopen(handle, "wb") as out:
            out.write(data)
        return _read_path(Path(temp), file_format, encoding, tokens, name)
    finally:
        os.unlink(temp)


def _read_path(path: Path, file_format: str, encoding, tokens, name: str) -> StatsFile:
    import pyreadstat

    readers = {
        "sav": pyreadstat.read_sav,
        "zsav": pyreadstat.read_sav,
        "dta": pyreadstat.read_dta,
        "sas7bdat": pyreadstat.read_sas7bdat,
        "xpt": pyreadstat.read_xport,
    }
    program = STATS_FORMATS[file_format][0]
    options = {"dates_as_pandas_datetime": True}
    if encoding:
        options["encoding"] = encoding
    try:
        frame, meta = readers[file_format](str(path), **options)
        declared = {}
        if file_format in ("sav", "zsav"):
            _, with_missing = pyreadstat.read_sav(
                str(path), metadataonly=True, user_missing=True, **options
            )
            declared = dict(with_missing.missing_ranges or {})
    except (pyreadstat.ReadstatError, pyreadstat.PyreadstatError) as exc:
        raise FileReadError(
            f"{name} could not be read as a {program} file ({exc}): it may be damaged or cut "
            f"short, encrypted, or use a feature the reader does not support. Export it again "
            f"from {program}, or save it as CSV."
        ) from None
    except (UnicodeError, LookupError) as exc:
        raise FileReadError(
            f"The text in {name} could not be decoded ({exc}). Give its encoding in the import "
            "options (for example cp1252 or latin-1)."
        ) from None
    except (OSError, ValueError, TypeError, OverflowError) as exc:
        raise FileReadError(
            f"{name} could not be read as a {program} file ({type(exc).__name__}: {exc}). "
            f"Export it again from {program}, or save it as CSV."
        ) from None
    return _tidy(frame, meta, declared, tokens)


def _tidy(frame: pd.DataFrame, meta, declared: dict, tokens) -> StatsFile:
    notes: list[str] = []
    column_labels = {
        str(c): str(label).strip()
        for c, label in (meta.column_names_to_labels or {}).items()
        if label and str(label).strip() and str(label).strip() != str(c)
    }
    missing = set(missing_token_variants(tuple(tokens)))
    value_labels: dict[str, tuple[tuple[str, str], ...]] = {}
    applied, partial = [], []
    columns = {}
    for column in frame.columns:
        series = frame[column]
        if series.dtype == object:
            series = series.map(lambda v: None if isinstance(v, str) and v in missing else v)
        labels = (meta.variable_value_labels or {}).get(column) or {}
        if labels:
            value_labels[str(column)] = tuple((code_text(c), str(t)) for c, t in labels.items())
            labelled = _apply_labels(series, labels)
            if labelled is None:
                partial.append(str(column))
            else:
                series = labelled
                applied.append(str(column))
        elif pd.api.types.is_float_dtype(series) and _whole_without_missing(series):
            series = series.astype(np.int64)
        columns[column] = series
    out = pd.DataFrame(columns, index=frame.index)
    if applied:
        notes.append(
            f"Value labels of {len(applied)} column(s) ({', '.join(applied)}) were used as "
            "category names; the codes are listed on the Column roles page."
        )
    if partial:
        notes.append(
            f"Column(s) {', '.join(partial)} have value labels for only some of their values, "
            "so their numbers were kept (the labels are listed on the Column roles page)."
        )
    if declared:
        notes.append(
            "Values the file declares as missing (user-defined missing values) count as "
            f"missing in: {', '.join(str(c) for c in declared)}."
        )
    return StatsFile(out, tuple(notes), column_labels, value_labels)


def code_text(code) -> str:
    """A code as people write it: 1.0 -> '1', 2.5 -> '2.5', 'M' -> 'M'."""
    if isinstance(code, float) and code.is_integer():
        return str(int(code))
    return str(code)


def _apply_labels(series: pd.Series, labels: dict) -> pd.Series | None:
    """The labels in place of the codes, or None when some value present has no label."""
    by_text = {code_text(c): str(t) for c, t in labels.items()}
    present = series.dropna()
    if present.empty:
        return None
    texts = present.map(code_text)
    if not texts.isin(list(by_text)).all():
        return None
    out = pd.Series(None, index=series.index, dtype=object)
    out.loc[present.index] = texts.map(by_text)
    return out


def _whole_without_missing(series: pd.Series) -> bool:
    values = series.to_numpy()
    if len(values) == 0 or np.isnan(values).any() or not np.isfinite(values).all():
        return False
    return bool((values == np.round(values)).all()) and bool((np.abs(values) < 2**53).all())
