"""Read a data file into a table of raw columns.

Text files are sniffed on a sample (separator, decimal mark, encoding) and parsed by pyarrow,
which keeps a 1,000,000-row import close to the speed of a plain ``pandas.read_csv``. Anything
the sniffer was unsure about is reported (``confident=False``) so the app can show the options.
"""

from __future__ import annotations

import csv
import hashlib
import io
import re
import zipfile
from collections import Counter
from dataclasses import asdict, dataclass, field
from pathlib import Path

import pandas as pd
import pyarrow as pa

from engine.errors import FileReadError, FileTooLargeError, preview_values

DEFAULT_MISSING_TOKENS: tuple[str, ...] = ("", "NA", "N/A", ".", "-", "null", "NaN", "missing")
DEFAULT_MAX_BYTES = 600 * 1024 * 1024

SEPARATORS = (",", ";", "\t", "|")
SAMPLE_BYTES = 256 * 1024
FALLBACK_ENCODING = "cp1252"
_SEPARATOR_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}
_EXCEL_SUFFIXES = {".xlsx", ".xlsm"}
_PARQUET_SUFFIXES = {".parquet", ".pq"}
_ZIP_MAGIC = b"PK\x03\x04"
_PARQUET_MAGIC = b"PAR1"
_OLE_MAGIC = b"\xd0\xcf\x11\xe0"
_DECIMAL_COMMA = re.compile(r"^[+-]?\d+,\d+$")
_CONTROL_CHARS = re.compile(r"[\x01-\x08\x0b\x0e-\x1f\x7f-\x9f]")
_DECIMAL_POINT = re.compile(r"^[+-]?\d*\.\d+$")


@dataclass(frozen=True)
class ImportOptions:
    """How to read a file; ``None`` means detect it."""

    sep: str | None = None
    decimal: str | None = None
    encoding: str | None = None
    sheet: str | int | None = None
    missing_tokens: tuple[str, ...] = DEFAULT_MISSING_TOKENS
    max_bytes: int = DEFAULT_MAX_BYTES

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


@dataclass(frozen=True)
class _Sniffed:
    sep: str
    decimal: str
    encoding: str
    confident: bool
    notes: tuple[str, ...]


def read_table(
    source: str | Path | bytes, options: ImportOptions | None = None, *, name: str | None = None
) -> ImportedTable:
    """Read CSV/TSV/semicolon/pipe text, Excel .xlsx or Parquet into an ``ImportedTable``."""
    options = options or ImportOptions()
    path, data = _open_source(source, options.max_bytes)
    source_name = name or (path.name if path is not None else "uploaded file")
    head = data[:16] if data is not None else _read_head(path, 16)
    file_format = _detect_format(source_name, head)
    sha256 = _sha256(path, data)
    if file_format == "xlsx":
        frame, used, notes, confident = _read_excel(path, data, options, source_name)
    elif file_format == "parquet":
        frame, used, notes, confident = _read_parquet(path, data, options, source_name)
    else:
        frame, used, notes, confident = _read_text(path, data, options, source_name)
    frame, dropped_note = _drop_empty_unnamed_columns(frame)
    notes = notes + dropped_note
    _check_columns(frame, source_name)
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
    )


def missing_token_variants(tokens: tuple[str, ...]) -> list[str]:
    """Each token as written, lower, upper and title case: 'NA', 'na', 'Na' all mean missing."""
    variants: list[str] = []
    for token in tokens:
        for form in (token, token.lower(), token.upper(), token.title()):
            if form not in variants:
                variants.append(form)
    return variants


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


def _read_head(path: Path, size: int) -> bytes:
    with path.open("rb") as handle:
        return handle.read(size)


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


# --- text files ---------------------------------------------------------------------------------


def _read_text(path, data, options: ImportOptions, name: str):
    sample = data[:SAMPLE_BYTES] if data is not None else _read_head(path, SAMPLE_BYTES)
    truncated = len(sample) == SAMPLE_BYTES
    sniffed = _sniff(sample, truncated, options, name)
    notes = list(sniffed.notes)
    confident = sniffed.confident
    encoding = sniffed.encoding
    frame = _parse_text(path, data, sniffed.sep, sniffed.decimal, encoding, options, notes, name)
    guessed_utf8 = options.encoding is None and encoding not in (FALLBACK_ENCODING, "latin-1")
    if guessed_utf8 and _has_undecoded(frame):
        # The sample was valid UTF-8 but a later part of the file is not.
        encoding = FALLBACK_ENCODING
        notes.append(
            "Part of the file is not valid UTF-8; it was read as Windows-1252 (Latin-1). "
            "Check accented characters."
        )
        confident = False
        frame = _parse_text(
            path, data, sniffed.sep, sniffed.decimal, encoding, options, notes, name
        )
    if any("malformed" in note for note in notes):
        confident = False
    used = ImportOptions(
        sep=sniffed.sep,
        decimal=sniffed.decimal,
        encoding=encoding,
        sheet=None,
        missing_tokens=options.missing_tokens,
        max_bytes=options.max_bytes,
    )
    return frame, used, notes, confident


