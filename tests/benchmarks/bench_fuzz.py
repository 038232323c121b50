"""The large fuzz run (issue 10): 10,000 or more hostile inputs through the whole pipeline, and a
share of them through the command line, with the counts recorded in DEVELOPERS.md.

Run by hand: ``.venv/bin/python tests/benchmarks/bench_fuzz.py [--examples N] [--seed S]
[--cli-every K]``. The default test run replays the same generators on a few hundred seeded
examples (``tests/test_fuzz.py``); a new ``--seed`` draws inputs the project has not seen.

Each case draws import options (a typed separator or encoding, codecs that are not text
encodings among them), roles (named causes, contradictory event values) and analysis settings
(every optional analysis, one time in three each), on tables of zero, one and a few rows as often
as larger ones; the command-line share adds drawn option families (contradictory pairs among
them).

Counted: results, clean errors (``HazelError``), crashes (anything else, grouped by the place they
were raised), hangs (past ``HANG_SECONDS``), row-accounting failures, and the time per case. Every
``--cli-every``-th input is also written to a file and run as ``analyze`` in process: the exit
status must be 0, or 2 with exactly one ``error:`` line on standard error.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from collections import Counter
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from hypothesis import HealthCheck, Phase, given, seed, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from tests.fuzz_pipeline import (  # noqa: E402
    analysis_settings,
    cli_case,
    cli_extras,
    cli_options,
    files,
    import_options,
    role_choices,
    run_case,
    seconds_text,
)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--examples", type=int, default=10_000)
    parser.add_argument("--seed", type=int, default=20261202)
    parser.add_argument("--cli-every", type=int, default=25)
    args = parser.parse_args()

    outcomes, cli, places, numeric = [], Counter(), Counter(), Counter()
    cli_problems: list[str] = []
    folder = Path(tempfile.mkdtemp(prefix="hazel-fuzz-"))
    started = time.perf_counter()

    @seed(args.seed)
    @settings(
        max_examples=args.examples,
        deadline=None,
        database=None,
        phases=[Phase.generate],
        suppress_health_check=list(HealthCheck),
    )
    @given(file=files(), data=st.data())
    def one(file, data):
        content, name = file
        chosen = {}

        def choose(columns, suggested):
            chosen["roles"] = data.draw(role_choices(columns, suggested))
            return chosen["roles"]

        def choose_settings(roles):
            chosen["settings"] = data.draw(analysis_settings(roles))
            return chosen["settings"]

        options = data.draw(import_options())
        outcome = run_case(
            content,
            name,
            choose,
            options=options,
            choose_settings=choose_settings,
        )
        outcomes.append(outcome)
        numeric.update(outcome.numeric_warnings)
        if outcome.kind == "crash":
            places[outcome.detail.strip().splitlines()[-1][:160]] += 1
            kept = folder / f"crash-{len(outcomes)}"  # the input and roles, to replay it
            kept.mkdir()
            (kept / (Path(name).name or "input")).write_bytes(content)
            (kept / "roles.txt").write_text(
                f"{chosen.get('roles')!r}\n{options!r}\n{chosen.get('settings')!r}\n"
                f"{outcome.detail}"
            )
            print(f"  crash at case {len(outcomes)}: kept in {kept}", flush=True)
        # drawn for every case, used for every K-th: hypothesis needs the same draws on a replay
        argv = None
        if "roles" in chosen:
            argv = cli_options(chosen["roles"]) + data.draw(cli_extras(chosen["roles"]))
        if len(outcomes) % args.cli_every == 0 and argv is not None:
            code, problem = cli_case(content, name, argv, folder)
            cli[code] += 1
            if problem:
                cli_problems.append(problem)
                kept = folder / f"cli-{len(outcomes)}"  # the input and the options, to replay it
                kept.mkdir()
                (kept / (Path(name).name or "input")).write_bytes(content)
                (kept / "argv.txt").write_text(f"{argv!r}\n{problem}")
        if len(outcomes) % 500 == 0:
            kinds = Counter(o.kind for o in outcomes)
            print(
                f"  {len(outcomes):,} cases, {time.perf_counter() - started:.0f} s: "
                f"{kinds['result']:,} results, {kinds['error']:,} errors, {kinds['crash']} "
                f"crashes; command line {dict(cli)}, contract broken {len(cli_problems)}",
                flush=True,
            )

    one()
    kinds = Counter(o.kind for o in outcomes)
    hangs = sum(1 for o in outcomes if "still running" in o.detail)
    slow = sum(1 for o in outcomes if o.seconds > 10)
    accounting = sum(1 for o in outcomes if not o.accounting_ok)
    stages = Counter(o.stage for o in outcomes if o.kind == "result")
    print(f"examples {len(outcomes):,} (seed {args.seed}), {time.perf_counter() - started:.0f} s")
    print(f"results {kinds['result']:,}, clean errors {kinds['error']:,}, crashes {kinds['crash']}")
    print(f"hangs (> HANG_SECONDS) {hangs}, over 10 s {slow}, accounting failures {accounting}")
    print(f"results by last stage: {dict(stages)}")
    print("time per case:", seconds_text([o.seconds for o in outcomes]))
    print(f"command line: {sum(cli.values())} runs, exit codes {dict(cli)}, "
          f"contract broken {len(cli_problems)}")  # fmt: skip
    for place, count in places.most_common(20):
        print(f"  crash x{count}: {place}")
    errors = Counter(o.detail.split(":")[0] for o in outcomes if o.kind == "error")
    print(f"clean errors by class and stage: {dict(errors.most_common(8))}")
    stages_of_errors = Counter(o.stage for o in outcomes if o.kind == "error")
    print(f"  reached: {dict(stages_of_errors)}")
    print(f"cases with numeric warnings: {sum(1 for o in outcomes if o.numeric_warnings)}")
    for place, count in numeric.most_common(30):
        print(f"  warning x{count}: {place}")
    for problem in cli_problems[:20]:
        print(f"  cli: {problem}")


if __name__ == "__main__":
    main()
