"""Remembered input checksums: equal to sha256sum, reused only while path, size, mtime and inode match."""

from __future__ import annotations

import os
import subprocess

import pytest

from favour_plugin.core import checksums


@pytest.fixture()
def cache(tmp_path, monkeypatch):
    """A cache file of the test's own, and a count of the digests actually computed."""
    monkeypatch.setenv("FAVOUR_CHECKSUM_CACHE", str(tmp_path / "cache" / "checksums.json"))
    checksums.forget()
    computed = []
    original = checksums.compute_digest
    monkeypatch.setattr(checksums, "compute_digest", lambda path: computed.append(path) or original(path))
    yield computed
    checksums.forget()


def test_digest_equals_sha256sum_and_is_remembered_across_processes(tmp_path, cache):
    """The digest is coreutils sha256sum's; a new process (cache re-read) does not read the file again."""
    path = tmp_path / "layer.tif"
    path.write_bytes(os.urandom(300_000))
    reference = subprocess.run(["sha256sum", str(path)], capture_output=True, text=True,
                               check=True).stdout.split()[0]
    assert checksums.file_digest(path) == reference
    checksums.forget()  # as a new process would: only the file remembers
    assert checksums.file_digest(path) == reference
    assert len(cache) == 1


def test_a_touched_file_is_hashed_again(tmp_path, cache):
    """A new modification time (same bytes) is not trusted: the file is read again."""
    path = tmp_path / "layer.tif"
    path.write_bytes(b"cells" * 1000)
    first = checksums.file_digest(path)
    stat = os.stat(path)
    os.utime(path, ns=(stat.st_atime_ns, stat.st_mtime_ns + 1_000_000_000))
    assert checksums.file_digest(path) == first
    assert len(cache) == 2


def test_a_replaced_file_is_hashed_again(tmp_path, cache):
    """Another file moved in under the same name, same size and time, is read again (its inode differs)."""
    path, other = tmp_path / "layer.tif", tmp_path / "other.tif"
    path.write_bytes(b"a" * 4096)
    other.write_bytes(b"b" * 4096)
    stat = os.stat(path)
    os.utime(other, ns=(stat.st_atime_ns, stat.st_mtime_ns))
    first = checksums.file_digest(path)
    os.replace(other, path)
    second = checksums.file_digest(path)
    assert second != first and len(cache) == 2


def test_a_rewritten_file_of_another_size_is_hashed_again(tmp_path, cache):
    """Bytes appended change the size: the file is read again and the new digest returned."""
    path = tmp_path / "layer.tif"
    path.write_bytes(b"x" * 100)
    first = checksums.file_digest(path)
    with open(path, "ab") as handle:
        handle.write(b"y")
    assert checksums.file_digest(path) != first and len(cache) == 2


def test_an_unwritable_cache_only_costs_time(tmp_path, monkeypatch):
    """With the cache file's folder blocked by a file, digests are still computed (and right)."""
    (tmp_path / "blocked").write_text("a file, not a folder")
    monkeypatch.setenv("FAVOUR_CHECKSUM_CACHE", str(tmp_path / "blocked" / "checksums.json"))
    checksums.forget()
    path = tmp_path / "layer.tif"
    path.write_bytes(b"z" * 10)
    assert checksums.file_digest(path) == checksums.compute_digest(path)
    checksums.forget()
