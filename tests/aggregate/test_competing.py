"""Competing risks and Harrell's C from a database: DuckDB, PostgreSQL and Spark give memory's
numbers on invented data with three causes, tied times, strata, delayed entry and every
exclusion (to 1e-9), Harrell's C of score bins lies within its stated bound of the exact C
(and within 1e-4), and the incidence and the cause-specific models agree with lifelines."""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from lifelines import AalenJohansenFitter, CoxPHFitter

from engine.aggregate import concordance_counts
from engine.aggregate.analysis import cox_from_data, run_aggregate_analysis
from engine.aggregate.competing import FINE_GRAY_NOT_COMPUTED, incidence_from_counts
from engine.aggregate.sources import open_duckdb, open_postgres, open_spark
from engine.aggregate.sql_checks import aggregate_checks
from engine.analysis.run import resolved_settings, run_analysis
from engine.cox.concordance import harrell_c
from engine.prepare.checks import prepare
from engine.prepare.roles import Roles
from tests.aggregate.cases import (
    COMPETING_ROLES,
    COMPETING_SETTINGS,
    ROLES,
    assert_same_json,
    competing_frame,
    messy_frame,
)
from tests.aggregate.conftest import load_table

BACKENDS = ["duckdb", "postgres", "spark"]
ANY_CAUSE = ("dead", "relapse", "moved")  # the event of the models without causes
SIZES = {"duckdb": 1500, "postgres": 1200, "spark": 700}


@pytest.fixture
def open_backend(request, tmp_path):
    """``open(kind, frame)``: the frame written where the backend reads it, and its source."""
    opened = []

    def open_(kind: str, frame: pd.DataFrame, name: str = "rows"):
        if kind == "postgres":
            url = request.getfixturevalue("postgres_url")
            load_table(url, name, frame)
            source = open_postgres(url, table=name)
        else:
            path = tmp_path / f"{name}.parquet"
            frame.to_parquet(path)
            if kind == "duckdb":
                source = open_duckdb(path)
            else:
                source = open_spark(path, master=request.getfixturevalue("spark_master"))
        opened.append(source)
        return source

    yield open_
    for source in opened:
        source.close()


def _pop_bound(result: dict) -> float:
    return result["cox"].pop("concordance_error_bound")


@pytest.mark.parametrize("kind", BACKENDS)
def test_competing_section_equals_memory(open_backend, kind):
    frame = competing_frame(21, n=SIZES[kind])
    memory = run_analysis(prepare(frame, COMPETING_ROLES), COMPETING_SETTINGS)
    source = open_backend(kind, frame)
    database = run_aggregate_analysis(aggregate_checks(source, COMPETING_ROLES), COMPETING_SETTINGS)
    assert database["data"] == memory["data"]
    assert database["data"]["competing_events"] > 0
    section = database["competing"]
    assert section["causes"] == ["death", "relapse", "moved"]  # the order the roles give
    assert len(section["gray_test"]) == 3 and len(section["cause_specific_cox"]) == 3
    assert section["fine_gray"] == {"not_computed": FINE_GRAY_NOT_COMPUTED}
    bound = _pop_bound(database)
    # with delayed entry the standard error of C is not computed from counts (see README)
    skip = (".competing.fine_gray", ".cox.concordance_se")
    assert database["cox"]["concordance_se"] is None
    assert_same_json(memory, database, skip=skip)
    assert bound == 0.0  # age is rounded: fewer distinct scores than bins, so C is exact


@pytest.mark.parametrize("kind", BACKENDS)
def test_binned_concordance_within_its_bound(open_backend, kind):
    frame = competing_frame(22, n=6500, continuous=True)  # more distinct scores than bins
    roles = replace(COMPETING_ROLES, event_causes=(), event_values=ANY_CAUSE, strata=None)
    for entry in ("enrolled", None):
        roles = replace(roles, entry=entry)
        prepared = prepare(frame, roles)
        memory = run_analysis(prepared, COMPETING_SETTINGS)["cox"]
        source = open_backend(kind, frame, name=f"binned_{entry}")
        database = run_aggregate_analysis(aggregate_checks(source, roles), COMPETING_SETTINGS)
        bound = database["cox"]["concordance_error_bound"]
        error = abs(database["cox"]["concordance"] - memory["concordance"])
        assert 0 < bound < 0.01  # scores are binned here (more distinct scores than bins)
        assert error <= bound and error < 1e-4, (error, bound)
        if entry is None:  # the standard error of the bins is close to the exact one
            assert abs(database["cox"]["concordance_se"] - memory["concordance_se"]) < 1e-5
        # The rest of the section is compared in test_competing_section_equals_memory. With
        # delayed entry on these 6,500 rows the two fits used to stop at different points, up
        # to 7e-8 apart (2.4e-5 relative on a coefficient of -0.003): a drop of the likelihood
        # within rounding halved one fit's last step. The loop now treats such a drop as none
        # and takes Newton's last steps once the likelihood stops moving; both agree to 1e-9.
        assert_same_json(memory["terms"], database["cox"]["terms"])


