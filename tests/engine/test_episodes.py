"""Episodes (counting-process rows), cluster-robust variance and follow-up split at times.

Outside references: statsmodels ``PHReg(..., entry=...).fit(groups=...)`` (robust covariance;
its score residuals have the Breslow form, so the comparison with ties uses Breslow ties, and
it counts a row at risk at its own entry time, so entry times never equal an event time here),
lifelines ``CoxTimeVaryingFitter`` (coefficients, Efron ties, rows at risk on (start, stop]) and
lifelines ``CoxPHFitter(cluster_col=..., robust=True)`` (no delayed entry, no ties: its score
residuals ignore both). Exact properties: the score residuals sum to the score at any beta;
splitting follow-up changes no risk set, so the refit equals the unsplit fit.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from lifelines import CoxPHFitter, CoxTimeVaryingFitter
from numpy.testing import assert_allclose
from statsmodels.duration.hazard_regression import PHReg

from engine.cox.diagnostics import proportional_hazards_test
from engine.cox.fit import fit_cox
from engine.cox.likelihood import build_layout, partial_likelihood, score_residuals
from engine.errors import AnalysisError
from engine.prepare.episodes import (
    PERIOD,
    episode_summary,
    episode_warnings,
    fit_split,
    period_labels,
    split_at_times,
)
from engine.survival.compare import compare_frame
from engine.survival.curves import kaplan_meier


def episodes(
    seed: int, subjects: int = 150, *, whole_times: bool = True, gap: float = 0.0
) -> pd.DataFrame:
    """Invented episode data: up to three consecutive (entry, time] rows per subject, a lab
    value that changes between episodes, a fixed binary covariate, recurrent events. With
    ``whole_times`` every exit time is a whole number (many ties) and every entry after 0 is
    half-way between whole numbers (never equal to an exit time); otherwise times are
    continuous and each episode starts ``gap`` after the previous one ended."""
    rng = np.random.default_rng(seed)
    rows = []
    for subject in range(subjects):
        treated = int(rng.random() < 0.5)
        start = 0.0
        for _ in range(int(rng.integers(1, 4))):
            lab = rng.normal(0, 1)
            scale = 6 * np.exp(-0.5 * lab + 0.4 * treated)
            length = rng.exponential(scale) + 0.3
            stop = np.floor(start + length) + 1 if whole_times else start + length
            rows.append(
                {
                    "_id": f"s{subject}",
                    "_entry": start,
                    "_time": stop,
                    "_event": int(rng.random() < 0.6),
                    "lab": lab,
                    "treated": treated,
                    "site": ["north", "south"][int(rng.random() < 0.4)],
                }
            )
            start = stop + 0.5 if whole_times else stop + gap
    frame = pd.DataFrame(rows)
    frame["site"] = pd.Categorical(frame["site"], ["north", "south"])
    return frame


def at_risk_somewhere(frame, entry: str = "_entry", time: str = "_time", event: str = "_event"):
    """Rows whose interval (entry, time] holds an event time. The others add nothing to any
    Cox estimate; statsmodels 0.15 gives such rows a NaN or a spurious score residual (it
    counts them at risk at a later event time), so its reference fits leave them out."""
    events = np.sort(frame.loc[frame[event] == 1, time].unique())
    first_after_entry = np.searchsorted(events, frame[entry].to_numpy(), side="right")
    return frame[
        (first_after_entry < len(events))
        & (events[np.minimum(first_after_entry, len(events) - 1)] <= frame[time].to_numpy())
    ]


def statsmodels_robust_se(fit, groups) -> np.ndarray:
    """statsmodels' sandwich from its own score residuals and Hessian (its ``bse`` with
    ``fit(groups=...)``), on rows that are all at risk at some event time."""
    residuals = fit.model.score_residuals(fit.params)
    assert not np.isnan(residuals).any()
    codes, _ = pd.factorize(np.asarray(groups))
    summed = np.stack([np.bincount(codes, r) for r in residuals.T], axis=1)
    bread = np.linalg.inv(fit.model.hessian(fit.params))
    return np.sqrt(np.diag(bread @ summed.T @ summed @ bread))


@pytest.fixture
def data():
    return episodes(20261202)


def test_breslow_robust_se_matches_statsmodels(data):
    result = fit_cox(data, ["lab", "treated"], entry="_entry", clusters="_id", ties="breslow")
    kept = at_risk_somewhere(data)
    reference = PHReg(
        kept["_time"], kept[["lab", "treated"]], status=kept["_event"], entry=kept["_entry"],
        ties="breslow",
    ).fit(groups=kept["_id"].to_numpy())  # fmt: skip
    assert result.variance == "robust" and result.clusters == data["_id"].nunique()
    table = result.to_frame()
    assert_allclose(table["coef"], reference.params, atol=1e-6)
    assert_allclose(table["se"], statsmodels_robust_se(reference, kept["_id"]), atol=1e-6)
    assert_allclose(table["se"], reference.bse, atol=1e-6)
    model_se = np.sqrt(np.diag(np.linalg.inv(-reference.model.hessian(reference.params))))
    assert_allclose(table["se_model"], model_se, atol=1e-6)


def test_efron_coefficients_match_lifelines_time_varying(data):
    result = fit_cox(data, ["lab", "treated"], entry="_entry", clusters="_id")
    ctv = CoxTimeVaryingFitter().fit(
        data[["_id", "_entry", "_time", "_event", "lab", "treated"]],
        id_col="_id",
        start_col="_entry",
        stop_col="_time",
        event_col="_event",
    )
    assert_allclose(result.to_frame()["coef"], ctv.params_.to_numpy(), atol=1e-6)
    assert_allclose(result.to_frame()["se_model"], ctv.standard_errors_.to_numpy(), atol=1e-6)
    assert_allclose(result.loglik, ctv.log_likelihood_, atol=1e-6)


def test_efron_robust_without_ties_matches_statsmodels_and_lifelines():
    data = episodes(7, whole_times=False, gap=1e-3)
    result = fit_cox(data, ["lab", "treated"], entry="_entry", clusters="_id")
    kept = at_risk_somewhere(data)
    reference = PHReg(
        kept["_time"], kept[["lab", "treated"]], status=kept["_event"], entry=kept["_entry"],
        ties="efron",
    ).fit(groups=kept["_id"].to_numpy())  # fmt: skip
    assert_allclose(result.to_frame()["se"], reference.bse, atol=1e-6)
    # lifelines' sandwich ignores delayed entry: compare on one row per subject, clustered by
    # a coarser grouping (sites within treatment) so that clusters hold several rows.
    first = data.groupby("_id", sort=False).head(1).copy()
    first["cluster"] = first["site"].astype(str) + first["treated"].astype(str)
    first["cluster"] += (np.arange(len(first)) % 7).astype(str)
    ours = fit_cox(first, ["lab", "treated"], clusters="cluster", variance="robust")
    lifelines_fit = CoxPHFitter().fit(
        first[["_time", "_event", "lab", "treated", "cluster"]],
        "_time",
        "_event",
        cluster_col="cluster",
        robust=True,
    )
    assert_allclose(ours.to_frame()["se"], lifelines_fit.standard_errors_.to_numpy(), atol=1e-6)
    # Robust without a cluster column: every row its own cluster (lifelines robust=True).
    per_row = fit_cox(first, ["lab", "treated"], variance="robust")
    plain = CoxPHFitter().fit(
        first[["_time", "_event", "lab", "treated"]], "_time", "_event", robust=True
    )
    assert per_row.clusters == len(first)
    assert_allclose(per_row.to_frame()["se"], plain.standard_errors_.to_numpy(), atol=1e-6)


@pytest.mark.parametrize("ties", ["efron", "breslow"])
def test_score_residuals_sum_to_the_score_at_any_beta(data, ties):
    x = data[["lab", "treated"]].to_numpy(float)
    strata = (data["site"] == "south").to_numpy().astype(int)
    layout = build_layout(data["_time"], data["_event"], strata, data["_entry"])
    xs = x[layout.order]
    for beta in (np.array([0.3, -0.2]), np.array([-1.0, 0.7])):
        residuals = score_residuals(layout, xs, beta, ties)
        score = partial_likelihood(layout, xs, beta, ties).score
        assert_allclose(residuals.sum(axis=0), score, atol=1e-9)


def test_auto_variance_is_robust_only_when_ids_repeat(data):
    one_each = data.groupby("_id").head(1)
    assert fit_cox(one_each, ["lab"], clusters="_id").variance == "model"
    assert fit_cox(data, ["lab"], clusters="_id").variance == "robust"
    assert fit_cox(data, ["lab"], clusters="_id", variance="model").variance == "model"
    forced = fit_cox(data, ["lab"], clusters="_id", variance="model").terms[0]
    assert forced.se == forced.se_model
    with pytest.raises(AnalysisError, match="Variance 'sandwich'"):
        fit_cox(data, ["lab"], variance="sandwich")


def test_robust_wald_test_uses_the_robust_covariance(data):
    result = fit_cox(data, ["lab", "treated"], entry="_entry", clusters="_id")
    beta = result.model.beta
    expected = beta @ np.linalg.solve(result.covariance, beta)
    assert result.wald.statistic == pytest.approx(expected)
    assert result.to_dict()["variance"] == "robust"


def _subject_rows(data):
    """One row per subject: from its first entry to its last exit, event of the last row (the
    same follow-up as its episodes when only the last one may end in an event)."""
    data = data.copy()
    last = data.groupby("_id")["_time"].transform("max") == data["_time"]
    data.loc[~last, "_event"] = 0
    return data, data.groupby("_id").agg(
        _entry=("_entry", "min"), _time=("_time", "max"), _event=("_event", "max"),
        treated=("treated", "first"),
    )  # fmt: skip


def test_kaplan_meier_and_log_rank_on_contiguous_episodes_equal_one_row_per_subject():
    data = episodes(11, whole_times=False)  # contiguous episodes: entry = previous exit
    data, subjects = _subject_rows(data)
    split = kaplan_meier(data["_time"], data["_event"], entry=data["_entry"])
    whole = kaplan_meier(subjects["_time"], subjects["_event"], entry=subjects["_entry"])
    at = np.unique(subjects["_time"][subjects["_event"] == 1])

    def step(curve, values):
        return np.concatenate([[1.0], values])[np.searchsorted(curve.time, at, side="right")]

    assert_allclose(step(split, split.survival), step(whole, whole.survival), atol=1e-12)
    assert_allclose(split.at_risk[np.isin(split.time, at)], whole.at_risk[np.isin(whole.time, at)])
    groups = {"_group": lambda f: pd.Categorical(f["treated"].map({0: "no", 1: "yes"}))}
    test_split = compare_frame(data.assign(**groups)).statistic
    test_whole = compare_frame(subjects.assign(**groups)).statistic
    assert test_split == pytest.approx(test_whole, rel=1e-10)


def test_split_at_times_keeps_follow_up_and_events(data):
    split = split_at_times(data, [3, 10, 10.5])
    assert split["_event"].sum() == data["_event"].sum()
    exposure = (split["_time"] - split["_entry"]).sum()
    assert exposure == pytest.approx((data["_time"] - data["_entry"]).sum())
    assert (split["_entry"] < split["_time"]).all()
    inside = split[PERIOD].to_numpy()
    cuts = np.array([-np.inf, 3, 10, 10.5, np.inf])
    assert ((split["_entry"] >= cuts[inside]) & (split["_time"] <= cuts[inside + 1])).all()
    assert period_labels([10, 3]) == ["up to 3", "3 to 10", "after 10"]
    with pytest.raises(AnalysisError, match="positive numbers"):
        split_at_times(data, [-1])


@pytest.mark.parametrize("ties", ["efron", "breslow"])
def test_split_refit_equals_the_unsplit_fit_when_no_effect_changes(data, ties):
    whole = fit_cox(data, ["lab", "site"], entry="_entry", clusters="_id", ties=ties)
    refit = fit_split(data, ["lab", "site"], [2.5, 7, 12], categorical=["site"], ties=ties)
    assert refit.episodes > len(data)
    ours, theirs = whole.to_frame(), refit.result.to_frame()
    for column in ("coef", "se", "se_model"):
        assert_allclose(theirs[column], ours[column], rtol=1e-9, atol=1e-12)
    assert refit.result.loglik == pytest.approx(whole.loglik, rel=1e-12)
    before = proportional_hazards_test(whole, "survival")
    for after, then in zip(refit.ph_check.checks, before.checks, strict=True):
        assert after.statistic == pytest.approx(then.statistic, rel=1e-8)


def test_split_with_a_changing_effect_matches_statsmodels(data):
    refit = fit_split(data, ["lab", "treated"], [6.25], ["treated"], ties="breslow")
    assert [t.variable for t in refit.result.terms] == [
        "lab", "treated, up to 6.25", "treated, after 6.25",
    ]  # fmt: skip
    # The same design built by hand, row by row, then fitted by statsmodels with entry.
    pieces = []
    for row in data.itertuples():
        bounds = [row._2, *[c for c in (6.25,) if row._2 < c < row._3], row._3]
        for k, (a, b) in enumerate(itertools.pairwise(bounds)):
            late = float(a >= 6.25)
            pieces.append(
                {
                    "entry": a, "exit": b, "event": row._4 if k == len(bounds) - 2 else 0,
                    "lab": row.lab, "early": row.treated * (1 - late),
                    "late": row.treated * late, "id": row._1,
                }
            )  # fmt: skip
    hand = at_risk_somewhere(pd.DataFrame(pieces), "entry", "exit", "event")
    reference = PHReg(
        hand["exit"], hand[["lab", "early", "late"]], status=hand["event"], entry=hand["entry"],
        ties="breslow",
    ).fit(groups=hand["id"].to_numpy())  # fmt: skip
    assert_allclose(refit.result.to_frame()["coef"], reference.params, atol=1e-6)
    assert_allclose(refit.result.to_frame()["se"], reference.bse, atol=1e-6)
    out = refit.to_dict()
    assert out["periods"] == ["up to 6.25", "after 6.25"] and out["model"]["variance"] == "robust"
    assert set(out["model"]["ph_check"]) == {"time_scale", "terms", "all_terms"}


def test_split_refuses_a_changing_effect_outside_the_model(data):
    with pytest.raises(AnalysisError, match="must be covariates of the model"):
        fit_split(data, ["lab"], [5], ["age"])


def test_episode_summary_and_warnings():
    frame = pd.DataFrame(
        {
            "id": [1, 1, 2, 3, 3],
            "entry": [0, 5, 0, 0, 4],
            "time": [5, 9, 7, 6, 8],  # subject 3: (0, 6] and (4, 8] overlap
            "event": [0, 1, 1, 1, 1],
        }
    )
    summary = episode_summary(frame["id"], frame["time"], frame["event"], frame["entry"])
    assert (summary.subjects, summary.episodes, summary.subjects_with_several) == (3, 5, 2)
    assert summary.most_events == 2 and summary.overlapping == 1
    assert summary.overlapping_ids == (3,)
    text = " ".join(episode_warnings(summary, "id", True))
    assert "read as episodes" in text and "overlap in time" in text and "ids 3" in text


@settings(max_examples=25, deadline=None, derandomize=True)
@given(
    cuts=st.lists(st.floats(0.2, 30, allow_nan=False), min_size=1, max_size=4),
    ties=st.sampled_from(["efron", "breslow"]),
)
def test_property_any_split_leaves_the_fit_unchanged(cuts, ties):
    data = episodes(3, subjects=60)
    whole = fit_cox(data, ["lab", "treated"], entry="_entry", clusters="_id", ties=ties)
    refit = fit_split(data, ["lab", "treated"], cuts, ties=ties).result
    # exact in exact arithmetic; the two fits stop at the Newton-Raphson tolerance (a relative
    # log-likelihood change of 1e-11), which leaves the coefficients equal to about 1e-7
    assert_allclose(refit.model.beta, whole.model.beta, rtol=1e-6, atol=1e-9)
    assert_allclose(refit.covariance, whole.covariance, rtol=1e-6, atol=1e-12)


@settings(
    max_examples=20, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow]
)
@given(seed=st.integers(0, 10_000))
def test_property_robust_variance_ignores_row_order_and_id_labels(seed):
    data = episodes(5, subjects=50)
    rng = np.random.default_rng(seed)
    shuffled = data.sample(frac=1.0, random_state=seed).reset_index(drop=True)
    labels = {old: f"x{rng.integers(10**9)}-{k}" for k, old in enumerate(data["_id"].unique())}
    shuffled["_id"] = shuffled["_id"].map(labels)
    one = fit_cox(data, ["lab", "treated"], entry="_entry", clusters="_id")
    two = fit_cox(shuffled, ["lab", "treated"], entry="_entry", clusters="_id")
    assert_allclose(two.covariance, one.covariance, rtol=1e-9)


def test_split_keeps_rows_at_time_zero_in_the_risk_set(tmp_path):
    """Rows at time 0 (kept by prepare, with a warning) stay in the split model as in the unsplit
    one: at risk at time 0, their events counted there. Exact property: no risk set changes."""
    from engine.io.tables import read_table
    from engine.prepare.checks import prepare
    from engine.prepare.roles import suggest_roles

    rng = np.random.default_rng(20)
    months = np.round(rng.exponential(20, 120), 1)
    months[:5] = 0.0
    died = rng.integers(0, 2, 120)
    died[:3] = 1  # three events at time 0
    path = tmp_path / "zero_times.csv"
    pd.DataFrame({"months": months, "died": died, "age": rng.normal(60, 10, 120).round(1)}).to_csv(
        path, index=False
    )
    table = read_table(path)
    roles = suggest_roles(table.frame).to_roles(
        time="months", event="died", event_values=(1,), covariates=("age",)
    )
    frame = prepare(table.frame, roles).frame
    assert (frame["_time"] == 0).sum() == 5
    whole = fit_cox(frame, ["age"])
    refit = fit_split(frame, ["age"], [10, 30])
    assert refit.result.events == whole.events
    assert_allclose(refit.result.model.beta, whole.model.beta, rtol=1e-7)
    assert refit.result.loglik == pytest.approx(whole.loglik, rel=1e-12)
    before = proportional_hazards_test(whole, "survival").checks[0].statistic
    assert refit.ph_check.checks[0].statistic == pytest.approx(before, rel=1e-8)
    changing = fit_split(frame, ["age"], [10], ["age"])  # one coefficient per period
    assert [t.variable for t in changing.result.terms] == ["age, up to 10", "age, after 10"]


def test_entry_at_exit_message_names_no_working_column():
    frame = pd.DataFrame(
        {"_time": [1.0, 2, 3, 4], "_event": [1, 0, 1, 1], "_entry": [0, 2, 0, 1], "x": [1, 2, 3, 5]}
    )
    with pytest.raises(AnalysisError, match="entry time is at or after") as caught:
        fit_cox(frame, ["x"], entry="_entry")
    assert "_entry" not in str(caught.value)


def _clustered(seed: int, clusters: int) -> pd.DataFrame:
    """Invented rows (whole-number times, many ties) from ``clusters`` clinics."""
    rng = np.random.default_rng(seed)
    n = 24
    return pd.DataFrame(
        {
            "_time": rng.integers(1, 13, n).astype(float),
            "_event": rng.integers(0, 2, n),
            "age": rng.integers(40, 80, n).astype(float),
            "dose": rng.integers(1, 4, n).astype(float),
            "arm": pd.Categorical(rng.choice(["A", "B", "C"], n)),
            "clinic": np.repeat([f"c{k}" for k in range(clusters)], n // clusters),
        }
    )


@pytest.mark.parametrize("variance", ["auto", "robust"])
def test_no_more_clusters_than_terms_gives_the_model_based_fit_with_a_warning(variance):
    """4 clinics for 4 terms: the clusters' score sums add up to the score, zero at the
    estimate, so the sandwich has rank at most 3 and is singular (before: numpy's
    LinAlgError from the robust Wald test)."""
    covariates = ["age", "dose", "arm"]
    few = _clustered(6, 4)
    result = fit_cox(few, covariates, categorical=["arm"], clusters="clinic", variance=variance)
    model = fit_cox(few, covariates, categorical=["arm"], variance="model")
    assert result.variance == "model" and result.clusters is None
    assert any("needs more clusters than model terms" in w and "4 cluster(s)" in w and
               "for 4 term(s)" in w for w in result.warnings)  # fmt: skip
    assert_allclose(result.to_frame()["se"], model.to_frame()["se"], rtol=1e-12)
    assert result.wald.statistic == pytest.approx(model.wald.statistic)
    # one term fewer than clusters: the robust variance again
    enough = fit_cox(few, ["age", "dose"], clusters="clinic", variance=variance)
    assert enough.variance == "robust" and enough.clusters == 4
    assert not any("more clusters" in w for w in enough.warnings)


def _leukemia() -> pd.DataFrame:
    """Remission times of 42 leukaemia patients (Freireich et al. 1963, as shipped with
    lifelines: ``t``, ``status``, ``sex``, ``logWBC``, ``Rx``), many tied times."""
    from lifelines.datasets import load_leukemia

    data = load_leukemia()
    return pd.DataFrame(
        {
            "_time": data["t"].astype(float),
            "_event": data["status"].astype(int),
            **{c: data[c].astype(float) for c in ("Rx", "sex", "logWBC")},
        }
    )


LEUKEMIA = ["Rx", "sex", "logWBC"]


def test_breslow_robust_se_without_ids_matches_statsmodels_on_tied_data():
    data = _leukemia()
    ours = fit_cox(data, LEUKEMIA, ties="breslow", variance="robust").to_frame()
    reference = PHReg(data["_time"], data[LEUKEMIA], status=data["_event"], ties="breslow").fit(
        groups=np.arange(len(data))
    )
    assert_allclose(ours["coef"], reference.params, atol=1e-6)
    assert_allclose(ours["se"], reference.bse, atol=1e-6)


def weight_derivatives(frame, covariates, groups, *, entry=None, step=1e-4) -> np.ndarray:
    """d beta / d w_g for each cluster g: central differences of lifelines' Efron fits
    (``weights_col``) with the weight of cluster g's rows set to 1 +- step."""
    columns = ["_time", "_event", *covariates] + ([entry] if entry else [])
    codes, _ = pd.factorize(np.asarray(groups))

    def fit(weights):
        return (
            CoxPHFitter()
            .fit(
                frame[columns].assign(w=weights),
                "_time",
                "_event",
                weights_col="w",
                entry_col=entry,
                fit_options={"precision": 1e-13, "max_steps": 200},
            )
            .params_.to_numpy()
        )

    rows = []
    for g in range(codes.max() + 1):
        up, down = np.ones(len(frame)), np.ones(len(frame))
        up[codes == g] += step
        down[codes == g] -= step
        rows.append((fit(up) - fit(down)) / (2 * step))
    return np.array(rows)


