"""Which roster attributes may leave the study: an allow-list, checked before export.

Why an allow-list: a roster column added for the coders' convenience (a name, an
e-mail, a seat) would otherwise flow into every exported file.  Only columns the user
names (``--attribute site`` or ``[export] attributes`` in study.toml) are exported, and
each is refused when its values look like identifiers (an e-mail address, or any
learner id, label or log id of the roster) or when a value is held by fewer than
MINIMUM_LEARNERS learners among the exported ones (a small cell singles a learner out).
An attribute whose name collides with an export column is exported under a prefix.
"""
from __future__ import annotations

from collections.abc import Iterable, Sequence

import pandas as pd

from export.tables import LEARNER, ROSTER_PRIVATE_COLUMNS
from sync.errors import InputError

MINIMUM_LEARNERS = 5
PREFIX = "attribute_"
_EMAIL = r"[^@\s]+@[^@\s]+\.[^@\s]+"


def check_attributes(roster: pd.DataFrame, wanted: Sequence[str], exported_learners: Iterable[str]) -> None:
    """InputError for a requested attribute that is unknown, private, identifying or has a small cell."""
    learners = pd.Index(pd.unique(pd.Series(list(exported_learners), dtype="string")))
    identifiers = set()
    for column in ROSTER_PRIVATE_COLUMNS:
        if column in roster:
            identifiers |= set(roster[column].dropna().astype(str).str.strip()) - {""}
    for name in wanted:
        if name in ROSTER_PRIVATE_COLUMNS:
            raise InputError("roster.csv", f"column {name}", "identifies learners and is never exported as an "
                             "attribute; the export's learner column is its pseudonym")
        if name not in roster.columns:
            attributes = [c for c in roster.columns if c not in ROSTER_PRIVATE_COLUMNS]
            raise InputError("roster.csv", f"column {name}", f"no such column; its attribute columns are "
                             f"{', '.join(attributes) or 'none'}")
        values = roster[name].astype("string").fillna("").str.strip()
        looks = values.str.fullmatch(_EMAIL) | (values.isin(identifiers) & values.ne(""))
        if looks.any():
            kind = "an e-mail address" if values[looks].iloc[0].count("@") else "a learner id, label or log id"
            raise InputError("roster.csv", f"column {name}, learner {roster[LEARNER].iloc[int(looks.to_numpy().argmax())]}",
                             f"value looks like {kind}; identifying columns are never exported -- leave "
                             f"{name} out of the export's attributes")
        held = roster.assign(_value=values).set_index(LEARNER).reindex(learners)["_value"].dropna()
        counts = held.value_counts()
        small = counts[counts < MINIMUM_LEARNERS]
        if len(small):
            raise InputError("roster.csv", f"column {name}",
                             f"value {small.index[0]!r} is held by {int(small.iloc[0])} exported learners, fewer than "
                             f"{MINIMUM_LEARNERS}, which can single a learner out; merge small groups or leave {name} "
                             "out of the export's attributes")


def attribute_names(wanted: Sequence[str], taken: Iterable[str]) -> dict[str, str]:
    """roster column -> exported column name; a name the export already uses gets PREFIX."""
    taken = set(taken)
    return {name: PREFIX + name if name in taken else name for name in wanted}
