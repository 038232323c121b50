"""How much memory an import needs and how much this process may still use, so that a file too
big for the machine is refused with the two figures instead of a MemoryError or a kill.

The estimate is per cell: a parsed cell costs up to ``BYTES_PER_CELL`` while the Arrow table and
the pandas frame are built, and each column ``BYTES_PER_COLUMN`` more (measured in
tests/benchmarks/bench_import_memory.py, figures in DEVELOPERS.md), plus the file's own size.
"""

from __future__ import annotations

import os
import resource
from pathlib import Path

from engine.errors import FileReadError

BYTES_PER_CELL = 40  # measured peak 24-32 bytes per cell (DEVELOPERS.md), with a margin
BYTES_PER_COLUMN = 20 * 1024  # measured about 18 KB more per column for wide files
_CGROUP = Path("/sys/fs/cgroup")


def import_memory_needed(size: int, sample: bytes, sep: str) -> int:
    """Bytes an import of a ``size``-byte text file is expected to need at its peak, from the
    cells per byte of its first ``sample`` bytes and the columns of its first line."""
    if not sample:
        return size
    lines = sample.count(b"\n") or 1
    cells = (sample.count(sep.encode()) + lines) * (size / len(sample))
    columns = sample.split(b"\n", 1)[0].count(sep.encode()) + 1
    return int(size + BYTES_PER_CELL * cells + BYTES_PER_COLUMN * columns)


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