@pytest.mark.filterwarnings("ignore")  # lifelines: non-integer weights, suggests robust errors
def test_efron_robust_variance_is_the_infinitesimal_jackknife_of_weighted_fits():
    """The sandwich is sum over clusters of D_g D_g', D_g = I^-1 U_g; with Hazel's exact Efron
    score residuals D_g is the derivative of the estimate with respect to cluster g's case
    weight in the weighted Efron likelihood (lifelines' ``weights_col`` fit, the outside
    reference), i.e. the sandwich is the infinitesimal jackknife. Leukaemia data, one cluster
    per patient: treatment (Rx) robust SE 0.3694 (lifelines' own robust SE 0.3953, statsmodels'
    0.3614: both use Breslow-form residuals with Efron ties)."""
    data = _leukemia()
    ours = fit_cox(data, LEUKEMIA, variance="robust")
    derivatives = weight_derivatives(data, LEUKEMIA, np.arange(len(data)))
    jackknife = derivatives.T @ derivatives  # finite differences: about 1e-8 of noise
    assert_allclose(ours.covariance, jackknife, atol=1e-7)
    assert_allclose(ours.to_frame()["se"], np.sqrt(np.diag(jackknife)), rtol=1e-6)
    assert ours.to_frame()["se"][0] == pytest.approx(0.36939, abs=1e-5)


