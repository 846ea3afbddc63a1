"""Content-addressed copies of the files a run read: inputs survive later edits."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

from .hashing import sha256_file

__all__ = ["ARCHIVE_DIR", "archive_dir_for", "archived_path", "archive_file", "recorded_copy"]

ARCHIVE_DIR = "archive"


def archive_dir_for(db_path: str | Path) -> Path:
    """The store beside a risk database: ``<results>/archive``."""
    return Path(db_path).parent / ARCHIVE_DIR


def archived_path(store: str | Path, sha256: str) -> Path:
    """Where the bytes with this sha256 live in the store (``<store>/<sha256>``)."""
    return Path(store) / sha256


def archive_file(path: str | Path, sha256: str, store: str | Path) -> tuple[Path | None, str]:
    """Copy ``path`` into the store under its sha256, if it still has that content.

    Parameters
    ----------
    path : the file as the run read it
    sha256 : its hash as recorded when the step read it
    store : the archive folder

    Returns
    -------
    (archived path or None, note): None with the reason when the file is gone
    or no longer has the recorded content (it changed after the step read it).

    Notes
    -----
    A copy, not a hard link: an in-place edit of the live file must not change
    the archived bytes. Copies are written to a temporary name, checked and
    renamed, so a crash never leaves a partial file under a hash name; they are
    made read-only.
    """
    target = archived_path(store, sha256)
    if target.exists():
        return target, "already archived"
    source = Path(path)
    if not source.is_file():
        return None, f"not archived: {source} no longer exists"
    Path(store).mkdir(parents=True, exist_ok=True)
    tmp = target.with_name(f".{sha256}.{os.getpid()}.partial")
    shutil.copyfile(source, tmp)
    found = sha256_file(tmp)
    if found != sha256:
        tmp.unlink()
        return None, f"not archived: {source} changed after it was read (sha256 now {found})"
    os.chmod(tmp, 0o444)
    os.replace(tmp, target)
    return target, "archived"


def recorded_copy(path: str | Path, sha256: str, store: str | Path | None) -> tuple[Path | None, str]:
    """A file holding exactly the recorded bytes, or None.

    Tries the archived copy first (checked against its name), then the live
    file (if it still has the recorded hash).

    Returns
    -------
    (path or None, where it came from: "archive", "live" or the reason none fits)
    """
    reasons = []
    if store is not None:
        copy = archived_path(store, sha256)
        if copy.is_file():
            if sha256_file(copy) == sha256:
                return copy, "archive"
            reasons.append(f"archived copy {copy} is corrupt")
        else:
            reasons.append("not in the archive")
    live = Path(path)
    if live.is_file():
        if sha256_file(live) == sha256:
            return live, "live"
        reasons.append(f"{live} has changed")
    else:
        reasons.append(f"{live} is missing")
    return None, "; ".join(reasons)
