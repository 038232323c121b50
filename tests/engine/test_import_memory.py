"""Imports too big for the memory left (issue 10 item 13): refused before reading with the memory
needed and the memory free, or, past the estimate, one clear message instead of a MemoryError;
the command line exits 2 with one ``error:`` line in both cases, under a real address-space cap.
Every file here is written by the test itself."""

from __future__ import annotations

import resource
import subprocess
import sys

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

from engine.errors import FileReadError
from engine.io import memory
from engine.io import text as io_text
from engine.io.tables import read_table
from tests.app.demo_files import ROOT


def _csv(path, rows: int = 2_000, seed: int = 1):
    rng = np.random.default_rng(seed)
    pd.DataFrame(
        {
            "time": rng.exponential(10, rows).round(2),
            "event": rng.integers(0, 2, rows),
            "site": rng.choice(["north", "south"], rows),
        }
    ).to_csv(path, index=False)
    return path


def test_estimate_counts_cells_and_columns_of_the_sample():
    sample = b"a,b,c\n1,2,3\n4,5,6\n"
    # 3 lines x 3 fields in 18 bytes; a file of 1,800 bytes holds 100 times as many cells
    expected = 1800 + memory.BYTES_PER_CELL * 900 + memory.BYTES_PER_COLUMN * 3
    assert memory.import_memory_needed(1800, sample, ",") == expected


def test_a_file_bigger_than_the_memory_left_is_refused_with_both_figures(tmp_path, monkeypatch):
    path = _csv(tmp_path / "registry.csv", rows=50_000)  # 150,000 cells: about 6 MB
    monkeypatch.setattr(memory, "memory_available", lambda: 1024**2)
    with pytest.raises(FileReadError, match=r"registry\.csv .* needs about .* only about 1 MB"):
        read_table(path)


def test_enough_memory_reads_as_before(tmp_path, monkeypatch):
    path = _csv(tmp_path / "registry.csv")
    monkeypatch.setattr(memory, "memory_available", lambda: 64 * 1024**3)
    assert read_table(path).frame.shape == (2_000, 3)


def test_a_memory_error_while_parsing_is_a_clear_message_not_a_fallback(tmp_path, monkeypatch):
    path = _csv(tmp_path / "registry.csv")

    def exhausted(*args, **kwargs):
        raise pa.ArrowMemoryError("malloc of size 8589934592 failed")

    monkeypatch.setattr(io_text, "_parse_with_pyarrow", exhausted)
    monkeypatch.setattr(
        io_text, "_parse_text_python", lambda *a, **k: pytest.fail("fell back after MemoryError")
    )
    with pytest.raises(FileReadError, match=r"registry\.csv .* ran out of memory"):
        read_table(path)


def test_available_memory_is_the_least_of_the_limits(monkeypatch):
    monkeypatch.setattr(memory, "_meminfo_available", lambda: 8 * 1024**3)
    monkeypatch.setattr(memory, "_cgroup_headroom", lambda: 2 * 1024**3)
    monkeypatch.setattr(memory, "_address_space_headroom", lambda: None)
    assert memory.memory_available() == 2 * 1024**3
    monkeypatch.setattr(memory, "_cgroup_headroom", lambda: None)
    monkeypatch.setattr(memory, "_meminfo_available", lambda: None)
    assert memory.memory_available() is None


PROBE = "import app.cli, pathlib; print(pathlib.Path('/proc/self/status').read_text())"


def _address_space_in_use() -> int:
    status = subprocess.run(
        [sys.executable, "-c", PROBE], cwd=ROOT, capture_output=True, text=True, check=True
    ).stdout
    return int(status.split("VmSize:")[1].split()[0]) * 1024


def test_command_line_under_a_memory_cap_exits_2_with_one_line(tmp_path):
    """A real cap (RLIMIT_AS) 300 MB above what the started command line uses, and a 78 MB file
    of 18 million cells that needs more: refused by the estimate before reading, never a
    traceback. (Past the estimate, a cap this tight can make the parser's native threads abort
    in ways no Python program can catch, so the refusal comes first.) ``--backend memory``: under
    ``auto`` its 18 M cells would go to DuckDB."""
    path = tmp_path / "big.csv"
    path.write_bytes(b"time,event,site\n" + b"12.5,1,north\n" * 6_000_000)
    cap = _address_space_in_use() + 300 * 1024**2

    def limit():
        resource.setrlimit(resource.RLIMIT_AS, (cap, cap))

    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "app",
            "check",
            str(path),
            "--time",
            "time",
            "--event",
            "event",
            "--backend",
            "memory",
        ],
        cwd=ROOT,
        capture_output=True,
        text=True,
        preexec_fn=limit,
        timeout=300,
    )
    assert done.returncode == 2, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and "needs about" in lines[0]
    assert "Traceback" not in done.stderr
