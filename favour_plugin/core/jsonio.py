r"""Reading the JSON a user hands Favour: bounded, strict, and refused with our own messages.

Every JSON file a user can give Favour (a tree file, a lineage, the lineage of
a weights table) is read with :func:`read_json_file`; JSON text from elsewhere
(the tree stored in a QGIS project) with :func:`parse_json_text`; the bytes of
a file of any other format with :func:`read_user_bytes`. The caller
chooses the error class (``TreeFileError``, ``LineageError``, ``InputError``)
and every message names the file or the source. They refuse:

- a path that is missing, a folder, or not a regular file (a FIFO, socket or
  device, which could block the reader for ever), before opening it;
- a file larger than the caller's limit (:data:`TREE_MAX_BYTES`,
  :data:`LINEAGE_MAX_BYTES`), before reading it;
- bytes that are not UTF-8, naming the byte offset (a leading UTF-8
  byte-order mark is accepted);
- text that is not JSON, naming the line and column;
- the tokens ``NaN``, ``Infinity`` and ``-Infinity`` (not JSON: RFC 8259,
  section 6), and numbers a float cannot hold (``1e999``, an integer of more
  than :data:`MAX_INTEGER_DIGITS` digits), naming the line and column;
- arrays and objects nested more than :data:`MAX_NESTING` deep, naming the
  line and column, before the (recursive) JSON parser sees the text;
- strings holding a lone UTF-16 surrogate (``"\ud800"``), which cannot be
  written back as UTF-8, naming the JSON path.

Nothing here recurses over the document, so no input can end in a
``RecursionError``; every scan is linear in the size of the input.
:func:`too_deep` and :func:`check_nesting` apply the same nesting limit to
documents that arrive as Python objects.
"""

from __future__ import annotations

import json
import math
import os
import re
import stat
from collections.abc import Mapping

import numpy as np

from .errors import FavourError, InputError

MIB = 1024 * 1024

#: Largest tree file read, in bytes. A tree file is a few kB; a model with a
#: thousand criteria and long rationales stays well under 1 MiB (common
#: practice, no source).
TREE_MAX_BYTES = 8 * MIB

#: Largest lineage file read, in bytes. A lineage holds the tree, the inputs
#: with their checksums, per-node statistics and, for weights of evidence,
#: tables of up to 10 000 classes: a few MiB at most (common practice, no source).
LINEAGE_MAX_BYTES = 64 * MIB

#: Deepest nesting of arrays and objects read. A tree of the deepest allowed
#: shape (32 levels of criteria) nests about 70 deep (common practice, no source).
MAX_NESTING = 100

#: Longest integer read, in digits: every integer of at most 308 digits is
#: below 1e308 and so converts to a float; a longer one may not.
MAX_INTEGER_DIGITS = 308

_BOM = b"\xef\xbb\xbf"
# A JSON string, or the rest of the text after an unterminated one: every match
# attempt that starts at a quote succeeds, so scanning stays linear.
_STRING = rb'"[^"\\]*(?:\\.[^"\\]*)*(?:"|\\?\Z)'
_STRING_RE = re.compile(_STRING, re.DOTALL)
_NOT_BRACKETS = bytes(b for b in range(256) if b not in b"[]{}")
_STEP = np.zeros(256, np.int8)  # +1 for an opening bracket, -1 for a closing one
_STEP[list(b"[{")] = 1
_STEP[list(b"]}")] = -1
_CHUNK = 1 << 22
_CONSTANT_RE = re.compile(_STRING + rb"|(?P<token>-?Infinity|NaN)", re.DOTALL)
_SURROGATE_ESCAPE = re.compile(rb"\\u[dD][89a-fA-F]")


class _RefusedError(Exception):
    """A token the parser met that Favour refuses; raised from the parser's hooks."""

    def __init__(self, token: str, reason: str) -> None:
        super().__init__(token)
        self.token = token
        self.reason = reason


def _parse_constant(token: str):
    raise _RefusedError(token, f"{token} is not a JSON number (JSON has no NaN or infinity)")


def _parse_float(token: str) -> float:
    value = float(token)
    if math.isinf(value):  # NaN cannot come from a JSON number
        raise _RefusedError(token, f"the number {_clip(token)} is beyond the range of a float")
    return value


