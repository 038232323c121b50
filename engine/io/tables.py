"""Read a data file into a table of raw columns.

Text files are sniffed on a sample (separator, decimal mark, encoding) and parsed by pyarrow,
which keeps a 1,000,000-row import close to the speed of a plain ``pandas.read_csv``. Anything
the sniffer was unsure about is reported (``confident=False``) so the app can show the options.
The text sniffing and parsing are in ``engine.io.text``; Excel and Parquet are read here.
"""

from __future__ import annotations

import hashlib
import io
import json
import zipfile
import zlib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import asdict, dataclass, field
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from engine.errors import FileReadError, FileTooLargeError, ImportOptionError, preview_values
from engine.io.memory import out_of_memory
from engine.io.stats import HEAD_BYTES, detect_stats_format, read_stats
from engine.io.text import (
    check_columns,
    check_duplicates,
    missing_token_variants,
    read_head,
    read_text,
)

DEFAULT_MISSING_TOKENS: tuple[str, ...] = ("", "NA", "N/A", ".", "-", "null", "NaN", "missing")
DEFAULT_MAX_BYTES = 1024 * 1024 * 1024  # matches server.maxUploadSize (1024 MB)

_EXCEL_SUFFIXES = {".xlsx", ".xlsm"}
_PARQUET_SUFFIXES = {".parquet", ".pq"}
# a quote opens a quoted field and a line break ends a record: neither can separate columns
UNUSABLE_SEPARATORS = ('"', "\n", "\r")
_ZIP_MAGIC = b"PK\x03\x04"
_PARQUET_MAGIC = b"PAR1"
_OLE_MAGIC = b"\xd0\xcf\x11\xe0"


@dataclass(frozen=True)
class ImportOptions:
    """How to read a file; ``None`` means detect it."""

    sep: str | None = None
    decimal: str | None = None
    encoding: str | None = None
    sheet: str | int | None = None
    missing_tokens: tuple[str, ...] = DEFAULT_MISSING_TOKENS
    max_bytes: int = DEFAULT_MAX_BYTES

    def __post_init__(self):
        """Options are checked where they are made, so the app, a recipe and the command line
        meet one rule and no reader below sees a separator it cannot split on."""
        if self.sep is not None and (
            not isinstance(self.sep, str) or len(self.sep) != 1 or self.sep in UNUSABLE_SEPARATORS
        ):
            raise ImportOptionError(
                f"The column separator must be one character that is not a quote or a line break "
                f"(a comma, semicolon, tab or pipe, for example); got {self.sep!r}. Leave it "
                "empty to detect it.",
                "sep",
            )
        if self.decimal not in (None, ".", ","):
            raise ImportOptionError(
                f"The decimal mark must be '.' or ','; got {self.decimal!r}. Leave it empty to "
                "detect it.",
                "decimal",
            )
        if self.sep is not None and self.sep == self.decimal:
            raise ImportOptionError(
                f"The column separator and the decimal mark are both {self.sep!r}; a number "
                "such as 3,5 could not be told from two columns. Choose two different marks.",
                "sep",
            )

    def to_dict(self) -> dict:
        out = asdict(self)
        out["missing_tokens"] = list(self.missing_tokens)
        return out

    @classmethod
    def from_dict(cls, data: dict) -> ImportOptions:
        known = {k: v for k, v in data.items() if k in cls.__dataclass_fields__}
        if "missing_tokens" in known:
            known["missing_tokens"] = tuple(str(t) for t in known["missing_tokens"])
        return cls(**known)


