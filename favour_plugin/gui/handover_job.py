"""Validation, targets and the report (``favour:validate``, ``favour:targets``, ``favour:report``) as tasks.

:class:`HandoverJob` is to these algorithms what
:class:`~.ensemble_job.EnsembleJob` is to the uncertainty runs: it runs the
algorithm through :class:`~.algorithm_job.AlgorithmJob` with progress and
cancel and reports back in the main thread with a :class:`HandoverOutcome`. Each run
writes into a new folder of its own (``validation-YYYYMMDD-HHMMSS``,
``targets-…``, ``report-…``) under the dock's lasting results folder, made
by :func:`handover_folder`; the jobs put nothing under their final names
unless they succeed, and a failed or cancelled run leaves no folder behind.

:func:`validate_parameters`, :func:`targets_parameters` and
:func:`report_parameters` build the algorithms' parameters (their keys are
the algorithms' parameter names), so what the dock asks for is plain data.
:func:`validation_figures` reads back the JSON the validation job wrote:
what the dock shows is that file's numbers, not numbers of its own.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass, field

from qgis.core import QgsProject
from qgis.PyQt.QtCore import QObject

from ..core.jsonio import LINEAGE_MAX_BYTES, read_json_file
from .algorithm_job import AlgorithmJob, stamped_folder
from .common import tr

VALIDATE = "favour:validate"
TARGETS = "favour:targets"
REPORT = "favour:report"
#: Folder name stem of each kind of run.
STEMS = {VALIDATE: "validation", TARGETS: "targets", REPORT: "report"}
VALIDATION_JSON = "validation.json"
VALIDATION_CSV = "curves.csv"
TARGETS_FILE = "targets.gpkg"
REPORT_FILE = "report.html"
#: How the targets' cut is chosen: the top of the area, a favourability value, the validation's crossing.
CUTS = ("top", "threshold", "validation")

@dataclass
class HandoverOutcome:
    """How a run ended: the algorithm's results (output name → value), or why there are none."""

    ok: bool
    cancelled: bool
    algorithm: str
    folder: str
    results: dict = field(default_factory=dict)
    message: str = ""

    def file(self, key: str) -> str | None:
        """Return the output file under ``key`` if the run wrote it."""
        value = self.results.get(key)
        return value if isinstance(value, str) and value and os.path.exists(value) else None


def handover_folder(base: str, algorithm: str) -> str:
    """Make and return a new folder under ``base`` for one run (``validation-YYYYMMDD-HHMMSS``, …).

    Raises
    ------
    OSError
        The folder cannot be made.
    """
    return stamped_folder(base, STEMS[algorithm])


def parse_capture(text: str) -> list[float]:
    """Parse top shares of the area ("5, 10, 20") into numbers.

    Raises
    ------
    ValueError
        The text is empty or holds something that is not a number; the
        message quotes it.
    """
    items = [item.strip() for item in str(text).replace(";", ",").split(",") if item.strip()]
    try:
        values = [float(item) for item in items]
    except ValueError:
        values = []
    if not values:
        raise ValueError(tr("the capture shares {text!r} are not a list of percentages such as "
                            "5, 10, 20").format(text=str(text).strip()))
    return values


def validate_parameters(folder: str, raster: str, deposits, *, held_out=None, curve: str = "success",
                        capture: Sequence[float] = (5.0, 10.0, 20.0), resamples: int = 1000,
                        seed: int = 1) -> dict:
    """Return ``favour:validate``'s parameters writing the result and the curves into ``folder``.

    ``deposits`` and ``held_out`` are layer ids of the project or sources.
    """
    parameters = {"INPUT": raster, "DEPOSITS": deposits, "CURVE": curve,
                  "CAPTURE": ", ".join(f"{float(p):g}" for p in capture), "RESAMPLES": int(resamples),
                  "SEED": int(seed), "OUTPUT_JSON": os.path.join(folder, VALIDATION_JSON),
                  "OUTPUT_CSV": os.path.join(folder, VALIDATION_CSV)}
    if held_out:
        parameters["HELD_OUT"] = held_out
    return parameters


