"""Statistical-package test files written by the tests themselves, and the same data as CSV.

pyreadstat writes SPSS (.sav, .zsav), Stata (.dta) and SAS transport (.xpt) files. It cannot write
SAS .sas7bdat, but the ReadStat C library compiled into pyreadstat's extension module has a
sas7bdat writer (``readstat_begin_writing_sas7bdat``, an exported symbol); ``write_sas7bdat``
calls it through ctypes, so the .sas7bdat files here are genuine ones written by ReadStat. The
tests check them also with pandas' own, independent sas7bdat reader (``pandas.read_sas``).

The trial: 60 invented patients, weeks to relapse, a status coded 0/1 ("in remission"/"relapsed"),
an arm coded 1/2 ("standard"/"new drug"), an age with two values recorded as the missing code 999,
a sex coded 1/2 ("female"/"male"), an enrolment date and a site name (two left empty).
"""

from __future__ import annotations

import ctypes
import datetime
import glob
import os
from pathlib import Path

import numpy as np
import pandas as pd

ARM_LABELS = {1: "standard", 2: "new drug"}
STATUS_LABELS = {0: "in remission", 1: "relapsed"}
SEX_LABELS = {1: "female", 2: "male"}
AGE_MISSING = 999.0
COLUMN_LABELS = {
    "weeks": "Weeks from randomisation to relapse or last visit",
    "status": "Relapse status",
    "arm": "Treatment arm",
    "age": "Age at randomisation (years)",
}


def coded_trial(rows: int = 60, seed: int = 20261202) -> pd.DataFrame:
    """The trial with numeric codes, as a statistical package stores it (floats, 999 = missing)."""
    rng = np.random.default_rng(seed)
    arm = rng.integers(1, 3, rows).astype(float)
    weeks = np.round(rng.exponential(np.where(arm == 2, 40.0, 25.0)), 1) + 0.5
    status = (rng.random(rows) < 0.7).astype(float)
    age = np.round(rng.normal(62, 9, rows), 0)
    age[[3, 17]] = AGE_MISSING
    sex = rng.integers(1, 3, rows).astype(float)
    start = datetime.date(2021, 1, 4)
    enrolled = [start + datetime.timedelta(days=int(d)) for d in rng.integers(0, 700, rows)]
    site = rng.choice(["north", "south", "east"], rows).astype(object)
    site[[5, 40]] = ""
    return pd.DataFrame(
        {
            "weeks": weeks,
            "status": status,
            "arm": arm,
            "age": age,
            "sex": sex,
            "enrolled": enrolled,
            "site": site,
        }
    )


def trial_as_csv(coded: pd.DataFrame, labelled: bool = True) -> bytes:
    """The same data as a clinician's CSV export: labels as words, missing as empty cells."""
    out = coded.copy()
    out["age"] = out["age"].where(out["age"] != AGE_MISSING)
    if labelled:
        out["arm"] = out["arm"].map(ARM_LABELS)
        out["status"] = out["status"].map(STATUS_LABELS)
        out["sex"] = out["sex"].map(SEX_LABELS)
    else:
        for column in ("arm", "status", "sex"):
            out[column] = out[column].astype(int)
    out["enrolled"] = [d.isoformat() for d in out["enrolled"]]
    return out.to_csv(index=False).encode("utf-8")


def write_sav(coded: pd.DataFrame, path: Path, compress: bool = False) -> Path:
    import pyreadstat

    pyreadstat.write_sav(
        coded,
        str(path),
        compress=compress,
        column_labels=COLUMN_LABELS,
        variable_value_labels={"arm": ARM_LABELS, "status": STATUS_LABELS, "sex": SEX_LABELS},
        missing_ranges={"age": [AGE_MISSING]},
    )
    return path


def write_dta(coded: pd.DataFrame, path: Path) -> Path:
    """Stata marks missing with its own codes: 999 becomes the extended missing value .a."""
    import pyreadstat

    out = coded.copy()
    out["age"] = out["age"].astype(object).where(out["age"] != AGE_MISSING, "a")
    pyreadstat.write_dta(
        out,
        str(path),
        column_labels=COLUMN_LABELS,
        variable_value_labels={"arm": ARM_LABELS, "status": STATUS_LABELS, "sex": SEX_LABELS},
        missing_user_values={"age": ["a"]},
    )
    return path


def write_xpt(coded: pd.DataFrame, path: Path) -> Path:
    """SAS transport files have no value labels (those live in a format catalog): codes only."""
    import pyreadstat

    out = coded.copy()
    out["age"] = out["age"].where(out["age"] != AGE_MISSING)
    pyreadstat.write_xport(out, str(path), column_labels=COLUMN_LABELS)
    return path


