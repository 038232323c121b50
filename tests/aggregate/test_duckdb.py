"""DuckDB gives the same analysis as memory: data checks (every exclusion reason, the same
texts), curves, the comparison and the Cox model with its PH test, to 1e-9."""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from engine.aggregate.analysis import run_aggregate_analysis
from engine.aggregate.sources import open_duckdb
from engine.aggregate.sql import quoted
from engine.aggregate.sql_checks import aggregate_checks
from engine.analysis.run import run_analysis
from engine.errors import RoleError, SettingError
from engine.io.tables import read_table
from engine.prepare.checks import prepare
from engine.prepare.filters import FilterError, RowFilter
from tests.aggregate.cases import (
    BOOLEAN_ROLES,
    DATE_ROLES,
    FILTERS,
    ID_ROLES,
    NONE_ESTIMABLE_ROLES,
    NOT_ESTIMABLE_ROLES,
    ROLES,
    SETTINGS,
    aggregate_json,
    assert_a_stop_ends_the_read,
    assert_awkward_texts_unchanged,
    assert_same_json,
    awkward_frame,
    awkward_names,
    boolean_frame,
    dated_frame,
    id_frame,
    memory_json,
    messy_frame,
    with_ward_terms,
)

# With delayed entry the standard error of Harrell's C is not computed from counts.
NOT_FROM_SUMS = (".cox.concordance_se",)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("duckdb")
    frame = messy_frame(3)
    parquet = folder / "messy.parquet"
    frame.to_parquet(parquet)
    csv = folder / "messy.csv"
    frame.to_csv(csv, index=False)
    return {"parquet": parquet, "csv": csv}


def both(path, roles=ROLES, settings=SETTINGS):
    table = read_table(path)
    prepared = prepare(table.frame, roles)
    memory = run_analysis(prepared, settings)
    source = open_duckdb(path)
    try:
        data = aggregate_checks(source, roles)
        database = run_aggregate_analysis(data, settings)
    finally:
        source.close()
    return memory, database


@pytest.mark.parametrize("kind", ["parquet", "csv"])
def test_duckdb_equals_memory(files, kind):
    memory, database = both(files[kind])
    assert memory["data"] == database["data"]
    data = database["data"]
    assert data["rows_used"] + sum(e["rows"] for e in data["excluded"]) == data["rows_read"]
    assert {e["reason"] for e in data["excluded"]} == {
        "missing time",
        "negative time",
        "missing event",
        "unknown event value",
        "missing entry time",
        "entry not before time",
    }
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)
    # fewer distinct scores than bins: Harrell's C is exact
    assert database["cox"]["concordance_error_bound"] == 0.0
    assert database["cox"]["concordance_se"] is None


@pytest.mark.parametrize("roles", [NOT_ESTIMABLE_ROLES, NONE_ESTIMABLE_ROLES])
def test_terms_constant_within_strata(tmp_path, roles):
    path = tmp_path / "wards.parquet"
    with_ward_terms(messy_frame(5, n=900)).to_parquet(path)
    memory, database = both(path, roles)
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)
    if roles is NONE_ESTIMABLE_ROLES:
        assert "single value within each stratum" in memory["cox"]["not_computed"]
    else:
        assert memory["cox"]["not_estimable"] == ["ward_beds"]
        assert any("stratum of 'ward'" in w for w in database["cox"]["warnings"])


DATE_REASONS = {"missing time", "unparseable date", "end before start"}