@dataclass(frozen=True, eq=False)
class ImportedTable:
    """A file read into raw columns, with the options actually used and how sure detection was."""

    frame: pd.DataFrame
    source_name: str
    file_format: str
    options: ImportOptions
    sha256: str
    confident: bool = True
    notes: tuple[str, ...] = field(default_factory=tuple)
    # Lines skipped for having the wrong number of fields; `prepare` counts them as excluded rows.
    malformed_lines: tuple[str, ...] = field(default_factory=tuple)
    # From statistical-package files (engine.io.stats): variable labels by column, and the value
    # labels as stored in the file (column -> ((code, label), ...)).
    column_labels: dict[str, str] = field(default_factory=dict)
    value_labels: dict[str, tuple[tuple[str, str], ...]] = field(default_factory=dict)

    def label_of(self, column) -> str:
        """The variable label a statistical-package file gave ``column`` ('' if none)."""
        return self.column_labels.get(str(column), "")

    def fingerprint(self) -> dict:
        """Identify the data a result was computed from (for recipes and reports)."""
        return {
            "sha256": self.sha256,
            "rows": len(self.frame),
            "columns": [str(c) for c in self.frame.columns],
        }

    def to_dict(self) -> dict:
        return {
            "source_name": self.source_name,
            "file_format": self.file_format,
            "options": self.options.to_dict(),
            "confident": self.confident,
            "notes": list(self.notes),
            **self.fingerprint(),
        }


def read_table(
    source: str | Path | bytes, options: ImportOptions | None = None, *, name: str | None = None
) -> ImportedTable:
    """Read CSV/TSV/semicolon/pipe text, Excel .xlsx, Parquet, or an SPSS, Stata or SAS file
    (``engine.io.stats``) into an ``ImportedTable``."""
    options = options or ImportOptions()
    path, data = _open_source(source, options.max_bytes)
    source_name = name or (path.name if path is not None else "uploaded file")
    head = data[:HEAD_BYTES] if data is not None else read_head(path, HEAD_BYTES)
    stats_format, stats_notes = detect_stats_format(source_name, head)
    if stats_format is not None:
        return _read_stats_table(path, data, options, source_name, stats_format, stats_notes)
    file_format = _detect_format(source_name, head[:16])
    # hashlib releases the GIL, so the fingerprint is computed while the file is parsed.
    try:
        with ThreadPoolExecutor(max_workers=1) as pool:
            sha256 = pool.submit(_sha256, path, data)
            if file_format == "xlsx":
                frame, used, notes, confident = _read_excel(path, data, options, source_name)
            elif file_format == "parquet":
                frame, used, notes, confident = _read_parquet(path, data, options, source_name)
            else:
                frame, used, notes, confident = read_text(path, data, options, source_name)
            sha256 = sha256.result()
    except MemoryError:
        size = len(data) if data is not None else path.stat().st_size
        raise out_of_memory(source_name, size) from None
    malformed_lines = tuple(frame.attrs.pop("malformed_lines", ()))
    frame, dropped_note = _drop_empty_unnamed_columns(frame)
    notes = notes + dropped_note
    check_columns(frame, source_name)
    if len(frame) == 0:
        raise FileReadError(
            f"{source_name} has a header ({preview_values(frame.columns)}) but no data rows. "
            "Check that the file is complete, or pick another sheet."
        )
    return ImportedTable(
        frame=frame,
        source_name=source_name,
        file_format=file_format,
        options=used,
        sha256=sha256,
        confident=confident,
        notes=tuple(notes),
        malformed_lines=malformed_lines,
    )


def _open_source(source: str | Path | bytes, max_bytes: int) -> tuple[Path | None, bytes | None]:
    if isinstance(source, bytes | bytearray | memoryview):
        data = bytes(source)
        _check_size(len(data), max_bytes, "The uploaded file")
        return None, data
    path = Path(source)
    if not path.exists():
        raise FileReadError(f"File not found: {path}. Check the path and try again.")
    if not path.is_file():
        raise FileReadError(f"{path} is not a file (a directory?). Give the path of a data file.")
    _check_size(path.stat().st_size, max_bytes, str(path))
    return path, None


def _check_size(size: int, max_bytes: int, what: str) -> None:
    if size > max_bytes:
        raise FileTooLargeError(
            f"{what} is {size / 1024**2:.1f} MB, more than the limit of "
            f"{max_bytes / 1024**2:.0f} MB. Remove unused columns or rows, or raise the limit."
        )
    if size == 0:
        raise FileReadError(f"{what} is empty (0 bytes). Export the data again and retry.")