def _sniff(sample: bytes, truncated: bool, options: ImportOptions, name: str) -> _Sniffed:
    notes: list[str] = []
    confident = True
    if not sample.strip():
        raise FileReadError(f"{name} is empty (only blank lines). Export the data again.")
    encoding = options.encoding or _guess_encoding(sample)
    if b"\x00" in sample and not encoding.startswith("utf-16"):
        raise FileReadError(
            f"{name} does not look like a text table (it contains binary data). "
            "Upload a CSV, TSV, Excel .xlsx or Parquet file."
        )
    if encoding in (FALLBACK_ENCODING, "latin-1") and options.encoding is None:
        notes.append("The file is not UTF-8; it was read as Windows-1252 (Latin-1).")
    try:
        text = sample.decode(encoding, errors="strict" if not truncated else "ignore")
    except (UnicodeDecodeError, LookupError) as exc:
        raise FileReadError(
            f"{name} cannot be decoded as {encoding}: {exc}. Choose another encoding."
        ) from None
    text = text.lstrip("\ufeff")
    if _looks_binary(text):
        raise FileReadError(
            f"{name} does not look like a text table (it contains binary data). "
            "Upload a CSV, TSV, Excel .xlsx or Parquet file."
        )
    lines = text.splitlines()
    if truncated and len(lines) > 1:
        lines = lines[:-1]
    lines = [line for line in lines if line.strip()][:200]
    if options.sep:
        sep = options.sep
    else:
        sep, sure = _sniff_separator(lines)
        confident &= sure
        if not sure:
            notes.append(
                f"The column separator was unclear; {_SEPARATOR_NAMES.get(sep, repr(sep))} "
                "was used. Check the columns and set the separator if they look wrong."
            )
    if options.decimal:
        decimal = options.decimal
    else:
        decimal, sure = _sniff_decimal(lines, sep)
        confident &= sure
        if decimal == ",":
            notes.append("Numbers use a decimal comma (3,5 = 3.5).")
        if not sure:
            notes.append("The decimal mark was unclear; check numeric columns.")
    return _Sniffed(sep, decimal, encoding, confident, tuple(notes))


def _guess_encoding(sample: bytes) -> str:
    if sample.startswith(b"\xef\xbb\xbf"):
        return "utf-8-sig"
    if sample.startswith((b"\xff\xfe", b"\xfe\xff")):
        return "utf-16"
    try:
        sample.decode("utf-8")
    except UnicodeDecodeError as exc:
        # A multi-byte character cut by the end of the sample is not an error.
        if exc.start < len(sample) - 3 or len(sample) < SAMPLE_BYTES:
            try:
                sample.decode(FALLBACK_ENCODING)
            except UnicodeDecodeError:
                return "latin-1"  # cp1252 leaves five bytes undefined; latin-1 maps every byte
            return FALLBACK_ENCODING
    return "utf-8"


def _looks_binary(text: str) -> bool:
    if "\x00" in text:
        return True
    controls = len(_CONTROL_CHARS.findall(text))
    return controls > max(2, 0.02 * len(text))


def _field_counts(lines: list[str], sep: str) -> list[int]:
    try:
        return [len(row) for row in csv.reader(lines, delimiter=sep)]
    except csv.Error:
        return []


def _sniff_separator(lines: list[str]) -> tuple[str, bool]:
    """Pick the separator that splits the header and most rows into the same number of fields."""
    scored = []
    for sep in SEPARATORS:
        counts = _field_counts(lines, sep)
        if not counts:
            continue
        mode, _ = Counter(counts).most_common(1)[0]
        if mode < 2:
            continue
        consistency = sum(c == mode for c in counts) / len(counts)
        header_fits = counts[0] == mode
        scored.append((header_fits and consistency >= 0.9, consistency, mode, sep))
    if not scored:
        return ",", len(lines) > 0 and all("," not in line for line in lines)
    scored.sort(key=lambda s: (s[0], s[1], s[2]), reverse=True)
    best = scored[0]
    rivals = [s for s in scored[1:] if s[0]]
    return best[3], bool(best[0]) and not rivals


def _sniff_decimal(lines: list[str], sep: str) -> tuple[str, bool]:
    if sep == ",":
        return ".", True
    commas = points = 0
    try:
        for row in csv.reader(lines[1:], delimiter=sep):
            for cell in row:
                cell = cell.strip()
                commas += bool(_DECIMAL_COMMA.match(cell))
                points += bool(_DECIMAL_POINT.match(cell))
    except csv.Error:
        return ".", False
    if commas and not points:
        return ",", True
    if commas and points:
        return ("," if commas > points else "."), False
    return ".", True