def targets_parameters(folder: str, raster: str, *, cut: str = "top", top_percent: float = 10.0,
                       threshold: float | None = None, validation: str | None = None,
                       min_area: float = 0.0, merge_distance: float = 0.0, components: str | None = None,
                       robustness: str | None = None, deposits=None) -> dict:
    """Return ``favour:targets``' parameters writing ``targets.gpkg`` into ``folder``.

    ``cut`` is one of :data:`CUTS`: the top ``top_percent`` % of the area,
    the favourability ``threshold``, or the prediction–area crossing of the
    ``validation`` result.

    Raises
    ------
    ValueError
        An unknown cut, or the cut's value missing.
    """
    if cut not in CUTS:
        raise ValueError(f"the cut must be one of {', '.join(CUTS)}, got {cut!r}")
    parameters = {"INPUT": raster, "TOP_PERCENT": float(top_percent), "MIN_AREA": float(min_area),
                  "MERGE_DISTANCE": float(merge_distance), "OUTPUT": os.path.join(folder, TARGETS_FILE)}
    if cut == "threshold":
        if threshold is None:
            raise ValueError(tr("a favourability threshold is needed for this cut"))
        parameters["THRESHOLD"] = float(threshold)
    elif cut == "validation":
        if not validation:
            raise ValueError(tr("validate first: the cut from the validation takes its prediction–area "
                                "crossing"))
        parameters["VALIDATION"] = validation
    for key, value in (("COMPONENTS", components), ("ROBUSTNESS", robustness), ("DEPOSITS", deposits)):
        if value:
            parameters[key] = value
    return parameters


def report_parameters(folder: str, raster: str, *, title: str = "", components: str | None = None,
                      validation: str | None = None, targets: str | None = None,
                      monte_carlo: Sequence[str] = (), sensitivity_table: str | None = None,
                      sensitivity_chart: str | None = None, deposits=None) -> dict:
    """Return ``favour:report``'s parameters writing ``report.html`` into ``folder``."""
    parameters = {"INPUT": raster, "OUTPUT": os.path.join(folder, REPORT_FILE)}
    if title.strip():
        parameters["TITLE"] = title.strip()
    for key, value in (("COMPONENTS", components), ("VALIDATION", validation), ("TARGETS", targets),
                       ("SENSITIVITY_TABLE", sensitivity_table), ("SENSITIVITY_CHART", sensitivity_chart),
                       ("DEPOSITS", deposits)):
        if value:
            parameters[key] = value
    if monte_carlo:
        parameters["MONTE_CARLO"] = [str(p) for p in monte_carlo]
    return parameters


def validation_figures(path: str) -> dict:
    """Return the validation job's result (its JSON) as written.

    Raises
    ------
    InputError
        The file cannot be read as JSON (named with the reason).
    """
    document = read_json_file(path, max_bytes=LINEAGE_MAX_BYTES, what="validation result")
    return document if isinstance(document, dict) else {}


class HandoverJob(AlgorithmJob):
    """Run one of the three algorithms into ``folder`` in the background.

    Parameters
    ----------
    algorithm : str
        :data:`VALIDATE`, :data:`TARGETS` or :data:`REPORT`.
    folder : str
        The run's own folder (made by :func:`handover_folder`).
    parameters : dict
        The algorithm's parameters; layers may be given by their ids in ``project``.
    project : QgsProject, optional
        Where layer ids are looked up (the algorithm finds their files in the
        main thread, before the task starts).
    favourability : str, optional
        The favourability raster the run reads, kept for whoever uses its results.

    :attr:`finished` carries a :class:`HandoverOutcome`.
    """

    def __init__(self, algorithm: str, folder: str, parameters: dict, project: QgsProject | None = None,
                 favourability: str | None = None, parent: QObject | None = None) -> None:
        super().__init__(algorithm, folder, project, parent)
        self.favourability = favourability
        self.given = dict(parameters)

    def parameters(self) -> dict:
        """Return the parameters the job was given."""
        return self.given

    def outcome_for(self, ok: bool, cancelled: bool, results: dict, message: str = "") -> HandoverOutcome:
        """Return the run's :class:`HandoverOutcome`: the algorithm's results, or why there are none."""
        return HandoverOutcome(ok, cancelled, self.algorithm, self.folder, results, message)
