"""Creating a study folder: commented templates, an empty store and the pseudonym key."""
from __future__ import annotations

from importlib import resources
from pathlib import Path

from export.pseudonyms import create_secret_key
from observer_app.study.store import Store
from observer_app.study.folder import KEY_FILE, ROSTER_FILE, SCHEME_FILE, STORE_FILE, STUDY_FILE
from sync.errors import InputError

TEMPLATES = (STUDY_FILE, SCHEME_FILE, ROSTER_FILE)


def create_study(directory: Path) -> list[Path]:
    """Write the templates into a new or empty folder; refuse to overwrite a study."""
    directory = Path(directory)
    if directory.exists() and any(directory.iterdir()):
        raise InputError(directory, None, "folder is not empty; choose a new folder for the study")
    directory.mkdir(parents=True, exist_ok=True)
    (directory / "logs").mkdir()
    written = []
    for name in TEMPLATES:
        target = directory / name
        target.write_text(resources.files("observer_app.study.templates").joinpath(name).read_text(encoding="utf-8"),
                          encoding="utf-8")
        written.append(target)
    Store(directory / STORE_FILE).close()
    create_secret_key(directory / KEY_FILE)  # export/pseudonyms.py owns the key: 0o600, never replaced
    return written + [directory / STORE_FILE, directory / KEY_FILE]
