"""Outputs that never cost the user a file: kept apart from the inputs, locked, put in place together.

Every job that writes goes through three steps, all before or after the
long work and never in the middle of it:

1. :func:`check_apart` — before any work, refuse an output that is, or
   resolves to (through a symbolic or hard link, a relative path or letter
   case on a case-blind disk), a file the job reads, and two outputs that are
   one file. The message names both.
2. :class:`OutputLock` — before any work, take a lock beside each output so a
   second run aimed at the same file is refused at once, naming the run that
   holds it, instead of racing the first to the final name.
3. :class:`OutputSet` — every file is written under a hidden temporary name
   beside its final name (same folder, so the rename is atomic), and
   :meth:`OutputSet.commit` puts them all in place together. A file already
   under a final name is hard-linked aside first; if any step of the commit
   fails, every final name gets its earlier file back. On failure or cancel,
   :meth:`OutputSet.abort` removes every temporary file and every folder the
   job created that is still empty.

Temporary names are ``.<final name>.favour-XXXXXXXX.partial<suffix>`` (the
job's work folder is ``….partial-work`` after its first output) and earlier
files set aside are ``.<final name>.favour-XXXXXXXX.previous``. A run
that was killed outright can leave them; the next run that takes the lock on
that output tidies them (:func:`recover`): partial files go, and an earlier
file set aside comes back if its final name is empty.
"""

from __future__ import annotations

import datetime as _dt
import os
import platform
import re
import secrets
import shutil
import socket
import tempfile
from collections.abc import Iterable, Sequence

import numpy as np
from osgeo import gdal

from .. import about
from ..core import lineage as lin
from ..core.errors import OutputError
from ..core.lineage import lineage_path, lineage_text

try:  # POSIX: advisory locks released by the system when a process dies
    import fcntl
except ImportError:  # Windows: the lock file's existence is the lock
    fcntl = None

TAG = ".favour-"
_MARK = re.compile(r"\.favour-[A-Za-z0-9_]{8}\.(partial|previous)")


# -- 1. outputs apart from inputs ------------------------------------------------------


def _identity(path: str) -> tuple:
    """Return what makes two names one file: device and inode if it exists, else its real path."""
    real = os.path.realpath(path)
    try:
        stat = os.stat(real)
    except OSError:
        return ("path", os.path.normcase(real))
    return ("file", stat.st_dev, stat.st_ino)


def check_apart(outputs: Sequence[tuple[str, str]], inputs: Sequence[tuple[str, str]]) -> None:
    """Refuse outputs that are one of the inputs, or one another.

    Parameters
    ----------
    outputs : sequence of (label, path)
        Every file the job will write, sidecars included (lineage, style).
    inputs : sequence of (label, path)
        Every file the job reads (for a GDAL dataset, each file it opens).

    Raises
    ------
    OutputError
        An output is (or resolves to) an input, or two outputs are one
        file; the message names both, with their labels.
    """
    seen_inputs = {}
    for label, path in inputs:
        seen_inputs.setdefault(_identity(path), (label, path))
    seen_outputs: dict[tuple, tuple[str, str]] = {}
    for label, path in outputs:
        key = _identity(path)
        if key in seen_inputs:
            in_label, in_path = seen_inputs[key]
            how = "" if os.path.abspath(path) == os.path.abspath(in_path) else \
                f" (it resolves to {in_path})"
            raise OutputError(
                f"the output {path} ({label}) is a file this job reads: {in_label}{how}. "
                "Favour never writes over its own inputs; choose another output name")
        if key in seen_outputs:
            other_label, other_path = seen_outputs[key]
            raise OutputError(f"two outputs are the same file: {other_path} ({other_label}) and "
                              f"{path} ({label}); give each its own name")
        seen_outputs[key] = (label, path)


# -- 2. one run per output --------------------------------------------------------------


def lock_path(final: str) -> str:
    """Return the lock file that guards the output ``final``."""
    folder, name = os.path.split(os.path.abspath(final))
    return os.path.join(folder, f".{name}{TAG}lock")


