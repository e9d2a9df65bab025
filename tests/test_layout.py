"""The rooms of the code and which may import which (DEVELOPERS.md, "Layout").

Read from the sources with ``ast``, function-level imports included, so a rule cannot be
broken by an import tucked inside a function. Data flows one way, request -> schema ->
network -> engine -> certificate -> answer -> independent check -> record, and so do the
imports: a room may import only the rooms listed for it below, never one above it.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

#: Each room and the rooms it may import (its own included).
ALLOWED: dict[str, set[str]] = {
    "base": {"base"},                                   # errors.py, settings.py, __version__
    "schemas": {"base", "schemas"},
    "network": {"base", "schemas", "network"},
    "check": {"base", "schemas", "network", "check"},
    "solve": {"base", "schemas", "network", "check", "solve"},
    "records": {"base", "schemas", "network", "check", "records"},
    "report": {"base", "schemas", "network", "check", "solve", "report"},
    "http": {"base", "schemas", "network", "check", "solve", "records", "report", "http"},
    "app": {"base", "schemas", "network", "check", "solve", "records", "report", "http",
            "app"},
    "cli": {"base", "schemas", "network", "check", "solve", "records", "report", "http",
            "app", "cli"},
}

#: Third-party packages only some rooms may import: the web framework stays at the HTTP
#: edge, the database behind the store's interface.
CONFINED = {
    "flask": {"http", "app"},
    "werkzeug": {"http", "app"},
    "sqlalchemy": {"records", "cli"},
    "alembic": {"records", "cli"},
    "psycopg": {"records"},
}


def room_of(module: str) -> str | None:
    """The room of a dotted module name of this project, or None for anything else."""
    parts = module.split(".")
    if parts[0] == "schemas":
        return "schemas"
    if parts[0] != "service":
        return None
    if len(parts) == 1 or parts[1] in ("errors", "settings") or parts[1].startswith("__"):
        return "base"
    return parts[1] if parts[1] in ALLOWED else None


def _sources() -> list[tuple[str, Path]]:
    found = []
    for top in ("service", "schemas"):
        for path in sorted((ROOT / top).rglob("*.py")):
            parts = path.relative_to(ROOT).with_suffix("").parts
            if parts[-1] == "__init__":
                parts = parts[:-1]
            found.append((".".join(parts), path))
    return found


def _imports(module: str, path: Path) -> list[tuple[int, str]]:
    """(line, dotted name) of every import in the file, relative ones resolved."""
    tree = ast.parse(path.read_text(encoding="utf-8"), str(path))
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out.extend((node.lineno, alias.name) for alias in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")[: len(package.split(".")) - node.level + 1]
                base = ".".join([*anchor, base] if base else anchor)
            # ``from service import x``: x may be a module of its own room
            names = [f"{base}.{alias.name}" for alias in node.names] if base in (
                "service", "schemas") else [base]
            out.extend((node.lineno, name) for name in names)
    return out


SOURCES = _sources()


def test_every_module_lies_in_a_room():
    strays = [m for m, _ in SOURCES if room_of(m) is None]
    assert not strays, f"modules outside every room: {strays}"
    # every folder of service/ is a room the rules name (a new folder must be placed)
    folders = {p.name for p in (ROOT / "service").iterdir()
               if p.is_dir() and (p / "__init__.py").exists()}
    assert folders <= set(ALLOWED), f"rooms without rules: {folders - set(ALLOWED)}"


@pytest.mark.parametrize("module,path", SOURCES, ids=[m for m, _ in SOURCES])
def test_imports_follow_the_flow(module, path):
    room = room_of(module)
    assert room is not None
    broken = []
    for line, name in _imports(module, path):
        target = room_of(name)
        top = name.split(".")[0]
        if target is not None and target not in ALLOWED[room]:
            broken.append(f"line {line}: {room} imports {name} ({target})")
        if top in CONFINED and room not in CONFINED[top]:
            broken.append(f"line {line}: {room} imports {top}")
    assert not broken, f"{path.relative_to(ROOT)}: " + "; ".join(broken)


def test_the_checker_shares_no_code_with_the_solving_core():
    # The rule the verifier's independence rests on, said on its own.
    for module, path in SOURCES:
        if room_of(module) == "check":
            assert not [n for _, n in _imports(module, path) if room_of(n) == "solve"], module


def test_the_rules_are_a_one_way_order():
    # No two rooms may import each other: that would be a cycle, data flowing back.
    for room, allowed in ALLOWED.items():
        for other in allowed - {room}:
            assert room not in ALLOWED[other], f"{room} and {other} import each other"


@pytest.mark.parametrize("module,path", SOURCES, ids=[m for m, _ in SOURCES])
def test_modules_stay_small(module, path):
    # Split by concern before a module outgrows one reading (DEVELOPERS.md, "Style").
    lines = len(path.read_text(encoding="utf-8").splitlines())
    assert lines <= 450, f"{path.relative_to(ROOT)} has {lines} lines"


def test_a_violation_would_be_found(tmp_path):
    # The reader itself: a function-level Flask import in the checker is caught.
    bad = tmp_path / "bad.py"
    bad.write_text("def f():\n    from flask import request\n    import service.solve.paths\n")
    names = [n for _, n in _imports("service.check.bad", bad)]
    assert names == ["flask", "service.solve.paths"]
    assert room_of("service.solve.paths") not in ALLOWED["check"]
    assert "check" not in CONFINED["flask"]
