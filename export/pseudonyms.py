"""Keyed pseudonyms for learners, so exported windows cannot be traced back without the key.

A pseudonym is HMAC-SHA256 (RFC 2104, FIPS 198-1) of the roster learner id under the
study's secret key, shown as "p-" plus the first 16 hex digits (64 bits).  The same key
gives the same pseudonym in every export, so exports can be joined; another key gives
unrelated pseudonyms; without the key a plain hash of a guessed id does not match.
"""
from __future__ import annotations

import hashlib
import hmac
import os
import secrets
from pathlib import Path

import pandas as pd

from sync.errors import InputError

KEY_BYTES = 32
MINIMUM_KEY_BYTES = 16
PSEUDONYM_HEX_DIGITS = 16


def pseudonym(value: str, key: bytes) -> str:
    """The keyed pseudonym of one identifier."""
    digest = hmac.new(key, value.encode("utf-8"), hashlib.sha256).hexdigest()
    return "p-" + digest[:PSEUDONYM_HEX_DIGITS]


def pseudonymise(values: pd.Series, key: bytes) -> pd.Series:
    """Pseudonyms of a column; each distinct value is hashed once."""
    distinct = pd.unique(values.dropna().astype(str))
    mapping = {value: pseudonym(value, key) for value in distinct}
    return values.astype("string").map(mapping).astype("string")


def create_secret_key(path: Path) -> bool:
    """Write a new random key readable by the owner only (0o600); False if one exists.

    Never overwrites: replacing the key would silently change every pseudonym.
    """
    try:
        descriptor = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    except FileExistsError:
        return False
    try:
        os.fchmod(descriptor, 0o600)  # the umask cannot widen it
        os.write(descriptor, secrets.token_bytes(KEY_BYTES))
    finally:
        os.close(descriptor)
    return True


def read_secret_key(path: Path) -> bytes:
    """The study's key; a missing or too short key file is the user's to fix."""
    try:
        key = Path(path).read_bytes()
    except FileNotFoundError:
        raise InputError(path, None, "secret key missing; pseudonymous export needs the study's secret.key "
                         "(fieldmark init creates it), or pass --keep-ids to export raw ids") from None
    except OSError as error:
        raise InputError(path, None, f"secret key cannot be read ({error.strerror}); it must be the file "
                         "fieldmark init wrote, restored from the study's backup") from None
    if len(key) < MINIMUM_KEY_BYTES:
        raise InputError(path, None, f"secret key has {len(key)} bytes, needs at least {MINIMUM_KEY_BYTES}")
    if len(set(key)) == 1:
        # A key of one repeated byte (a zeroed or placeholder file) makes every pseudonym guessable.
        raise InputError(path, None, f"secret key is {len(key)} copies of byte {key[0]}, not a random key; "
                         "restore the study's real secret.key from its backup")
    return key
