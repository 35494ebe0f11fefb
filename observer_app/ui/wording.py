"""Small pieces of English the screens share."""
from __future__ import annotations


def counted(number: int, plural: str) -> str:
    """"1 window", "2 windows", "0 sync marks": a count with its noun (an English plural in -s)."""
    return f"{number} {plural[:-1] if number == 1 else plural}"
