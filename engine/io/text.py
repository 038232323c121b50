"""Delimited text files: sniffing the separator, decimal mark and encoding on a sample, then
parsing with pyarrow (the python parser as a fallback for quoting pyarrow cannot follow).

Also here: the rules every reader shares for missing-value tokens and column names.
"""

from __future__ import annotations

import codecs
import csv
import io
import re
from collections import Counter
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv

from engine.errors import FileReadError, preview_values
from engine.io.memory import check_memory_for_import, out_of_memory

if TYPE_CHECKING:
    from engine.io.tables import ImportOptions

SEPARATORS = (",", ";", "\t", "|")
SAMPLE_BYTES = 256 * 1024
MAX_COLUMNS = 16_384  # the most columns a spreadsheet sheet holds; more is not a table of cases
_CHUNK_BYTES = 16 * 1024 * 1024
_CP1252_UNDEFINED = re.compile(b"[\x81\x8d\x8f\x90\x9d]")
FALLBACK_ENCODING = "cp1252"
# The text encodings a table may be read in, under any name Python gives them (latin1,
# windows-1252, utf8...). Other codecs (idna, punycode, rot13, base64, hex...) do not turn bytes
# into the text of a table and are refused.
TEXT_ENCODINGS = (
    "utf-8", "utf-8-sig", "utf-16", "utf-16-le", "utf-16-be", "utf-32", "ascii", "latin-1",
    "iso-8859-2", "iso-8859-15", "cp1250", "cp1251", "cp1252", "cp1253", "cp1254", "cp1257",
    "mac-roman", "cp437", "cp850", "koi8-r", "shift_jis", "euc-jp", "gb18030", "gbk", "big5",
    "euc-kr",
)  # fmt: skip
_SEPARATOR_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}
_DECIMAL_COMMA = re.compile(r"^[+-]?\d+,\d+$")
_CONTROL_CHARS = re.compile(r"[\x01-\x08\x0b\x0e-\x1f\x7f-\x9f]")
_DECIMAL_POINT = re.compile(r"^[+-]?\d*\.\d+$")


@dataclass(frozen=True)
class _Sniffed:
    sep: str
    decimal: str
    encoding: str
    confident: bool
    notes: tuple[str, ...]


def missing_token_variants(tokens: tuple[str, ...]) -> list[str]:
    """Each token as written, lower, upper and title case: 'NA', 'na', 'Na' all mean missing."""
    variants: list[str] = []
    for token in tokens:
        for form in (token, token.lower(), token.upper(), token.title()):
            if form not in variants:
                variants.append(form)
    return variants


def read_head(path: Path, size: int) -> bytes:
    with path.open("rb") as handle:
        return handle.read(size)


# --- column names (every reader) -----------------------------------------------------------------


def check_duplicates(names: list[str], source_name: str) -> None:
    counts = Counter(n for n in names if n)
    dups = [n for n, c in counts.items() if c > 1]
    if dups:
        raise FileReadError(
            f"{source_name} has duplicate column names: {preview_values(dups)}. "
            "Rename the columns so each name is used once."
        )


def check_columns(frame: pd.DataFrame, source_name: str) -> None:
    if frame.shape[1] == 0:
        raise FileReadError(f"{source_name} has no columns. Export the data again.")
    check_duplicates([str(c) for c in frame.columns], source_name)


# --- text files ---------------------------------------------------------------------------------


def read_text(path, data, options: ImportOptions, name: str):
    """(frame, options actually used, notes, confident) for a text file, sniffed on a sample."""
    sample = data[:SAMPLE_BYTES] if data is not None else read_head(path, SAMPLE_BYTES)
    truncated = len(sample) == SAMPLE_BYTES
    sniffed = _sniff(sample, truncated, options, name)
    size = len(data) if data is not None else path.stat().st_size
    check_memory_for_import(size, sample, sniffed.sep, name)
    confident = sniffed.confident
    encoding = sniffed.encoding
    parse_notes: list[str] = []
    if truncated and options.encoding is None and encoding in ("utf-8", "utf-8-sig"):
        encoding = _rest_of_file_encoding(path, data, encoding)
        if encoding != sniffed.encoding:
            # The sample was valid UTF-8 but a later part of the file is not.
            confident = False
            parse_notes.append(
                f"Part of the file is not valid UTF-8; it was read as {encoding}. "
                "Check accented characters."
            )
    frame = _parse_text(
        path, data, sniffed.sep, sniffed.decimal, encoding, options, parse_notes, name
    )
    notes = [*sniffed.notes, *parse_notes]
    if any("malformed" in note for note in notes):
        confident = False
    # every field set: the other two (missing tokens, size limit) are kept as given
    used = replace(options, sep=sniffed.sep, decimal=sniffed.decimal, encoding=encoding, sheet=None)
    return frame, used, notes, confident


