"""pyproject.toml lists its packages by name (so that the notebook door `fieldmark` can be
mapped from observer_app/python_api): a package folder missing from the list would be
left out of an installed fieldmark without any error at install time."""
from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
TOP = ("observer_app", "sync", "agreement", "export", "demo_sessions")


def test_every_package_folder_is_listed_in_pyproject():
    settings = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]
    mapped = {folder: name for name, folder in settings["package-dir"].items()}
    folders = {str(init.parent.relative_to(ROOT)) for top in TOP for init in (ROOT / top).rglob("__init__.py")}
    expected = {mapped.get(folder, folder.replace("/", ".")) for folder in folders}
    assert set(settings["packages"]) == expected