def _parse_int(token: str) -> int:
    digits = len(token) - token.startswith("-")
    if digits > MAX_INTEGER_DIGITS:
        raise _RefusedError(token, f"an integer of {digits} digits is beyond the range of a float "
                              f"(at most {MAX_INTEGER_DIGITS} digits are read)")
    return int(token)


def _clip(text: str, width: int = 40) -> str:
    """Return ``text`` cut to ``width`` characters with an ellipsis."""
    return text if len(text) <= width else text[:width - 1] + "…"


def size_text(count: int) -> str:
    """Return a byte count for a message: ``8 MiB``, ``50.0 MiB``, ``312 bytes``."""
    if count >= MIB:
        return f"{count // MIB} MiB" if count % MIB == 0 else f"{count / MIB:.1f} MiB"
    if count >= 1024:
        return f"{count / 1024:.1f} kiB"
    return f"{count} bytes"


def json_path(parts) -> str:
    """Return a JSON path as messages write it: ``inputs[2].files[0].sha256``."""
    out = ""
    for part in parts:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else str(part)
    return out


def _where(data: bytes, offset: int) -> str:
    """Return ``line L, column C`` of a byte offset (columns count characters, as json does)."""
    line = data.count(b"\n", 0, offset) + 1
    start = data.rfind(b"\n", 0, offset) + 1
    column = len(data[start:offset].decode("utf-8", "replace")) + 1
    return f"line {line}, column {column}"


def _nesting_offset(data: bytes, limit: int) -> int | None:
    """Return the byte offset of the first bracket nested deeper than ``limit``, or None.

    Strings are blanked first (their brackets are text), then the depth is the
    running count of opening minus closing brackets.
    """
    if data.count(b"[") + data.count(b"{") <= limit:
        return None
    stripped = _STRING_RE.sub(b'""', data)
    marks = np.frombuffer(stripped.translate(None, _NOT_BRACKETS), np.uint8)
    if marks.size <= limit:
        return None
    nth, base = None, 0
    for start in range(0, marks.size, _CHUNK):  # in chunks, to bound the memory used
        depth = base + np.cumsum(_STEP[marks[start:start + _CHUNK]], dtype=np.int64)
        over = depth > limit
        if over.any():
            nth = start + int(np.argmax(over))
            break
        base = int(depth[-1])
    if nth is None:
        return None
    raw = np.frombuffer(stripped, np.uint8)
    for start in range(0, raw.size, _CHUNK):  # find the nth bracket of the blanked text
        found = np.flatnonzero(_STEP[raw[start:start + _CHUNK]])
        if nth < found.size:
            target = start + int(found[nth])
            break
        nth -= found.size
    # Map the offset in the blanked text back to the original: add what each
    # string before it lost when it was blanked to "".
    shift = 0
    for match in _STRING_RE.finditer(data):
        if match.start() - shift >= target:
            break
        shift += match.end() - match.start() - 2
    return target + shift


def _token_offset(data: bytes, token: str) -> int | None:
    """Return the byte offset of ``token`` outside strings, or None."""
    if token in ("NaN", "Infinity", "-Infinity"):
        pattern = _CONSTANT_RE
    else:
        pattern = re.compile(_STRING + rb"|(?<![\w.+-])(?P<token>" + re.escape(token.encode("ascii"))
                             + rb")(?![\w.+-])", re.DOTALL)
    for match in pattern.finditer(data):
        if match.group("token") is not None and match.group("token").decode("ascii") == token:
            return match.start()
    return None


def too_deep(value, max_depth: int = MAX_NESTING) -> tuple | None:
    """Return the JSON path of the first array or object nested deeper than ``max_depth``, or None.

    Walks the document without recursion (so a cycle in a Python object ends
    at the limit too). The top-level value is at depth 1.
    """
    stack = [(value, (), 1)]
    while stack:
        item, path, depth = stack.pop()
        if depth > max_depth:
            return path
        if isinstance(item, Mapping):
            children = [(key, child) for key, child in item.items()
                        if isinstance(child, (Mapping, list, tuple))]
        elif isinstance(item, (list, tuple)):
            children = [(i, child) for i, child in enumerate(item)
                        if isinstance(child, (Mapping, list, tuple))]
        else:
            continue
        stack.extend((child, (*path, key), depth + 1) for key, child in reversed(children))
    return None


