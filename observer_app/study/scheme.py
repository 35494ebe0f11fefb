"""The code scheme: dimensions, their codes and shortcut keys, and its content hash.

The hash is stored with every session and observation so that codes made under a
changed scheme can never be silently mixed with codes made under the old one.
"""
from __future__ import annotations

import hashlib
import json
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import TypeVar

from agreement.dimensions import LEVELS
from observer_app.study.tables import RESERVED_COLUMNS
from sync.errors import InputError

# A scheme codes categories: the first two of agreement's levels.  Interval and ratio
# stay for long-format CSVs whose codes are numbers (agreement/dimensions.py).
SCHEME_LEVELS: tuple[str, ...] = LEVELS[:2]
_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
_COLOUR = re.compile(r"^#[0-9A-Fa-f]{6}$")
_SCHEME_KEYS = {"name", "description"}
_DIMENSION_KEYS = {"name", "level", "could_not_observe", "codes", "description"}
_CODE_KEYS = {"name", "label", "key", "colour", "description"}


@dataclass(frozen=True)
class Code:
    name: str
    label: str
    key: str
    colour: str


@dataclass(frozen=True)
class SchemeDimension:
    """A dimension as the scheme file defines it (codes with labels, keys and colours);
    agreement/ sees it as agreement.dimensions.Dimension (pipeline/units.py)."""

    name: str
    level: str
    codes: tuple[Code, ...]
    could_not_observe: str

    @property
    def code_names(self) -> tuple[str, ...]:
        return tuple(code.name for code in self.codes)

    @property
    def observable_codes(self) -> tuple[str, ...]:
        """Codes in scheme order without the could-not-observe code (the order ordinal levels use)."""
        return tuple(c.name for c in self.codes if c.name != self.could_not_observe)

    def code(self, name: str) -> Code:
        return _named(self.codes, name)


@dataclass(frozen=True)
class Scheme:
    name: str
    dimensions: tuple[SchemeDimension, ...]
    content_hash: str

    @property
    def dimension_names(self) -> tuple[str, ...]:
        return tuple(d.name for d in self.dimensions)

    def dimension(self, name: str) -> SchemeDimension:
        return _named(self.dimensions, name)

    def key_map(self) -> dict[str, tuple[str, str]]:
        """Shortcut key -> (dimension, code)."""
        return {c.key: (d.name, c.name) for d in self.dimensions for c in d.codes}


_Named = TypeVar("_Named", Code, SchemeDimension)


def _named(items: tuple[_Named, ...], name: str) -> _Named:
    """The item called ``name`` (a code or a dimension); KeyError when there is none."""
    for item in items:
        if item.name == name:
            return item
    raise KeyError(name)


def load_scheme(path: str | Path) -> Scheme:
    """Read and validate scheme.toml; raise InputError naming the key and the fix."""
    path = Path(path)
    raw = read_toml(path)
    return parse_scheme(raw, path)


def read_toml(path: Path) -> dict:
    """TOML file -> dict, with a missing or malformed file as one InputError line."""
    if not path.exists():
        raise InputError(path, None, "file not found; run `fieldmark init DIR` to create a study folder")
    if not path.is_file():
        raise InputError(path, None, "is not a file; it must be the study's TOML file")
    try:
        # utf-8-sig: a byte order mark (some editors write one) is not part of the first key
        return tomllib.loads(path.read_text(encoding="utf-8-sig"))
    except tomllib.TOMLDecodeError as error:
        raise InputError(path, None, f"not valid TOML ({error}); fix the syntax at that line") from None
    except UnicodeDecodeError:
        raise InputError(path, None, "not UTF-8 text; save the file as UTF-8") from None
    except RecursionError:
        raise InputError(path, None, "nested too deeply to be a fieldmark file; remove the nested arrays") from None
    except OSError as error:
        raise InputError(path, None, f"cannot be read ({error.strerror}); check the file's permissions") from None


def _unknown(raw: dict, allowed: set[str], path: Path, where: str) -> None:
    unknown = sorted(set(raw) - allowed)
    if unknown:
        raise InputError(path, f"{where}{unknown[0]}", f"unknown key; allowed keys are {', '.join(sorted(allowed))}")


def _text(raw: dict, key: str, path: Path, where: str) -> str:
    value = raw.get(key)
    if not isinstance(value, str) or not value.strip():
        raise InputError(path, f"{where}{key}", "missing or empty; give a text value")
    return value


