"""Fuzz: a few hundred seeded hostile inputs through the whole pipeline (issue 10).

bytes -> ``read_table`` -> ``suggest_roles`` and roles a user might pick -> ``prepare`` -> the
default analyses -> strict JSON -> the HTML report. Asserted for every example: only Hazel's own
error classes (``HazelError``) escape, rows used plus rows excluded equal rows read, the JSON
parses, and no example runs past the hang guard (``HANG_SECONDS``; a guard against hangs, not a
speed target: speeds are measured in ``tests/benchmarks``). The generators are described in
``tests/fuzz_pipeline.py``; the 10,000-example run is ``tests/benchmarks/bench_fuzz.py``.

Seeded (``derandomize``): the same examples every run, so a failure reproduces.
"""

from __future__ import annotations

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.fuzz_pipeline import files, role_choices, run_case

EXAMPLES = 300


@settings(
    max_examples=EXAMPLES,
    derandomize=True,
    deadline=None,
    database=None,
    suppress_health_check=list(HealthCheck),
)
@given(file=files(), data=st.data())
def test_hostile_files_give_a_result_or_a_hazel_error(file, data):
    content, name = file
    outcome = run_case(content, name, lambda columns, s: data.draw(role_choices(columns, s)))
    assert outcome.kind != "crash", f"{outcome.stage}: {outcome.detail}"
    assert outcome.accounting_ok, "rows used + excluded != rows read"