@pytest.mark.parametrize("entry", ["enrolled", None])
@pytest.mark.parametrize("block", [None, 7])
def test_concordance_bins_bound_against_exact_rows(open_backend, monkeypatch, block, entry):
    """Few bins: a large bound, which the exact row-level C still respects; a bin per score
    gives the exact C (and its standard error) to 1e-12, in one block of times or in many
    (``block`` times x bins cells each)."""
    frame = competing_frame(23, n=2000, continuous=True)
    roles = replace(COMPETING_ROLES, event_causes=(), event_values=ANY_CAUSE, entry=entry)
    data = aggregate_checks(open_backend("duckdb", frame), roles)
    chosen = resolved_settings(COMPETING_SETTINGS)["cox"]
    result, _, source = cox_from_data(data, chosen)
    beta = np.array([t.coef for t in result.terms]) * result.design.scale
    prepared = prepare(frame, roles).frame
    rows = prepared.dropna(subset=["age", "stage", "_strata"])
    x = np.column_stack(
        [rows["age"].to_numpy(float)]
        + [(rows["stage"] == t.level).to_numpy(float) for t in result.terms[1:]]
    )
    eta = (x - result.design.center) / result.design.scale @ beta
    strata = rows["_strata"].cat.codes.to_numpy()
    late = None if entry is None else rows["_entry"]
    exact = harrell_c(rows["_time"], rows["_event"] == 1, eta, strata, entry=late)
    if block is not None:  # a block of 7 times for the bin per score, of 7 n / bins otherwise
        monkeypatch.setattr(concordance_counts, "BLOCK_CELLS", block * len(rows))
    for bins in (5, 50, 500):
        binned = source.concordance(beta, bins=bins)
        assert binned.bins == bins and binned.error_bound > 0
        assert abs(binned.concordance - exact.concordance) <= binned.error_bound
    every = source.concordance(beta, bins=len(rows))
    assert every.bins is None and every.error_bound == 0.0
    assert every.concordance == pytest.approx(exact.concordance, abs=1e-12)
    assert every.comparable == exact.comparable
    if entry is None:
        assert every.standard_error == pytest.approx(exact.standard_error, abs=1e-12)


@pytest.mark.parametrize("entry", ["enrolled", None])
def test_categorical_scores_are_exact(open_backend, entry):
    """Only a categorical covariate: each of its few scores is its own bin, C exact to 1e-12."""
    frame = competing_frame(24, n=1500)
    roles = replace(
        COMPETING_ROLES, covariates=("stage",), event_causes=(), event_values=ANY_CAUSE, entry=entry
    )
    memory = run_analysis(prepare(frame, roles), COMPETING_SETTINGS)["cox"]
    database = run_aggregate_analysis(
        aggregate_checks(open_backend("duckdb", frame), roles), COMPETING_SETTINGS
    )["cox"]
    assert database["concordance_error_bound"] == 0.0
    assert database["concordance"] == pytest.approx(memory["concordance"], abs=1e-12)
    if entry is None:
        assert database["concordance_se"] == pytest.approx(memory["concordance_se"], abs=1e-12)


def test_incidence_and_cause_specific_cox_match_lifelines(open_backend):
    """lifelines on the same rows: AalenJohansenFitter (no tied times, so it does not jitter)
    and CoxPHFitter (Efron ties, delayed entry) with the other causes censored."""
    frame = competing_frame(25, n=1500, continuous=True)
    roles = replace(COMPETING_ROLES, strata=None)
    data = aggregate_checks(open_backend("duckdb", frame), roles)
    prepared = prepare(frame, roles).frame
    assert prepared["_time"].is_unique
    table = incidence_from_counts(data.counts, by_group=False).table
    causes = ["death", "moved", "relapse"]
    code = prepared["_cause"].astype(object).map({c: i + 1 for i, c in enumerate(causes)}).fillna(0)
    for i, cause in enumerate(causes):
        fitter = AalenJohansenFitter(calculate_variance=False).fit(
            prepared["_time"], code.astype(int), event_of_interest=i + 1, entry=prepared["_entry"]
        )
        ref = fitter.cumulative_density_.iloc[:, 0]
        ours = table[table["cause"] == cause]
        at = np.searchsorted(ref.index.to_numpy(), ours["time"].to_numpy(), side="right") - 1
        expected = np.where(at >= 0, ref.to_numpy()[np.maximum(at, 0)], 0.0)
        np.testing.assert_allclose(ours["cumulative_incidence"], expected, rtol=0, atol=1e-9)
    section = run_aggregate_analysis(data, COMPETING_SETTINGS)["competing"]
    rows = prepared.dropna(subset=["age", "stage"])
    for model in section["cause_specific_cox"]:
        levels = [t["level"] for t in model["terms"] if t["variable"] == "stage"]
        design = pd.DataFrame({"age": rows["age"].to_numpy(float)})
        for level in levels:
            design[f"stage_{level}"] = (rows["stage"] == level).to_numpy(float)
        design["t"] = rows["_time"].to_numpy()
        design["e"] = (rows["_cause"] == model["cause"]).to_numpy(int)
        design["entry"] = rows["_entry"].to_numpy()
        ref = CoxPHFitter().fit(design, "t", "e", entry_col="entry")
        assert model["events"] == int(design["e"].sum())
        ours = [t["coef"] for t in model["terms"]]
        # lifelines stops its Newton steps at a tolerance of its own: 1e-6 absolute on top
        np.testing.assert_allclose(ours, ref.params_.to_numpy(), rtol=1e-6, atol=1e-6)
        np.testing.assert_allclose(
            [t["se"] for t in model["terms"]], ref.standard_errors_.to_numpy(), rtol=1e-5
        )


