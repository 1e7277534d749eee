"""SHA-256 of input files, remembered so a re-run does not read gigabytes again.

Every lineage carries the SHA-256 of every input. Reading a large input only
to hash it competes with the evaluation for the disk and the cores, and a
re-run, a quick look or a Monte Carlo over the same layers would hash the
same bytes again. So each digest is remembered by the file's path, size,
modification time (ns), inode and device, in a small JSON file beside the
user's configuration (``$XDG_CONFIG_HOME/favour/checksums.json``, or the file
named by ``FAVOUR_CHECKSUM_CACHE``). A remembered digest is used only when
all five still match; any difference (the file touched, rewritten, replaced
by another file of the same name) and it is computed again. The cache is a
convenience: if it cannot be read or written, digests are simply computed.
"""

from __future__ import annotations

import hashlib
import json
import os
import threading
import time
from pathlib import Path

#: Entries kept; the least recently used go first.
MAX_ENTRIES = 5000
_CHUNK = 4 * 1024 * 1024
_lock = threading.Lock()
_memory: dict[str, dict] | None = None
_memory_from: str | None = None


def cache_file() -> Path:
    """Return the file the digests are remembered in."""
    named = os.environ.get("FAVOUR_CHECKSUM_CACHE")
    if named:
        return Path(named)
    config = os.environ.get("XDG_CONFIG_HOME") or os.path.join(os.path.expanduser("~"), ".config")
    return Path(config) / "favour" / "checksums.json"


def compute_digest(path: str | os.PathLike, chunk: int = _CHUNK) -> str:
    """Return the SHA-256 hex digest of a file, read in chunks (no cache)."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        while block := handle.read(chunk):
            digest.update(block)
    return digest.hexdigest()


def _identity(stat: os.stat_result) -> list:
    return [stat.st_size, stat.st_mtime_ns, stat.st_ino, stat.st_dev]


def _load() -> dict[str, dict]:
    """Return the remembered entries (read once per process and cache file)."""
    global _memory, _memory_from
    where = str(cache_file())
    if _memory is None or _memory_from != where:
        try:
            data = json.loads(Path(where).read_text(encoding="utf-8"))
            entries = data.get("entries", {}) if isinstance(data, dict) else {}
            _memory = {k: v for k, v in entries.items() if isinstance(v, dict)}
        except (OSError, ValueError):
            _memory = {}
        _memory_from = where
    return _memory


def _save(entries: dict[str, dict]) -> None:
    """Write the entries atomically, newest first, at most ``MAX_ENTRIES``; failures are ignored."""
    target = cache_file()
    kept = dict(sorted(entries.items(), key=lambda item: -item[1].get("used", 0))[:MAX_ENTRIES])
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        tmp = target.with_name(f".{target.name}.{os.getpid()}.partial")
        tmp.write_text(json.dumps({"format": "favour-checksums", "version": 1, "entries": kept}),
                       encoding="utf-8")
        os.replace(tmp, target)
    except OSError:
        pass


def file_digest(path: str | os.PathLike) -> str:
    """Return a file's SHA-256, from the cache when path, size, mtime, inode and device all match.

    Raises
    ------
    OSError
        The file cannot be read (as :func:`compute_digest`).
    """
    key = os.path.abspath(os.fspath(path))
    stat = os.stat(key)
    identity = _identity(stat)
    with _lock:
        entry = _load().get(key)
        if entry is not None and entry.get("identity") == identity and isinstance(entry.get("sha256"), str):
            entry["used"] = time.time()
            return entry["sha256"]
    digest = compute_digest(key)
    if _identity(os.stat(key)) != identity:
        return digest  # changed while being read: do not remember a digest of a moving target
    with _lock:
        entries = _load()
        entries[key] = {"identity": identity, "sha256": digest, "used": time.time()}
        _save(entries)
    return digest


def forget() -> None:
    """Drop what this process remembers (the file stays); the next digest reads the cache file again."""
    global _memory
    with _lock:
        _memory = None
