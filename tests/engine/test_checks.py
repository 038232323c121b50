"""prepare(): the prepared-frame contract, every exclusion reason, warnings and role errors."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from engine.errors import EventCodingError, RoleError
from engine.io.tables import read_table
from engine.prepare.checks import REASON_COLUMN, REASONS, prepare
from engine.prepare.roles import Roles
from engine.survival.curves import curves_by_group

DATA = Path(__file__).parent / "data"


def _excluded(prepared) -> dict[str, int]:
    return dict(prepared.report.excluded)


@pytest.fixture
def trial() -> pd.DataFrame:
    rng = np.random.default_rng(11)
    n = 90
    return pd.DataFrame(
        {
            "pid": np.arange(n),
            "days": rng.exponential(300, n).round(1) + 0.5,
            "status": rng.choice(["dead", "alive"], n),
            "arm": rng.choice(["dose 10", "dose 2", "placebo"], n),
            "age": rng.normal(60, 9, n).round(1),
            "sex": rng.choice(["f", "m"], n, p=[0.3, 0.7]),
            "grade": rng.choice([1, 2, 3], n),
        }
    )


def test_prepared_frame_contract(trial):
    roles = Roles(
        time="days",
        event="status",
        group="arm",
        covariates=("age", "sex", "grade"),
        categorical=("grade",),
        reference=(("grade", "3"),),
        id="pid",
    )
    prepared = prepare(trial, roles)
    frame = prepared.frame
    assert list(frame.columns) == ["_time", "_event", "_group", "_id", "age", "sex", "grade"]
    assert frame["_time"].dtype == np.float64
    assert frame["_event"].dtype == np.int64
    assert set(frame["_event"]) <= {0, 1}
    assert list(frame["_group"].cat.categories) == ["dose 2", "dose 10", "placebo"]
    assert frame["age"].dtype == np.float64
    assert frame["sex"].cat.categories[0] == "m"  # most frequent level is the default reference
    assert frame["grade"].cat.categories[0] == 3  # the caller's reference wins
    assert (frame["_event"] == (trial["status"] == "dead")).all()
    np.testing.assert_allclose(frame["_time"], trial["days"])
    report = prepared.report
    assert report.rows_read == report.rows_used == 90
    assert report.events + report.censored == 90
    assert report.group_counts["n"].sum() == 90
    assert report.group_counts["events"].sum() == report.events
    assert report.covariate_kinds == {
        "age": "numeric",
        "sex": "categorical",
        "grade": "categorical",
    }


def test_to_dict_has_exactly_the_contract_keys(trial):
    trial.loc[0, "days"] = -1
    report = prepare(trial, Roles(time="days", event="status")).report
    data = report.to_dict()
    assert list(data) == [
        "rows_read",
        "rows_used",
        "events",
        "competing_events",
        "censored",
        "time_unit",
        "excluded",
        "warnings",
    ]
    assert data["excluded"] == [{"reason": "negative time", "rows": 1}]
    assert all(isinstance(w, str) for w in data["warnings"])
    json.dumps(data, allow_nan=False)
    assert report.to_frame().to_dict("records") == [{"reason": "negative time", "rows": 1}]


def test_every_duration_exclusion_reason_is_counted():
    frame = pd.DataFrame(
        {
            "t": ["5", "", "abc", "-2", "0", "7,5", "3", "4", "6"],
            "e": ["1", "0", "1", "1", "0", "1", None, "maybe", "1"],
            "x": [1.0, 2, 3, 4, 5, 6, 7, 8, np.nan],
        }
    )
    frame["t"] = frame["t"].replace("", None)
    roles = Roles(time="t", event="e", event_values=("1",), covariates=("x",))
    prepared = prepare(frame, roles)
    assert _excluded(prepared) == {
        "missing time": 1,
        "non-numeric time": 1,
        "negative time": 1,
        "missing event": 1,
    }
    # 'maybe' is censored because the caller named the event value, and says so.
    assert any("'0', 'maybe'" in w for w in prepared.report.warnings)
    np.testing.assert_allclose(sorted(prepared.frame["_time"]), [0, 4, 5, 6, 7.5])
    strict = prepare(frame, roles, require_covariates=True)
    assert _excluded(strict)["missing covariate"] == 1
    assert strict.report.rows_used == prepared.report.rows_used - 1


def test_unknown_event_values_are_excluded_with_recognised_coding():
    frame = pd.DataFrame({"t": np.arange(1.0, 23), "e": ["dead"] * 10 + ["alive"] * 11 + ["??"]})
    prepared = prepare(frame, Roles(time="t", event="e"))
    assert _excluded(prepared) == {"unknown event value": 1}
    assert prepared.excluded_rows[REASON_COLUMN].tolist() == ["unknown event value"]
    assert prepared.excluded_rows["e"].tolist() == ["??"]


def test_dates_from_a_real_world_export():
    table = read_table(DATA / "clinic_export_bom_semicolon.csv")
    roles = Roles(
        start="Enrolment date",
        end="Last contact",
        day_first=True,
        event="Status",
        group="Arm",
        covariates=("Weight (kg)",),
    )
    prepared = prepare(table.frame, roles)
    assert _excluded(prepared) == {
        "missing time": 1,
        "unparseable date": 1,
        "end before start": 1,
        "missing event": 1,
    }
    report = prepared.report
    assert report.rows_read == 8 and report.rows_used == 4
    assert report.rows_used + sum(n for _, n in report.excluded) == report.rows_read
    # 03/02/2021 -> 15/08/2021 day first is 193 days; 13/04/2021 -> same day is 0 and kept.
    ids = table.frame.loc[prepared.frame.index, "Patient ID"]
    times = dict(zip(ids, prepared.frame["_time"], strict=True))
    assert times["A-001"] == 193
    assert times["A-006"] == 0
    assert any("time 0" in w for w in report.warnings)
    assert set(report.event_coding.event_values) == {"Dead", "dead", "DEAD"}
    assert len(prepared.excluded_rows) == 4


def test_date_difference_in_years_uses_365_25_days():
    frame = pd.DataFrame({"a": ["2020-01-01"], "b": ["2021-01-01"], "e": [1]})
    prepared = prepare(frame, Roles(start="a", end="b", event="e", unit="years"))
    assert prepared.frame["_time"].iloc[0] == pytest.approx(366 / 365.25)


def test_explicit_date_format():
    frame = pd.DataFrame({"a": ["01.02.2020", "x"], "b": ["03.02.2020", "05.02.2020"], "e": [1, 0]})
    prepared = prepare(frame, Roles(start="a", end="b", event="e", date_format="%d.%m.%Y"))
    assert prepared.frame["_time"].tolist() == [2.0]
    assert _excluded(prepared) == {"unparseable date": 1}


def test_ambiguous_dates_are_flagged():
    frame = pd.DataFrame({"a": ["01/02/2020"], "b": ["03/04/2020"], "e": [1]})
    prepared = prepare(frame, Roles(start="a", end="b", event="e"))
    assert any("day-first or month-first" in w for w in prepared.report.warnings)


def test_source_unit_conversion():
    frame = pd.DataFrame({"w": [1.0, 2.5], "e": [1, 0]})
    prepared = prepare(frame, Roles(time="w", source_unit="weeks", unit="days", event="e"))
    np.testing.assert_allclose(prepared.frame["_time"], [7.0, 17.5])
    assert prepared.report.time_unit == "days"


def test_one_two_assumption_reaches_the_report():
    table = read_table(DATA / "one_two_status.csv")
    prepared = prepare(table.frame, Roles(time="time", event="status"))
    assert prepared.report.events == 10
    assert any("1 = censored and 2 = event" in w for w in prepared.report.warnings)


def test_competing_causes():
    frame = pd.DataFrame({"t": [1.0, 2, 3, 4], "s": ["sold", "died", "in herd", "died"]})
    roles = Roles(time="t", event="s", event_causes=(("died", "death"), ("sold", "sale")))
    prepared = prepare(frame, roles)
    cause = prepared.frame["_cause"]
    assert [None if pd.isna(c) else c for c in cause] == ["sale", "death", None, "death"]
    # the causes in the order given (death first: the event of interest), not alphabetical
    assert cause.cat.categories.tolist() == ["death", "sale"]
    assert prepared.frame["_event"].tolist() == [0, 1, 0, 1]  # first cause is of interest
    assert prepared.report.competing_events == 1  # the sale, counted in `censored` of the JSON
    assert not any("treated as censored" in w for w in prepared.report.warnings)
    roles = Roles(time="t", event="s", event_values=("sold",), event_causes=roles.event_causes)
    assert prepare(frame, roles).frame["_event"].tolist() == [1, 0, 0, 0]


def test_entry_times():
    frame = pd.DataFrame({"t": [5.0, 5, 5, 5], "entry": [1.0, np.nan, 6, 5], "e": [1, 1, 0, 1]})
    prepared = prepare(frame, Roles(time="t", event="e", entry="entry"))
    assert prepared.frame["_entry"].tolist() == [1.0]
    # entry equal to the exit time leaves the subject in no risk set (entry < t <= time)
    assert _excluded(prepared) == {"missing entry time": 1, "entry not before time": 2}
    curves_by_group(prepared.frame)  # the estimators accept every kept row


def test_no_event_column_means_every_row_is_an_event():
    prepared = prepare(pd.DataFrame({"t": [1.5, 2.5]}), Roles(time="t"))
    assert prepared.report.events == 2
    assert any("every row is treated as an event" in w for w in prepared.report.warnings)


# --- warnings -----------------------------------------------------------------------------------


def test_warnings_duplicates_few_events_tiny_groups_and_units():
    frame = pd.DataFrame(
        {
            "id": [1, 2, 2, 3, 4, 5, 6, 7],
            "t": [1, 2, 3, 4, 5, 6, 7, 0],
            "e": [1, 0, 1, 1, 0, 1, 1, 1],
            "g": ["a", "a", "a", "a", "a", "a", "b", None],
        }
    )
    warnings = prepare(frame, Roles(time="t", event="e", group="g", id="id")).report.warnings
    text = "\n".join(warnings)
    assert "repeats 1 id(s) (2; 8 rows, 7 subjects) and no entry-time column" in text
    assert "Group 'a' has 4 event(s)" in text and "common practice" in text
    assert "Group 'b' has only 1 row(s)" in text
    assert "1 row(s) have no value in the group column 'g'" in text
    assert "whole numbers below 120" in text
    assert "1 row(s) have time 0" in text


def test_unit_hint_for_years_that_look_like_days():
    frame = pd.DataFrame({"t": [400.0, 800.5], "e": [1, 0]})
    warnings = prepare(frame, Roles(time="t", event="e", unit="years")).report.warnings
    assert any("reach 800.5 years" in w for w in warnings)


def test_group_counts_by_group(trial):
    counts = prepare(trial, Roles(time="days", event="status", group="arm")).report.group_counts
    expected = trial.groupby("arm")["status"].agg(n="size", events=lambda s: (s == "dead").sum())
    assert counts.set_index("group")[["n", "events"]].to_dict() == expected.to_dict()


# --- role errors --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("roles", "error", "message"),
    [
        (Roles(time="nope", event="status"), RoleError, "'nope' is not in the data"),
        (Roles(event="status"), RoleError, "No time given"),
        (Roles(time="days", start="age", end="sex"), RoleError, "not both"),
        (Roles(time="days", event="days"), RoleError, "more than one role"),
        (Roles(time="days", covariates=("days",)), RoleError, "more than one role"),
        (Roles(time="days", unit="hours"), RoleError, "'hours'"),
        (Roles(time="days", categorical=("age",)), RoleError, "not a covariate"),
        (
            Roles(time="days", covariates=("sex",), reference=(("sex", "x"),)),
            RoleError,
            r"'x' does not occur in column 'sex'; its levels are 'f', 'm'",
        ),
        (
            Roles(time="days", covariates=("grade",), reference=(("grade", 1),)),
            RoleError,
            "'grade', which is treated as numeric",
        ),
        (Roles(time="status"), RoleError, r"'status' holds no numbers \(values such as 'dead'"),
        (Roles(time="days", event="arm"), EventCodingError, "'dose 10' \\(\\d+ rows\\)"),
        (
            Roles(time="days", event="status", event_values=("died",)),
            EventCodingError,
            "'died' occur in column 'status'",
        ),
        (Roles(start="arm", end="sex", event="status"), RoleError, "could be read as a date"),
    ],
)
def test_role_errors_name_the_column_and_values(trial, roles, error, message):
    with pytest.raises(error, match=message):
        prepare(trial, roles)


def test_role_error_carries_column_and_values(trial):
    with pytest.raises(EventCodingError) as caught:
        prepare(trial, Roles(time="days", event="arm"))
    assert caught.value.column == "arm"
    assert set(caught.value.values) == {"dose 10", "dose 2", "placebo"}


# --- property: no row is lost -------------------------------------------------------------------

cells = st.one_of(
    st.none(),
    st.floats(-50, 500),
    st.just(float("nan")),
    st.sampled_from(["", "x", "12", "-3", "0"]),
)


@settings(max_examples=150, deadline=None)
@given(
    st.lists(
        st.tuples(cells, st.sampled_from([0, 1, None, "1", "maybe"]), cells, cells),
        min_size=1,
        max_size=40,
    ),
    st.booleans(),
)
def test_every_row_is_used_or_excluded_with_a_reason(rows, require_covariates):
    frame = pd.DataFrame(rows, columns=["t", "e", "x", "entry"])
    roles = Roles(time="t", event="e", event_values=("1",), covariates=("x",), entry="entry")
    try:
        prepared = prepare(frame, roles, require_covariates=require_covariates)
    except RoleError:
        return  # e.g. a time column without any number: refused as a whole, with a message
    report = prepared.report
    assert report.rows_used + sum(n for _, n in report.excluded) == report.rows_read == len(frame)
    assert len(prepared.excluded_rows) + len(prepared.frame) == len(frame)
    assert set(prepared.excluded_rows[REASON_COLUMN]) <= set(REASONS)
    assert (prepared.frame["_time"] >= 0).all()
    assert set(prepared.frame["_event"]) <= {0, 1}
    assert report.events + report.censored == report.rows_used
    assert (prepared.frame["_entry"] <= prepared.frame["_time"]).all()


def test_prepared_frame_does_not_share_memory_with_the_raw_frame():
    raw = pd.DataFrame({"t": [1.0, 2, 3], "e": [1, 0, 1], "x": [0.5, 1.5, 2.5], "id": [1, 2, 3]})
    prepared = prepare(raw, Roles(time="t", event="e", covariates=("x",), id="id")).frame
    prepared.loc[prepared.index[0], ["_time", "x", "_id"]] = 99
    assert raw.loc[0, ["t", "x", "id"]].tolist() == [1.0, 0.5, 1]


def test_iso_dates_read_by_pyarrow_as_date_objects():
    table = read_table(b"a,b,e\n2020-01-01,2020-03-01,1\n2021-06-30,2021-07-01,0\n")
    prepared = prepare(table.frame, Roles(start="a", end="b", event="e"))
    assert prepared.frame["_time"].tolist() == [60.0, 1.0]  # 2020 is a leap year


def test_dates_failing_month_first_that_read_day_first_are_named_with_the_fix():
    # Day-first dates read month first: 13/01 and later fail; the checks say they would read
    # day first and name the switch and the option (not only "unparseable date").
    start = ["01/02/2020", "13/01/2020", "25/03/2020", "28/02/2020", "15/06/2020"]
    end = ["05/02/2020", "20/01/2020", "30/03/2020", "02/03/2020", "20/06/2020"]
    frame = pd.DataFrame({"a": start, "b": end, "e": [1, 0, 1, 1, 0]})
    prepared = prepare(frame, Roles(start="a", end="b", event="e"))
    assert _excluded(prepared)["unparseable date"] == 4
    note = next(w for w in prepared.report.warnings if "can be read day first" in w)
    assert "could not be read month first" in note
    assert "'Dates are day first'" in note and "--day-first" in note
    fixed = prepare(frame, Roles(start="a", end="b", event="e", day_first=True))
    assert "unparseable date" not in _excluded(fixed)
    assert not any("can be read" in w for w in fixed.report.warnings)


def test_dates_failing_day_first_that_read_month_first_are_named_with_the_fix():
    start = ["02/01/2020", "01/13/2020", "03/25/2020"]
    end = ["02/05/2020", "01/20/2020", "03/30/2020"]
    frame = pd.DataFrame({"a": start, "b": end, "e": [1, 0, 1]})
    prepared = prepare(frame, Roles(start="a", end="b", event="e", day_first=True))
    note = next(w for w in prepared.report.warnings if "can be read month first" in w)
    assert "switch off 'Dates are day first'" in note and "leave out --day-first" in note


def test_dates_unreadable_either_way_give_no_day_first_hint():
    frame = pd.DataFrame(
        {"a": ["01/02/2020", "not a date"], "b": ["05/02/2020", "06/02/2020"], "e": [1, 0]}
    )
    prepared = prepare(frame, Roles(start="a", end="b", event="e"))
    assert _excluded(prepared) == {"unparseable date": 1}
    assert not any("can be read" in w for w in prepared.report.warnings)