def lone_surrogate(value, max_depth: int = MAX_NESTING) -> tuple | None:
    """Return the JSON path of the first string (or key) holding a lone UTF-16 surrogate, or None.

    Only walks ``max_depth`` levels; check the nesting first.
    """
    stack = [(value, (), 1)]
    while stack:
        item, path, depth = stack.pop()
        if isinstance(item, str):
            if not item.isascii():
                try:
                    item.encode("utf-8")
                except UnicodeEncodeError:
                    return path
        elif depth <= max_depth and isinstance(item, Mapping):
            for key, child in item.items():
                stack.append((key, path, depth))
                stack.append((child, (*path, key), depth + 1))
        elif depth <= max_depth and isinstance(item, (list, tuple)):
            stack.extend((child, (*path, i), depth + 1) for i, child in enumerate(item))
    return None


def check_nesting(value, *, error: type[FavourError] = InputError, source: str = "the document",
                  max_depth: int = MAX_NESTING) -> None:
    """Raise ``error`` naming the JSON path if ``value`` nests deeper than ``max_depth``."""
    path = too_deep(value, max_depth)
    if path is not None:
        raise error(f"{source}: {json_path(path) or 'the top level'} nests arrays and objects more "
                    f"than {max_depth} levels deep; Favour reads at most {max_depth}")


def parse_json_bytes(data: bytes, *, error: type[FavourError] = InputError, source: str = "the text",
                     max_depth: int = MAX_NESTING):
    """Decode UTF-8 bytes and parse them as strict JSON (see the module docstring for what is refused).

    Parameters
    ----------
    data : bytes
        The file's content.
    error : type
        The FavourError subclass to raise.
    source : str
        What the bytes are, for messages: ``"tree file /data/model.json"``.
    max_depth : int
        Deepest nesting of arrays and objects accepted.

    Raises
    ------
    FavourError
        Of class ``error``; the message starts with ``source`` and names the place.
    """
    bom = len(_BOM) if data.startswith(_BOM) else 0
    try:
        text = data[bom:].decode("utf-8")
    except UnicodeDecodeError as exc:
        offset = bom + exc.start
        raise error(f"{source} is not UTF-8 text: the byte 0x{data[offset]:02x} at byte offset "
                    f"{offset} ({_where(data[bom:], exc.start)}) cannot be decoded; save it as "
                    "UTF-8") from None
    body = data[bom:]
    offset = _nesting_offset(body, max_depth)
    if offset is not None:
        raise error(f"{source} nests arrays and objects more than {max_depth} levels deep "
                    f"(at {_where(body, offset)}); Favour reads at most {max_depth}")
    try:
        value = json.loads(text, parse_constant=_parse_constant, parse_float=_parse_float,
                           parse_int=_parse_int)
    except json.JSONDecodeError as exc:
        raise error(f"{source} is not valid JSON: {exc.msg} at line {exc.lineno}, "
                    f"column {exc.colno}") from None
    except _RefusedError as exc:
        at = _token_offset(body, exc.token)
        where = f" (at {_where(body, at)})" if at is not None else ""
        raise error(f"{source} cannot be read: {exc.reason}{where}") from None
    except (RecursionError, MemoryError, ValueError) as exc:  # not expected after the checks above
        raise error(f"{source} cannot be read as JSON: {type(exc).__name__}: {_clip(str(exc), 200)}"
                    ) from None
    if _SURROGATE_ESCAPE.search(body):
        path = lone_surrogate(value, max_depth)
        if path is not None:
            raise error(f"{source}: {json_path(path) or 'the top level'} holds a lone UTF-16 "
                        "surrogate (a \\uD800-\\uDFFF escape without its pair), which is not text")
    return value


def parse_json_text(text: str, *, error: type[FavourError] = InputError, source: str = "the text",
                    max_bytes: int | None = None, max_depth: int = MAX_NESTING):
    """Parse JSON held in a string, as :func:`parse_json_bytes` does; refuse it over ``max_bytes``.

    Raises
    ------
    FavourError
        Of class ``error``; the message starts with ``source``.
    """
    if not isinstance(text, str):
        raise error(f"{source} is not text (got {type(text).__name__})")
    data = text.encode("utf-8", "surrogatepass")
    if max_bytes is not None and len(data) > max_bytes:
        raise error(f"{source} is {size_text(len(data))}; Favour reads at most {size_text(max_bytes)}")
    return parse_json_bytes(data, error=error, source=source, max_depth=max_depth)


