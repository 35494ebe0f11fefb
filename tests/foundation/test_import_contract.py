"""The dependency direction of DESIGN.md ("Layout and dependency direction") holds in the code.

Every module of the five packages is parsed (not imported) and each import, at module
level or inside a function, is checked against the allowed direction.  A test, not a
convention: the first import against the direction fails here with its file and line.
"""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
PACKAGES = ("observer_app", "sync", "agreement", "export", "demo_sessions")

# package -> the project packages (or dotted modules) it may import besides itself.
ALLOWED: dict[str, tuple[str, ...]] = {
    "sync": (),
    "agreement": ("sync.errors", "sync.csv_header", "sync.plausible_values", "sync.json_numbers"),  # the error and the shared boundary checks
    "export": ("sync",),
    "observer_app": ("sync", "agreement", "export"),
    "demo_sessions": ("observer_app", "sync", "agreement", "export"),
}
QT_MODULES = ("PySide6", "PyQt5", "PyQt6", "shiboken6")
QT_ALLOWED = ("observer_app/ui/", "observer_app/commands/app.py")


def _imports(path: Path) -> list[tuple[int, tuple[str, ...]]]:
    """(line, names) per import; ``from a import b`` names both a and a.b (b may be a module)."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found += [(node.lineno, (alias.name,)) for alias in node.names]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            found += [(node.lineno, (node.module, f"{node.module}.{alias.name}")) for alias in node.names]
    return found


def _allowed(package: str, module: str) -> bool:
    top = module.split(".")[0]
    if top not in PACKAGES or top == package:
        return True
    return any(module == rule or module.startswith(rule + ".") for rule in ALLOWED[package])


def _sources() -> list[Path]:
    return sorted(path for package in PACKAGES for path in (ROOT / package).rglob("*.py"))


def test_every_project_import_follows_the_allowed_direction():
    wrong = [f"{path.relative_to(ROOT)}:{line} imports {names[-1]}"
             for path in _sources() for line, names in _imports(path)
             if not any(_allowed(path.relative_to(ROOT).parts[0], name) for name in names)]
    assert wrong == []


def test_qt_only_in_the_ui_room():
    wrong = [f"{path.relative_to(ROOT)}:{line} imports {module}"
             for path in _sources() for line, (module, *_) in _imports(path)
             if module.split(".")[0] in QT_MODULES
             and not str(path.relative_to(ROOT)).startswith(QT_ALLOWED)]
    assert wrong == []


@pytest.mark.parametrize("package, forbidden", [("observer_app", "demo_sessions"), ("sync", "export"),
                                                ("agreement", "export"), ("export", "agreement")])
def test_the_checker_would_catch_a_wrong_import(package, forbidden):
    """The rule itself can fail: an import against the direction is reported."""
    assert not _allowed(package, f"{forbidden}.anything")
