"""Reading workshop score sheets back, every cell checked before anything is returned.

Reading never changes the tree: :func:`read_sheets` checks every cell of
every file first and returns plain :class:`~favour_plugin.core.scoring.Scores`,
or raises :class:`~favour_plugin.core.errors.SheetError` listing up to 20
problems, each naming the file, the row (as a spreadsheet numbers it) and the
column. The sheet format is described in :mod:`favour_plugin.core.sheets`.
"""

from __future__ import annotations

import csv
import io
import math
import re
from collections.abc import Iterable, Mapping
from pathlib import Path

from .errors import SheetError
from .jsonio import read_user_bytes
from .scoring import (
    CONFIDENCE_LEVELS,
    IMPORTANCE,
    MEMBERSHIP_PREFIX,
    WEIGHT,
    WEIGHT_ITEMS,
    Score,
    Scores,
    Workshop,
    allowed_items,
    membership_problem,
    node_items,
    weight_spec,
)
from .sheets import COLUMNS, REQUIRED_COLUMNS, SUFFIXES, text_of, xlsx_available
from .tree import PATH_SEPARATOR, Tree

MAX_ERRORS = 20

#: Largest score sheet read: a tree of 1000 nodes scored item by item fills well under a megabyte
#: (common practice, no source).
SHEET_MAX_BYTES = 16 * 2**20
#: Rows of a workbook read before it is refused (a sheet has one row per node and item).
MAX_SHEET_ROWS = 100_000


def _sheet_bytes(path: Path) -> bytes:
    """Read a sheet's bytes as every user file is read: a regular file of bounded size, or SheetError."""
    return read_user_bytes(path, max_bytes=SHEET_MAX_BYTES, error=SheetError, what="score sheet")


def _csv_records(path: Path) -> list[tuple[int, list[str]]]:
    data = _sheet_bytes(path)
    if not data.strip():
        raise SheetError(f"{path}: the file is empty; a score sheet has a header row "
                         f"({', '.join(COLUMNS)}) and one row per node and item")
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        row = data[:exc.start].count(b"\n") + 1
        raise SheetError(f"{path} row {row}: byte 0x{data[exc.start]:02x} at position {exc.start} is "
                         "not UTF-8; save the sheet as CSV with UTF-8 encoding") from None
    # Spreadsheets save CSV with commas, or semicolons or tabs in some locales: take the
    # separator that makes a header row with the required columns, else the comma.
    found = None
    for delimiter in (",", ";", "\t"):
        records = _parse_csv(path, text, delimiter)
        header = _header_at(records)
        if header is not None:
            names = {cell.strip().lower() for cell in records[header][1]}
            if set(REQUIRED_COLUMNS) <= names:
                return records
        if found is None:
            found = records
    return found


def _parse_csv(path: Path, text: str, delimiter: str) -> list[tuple[int, list[str]]]:
    records = []
    try:
        for number, row in enumerate(csv.reader(io.StringIO(text, newline=""), delimiter=delimiter),
                                     start=1):
            records.append((number, row))
    except csv.Error as exc:
        raise SheetError(f"{path} row {len(records) + 1}: not readable as CSV: {exc}") from None
    return records


def _header_at(records: list[tuple[int, list[str]]]) -> int | None:
    """Return the index of the first record that is neither blank nor a comment."""
    return next((k for k, (_, row) in enumerate(records)
                 if any(c.strip() for c in row) and not row[0].lstrip().startswith("#")), None)