def read_user_bytes(path: str | os.PathLike, *, max_bytes: int, error: type[FavourError] = InputError,
                    what: str = "file", kind: str | None = None) -> bytes:
    """Return the bytes of a file a user handed Favour, refusing what is unsafe before reading it.

    A missing path, a folder, anything that is not a regular file (a FIFO,
    socket or device, which could block the reader) and a file over
    ``max_bytes`` are refused from ``stat`` alone; the file is then opened
    without blocking, checked again (it may have been swapped) and read up to
    ``max_bytes``. Any file format can use this (JSON here, score sheets).

    Parameters
    ----------
    path : str or path-like
        The file.
    max_bytes : int
        Largest file read (e.g. :data:`TREE_MAX_BYTES`).
    error : type
        The FavourError subclass to raise.
    what : str
        How messages name the file: ``"tree file"`` gives
        ``"tree file /data/model.json does not exist"``.
    kind : str, optional
        The kind of file for the size message (defaults to ``what``).

    Raises
    ------
    FavourError
        Of class ``error``: missing, a folder, not a regular file, too large
        or unreadable; the message names the file.
    """
    source = f"{what} {os.fspath(path)}" if what else os.fspath(path)
    kind = kind or what or "file"
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise error(f"{source} does not exist") from None
    except (OSError, ValueError) as exc:
        raise error(f"{source} cannot be read: {getattr(exc, 'strerror', None) or exc}") from None
    _check_regular(info, source, max_bytes, kind, error)
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0)
    try:
        fd = os.open(path, flags)
    except OSError as exc:
        raise error(f"{source} cannot be read: {exc.strerror or exc}") from None
    try:
        with os.fdopen(fd, "rb") as handle:
            # The path may have been swapped since stat(): check what was opened.
            _check_regular(os.fstat(handle.fileno()), source, max_bytes, kind, error)
            data = handle.read(max_bytes + 1)
    except OSError as exc:
        raise error(f"{source} cannot be read: {exc.strerror or exc}") from None
    if len(data) > max_bytes:
        raise error(f"{source} grew past {size_text(max_bytes)} while it was read; Favour reads a "
                    f"{kind} of at most {size_text(max_bytes)}")
    return data


def read_json_file(path: str | os.PathLike, *, max_bytes: int, error: type[FavourError] = InputError,
                   what: str = "file", kind: str | None = None, max_depth: int = MAX_NESTING):
    """Read a JSON file a user handed Favour: :func:`read_user_bytes`, then :func:`parse_json_bytes`.

    Parameters
    ----------
    path : str or path-like
        The file.
    max_bytes : int
        Largest file read (e.g. :data:`TREE_MAX_BYTES`); a larger one is
        refused from its size, without reading it.
    error : type
        The FavourError subclass to raise.
    what : str
        How messages name the file: ``"tree file"`` gives
        ``"tree file /data/model.json does not exist"``.
    kind : str, optional
        The kind of file for the size message (defaults to ``what``).
    max_depth : int
        Deepest nesting of arrays and objects accepted.

    Returns
    -------
    object
        The parsed document.

    Raises
    ------
    FavourError
        Of class ``error``: missing, a folder, not a regular file, too large,
        unreadable, not UTF-8, not JSON, or refused content; the message names
        the file and, where it applies, the place in it.
    """
    data = read_user_bytes(path, max_bytes=max_bytes, error=error, what=what, kind=kind)
    source = f"{what} {os.fspath(path)}" if what else os.fspath(path)
    return parse_json_bytes(data, error=error, source=source, max_depth=max_depth)


def _check_regular(info: os.stat_result, source: str, max_bytes: int, kind: str,
                   error: type[FavourError]) -> None:
    """Refuse a folder, a special file, or a file over ``max_bytes``."""
    if stat.S_ISDIR(info.st_mode):
        raise error(f"{source} is a folder, not a file")
    if not stat.S_ISREG(info.st_mode):
        raise error(f"{source} is not a regular file (a FIFO, socket or device); "
                    "Favour reads only plain files")
    if info.st_size > max_bytes:
        raise error(f"{source} is {size_text(info.st_size)}; Favour reads a {kind} of at most "
                    f"{size_text(max_bytes)}")

