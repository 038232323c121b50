"""``--backend auto`` and the app's data folder choose by the estimated memory of the analysis
(rows x columns from Parquet metadata or a text file's sniffed head), never by the file's bytes.
The limit is lowered here instead of writing big files."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from app import bigdata, state
from app.cli import main
from engine.io import memory

ROWS = 200_000


@pytest.fixture
def compressible(tmp_path):
    """Many rows in few bytes: Parquet compresses repeated values to almost nothing."""
    path = tmp_path / "many_rows.parquet"
    pd.DataFrame(
        {"days": np.full(ROWS, 30.0), "died": np.ones(ROWS, dtype=int), "arm": ["A"] * ROWS}
    ).to_parquet(path)
    return path


@pytest.fixture
def small_csv(tmp_path):
    rng = np.random.default_rng(7)
    frame = pd.DataFrame(
        {"days": rng.exponential(100, 400).round(1), "died": rng.integers(0, 2, 400)}
    )
    frame["arm"] = rng.choice(["A", "B"], 400)
    path = tmp_path / "small.csv"
    frame.to_csv(path, sep=";", index=False)
    return path


def test_parquet_is_judged_by_its_rows_and_columns_not_its_bytes(compressible):
    size = compressible.stat().st_size
    needed = memory.analysis_memory_needed(compressible)
    assert needed >= ROWS * 3 * memory.BYTES_PER_CELL  # rows x columns from the metadata
    limit = 50 * size  # the file's bytes are far below it; its cells are not
    assert needed > limit
    assert not memory.analysis_stays_in_memory(compressible, limit=limit)
    assert memory.analysis_stays_in_memory(compressible, limit=needed)


def test_a_csv_is_judged_by_its_sniffed_cells(small_csv):
    needed = memory.analysis_memory_needed(small_csv)
    cells = 401 * 3  # header and rows, three columns (sniffed separator ';')
    assert needed == pytest.approx(
        small_csv.stat().st_size + cells * memory.BYTES_PER_CELL + 3 * memory.BYTES_PER_COLUMN,
        rel=0.02,
    )
    assert memory.analysis_stays_in_memory(small_csv, limit=needed)
    assert not memory.analysis_stays_in_memory(small_csv, limit=needed - 1)


def _backend(capsys, path) -> str:
    code = main(["analyze", str(path), "--time", "days", "--event", "died", "--json", "-"])
    out = capsys.readouterr()
    assert code == 0, out.err
    return json.loads(out.out)["computed_with"]["backend"]


def test_auto_sends_a_small_parquet_file_of_many_rows_to_duckdb(compressible, capsys, monkeypatch):
    size = compressible.stat().st_size
    monkeypatch.setattr(memory, "AUTO_MEMORY_LIMIT", 50 * size)
    assert _backend(capsys, compressible) == "duckdb"


def test_auto_keeps_a_csv_whose_frame_fits_in_memory(small_csv, capsys, monkeypatch):
    monkeypatch.setattr(memory, "AUTO_MEMORY_LIMIT", memory.analysis_memory_needed(small_csv))
    assert _backend(capsys, small_csv) == "memory"
    monkeypatch.setattr(memory, "AUTO_MEMORY_LIMIT", small_csv.stat().st_size)  # below its cells
    assert _backend(capsys, small_csv) == "duckdb"


def test_the_data_folder_uses_the_same_rule(compressible, monkeypatch):
    folder = compressible.parent
    monkeypatch.setattr(memory, "AUTO_MEMORY_LIMIT", 50 * compressible.stat().st_size)
    (entry,) = bigdata.folder_entries(folder)
    assert entry.big and not entry.is_folder
    session: dict = {}
    assert bigdata.open_from_folder(session, folder, compressible.name) == "aggregated"
    assert session[state.SOURCE].backend == "duckdb"
    session[state.SOURCE].close()
    monkeypatch.setattr(memory, "AUTO_MEMORY_LIMIT", memory.analysis_memory_needed(compressible))
    assert bigdata.open_from_folder({}, folder, compressible.name) == "memory"
