"""Every bundled demo opens with the roles it was made for: the roles the app applies
(``app.data.DEMO_ROLES``) agree with the command documented in demo_data/README.md, that command
runs, and the app opens each demo on them without a message to fix anything."""

from __future__ import annotations

import shlex
import subprocess
import sys
from pathlib import Path

import pytest
from streamlit.testing.v1 import AppTest

from app import data, state

ROOT = Path(__file__).resolve().parents[2]
ENTRY = str(ROOT / "app" / "hazel.py")
README = ROOT / "demo_data" / "README.md"
DEMOS = [p.name for p in data.demo_files()]
# command-line option -> (role field, how the option's text becomes the role's value)
OPTIONS = {
    "--time": ("time", str), "--start": ("start", str), "--end": ("end", str),
    "--unit": ("unit", str), "--event": ("event", str), "--group": ("group", str),
    "--entry": ("entry", str), "--id": ("id", str),
    "--event-value": ("event_values", lambda v: tuple(v.split(","))),
    "--covariates": ("covariates", lambda v: tuple(v.split(","))),
    "--categorical": ("categorical", lambda v: tuple(v.split(","))),
}  # fmt: skip


def _documented_command(name: str) -> list[str]:
    """The `Try:` command of the demo's section in demo_data/README.md."""
    section = README.read_text(encoding="utf-8").split(f"## {name}:", 1)[1].split("\n## ", 1)[0]
    line = next(x for x in section.splitlines() if x.startswith("Try: `"))
    return shlex.split(line.removeprefix("Try: `").rstrip("`"))


def _documented_roles(command: list[str]) -> dict:
    roles: dict = {}
    causes = []
    for option, value in zip(command, [*command[1:], None], strict=True):
        if option in OPTIONS:
            field, read = OPTIONS[option]
            roles[field] = read(value)
        elif option == "--competing":
            causes.append(tuple(value.split("=", 1)))
        elif option == "--day-first":
            roles["day_first"] = True
    if causes:
        roles["event_causes"] = tuple(causes)
    return roles


def test_every_demo_has_documented_roles():
    assert set(DEMOS) == set(data.DEMO_ROLES) and len(DEMOS) == 4


@pytest.mark.parametrize("name", DEMOS)
def test_demo_roles_are_the_documented_ones_and_the_command_runs(name):
    command = _documented_command(name)
    documented = _documented_roles(command)
    preset = data.DEMO_ROLES[name]
    applied = {k: tuple(map(str, v)) if k == "event_values" else v for k, v in preset.items()}
    applied["event_causes"] = tuple((str(v), c) for v, c in preset.get("event_causes", ()))
    assert {k: applied.get(k) for k in documented} == documented
    done = subprocess.run(
        [sys.executable, *command[1:]], cwd=ROOT, capture_output=True, text=True, timeout=300
    )
    assert done.returncode == 0 and not done.stderr, done.stderr


@pytest.mark.parametrize("name", DEMOS)
def test_each_demo_opens_on_its_roles_without_anything_to_fix(name):
    at = AppTest.from_file(ENTRY, default_timeout=240).run()
    at.button(key=f"import_demo_{Path(name).stem}_button").click().run()
    assert at.session_state[state.ROLES_PRESET] is True
    roles = at.session_state[state.ROLES]
    for field, value in data.DEMO_ROLES[name].items():
        assert getattr(roles, field) == value, field
    at.switch_page("views/column_roles.py").run()
    assert not at.exception and not at.error, [e.value for e in at.error]
