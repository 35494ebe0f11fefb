"""Keyed pseudonyms: HMAC-SHA256 against Python's hmac module and RFC 4231's test vector."""
from __future__ import annotations

import hashlib
import hmac
import stat

import pandas as pd
import pytest

from export.pseudonyms import create_secret_key, pseudonym, pseudonymise, read_secret_key
from sync.errors import InputError


def test_pseudonym_is_hmac_sha256_as_in_rfc_4231() -> None:
    # RFC 4231 section 4.3 (test case 2): key "Jefe", data "what do ya want for nothing?",
    # HMAC-SHA-256 = 5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843
    assert pseudonym("what do ya want for nothing?", b"Jefe") == "p-5bdcc146bf60754e"


def test_pseudonym_equals_pythons_hmac_module() -> None:
    key = bytes(range(32))
    for learner in ["L01", "L02", "Zoë", "n-0001"]:
        expected = hmac.new(key, learner.encode("utf-8"), hashlib.sha256).hexdigest()[:16]
        assert pseudonym(learner, key) == "p-" + expected


def test_pseudonyms_are_stable_and_differ_under_another_key() -> None:
    learners = pd.Series(["L01", "L02", "L01", None])
    first = pseudonymise(learners, b"a" * 32)
    again = pseudonymise(learners, b"a" * 32)
    other = pseudonymise(learners, b"b" * 32)
    pd.testing.assert_series_equal(first, again)
    assert first[0] == first[2] and first[0] != first[1]
    assert pd.isna(first[3])
    assert not set(first.dropna()) & set(other.dropna())


def test_secret_key_is_owner_only_and_never_replaced(tmp_path) -> None:
    path = tmp_path / "secret.key"
    assert create_secret_key(path) is True
    assert stat.S_IMODE(path.stat().st_mode) == 0o600
    key = read_secret_key(path)
    assert len(key) == 32
    assert create_secret_key(path) is False
    assert read_secret_key(path) == key
    other = tmp_path / "other.key"
    create_secret_key(other)
    assert read_secret_key(other) != key


def test_missing_or_short_key_is_a_user_error(tmp_path) -> None:
    with pytest.raises(InputError, match="secret key missing"):
        read_secret_key(tmp_path / "secret.key")
    (tmp_path / "short.key").write_bytes(b"abc")
    with pytest.raises(InputError, match="3 bytes"):
        read_secret_key(tmp_path / "short.key")
