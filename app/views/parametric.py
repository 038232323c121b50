"""Parametric models: exponential, Weibull, log-normal and log-logistic fits compared by AIC,
drawn over Kaplan–Meier with extrapolation marked, their medians and survival at chosen times,
and accelerated failure time models with the covariates."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import charts, charts_models, compute, compute_beyond, data, ui
from engine.parametric.aft import AFT_PARAMETRISATION
from engine.parametric.fits import DISTRIBUTIONS, LABELS, PARAMETRISATION
from engine.wording import (
    format_confidence,
    format_number,
    format_p,
    format_percent,
    format_plain,
    format_ratio,
)

st.title("Parametric models", anchor=False)
st.caption(
    "A parametric model assumes a shape for the survival curve. It can summarise the curve in a "
    "few numbers and carry it past the end of follow-up, but past that point the curve is the "
    "model's assumption, not what the data showed."
)
table, roles = ui.table_and_roles_or_stop()
prepared = ui.prepared_or_stop(table, roles, "models can be fitted")
frame = prepared.frame
unit = prepared.report.time_unit
last_time = float(frame["_time"].max()) if len(frame) else 0.0
has_group = "_group" in frame.columns

with st.container(border=True):
    cols = st.columns([3, 1, 1, 1])
    ui.remember("param_distributions", list(DISTRIBUTIONS))
    chosen = cols[0].multiselect(
        "Models", list(DISTRIBUTIONS), format_func=LABELS.get, key="param_distributions"
    )
    ui.remember("param_by_group", False)
    by_group = (
        cols[1].toggle("Each group", key="param_by_group", disabled=not has_group) and has_group
    )
    # start past the follow-up, so the extrapolated part (dashed, shaded) is visible at once
    ui.remember("param_horizon", charts.nice_ticks(last_time * 1.5, count=4)[-1] or 0.0)
    horizon = cols[2].number_input(
        f"Draw up to ({unit})",
        min_value=0.0,
        key="param_horizon",
        help=f"0 = the last observed time ({last_time:,.4g}). Beyond it the curves are "
        "extrapolation, drawn dashed on a shaded band.",
    )
    ui.remember("param_include", True)
    cols[3].toggle("In the report and recipe", key="param_include")
    # Two round times within follow-up as a start (as on the Curves page); any others may be typed.
    ui.remember("param_times", ", ".join(f"{t:g}" for t in charts.nice_ticks(last_time, 4)[1:3]))
    times_text = st.text_input(
        f"Survival at times ({unit}), separated by commas",
        key="param_times",
        placeholder="e.g. 12, 24",
    )
if not chosen:
    st.info("Choose at least one model.")
    st.stop()
try:
    times = tuple(sorted({float(p) for p in times_text.replace(";", ",").split(",") if p.strip()}))
except ValueError:
    st.error("Times must be numbers separated by commas, for example 12, 24.")
    times = ()
roles_text = data.roles_key(data.curve_roles(roles))

with ui.guard("The parametric fits"):
    result = compute_beyond.parametric(
        table.sha256,
        roles_text,
        tuple(chosen),
        by_group,
        times,
        horizon or None,
        0.95,
        table,
    )
    for dist, group, reason in result.failed:
        st.warning(f"{LABELS[dist]}{f' ({group})' if group else ''}: {ui.escape(reason)}")
    if result.rows_time_zero:
        st.info(
            f"{result.rows_time_zero:,} row(s) with time 0 are left out of these fits: none of "
            "the four families has a density at time 0. The Kaplan–Meier curve keeps them."
        )
    st.subheader("Which shape fits best", anchor=False)
    aic = result.aic_table
    shown = aic.assign(
        group=aic["group"].map(compute.label_text),
        distribution=aic["distribution"].map(LABELS),
        log_likelihood=aic["log_likelihood"].map(lambda v: f"{v:,.2f}"),
        aic=aic["aic"].map(lambda v: f"{v:,.2f}"),
        delta_aic=aic["delta_aic"].map(lambda v: f"{v:.2f}"),
    ).rename(
        columns={
            "group": "Group",
            "distribution": "Model",
            "n_parameters": "Parameters",
            "log_likelihood": "Log-likelihood",
            "aic": "AIC",
            "delta_aic": "Δ AIC",
        }
    )
    ui.table(aic, "parametric-aic", "param_aic", shown=shown)
    st.caption(
        "Lower AIC is better; models within about 2 of the best fit about as well (common "
        "practice)."
    )
    with st.expander("Fitted parameters of each model"):
        parameters = pd.concat(
            [f.parameters.assign(distribution=f.distribution, group=f.group) for f in result.fits],
            ignore_index=True,
        )
        ui.table(
            parameters,
            "parametric-parameters",
            "param_parameters",
            shown=pd.DataFrame(
                {
                    "Group": parameters["group"].map(compute.label_text),
                    "Model": parameters["distribution"].map(LABELS),
                    "Parameter": parameters["parameter"],
                    "Estimate": parameters["estimate"].map(lambda v: format_number(v, 4)),
                    "95% CI": [
                        f"{format_number(lo, 4)} to {format_number(hi, 4)}"
                        for lo, hi in parameters[["lower", "upper"]].itertuples(index=False)
                    ],
                }
            ),
        )
        st.caption(
            f"Times in {unit}. " + " ".join(f"{LABELS[d]}: {PARAMETRISATION[d]}." for d in chosen)
        )

    groups = [g for g in dict.fromkeys(result.curves["group"])]
    group = groups[0]
    if by_group and len(groups) > 1:
        group = st.selectbox("Group to draw", groups, key="param_draw_group")
    style = ui.chart_style()
    style = ui.titled_style(
        style,
        "param_plot",
        "Fitted models over Kaplan–Meier" + (f", {group}" if group is not None else ""),
        f"Time ({unit})",
        "Survival probability",
    )
    drawing = compute.curve_drawing(
        table.sha256,
        roles_text,
        compute.SURVIVAL,
        0.95,
        "log-log",
        group is not None,
        (style.width, style.height),
        None,
        table,
    )
    km = drawing["curves"]
    km = km.loc[km["group"] == compute.label_text(group)]
    fitted = result.curves.loc[
        result.curves["group"].isna() if group is None else result.curves["group"] == group
    ]
    fitted = fitted.assign(distribution=fitted["distribution"].map(LABELS))
    group_max = float(km["time"].max()) if len(km) else last_time
    x_max = float(fitted["time"].max())
    chart = charts_models.parametric_chart(km, fitted, style, max_time=group_max, x_max=x_max)
    ui.figure(chart, style, "parametric-fits", "param_figure")

    st.subheader("Median and survival at the chosen times", anchor=False)
    est = result.estimates
    shown = pd.DataFrame(
        {
            "Group": est["group"].map(compute.label_text),
            "Model": est["distribution"].map(LABELS),
            "Estimate": [
                f"Median ({unit})" if q == "median" else f"Survival at {format_plain(t)} {unit}"
                for q, t in est[["quantity", "time"]].itertuples(index=False)
            ],
            "Value (95% CI)": [
                f"{format_number(e, 1)} ({format_number(lo, 1)} to {format_number(hi, 1)})"
                if q == "median"
                else f"{format_percent(e)} ({format_percent(lo)} to {format_percent(hi)})"
                for q, e, lo, hi in est[["quantity", "estimate", "lower", "upper"]].itertuples(
                    index=False
                )
            ],
            "Beyond follow-up": est["extrapolated"].map({True: "extrapolated", False: ""}),
        }
    )
    ui.table(est, "parametric-estimates", "param_estimates", shown=shown)

st.subheader("With covariates: accelerated failure time models", anchor=False)
if not roles.covariates:
    st.info("Choose covariates on the Column roles page to fit AFT models.")
    st.stop()
ui.remember("param_aft_distribution", "weibull")
aft_dist = st.selectbox(
    "Model", list(DISTRIBUTIONS), format_func=LABELS.get, key="param_aft_distribution"
)
with ui.guard("The AFT model"):
    fit = compute_beyond.aft(
        table.sha256, data.roles_key(roles), aft_dist, 0.95, table, tuple(roles.covariates)
    )
    st.caption(
        f"{fit.n:,} rows, {fit.n_events:,} events"
        + (f" ({fit.rows_time_zero:,} at time 0 left out)" if fit.rows_time_zero else "")
        + ". A time ratio above 1 means the event tends "
        "to come later (time is stretched); below 1, sooner."
    )
    coef = fit.coefficients.loc[fit.coefficients["term"] != "Intercept"]
    ci = f"{format_confidence(fit.confidence_level)} CI"
    shown = pd.DataFrame(
        {
            "Term": coef["term"],
            "Time ratio": coef["time_ratio"].map(format_ratio),
            ci: [
                f"{format_ratio(lo)} to {format_ratio(hi)}"
                for lo, hi in coef[["time_ratio_lower", "time_ratio_upper"]].itertuples(index=False)
            ],
            "p": coef["p_value"].map(format_p),
        }
    )
    ui.table(fit.coefficients, "aft-coefficients", "param_aft", shown=shown)
    for row in fit.ancillary.itertuples(index=False):
        st.caption(
            f"{LABELS[fit.distribution]} {row.parameter}: {format_number(row.estimate, 3)} "
            f"({ci} {format_number(row.lower, 3)} to {format_number(row.upper, 3)})."
        )
    st.caption(f"Model: {AFT_PARAMETRISATION[fit.distribution]}.")
