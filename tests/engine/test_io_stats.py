"""SPSS, Stata and SAS files: the same numbers as the same data in CSV, labels, missing codes,
dates, and every error case. The files are written by the tests (tests/stats_files.py)."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from engine.analysis.run import run_analysis
from engine.errors import FileReadError, FileTooLargeError
from engine.io.tables import ImportOptions, read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles
from tests.stats_files import (
    ARM_LABELS,
    COLUMN_LABELS,
    LABELLED_FORMATS,
    WRITERS,
    coded_trial,
    trial_as_csv,
    write_sas7bdat,
    write_sav,
)

FORMATS = tuple(WRITERS)


@pytest.fixture(scope="module")
def coded() -> pd.DataFrame:
    return coded_trial()


@pytest.fixture(scope="module")
def files(tmp_path_factory, coded) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("stats")
    return {fmt: write(coded, folder / f"trial.{fmt}") for fmt, write in WRITERS.items()}


def _roles(labelled: bool) -> Roles:
    return Roles(
        time="weeks",
        unit="weeks",
        event="status",
        event_values=("relapsed",) if labelled else ("1",),
        group="arm",
        covariates=("age", "sex"),
        categorical=("sex",),
    )


SETTINGS = {"curves": {"times": [12, 26]}}


@pytest.mark.parametrize("fmt", FORMATS)
def test_same_numbers_as_the_same_data_in_csv(fmt, files, coded):
    table = read_table(files[fmt])
    labelled = fmt in LABELLED_FORMATS
    csv = read_table(trial_as_csv(coded, labelled=labelled), name="trial.csv")
    ours = run_analysis(prepare(table.frame, _roles(labelled)), SETTINGS, table.frame)
    theirs = run_analysis(prepare(csv.frame, _roles(labelled)), SETTINGS, csv.frame)
    # the whole JSON: data checks, curves, log-rank, Cox model with the categorical covariate
    assert ours == theirs
    assert ours["data"]["rows_used"] == 60
    assert ours["cox"]["n"] == 58  # two ages recorded as the missing code
    levels = {t["level"] for t in ours["cox"]["terms"]} - {None}
    assert len(levels) == 1 and levels <= ({"female", "male"} if labelled else {"1", "2"})
    assert str(ours["curves"][1]["group"]) == ("new drug" if labelled else "1")


@pytest.mark.parametrize("fmt", FORMATS)
def test_columns_match_the_csv_column_by_column(fmt, files, coded):
    table = read_table(files[fmt])
    labelled = fmt in LABELLED_FORMATS
    csv = read_table(trial_as_csv(coded, labelled=labelled), name="trial.csv").frame
    frame = table.frame
    assert list(frame.columns) == list(csv.columns)
    for column in ("weeks", "age"):
        np.testing.assert_array_equal(frame[column].to_numpy(float), csv[column].to_numpy(float))
    for column in ("status", "arm", "sex", "site"):
        assert frame[column].astype("string").tolist() == csv[column].astype("string").tolist()
    # dates arrive as dates
    assert pd.api.types.is_datetime64_any_dtype(frame["enrolled"])
    assert frame["enrolled"].tolist() == pd.to_datetime(csv["enrolled"]).tolist()


@pytest.mark.parametrize("fmt", LABELLED_FORMATS)
def test_value_labels_become_category_names_and_codes_are_kept(fmt, files):
    table = read_table(files[fmt])
    assert set(table.frame["arm"]) == set(ARM_LABELS.values())
    assert dict(table.value_labels["arm"]) == {str(k): v for k, v in ARM_LABELS.items()}
    assert any("Value labels of 3 column(s)" in note for note in table.notes)


@pytest.mark.parametrize("fmt", FORMATS)
def test_variable_labels_are_kept(fmt, files):
    table = read_table(files[fmt])
    assert table.column_labels == COLUMN_LABELS
    assert table.label_of("arm") == "Treatment arm"
    assert table.label_of("site") == ""


@pytest.mark.parametrize("fmt", ["sav", "zsav", "dta"])
def test_declared_missing_codes_count_as_missing(fmt, files, coded):
    """999 is an SPSS user-defined missing value and Stata's extended missing .a in these files."""
    age = read_table(files[fmt]).frame["age"]
    assert age.isna().sum() == 2
    assert age[[3, 17]].isna().all()
    assert not (age == 999).any()


