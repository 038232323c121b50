"""Column roles: time units, event codings, suggestions, covariate kinds and reference levels."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from engine.errors import RoleError
from engine.prepare.roles import (
    ONE_TWO_ASSUMPTION,
    TIME_UNITS,
    Roles,
    classify_covariates,
    convert_time,
    covariate_kind,
    default_reference,
    describe_event,
    guess_day_first,
    natural_sort_key,
    suggest_roles,
    value_key,
)

# --- time units ---------------------------------------------------------------------------------


def test_unit_lengths_are_the_documented_ones():
    # 1 month = 30.4375 days and 1 year = 365.25 days: average Gregorian month and Julian year.
    assert TIME_UNITS == {"days": 1.0, "weeks": 7.0, "months": 30.4375, "years": 365.25}


@pytest.mark.parametrize(
    ("value", "source", "target", "expected"),
    [
        (365.25, "days", "years", 1.0),
        (30.4375, "days", "months", 1.0),
        (14.0, "days", "weeks", 2.0),
        (12.0, "months", "years", 1.0),
        (1.0, "years", "weeks", 365.25 / 7),
        (3.0, "weeks", "weeks", 3.0),
    ],
)
def test_convert_time(value, source, target, expected):
    assert convert_time(np.array([value]), source, target)[0] == pytest.approx(expected)


@given(
    st.floats(0, 1e6, allow_nan=False),
    st.sampled_from(list(TIME_UNITS)),
    st.sampled_from(list(TIME_UNITS)),
)
def test_convert_time_round_trips(value, source, target):
    back = convert_time(convert_time(np.array([value]), source, target), target, source)
    assert back[0] == pytest.approx(value, rel=1e-12, abs=1e-12)


def test_unknown_unit():
    with pytest.raises(RoleError, match="fortnights"):
        convert_time(np.array([1.0]), "fortnights", "days")


# --- value keys and event codings ---------------------------------------------------------------


@pytest.mark.parametrize(
    ("a", "b"),
    [(1, "1"), (1.0, " 1 "), (np.int64(2), "2.0"), (True, "TRUE"), ("Dead", "dead"), (0.5, "0.5")],
)
def test_value_keys_match_across_types(a, b):
    assert value_key(a) == value_key(b)


def test_value_key_of_missing():
    assert value_key(None) is value_key(np.nan) is value_key(pd.NA) is None


@pytest.mark.parametrize(
    ("values", "events", "censored"),
    [
        ([0, 1, 1, 0, 1], (1,), (0,)),
        ([0.0, 1.0, np.nan, 1.0], (1.0,), (0.0,)),
        ([True, False, True], (True,), (False,)),
        (["yes", "no", "Yes", "NO"], ("yes", "Yes"), ("no", "NO")),
        (["Dead", "Alive", "dead"], ("Dead", "dead"), ("Alive",)),
        (["relapse", "censored", "relapse"], ("relapse",), ("censored",)),
        (["died", "lost to follow-up", "alive"], ("died",), ("lost to follow-up", "alive")),
        (["failed", "working"], ("failed",), ("working",)),
        ([1, 1, 1], (1,), ()),
    ],
)
def test_recognised_codings(values, events, censored):
    coding = describe_event(pd.Series(values, name="status"))
    assert not coding.needs_choice
    assert coding.assumption is None
    assert set(coding.event_values) == set(events)
    assert set(coding.censored_values) == set(censored)


def test_one_two_is_an_assumption_stated_to_the_user():
    coding = describe_event(pd.Series([1, 2, 2, 1, 1], name="status"))
    assert coding.event_values == (2,)
    assert coding.censored_values == (1,)
    assert coding.assumption == ONE_TWO_ASSUMPTION
    assert "1 = censored" in coding.describe() and "2 = event" in coding.describe()


@pytest.mark.parametrize(
    "values",
    [
        [0, 1, 2, 0, 1, 2],  # competing-risk style codes: the caller must decide
        ["A", "B", "A"],
        ["dead", "alive", "unclear", "unclear", "unclear"],  # too many unknown rows
        [3, 4, 3],
    ],
)
def test_unrecognised_codings_need_a_choice(values):
    coding = describe_event(pd.Series(values, name="outcome"))
    assert coding.needs_choice
    assert "name the value" in coding.describe()


def test_rare_unknown_text_values_are_listed_for_exclusion():
    values = ["dead"] * 10 + ["alive"] * 10 + ["?"]
    coding = describe_event(pd.Series(values, name="status"))
    assert not coding.needs_choice
    assert coding.unknown_values == ("?",)
    frame = coding.to_frame()
    assert frame.set_index("value").loc["?", "meaning"] == "unknown"


def test_counts_cover_every_value_including_missing():
    coding = describe_event(pd.Series(["x", "y", None, "x", "z"], name="e"), event_values=("x",))
    assert dict(coding.counts) == {"x": 2, "y": 1, "z": 1, None: 1}
    assert coding.event_values == ("x",)
    assert set(coding.censored_values) == {"y", "z"}
    json.dumps(coding.to_dict())


def test_explicit_values_match_numbers_given_as_text():
    coding = describe_event(pd.Series([0, 1, 2, 2], name="e"), event_values=("1", "2"))
    assert set(coding.event_values) == {1, 2}
    assert coding.censored_values == (0,)


# --- roles record -------------------------------------------------------------------------------


def test_roles_round_trip_through_json():
    roles = Roles(
        start="a",
        end="b",
        day_first=True,
        unit="months",
        event="e",
        event_values=("dead", 2),
        event_causes=(("dead", "death"), (2, "relapse")),
        group="g",
        covariates=("x", "y"),
        categorical=("y",),
        reference=(("y", "low"),),
        id="id",
    )
    again = Roles.from_dict(json.loads(json.dumps(roles.to_dict())))
    assert again == roles


def test_duration_unit():
    assert Roles(time="t", unit="years").duration_unit == "years"
    assert Roles(time="t", unit="years", source_unit="days").duration_unit == "days"
    assert Roles(start="a", end="b", unit="years").duration_unit == "days"


# --- suggestions --------------------------------------------------------------------------------


@pytest.fixture
def cohort() -> pd.DataFrame:
    rng = np.random.default_rng(7)
    n = 60
    return pd.DataFrame(
        {
            "subject_id": [f"S{i}" for i in range(n)],
            "arm": rng.choice(["placebo", "low dose", "high dose"], n),
            "age": rng.normal(60, 8, n).round(1),
            "stage": rng.choice([1, 2, 3], n),
            "followup_months": rng.exponential(20, n).round(1),
            "status": rng.choice(["dead", "alive"], n),
        }
    )


def test_suggest_roles_from_names_and_contents(cohort):
    before = cohort.copy()
    suggestions = suggest_roles(cohort)
    assert suggestions.time.column == "followup_months"
    assert suggestions.unit == "months"
    assert suggestions.event.column == "status"
    assert suggestions.group.column == "arm"
    assert suggestions.id.column == "subject_id"
    assert {s.column for s in suggestions.covariates} == {"age", "stage"}
    kinds = {s.column: s.reason for s in suggestions.covariates}
    assert kinds["stage"] == "possibly categorical"
    assert all(s.reason for s in (suggestions.time, suggestions.event, suggestions.group))
    pd.testing.assert_frame_equal(cohort, before)  # returned, never applied
    roles = suggestions.to_roles(group=None)
    assert roles.time == "followup_months" and roles.group is None
    json.dumps(suggestions.to_dict())


def test_suggest_start_and_end_dates_and_day_first():
    frame = pd.DataFrame(
        {
            "diagnosis_date": ["03/01/2020", "25/02/2020", "11/03/2020"],
            "last_seen": ["15/06/2021", "01/01/2022", "30/12/2021"],
            "vital": ["dead", "alive", "alive"],
        }
    )
    suggestions = suggest_roles(frame)
    assert suggestions.start.column == "diagnosis_date"
    assert suggestions.end.column == "last_seen"
    assert suggestions.day_first is True
    assert suggestions.time is None


def test_guess_day_first():
    assert guess_day_first(pd.Series(["13/01/2020", "01/02/2020"]))
    assert not guess_day_first(pd.Series(["01/13/2020", "01/02/2020"]))
    assert not guess_day_first(pd.Series(["2020-01-13"]))


# --- covariates and levels ----------------------------------------------------------------------


@pytest.mark.parametrize(
    ("values", "kind"),
    [
        ([1.5, 2.5, 3.1, 4.2, 5.0, 6.3], "numeric"),
        ([0, 1, 1, 0], "possibly categorical"),
        ([1, 2, 3, 2, 1], "possibly categorical"),
        (list(range(20)), "numeric"),
        (["a", "b"], "categorical"),
        ([True, False], "categorical"),
    ],
)
def test_covariate_kind(values, kind):
    assert covariate_kind(pd.Series(values)) == kind


def test_classify_covariates_caller_choice_wins():
    frame = pd.DataFrame(
        {"grade": [1, 2, 3, 1], "age": [50.5, 61.2, 70.1, 44.0], "sex": list("mfmf")}
    )
    roles = Roles(time="t", covariates=("grade", "age", "sex"), categorical=("grade",))
    assert classify_covariates(frame, roles) == {
        "grade": "categorical",
        "age": "numeric",
        "sex": "categorical",
    }


def test_natural_sort():
    levels = ["dose 10", "dose 2", "Dose 1", "placebo"]
    assert sorted(levels, key=natural_sort_key) == ["Dose 1", "dose 2", "dose 10", "placebo"]
    assert sorted([10, 2, 1.5], key=natural_sort_key) == [1.5, 2, 10]


def test_default_reference_is_most_frequent_with_natural_tie_break():
    assert default_reference(pd.Series(["b", "a", "b", None, None, None])) == "b"
    assert default_reference(pd.Series(["g10", "g2", "g10", "g2"])) == "g2"
    assert default_reference(pd.Series([None, None], dtype=object)) is None


@pytest.mark.parametrize(
    ("roles", "expected"),
    [
        (Roles(time="t", event="outcome", event_values=("relapsed",)), "relapse"),
        (Roles(time="t", event="failed"), "failure"),
        (Roles(time="t", event="status", event_values=("died",)), "death"),
        (Roles(time="t", event="status", event_values=("1",)), "the event"),
        (Roles(time="t", event="status", event_name="  first  sale "), "first sale"),
    ],
)
def test_the_event_in_words(roles, expected):
    from engine.prepare.roles import event_in_words

    assert event_in_words(roles) == expected


def test_roles_read_the_former_dayfirst_key():
    assert Roles.from_dict({"time": "t", "dayfirst": True}).day_first is True
    assert "day_first" in Roles().to_dict() and "dayfirst" not in Roles().to_dict()