def _sha256(path: Path | None, data: bytes | None) -> str:
    if data is not None:
        return hashlib.sha256(data).hexdigest()
    with path.open("rb") as handle:
        return hashlib.file_digest(handle, "sha256").hexdigest()


def _detect_format(name: str, head: bytes) -> str:
    suffix = Path(name).suffix.lower()
    if head.startswith(_PARQUET_MAGIC) or (suffix in _PARQUET_SUFFIXES and len(head) > 0):
        return "parquet"
    if head.startswith(_ZIP_MAGIC) or suffix in _EXCEL_SUFFIXES:
        return "xlsx"
    if head.startswith(_OLE_MAGIC) or suffix == ".xls":
        raise FileReadError(
            f"{name} looks like an old Excel .xls workbook, which Hazel does not read. "
            "Save it as .xlsx or CSV and upload that."
        )
    return "csv"


# --- Excel and Parquet --------------------------------------------------------------------------

# What a damaged workbook makes openpyxl raise: a bad zip directory or deflate stream, a cut-off
# member, broken XML (SyntaxError), missing parts (KeyError) or values of the wrong shape.
_BROKEN_WORKBOOK = (
    zipfile.BadZipFile,
    zlib.error,
    EOFError,
    KeyError,
    IndexError,
    AttributeError,
    ValueError,
    OSError,
    TypeError,
    SyntaxError,
    UnicodeError,
)


def _read_excel(path, data, options: ImportOptions, name: str):
    source = path if path is not None else io.BytesIO(data)
    try:
        book = pd.ExcelFile(source, engine="openpyxl")
    except _BROKEN_WORKBOOK as exc:
        raise FileReadError(
            f"{name} is not a readable Excel .xlsx workbook ({_problem(exc)}). "
            "Open it in a spreadsheet program and save it as .xlsx or CSV."
        ) from None
    with book:
        sheet = _resolve_sheet(options.sheet, book.sheet_names, name)
        try:
            raw = book.parse(
                sheet,
                header=None,
                na_values=missing_token_variants(options.missing_tokens),
                keep_default_na=False,
            )
        except _BROKEN_WORKBOOK as exc:
            raise FileReadError(
                f"Sheet {sheet!r} of {name} could not be read ({_problem(exc)}); the "
                "workbook may be damaged. Open it in a spreadsheet program and save it again as "
                ".xlsx or CSV."
            ) from None
    raw = raw.dropna(how="all").dropna(axis=1, how="all")
    if raw.empty:
        raise FileReadError(f"Sheet {sheet!r} of {name} is empty. Pick another sheet.")
    header = ["" if pd.isna(v) else str(v).strip() for v in raw.iloc[0]]
    header = [h[:-2] if h.endswith(".0") and h[:-2].isdigit() else h for h in header]
    check_duplicates(header, name)
    header = [h or f"Unnamed: {i}" for i, h in enumerate(header)]
    frame = raw.iloc[1:].reset_index(drop=True).infer_objects()
    frame.columns = header
    notes = [] if len(book.sheet_names) == 1 else [f"Read sheet {sheet!r}."]
    used = ImportOptions(
        sheet=sheet, missing_tokens=options.missing_tokens, max_bytes=options.max_bytes
    )
    return frame, used, notes, True


def _problem(exc: BaseException) -> str:
    """'zlib.error: Error -3 while decompressing data' rather than a bare 'error'."""
    kind = type(exc).__name__
    if kind == "error":
        kind = f"{type(exc).__module__}.error"
    text = " ".join(str(exc).split())[:200]
    return f"{kind}: {text}" if text else kind


def _resolve_sheet(sheet, names: list[str], name: str) -> str:
    if sheet is None:
        return names[0]
    if isinstance(sheet, str) and sheet in names:
        return sheet
    if isinstance(sheet, int) or (isinstance(sheet, str) and sheet.strip().isdigit()):
        index = int(sheet)
        if 0 <= index < len(names):
            return names[index]
    raise FileReadError(
        f"{name} has no sheet {sheet!r}. Its sheets are {preview_values(names, 10)} "
        "(give a name, or a number counted from 0)."
    )