def test_sas7bdat_agrees_with_pandas_own_reader(files, coded):
    """pandas.read_sas is a second, independent sas7bdat reader (not ReadStat)."""
    ours = read_table(files["sas7bdat"]).frame
    reference = pd.read_sas(files["sas7bdat"], format="sas7bdat", encoding="utf-8")
    np.testing.assert_allclose(ours["weeks"], reference["weeks"])
    np.testing.assert_array_equal(ours["arm"], reference["arm"].astype(int))
    assert ours["age"].isna().sum() == reference["age"].isna().sum() == 2
    assert ours["enrolled"].tolist() == reference["enrolled"].tolist()
    empty_as_missing = reference["site"].where(reference["site"] != "")
    assert ours["site"].isna().tolist() == empty_as_missing.isna().tolist()
    assert ours["site"].dropna().tolist() == empty_as_missing.dropna().tolist()


def test_bytes_and_path_give_the_same_table_and_fingerprint(files):
    path = files["sav"]
    content = path.read_bytes()
    from_path = read_table(path)
    from_bytes = read_table(content, name="trial.sav")
    assert from_path.sha256 == from_bytes.sha256 == hashlib.sha256(content).hexdigest()
    assert from_path.fingerprint() == from_bytes.fingerprint()
    pd.testing.assert_frame_equal(from_path.frame, from_bytes.frame)
    assert from_bytes.file_format == "sav"


def test_partly_labelled_numeric_column_keeps_its_numbers(tmp_path, coded):
    import pyreadstat

    out = coded.assign(age=coded["age"].where(coded["age"] != 999))
    pyreadstat.write_sav(out, tmp_path / "p.sav", variable_value_labels={"age": {48.0: "x"}})
    table = read_table(tmp_path / "p.sav")
    assert pd.api.types.is_float_dtype(table.frame["age"])
    assert any("only some of their values" in note for note in table.notes)
    assert table.value_labels["age"] == (("48", "x"),)


def test_missing_tokens_apply_to_text_columns(tmp_path, coded):
    import pyreadstat

    out = coded.assign(site=["NA", "n/a", "", "north"] * 15)
    pyreadstat.write_dta(out, tmp_path / "m.dta")
    site = read_table(tmp_path / "m.dta").frame["site"]
    assert site.isna().sum() == 45
    kept = read_table(tmp_path / "m.dta", ImportOptions(missing_tokens=("",))).frame["site"]
    assert kept.isna().sum() == 15


# --- errors ---------------------------------------------------------------------------------------


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_damaged_file_is_one_clear_error(fmt, files, tmp_path):
    content = files[fmt].read_bytes()
    cut = tmp_path / f"cut.{fmt}"
    cut.write_bytes(content[: max(200, len(content) // 3)])
    with pytest.raises(FileReadError, match=r"could not be read as a .* file"):
        read_table(cut)


@pytest.mark.parametrize("suffix", [".sav", ".zsav", ".dta", ".sas7bdat", ".xpt"])
def test_text_with_a_statistical_extension_is_refused(suffix, tmp_path):
    path = tmp_path / f"export{suffix}"
    path.write_bytes(b"weeks,status\n1,0\n2,1\n")
    with pytest.raises(FileReadError, match=r"extension of a .* file .* looks like text"):
        read_table(path)


def test_a_stata_file_named_sav_is_read_as_stata_and_says_so(files, tmp_path):
    path = tmp_path / "trial.sav"
    path.write_bytes(files["dta"].read_bytes())
    table = read_table(path)
    assert table.file_format == "dta"
    assert any("its content is Stata data; it was read as Stata" in note for note in table.notes)


def test_a_statistical_file_with_another_extension_is_read_by_its_content(files):
    table = read_table(files["sav"].read_bytes(), name="trial.csv")
    assert table.file_format == "sav"
    assert any("its content is SPSS data" in note for note in table.notes)


def test_an_encrypted_spss_file_is_refused(tmp_path):
    # The 36-byte wrapper header of an SPSS encrypted file (PSPP documentation, "Encrypted File
    # Wrappers"), followed by bytes standing in for the AES blocks.
    header = bytes.fromhex("1c00000000000000") + b"ENCRYPTEDSAV" + bytes.fromhex("15") + bytes(15)
    path = tmp_path / "locked.sav"
    path.write_bytes(header + bytes(range(256)) * 4)
    with pytest.raises(FileReadError, match="password-protected"):
        read_table(path)


def test_the_size_limit_applies(files):
    with pytest.raises(FileTooLargeError):
        read_table(files["sav"], ImportOptions(max_bytes=100))


def test_a_file_without_rows_is_refused(tmp_path, coded):
    path = write_sav(coded.iloc[:0], tmp_path / "empty.sav")
    with pytest.raises(FileReadError, match="no data rows"):
        read_table(path)


def test_sas7bdat_writer_round_trip_is_genuine(tmp_path, coded):
    """The sas7bdat files of these tests start with the SAS signature and hold every row."""
    path = write_sas7bdat(coded, tmp_path / "x.sas7bdat")
    head = path.read_bytes()[:32]
    assert head[12:16] == bytes.fromhex("c2ea8160")
    assert len(read_table(path).frame) == len(coded)
