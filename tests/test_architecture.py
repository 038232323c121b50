"""The engine stays free of user-interface code; the command line starts without streamlit."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
FORBIDDEN = {"streamlit", "altair", "vl_convert"}


def _imported_top_level_modules(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module.split(".")[0])
    return names


def test_engine_imports_no_user_interface_library():
    offenders = {
        str(path.relative_to(ROOT)): sorted(_imported_top_level_modules(path) & FORBIDDEN)
        for path in (ROOT / "engine").rglob("*.py")
    }
    offenders = {k: v for k, v in offenders.items() if v}
    assert offenders == {}


def test_engine_import_does_not_load_streamlit():
    code = "import sys, engine, pkgutil, importlib\n"
    code += "for m in pkgutil.walk_packages(engine.__path__, 'engine.'):\n"
    code += "    importlib.import_module(m.name)\n"
    code += "print(sorted(n for n in ('streamlit', 'altair') if n in sys.modules))"
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True
    )
    assert out.stdout.strip() == "[]"


def test_command_line_start_up_does_not_import_streamlit():
    code = "import sys, app.cli; print('streamlit' in sys.modules)"
    out = subprocess.run(
        [sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True
    )
    assert out.stdout.strip() == "False"


def test_upload_limit_matches_the_engine_limit():
    import tomllib

    from engine.io.tables import DEFAULT_MAX_BYTES

    config = tomllib.loads((ROOT / ".streamlit" / "config.toml").read_text(encoding="utf-8"))
    assert config["server"]["maxUploadSize"] * 1024 * 1024 == DEFAULT_MAX_BYTES
    assert config["server"]["address"] == "127.0.0.1"
    assert config["browser"]["gatherUsageStats"] is False
    assert config["server"]["enableXsrfProtection"] is True
