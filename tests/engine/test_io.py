"""Reading files: formats, encodings, separators, missing tokens and every error case."""

from __future__ import annotations

import hashlib
import io
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from engine.errors import FileReadError, FileTooLargeError, HazelError
from engine.io.tables import (
    DEFAULT_MISSING_TOKENS,
    ImportedTable,
    ImportOptions,
    missing_token_variants,
    read_table,
)
from engine.io.text import SAMPLE_BYTES
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles

DATA = Path(__file__).parent / "data"


@pytest.mark.parametrize(
    ("name", "sep", "decimal", "encoding", "rows", "columns"),
    [
        ("clinic_export_bom_semicolon.csv", ";", ",", "utf-8-sig", 8, 7),
        ("lab_latin1.tsv", "\t", ".", "cp1252", 5, 5),
        ("registry_pipe.txt", "|", ".", "utf-8", 12, 4),
        ("quoted_fields.csv", ",", ".", "utf-8", 4, 4),
        ("one_two_status.csv", ",", ".", "utf-8", 30, 3),
    ],
)
def test_sniffs_separator_decimal_and_encoding(name, sep, decimal, encoding, rows, columns):
    table = read_table(DATA / name)
    assert (table.options.sep, table.options.decimal, table.options.encoding) == (
        sep,
        decimal,
        encoding,
    )
    assert table.frame.shape == (rows, columns)
    assert table.file_format == "csv"
    assert table.source_name == name


@pytest.mark.parametrize("name", ["joint_trial.csv", "pump_bearings.csv", "dairy_herd.csv"])
def test_same_frame_as_pandas_with_the_pyarrow_engine(name):
    path = Path(__file__).parents[2] / "demo_data" / name
    expected = pd.read_csv(
        path,
        engine="pyarrow",
        na_values=missing_token_variants(DEFAULT_MISSING_TOKENS),
        keep_default_na=False,
    )
    pd.testing.assert_frame_equal(read_table(path).frame, expected)


def test_bom_semicolon_export_values():
    frame = read_table(DATA / "clinic_export_bom_semicolon.csv").frame
    assert frame.columns[0] == "Patient ID"  # the BOM is not part of the first name
    assert frame["Weight (kg)"].dtype == float
    np.testing.assert_allclose(frame["Weight (kg)"].iloc[[0, 3]], [72.5, 65.25])
    assert frame["Weight (kg)"].isna().sum() == 3  # NA, '.', N/A
    assert frame.loc[0, "Note"] == "seen; twice"
    assert frame.loc[2, "Note"] == 'lost "paper" file'


def test_latin1_accents_survive():
    frame = read_table(DATA / "lab_latin1.tsv").frame
    assert list(frame["site"]) == ["München", "Córdoba", "Zürich", "Ørsta", "Nîmes"]
    assert list(frame["group"].unique()) == ["pré", "post"]


def test_quoted_fields_with_commas_quotes_and_line_breaks():
    frame = read_table(DATA / "quoted_fields.csv").frame
    assert list(frame["comment"]) == ["Smith, J.", 'said "fine"', "two\nlines", "plain"]
    np.testing.assert_allclose(frame["years"], [1.5, 2.25, 0.75, 3.0])


def test_every_default_missing_token_is_missing_case_insensitively():
    frame = read_table(DATA / "registry_pipe.txt").frame
    # NA, N/A, ., -, null, NaN, missing, Missing and empty are missing; 12.5, 7 and 30 are not.
    assert frame["months"].isna().sum() == 9
    np.testing.assert_allclose(frame["months"].dropna(), [12.5, 7, 30])


def test_missing_tokens_can_be_changed():
    data = b"id,score\n1,-\n2,unknown\n3,4\n"
    default = read_table(data).frame
    assert default["score"].isna().tolist() == [True, False, False]
    custom = read_table(data, ImportOptions(missing_tokens=("", "unknown"))).frame
    assert custom["score"].isna().tolist() == [False, True, False]
    assert custom["score"].iloc[0] == "-"


def test_missing_token_variants_cover_cases():
    variants = missing_token_variants(("NA", "null"))
    assert {"NA", "na", "Na", "null", "NULL", "Null"} <= set(variants)
    assert len(variants) == len(set(variants))


def test_default_tokens_match_the_issue():
    assert set(DEFAULT_MISSING_TOKENS) == {"", "NA", "N/A", ".", "-", "null", "NaN", "missing"}


def test_malformed_lines_are_skipped_but_reported():
    table = read_table(DATA / "broken_rows.csv")
    assert table.frame["id"].tolist() == [1, 3, 4, 5]
    assert not table.confident
    assert any("2,20,0,extra,fields" in note for note in table.notes)
    assert table.malformed_lines == ("2,20,0,extra,fields",)


def test_malformed_lines_count_as_rows_read_and_excluded():
    table = read_table(b"a,b,c\n1,2,1\n4,5\n6,7,0\n")
    prepared = prepare(
        table.frame, Roles(time="a", event="c"), malformed_lines=table.malformed_lines
    )
    report = prepared.report
    assert (report.rows_read, report.rows_used) == (3, 2)
    assert report.excluded == (("malformed line", 1),)
    assert prepared.excluded_rows["_raw_line"].tolist() == ["4,5"]