def parse_scheme(raw: dict, path: Path) -> Scheme:
    """Validated Scheme from the parsed TOML; the first problem found is reported."""
    _unknown(raw, {"scheme", "dimensions"}, path, "")
    header = raw.get("scheme", {})
    if not isinstance(header, dict):
        raise InputError(path, "scheme", "must be a table: [scheme]")
    _unknown(header, _SCHEME_KEYS, path, "scheme.")
    name = _text(header, "name", path, "scheme.")
    entries = raw.get("dimensions")
    if not isinstance(entries, list) or not entries:
        raise InputError(path, "dimensions", "no dimensions; add at least one [[dimensions]] block")
    dimensions: list[SchemeDimension] = []
    keys_seen: dict[str, str] = {}
    for index, entry in enumerate(entries, start=1):
        dimensions.append(_parse_dimension(entry, index, path, keys_seen))
    names = [d.name for d in dimensions]
    for dim_name in names:
        if names.count(dim_name) > 1:
            raise InputError(path, f"dimensions name = {dim_name!r}", "dimension name used twice; rename one")
    canonical = json.dumps(
        {"name": name, "dimensions": [
            {"name": d.name, "level": d.level, "could_not_observe": d.could_not_observe,
             "codes": [[c.name, c.label, c.key, c.colour] for c in d.codes]} for d in dimensions]},
        sort_keys=True, ensure_ascii=False,
    )
    content_hash = hashlib.sha256(canonical.encode("utf-8")).hexdigest()[:16]
    return Scheme(name=name, dimensions=tuple(dimensions), content_hash=content_hash)


def _parse_dimension(entry: object, index: int, path: Path, keys_seen: dict[str, str]) -> SchemeDimension:
    where = f"dimensions #{index} "
    if not isinstance(entry, dict):
        raise InputError(path, f"dimensions #{index}", "must be a [[dimensions]] table")
    _unknown(entry, _DIMENSION_KEYS, path, where)
    name = _text(entry, "name", path, where)
    where = f"dimension {name!r} "
    if not _NAME.match(name):
        raise InputError(path, f"{where}name", "use letters, digits and _ only, starting with a letter")
    if name in RESERVED_COLUMNS:
        raise InputError(path, f"{where}name", f"{name!r} is a reserved column name; choose another")
    level = entry.get("level", "nominal")
    if level not in SCHEME_LEVELS:
        raise InputError(path, f"{where}level", f"invalid level {level!r}; use one of {', '.join(SCHEME_LEVELS)}")
    raw_codes = entry.get("codes")
    if not isinstance(raw_codes, list) or len(raw_codes) < 2:
        raise InputError(path, f"{where}codes", "needs at least two [[dimensions.codes]] entries")
    codes: list[Code] = []
    for code_index, raw_code in enumerate(raw_codes, start=1):
        code_where = f"{where}code #{code_index} "
        if not isinstance(raw_code, dict):
            raise InputError(path, code_where.strip(), "must be a [[dimensions.codes]] table")
        _unknown(raw_code, _CODE_KEYS, path, code_where)
        code_name = _text(raw_code, "name", path, code_where)
        if not _NAME.match(code_name):
            raise InputError(path, f"{code_where}name", "use letters, digits and _ only, starting with a letter")
        if code_name in (c.name for c in codes):
            raise InputError(path, f"{code_where}name", f"duplicate code name {code_name!r}; rename one")
        key = _text(raw_code, "key", path, code_where)
        if len(key) != 1 or key.isspace():
            raise InputError(path, f"{code_where}key", "must be exactly one visible character")
        key = key.lower()
        if key in keys_seen:
            raise InputError(path, f"{code_where}key", f"shortcut {key!r} is already used by {keys_seen[key]}; choose another")
        keys_seen[key] = f"{name}.{code_name}"
        colour = raw_code.get("colour", "#8A8A8A")
        if not isinstance(colour, str) or not _COLOUR.match(colour):
            raise InputError(path, f"{code_where}colour", "use #RRGGBB, e.g. \"#5B8DB8\"")
        label = raw_code.get("label", code_name)
        if not isinstance(label, str) or not label.strip():
            raise InputError(path, f"{code_where}label", "give a text label")
        codes.append(Code(name=code_name, label=label, key=key, colour=colour))
    could_not_observe = entry.get("could_not_observe")
    if not isinstance(could_not_observe, str) or not could_not_observe:
        raise InputError(path, f"{where}could_not_observe",
                         "missing; name the code that means the learner could not be observed")
    if could_not_observe not in (c.name for c in codes):
        raise InputError(path, f"{where}could_not_observe",
                         f"{could_not_observe!r} is not one of this dimension's codes; add it or fix the name")
    return SchemeDimension(name=name, level=level, codes=tuple(codes), could_not_observe=could_not_observe)
