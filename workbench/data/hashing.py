"""The one SHA-256 helper: table fingerprints, export manifests and reproduce checks use it."""

from __future__ import annotations

import hashlib
from pathlib import Path


def sha256_of(path: str | Path, chunk: int = 1 << 20) -> str:
    """SHA-256 hex digest of a file's bytes (FIPS 180-4, via :mod:`hashlib`), read in chunks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(chunk):
            h.update(block)
    return h.hexdigest()
