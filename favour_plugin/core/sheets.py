"""Workshop score sheets: one table per expert, written as CSV (or XLSX) and read back checked.

A sheet is a long table, one row per node and item (see
:mod:`favour_plugin.core.scoring` for the items)::

    expert, node, item, value, low, high, unit, confidence, note

``value`` is the expert's score (blank: no opinion on this item); ``low`` and
``high`` an optional plausible range, for membership parameters only;
``confidence`` ``low``, ``medium`` or ``high`` (or blank); ``unit`` and
``note`` are for people. Lines whose first cell starts with ``#`` are
comments; the sheet opens with a few that state the scales. A second-round
sheet carries the group's first-round ``group_median``, ``group_iqr`` and
``group_n`` in extra columns, which the import ignores.

This module writes sheets; :mod:`favour_plugin.core.sheet_import` reads them
back, checked.
"""

from __future__ import annotations

import csv
import os
import re
from collections.abc import Sequence
from pathlib import Path

from .errors import OutputError, ParameterError
from .scoring import WEIGHT_ITEMS, Scores, node_items, weight_spec
from .tree import Tree

COLUMNS = ("expert", "node", "item", "value", "low", "high", "unit", "confidence", "note")
REQUIRED_COLUMNS = ("expert", "node", "item", "value", "low", "high", "confidence")
GROUP_COLUMNS = ("group_median", "group_iqr", "group_n")
FORMAT_LINE = "# Favour score sheet, format 1"
SUFFIXES = (".csv", ".xlsx")

_ABOUT = (
    "# importance: how much a criterion matters beside its siblings, 1 (marginal) to 9 (decisive);"
    " only the ratios among siblings count.",
    "# weight: a relative weight of 0 or more, for groups scored by weight; only ratios count.",
    "# membership.<parameter>: a membership parameter in the unit shown; low and high (optional):"
    " the range you find plausible.",
    "# confidence: low, medium or high (optional). Leave value blank for no opinion."
    " Lines starting with # are ignored.",
)


def xlsx_available() -> bool:
    """Return True when openpyxl imports, so sheets can be written and read as XLSX."""
    try:
        import openpyxl  # noqa: F401
    except ImportError:
        return False
    return True


def default_experts(count: int) -> tuple[str, ...]:
    """Return anonymous expert ids ``E1`` … ``E<count>``."""
    if isinstance(count, bool) or not isinstance(count, int) or count < 1:
        raise ParameterError(f"the number of experts must be a whole number from 1, got {count!r}")
    return tuple(f"E{k}" for k in range(1, count + 1))


def _check_expert_ids(experts: Sequence[str]) -> tuple[str, ...]:
    ids = tuple(str(expert).strip() for expert in experts)
    for expert in ids:
        if not expert or expert.startswith("#") or any(c in expert for c in "\r\n"):
            raise ParameterError(f"expert id {expert!r} is not usable: it must be non-empty, one line, "
                                 "and not start with '#'")
    repeated = sorted({e for e in ids if ids.count(e) > 1})
    if repeated:
        raise ParameterError(f"expert ids must differ; repeated: {', '.join(repeated)}")
    return ids


def text_of(value: float | None) -> str:
    """Format a number so that reading it back gives the same float (integers without '.0')."""
    if value is None:
        return ""
    value = float(value)
    return str(int(value)) if value.is_integer() and abs(value) < 1e15 else repr(value)


def sheet_rows(tree: Tree, expert: str, *, previous: Scores | None = None, group=None) -> list[dict]:
    """Return the rows of one expert's sheet as dicts keyed by column name.

    Parameters
    ----------
    tree : Tree
        A sound tree (it must compile); its current values fill a first-round sheet.
    expert : str
        The expert id written on every row.
    previous : Scores, optional
        An earlier round: the expert's own scores fill the sheet instead
        (blank where they gave none).
    group : Aggregate, optional
        An earlier round's aggregate (:func:`favour_plugin.core.workshop.aggregate`):
        its median, IQR and count go into the ``group_*`` columns.
    """
    tree.compile()
    (expert,) = _check_expert_ids([expert])
    own = previous.of_expert(expert) if previous is not None else None
    rows = []
    for node, items in node_items(tree).items():
        for spec in items.values():
            item = spec.item
            row = dict.fromkeys(COLUMNS + (GROUP_COLUMNS if group is not None else ()), "")
            row.update(expert=expert, node=node, unit=spec.unit, note=spec.note)
            if own is None:
                row.update(item=item, value=text_of(spec.value))
            else:
                scored = own.get(node, {})
                if item in WEIGHT_ITEMS:
                    item = next((name for name in WEIGHT_ITEMS if name in scored), item)
                    row["unit"] = weight_spec(node, item).unit if item != spec.item else spec.unit
                score = scored.get(item)
                row["item"] = item
                if score is not None:
                    row.update(value=text_of(score.value), low=text_of(score.low), high=text_of(score.high),
                               confidence=score.confidence or "", note=score.note or spec.note)
            if group is not None:
                summary = group.get(node, row["item"])
                if summary is not None:
                    # for reading, not for reading back: four significant figures
                    row.update(group_median=f"{summary.median:.4g}", group_iqr=f"{summary.iqr:.4g}",
                               group_n=str(summary.n))
            rows.append(row)
    return rows