class OutputLock:
    """Locks beside a job's outputs; a second job aimed at a locked output is refused.

    On POSIX the lock is ``flock`` on the lock file, which the system drops
    when a process dies, so a crashed run never blocks the next one. The
    lock file holds the process, host and start time, for the message.

    Use as a context manager, or call :meth:`acquire` and :meth:`release`.
    """

    def __init__(self, finals: Iterable[str]) -> None:
        self.finals = sorted({os.path.abspath(f) for f in finals})
        self._held: list[tuple[str, int]] = []

    def __enter__(self) -> OutputLock:
        self.acquire()
        return self

    def __exit__(self, *exc) -> None:
        self.release()

    def acquire(self) -> None:
        """Take every lock, tidy what a killed run left beside each output, or take none.

        Raises
        ------
        OutputError
            Another run holds one of the locks (the message names it), or a
            lock file cannot be made in the output's folder.
        """
        try:
            for final in self.finals:
                self._held.append((final, _take(final)))
                recover(final)
        except BaseException:
            self.release()
            raise

    def release(self) -> None:
        """Drop every lock this object holds and remove the lock files."""
        while self._held:
            final, handle = self._held.pop()
            path = lock_path(final)
            try:
                os.unlink(path)  # while still holding it, so no one locks a file about to vanish
            except OSError:
                pass
            os.close(handle)


def _holder(path: str) -> str:
    """Return who holds a lock, as written in its lock file."""
    try:
        with open(path, encoding="utf-8", errors="replace") as handle:
            text = handle.read(200).strip()
    except OSError:
        text = ""
    return f" ({text})" if text else ""


def _take(final: str) -> int:
    """Lock ``final``'s lock file and return its descriptor, or raise OutputError naming the holder."""
    path = lock_path(final)
    for _ in range(10):
        try:
            flags = os.O_RDWR | os.O_CREAT | (os.O_EXCL if fcntl is None else 0)
            handle = os.open(path, flags, 0o644)
        except FileExistsError:  # no fcntl: the file itself is the lock
            raise OutputError(f"another Favour run is writing {final}{_holder(path)}; wait for it "
                              f"to finish, or remove {path} if no run is going on") from None
        except OSError as exc:
            raise OutputError(f"cannot write to the folder {os.path.dirname(path)}: "
                              f"{exc.strerror or exc}") from None
        if fcntl is not None:
            try:
                fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                os.close(handle)
                raise OutputError(f"another Favour run is writing {final}{_holder(path)}; wait "
                                  "for it to finish or choose another output name") from None
            # The holder may have removed the file between our open and our lock: then the
            # lock is on a file no one else can see, and we try again.
            try:
                same = os.path.samestat(os.fstat(handle), os.stat(path))
            except OSError:
                same = False
            if not same:
                os.close(handle)
                continue
        os.ftruncate(handle, 0)
        os.write(handle, f"process {os.getpid()} on {socket.gethostname()}, since "
                         f"{_dt.datetime.now().isoformat(timespec='seconds')}".encode())
        return handle
    raise OutputError(f"cannot take the lock {path} for {final}: it keeps being replaced")


def recover(final: str) -> list[str]:
    """Tidy what a killed run left beside ``final``; call only while holding its lock.

    Partial files are removed. An earlier file set aside (``.previous``)
    goes back under ``final`` if that name is empty, and is removed if not
    (the file there is complete: the rename is atomic).

    Returns
    -------
    list of str
        What was removed or restored, for a note.
    """
    folder, name = os.path.split(os.path.abspath(final))
    pattern = re.compile(re.escape(f".{name}") + _MARK.pattern + r".*")
    done = []
    try:
        entries = os.listdir(folder)
    except OSError:
        return done
    for entry in sorted(entries):
        match = pattern.fullmatch(entry)
        if not match:
            continue
        path = os.path.join(folder, entry)
        try:
            if match.group(1) == "previous" and not os.path.lexists(final):
                os.replace(path, final)
                done.append(f"restored {final}")
            elif os.path.isdir(path) and not os.path.islink(path):
                shutil.rmtree(path)
                done.append(f"removed {path}")
            else:
                os.unlink(path)
                done.append(f"removed {path}")
        except OSError:
            pass
    return done


# -- 3. written aside, put in place together --------------------------------------------