@pytest.mark.filterwarnings("ignore")
def test_efron_clustered_robust_variance_with_entry_times_is_the_infinitesimal_jackknife():
    data = episodes(5, subjects=30)  # ties at whole-number exits, delayed entry, recurrent events
    ours = fit_cox(data, ["lab", "treated"], entry="_entry", clusters="_id")
    assert ours.variance == "robust"
    derivatives = weight_derivatives(data, ["lab", "treated"], data["_id"], entry="_entry")
    jackknife = derivatives.T @ derivatives
    assert_allclose(ours.covariance, jackknife, atol=1e-7)
    assert_allclose(ours.to_frame()["se"], np.sqrt(np.diag(jackknife)), rtol=1e-6)


def test_clusters_adding_nothing_to_the_score_do_not_count():
    """5 clusters for 4 terms, but one cluster's rows are at risk at no event time (its score sum
    is exactly zero) and the other 4 clusters' sums add up to the score: a singular sandwich
    (before: numpy's LinAlgError from the robust Wald test)."""
    rng = np.random.default_rng(1600)
    n, clusters = int(rng.integers(6, 40)), int(rng.integers(2, 12))
    frame = pd.DataFrame(
        {
            "_time": rng.integers(1, 6, n).astype(float), "_event": rng.integers(0, 2, n),
            "a": rng.integers(0, 2, n).astype(float), "b": rng.normal(size=n),
            "s": pd.Categorical(rng.choice(list("xyz"), n)), "id": rng.integers(0, clusters, n),
        }
    )  # fmt: skip
    result = fit_cox(frame, ["a", "b", "s"], categorical=["s"], clusters="id")
    assert frame["id"].nunique() == 5 and len(result.terms) == 4
    assert result.variance == "model"
    assert any("needs more clusters than model terms, and there are 4 cluster(s)" in w
               for w in result.warnings)  # fmt: skip
    model = fit_cox(frame, ["a", "b", "s"], categorical=["s"], variance="model")
    assert_allclose(result.to_frame()["se"], model.to_frame()["se"], rtol=1e-12)
