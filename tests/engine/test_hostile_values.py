"""Odd values in roles and checks (issue 10, items 1, 2, 5 and 6): each case gives a result or one
clear HazelError naming the column or setting, never another exception.

Every test writes its own file, reads it as a user's upload would be read, and (where the case
must give a result) runs the analysis and serialises it as strict JSON. Expected durations are
exact calendar arithmetic (``datetime.date`` subtraction, proleptic Gregorian calendar).
"""

from __future__ import annotations

import datetime
import io
import json
import zipfile

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from engine.analysis.run import ANALYSIS_DEFAULTS, run_analysis
from engine.errors import FileReadError, RoleError
from engine.io.tables import read_table
from engine.prepare.checks import IMPLAUSIBLE_DATE, TIME_NOT_FINITE, prepare
from engine.prepare.roles import MAX_LEVELS, Roles, covariate_kind, natural_sort_key, suggest_roles

N = 40


def _times(n: int = N) -> np.ndarray:
    return np.random.default_rng(7).exponential(10, n).round(1) + 0.1


def _events(n: int = N) -> np.ndarray:
    return np.arange(n) % 3 != 0


def _csv(tmp_path, frame: pd.DataFrame, name: str = "data.csv"):
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return read_table(path)


def _analysed(table, roles: Roles) -> dict:
    """prepare + the default analyses, as the CLI runs them; the result must be strict JSON."""
    prepared = prepare(table.frame, roles, malformed_lines=table.malformed_lines)
    settings = {name: dict(ANALYSIS_DEFAULTS[name]) for name in ("curves", "comparison", "cox")}
    out = {"data": prepared.report.to_dict(), **run_analysis(prepared, settings, table.frame)}
    json.loads(json.dumps(out, allow_nan=False))
    data = out["data"]
    assert data["rows_used"] + sum(e["rows"] for e in data["excluded"]) == data["rows_read"]
    return out


# --- item 1: roles and checks on odd values -------------------------------------------------------