def temporary_name(final: str, suffix: str = "") -> str:
    """Create an empty hidden file beside ``final`` for its content; return its path."""
    folder, name = os.path.split(os.path.abspath(final))
    try:
        handle, path = tempfile.mkstemp(prefix=f".{name}{TAG}", suffix=f".partial{suffix}", dir=folder)
    except OSError as exc:
        raise OutputError(f"cannot write to the folder {folder}: {exc.strerror or exc}") from None
    os.close(handle)
    return path


def _publish_mode(path: str) -> None:
    """Give a temporary file (private, from mkstemp) the permissions a new file normally gets."""
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(path, 0o666 & ~umask)


class OutputSet:
    """The files one job writes, put in place together or not at all.

    Usage::

        outputs = OutputSet()
        outputs.folder(node_folder)             # made now, removed on abort if still empty
        tmp = outputs.reserve(final, ".tif")    # write the content to tmp
        outputs.add_text(final + ".lineage.json", text)
        outputs.commit()                        # or outputs.abort() on any error

    Nothing appears under a final name before :meth:`commit`, and
    :meth:`commit` either puts every file in place or leaves every final
    name as it was.
    """

    def __init__(self) -> None:
        self._staged: list[tuple[str, str]] = []  # (temporary, final)
        self._created: list[str] = []
        self._stale: list[str] = []
        self.committed = False

    @property
    def finals(self) -> list[str]:
        """The final names staged so far."""
        return [final for _, final in self._staged]

    def folder(self, path: str) -> str:
        """Create ``path`` (and missing parents) if needed, remembering what was created."""
        path = os.path.abspath(path)
        missing = []
        here = path
        while here and not os.path.isdir(here):
            missing.append(here)
            parent = os.path.dirname(here)
            if parent == here:
                break
            here = parent
        try:
            os.makedirs(path, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"cannot write to the folder {path}: {exc.strerror or exc}") from None
        self._created.extend(missing)  # deepest first, the order they are removed in
        return path

    def reserve(self, final: str, suffix: str = "") -> str:
        """Return a new temporary file beside ``final`` to write its content into."""
        tmp = temporary_name(final, suffix)
        self._staged.append((tmp, os.path.abspath(final)))
        return tmp

    def add_text(self, final: str, text: str) -> str:
        """Write ``text`` (UTF-8) for ``final`` now, under a temporary name; return that name."""
        tmp = self.reserve(final)
        try:
            with open(tmp, "w", encoding="utf-8", newline="") as handle:
                handle.write(text)
                handle.flush()
                os.fsync(handle.fileno())
        except OSError as exc:
            raise OutputError(f"cannot write {final}: {exc.strerror or exc}") from None
        return tmp

    def remove_on_commit(self, final: str) -> None:
        """Remove ``final`` once the commit succeeds (a stale sidecar of an earlier output)."""
        self._stale.append(os.path.abspath(final))

    def commit(self) -> list[str]:
        """Put every staged file under its final name; return the final names.

        Raises
        ------
        OutputError
            A file could not be moved into place; every final name has its
            earlier file back and no temporary file is left.
        """
        placed: list[tuple[str, str | None, bool]] = []  # (final, aside, linked)
        try:
            for tmp, final in self._staged:
                _publish_mode(tmp)
                aside, linked = None, False
                if os.path.lexists(final) and not os.path.isdir(final):
                    aside = _aside_name(final)
                    try:
                        os.link(final, aside)  # the final name keeps its file meanwhile
                        linked = True
                    except OSError:
                        os.replace(final, aside)
                placed.append((final, aside, linked))
                os.replace(tmp, final)
        except OSError as exc:
            failed = placed[-1][0] if placed else "?"
            self._undo(placed)
            self.abort()
            raise OutputError(f"cannot put the finished {failed} in place: {exc.strerror or exc}; "
                              "every earlier file is as it was") from None
        for _, aside, _ in placed:
            if aside is not None:
                _unlink_quietly(aside)
        for stale in self._stale:
            _unlink_quietly(stale)
        self.committed = True
        self._staged = []
        self._created = []
        return [final for final, _, _ in placed]

    def _undo(self, placed: list[tuple[str, str | None, bool]]) -> None:
        """Give each final name its earlier file back (or none, if it had none)."""
        for final, aside, linked in reversed(placed):
            try:
                if aside is None:
                    if os.path.lexists(final):
                        os.unlink(final)
                elif linked and os.path.lexists(final) and os.path.samefile(aside, final):
                    os.unlink(aside)  # the new file never arrived: the name still has the old one
                else:
                    os.replace(aside, final)  # (a rename between two links of one file does nothing)
            except OSError:
                pass

    def abort(self) -> None:
        """Remove every temporary file and every folder this set created that is still empty."""
        for tmp, _ in self._staged:
            for path in (tmp, tmp + ".aux.xml"):
                _unlink_quietly(path)
        self._staged = []
        for folder in self._created:
            try:
                os.rmdir(folder)
            except OSError:
                pass  # not empty, or already gone: leave it
        self._created = []