@pytest.mark.parametrize("text", [True, False], ids=["iso-text", "native"])
@pytest.mark.parametrize(
    ("unit", "implausible"), [("months", "warn"), ("days", "exclude"), ("years", "warn")]
)
@pytest.mark.parametrize("suffix", ["parquet", "csv"])
def test_dates_equal_memory(tmp_path, text, unit, implausible, suffix):
    path = tmp_path / f"dated.{suffix}"
    frame = dated_frame(4, text=text)
    frame.to_parquet(path) if suffix == "parquet" else frame.to_csv(path, index=False)
    roles = replace(DATE_ROLES, unit=unit, implausible_dates=implausible)
    memory, database = both(path, roles)
    assert memory["data"] == database["data"]
    reasons = {e["reason"] for e in memory["data"]["excluded"]}
    expected = DATE_REASONS - ({"unparseable date"} if not text else set())
    assert reasons == expected | ({"implausible date"} if implausible == "exclude" else set())
    assert any("before 1900" in w for w in memory["data"]["warnings"])
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_calendar_arithmetic_equals_numpy(tmp_path):
    """Every plain ISO text read in SQL gives numpy's seconds (leap years, century rules)."""
    rng = np.random.default_rng(2)
    low = np.datetime64("1678-01-01T00:00:00").astype("int64")
    high = np.datetime64("2261-12-31T23:59:59").astype("int64")
    seconds = rng.integers(low, high, 3000).astype("datetime64[s]")
    seconds[:4] = np.array(
        ["1700-02-28T23:59:59", "2000-02-29T00:00:00", "1900-03-01T12:00:00", "2261-12-31"],
        dtype="datetime64[s]",
    )
    texts = [str(v).replace("T", " " if i % 2 else "T") for i, v in enumerate(seconds)]
    frame = pd.DataFrame({"start": "1678-01-01", "end": texts, "status": "dead"})
    path = tmp_path / "calendar.parquet"
    frame.to_parquet(path)
    source = open_duckdb(path)
    try:
        data = aggregate_checks(source, replace(DATE_ROLES, group=None, covariates=(), unit="days"))
        cells = source.query(f"SELECT _time, _n FROM ({data.clean}) AS c")
    finally:
        source.close()
    got = np.repeat(cells["_time"].to_numpy(float), cells["_n"].to_numpy(int))
    expected = (seconds - np.datetime64("1678-01-01T00:00:00")) / np.timedelta64(1, "D")
    np.testing.assert_array_equal(np.sort(got), np.sort(expected))  # cells: in no order


@pytest.mark.parametrize(
    ("values", "roles_change", "message"),
    [
        (["2020-01-05", "2021-03-01"], {"date_format": "%Y-%m-%d"}, "date format"),
        (["05/01/2020", "01/03/2021"], {}, "not ISO text"),
        (["2020-01-05", "13/01/2021"], {}, "read only day first"),
    ],
)
def test_dates_not_read_alike_are_refused(tmp_path, values, roles_change, message):
    frame = pd.DataFrame({"start": "2019-01-01", "end": values * 10, "status": "dead"})
    path = tmp_path / "odd.parquet"
    frame.to_parquet(path)
    roles = replace(DATE_ROLES, group=None, covariates=(), **roles_change)
    source = open_duckdb(path)
    try:
        with pytest.raises(
            SettingError, match=f"column '(start|end)'.*{message}.*--backend memory"
        ):
            aggregate_checks(source, roles)
    finally:
        source.close()


def test_numbers_as_dates_are_refused(tmp_path):
    frame = pd.DataFrame({"start": "2019-01-01", "end": [20200105, 20210301], "status": "dead"})
    path = tmp_path / "numbers.parquet"
    frame.to_parquet(path)
    source = open_duckdb(path)
    try:
        with pytest.raises(SettingError, match="'end' holds values such as 20200105"):
            aggregate_checks(source, replace(DATE_ROLES, group=None, covariates=()))
    finally:
        source.close()


def test_times_with_a_zone_are_read_as_utc(tmp_path):
    """Memory converts zoned times to UTC; DuckDB's session is in UTC, so a zone far from it
    (and a change of summer time inside the follow-up) gives the same durations."""
    frame = dated_frame(6, n=300, text=False)
    for column in ("start", "end"):
        frame[column] = frame[column].dt.tz_localize(
            "Pacific/Auckland", ambiguous="NaT", nonexistent="NaT"
        )
    path = tmp_path / "zoned.parquet"
    frame.to_parquet(path)
    memory, database = both(path, DATE_ROLES)
    assert memory["data"] == database["data"]
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_no_readable_date_is_memorys_error(tmp_path):
    frame = pd.DataFrame(
        {"start": "2019-01-01", "end": ["2021-02-30", "2021-02-31", "2021-04-31"] * 3}
    )
    frame["status"] = "dead"
    path = tmp_path / "unreadable.parquet"
    frame.to_parquet(path)
    roles = replace(DATE_ROLES, group=None, covariates=())
    with pytest.raises(RoleError) as in_memory:
        prepare(read_table(path).frame, roles)
    source = open_duckdb(path)
    try:
        with pytest.raises(RoleError) as in_sql:
            aggregate_checks(source, roles)
    finally:
        source.close()
    assert str(in_sql.value) == str(in_memory.value)
    assert in_sql.value.column == "end"


