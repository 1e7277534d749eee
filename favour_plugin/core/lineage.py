"""The lineage record: what ran, on which inputs, with which parameters, giving which numbers.

A lineage is a plain dict written beside each output as
``<output>.lineage.json``. It holds the tree as evaluated, every input file
with its size and SHA-256, the grid, each alignment step, the parameters,
the nodata rules, the per-node statistics, warnings, the tool versions and
the time. It is enough on its own to run the job again and compare cells.

A lineage read back (:func:`read_lineage`) may have been damaged or edited by
hand, so before any caller indexes it, the fields Favour's own code uses are
checked against ``schema/lineage-v1.schema.json`` (the tree as a tree file
is, a weights table against ``schema/weights-table-v1.schema.json``); what is
wrong is named by field, e.g. ``inputs[2].files[0].sha256``.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
from collections.abc import Iterable
from pathlib import Path

import numpy as np

from . import checksums
from .errors import LineageError, OutputError, TreeFileError
from .jsonio import LINEAGE_MAX_BYTES, json_path, read_json_file
from .schema import load_validator
from .tree import Tree

FORMAT = "favour-lineage"
VERSION = 1
SUFFIX = ".lineage.json"
SCHEMA_FILE = "lineage-v1.schema.json"
TABLE_SCHEMA_FILE = "weights-table-v1.schema.json"
CAUTION = ("Favourability ranks ground for exploration; it is not a resource estimate. "
           "Public reporting of exploration results follows the reporting code and "
           "qualified-person rules that apply locally.")

# Sidecars that hold derived statistics or overviews, never the cells that are read.
_IGNORED_SIDECARS = (".aux.xml", ".ovr", ".msk.aux.xml")


def utc_now() -> str:
    """Return the current time as an ISO 8601 UTC string, to the second."""
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()


def lineage_path(output: str | os.PathLike) -> Path:
    """Return the lineage file that belongs to an output raster."""
    return Path(os.fspath(output) + SUFFIX)


def file_digest(path: str | os.PathLike) -> str:
    """Return the SHA-256 hex digest of a file (remembered: :mod:`favour_plugin.core.checksums`)."""
    return checksums.file_digest(path)


def relevant_files(files: Iterable[str]) -> list[str]:
    """Drop sidecars that never change the cells read (statistics, overviews); keep order."""
    seen, out = set(), []
    for f in files:
        if f in seen or f.endswith(_IGNORED_SIDECARS) or not os.path.isfile(f):
            continue
        seen.add(f)
        out.append(os.path.abspath(f))
    return out


def describe_files(files: Iterable[str]) -> list[dict]:
    """Return ``{"path", "size", "sha256"}`` for each file."""
    return [{"path": f, "size": os.path.getsize(f), "sha256": file_digest(f)} for f in files]


class NodeStatistics:
    """Running statistics of one node's μ over the blocks of a pass.

    Counts valid and nodata cells and keeps the sum, sum of squares, minimum
    and maximum in float64, and optionally a 10-bin histogram over [0, 1].
    Values are μ in [0, 1] (NaN for nodata), which lets NaN be replaced by 0
    with one ``fmax`` pass instead of a boolean copy.
    """

    BINS = 10

    def __init__(self, histogram: bool = True) -> None:
        self.valid = 0
        self.nodata = 0
        self.total = 0.0
        self.total_sq = 0.0
        self.minimum = np.inf
        self.maximum = -np.inf
        self.histogram = np.zeros(self.BINS, dtype=np.int64) if histogram else None

    @classmethod
    def of_block(cls, values: np.ndarray, histogram: bool = True) -> NodeStatistics:
        """Return the statistics of one block of μ."""
        stats = cls(histogram)
        nodata = int(np.count_nonzero(np.isnan(values)))
        stats.nodata = nodata
        stats.valid = int(values.size - nodata)
        if stats.valid:
            filled = np.fmax(values, 0.0).ravel()  # NaN -> 0 (μ >= 0, so nothing else moves)
            stats.total = float(filled.sum())
            stats.total_sq = float(np.dot(filled, filled))
            stats.minimum = float(np.fmin.reduce(values, axis=None))
            stats.maximum = float(np.fmax.reduce(values, axis=None))
            if histogram:
                bins = np.minimum((filled * cls.BINS).astype(np.int32), cls.BINS - 1)
                counts = np.bincount(bins, minlength=cls.BINS)
                counts[0] -= nodata  # the filled nodata cells landed in the first bin
                stats.histogram = counts.astype(np.int64)
        return stats

    def merge(self, other: NodeStatistics) -> None:
        """Add another block's statistics to these."""
        self.valid += other.valid
        self.nodata += other.nodata
        self.total += other.total
        self.total_sq += other.total_sq
        self.minimum = min(self.minimum, other.minimum)
        self.maximum = max(self.maximum, other.maximum)
        if self.histogram is not None and other.histogram is not None:
            self.histogram = self.histogram + other.histogram

    def to_dict(self) -> dict:
        """Return the statistics as plain data (None where there is no valid cell)."""
        out = {"valid_cells": self.valid, "nodata_cells": self.nodata, "min": None, "max": None,
               "mean": None, "std": None}
        if self.valid:
            mean = self.total / self.valid
            var = max(0.0, self.total_sq / self.valid - mean * mean)
            out.update(min=self.minimum, max=self.maximum, mean=mean, std=var ** 0.5)
        if self.histogram is not None:
            out["histogram"] = self.histogram.tolist()
        return out


