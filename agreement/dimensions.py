"""What agreement needs to know about a coded dimension: its codes, order and level.

The study's scheme (observer_app) and the long-format CSV reader both turn what they
know into ``Dimension``; agreement never reads a scheme file itself.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

LEVELS: tuple[str, ...] = ("nominal", "ordinal", "interval", "ratio")


@dataclass(frozen=True)
class Dimension:
    """One coded dimension.

    ``codes`` are in the scheme's order (lowest first for ordinal and above);
    ``could_not_observe`` is the code meaning "could not be observed" (None when the
    scheme has none).  ``values`` are the numbers interval and ratio alpha use: the
    code names themselves when every name is a number, else the ranks 1..k.
    """

    name: str
    level: str
    codes: tuple[str, ...]
    could_not_observe: str | None = None

    def compared_codes(self, include_could_not_observe: bool) -> tuple[str, ...]:
        """The categories the figures are computed over."""
        if include_could_not_observe or self.could_not_observe is None:
            return self.codes
        return tuple(code for code in self.codes if code != self.could_not_observe)

    def levels_reported(self) -> tuple[str, ...]:
        """Alpha is reported at the dimension's level and every weaker one."""
        return LEVELS[: LEVELS.index(self.level) + 1]

    def is_ordered(self) -> bool:
        return self.level != "nominal"


def code_values(codes: tuple[str, ...]) -> np.ndarray:
    """Numbers for interval/ratio differences: the code names if all are numbers, else ranks."""
    try:
        return np.array([float(code) for code in codes], dtype=float)
    except ValueError:
        return np.arange(1, len(codes) + 1, dtype=float)
