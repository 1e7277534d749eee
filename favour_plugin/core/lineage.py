"""The lineage record: what ran, on which inputs, with which parameters, giving which numbers.

A lineage is a plain dict written beside each output as
``<output>.lineage.json``. It holds the tree as evaluated, every input file
with its size and SHA-256, the grid, each alignment step, the parameters,
the nodata rules, the per-node statistics, warnings, the tool versions and
the time. It is enough on its own to run the job again and compare cells.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
from collections.abc import Iterable
from pathlib import Path

import numpy as np

from .errors import LineageError, OutputError

FORMAT = "favour-lineage"
VERSION = 1
SUFFIX = ".lineage.json"
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


def file_digest(path: str | os.PathLike, chunk: int = 4 * 1024 * 1024) -> str:
    """Return the SHA-256 hex digest of a file, read in chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        while block := handle.read(chunk):
            digest.update(block)
    return digest.hexdigest()


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


def write_lineage(record: dict, output: str | os.PathLike) -> Path:
    """Write ``record`` beside ``output`` atomically and return the lineage file's path."""
    target = lineage_path(output)
    tmp = target.with_name(f".{target.name}.partial")
    try:
        tmp.write_text(json.dumps(record, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
        os.replace(tmp, target)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise OutputError(f"cannot write the lineage {target}: {exc.strerror or exc}") from None
    return target


def read_lineage(path: str | os.PathLike) -> dict:
    """Read the lineage of an output raster (or a lineage file itself) and check its format."""
    path = Path(path)
    target = path if path.name.endswith(SUFFIX) else lineage_path(path)
    try:
        record = json.loads(target.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise LineageError(f"no lineage found for {path}: {target} does not exist") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise LineageError(f"the lineage {target} cannot be read: {exc}") from None
    except json.JSONDecodeError as exc:
        raise LineageError(f"the lineage {target} is not valid JSON: {exc.msg} at line "
                           f"{exc.lineno}") from None
    if not isinstance(record, dict) or record.get("format") != FORMAT:
        raise LineageError(f"{target} is not a Favour lineage record")
    if not isinstance(record.get("version"), int) or record["version"] > VERSION:
        raise LineageError(f"the lineage {target} is version {record.get('version')!r}; "
                           f"this Favour reads version {VERSION}")
    return record


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