def test_incidence_without_named_causes_equals_memory(open_backend):
    """Without named causes the event is the only cause ("event"), as in memory."""
    frame = messy_frame(3)
    memory = run_analysis(prepare(frame, ROLES), COMPETING_SETTINGS)["competing"]
    source = open_backend("duckdb", frame)
    database = run_aggregate_analysis(aggregate_checks(source, ROLES), COMPETING_SETTINGS)
    section = database["competing"]
    assert section["causes"] == ["event"] and section["gray_test"] is None
    assert_same_json(memory, section, skip=(".fine_gray",))


def test_incidence_number_at_risk_at_times_between_observed_times(open_backend):
    """DuckDB counts the rows at risk at a chosen time as memory does (time >= t, entry < t;
    counted by hand), also at times that are not observed times."""
    frame = pd.DataFrame(
        {
            "t": [1.0, 2.0, 3.0, 5.0, 8.0],
            "status": ["a", "censored", "b", "a", "censored"],
            "entry": [0.0, 0.0, 2.6, 0.0, 4.5],
        }
    )
    roles = Roles(time="t", event="status", event_causes=(("a", "a"), ("b", "b")), entry="entry")
    times = [2.5, 4.0, 4.5, 5.0, 9.0]
    settings = {"curves": {"times": times}, "competing": {"times": times}}
    database = run_aggregate_analysis(
        aggregate_checks(open_backend("duckdb", frame), roles), settings
    )
    memory = run_analysis(prepare(frame, roles), settings)
    for section in (database, memory):
        rows = [r for r in section["competing"]["at_times"] if r["cause"] == "b"]
        assert [r["n_at_risk"] for r in rows] == [1, 1, 1, 2, 0]
        assert [r["at_risk"] for r in section["curves"][0]["at_times"]] == [1, 1, 1, 2, 0]


@pytest.mark.parametrize("backend", ["memory", "duckdb"])
def test_causes_keep_the_order_given(tmp_path, backend):
    """`--competing` names relapse before death: every listing of causes keeps that order (the
    first is the event of interest), not the alphabetical one."""
    from app.cli import main

    rng = np.random.default_rng(3)
    n = 60
    frame = pd.DataFrame(
        {
            "t": rng.integers(1, 40, n).astype(float),
            "status": rng.choice(["R", "D", "alive", "M"], n),
            "arm": rng.choice(["x", "y"], n),
        }
    )
    path = tmp_path / "causes.csv"
    frame.to_csv(path, index=False)
    out = tmp_path / "r.json"
    args = ["analyze", str(path), "--time", "t", "--event", "status", "--group", "arm"]
    args += ["--competing", "R=relapse", "--competing", "M=moved", "--competing", "D=death"]
    assert main([*args, "--times", "10", "--backend", backend, "--json", str(out)]) == 0
    section = json.loads(out.read_text())["competing"]
    order = ["relapse", "moved", "death"]
    assert section["causes"] == order
    assert [r["cause"] for r in section["at_end"]][:3] == order
    assert [t["cause"] for t in section["gray_test"]] == order
    assert json.loads(out.read_text())["data"]["events"] == int((frame["status"] == "R").sum())


@pytest.mark.parametrize("backend", ["memory", "duckdb"])
def test_event_values_of_several_causes_warn_with_the_reading_used(tmp_path, backend):
    """`--event-value` naming the values of two causes of `--competing`: any of them is the
    event outside the competing section (no competing events there), and a warning says so,
    naming both options; with one cause's values there is no such warning."""
    from app.cli import main

    path = tmp_path / "causes.csv"
    pd.DataFrame({"t": [1, 2, 3, 4, 5, 6], "s": ["R", "D", "A", "R", "D", "A"]}).to_csv(
        path, index=False
    )
    out = tmp_path / "r.json"
    args = ["analyze", str(path), "--time", "t", "--event", "s", "--backend", backend]
    args += ["--competing", "R=relapse", "--competing", "D=death", "--json", str(out)]
    assert main([*args, "--event-value", "R", "--event-value", "D"]) == 0
    data = json.loads(out.read_text())["data"]
    assert data["events"] == 4 and data["competing_events"] == 0
    (note,) = [w for w in data["warnings"] if "--competing" in w]
    assert "--event-value" in note and "(relapse, death)" in note and "any of them" in note
    assert main([*args, "--event-value", "R"]) == 0
    data = json.loads(out.read_text())["data"]
    assert data["events"] == 2 and data["competing_events"] == 2
    assert not [w for w in data["warnings"] if "--competing" in w]