def _about(tree: Tree, expert: str, round_number: int, group: bool) -> list[str]:
    name = " ".join(str(tree.name or tree.root.name).split()).replace('"', "'")
    lines = [f"{FORMAT_LINE}. Expert {expert}; tree '{name}'; round {round_number}.", *_ABOUT]
    if group:
        lines.append("# group_median, group_iqr, group_n: the group's scores in the previous round "
                     "(median, interquartile range, experts); change your value if you wish.")
    return lines


def _atomic(path: Path, write) -> None:
    """Call ``write(temporary_path)``, then move the file onto ``path`` in one step."""
    tmp = path.with_name(f".{path.name}.partial")
    try:
        write(tmp)
        os.replace(tmp, path)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise OutputError(f"cannot write score sheet {path}: {exc.strerror or exc}") from None


def write_sheet(path: Path | str, tree: Tree, expert: str, *, previous: Scores | None = None,
                group=None, round_number: int = 1) -> Path:
    """Write one expert's sheet to ``path`` (``.csv``, or ``.xlsx`` when openpyxl imports); return it.

    See :func:`sheet_rows` for the arguments. CSV is UTF-8 with comma
    separators; the file appears whole or not at all.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in SUFFIXES:
        raise ParameterError(f"a score sheet is written as .csv or .xlsx, got {path.name!r}")
    rows = sheet_rows(tree, expert, previous=previous, group=group)
    columns = COLUMNS + (GROUP_COLUMNS if group is not None else ())
    about = _about(tree, rows[0]["expert"] if rows else expert, round_number, group is not None)
    if suffix == ".csv":
        def write(tmp: Path) -> None:
            with open(tmp, "w", encoding="utf-8", newline="") as handle:
                for line in about:  # as plain text: a comment reads the same in an editor
                    handle.write(line + "\n")
                writer = csv.writer(handle, lineterminator="\n")
                writer.writerow(columns)
                for row in rows:
                    writer.writerow([row[column] for column in columns])
    else:
        if not xlsx_available():
            raise ParameterError("writing .xlsx needs openpyxl (Debian package python3-openpyxl); "
                                 "write .csv instead")
        import openpyxl

        def write(tmp: Path) -> None:
            book = openpyxl.Workbook()
            sheet = book.active
            sheet.title = "scores"
            for line in about:
                sheet.append([line])
            sheet.append(list(columns))
            numeric = {"value", "low", "high", *GROUP_COLUMNS}
            for row in rows:
                sheet.append([float(row[c]) if c in numeric and row[c] != "" else row[c]
                              for c in columns])
            book.save(tmp)
    _atomic(path, write)
    return path


def export_sheets(tree: Tree, folder: Path | str, experts: int | Sequence[str] = 4, *,
                  fmt: str = "csv", previous: Scores | None = None, group=None,
                  round_number: int = 1) -> list[Path]:
    """Write one sheet per expert into ``folder`` (made if missing) and return their paths.

    ``experts`` is a count (anonymous ids ``E1`` …) or a list of ids; files are
    named ``<id>.csv`` (``<id>-round<k>.csv`` from round 2 on). ``fmt`` is
    ``"csv"`` or ``"xlsx"``.
    """
    ids = default_experts(experts) if isinstance(experts, int) else _check_expert_ids(experts)
    if fmt not in ("csv", "xlsx"):
        raise ParameterError(f"sheet format must be 'csv' or 'xlsx', got {fmt!r}")
    folder = Path(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot make folder {folder}: {exc.strerror or exc}") from None
    paths = []
    for expert in ids:
        stem = re.sub(r"[^A-Za-z0-9_.-]+", "_", expert)
        name = f"{stem}.{fmt}" if round_number == 1 else f"{stem}-round{round_number}.{fmt}"
        paths.append(write_sheet(folder / name, tree, expert, previous=previous, group=group,
                                 round_number=round_number))
    return paths
