"""The checksum by which raw files are kept (no science, no third-party imports)."""

from __future__ import annotations

import hashlib


def sha256_hex(data: bytes) -> str:
    """Return the SHA-256 checksum of ``data`` as 64 lowercase hex digits."""
    return hashlib.sha256(data).hexdigest()