def test_short_rows_are_skipped_but_reported():
    table = read_table(b"a,b,c\n1,2,3\n4,5\n6,7,8\n")
    assert table.frame["a"].tolist() == [1, 6]
    assert any("1 malformed line" in note and "'4,5'" in note for note in table.notes)


@pytest.mark.parametrize("sep", [",", ";", "\t", "|"])
def test_each_separator_sniffed(sep):
    rows = [["id", "time", "event"], ["1", "3.5", "1"], ["2", "4", "0"], ["3", "10", "1"]]
    data = "\n".join(sep.join(r) for r in rows).encode()
    table = read_table(data)
    assert table.options.sep == sep
    assert table.confident
    np.testing.assert_allclose(table.frame["time"], [3.5, 4, 10])


def test_explicit_separator_wins():
    table = read_table(b"a;b\n1;2\n", ImportOptions(sep=","))
    assert list(table.frame.columns) == ["a;b"]


def test_utf8_without_bom_and_cp1252_later_in_a_large_file():
    head = "id,name\n" + "".join(f"{i},plain\n" for i in range(SAMPLE_BYTES // 8))
    data = head.encode("utf-8") + "99999,Größe\n".encode("cp1252")
    table = read_table(data)
    assert table.options.encoding == "cp1252"
    assert table.frame["name"].iloc[-1] == "Größe"
    assert not table.confident


def test_bytes_undefined_in_cp1252_fall_back_to_latin1():
    head = "id,name\n" + "".join(f"{i},plain\n" for i in range(SAMPLE_BYTES // 8))
    data = head.encode("utf-8") + b"99999,x\x81y\n"
    table = read_table(data)
    assert table.options.encoding == "latin-1"
    assert table.frame["name"].iloc[-1] == "x\x81y"
    assert sum("not valid UTF-8" in note for note in table.notes) == 1


def test_utf16_with_bom():
    data = "id\tdays\n1\t5\n2\t7\n".encode("utf-16")
    table = read_table(data)
    assert table.frame["days"].tolist() == [5, 7]


def test_ambiguous_decimal_marks_lower_confidence():
    table = read_table(b"a;b\n1,5;2.5\n3,5;1.25\n2,0;0.5\n")
    assert not table.confident


def test_single_column_file_reads():
    table = read_table(b"days\n1\n2\n3\n")
    assert table.frame["days"].tolist() == [1, 2, 3]


def test_trailing_separator_column_is_dropped_with_a_note():
    table = read_table(b"a,b,\n1,2,\n3,4,\n")
    assert list(table.frame.columns) == ["a", "b"]
    assert any("empty column" in note for note in table.notes)


def test_column_names_are_stripped():
    assert list(read_table(b" a , b\n1,2\n").frame.columns) == ["a", "b"]


# --- Excel and Parquet --------------------------------------------------------------------------


@pytest.fixture
def workbook(tmp_path) -> Path:
    path = tmp_path / "cohort.xlsx"
    with pd.ExcelWriter(path, engine="openpyxl") as writer:
        pd.DataFrame(
            {"id": [1, 2, 3], "weeks": [1.5, 2.0, 8.0], "dead": ["yes", "no", "NA"]}
        ).to_excel(writer, sheet_name="first", index=False)
        pd.DataFrame({"id": [1, 2], "date": pd.to_datetime(["2020-01-05", "2021-03-01"])}).to_excel(
            writer, sheet_name="dates", index=False
        )
    return path


def test_xlsx_first_sheet_by_default(workbook):
    table = read_table(workbook)
    assert table.file_format == "xlsx"
    assert table.options.sheet == "first"
    assert table.frame["weeks"].dtype == float
    assert table.frame["dead"].isna().tolist() == [False, False, True]


@pytest.mark.parametrize("sheet", ["dates", 1, "1"])
def test_xlsx_sheet_by_name_or_index(workbook, sheet):
    table = read_table(workbook, ImportOptions(sheet=sheet))
    assert table.options.sheet == "dates"
    assert pd.api.types.is_datetime64_any_dtype(table.frame["date"])


def test_xlsx_from_bytes_is_detected_by_content(workbook):
    table = read_table(workbook.read_bytes(), name="upload")
    assert table.file_format == "xlsx"


def test_xlsx_unknown_sheet_lists_sheets(workbook):
    with pytest.raises(FileReadError, match="'first', 'dates'"):
        read_table(workbook, ImportOptions(sheet="nope"))


def test_xlsx_duplicate_header(tmp_path):
    path = tmp_path / "dup.xlsx"
    pd.DataFrame([["a", "a"], [1, 2]]).to_excel(path, header=False, index=False)
    with pytest.raises(FileReadError, match="duplicate column names: 'a'"):
        read_table(path)


def test_parquet(tmp_path):
    frame = pd.DataFrame({"id": [1, 2], "t": [1.5, 2.5], "g": ["x", "y"]})
    path = tmp_path / "cohort.parquet"
    frame.to_parquet(path)
    table = read_table(path)
    assert table.file_format == "parquet"
    pd.testing.assert_frame_equal(table.frame, frame)
    assert read_table(path.read_bytes()).file_format == "parquet"


# --- errors -------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("data", "message"),
    [
        (b"", "empty"),
        (b"\n\n  \r\n", "empty"),
        (b"id,time,event\n", "no data rows"),
        (b"id,time,id\n1,2,3\n", "duplicate column names: 'id'"),
        (bytes(range(256)) * 20, "binary"),
        (b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(200), "binary"),
        (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + bytes(100), ".xls"),
        (b"PK\x03\x04 this is not a workbook", "Excel"),
        (b"PAR1 not really parquet", "Parquet"),
    ],
)
def test_clear_errors(data, message):
    with pytest.raises(FileReadError, match=message):
        read_table(data)


def test_too_large_bytes_and_path(tmp_path):
    data = b"a,b\n" + b"1,2\n" * 100
    with pytest.raises(FileTooLargeError, match="limit"):
        read_table(data, ImportOptions(max_bytes=50))
    path = tmp_path / "big.csv"
    path.write_bytes(data)
    with pytest.raises(FileTooLargeError, match=r"big\.csv"):
        read_table(path, ImportOptions(max_bytes=50))


def test_missing_file_and_directory(tmp_path):
    with pytest.raises(FileReadError, match="not found"):
        read_table(tmp_path / "nope.csv")
    with pytest.raises(FileReadError, match="not a file"):
        read_table(tmp_path)


def test_errors_are_value_errors():
    assert issubclass(FileTooLargeError, FileReadError)
    assert issubclass(FileReadError, ValueError)


# --- records ------------------------------------------------------------------------------------


def test_fingerprint_and_to_dict(tmp_path):
    data = (DATA / "registry_pipe.txt").read_bytes()
    from_path = read_table(DATA / "registry_pipe.txt")
    from_bytes = read_table(data, name="registry_pipe.txt")
    assert from_path.sha256 == hashlib.sha256(data).hexdigest() == from_bytes.sha256
    assert from_path.fingerprint() == {
        "sha256": from_path.sha256,
        "rows": 12,
        "columns": ["id", "months", "relapse", "stage"],
    }
    record = from_path.to_dict()
    assert "frame" not in record
    json.dumps(record)
    assert ImportOptions.from_dict(record["options"]) == from_path.options


def test_import_options_round_trip():
    options = ImportOptions(sep=";", decimal=",", encoding="cp1252", sheet=2, missing_tokens=("x",))
    again = ImportOptions.from_dict(json.loads(json.dumps(options.to_dict())))
    assert again == options


def test_imported_table_is_frozen():
    table = read_table(b"a\n1\n")
    assert isinstance(table, ImportedTable)
    with pytest.raises(AttributeError):
        table.sha256 = "x"


# --- properties ---------------------------------------------------------------------------------


def _read_or_hazel_error(data: bytes):
    try:
        table = read_table(data)
    except HazelError:
        return None
    assert len(table.frame) > 0
    return table


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.binary(max_size=600))
def test_arbitrary_bytes_give_a_table_or_a_clear_error(data):
    _read_or_hazel_error(data)


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.text(alphabet=",;|\t\n\r\"' .-0123456789abcNA\xe9", max_size=300))
def test_text_like_input_gives_a_table_or_a_clear_error(text):
    _read_or_hazel_error(text.encode("utf-8"))
    _read_or_hazel_error(text.encode("cp1252"))


@settings(max_examples=50, deadline=None)
@given(
    st.lists(
        st.tuples(st.integers(-1000, 1000), st.floats(0, 1e6, allow_nan=False)),
        min_size=1,
        max_size=30,
    ),
    st.sampled_from([",", ";", "\t", "|"]),
)
def test_numbers_round_trip_through_any_separator(rows, sep):
    frame = pd.DataFrame(rows, columns=["n", "x"])
    buffer = io.StringIO()
    frame.to_csv(buffer, sep=sep, index=False)
    table = read_table(buffer.getvalue().encode())
    np.testing.assert_array_equal(table.frame["n"], frame["n"])
    np.testing.assert_allclose(table.frame["x"], frame["x"])


@pytest.mark.parametrize(
    ("options", "named"),
    [
        ({"sep": "ab"}, "separator must be one character"),
        ({"sep": ""}, "separator must be one character"),
        ({"sep": '"'}, "not a quote or a line break"),
        ({"sep": "\n"}, "not a quote or a line break"),
        ({"decimal": ";"}, "decimal mark must be '.' or ','"),
        ({"sep": ",", "decimal": ","}, "both ','"),
    ],
)
def test_import_options_that_cannot_work_are_refused_where_they_are_made(options, named):
    # pyarrow's own "delimiter must be a 1-character string" (a TypeError) reached the user
    with pytest.raises(HazelError, match=named):
        ImportOptions(**options)
    with pytest.raises(HazelError, match=named):
        ImportOptions.from_dict(options)  # a recipe's import options
