"""Prediction performance of the Regression page's Cox model: Harrell's and Uno's C, the
time-dependent AUC and Brier score at chosen times, the integrated Brier score beside the
Kaplan–Meier curve, calibration in risk groups at a time, and the bootstrap correction for
optimism (run on request, with a progress bar)."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from app import charts, charts_models, compute, compute_beyond, data, state, ui
from app.share_section import NO_MODEL_STRATA, REFERENCE_PREFIX, VARIANCE_LABELS
from engine.errors import HazelError
from engine.prediction.optimism import DEFAULT_REPLICATES, DEFAULT_SEED

TIES = {"Efron (default)": "efron", "Breslow": "breslow"}  # the Regression page's labels
OPTIMISM = state.PERF_OPTIMISM


def _three(value) -> str:
    return "–" if value is None or pd.isna(value) else f"{value:.3f}"


st.title("Prediction performance", anchor=False)
st.caption(
    "How well the Cox model of the Regression page tells apart the subjects who have the event "
    "early from those who have it late (discrimination), how close its predicted survival is "
    "to what happened (accuracy and calibration), and how much of that is optimism from "
    "judging the model on the data it was fitted to."
)
table, roles = ui.table_and_roles_or_stop()
prepared = ui.prepared_or_stop(table, roles, "a model can be measured")
if not roles.covariates:
    st.info("No covariates are chosen. Pick them on the Column roles page.")
    st.page_link("views/column_roles.py", label="Column roles", icon=":material/view_column:")
    st.stop()
if "_entry" in prepared.frame.columns:
    st.info(
        "Prediction performance is not available with an entry-time role (delayed entry): its "
        "censoring weights assume everyone is followed from time 0."
    )
    st.stop()

# --- the Regression page's model ------------------------------------------------------------

frame = prepared.frame
session = st.session_state
covariates = [c for c in session.get("model_covariates", roles.covariates) if c in roles.covariates]
if not covariates:
    st.info("The Regression page's model has no covariates; choose some there.")
    st.stop()
reference = []
for column in covariates:
    if isinstance(frame[column].dtype, pd.CategoricalDtype):
        levels = [str(x) for x in frame[column].cat.categories]
        chosen = session.get(REFERENCE_PREFIX + column)
        reference.append((column, chosen if chosen in levels else levels[0]))
strata = session.get("model_strata", roles.strata or NO_MODEL_STRATA)
ties = TIES.get(session.get("model_ties"), "efron")
model_key = (
    table.sha256,
    data.roles_key(data.model_roles(roles)),
    tuple(covariates),
    tuple(reference),
    None if strata in (None, NO_MODEL_STRATA) else strata,
    ties,
    # the Regression page keeps the label of its standard-errors choice
    {label: value for value, label in VARIANCE_LABELS.items()}.get(
        session.get("model_variance"), "auto"
    ),
)
st.caption(
    "Model: "
    + ", ".join(ui.escape(c) for c in covariates)
    + ("" if model_key[4] is None else f"; strata {ui.escape(model_key[4])}")
    + f"; {ties} ties. Change it on the Regression page."
)
unit = prepared.report.time_unit
times_seen = frame["_time"].to_numpy(dtype=float)
last_time = float(times_seen.max()) if len(times_seen) else 0.0

# --- settings -------------------------------------------------------------------------------

with st.container(border=True):
    cols = st.columns([3, 1.2, 1, 1.8])
    ticks = [t for t in charts.nice_ticks(last_time, 4)[1:] if t < last_time]
    ui.remember("perf_times", ", ".join(f"{t:g}" for t in ticks[:3]))
    times_text = cols[0].text_input(
        f"Times for the AUC and Brier score ({unit}), separated by commas",
        key="perf_times",
        placeholder="e.g. 12, 24",
    )
    ui.remember("perf_tau", 0.0)
    tau = cols[1].number_input(
        f"Uno's C up to ({unit})",
        min_value=0.0,
        key="perf_tau",
        help=f"0 = the largest observed time ({last_time:,.4g}).",
    )
    ui.remember("perf_risk_groups", 5)
    groups = int(
        cols[2].number_input(
            "Risk groups", min_value=2, max_value=20, step=1, key="perf_risk_groups"
        )
    )
    ui.remember("perf_include", True)
    cols[3].toggle("In the report and recipe", key="perf_include")
try:
    times = tuple(sorted({float(p) for p in times_text.replace(";", ",").split(",") if p.strip()}))
except ValueError:
    st.error("The times must be numbers separated by commas, for example 12, 24.")
    st.stop()
if not times:
    st.info("Type at least one time for the AUC and Brier score.")
    st.stop()
calibration_options = [f"{t:g}" for t in times]
ui.remember_choice("perf_calibration_time", calibration_options, calibration_options[0])

with ui.guard("The performance measures"):
    try:
        compute.cox_model(*model_key, table)
    except HazelError as error:
        st.error(f"**The model cannot be fitted.** {ui.escape(error)}", icon=":material/error:")
        st.stop()
    calibration_at = float(session["perf_calibration_time"])
    result = compute_beyond.performance(model_key, times, float(tau) or None, table)
    st.subheader("Discrimination", anchor=False)
    cols = st.columns(3)
    cols[0].metric(
        "Harrell's C",
        f"{result.harrell_c:.3f}",
        help="Share of comparable pairs the model orders correctly (0.5 = chance, 1 = perfect).",
    )
    cols[1].metric(
        "Uno's C",
        f"{result.uno_c:.3f}",
        help=f"The same, with censoring weights, up to {result.tau:g} {unit}; it does not "
        "depend on how much follow-up was censored.",
    )
    cols[2].metric(
        "Integrated Brier score",
        f"{result.integrated_brier:.3f}",
        delta=f"{result.integrated_brier - result.integrated_brier_km:+.3f} vs Kaplan–Meier",
        delta_color="inverse",
        help=f"Mean squared prediction error from {result.integration_range[0]:g} to "
        f"{result.integration_range[1]:g} {unit}; lower is better. The Kaplan–Meier curve of "
        f"all subjects (no covariates) scores {result.integrated_brier_km:.3f}.",
    )
    at_times = result.to_frame()
    shown = pd.DataFrame(
        {
            f"Time ({unit})": at_times["time"].map(lambda t: f"{t:g}"),
            "AUC (cumulative/dynamic)": at_times["auc"].map(_three),
            "Brier score, model": at_times["brier"].map(_three),
            "Brier score, Kaplan–Meier only": at_times["brier_km"].map(_three),
        }
    )
    ui.table(at_times, "performance-at-times", "perf_table", shown=shown)
    st.caption(
        "AUC at t: the chance that a subject with the event by t has a higher risk score than "
        "one still event-free after t (0.5 = chance). Brier score: mean squared difference "
        "between predicted survival and what happened (lower is better); a model worth having "
        "scores below the Kaplan–Meier curve that ignores the covariates."
    )

    st.subheader("Calibration", anchor=False)
    st.selectbox(f"Calibration at ({unit})", calibration_options, key="perf_calibration_time")
    rows = compute_beyond.calibration(model_key, calibration_at, groups, table)
    cstyle = ui.titled_style(
        ui.chart_style(),
        "perf_calibration",
        f"Predicted and observed survival at {calibration_at:g} {unit}",
        "Mean predicted survival",
        "Observed survival (Kaplan–Meier)",
    )
    ui.figure(
        charts_models.calibration_chart(rows, cstyle), cstyle, "calibration", "perf_cal_figure"
    )
    shown = pd.DataFrame(
        {
            "Risk group": rows["risk_group"],
            "Subjects": rows["n"].map("{:,}".format),
            "Events": rows["events"].map("{:,}".format),
            "Predicted survival": rows["predicted"].map(_three),
            "Observed survival": rows["observed"].map(_three),
            "Interval": [
                f"{_three(lo)} to {_three(hi)}"
                for lo, hi in rows[["lower", "upper"]].itertuples(index=False)
            ],
        }
    )
    ui.table(rows, "calibration", "perf_cal_table", shown=shown)
    st.caption(
        f"Subjects in {groups} groups of equal size by predicted survival (group 1: the highest "
        "predicted risk). Points near the dashed line: predictions match what happened."
    )

    st.subheader("Correcting for optimism (bootstrap)", anchor=False)
    cols = st.columns([1, 1, 2])
    ui.remember("perf_replicates", DEFAULT_REPLICATES)
    replicates = int(
        cols[0].number_input(
            "Replicates", min_value=1, max_value=2000, step=10, key="perf_replicates"
        )
    )
    ui.remember("perf_seed", DEFAULT_SEED)
    seed = int(cols[1].number_input("Seed", min_value=0, step=1, key="perf_seed"))
    done = session.setdefault(OPTIMISM, {})
    key = (model_key, replicates, seed)
    if key not in done and cols[2].button("Run the bootstrap", key="perf_run_button"):
        from engine.prediction.optimism import bootstrap_optimism

        bar = st.progress(0.0, text="Refitting the model on resampled rows…")

        def show(finished: int, total: int) -> None:
            bar.progress(finished / total, text=f"Replicate {finished:,} of {total:,}")

        done[key] = bootstrap_optimism(
            compute.cox_model(*model_key, table), replicates=replicates, seed=seed, progress=show
        )
        bar.empty()
    optimism = done.get(key)
    if optimism is None:
        st.caption(
            "Each replicate refits the model on rows drawn with replacement and scores it on "
            "the original rows. It takes about one model fit per replicate."
        )
    else:
        cols = st.columns(3)
        cols[0].metric("Apparent C", f"{optimism.c_apparent:.3f}")
        cols[1].metric("Optimism-corrected C", f"{optimism.c:.3f}")
        cols[2].metric("Calibration slope", f"{optimism.slope:.3f}")
        st.caption(
            f"{optimism.replicates:,} replicates, seed {optimism.seed}. A calibration slope "
            "below 1 says the predictions are too extreme for new patients (overfitting): the "
            "smaller it is, the more the model would need shrinking."
        )
