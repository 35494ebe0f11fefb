"""Is scheme.toml still the scheme the store was coded with?  Compatibility, not identity.

Why not the scheme's hash: a changed label, key or colour changes the hash but not what
any stored code means, so refusing it blocks honest edits.  What breaks the data is a
code (or dimension) that was coded and is no longer in scheme.toml -- removed or
renamed: every stored use of it would silently drop out of agreement and export.  So
every verb that reads codes checks that each current code and adjudicated code is
still in the scheme, and refuses with the code, its count and what to do.  A rename or
a merge is a decision a person records (``fieldmark recode``), applied when codes are
read; the rows as coded stay in the audit trail.
"""
from __future__ import annotations

from observer_app.study.folder import SCHEME_FILE, Study
from observer_app.study.store import Store
from sync.errors import InputError


def check_scheme_binding(study: Study, store: Store) -> None:
    """InputError naming the first coded (dimension, code) that scheme.toml no longer has, with its count."""
    problem = scheme_problem(study, store)
    if problem is not None:
        raise problem


def scheme_fits_store(study: Study, store: Store) -> bool:
    """True when every code in the store is still in scheme.toml (resuming a session is then fine)."""
    return scheme_problem(study, store) is None


def scheme_problem(study: Study, store: Store) -> InputError | None:
    """The InputError ``check_scheme_binding`` would raise, or None."""
    trail = store.codes_log()
    current = trail.drop_duplicates(["observation_id", "dimension"], keep="last")
    used = store.apply_code_mappings(current.loc[current["code"].notna(), ["dimension", "code"]].copy())
    decisions = store.adjudications()[["dimension", "code"]]
    for frame, what in ((used, "coded"), (decisions, "adjudicated")):
        if frame.empty:
            continue
        counts = frame.astype(str).value_counts(sort=False).sort_index()
        allowed = {dimension.name: set(dimension.code_names) for dimension in study.scheme.dimensions}
        for (dimension, code), count in counts.items():
            if dimension not in allowed:
                return InputError(study.dir / SCHEME_FILE, f"dimension {dimension}",
                                  f"was {what} {count} times in the store but is not in scheme.toml; put the dimension "
                                 "back (labels, keys and colours may change, names may not)")
            if code not in allowed[dimension]:
                return InputError(study.dir / SCHEME_FILE, f"dimension {dimension}",
                                  f"code {code!r} was {what} {count} times in the store but is not in scheme.toml; put "
                                 "it back under its old name (labels, keys and colours may change, names may not), or "
                                 f"record a rename: fieldmark recode STUDY {dimension} {code} NEW_NAME")
    return None
