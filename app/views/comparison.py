"""Group comparison: a k-group test (log-rank by default), stratified if asked, a trend test,
pairwise tests with adjusted p-values and an RMST difference, each read out in one sentence."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import big_views, bigdata, charts, compute, data, ui
from app.share_section import (
    CUT_GROUPS,
    CUT_SOURCE,
    NO_COMPARE_STRATA,
    RMST_ORIGIN_LABELS,
    ROLE_SOURCE,
)
from engine.prepare.roles import event_in_words
from engine.survival.compare import TESTS
from engine.wording import format_number, free_name, p_clause, probability_title

TEST_LABELS = {
    "logrank": "Log-rank (equal weight at every time)",
    "gehan-breslow": "Gehan–Breslow (more weight early, where many are at risk)",
    "tarone-ware": "Tarone–Ware (between the two above)",
    "peto-peto": "Peto–Peto (weights from the pooled survival)",
    "fleming-harrington": "Fleming–Harrington (choose ρ and γ)",
}
ROLE, CUT = ROLE_SOURCE, CUT_SOURCE  # labels the recipe (app.share_section) reads back
ADJUST = {"Holm (family-wise error)": "p_holm", "Benjamini–Hochberg (false discovery rate)": "p_bh"}
LEVEL = 0.05  # conventional 5% level used for the plain-language reading

st.title("Group comparison", anchor=False)
if bigdata.in_use(st.session_state):  # big data: results from aggregates
    big_views.comparison_page()
    st.stop()
table, roles = ui.table_and_roles_or_stop()
prepared = ui.prepared_or_stop(table, roles, "groups can be compared")

frame = table.frame
numeric = [
    str(c)
    for c in frame.columns
    if pd.api.types.is_numeric_dtype(frame[c])
    and not pd.api.types.is_bool_dtype(frame[c])
    and frame[c].nunique() > 5
    and c not in (roles.time, roles.event)
]
has_group = roles.group is not None
cols = st.columns([2, 3])
ui.remember("compare_source", ROLE if has_group else CUT)
source = cols[0].radio(
    "Compare the groups of",
    [ROLE, CUT],
    key="compare_source",
    captions=[f"now: {ui.escape(roles.group)}" if has_group else "none set on Column roles", None],
)
if source == ROLE and not has_group:
    st.info("No group column is set. Choose one on the Column roles page, or cut a numeric column.")
    st.page_link("views/column_roles.py", label="Column roles", icon=":material/view_column:")
    st.stop()

if source == CUT:
    if not numeric:
        st.info("No numeric column with more than five distinct values to cut.")
        st.stop()
    with cols[1]:
        column = st.selectbox("Numeric column", numeric, key="compare_cut_column")
        ui.remember("compare_cut_k", 2)
        k = st.select_slider(
            "Number of groups of about equal size", list(CUT_GROUPS), key="compare_cut_k"
        )
        st.warning(
            "Decide the number of groups before looking at the results. Trying cut after cut and "
            "keeping the one with the smallest p-value makes that p-value far too small, and "
            "the difference it suggests too large.",
            icon=":material/warning:",
        )
    grouping = ("cut", column, int(k))
    levels_source = None
    group_name = f"{column} groups"
else:
    grouping = ("role",)
    levels_source = list(prepared.frame["_group"].cat.categories)
    group_name = roles.group

with st.container(border=True):
    cols = st.columns([3, 2, 2])
    test = cols[0].selectbox("Test", TESTS, format_func=TEST_LABELS.get, key="compare_test")
    rho = gamma = 0.0
    if test == "fleming-harrington":
        rho = cols[1].number_input(
            "ρ (weight on early times)", 0.0, 5.0, 0.0, 0.5, key="compare_rho"
        )
        gamma = cols[2].number_input(
            "γ (weight on late times)", 0.0, 5.0, 1.0, 0.5, key="compare_gamma"
        )
    strata_options = [NO_COMPARE_STRATA] + [
        str(c)
        for c in frame.columns
        if frame[c].nunique() <= 20 and str(c) not in (roles.time, roles.event, roles.group)
    ]
    default_strata = roles.strata if roles.strata in strata_options else strata_options[0]
    ui.remember_choice("compare_strata", strata_options, default_strata)
    strata_choice = st.selectbox(
        "Stratify by",
        strata_options,
        key="compare_strata",
        help="Compares groups within each stratum and adds up the evidence: use it when a "
        "factor such as site affects survival but is not what you are comparing.",
    )
strata_column = None if strata_choice == strata_options[0] else strata_choice
roles_text = data.roles_key(data.curve_roles(roles))
key = (table.sha256, roles_text, grouping)


def reading(name: str, statistic: float, df: int, p: float, what: str) -> str:
    """One plain sentence for a test result."""
    freedom = "degree" if df == 1 else "degrees"
    figures = f"(χ² = {format_number(statistic, 2)} on {df} {freedom} of freedom, {p_clause(p)})"
    if p < LEVEL:
        return f"The {name} test finds evidence that {what} {figures}."
    return f"The {name} test does not find clear evidence that {what} {figures}."


# --- curves of the compared groups ----------------------------------------------------------

with ui.guard("The comparison curves"):
    style = ui.chart_style()
    small = charts.ChartStyle(
        width=int(style.width * 0.8),
        height=int(style.height * 0.7),
        font_size=style.font_size,
        title_size=style.title_size,
        line_width=style.line_width,
        point_size=style.point_size,
    )
    small = ui.titled_style(
        small,
        "compare_plot",
        f"{free_name(event_in_words(roles)).capitalize()} by {group_name}",
        f"Time ({prepared.report.time_unit})",
        probability_title(event_in_words(roles)),
    )
    drawn = compute.comparison_drawing(*key, (small.width, small.height), table)
    levels = levels_source or list(dict.fromkeys(drawn["group"]))
    chart = charts.step_curve_chart(
        drawn,
        small,
        charts.group_colours(levels),
        band=False,
        ticks=charts.nice_ticks(float(drawn["time"].max())),
        legend_title=charts.group_title(group_name),
    )
    ui.figure(chart, small, "comparison-curves", "compare_curves")

# --- overall test ---------------------------------------------------------------------------

st.subheader("Do the groups differ?", anchor=False)
with ui.guard("The test"):
    result = compute.comparison(*key, strata_column, test, rho, gamma, table)
    n_groups = len(result.groups)
    what = f"survival differs between the {n_groups} groups of {group_name}" + (
        f" (within strata of {strata_column})" if strata_column else ""
    )
    sentence = reading(result.test, result.statistic, result.df, result.p_value, what)
    cols = st.columns(3)
    cols[0].metric("Chi-squared (χ²)", format_number(result.statistic, 2))
    cols[1].metric("Degrees of freedom", result.df)
    cols[2].metric("p-value", ui.fmt_p(result.p_value))
    st.markdown(f"**Reading:** {ui.escape(sentence)}")
    st.caption(ui.NOT_SIGNIFICANT_CAUTION)
    from app import share_section  # text for a manuscript

    share_section.manuscript_box(share_section.comparison_text(result), "the test")
    if result.rows_excluded:
        st.caption(
            f"{result.rows_excluded:,} row(s) without a value for the group or stratum are "
            "left out of the comparison."
        )
    observed = result.to_frame()[["group", "observed", "expected"]].copy()
    observed["group"] = observed["group"].map(str)
    ui.table(
        observed,
        "observed-expected",
        "compare_observed",
        shown=pd.DataFrame(
            {
                "Group": observed["group"],
                "Events seen": observed["observed"].map(lambda v: format_number(v, 0)),
                "Events expected if the groups were alike": observed["expected"].map(
                    lambda v: format_number(v, 1)
                ),
            }
        ),
    )

# --- trend ----------------------------------------------------------------------------------

n_levels = len(levels_source) if levels_source else int(grouping[2]) if grouping[0] == "cut" else 0
if n_levels >= 3 or grouping[0] == "cut":
    st.subheader("Is there a trend across ordered groups?", anchor=False)
    with ui.guard("The trend test"):
        if st.toggle(
            "The groups have a natural order",
            key="compare_trend",
            help="A trend test asks whether survival gets steadily better or worse along the "
            "order; it is more powerful than the overall test when that is the question.",
        ):
            labels = compute.group_levels(*key, table)
            ui.remember("compare_trend_order", labels)
            st.session_state["compare_trend_order"] = [
                x for x in st.session_state["compare_trend_order"] if x in labels
            ]
            order = st.multiselect(
                "Order, lowest first (pick every group in order)",
                labels,
                key="compare_trend_order",
            )
            scores_text = st.text_input(
                "Scores (optional, one number per group in that order)",
                key="compare_trend_scores",
                placeholder="e.g. 0, 1, 2, 4",
            )
            scores = None
            if scores_text.strip():
                try:
                    by_label = dict(
                        zip(order, [float(x) for x in scores_text.split(",")], strict=True)
                    )
                except ValueError:
                    st.error("Scores must be one number per group, separated by commas.")
                    st.stop()
                scores = tuple(by_label[label] for label in labels)
            if len(order) != len(labels):
                st.info("Pick every group once, in order, to run the trend test.")
            else:
                trend = compute.trend(
                    *key,
                    strata_column,
                    test,
                    rho,
                    gamma,
                    None if scores else tuple(order),
                    scores,
                    table,
                )
                direction = "worse" if trend.z > 0 else "better"
                sentence = reading(
                    trend.test,
                    trend.statistic,
                    trend.df,
                    trend.p_value,
                    f"survival gets steadily {direction} along the order {' → '.join(order)}",
                )
                st.markdown(
                    f"**Reading:** {ui.escape(sentence)} (z = {format_number(trend.z, 2)}.)"
                )
                st.caption(ui.NOT_SIGNIFICANT_CAUTION)

# --- pairwise -------------------------------------------------------------------------------

if n_levels >= 3:
    st.subheader("Which pairs differ?", anchor=False)
    with ui.guard("The pairwise tests"):
        adjust_label = st.radio(
            "Adjust p-values for several tests by",
            list(ADJUST),
            key="compare_adjust",
            horizontal=True,
        )
        adjusted = ADJUST[adjust_label]
        pairs = compute.pairwise(*key, strata_column, test, rho, gamma, table).to_frame()
        pairs["group_a"] = pairs["group_a"].map(str)
        pairs["group_b"] = pairs["group_b"].map(str)
        shown = pd.DataFrame(
            {
                "Group": pairs["group_a"],
                "against": pairs["group_b"],
                "Chi-squared": pairs["statistic"].map(lambda v: format_number(v, 2)),
                "p (unadjusted)": pairs["p_value"].map(ui.fmt_p),
                f"p ({adjust_label.split(' ')[0]})": pairs[adjusted].map(ui.fmt_p),
            }
        )
        ui.table(pairs, "pairwise-tests", "compare_pairs", shown=shown)
        differing = pairs.loc[pairs[adjusted] < LEVEL]
        if differing.empty:
            st.markdown(
                f"**Reading:** after {adjust_label.split(' ')[0]} adjustment, no pair differs "
                f"clearly at the {LEVEL:.0%} level."
            )
        else:
            names = "; ".join(
                f"{a} vs {b}" for a, b in differing[["group_a", "group_b"]].itertuples(index=False)
            )
            st.markdown(
                f"**Reading:** after {adjust_label.split(' ')[0]} adjustment, these pairs "
                f"differ clearly: {ui.escape(names)}."
            )
        st.caption(ui.NOT_SIGNIFICANT_CAUTION)

# --- RMST difference ------------------------------------------------------------------------

st.subheader("Restricted mean survival time difference", anchor=False)
with ui.guard("The RMST difference"):
    labels = compute.group_levels(*key, table)
    cols = st.columns(3)
    ui.remember_choice("compare_rmst_a", labels, labels[0])
    ui.remember_choice("compare_rmst_b", labels, labels[min(1, len(labels) - 1)])
    first = cols[0].selectbox("Group", labels, key="compare_rmst_a")
    second = cols[1].selectbox("against", labels, key="compare_rmst_b")
    ui.remember("compare_tau", 0.0)
    tau = cols[2].number_input(
        f"Restricted mean up to ({prepared.report.time_unit}), 0 = automatic",
        min_value=0.0,
        key="compare_tau",
    )
    origin = "zero"
    if "_entry" in prepared.frame.columns:  # delayed entry: from 0 or from the first entry
        ui.remember("compare_rmst_origin", RMST_ORIGIN_LABELS["zero"])
        chosen_origin = st.radio(
            "Restricted mean from",
            list(RMST_ORIGIN_LABELS.values()),
            key="compare_rmst_origin",
            horizontal=True,
        )
        origin = {v: k for k, v in RMST_ORIGIN_LABELS.items()}[chosen_origin]
    if first == second:
        st.info("Choose two different groups.")
    else:
        rmst = compute.rmst_pair(*key, (first, second), tau or None, 0.95, table, origin)
        contrast = rmst.contrast
        unit = prepared.report.time_unit
        longer = "longer" if contrast.difference > 0 else "shorter"
        horizon = f"{format_number(rmst.tau, 1)} {unit}"
        span = f"the first {horizon}"
        if rmst.origin:
            span = f"the span from the first entry ({format_number(rmst.origin, 1)}) to {horizon}"
        sentence = (
            f"Over {span}, the average time free of the event was "
            f"{format_number(abs(contrast.difference), 2)} {unit} {longer} in {second} than in "
            f"{first} (difference {second} − {first}: {format_number(contrast.difference, 2)} "
            f"{unit}, 95% CI {format_number(contrast.difference_lower, 2)} to "
            f"{format_number(contrast.difference_upper, 2)}, {p_clause(contrast.difference_p)})."
        )
        st.markdown(f"**Reading:** {ui.escape(sentence)}")
        origin_rule = f"{rmst.origin_rule} " if rmst.origin_rule else ""
        st.caption(
            f"Horizon {horizon}: {rmst.tau_rule}. {origin_rule}" + ui.NOT_SIGNIFICANT_CAUTION
        )
        estimates = pd.concat([e.to_frame() for e in rmst.estimates], ignore_index=True)
        ui.table(
            estimates,
            "rmst-by-group",
            "compare_rmst",
            shown=pd.DataFrame(
                {
                    "Group": estimates["group"].map(str),
                    f"Restricted mean to {horizon} ({unit})": estimates["estimate"].map(
                        lambda v: format_number(v, 2)
                    ),
                    "95% CI": [
                        f"{format_number(lo, 2)} to {format_number(hi, 2)}"
                        for lo, hi in estimates[["lower", "upper"]].itertuples(index=False)
                    ],
                    f"Standard error ({unit})": estimates["std_err"].map(
                        lambda v: format_number(v, 3)
                    ),
                }
            ),
        )