def _rest_of_file_encoding(path, data, encoding: str) -> str:
    """Decode the whole file in chunks (nothing kept): UTF-8 throughout, or the fallback.

    Knowing this before parsing reads the file once, with the right encoding, instead of
    parsing it as UTF-8 and again when some later cell turns out not to be."""
    decoder = codecs.getincrementaldecoder("utf-8")()
    try:
        for chunk in _chunks(path, data):
            decoder.decode(chunk)
        decoder.decode(b"", final=True)
    except UnicodeDecodeError:
        gaps = any(_CP1252_UNDEFINED.search(chunk) for chunk in _chunks(path, data))
        return "latin-1" if gaps else FALLBACK_ENCODING  # latin-1 maps every byte
    return encoding


def _chunks(path, data):
    if data is not None:
        for start in range(0, len(data), _CHUNK_BYTES):
            yield data[start : start + _CHUNK_BYTES]
        return
    with path.open("rb") as handle:
        while chunk := handle.read(_CHUNK_BYTES):
            yield chunk


def _check_width(text: str, lines: list[str], sep: str | None, truncated: bool, name: str):
    """Refuse a header of more than MAX_COLUMNS fields, or a header with no rows, before the
    whole file is parsed (a header of a million fields took minutes to reach the same message)."""
    header = lines[0] if lines else ""
    if truncated and "\n" not in text and "\r" not in text:
        header = text  # the first line is longer than the sample
    seps = [sep] if sep else list(SEPARATORS)
    fields = max(header.count(s) for s in seps) + 1
    if fields > MAX_COLUMNS:
        more = "at least " if header is text else ""
        raise FileReadError(
            f"{name} has {more}{fields:,} columns; Hazel reads at most {MAX_COLUMNS:,} (the most "
            "a spreadsheet sheet holds). Keep only the columns the analysis needs, or check the "
            "separator."
        )
    if not truncated and len(lines) == 1:
        try:
            names = next(csv.reader([header], delimiter=sep or ","), [])
        except csv.Error:  # a field over the csv module's limit (128 kB): split plainly
            names = header.split(sep or ",")
        shown = preview_values([n if len(n) <= 60 else n[:57] + "..." for n in names])
        raise FileReadError(
            f"{name} has a header ({shown}) but no data rows. Check that the file is complete, "
            "or pick another sheet."
        )


def text_encoding(name: str) -> str:
    """``name`` when it names one of ``TEXT_ENCODINGS`` (under any of its names); otherwise a
    FileReadError that lists them."""
    try:
        known = codecs.lookup(str(name)).name
    except LookupError:
        known = None
    if known is not None and known in {codecs.lookup(e).name for e in TEXT_ENCODINGS}:
        return str(name)
    raise FileReadError(
        f"{str(name)!r} is not a text encoding Hazel reads tables in; choose one of "
        f"{', '.join(TEXT_ENCODINGS)}."
    )


def _sniff(sample: bytes, truncated: bool, options: ImportOptions, name: str) -> _Sniffed:
    notes: list[str] = []
    confident = True
    if not sample.strip():
        raise FileReadError(f"{name} is empty (only blank lines). Export the data again.")
    encoding = text_encoding(options.encoding) if options.encoding else _guess_encoding(sample)
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
    _check_width(text, lines, options.sep, truncated, name)
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
        frame = _parse_with_pyarrow(source, sep, decimal, arrow_encoding, kwargs, skip_malformed)
    except MemoryError:  # pyarrow's own (ArrowMemoryError) too: the python parser needs more
        size = len(data) if data is not None else path.stat().st_size
        raise out_of_memory(name, size) from None
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
    check_columns(frame, name)
    frame.attrs["malformed_lines"] = tuple(malformed)
    return frame


def _parse_with_pyarrow(source, sep, decimal, encoding, kwargs, on_bad_line) -> pd.DataFrame:
    """What ``pandas.read_csv(engine="pyarrow")`` does, but converting column by column
    (``self_destruct``) so the Arrow table and the frame are not both held in full."""
    table = pa_csv.read_csv(
        source,
        read_options=pa_csv.ReadOptions(encoding=encoding),
        parse_options=pa_csv.ParseOptions(delimiter=sep, invalid_row_handler=on_bad_line),
        convert_options=pa_csv.ConvertOptions(
            null_values=kwargs["na_values"],
            strings_can_be_null="" in kwargs["na_values"],
            decimal_point=decimal,
        ),
    )
    return table.to_pandas(self_destruct=True, split_blocks=True)


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