def _parse_text(path, data, sep, decimal, encoding, options, notes, name) -> pd.DataFrame:
    malformed: list[str] = []

    def skip_malformed(row) -> str:
        malformed.append(str(row.text))
        return "skip"

    kwargs = {
        "sep": sep,
        "decimal": decimal,
        "na_values": missing_token_variants(options.missing_tokens),
        "keep_default_na": False,
    }
    arrow_encoding = "utf-8" if encoding in ("utf-8", "utf-8-sig") else encoding
    source = str(path) if path is not None else io.BytesIO(data)
    try:
        frame = pd.read_csv(
            source, engine="pyarrow", encoding=arrow_encoding, on_bad_lines=skip_malformed, **kwargs
        )
    except (pa.ArrowException, ValueError, OverflowError, TypeError):
        # pyarrow cannot cope with some quoting and line-ending mixes; the python parser can.
        malformed.clear()
        frame = _parse_text_python(path, data, encoding, kwargs, malformed, name)
    if malformed:
        notes.append(
            f"{len(malformed)} malformed line(s) with the wrong number of fields were skipped: "
            f"{preview_values(malformed, 3)}. Check the separator and quoting."
        )
    names = [str(c).strip() for c in frame.columns]
    frame.columns = [n if n else f"Unnamed: {i}" for i, n in enumerate(names)]
    _check_columns(frame, name)
    return frame


def _parse_text_python(path, data, encoding, kwargs, malformed, name) -> pd.DataFrame:
    def skip_malformed(fields: list[str]) -> None:
        malformed.append(kwargs["sep"].join(fields))
        return None

    source = str(path) if path is not None else io.BytesIO(data)
    try:
        return pd.read_csv(
            source, engine="python", encoding=encoding, on_bad_lines=skip_malformed, **kwargs
        )
    except pd.errors.EmptyDataError:
        raise FileReadError(f"{name} has no columns. Export the data again.") from None
    except (ValueError, csv.Error, pd.errors.ParserError, UnicodeError, OverflowError) as exc:
        raise FileReadError(
            f"{name} could not be read as a table: {exc}. Check the separator, quoting and "
            "encoding, or export the file again."
        ) from None


def _has_undecoded(frame: pd.DataFrame) -> bool:
    """pyarrow keeps invalid UTF-8 as bytes: one bytes value means the encoding was wrong."""
    for position in range(frame.shape[1]):
        series = frame.iloc[:, position]
        if series.dtype == object:
            first = series.first_valid_index()
            if first is not None and isinstance(series.loc[first], bytes):
                return True
    return False


# --- Excel and Parquet --------------------------------------------------------------------------


def _read_excel(path, data, options: ImportOptions, name: str):
    source = path if path is not None else io.BytesIO(data)
    try:
        book = pd.ExcelFile(source, engine="openpyxl")
    except (zipfile.BadZipFile, KeyError, ValueError, OSError, TypeError, SyntaxError) as exc:
        raise FileReadError(
            f"{name} is not a readable Excel .xlsx workbook ({type(exc).__name__}). "
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
        except (KeyError, ValueError, TypeError, OSError) as exc:
            raise FileReadError(f"Sheet {sheet!r} of {name} could not be read: {exc}.") from None
    raw = raw.dropna(how="all").dropna(axis=1, how="all")
    if raw.empty:
        raise FileReadError(f"Sheet {sheet!r} of {name} is empty. Pick another sheet.")
    header = ["" if pd.isna(v) else str(v).strip() for v in raw.iloc[0]]
    header = [h[:-2] if h.endswith(".0") and h[:-2].isdigit() else h for h in header]
    _check_duplicates(header, name)
    header = [h or f"Unnamed: {i}" for i, h in enumerate(header)]
    frame = raw.iloc[1:].reset_index(drop=True).infer_objects()
    frame.columns = header
    notes = [] if len(book.sheet_names) == 1 else [f"Read sheet {sheet!r}."]
    used = ImportOptions(
        sheet=sheet, missing_tokens=options.missing_tokens, max_bytes=options.max_bytes
    )
    return frame, used, notes, True


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
        frame = pd.read_parquet(source)
    except (pa.ArrowException, OSError, ValueError, TypeError) as exc:
        raise FileReadError(
            f"{name} is not a readable Parquet file ({exc}). Export it again or use CSV."
        ) from None
    frame = frame.reset_index(drop=isinstance(frame.index, pd.RangeIndex))
    used = ImportOptions(missing_tokens=options.missing_tokens, max_bytes=options.max_bytes)
    return frame, used, [], True


# --- shared checks ------------------------------------------------------------------------------


def _check_duplicates(names: list[str], source_name: str) -> None:
    counts = Counter(n for n in names if n)
    dups = [n for n, c in counts.items() if c > 1]
    if dups:
        raise FileReadError(
            f"{source_name} has duplicate column names: {preview_values(dups)}. "
            "Rename the columns so each name is used once."
        )


def _check_columns(frame: pd.DataFrame, source_name: str) -> None:
    if frame.shape[1] == 0:
        raise FileReadError(f"{source_name} has no columns. Export the data again.")
    _check_duplicates([str(c) for c in frame.columns], source_name)


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
