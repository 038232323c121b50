"""Command line: ``python -m app``. Imports no user-interface library."""

from __future__ import annotations


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the process exit code."""
    return 0
