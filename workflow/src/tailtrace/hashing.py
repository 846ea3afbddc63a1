"""Content hashes for files, logical tables and the package source."""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Iterable

__all__ = ["sha256_file", "sha256_text", "source_hash"]


def sha256_file(path: str | Path, chunk: int = 1 << 20) -> str:
    """Hex sha256 of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(chunk):
            digest.update(block)
    return digest.hexdigest()


def sha256_text(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def source_hash(paths: Iterable[str | Path]) -> str:
    """Short hash over the names and bytes of source files (order-independent)."""
    digest = hashlib.sha256()
    for p in sorted(Path(x) for x in paths):
        digest.update(p.name.encode())
        digest.update(p.read_bytes())
    return digest.hexdigest()[:16]
