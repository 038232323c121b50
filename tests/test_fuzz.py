"""Fuzz: a few hundred seeded hostile inputs through the whole pipeline (issues 10 and 20).

bytes (read with detection or with options typed by hand, codecs that are not text encodings
among them) -> ``read_table`` -> ``suggest_roles`` and roles a user might pick (named causes,
event values that contradict them) -> ``prepare`` -> the core analyses and, drawn, every optional
one (parametric, landmark, prediction performance, subgroups, baseline, competing risks and
Fine–Gray, splines, the follow-up split), on zero-, one- and few-row tables as often as larger ones
-> strict JSON -> the HTML report. Asserted for every example: only Hazel's own error classes
(``HazelError``) escape, no numeric warning escapes (numpy's overflow or 0/0 warnings reach a
command-line user's terminal and mark a value at the edge of floats), rows used plus rows
excluded equal rows read, the JSON parses, and no
example runs past the hang guard (``HANG_SECONDS``; a guard against hangs, not a speed target:
speeds are measured in ``tests/benchmarks``). A smaller run sends drawn inputs with drawn option
families (contradictory pairs among them) through ``analyze`` and holds it to the exit contract.
The generators are described in ``tests/fuzz_pipeline.py``; the 10,000-example run is
``tests/benchmarks/bench_fuzz.py``.

Seeded (``derandomize``): the same examples every run, so a failure reproduces.
"""

from __future__ import annotations

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.fuzz_pipeline import (
    analysis_settings,
    cli_case,
    cli_extras,
    cli_options,
    files,
    import_options,
    role_choices,
    run_case,
)

EXAMPLES = 300
CLI_EXAMPLES = 40

SEEDED = {
    "derandomize": True,
    "deadline": None,
    "database": None,
    "suppress_health_check": list(HealthCheck),
}


@settings(max_examples=EXAMPLES, **SEEDED)
@given(file=files(), data=st.data())
def test_hostile_files_give_a_result_or_a_hazel_error(file, data):
    content, name = file
    outcome = run_case(
        content,
        name,
        lambda columns, s: data.draw(role_choices(columns, s)),
        options=data.draw(import_options()),
        choose_settings=lambda roles: data.draw(analysis_settings(roles)),
    )
    assert outcome.kind != "crash", f"{outcome.stage}: {outcome.detail}"
    assert outcome.accounting_ok, "rows used + excluded != rows read"
    assert not outcome.numeric_warnings, outcome.numeric_warnings  # they reach the terminal


@settings(max_examples=CLI_EXAMPLES, **SEEDED)
@given(file=files(), data=st.data())
def test_hostile_command_lines_keep_the_exit_contract(file, data, tmp_path_factory):
    content, name = file
    chosen = {}

    def choose(columns, suggested):
        chosen["roles"] = data.draw(role_choices(columns, suggested))
        return chosen["roles"]

    run_case(content, name, choose, report=False)
    if "roles" not in chosen:  # the file could not be read: the command line says so alone
        options = []
    else:
        options = cli_options(chosen["roles"]) + data.draw(cli_extras(chosen["roles"]))
    _code, problem = cli_case(content, name, options, tmp_path_factory.mktemp("cli"))
    assert not problem, problem
