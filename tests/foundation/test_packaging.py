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


def test_every_data_file_in_a_package_is_installed():
    """A template or data file outside pyproject's package-data globs would be missing from
    an installed fieldmark (the tests, run from the source tree, would not notice)."""
    import re

    def installed(relative: str, glob: str) -> bool:  # setuptools globs: "*" stays within one folder
        if glob.endswith("/**/*"):
            return relative.startswith(glob[:-4])
        return re.fullmatch(re.escape(glob).replace(r"\*", "[^/]*"), relative) is not None

    settings = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]
    mapped = {name: folder for name, folder in settings["package-dir"].items()}
    folders = {name: ROOT / mapped.get(name, name.replace(".", "/")) for name in settings["packages"]}
    patterns = settings["package-data"]
    missing = []
    for name, folder in folders.items():
        globs = patterns.get("*", []) + patterns.get(name, [])
        for path in folder.rglob("*"):
            inside = path.relative_to(folder)
            if (path.is_dir() or path.suffix in (".py", ".pyc") or "__pycache__" in inside.parts
                    or any((folder / part).joinpath("__init__.py").exists() for part in inside.parts[:1]
                           if (folder / part).is_dir())):
                continue  # code, or a file of a sub-package (checked as its own package)
            if not any(installed(inside.as_posix(), glob) for glob in globs):
                missing.append(str(path.relative_to(ROOT)))
    assert missing == []
