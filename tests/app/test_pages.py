"""Every page in Streamlit's AppTest: the numbers shown are the engine's, and errors are messages.

The reference numbers are computed here by calling the engine directly on the same demo file
with the same roles; the app must show exactly those (after its stated rounding).
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
import streamlit as st
from streamlit.testing.v1 import AppTest

from app import data, state
from engine.cox.fit import fit_cox
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles, suggest_roles
from engine.survival.compare import compare_frame
from engine.survival.summary import group_summary
from engine.wording import format_number, format_ratio

ROOT = Path(__file__).resolve().parents[2]
ENTRY = str(ROOT / "app" / "hazel.py")
PUMPS = ROOT / "demo_data" / "pump_bearings.csv"
TIMEOUT = 120


def _app() -> AppTest:
    return AppTest.from_file(ENTRY, default_timeout=TIMEOUT)


def _open(page: str | None = None) -> AppTest:
    at = _app().run()
    assert not at.exception
    if page is not None:
        at.switch_page(page).run()
        assert not at.exception, [e.message for e in at.exception]
    return at


@pytest.fixture(scope="module")
def pumps():
    """The demo the app opens on, prepared with its documented roles, straight from the engine."""
    table = read_table(PUMPS)
    roles = data.DEMO_ROLES["pump_bearings.csv"]
    suggested = suggest_roles(table.frame).to_roles(**roles)
    return table, suggested, prepare(table.frame, suggested)


def _metric(at: AppTest, label: str) -> str:
    return next(m.value for m in at.metric if m.label == label)


def _texts(at: AppTest) -> str:
    return "\n".join(
        [m.value for m in at.markdown]
        + [m.value for m in at.caption]
        + [m.value for m in at.info]
        + [m.value for m in at.warning]
        + [m.value for m in at.error]
    )


# --- start page and sidebar -----------------------------------------------------------------


def test_app_opens_on_the_demo_with_cautions_and_sidebar(pumps):
    _, _, prepared = pumps
    at = _open()
    text = _texts(at)
    assert "not decisions about an individual patient" in text
    assert "qualified statistician" in text
    assert "stays on this computer" in text
    assert "ethics and data-protection rules" in text
    sidebar = "\n".join(m.value for m in at.sidebar.markdown)
    assert "Invented demo data" in sidebar
    assert f"{prepared.report.rows_used:,} of {prepared.report.rows_read:,}" in sidebar
    assert f"**Events** {prepared.report.events:,}" in sidebar
    assert "supplier" in sidebar


def test_about_page_shows_the_cautions():
    at = _open("views/about.py")
    text = _texts(at)
    assert "qualified statistician" in text
    assert "usage statistics" in text


def test_another_demo_opens_in_one_click():
    at = _open()
    at.button(key="import_demo_dairy_herd_button").click().run()
    assert not at.exception
    assert at.session_state[state.DATASET_LABEL] == "Demo: Dairy herd"
    assert at.session_state[state.ROLES].group == "housing"


# --- error paths ----------------------------------------------------------------------------


def test_a_bad_file_gives_a_message_and_keeps_the_data():
    at = _open()
    before = at.session_state[state.TABLE].sha256
    at.session_state[state.PENDING_UPLOAD] = ("broken.csv", b"\x00\x01\x02binary junk\xff" * 50)
    at.run()
    assert not at.exception
    assert any("broken.csv could not be read" in e.value for e in at.error)
    assert at.session_state[state.TABLE].sha256 == before


def test_an_uploaded_file_replaces_the_demo():
    at = _open()
    csv = b"months,died,arm\n1,1,a\n2,0,b\n3,1,a\n4,1,b\n5,0,a\n6,1,b\n"
    at.session_state[state.PENDING_UPLOAD] = ("mine.csv", csv)
    at.run()
    assert not at.exception
    assert at.session_state[state.DATASET_IS_DEMO] is False
    assert "mine.csv" in "\n".join(m.value for m in at.sidebar.markdown)


def test_wrong_event_values_give_a_message_on_every_page():
    at = _open("views/column_roles.py")
    at.selectbox(key="roles_event").set_value("site").run()
    assert not at.exception
    assert any("Choose the value(s) that mean the event" in e.value for e in at.error)
    assert any("cannot be used yet" in e.value for e in at.error)
    for page in ("views/curves.py", "views/comparison.py", "views/regression.py"):
        at.switch_page(page).run()
        assert not at.exception, page
        assert any("need attention" in e.value for e in at.error), page


def test_a_model_that_cannot_be_fitted_gives_a_message():
    at = _open()
    csv = "t,e,g,const\n" + "".join(f"{i + 1},{i % 2},{'ab'[i % 2]},same\n" for i in range(40))
    at.session_state[state.PENDING_UPLOAD] = ("flat.csv", csv.encode())
    at.run()
    at.session_state[state.ROLES] = Roles(
        time="t", event="e", covariates=("const",), categorical=("const",)
    )
    at.switch_page("views/regression.py").run()
    assert not at.exception
    assert any("cannot be fitted" in e.value for e in at.error)
    # The other pages still work.
    at.switch_page("views/curves.py").run()
    assert not at.exception and not at.error


# --- roles ----------------------------------------------------------------------------------


def test_changing_the_group_role_updates_the_sidebar_and_the_report(pumps):
    table, roles, _ = pumps
    at = _open("views/column_roles.py")
    at.selectbox(key="roles_group").set_value("site").run()
    assert not at.exception
    assert at.session_state[state.ROLES].group == "site"
    assert "Group: site" in "\n".join(m.value for m in at.sidebar.markdown)
    expected = prepare(table.frame, Roles(**{**roles.to_dict(), "group": "site"}))
    shown = at.dataframe[-1].value
    assert list(shown["group"]) == list(expected.report.group_counts["group"])
    assert list(shown["events"]) == list(expected.report.group_counts["events"])


def test_roles_survive_a_page_switch():
    at = _open("views/curves.py")
    at.toggle(key="curves_band").set_value(False).run()
    at.switch_page("views/about.py").run()
    at.switch_page("views/curves.py").run()
    assert at.toggle(key="curves_band").value is False


# --- curves ---------------------------------------------------------------------------------


def test_curves_summary_equals_the_engine(pumps):
    _, _, prepared = pumps
    at = _open("views/curves.py")
    at.text_input(key="curves_times").set_value("12, 24").run()
    assert not at.exception
    expected = group_summary(prepared.frame, (12.0, 24.0)).to_frame()
    shown = at.dataframe[0].value
    assert list(shown["Subjects"]) == list(expected["n"])
    # the event ("failed") named in words, and units on every time
    assert "Median time to failure (months)" in shown.columns
    assert "Probability still free of failure at 12 months" in shown.columns
    assert list(shown["Events"]) == list(expected["events"])
    for row, (_, want) in zip(shown.itertuples(index=False), expected.iterrows(), strict=True):
        assert row[4].startswith(f"{want['median']:.3g} (")
        assert row[5].startswith(f"{want['survival_12']:.3f} (")
        assert row[6].startswith(f"{want['survival_24']:.3f} (")
    assert len(at.get("vega_lite_chart")) >= 1


@pytest.mark.parametrize(
    "scale", ["Cumulative incidence (1 − survival)", "Cumulative hazard (Nelson–Aalen)"]
)
def test_curve_scales_and_switches_draw_without_error(scale):
    at = _open("views/curves.py")
    at.selectbox(key="curves_scale").set_value(scale).run()
    at.toggle(key="curves_censor").set_value(False).run()
    at.segmented_control(key="curves_for").set_value("All rows").run()
    at.selectbox(key="curves_unit").set_value("years").run()
    assert not at.exception
    assert not at.error


# --- comparison -----------------------------------------------------------------------------


@pytest.mark.parametrize("test", ["logrank", "gehan-breslow", "peto-peto"])
def test_comparison_shows_the_engine_statistic(pumps, test):
    _, _, prepared = pumps
    at = _open("views/comparison.py")
    at.selectbox(key="compare_test").set_value(test).run()
    assert not at.exception
    expected = compare_frame(prepared.frame, test=test)
    assert _metric(at, "Chi-squared (χ²)") == format_number(expected.statistic, 2)
    assert _metric(at, "Degrees of freedom") == str(expected.df)
    text = _texts(at)
    assert "Reading:" in text
    assert "does not show that the groups are the same" in text


def test_cutting_a_numeric_column_warns_against_hunting_for_a_cut():
    at = _open("views/comparison.py")
    at.radio(key="compare_source").set_value("A numeric column cut at quantiles").run()
    assert not at.exception
    assert any("smallest p-value" in w.value for w in at.warning)
    assert _metric(at, "Degrees of freedom") == "1"


# --- regression -----------------------------------------------------------------------------


def test_cox_model_numbers_equal_the_engine(pumps):
    _, roles, prepared = pumps
    at = _open("views/regression.py")
    expected = fit_cox(prepared.frame, list(roles.covariates), categorical=list(roles.categorical))
    assert _metric(at, "Rows used") == f"{expected.n:,}"
    assert _metric(at, "Events") == f"{expected.events:,}"
    assert _metric(at, "Concordance (C)") == f"{expected.concordance.concordance:.3f}"
    terms = at.dataframe[0].value
    assert list(terms["Hazard ratio"]) == [format_ratio(t.hazard_ratio) for t in expected.terms]
    # one order for the Cox table: the hazard ratio first, its interval named "95% CI"
    assert list(terms.columns)[:4] == ["Term", "Hazard ratio", "95% CI", "p"]
    assert "lubricant: dry film vs grease" in list(terms["Term"])
    # Breslow ties refit the model.
    at.radio(key="model_ties").set_value("Breslow").run()
    breslow = fit_cox(
        prepared.frame,
        list(roles.covariates),
        categorical=list(roles.categorical),
        ties="breslow",
    )
    assert not at.exception
    terms = at.dataframe[0].value
    assert list(terms["Hazard ratio"]) == [format_ratio(t.hazard_ratio) for t in breslow.terms]


def test_cox_model_with_one_covariate_and_a_new_reference(pumps):
    at = _open("views/regression.py")
    at.multiselect(key="model_covariates").set_value(["lubricant"]).run()
    at.selectbox(key="model_reference_lubricant").set_value("oil bath").run()
    assert not at.exception
    terms = at.dataframe[0].value
    assert all("vs oil bath" in t for t in terms["Term"])
    assert isinstance(terms, pd.DataFrame)


def test_changing_a_covariate_does_not_recompute_the_curves(monkeypatch):
    from app import compute

    calls = []
    original = compute.curves_by_group

    def counting(frame, **kwargs):
        calls.append(len(frame))
        return original(frame, **kwargs)

    monkeypatch.setattr(compute, "curves_by_group", counting)
    st.cache_data.clear()
    st.cache_resource.clear()
    at = _open("views/curves.py")
    assert len(calls) == 1
    at.switch_page("views/column_roles.py").run()
    at.multiselect(key="roles_covariates").set_value(["load_kN"]).run()
    assert at.session_state[state.ROLES].covariates == ("load_kN",)
    at.switch_page("views/curves.py").run()
    assert not at.exception
    assert len(calls) == 1
    # Changing the group does recompute them.
    at.switch_page("views/column_roles.py").run()
    at.selectbox(key="roles_group").set_value("site").run()
    at.switch_page("views/curves.py").run()
    assert len(calls) == 2


@pytest.mark.parametrize("demo", ["pump_bearings", "joint_trial", "dairy_herd"])
def test_every_page_works_on_every_demo(demo):
    at = _open()
    at.button(key=f"import_demo_{demo}_button").click().run()
    assert not at.exception
    for page in (
        "views/column_roles.py",
        "views/curves.py",
        "views/comparison.py",
        "views/regression.py",
        "views/about.py",
    ):
        at.switch_page(page).run()
        assert not at.exception, (demo, page, [e.message for e in at.exception])
        assert not at.error, (demo, page, [e.value for e in at.error])


def test_import_options_read_the_file_again():
    at = _open()
    csv = b"months;died;arm\n1,5;1;a\n2,25;0;b\n3,0;1;a\n4,75;1;b\n"
    at.session_state[state.PENDING_UPLOAD] = ("semicolons.csv", csv)
    at.run()
    assert not at.exception
    first = at.session_state[state.TABLE]
    assert list(first.frame.columns) == ["months", "died", "arm"]
    at.toggle(key="import_show_options").set_value(True).run()
    # Inside a form, choices take effect together when the form is submitted.
    at.selectbox(key="import_sep").set_value("Semicolon ;")
    at.selectbox(key="import_decimal").set_value("Point .")
    next(b for b in at.button if b.label.startswith("Read the file again")).click().run()
    assert not at.exception
    again = at.session_state[state.TABLE]
    assert again.options.decimal == "."
    assert again.frame["months"].tolist() == ["1,5", "2,25", "3,0", "4,75"]


def test_removing_a_covariate_keeps_the_regression_page_working():
    at = _open("views/regression.py")
    at.selectbox(key="model_ph_term").set_value("lubricant: oil bath vs grease").run()
    at.selectbox(key="model_profile_variable").set_value("lubricant").run()
    at.multiselect(key="model_covariates").set_value(["load_kN"]).run()
    assert not at.exception
    assert not at.error
    assert at.selectbox(key="model_ph_term").value == "load_kN"


def test_column_names_are_shown_literally_not_as_markup():
    at = _open()
    csv = "t,e,<script>alert(1)</script>,[arm](http://x)\n" + "".join(
        f"{i + 1},{i % 2},x,{'ab'[i % 2]}\n" for i in range(20)
    )
    at.session_state[state.PENDING_UPLOAD] = ("odd names.csv", csv.encode())
    at.run()
    at.session_state[state.ROLES] = Roles(time="t", event="e", group="[arm](http://x)")
    at.run()
    sidebar = "\n".join(m.value for m in at.sidebar.markdown)
    assert "Group: \\[arm\\](http\\://x)" in sidebar
    assert "[arm](http://x)" not in sidebar


def test_trend_pairwise_and_rmst_equal_the_engine(pumps):
    from engine.survival.compare import pairwise_comparisons, trend_test
    from engine.survival.rmst import rmst_by_group

    _, _, prepared = pumps
    frame = prepared.frame
    at = _open("views/comparison.py")
    at.toggle(key="compare_trend").set_value(True).run()
    assert not at.exception
    trend = trend_test(frame["_time"], frame["_event"], frame["_group"])
    text = _texts(at)
    assert f"χ² = {format_number(trend.statistic, 2)} on 1 degree of freedom" in text
    pairs = pairwise_comparisons(frame["_time"], frame["_event"], frame["_group"]).to_frame()
    shown = next(d.value for d in at.dataframe if "against" in d.value.columns)
    assert list(shown["Chi-squared"]) == [format_number(v, 2) for v in pairs["statistic"]]
    two = frame[frame["_group"].isin(["Ashford", "Brightmoor"])]
    group = pd.Categorical(two["_group"].astype(object), categories=["Ashford", "Brightmoor"])
    rmst = rmst_by_group(two["_time"], two["_event"], pd.Series(group, index=two.index))
    assert format_number(rmst.contrast.difference, 2) in text
    low, high = rmst.contrast.difference_lower, rmst.contrast.difference_upper
    assert f"95% CI {format_number(low, 2)} to {format_number(high, 2)}" in text


def test_predicted_curves_for_profiles_i_set(pumps):
    from engine.cox.summaries import predict_survival

    _, roles, prepared = pumps
    at = _open("views/regression.py")
    at.radio(key="model_profile_mode").set_value("Profiles I set").run()
    assert any("Add a profile" in i.value for i in at.info)
    next(b for b in at.button if b.label == "Add profile").click().run()
    assert not at.exception
    assert not at.error
    table = next(d.value for d in at.dataframe if "profile" in d.value.columns)
    assert list(table["profile"]) == ["Profile 1"]  # the table of profiles drawn
    # The profile starts at the reference level and the means: the engine's typical profile.
    model = fit_cox(prepared.frame, list(roles.covariates), categorical=list(roles.categorical))
    expected = predict_survival(model, {"Profile 1": {}}).profiles
    assert table["lubricant"].iloc[0] == expected["lubricant"].iloc[0]
    assert table["load_kN"].iloc[0] == pytest.approx(expected["load_kN"].iloc[0], rel=1e-3)


def test_a_runaway_coefficient_shows_not_estimable_on_the_regression_page():
    """A level without events: its coefficient runs off to infinity, so the page's table shows
    "not estimable" for its interval and p-value (never "< 0.001"), beside the warning."""
    at = _open()
    rows = [
        f"{i + 1},{0 if i % 2 == 0 else (i // 2) % 2},{'ab'[i % 2]},{i % 7}\n" for i in range(40)
    ]
    at.session_state[state.PENDING_UPLOAD] = ("mono.csv", ("t,e,x,z\n" + "".join(rows)).encode())
    at.run()
    at.session_state[state.ROLES] = Roles(
        time="t", event="e", covariates=("x", "z"), categorical=("x",)
    )
    at.switch_page("views/regression.py").run()
    assert not at.exception
    terms = at.dataframe[0].value
    row = terms[terms["Term"] == "x: b vs a"].iloc[0]
    assert row["95% CI"] == "not estimable" and row["p"] == "not estimable"
    assert row["Standard error"] == "not estimable"
    assert terms[terms["Term"] == "z"].iloc[0]["p"] != "not estimable"
    assert "run off to infinity" in _texts(at)


def test_curves_summary_note_states_the_median_rule():
    from engine.survival.curves import MEDIAN_RULE

    at = _open("views/curves.py")
    assert any(MEDIAN_RULE in c.value for c in at.caption)


def test_curves_page_offers_the_first_entry_as_the_rmst_origin_with_delayed_entry():
    """With an entry-time role the summary says the restricted mean runs from 0 with S = 1
    before the first entry, and the switch to the first entry lowers every RMST by it."""
    at = _open()
    rows = "".join(f"{3 + (i % 5) + i * 0.7:.1f},{i % 2},{1 + i % 5}\n" for i in range(40))
    at.session_state[state.PENDING_UPLOAD] = ("entry.csv", ("t,e,entry\n" + rows).encode())
    at.run()
    at.session_state[state.ROLES] = Roles(time="t", event="e", entry="entry")
    at.switch_page("views/curves.py").run()
    assert not at.exception
    assert any("takes S = 1 before the first entry (time 1)" in c.value for c in at.caption)
    before = at.dataframe[-1].value.iloc[:, -1].tolist()
    at.radio(key="curves_rmst_origin").set_value("The first entry").run()
    assert not at.exception
    assert any("runs from the first entry (time 1), as chosen" in c.value for c in at.caption)
    after = at.dataframe[-1].value.iloc[:, -1].tolist()
    assert [float(a.split(" ")[0]) for a in after] == [
        pytest.approx(float(b.split(" ")[0]) - 1, abs=0.01) for b in before
    ]
