"""A hand-written CSV's header, checked before pandas reads the file.

Why: pandas renames a repeated column ("activity", "activity.1") and reads on, so a file
with two columns of the same name would be used half, silently.  A person must say
which column is meant.
"""
from __future__ import annotations

import csv
from pathlib import Path

from sync.errors import InputError


def check_header(path: Path, encoding: str = "utf-8-sig") -> None:
    """InputError when a column name appears twice in the first line (names compared stripped)."""
    try:
        with open(path, encoding=encoding, newline="") as handle:
            first = handle.readline()
    except UnicodeDecodeError:
        return  # the reader reports the encoding with its own message
    names = [name.strip() for name in next(csv.reader([first]), [])]
    seen: set[str] = set()
    for name in names:
        if name in seen and name:
            raise InputError(path, "header", f"column {name!r} appears twice; rename or remove one of them")
        seen.add(name)
