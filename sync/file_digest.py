"""The one way a file's bytes are hashed: the log cache's keys, export manifests and imports."""
from __future__ import annotations

import hashlib
from pathlib import Path


def file_sha256(path: Path) -> str:
    """Hex SHA-256 of a file's bytes, read in blocks (logs can be large)."""
    with open(path, "rb") as handle:
        return hashlib.file_digest(handle, "sha256").hexdigest()
