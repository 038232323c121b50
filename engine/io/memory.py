"""How much memory an import needs and how much this process may still use, so that a file too
big for the machine is refused with the two figures instead of a MemoryError or a kill.

The estimate is per cell: a parsed cell costs up to ``BYTES_PER_CELL`` while the Arrow table and
the pandas frame are built, and each column ``BYTES_PER_COLUMN`` more (measured in
tests/benchmarks/bench_import_memory.py, figures in DEVELOPERS.md), plus the file's own size.

The same estimate chooses where an analysis runs (``analysis_stays_in_memory``): by the rows and
columns a file holds (Parquet metadata, or the sniffed head of a text file scaled to its size),
never by its bytes, since a compressed Parquet file of 25 MB can hold 5 M rows.
"""

from __future__ import annotations

import os
import resource
from pathlib import Path

from engine.errors import FileReadError

BYTES_PER_CELL = 40  # measured peak 24-32 bytes per cell (DEVELOPERS.md), with a margin
BYTES_PER_COLUMN = 20 * 1024  # measured about 18 KB more per column for wide files
_CGROUP = Path("/sys/fs/cgroup")
# An analysis estimated to need more than this runs on DuckDB under ``--backend auto`` and in the
# app's data folder: Hazel's choice (about 13 M cells), where the in-memory pages stop being
# interactive (a 5 M-row, 5-column Parquet file took 22.6 s on the Regression page).
AUTO_MEMORY_LIMIT = 512 * 1024**2
PARQUET_SUFFIXES = frozenset({".parquet", ".pq"})
TEXT_SUFFIXES = frozenset({".csv", ".tsv", ".txt", ".tab"})


def import_memory_needed(size: int, sample: bytes, sep: str) -> int:
    """Bytes an import of a ``size``-byte text file is expected to need at its peak, from the
    cells per byte of its first ``sample`` bytes and the columns of its first line."""
    if not sample:
        return size
    lines = sample.count(b"\n") or 1
    cells = (sample.count(sep.encode()) + lines) * (size / len(sample))
    columns = sample.split(b"\n", 1)[0].count(sep.encode()) + 1
    return int(size + cells_memory(cells, columns))


def cells_memory(cells: float, columns: int) -> int:
    """Bytes a table of ``cells`` cells in ``columns`` columns needs in memory at its peak."""
    return int(BYTES_PER_CELL * cells + BYTES_PER_COLUMN * columns)


def analysis_memory_needed(path: Path, sep: str | None = None) -> int:
    """Bytes an in-memory analysis of the file at ``path`` is expected to need: rows x columns
    from a Parquet file's metadata, or from a text file's sniffed head (cells per byte times
    the file's size, with ``sep`` when given); other formats by their size."""
    path = Path(path)
    size = path.stat().st_size
    suffix = path.suffix.lower()
    if suffix in PARQUET_SUFFIXES:
        import pyarrow.parquet as pq

        try:
            metadata = pq.read_metadata(path)
        except (OSError, ValueError):  # not a Parquet file: the reader says so
            return size
        return size + cells_memory(metadata.num_rows * metadata.num_columns, metadata.num_columns)
    if suffix in TEXT_SUFFIXES:
        from engine.errors import HazelError
        from engine.io.tables import ImportOptions
        from engine.io.text import SAMPLE_BYTES, _sniff, read_head

        head = read_head(path, SAMPLE_BYTES)
        try:
            sniffed = _sniff(head, size > SAMPLE_BYTES, ImportOptions(sep=sep), path.name)
        except HazelError:  # an unreadable head: the reader gives its message
            return size
        return import_memory_needed(size, head, sniffed.sep)
    return size


def analysis_stays_in_memory(path: Path, sep: str | None = None, limit: int | None = None) -> bool:
    """Whether ``--backend auto`` (and the app's data folder) analyses this file in memory:
    its estimated memory (``analysis_memory_needed``) is at most ``limit``
    (``AUTO_MEMORY_LIMIT``); a bigger CSV or Parquet file is read where it is, by DuckDB."""
    limit = AUTO_MEMORY_LIMIT if limit is None else limit
    return analysis_memory_needed(path, sep) <= limit


def memory_available() -> int | None:
    """Bytes this process can still allocate: the least of the free memory, the container's
    (cgroup) limit and the address-space limit; None when none of them can be read."""
    limits = [
        value
        for value in (_meminfo_available(), _cgroup_headroom(), _address_space_headroom())
        if value is not None
    ]
    return min(limits) if limits else None


def check_memory_for_import(size: int, sample: bytes, sep: str, name: str) -> None:
    """Refuse, before reading, a file whose import would not fit in the memory left."""
    needed = import_memory_needed(size, sample, sep)
    available = memory_available()
    if available is not None and needed > available:
        raise FileReadError(
            f"{name} ({megabytes(size)}) needs about {megabytes(needed)} of memory to import, but "
            f"only about {megabytes(available)} is free. Close other programs, keep only the "
            "columns and rows the analysis needs, or use a computer with more memory."
        )


def out_of_memory(name: str, size: int) -> FileReadError:
    """The message for a MemoryError met while reading ``name`` anyway (past the estimate)."""
    return FileReadError(
        f"{name} ({megabytes(size)}) ran out of memory while it was read: an import needs up to "
        f"about {BYTES_PER_CELL} bytes per cell. Keep only the columns and rows the analysis "
        "needs, or use a computer with more memory."
    )


def megabytes(size: float) -> str:
    return f"{size / 1024**3:,.1f} GB" if size >= 1024**3 else f"{size / 1024**2:,.0f} MB"


def _meminfo_available() -> int | None:
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemAvailable:"):
                return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        return None
    return None


def _cgroup_headroom() -> int | None:
    try:
        limit = (_CGROUP / "memory.max").read_text().strip()
        if limit == "max":
            return None
        return int(limit) - int((_CGROUP / "memory.current").read_text().strip())
    except (OSError, ValueError):
        return None


def _address_space_headroom() -> int | None:
    soft, _hard = resource.getrlimit(resource.RLIMIT_AS)
    if soft == resource.RLIM_INFINITY:
        return None
    try:
        fields = Path(f"/proc/{os.getpid()}/status").read_text().split("VmSize:")[1].split()
        used = int(fields[0]) * 1024
    except (OSError, IndexError, ValueError):
        return None
    return soft - used
