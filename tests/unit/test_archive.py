"""The content-addressed archive of a run's inputs."""

from __future__ import annotations

import hashlib
import stat

from tailtrace.archive import archive_file, archived_path, recorded_copy


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()  # hashlib as the independent reference


def test_archive_copies_under_the_hash_read_only(tmp_path):
    src = tmp_path / "prices.csv"
    src.write_bytes(b"date,instrument,close\n2024-01-02,EQ.A,1.5\n")
    sha = _sha(src.read_bytes())
    store = tmp_path / "archive"
    copy, note = archive_file(src, sha, store)
    assert copy == archived_path(store, sha) == store / sha and note == "archived"
    assert copy.read_bytes() == src.read_bytes()
    assert not copy.stat().st_mode & (stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH)
    src.write_bytes(b"edited in place")  # a copy, not a link: the archive keeps the old bytes
    assert copy.read_bytes().startswith(b"date,instrument")
    assert archive_file(src, sha, store) == (copy, "already archived")
    assert not list(store.glob(".*partial"))


def test_archive_refuses_content_that_changed_since_it_was_read(tmp_path):
    src = tmp_path / "positions.csv"
    src.write_bytes(b"new content")
    copy, note = archive_file(src, _sha(b"old content"), tmp_path / "archive")
    assert copy is None and "changed after it was read" in note and _sha(b"new content") in note
    assert not any((tmp_path / "archive").iterdir())
    copy, note = archive_file(tmp_path / "gone.csv", _sha(b"x"), tmp_path / "archive")
    assert copy is None and "no longer exists" in note


def test_recorded_copy_prefers_the_archive_and_detects_corruption(tmp_path):
    live = tmp_path / "fx.csv"
    live.write_bytes(b"v1")
    sha = _sha(b"v1")
    store = tmp_path / "archive"
    assert recorded_copy(live, sha, store) == (live, "live")
    archive_file(live, sha, store)
    live.write_bytes(b"v2")
    assert recorded_copy(live, sha, store) == (store / sha, "archive")
    (store / sha).chmod(0o644)
    (store / sha).write_bytes(b"bitrot")
    path, why = recorded_copy(live, sha, store)
    assert path is None and "corrupt" in why and "has changed" in why
    live.write_bytes(b"v1")
    assert recorded_copy(live, sha, store) == (live, "live")
    live.unlink()
    assert "missing" in recorded_copy(live, sha, None)[1]