@pytest.mark.parametrize("labels", [["²", "³"], ["a²", "a³"], ["①", "②"], ["٣", "٤"]])
def test_unicode_digits_in_a_group_column_give_groups(tmp_path, labels):
    frame = pd.DataFrame({"t": _times(), "e": _events(), "g": labels * (N // 2)})
    out = _analysed(_csv(tmp_path, frame), Roles(time="t", event="e", group="g"))
    assert [c["group"] for c in out["curves"][1:]] == labels
    assert out["comparison"]["df"] == 1


def test_natural_sort_key_orders_superscripts_as_text_and_ascii_digits_as_numbers():
    assert sorted(["dose 10", "dose ²", "dose 2"], key=natural_sort_key) == [
        "dose 2",
        "dose 10",
        "dose ²",
    ]


def test_a_unicode_digit_in_the_time_column_is_a_non_numeric_time(tmp_path):
    times = [str(t) for t in _times()]
    times[0] = "²"
    out = _analysed(
        _csv(tmp_path, pd.DataFrame({"t": times, "e": _events()})), Roles(time="t", event="e")
    )
    assert out["data"]["excluded"] == [{"reason": "non-numeric time", "rows": 1}]


def test_nested_parquet_values_are_read_as_text(tmp_path):
    path = tmp_path / "nested.parquet"
    table = pa.table(
        {
            "t": _times(),
            "e": _events().astype(int),
            "arm": [[1, 2], [3]] * (N // 2),
            "extra": [{"a": i % 2, "b": "x"} for i in range(N)],
        }
    )
    pq.write_table(table, path)
    imported = read_table(path)
    assert imported.frame["arm"].iloc[0] == "[1, 2]"
    assert imported.frame["extra"].iloc[1] == '{"a": 1, "b": "x"}'
    assert any("lists or records" in note for note in imported.notes)
    suggest_roles(imported.frame)
    out = _analysed(imported, Roles(time="t", event="e", group="arm", covariates=("extra",)))
    assert [c["group"] for c in out["curves"][1:]] == ["[1, 2]", "[3]"]


def test_mixed_utc_offsets_in_one_date_column_give_true_durations(tmp_path):
    start = ["2024-03-01T08:00:00+01:00", "2024-03-01T08:00:00-05:00", "2024-03-01 08:00"] * 2
    end = ["2024-03-02T07:00:00Z", "2024-03-02T13:00:00+00:00", "2024-03-03T08:00:00+00:00"] * 2
    frame = pd.DataFrame({"s": start, "f": end, "e": [1, 0, 1, 1, 0, 1]})
    prepared = prepare(_csv(tmp_path, frame).frame, Roles(start="s", end="f", event="e"))
    # 07:00 UTC on the 1st -> 07:00 UTC on the 2nd; 13:00 UTC -> 13:00 UTC; naive = UTC
    assert prepared.frame["_time"].tolist() == [1.0, 1.0, 2.0] * 2


@pytest.mark.parametrize("bad", ["%Q", "%Y-%m-%d %", "%Y-%Y-%d", "%", "  "])
def test_an_invalid_date_format_is_refused_naming_it(tmp_path, bad):
    frame = pd.DataFrame({"s": ["01.02.2020"] * 4, "f": ["01.03.2020"] * 4, "e": [1, 0, 1, 0]})
    with pytest.raises(RoleError, match="date format") as caught:
        prepare(_csv(tmp_path, frame).frame, Roles(start="s", end="f", event="e", date_format=bad))
    assert repr(bad) in str(caught.value)


def test_a_numeric_covariate_with_one_text_cell_stays_numeric_and_names_the_cell(tmp_path):
    n = 300
    age = [f"{a:.1f}" for a in np.random.default_rng(3).normal(60, 8, n)]
    age[17] = "unknown"
    frame = pd.DataFrame({"t": _times(n), "e": _events(n), "age": age})
    imported = _csv(tmp_path, frame)
    assert covariate_kind(imported.frame["age"]) == "numeric"
    roles = Roles(time="t", event="e", covariates=("age",))
    out = _analysed(imported, roles)
    assert [t["variable"] for t in out["cox"]["terms"]] == ["age"]  # one term, not 299
    assert out["cox"]["n"] == n - 1
    note = next(w for w in out["data"]["warnings"] if "not finite numbers" in w)
    assert "('unknown' in 1 cell(s))" in note and "1 cell(s) are" in note


def test_a_mostly_text_column_with_a_number_stays_categorical():
    series = pd.Series(["north", "south", "east", "12"] * 10, name="site")
    assert covariate_kind(series) == "categorical"


def test_infinite_covariate_values_are_missing_with_a_warning():
    frame = pd.DataFrame(
        {"t": _times(), "e": _events(), "x": np.r_[np.inf, -np.inf, np.arange(N - 2.0)]}
    )
    prepared = prepare(frame, Roles(time="t", event="e", covariates=("x",)))
    assert np.isnan(prepared.frame["x"].iloc[:2]).all()
    assert any("2 cell(s) are not finite numbers" in w for w in prepared.report.warnings)


@pytest.mark.parametrize("role", ["covariate", "group"])
def test_a_column_with_a_level_per_row_is_refused_before_any_analysis(tmp_path, role):
    n = 2000
    frame = pd.DataFrame({"t": _times(n), "e": _events(n), "name": [f"p{i}" for i in range(n)]})
    roles = (
        Roles(time="t", event="e", covariates=("name",))
        if role == "covariate"
        else Roles(time="t", event="e", group="name")
    )
    with pytest.raises(RoleError, match=f"2,000 distinct values.*at most {MAX_LEVELS}"):
        prepare(_csv(tmp_path, frame).frame, roles)


@pytest.mark.parametrize("scale", [1e30, 1e-310])
def test_huge_and_subnormal_times_give_a_result(tmp_path, scale):
    frame = pd.DataFrame({"t": _times() * scale, "e": _events(), "g": ["a", "b"] * (N // 2)})
    out = _analysed(_csv(tmp_path, frame), Roles(time="t", event="e", group="g"))
    assert out["data"]["rows_used"] == N


def test_infinite_group_labels_are_written_as_text_in_json(tmp_path):
    frame = pd.DataFrame({"t": _times(), "e": _events(), "g": [1.0, np.inf] * (N // 2)})
    out = _analysed(_csv(tmp_path, frame), Roles(time="t", event="e", group="g"))
    assert [c["group"] for c in out["curves"][1:]] == [1.0, "inf"]


def test_a_group_column_entirely_missing_gives_the_all_rows_result(tmp_path):
    frame = pd.DataFrame({"t": _times(), "e": _events(), "g": [""] * N})
    out = _analysed(_csv(tmp_path, frame), Roles(time="t", event="e", group="g"))
    assert len(out["curves"]) == 1 and out["comparison"] is None
    assert any("no value in the group column 'g'" in w for w in out["data"]["warnings"])


# --- item 2: files --------------------------------------------------------------------------------


def test_a_corrupt_xlsx_deflate_stream_is_a_file_read_error(tmp_path):
    good = io.BytesIO()
    pd.DataFrame({"t": _times(), "e": _events()}).to_excel(good, index=False)
    path = tmp_path / "broken.xlsx"
    with zipfile.ZipFile(good) as source, zipfile.ZipFile(path, "w") as target:
        for item in source.infolist():
            target.writestr(item, source.read(item.filename), zipfile.ZIP_DEFLATED)
    raw = bytearray(path.read_bytes())
    with zipfile.ZipFile(path) as book:
        info = book.getinfo("xl/worksheets/sheet1.xml")
    body = info.header_offset + 30 + len(info.filename) + len(info.extra)
    raw[body + 10 : body + 40] = b"\xff" * 30  # damage the compressed data, not the directory
    path.write_bytes(bytes(raw))
    with pytest.raises(FileReadError, match=r"broken\.xlsx.*(damaged|not a readable)"):
        read_table(path)


def test_a_parquet_index_named_like_a_column_becomes_its_own_column(tmp_path):
    frame = pd.DataFrame({"t": _times(), "e": _events().astype(int), "id": np.arange(N)})
    frame.index = pd.Index(np.arange(N) * 7 + 3, name="id")  # not a RangeIndex: stored as data
    path = tmp_path / "indexed.parquet"
    frame.to_parquet(path)
    imported = read_table(path)
    assert list(imported.frame.columns) == ["id (index)", "t", "e", "id"]
    assert imported.frame["id (index)"].tolist()[:2] == [3, 10]
    assert any("stored index" in note for note in imported.notes)


# --- item 5: infinite times -----------------------------------------------------------------------


def test_infinite_times_are_their_own_exclusion_reason(tmp_path):
    times = [str(t) for t in _times()]
    times[1], times[2], times[3] = "inf", "-inf", "Infinity"
    out = _analysed(
        _csv(tmp_path, pd.DataFrame({"t": times, "e": _events()})), Roles(time="t", event="e")
    )
    assert out["data"]["excluded"] == [{"reason": TIME_NOT_FINITE, "rows": 3}]
    assert out["data"]["rows_used"] == N - 3


def test_infinite_entry_times_are_excluded_as_not_finite():
    frame = pd.DataFrame(
        {"t": _times(), "e": _events(), "entry": np.r_[np.inf, -np.inf, np.zeros(N - 2)]}
    )
    prepared = prepare(frame, Roles(time="t", event="e", entry="entry"))
    assert dict(prepared.report.excluded) == {TIME_NOT_FINITE: 2}


# --- item 6: dates far apart, implausible dates ---------------------------------------------------

FAR = [
    ("0001-01-01", "9999-12-31"),
    ("1678-01-01", "2261-12-31"),
    ("1600-02-29", "2400-02-29"),
]


@pytest.mark.parametrize(("start", "end"), FAR)
def test_durations_are_exact_outside_the_nanosecond_range(tmp_path, start, end):
    frame = pd.DataFrame({"s": [start, "2020-01-01"], "f": [end, "2020-02-01"], "e": [1, 0]})
    prepared = prepare(_csv(tmp_path, frame).frame, Roles(start="s", end="f", event="e"))
    days = (datetime.date.fromisoformat(end) - datetime.date.fromisoformat(start)).days
    assert prepared.frame["_time"].tolist() == [float(days), 31.0]
    assert prepared.report.excluded == ()
    assert any("1 row(s) have a date before 1900" in w for w in prepared.report.warnings)


def test_far_dates_with_a_format_and_day_first(tmp_path):
    frame = pd.DataFrame({"s": ["01/01/0001", "13/01/2020"], "f": ["31/12/9999", "14/01/2020"]})
    frame["e"] = [1, 1]
    imported = _csv(tmp_path, frame)
    for roles in (
        Roles(start="s", end="f", event="e", day_first=True),
        Roles(start="s", end="f", event="e", date_format="%d/%m/%Y"),
    ):
        assert prepare(imported.frame, roles).frame["_time"].tolist() == [3652058.0, 1.0]


def test_implausible_dates_warn_with_counts_or_are_excluded_when_chosen(tmp_path):
    future = (datetime.date.today() + datetime.timedelta(days=400)).isoformat()
    frame = pd.DataFrame(
        {
            "s": ["1900-01-01", "2001-05-01", "2002-05-01", "1850-03-03", "2003-01-01"],
            "f": ["2001-01-01", "9999-12-31", future, "2005-01-01", "2004-01-01"],
            "e": [1, 0, 1, 1, 0],
        }
    )
    imported = _csv(tmp_path, frame)
    kept = prepare(imported.frame, Roles(start="s", end="f", event="e"))
    assert kept.report.rows_used == 5
    note = next(w for w in kept.report.warnings if "before 1900" in w)
    assert note.startswith("4 row(s)") and "2 in 's', 2 in 'f'" in note
    dropped = prepare(
        imported.frame, Roles(start="s", end="f", event="e", implausible_dates="exclude")
    )
    assert dict(dropped.report.excluded) == {IMPLAUSIBLE_DATE: 4}
    assert dropped.excluded_rows["_reason"].tolist() == [IMPLAUSIBLE_DATE] * 4
    with pytest.raises(RoleError, match="'warn' or 'exclude'"):
        prepare(imported.frame, Roles(start="s", end="f", event="e", implausible_dates="drop"))


def test_the_implausible_dates_choice_round_trips_through_a_recipe_role_dict():
    roles = Roles(start="s", end="f", implausible_dates="exclude")
    assert Roles.from_dict(json.loads(json.dumps(roles.to_dict()))) == roles


@pytest.mark.parametrize("huge", [1e160, 1e200, 1e308])
def test_covariate_values_too_large_to_model_are_a_clear_error(huge):
    """Found by the large fuzz run (issue 10): a covariate whose spread overflows made the
    collinearity check raise numpy's LinAlgError ("Eigenvalues did not converge")."""
    from engine.cox.fit import fit_cox
    from engine.errors import AnalysisError

    rng = np.random.default_rng(1)
    frame = pd.DataFrame(
        {
            "_time": rng.exponential(5, 50),
            "_event": rng.integers(0, 2, 50),
            "dose": np.r_[rng.normal(size=48), huge, -huge],
            "z": rng.normal(size=50),
        }
    )
    with pytest.raises(AnalysisError, match=r"'dose' hold values too large to model"):
        fit_cox(frame, ["dose", "z"])