def lineage_text(record: dict, target: str | os.PathLike = "the lineage") -> str:
    """Return the text of a lineage file: indented JSON, UTF-8, newline-terminated.

    Raises
    ------
    OutputError
        The record holds NaN or infinity: not JSON, and :func:`read_lineage`
        would refuse the file.
    """
    try:
        return json.dumps(record, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    except ValueError as exc:
        raise OutputError(f"cannot write the lineage {target}: {exc}") from None


def read_lineage(path: str | os.PathLike) -> dict:
    """Read the lineage of an output raster (or a lineage file itself) and check it.

    The file is read as :func:`favour_plugin.core.jsonio.read_json_file`
    reads user files (a regular file of at most
    :data:`~favour_plugin.core.jsonio.LINEAGE_MAX_BYTES`, strict UTF-8 JSON),
    then checked with :func:`check_record`.

    Raises
    ------
    LineageError
        No lineage, one that cannot be read, from a future version, or
        damaged; the message names the file and, for a damaged record, each
        field at fault.
    """
    path = Path(path)
    target = path if path.name.endswith(SUFFIX) else lineage_path(path)
    if not os.path.exists(target):
        raise LineageError(f"no lineage found for {path}: {target} does not exist")
    record = read_json_file(target, max_bytes=LINEAGE_MAX_BYTES, error=LineageError,
                            what="the lineage", kind="lineage file")
    check_record(record, f"the lineage {target}")
    return record


def check_record(record, source: str = "the lineage record") -> None:
    """Check that a lineage record holds what Favour's code reads from it, with the right types.

    The format and version come first; then the fields that ``reproduce``,
    :func:`changed_inputs`, the layer metadata and the weights-table reader
    use are checked against ``schema/lineage-v1.schema.json``; the tree, if
    any, must be a sound tree (as :meth:`favour_plugin.core.tree.Tree.from_dict`
    checks a tree file); a weights table, if any, must match
    ``schema/weights-table-v1.schema.json``.

    Raises
    ------
    LineageError
        The message starts with ``source`` and names each field at fault
        (up to ten), e.g. ``inputs[2].files[0].sha256: must be of type string``.
    """
    if not isinstance(record, dict) or record.get("format") != FORMAT:
        raise LineageError(f"{source} is not a Favour lineage record (it lacks "
                           f"\"format\": \"{FORMAT}\")")
    version = record.get("version")
    if not isinstance(version, int) or isinstance(version, bool) or version > VERSION:
        shown = version if isinstance(version, (int, float, str, type(None))) else type(version).__name__
        raise LineageError(f"{source} is version {shown!r:.40}; this Favour reads version {VERSION}")
    issues = [(json_path(i.path), i.message) for i in load_validator(SCHEMA_FILE).issues(record)]
    table = record.get("table")
    if isinstance(table, dict):
        issues += [(json_path(("table", *i.path)), i.message)
                   for i in load_validator(TABLE_SCHEMA_FILE).issues(table)]
    if issues:
        lines = [f"  - {where or 'the record'}: {message}" for where, message in issues[:10]]
        if len(issues) > 10:
            lines.append(f"  - ... and {len(issues) - 10} more")
        raise LineageError(f"{source} is damaged; Favour cannot use it:\n" + "\n".join(lines))
    if isinstance(record.get("tree"), dict):
        try:
            Tree.from_dict(record["tree"], base_dir=record.get("base_dir"))
        except TreeFileError as exc:
            raise LineageError(f"{source}: its tree cannot be used: {exc}") from None


def changed_inputs(record: dict) -> list[dict]:
    """Compare a lineage's input files with the files on disk now.

    Returns
    -------
    list of dict
        One entry per input file that is missing or whose size or SHA-256
        differs: ``{"node", "path", "change", "recorded", "now"}`` with
        ``change`` one of ``"missing"``, ``"content"``.
    """
    changes = []
    for entry in record.get("inputs", ()):
        for f in entry.get("files", ()):
            path = f["path"]
            if not os.path.isfile(path):
                changes.append({"node": entry.get("node"), "path": path, "change": "missing",
                                "recorded": f["sha256"], "now": None})
                continue
            if os.path.getsize(path) != f["size"] or file_digest(path) != f["sha256"]:
                changes.append({"node": entry.get("node"), "path": path, "change": "content",
                                "recorded": f["sha256"], "now": file_digest(path)})
    return changes


def summary_metadata(record: dict, node: str | None = None) -> dict[str, str]:
    """Return the few GeoTIFF metadata items that point from a raster to its lineage."""
    inputs = record.get("inputs", ())
    items = {
        "FAVOUR_SOFTWARE": f"Favour {record['tool']['version']}",
        "FAVOUR_JOB": record.get("job", ""),
        "FAVOUR_CREATED": record.get("created", ""),
        "FAVOUR_TREE": (record.get("tree") or {}).get("name", ""),
        "FAVOUR_NODE": node or record.get("root", ""),
        "FAVOUR_LINEAGE": record.get("lineage_file", ""),
        "FAVOUR_INPUTS": "; ".join(
            f"{os.path.basename(f['path'])} sha256:{f['sha256'][:12]}"
            for entry in inputs for f in entry.get("files", ())[:1]),
        "FAVOUR_CAUTION": CAUTION,
    }
    return {k: v for k, v in items.items() if v}