def test_merged_rows_count_as_the_rows(files):
    """``SqlSource.grouped``: the weighted counts of the merged cells equal the plain counts
    over the rows (an exact property), and the cells are fewer than the rows."""
    source = open_duckdb(files["parquet"])
    try:
        columns = ["status", "site", "stage", "ward"]  # with NULLs and repeats
        merged = source.grouped(columns, "hazel_test_cells")
        assert merged.weight is not None and source.weight is None
        first, second = (quoted(c) for c in columns[:2])
        for s in (source, merged):
            assert s.rows().startswith("COUNT") == (s is source)

        def counts(s):
            sql = (
                f"SELECT {s.rows()} AS n, {s.count(first)} AS c, "
                f"{s.rows_where(f'{second} IS NULL')} AS m FROM {s.relation}"
            )
            return s.query(sql).iloc[0].astype(int).tolist()

        assert counts(merged) == counts(source)
        cells = source.query("SELECT COUNT(*) AS n FROM hazel_test_cells")["n"].iloc[0]
        assert cells < counts(source)[0]
    finally:
        source.close()


@pytest.mark.parametrize("kind", ["parquet", "csv"])
def test_row_filters_equal_memory(files, kind):
    """Row filters of every rule run inside DuckDB: the rows each removes, the checks of the
    rows kept and the analysis equal memory's (``apply_filters`` before ``prepare``)."""
    frame = read_table(files[kind]).frame
    memory = memory_json(frame, ROLES, filters=FILTERS)
    database = aggregate_json(open_duckdb(files[kind]), ROLES, filters=FILTERS)
    assert database["filters"] == memory["filters"]
    assert 0 < memory["filters"]["rows_kept"] < len(frame)
    assert all(e["rows"] > 0 for e in memory["filters"]["excluded"])
    assert database["data"] == memory["data"]
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


@pytest.mark.parametrize(
    ("row_filter", "message"),
    [
        (RowFilter("nowhere", "not_missing"), "there is no such column"),
        (RowFilter("site", "at_least", (3,)), "does not hold numbers"),
    ],
)
def test_row_filters_that_cannot_run_in_a_database(files, row_filter, message):
    source = open_duckdb(files["parquet"])
    try:
        with pytest.raises(FilterError, match=message) as caught:
            aggregate_checks(source, ROLES, filters=(row_filter,))
        assert row_filter.column in str(caught.value)
    finally:
        source.close()


def test_texts_with_quotes_and_backslashes_reach_the_database_unchanged(tmp_path):
    """A level or filter value with quotes or backslashes selects the same rows as in memory."""
    frame = awkward_frame()
    path = tmp_path / "awkward.parquet"
    frame.to_parquet(path)
    assert_awkward_texts_unchanged(lambda: open_duckdb(path), frame, NOT_FROM_SUMS)


def test_column_names_with_quotes_and_backslashes(tmp_path):
    frame, roles = awkward_names()
    path = tmp_path / "names.parquet"
    frame.to_parquet(path)
    memory = memory_json(frame, roles)
    database = aggregate_json(open_duckdb(path), roles)
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