def _cell_text(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return text_of(value)
    return str(value)


def _xlsx_records(path: Path) -> list[tuple[int, list[str]]]:
    data = _sheet_bytes(path)
    if not data:
        raise SheetError(f"{path}: the file is empty; a score sheet has a header row "
                         f"({', '.join(COLUMNS)}) and one row per node and item")
    if not xlsx_available():
        raise SheetError(f"{path}: reading .xlsx needs openpyxl (Debian package python3-openpyxl); "
                         "save the sheet as CSV instead")
    import openpyxl

    try:
        book = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises zipfile, KeyError and its own errors for non-workbooks
        raise SheetError(f"{path}: not an XLSX workbook ({type(exc).__name__}: {exc})") from None
    try:
        sheet = book["scores"] if "scores" in book.sheetnames else book.worksheets[0]
        records = []
        for number, row in enumerate(sheet.iter_rows(values_only=True), start=1):
            if number > MAX_SHEET_ROWS:
                raise SheetError(f"{path}: more than {MAX_SHEET_ROWS} rows; a score sheet has one row "
                                 "per node and item")
            records.append((number, [_cell_text(v) for v in row]))
    except SheetError:
        raise
    except Exception as exc:  # a damaged workbook fails while its rows are read
        raise SheetError(f"{path}: the workbook cannot be read ({type(exc).__name__}: {exc})") from None
    finally:
        book.close()
    if not any(any(cell.strip() for cell in row) for _, row in records):
        raise SheetError(f"{path}: the workbook is empty; a score sheet has a header row "
                         f"({', '.join(COLUMNS)}) and one row per node and item")
    return records


def _records(path: Path) -> list[tuple[int, list[str]]]:
    suffix = path.suffix.lower()
    if suffix not in SUFFIXES:
        raise SheetError(f"{path}: a score sheet is a .csv or .xlsx file")
    try:
        return _xlsx_records(path) if suffix == ".xlsx" else _csv_records(path)
    except FileNotFoundError:
        raise SheetError(f"{path}: no such file") from None
    except OSError as exc:
        raise SheetError(f"{path}: cannot be read: {exc.strerror or exc}") from None


def _number(text: str) -> float:
    """Parse a cell as a float; ValueError with the user-facing reason."""
    try:
        value = float(text)
    except ValueError:
        hint = " (use a decimal point)" if re.fullmatch(r"-?\d+,\d+", text) else ""
        raise ValueError(f"{text!r} is not a number{hint}") from None
    if not math.isfinite(value):
        raise ValueError(f"must be a finite number, got {text!r}")
    return value


class _Reader:
    """Reads the sheets of one round, collecting every problem before anything is returned."""

    def __init__(self, tree: Tree) -> None:
        tree.compile()
        self.items = node_items(tree)
        self.paths = {path for path, _ in tree.walk()}
        self.tree = tree
        self.errors: list[str] = []
        self.table: dict[str, dict[str, dict[str, Score]]] = {}
        self.experts: list[str] = []
        self.where: dict[tuple[str, str, str], str] = {}
        self.group_item: dict[str, tuple[str, str]] = {}   # parent path -> (item, where)

    def error(self, where: str, column: str | None, message: str) -> None:
        self.errors.append(f"{where}, column {column!r}: {message}" if column else f"{where}: {message}")

    def read(self, path: Path) -> None:
        try:
            records = _records(path)
        except SheetError as exc:
            self.errors.append(str(exc))
            return
        header_at = _header_at(records)
        if header_at is None:
            self.errors.append(f"{path}: not a score sheet: no header row "
                               f"({', '.join(COLUMNS)}) under the comment lines")
            return
        number, header = records[header_at]
        names = [cell.strip().lower() for cell in header]
        missing = [c for c in REQUIRED_COLUMNS if c not in names]
        repeated = sorted({c for c in names if c and names.count(c) > 1})
        if missing or repeated:
            problem = (f"lacks column(s) {', '.join(repr(c) for c in missing)}" if missing
                       else f"repeats column(s) {', '.join(repr(c) for c in repeated)}")
            self.errors.append(f"{path} row {number}: not a score sheet: the header row {problem}; "
                               f"expected {', '.join(COLUMNS)}")
            return
        index = {name: names.index(name) for name in names if name}
        for number, row in records[header_at + 1:]:
            if not any(cell.strip() for cell in row) or row[0].lstrip().startswith("#"):
                continue
            cells = {name: (row[k].strip() if k < len(row) else "") for name, k in index.items()}
            self.row(f"{path} row {number}", cells)

    def row(self, where: str, cells: Mapping[str, str]) -> None:
        expert, node, item = cells["expert"], cells["node"], cells["item"]
        ok = True
        if not expert:
            self.error(where, "expert", "missing expert id")
            ok = False
        items = self.items.get(node)
        if items is None:
            if node in self.paths:
                self.error(where, "item", f"node {node!r} has no item {item!r}: it has nothing to "
                                          "score (the root takes no weight)")
            else:
                self.error(where, "node", f"unknown node {node!r}; use the full path from the root, "
                                          f"e.g. {next(iter(self.items))!r}")
            return
        allowed = allowed_items(items)
        if item not in allowed:
            self.error(where, "item", f"node {node!r} has no item {item!r}; its items are "
                                      f"{', '.join(allowed[:8])}{' …' if len(allowed) > 8 else ''}")
            return
        spec = items.get(item) or weight_spec(node, item)
        values: dict[str, float | None] = {}
        for column in ("value", "low", "high"):
            text = cells[column]
            values[column] = None
            if text:
                try:
                    values[column] = _number(text)
                except ValueError as exc:
                    self.error(where, column, str(exc))
                    ok = False
                    continue
                problem = spec.scale_problem(values[column])
                if problem:
                    self.error(where, column, problem)
                    ok = False
        value, low, high = values["value"], values["low"], values["high"]
        if (cells["low"] or cells["high"]) and not spec.takes_range:
            self.error(where, "low" if cells["low"] else "high",
                       f"item {item!r} takes no range; ranges are for membership parameters")
            ok = False
        elif bool(cells["low"]) != bool(cells["high"]):
            self.error(where, "high" if cells["low"] else "low", "a range needs both low and high")
            ok = False
        elif low is not None and high is not None:
            if low > high:
                self.error(where, "low", f"low {low:g} is above high {high:g}")
                ok = False
            elif value is not None and not low <= value <= high:
                self.error(where, "value", f"{value:g} lies outside its own range {low:g} to {high:g}")
                ok = False
        if not cells["value"] and (cells["low"] or cells["high"]):
            self.error(where, "value", "a range needs a value (the most likely one) beside it")
            ok = False
        confidence = cells["confidence"].lower() or None
        if confidence is not None and confidence not in CONFIDENCE_LEVELS:
            self.error(where, "confidence", f"{cells['confidence']!r} is not low, medium or high")
            ok = False
        if expert:
            key = (expert, node, item)
            if key in self.where:
                self.error(where, "item", f"duplicate of {self.where[key]} (same expert, node and item)")
                return
            self.where[key] = where
        if item in WEIGHT_ITEMS and PATH_SEPARATOR in node:
            parent = node.rpartition(PATH_SEPARATOR)[0]
            first = self.group_item.setdefault(parent, (item, where))
            if first[0] != item:
                self.error(where, "item", f"{item!r} for {node!r}, but a sibling is scored by "
                                          f"{first[0]!r} ({first[1]}); score all children of "
                                          f"{parent!r} on one scale")
                ok = False
        if ok and value is not None:
            if expert not in self.table:
                self.table[expert] = {}
                self.experts.append(expert)
            self.table[expert].setdefault(node, {})[item] = Score(
                value=value, low=low, high=high, confidence=confidence,
                note=cells.get("note", ""), source=where)

    def check_experts(self) -> None:
        """Check what only a whole sheet shows: each expert's memberships and sibling weights."""
        nodes = dict(self.tree.walk())
        for expert in self.experts:
            for node, scored in self.table[expert].items():
                member = {item: s.value for item, s in scored.items() if item.startswith(MEMBERSHIP_PREFIX)}
                if member:
                    problem = membership_problem(nodes[node].membership, member)
                    if problem:
                        first = min((s for item, s in scored.items() if item in member),
                                    key=lambda s: _row_of(s.source))
                        self.error(first.source, "value", f"with {expert}'s values the membership of "
                                                          f"{node!r} is invalid: {problem}")
            for path, node in nodes.items():
                if not node.children or (node.operator or {}).get("type") != "weighted_mean":
                    continue
                scores = [self.table[expert].get(path + PATH_SEPARATOR + child.name, {}).get(item)
                          for child in node.children for item in (IMPORTANCE, WEIGHT)]
                scores = [s for s in scores if s is not None]
                if len(scores) == len(node.children) and all(s.value == 0 for s in scores):
                    self.error(scores[0].source, "value", f"{expert} weights every child of {path!r} 0; "
                                                          "a weighted mean needs one positive weight")


def _row_of(source: str) -> int:
    match = re.search(r"row (\d+)$", source)
    return int(match.group(1)) if match else 0


_ROUND = re.compile(r"^#\s*Favour score sheet\b.*?\bround (\d+)\.")


def declared_round(path: Path | str) -> int:
    """Return the round a sheet says it belongs to in its first comment line (1 if it says none).

    Sheets written by :func:`favour_plugin.core.sheets.write_sheet` start with
    ``# Favour score sheet, format 1. Expert …; tree …; round N.``.

    Raises
    ------
    SheetError
        The file cannot be read.
    """
    for _, row in _records(Path(path))[:10]:
        if row and row[0].lstrip().startswith("#"):
            match = _ROUND.match(",".join(row).strip())  # the line holds commas: CSV split it
            if match:
                return int(match.group(1))
    return 1


def read_sheets(paths: Iterable[Path | str], tree: Tree, *, round_number: int = 1) -> Scores:
    """Read and check the score sheets of one round; return them as :class:`Scores`.

    Parameters
    ----------
    paths : iterable of path
        ``.csv`` (UTF-8, comma, semicolon or tab separated) or ``.xlsx`` sheets;
        one sheet may hold several experts, and an expert may span sheets.
    tree : Tree
        The tree the sheets score (it must compile). It is never changed.
    round_number : int
        1 for the first round, 2 for the re-scored sheets, …

    Raises
    ------
    TreeFileError
        The tree itself does not compile (its problems are listed).
    SheetError
        Any problem in any file; nothing is returned. The message lists up to
        20 problems, each naming the file, row and column: an empty file,
        bytes that are not UTF-8, no header row or one lacking a required
        column, a missing expert id, an unknown node, an item the node does not
        have, a value that is not a finite number or off its scale (importance
        outside 1–9, weight below 0, μ outside 0–1, a spread ≤ 0, a slope of
        0), a range with only one end, with low > high, around no value, not
        holding its value, or on an item that takes none, a confidence not
        low/medium/high, a duplicate row (same expert, node and item), siblings
        scored on both scales, an expert's values that make an invalid
        membership, or a weighted mean whose children an expert all weights 0.
    """
    paths = [Path(p) for p in paths]
    if not paths:
        raise SheetError("no score sheets given")
    reader = _Reader(tree)
    for path in paths:
        reader.read(path)
    if not reader.errors:
        reader.check_experts()
    if not reader.errors and not reader.table:
        reader.errors.append(f"{', '.join(map(str, paths))}: no scores: every value is blank")
    if reader.errors:
        shown = [f"  - {e}" for e in reader.errors[:MAX_ERRORS]]
        if len(reader.errors) > MAX_ERRORS:
            shown.append(f"  - … and {len(reader.errors) - MAX_ERRORS} more")
        raise SheetError(f"score sheets not imported ({len(reader.errors)} problem(s); nothing "
                         "was changed):\n" + "\n".join(shown))
    return Scores(table=reader.table, experts=tuple(reader.experts), round_number=round_number,
                  files=tuple(str(p) for p in paths))


def import_round(workshop: Workshop, paths: Iterable[Path | str], tree: Tree) -> Workshop:
    """Read the next round's sheets and return a new :class:`Workshop` holding every round."""
    scores = read_sheets(paths, tree, round_number=len(workshop.rounds) + 1)
    return workshop.add_round(scores)