# --- sas7bdat through ReadStat's own writer (ctypes) ---------------------------------------------

_TYPE_STRING, _TYPE_DOUBLE = 0, 5  # readstat_type_t
_WRITER = ctypes.CFUNCTYPE(ctypes.c_ssize_t, ctypes.c_void_p, ctypes.c_size_t, ctypes.c_void_p)
_SAS_EPOCH = datetime.date(1960, 1, 1)


def _readstat():
    import pyreadstat

    folder = os.path.dirname(pyreadstat.__file__)
    lib = ctypes.CDLL(glob.glob(os.path.join(folder, "_readstat_writer*.so"))[0])
    p, d = ctypes.c_void_p, ctypes.c_double
    signatures = {
        "readstat_writer_init": (p, []),
        "readstat_set_data_writer": (ctypes.c_int, [p, _WRITER]),
        "readstat_add_variable": (p, [p, ctypes.c_char_p, ctypes.c_int, ctypes.c_size_t]),
        "readstat_variable_set_label": (None, [p, ctypes.c_char_p]),
        "readstat_variable_set_format": (None, [p, ctypes.c_char_p]),
        "readstat_begin_writing_sas7bdat": (ctypes.c_int, [p, p, ctypes.c_long]),
        "readstat_begin_row": (ctypes.c_int, [p]),
        "readstat_insert_double_value": (ctypes.c_int, [p, p, d]),
        "readstat_insert_string_value": (ctypes.c_int, [p, p, ctypes.c_char_p]),
        "readstat_insert_missing_value": (ctypes.c_int, [p, p]),
        "readstat_end_row": (ctypes.c_int, [p]),
        "readstat_end_writing": (ctypes.c_int, [p]),
        "readstat_writer_free": (None, [p]),
    }
    for name, (restype, argtypes) in signatures.items():
        function = getattr(lib, name)
        function.restype, function.argtypes = restype, argtypes
    return lib


def write_sas7bdat(coded: pd.DataFrame, path: Path) -> Path:
    """A genuine .sas7bdat of ``coded`` (codes, 999 as SAS missing, dates as SAS dates)."""
    lib = _readstat()
    written = bytearray()

    def sink(data, size, _ctx):
        written.extend(ctypes.string_at(data, size))
        return size

    callback = _WRITER(sink)  # kept referenced until the writer is freed
    writer = lib.readstat_writer_init()
    try:
        _check(lib.readstat_set_data_writer(writer, callback), "set_data_writer")
        variables = []
        for column in coded.columns:
            text = coded[column].dtype == object and column != "enrolled"
            width = max(8, int(coded[column].astype(str).str.len().max())) if text else 8
            kind = _TYPE_STRING if text else _TYPE_DOUBLE
            variable = lib.readstat_add_variable(writer, column.encode(), kind, width)
            if column in COLUMN_LABELS:
                lib.readstat_variable_set_label(variable, COLUMN_LABELS[column].encode())
            if column == "enrolled":
                lib.readstat_variable_set_format(variable, b"DATE9")
            variables.append((column, variable, text))
        _check(lib.readstat_begin_writing_sas7bdat(writer, None, len(coded)), "begin_writing")
        for row in coded.itertuples(index=False):
            _check(lib.readstat_begin_row(writer), "begin_row")
            for (column, variable, text), value in zip(variables, row, strict=True):
                if text:
                    lib.readstat_insert_string_value(writer, variable, str(value).encode())
                elif column == "enrolled":
                    days = float((value - _SAS_EPOCH).days)
                    lib.readstat_insert_double_value(writer, variable, days)
                elif column == "age" and value == AGE_MISSING:
                    lib.readstat_insert_missing_value(writer, variable)
                else:
                    lib.readstat_insert_double_value(writer, variable, float(value))
            _check(lib.readstat_end_row(writer), "end_row")
        _check(lib.readstat_end_writing(writer), "end_writing")
    finally:
        lib.readstat_writer_free(writer)
    path.write_bytes(bytes(written))
    return path


def _check(code: int, step: str) -> None:
    if code != 0:
        raise RuntimeError(f"ReadStat's sas7bdat writer failed at {step} (error {code})")


WRITERS = {
    "sav": write_sav,
    "zsav": lambda coded, path: write_sav(coded, path, compress=True),
    "dta": write_dta,
    "xpt": write_xpt,
    "sas7bdat": write_sas7bdat,
}
LABELLED_FORMATS = ("sav", "zsav", "dta")  # the formats whose files carry value labels