def _read_parquet(path, data, options: ImportOptions, name: str):
    source = str(path) if path is not None else io.BytesIO(data)
    try:
        table = pq.read_table(source)
        table, notes = _nested_as_text(table)
        frame = table.to_pandas()
    except (pa.ArrowException, OSError, ValueError, TypeError) as exc:
        raise FileReadError(
            f"{name} is not a readable Parquet file ({exc}). Export it again or use CSV."
        ) from None
    if not isinstance(frame.index, pd.RangeIndex):
        frame, index_notes = _index_as_columns(frame)
        notes += index_notes
    used = ImportOptions(missing_tokens=options.missing_tokens, max_bytes=options.max_bytes)
    return frame, used, notes, True


def _nested_as_text(table: pa.Table) -> tuple[pa.Table, list[str]]:
    """Lists, records and maps cannot be compared or counted as values: show each as JSON text."""
    nested = [
        i for i, f in enumerate(table.schema) if pa.types.is_nested(f.type)
    ]  # list, large list, fixed-size list, struct, map, union
    for i in nested:
        texts = [
            None if v is None else json.dumps(v, default=str, ensure_ascii=False)
            for v in table.column(i).to_pylist()
        ]
        table = table.set_column(i, table.schema[i].name, pa.array(texts, type=pa.string()))
    if not nested:
        return table, []
    names = [table.schema[i].name for i in nested]
    return table, [
        f"Column(s) {preview_values(names)} hold lists or records; they were read as text."
    ]


def _index_as_columns(frame: pd.DataFrame) -> tuple[pd.DataFrame, list[str]]:
    """A stored index becomes ordinary columns; a name a column already has gets ' (index)'."""
    taken = {str(c) for c in frame.columns}
    names, renamed = [], []
    for position, level in enumerate(frame.index.names):
        label = "index" if level is None and frame.index.nlevels == 1 else level
        label = f"level_{position}" if label is None else str(label)
        if label in taken:
            renamed.append(label)
            label = f"{label} (index)"
        taken.add(label)
        names.append(label)
    frame = frame.rename_axis(names).reset_index()
    notes = (
        [
            f"The file's stored index {preview_values(renamed)} has the name of a column; it was "
            "read as a column of its own with ' (index)' added to the name."
        ]
        if renamed
        else []
    )
    return frame, notes


def _read_stats_table(path, data, options: ImportOptions, name: str, file_format: str, notes):
    """An SPSS, Stata or SAS file: the same checks and fingerprint as any other reader."""
    with ThreadPoolExecutor(max_workers=1) as pool:
        sha256 = pool.submit(_sha256, path, data)
        read = read_stats(path, data, file_format, options.encoding, options.missing_tokens, name)
        sha256 = sha256.result()
    frame = read.frame
    check_columns(frame, name)
    if len(frame) == 0:
        raise FileReadError(
            f"{name} has variables ({preview_values(frame.columns)}) but no data rows. "
            "Check that the file is complete."
        )
    used = ImportOptions(
        encoding=options.encoding,
        missing_tokens=options.missing_tokens,
        max_bytes=options.max_bytes,
    )
    return ImportedTable(
        frame=frame,
        source_name=name,
        file_format=file_format,
        options=used,
        sha256=sha256,
        notes=tuple(notes) + read.notes,
        column_labels=read.column_labels,
        value_labels=read.value_labels,
    )


# --- after any reader -----------------------------------------------------------------------------


def _drop_empty_unnamed_columns(frame: pd.DataFrame) -> tuple[pd.DataFrame, list[str]]:
    """Trailing separators make nameless, empty columns; they carry nothing."""
    empty = [
        c
        for c in frame.columns
        if (str(c) == "" or str(c).startswith("Unnamed: ")) and frame[c].isna().all()
    ]
    if not empty:
        return frame, []
    return frame.drop(columns=empty), [f"{len(empty)} empty column(s) without a name were ignored."]