def _aside_name(final: str) -> str:
    """Return an unused hidden name beside ``final`` for its earlier file."""
    folder, name = os.path.split(final)
    while True:
        candidate = os.path.join(folder, f".{name}{TAG}{_token()}.previous")
        if not os.path.lexists(candidate):
            return candidate


def _token() -> str:
    """Return eight random characters, as in the names mkstemp makes."""
    return secrets.token_hex(4)


def _unlink_quietly(path: str) -> None:
    """Remove a file if it is there; a failure leaves it (it is ours, and hidden)."""
    try:
        os.unlink(path)
    except OSError:
        pass


class OutputJob:
    """A job's outputs from start to end: folders made, outputs locked, a work folder, clean-up.

    ``with OutputJob(finals) as job:`` creates the output folders, takes the
    locks (refusing at once if another run holds one), and makes a hidden
    work folder beside the first output (``job.workdir``) for files the job
    needs only while it runs. The body stages files in ``job.outputs`` and
    commits them. However the body ends, the work folder goes and the
    locks are released; if it did not commit, every temporary file and every
    folder the job made that is still empty go too.

    Parameters
    ----------
    finals : sequence of str
        The outputs to lock (sidecars such as lineage and style go with
        their output and need no lock of their own).
    folders : sequence of str
        Further folders to create (a folder for node rasters, say).
    """

    def __init__(self, finals: Sequence[str], folders: Sequence[str] = ()) -> None:
        self.finals = [os.path.abspath(f) for f in finals]
        self.folders = [os.path.abspath(f) for f in folders]
        self.outputs = OutputSet()
        self.lock = OutputLock(self.finals)
        self.workdir: str | None = None

    def __enter__(self) -> OutputJob:
        try:
            for folder in dict.fromkeys([os.path.dirname(f) for f in self.finals] + self.folders):
                self.outputs.folder(folder)
            self.lock.acquire()
            folder, name = os.path.split(self.finals[0])
            try:
                # Named after the first output, so a later run on it can tidy the folder of a killed one.
                self.workdir = tempfile.mkdtemp(prefix=f".{name}{TAG}", suffix=".partial-work", dir=folder)
            except OSError as exc:
                raise OutputError(f"cannot write to the folder {os.path.dirname(self.finals[0])}: "
                                  f"{exc.strerror or exc}") from None
        except BaseException:
            self._end()
            raise
        return self

    def __exit__(self, *exc) -> None:
        self._end()

    def _end(self) -> None:
        if self.workdir:
            shutil.rmtree(self.workdir, ignore_errors=True)
            self.workdir = None
        self.lock.release()
        if not self.outputs.committed:
            self.outputs.abort()


def lineage_header(job: str, created: str, rasters: bool = True) -> dict:
    """Return the fields every lineage record starts with: format, job, time, tool, host and caution.

    ``rasters`` adds GDAL's version to the tool's (every job that reads or
    writes a raster or a vector layer).
    """
    tool = {"name": about.NAME, "version": about.VERSION, "python": platform.python_version(),
            "numpy": np.__version__}
    if rasters:
        tool["gdal"] = gdal.__version__
    return {"format": lin.FORMAT, "version": lin.VERSION, "job": job, "created": created, "tool": tool,
            "host": platform.platform(), "caution": lin.CAUTION}


def stage_lineage(outputs: OutputSet, record: dict, output: str) -> str:
    """Stage ``output``'s lineage record in ``outputs``; return the lineage file's final name."""
    target = str(lineage_path(output))
    outputs.add_text(target, lineage_text(record, target))
    return target
