"""The records package as installed: its migrations travel as package data, and it keeps
to its room (no web framework, no HTTP, CLI or report code)."""

from __future__ import annotations

import ast
import json
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
PACKAGE = ROOT / "service" / "records"
FORBIDDEN = ("flask", "service.http", "service.cli", "service.report", "service.api",
             "service.app", "service.pipeline", "werkzeug")


def test_an_installed_copy_upgrades_a_database(tmp_path: Path) -> None:
    # setuptools' build_py lays out what a wheel holds (packages and package data); a
    # child interpreter that imports that copy creates the schema with it.
    build = tmp_path / "build"
    subprocess.run([sys.executable, "-W", "ignore", "-c",
                    "import sys; sys.argv = ['setup.py', '-q', 'build_py', '-d', sys.argv[1]];"
                    " from setuptools import setup; setup()", str(build)],
                   cwd=ROOT, check=True, capture_output=True, timeout=120)
    shipped = sorted(p.relative_to(build).as_posix()
                     for p in (build / "service/records/migrations").rglob("*") if p.is_file())
    assert shipped == ["service/records/migrations/__init__.py",
                       "service/records/migrations/alembic.ini",
                       "service/records/migrations/env.py",
                       "service/records/migrations/script.py.mako",
                       "service/records/migrations/versions/0001_decision_log.py"]
    code = ("import json, sys, service.records.migrate as m\n"
            "from service.records.store import make_engine\n"
            "status = m.upgrade(make_engine(sys.argv[1]))\n"
            "print(json.dumps([m.__file__, status.current, status.at_head]))\n")
    done = subprocess.run([sys.executable, "-c", code, f"sqlite:///{tmp_path / 'db.sqlite3'}"],
                          cwd=tmp_path, env={"PYTHONPATH": str(build), "PATH": "/usr/bin:/bin"},
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    module, current, at_head = json.loads(done.stdout)
    assert Path(module).is_relative_to(build), "the child imported the checkout, not the copy"
    assert (current, at_head) == ("0001", True)


def _imports(path: Path) -> set[str]:
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.add(node.module)
    return found


def test_the_records_room_imports_no_transport_or_report_code() -> None:
    modules = sorted(PACKAGE.rglob("*.py"))
    assert len(modules) >= 12
    for module in modules:
        bad = {m for m in _imports(module)
               if any(m == f or m.startswith(f + ".") for f in FORBIDDEN)}
        assert not bad, f"{module.relative_to(ROOT)} imports {sorted(bad)}"