@pytest.mark.parametrize("repeats", [True, False])
def test_an_id_column_gives_memory_checks_and_model(tmp_path, repeats):
    """With an id column: the episode notes (smallest repeated and overlapping ids) and the
    rows the model leaves out for a missing id equal memory's; where ids repeat, the robust
    variance memory then uses is not computed from sums and says so; where each subject has
    one row, the whole model equals memory's."""
    frame = id_frame(repeats=repeats)
    path = tmp_path / "ids.parquet"
    frame.to_parquet(path)
    memory = memory_json(frame, ID_ROLES)
    database = aggregate_json(open_duckdb(path), ID_ROLES)
    assert database["data"] == memory["data"]
    notes = " ".join(memory["data"]["warnings"])
    assert ("repeats" in notes and "overlap in time" in notes) == repeats
    if repeats:
        assert memory["cox"]["variance"] == "robust"
        assert "'pid' repeats" in database["cox"]["not_computed"]
        assert_same_json(memory, database, skip=(*NOT_FROM_SUMS, ".cox"))
        model = {"cox": {"variance": "model"}}
        memory = memory_json(frame, ID_ROLES, model)
        database = aggregate_json(open_duckdb(path), ID_ROLES, model)
        assert database["cox"]["concordance_se"] is None  # summed per subject in memory
    assert memory["cox"]["rows_dropped"]["_id"] > 0  # the rows without an id
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


@pytest.mark.parametrize("suffix", [".parquet", ".csv"])
def test_true_false_event_and_group_columns_give_memory_numbers(tmp_path, suffix):
    path = tmp_path / f"booleans{suffix}"
    frame = boolean_frame()
    frame.to_parquet(path) if suffix == ".parquet" else frame.to_csv(path, index=False)
    memory, database = both(path, BOOLEAN_ROLES)
    assert database["data"] == memory["data"]
    assert memory["data"]["events"] > 0
    assert_same_json(memory, database, skip=NOT_FROM_SUMS)


def test_a_stop_while_reading_interrupts_duckdb(tmp_path):
    """``SqlSource.wait`` raising stops a long DuckDB statement (interrupted, not run on)."""
    path = tmp_path / "one.csv"
    path.write_text("t,e\n1,1\n")
    slow = "SELECT SUM(hash(i)) AS s FROM range(100000000000) AS r(i)"
    assert_a_stop_ends_the_read(open_duckdb(path), slow)


@pytest.mark.parametrize("partial", ["2020", "2020-06"])
@pytest.mark.parametrize("backend", ["memory", "duckdb"])
@pytest.mark.parametrize("where", [0, 14])
def test_a_partial_first_date_does_not_decide_the_columns_format(tmp_path, partial, backend, where):
    """30 end dates, 29 full ISO and one partial (2020: its first day, as ISO 8601 reads it):
    every row is kept whether the partial date is the first value or the 15th, with no
    day-first hint (the layout is judged from all the values, never from the first cell)."""
    from app.cli import main

    ends = [f"2021-{m:02d}-{d:02d}" for m in range(1, 11) for d in (3, 14, 25)]
    ends[where] = partial
    path = tmp_path / "dates.csv"
    pd.DataFrame({"start": "2019-12-01", "end": ends, "status": 1}).to_csv(path, index=False)
    out = tmp_path / "r.json"
    args = ["analyze", str(path), "--start", "start", "--end", "end", "--event", "status"]
    assert main([*args, "--backend", backend, "--json", str(out)]) == 0
    data = json.loads(out.read_text())["data"]
    assert data["rows_used"] == 30 and data["excluded"] == []
    assert not [w for w in data["warnings"] if "day first" in w]


def test_a_day_first_first_date_does_not_decide_the_columns_order(tmp_path):
    """Month-first dates with one that reads only day first: where that one stands does not
    change how the other 30 are read (each pair month/day below 13 is read month first), and
    it is the one left out, with the hint naming --day-first."""
    from app.cli import main

    ends = [f"{m:02d}/{d:02d}/2021" for m in range(1, 11) for d in (3, 5, 12)]
    results = []
    for where in (0, 14):
        values = list(ends)
        values.insert(where, "25/06/2021")
        path = tmp_path / f"dates{where}.csv"
        pd.DataFrame({"start": "12/01/2019", "end": values, "status": 1}).to_csv(path, index=False)
        out = tmp_path / "r.json"
        args = ["analyze", str(path), "--start", "start", "--end", "end", "--event", "status"]
        assert main([*args, "--json", str(out), "--times", "400"]) == 0
        result = json.loads(out.read_text())
        assert result["data"]["rows_used"] == 30
        assert result["data"]["excluded"] == [{"reason": "unparseable date", "rows": 1}]
        assert any("--day-first" in w for w in result["data"]["warnings"])
        results.append(result["curves"][0])
    assert results[0] == results[1]
