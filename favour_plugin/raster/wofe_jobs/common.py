"""What both weights-of-evidence jobs share: output checks, input records, the lineage record."""

from __future__ import annotations

import os

import numpy as np

from ...core import lineage as lin
from ...core.errors import OutputError
from ...core.feedback import Feedback
from ..grid import Grid
from ..outputs import lineage_header
from ..sources import SourceSpec
from ..tree_inputs import input_files
from ..writer import compression_options


def job_compression(compress: str | None, classes: bool = False) -> dict:
    """Return the lineage's account of a compression choice (refusing an unknown one)."""
    method, options = compression_options(compress, classes)
    return {"method": method, "options": options}


def check_text_output(path: str, suffixes: tuple[str, ...], what: str) -> str:
    """Check a table or report output name; return the absolute path."""
    path = os.path.abspath(path)
    if not path.lower().endswith(suffixes):
        raise OutputError(f"the {what} {path} must end in {' or '.join(suffixes)}")
    if os.path.isdir(path):
        raise OutputError(f"the {what} {path} is a folder; give a file name")
    return path


def read_files(entries: list[tuple[str, str, bool | None]]) -> list[tuple[str, str]]:
    """Return (label, file) for every file the inputs stand for (a shapefile's parts, say).

    ``vector`` is True for a vector source, False for a raster, None for a
    plain file GDAL does not open (a lineage record).
    """
    return [(label, f) for label, path, vector in entries
            for f in ([path] if vector is None else input_files(path, vector) or [path])]


def describe_inputs(entries: list[tuple[str, str, bool]]) -> list[dict]:
    """Return lineage input entries: role, path and each file's size and SHA-256."""
    return [{"role": role, "path": path, "files": lin.describe_files(input_files(path, vector))}
            for role, path, vector in entries]


def job_record(job: str, grid: Grid, inputs: list[dict], parameters: dict, feedback: Feedback,
            created: str, **extra) -> dict:
    """Return a lineage record for a weights-of-evidence job."""
    return {**lineage_header(job, created), "grid": grid.to_dict(), "inputs": inputs,
            "parameters": parameters, "warnings": list(feedback.warnings), "seed": None, **extra}


def masked_block(block: np.ndarray, window, reader, study: SourceSpec | None) -> np.ndarray:
    """Set cells outside the study area to NaN."""
    if study is not None:
        block = np.where(reader.read(study, window) < 0.5, np.nan, block)
    return block
