"""The dock's Results tab: validate a favourability map, find ranked targets, write the report.

The page only gathers options and starts a :class:`~.handover_job.HandoverJob`
for ``favour:validate``, ``favour:targets`` or ``favour:report``; the
algorithms do the work in QGIS tasks. Every run writes a new folder of its
own under the dock's lasting results folder (the one full runs use).

What the page takes without asking: the favourability of the last full run
(unless a raster layer is chosen), that run's component rasters, the
robustness and the other rasters of the last Monte Carlo, the table and chart
of the last sensitivity run, and the validation result and targets made here
from the same favourability. The figures shown after a validation are read
back from the JSON the job wrote.
"""

from __future__ import annotations

import os
from collections.abc import Callable

from qgis.core import Qgis, QgsMapLayerProxyModel, QgsProject
from qgis.gui import QgsCollapsibleGroupBox, QgsMapLayerComboBox
from qgis.PyQt.QtCore import Qt, QUrl, pyqtSignal
from qgis.PyQt.QtGui import QDesktopServices
from qgis.PyQt.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDoubleSpinBox,
    QGridLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QProgressBar,
    QPushButton,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from ..core.errors import FavourError
from ..core.lineage import CAUTION
from .algorithm_job import remove_empty_folders
from .common import icon, notify, tr
from .handover_job import (
    REPORT,
    STEMS,
    TARGETS,
    VALIDATE,
    HandoverJob,
    handover_folder,
    parse_capture,
    report_parameters,
    targets_parameters,
    validate_parameters,
    validation_figures,
)
from .output_folders import display_path, ensure_writable
from .results import add_targets_layer
from .run_job import COMPONENT_FOLDER
from .widgets import NumberBox

#: Monte Carlo outputs passed to the report, in the order it draws them.
MONTE_CARLO_KEYS = ("OUTPUT_MEAN", "OUTPUT_STD", "OUTPUT_ROBUSTNESS", "OUTPUT_P10", "OUTPUT_P50",
                    "OUTPUT_P90")


class RunControls(QWidget):
    """A run button, Cancel, a progress bar and a status line."""

    def __init__(self, button: QPushButton, parent=None) -> None:
        super().__init__(parent)
        grid = QGridLayout(self)
        grid.setContentsMargins(0, 0, 0, 0)
        self.run_button = button
        self.cancel_button = QPushButton(icon("cancel"), tr("Cancel"))
        self.progress = QProgressBar()
        self.progress.setRange(0, 100)
        self.status = QLabel()
        self.status.setWordWrap(True)
        self.status.setTextInteractionFlags(Qt.TextSelectableByMouse)
        grid.addWidget(self.run_button, 0, 0)
        grid.addWidget(self.cancel_button, 0, 1)
        grid.addWidget(self.progress, 0, 2)
        grid.addWidget(self.status, 1, 0, 1, 3)
        grid.setColumnStretch(2, 1)
        self.set_running(False)

    def set_running(self, running: bool, text: str = "") -> None:
        """Enable Cancel during a run, the run button otherwise."""
        self.run_button.setEnabled(not running)
        self.cancel_button.setEnabled(running)
        if running:
            self.progress.setValue(0)
        if text:
            self.status.setText(text)


def caution_label() -> QLabel:
    """Return a small label holding the caution every result carries."""
    label = QLabel(tr(CAUTION))
    label.setWordWrap(True)
    label.setStyleSheet("color: palette(mid); font-size: small;")
    return label


def _spin(low: float, high: float, value: float, decimals: int = 2, suffix: str = "") -> QDoubleSpinBox:
    box = QDoubleSpinBox()
    box.setRange(low, high)
    box.setDecimals(decimals)
    box.setValue(value)
    if suffix:
        box.setSuffix(suffix)
    return box


def figures_text(result: dict) -> str:
    """Return the validation figures as the page shows them, from the job's JSON result.

    One paragraph per deposit set: the curve, the deposit cells used, the
    AUC with its interval, the capture efficiency and the prediction–area
    crossing with Nd; then the weak-evidence note where the job gave one.
    """
    level = (result.get("bootstrap") or {}).get("level", 0.95)
    parts = []
    for section in result.get("sets") or []:
        low, high = section.get("auc_ci", [float("nan"), float("nan")])
        p, a = section.get("pa_crossing", [float("nan"), float("nan")])
        capture = "; ".join(tr("{deposits:.1f} % of the deposits in the top {area:g} % of the area").format(
            deposits=c["deposits_percent"], area=c["top_area_percent"]) for c in section.get("capture", []))
        lines = [
            tr("{set} ({curve} curve, {n} deposit cells): AUC {auc:.3f}, {level:g} % interval "
               "{low:.3f}–{high:.3f}").format(set=section.get("set", ""), curve=section.get("curve", ""),
                                              n=section.get("n_deposits", 0), auc=section.get("auc", 0.0),
                                              level=100 * level, low=low, high=high),
            tr("Capture: {capture}").format(capture=capture),
            tr("Prediction–area crossing: {p:.1f} % of the deposits in {a:.1f} % of the area, "
               "Nd {nd:.2f}").format(p=p, a=a, nd=section.get("nd", 0.0)),
        ]
        lines += [tr("Weak evidence: {note}").format(note=note) for note in section.get("warnings", [])]
        parts.append("\n".join(lines))
    return "\n\n".join(parts)


class HandoverView(QWidget):
    """The Results tab: validation, targets and the report from the dock.

    Parameters
    ----------
    controller : TreeController
        Names the model (the report's default title, the targets' layer).
    iface : QgisInterface or None
        For the message bar.
    project : QgsProject
        Where the layer boxes list layers and the targets are added.
    results_folder : callable
        Returns the lasting folder runs write under (the dock's :meth:`next_folder`).

    Signals
    -------
    finished(HandoverOutcome)
        After every run, once its results are shown.
    """

    finished = pyqtSignal(object)

    def __init__(self, controller, iface, project: QgsProject, results_folder: Callable[[], str],
                 parent=None) -> None:
        super().__init__(parent)
        self.controller, self.iface, self.project = controller, iface, project
        self.results_folder = results_folder
        self.jobs: dict[str, HandoverJob] = {}
        self.last_run = None
        self.last_monte_carlo = None
        self.last_sensitivity = None
        #: (validation JSON, favourability it validated), and the JSON's content.
        self.last_validation: tuple[str, str] | None = None
        self.validation_result: dict = {}
        #: (targets GeoPackage, favourability they come from).
        self.last_targets: tuple[str, str] | None = None
        self.last_report: str | None = None
        self.targets_layer = None
        #: Opens a URL (the report); replaceable in tests.
        self.open_url: Callable[[QUrl], bool] = QDesktopServices.openUrl
        self._components_shown: str | None = None
        self._build()
        self.refresh()

    # -- building --------------------------------------------------------------------------

    def _build(self) -> None:
        layout = QVBoxLayout(self)
        layout.setContentsMargins(2, 2, 2, 2)
        inputs = QGridLayout()
        self.raster_box = QgsMapLayerComboBox()
        self.raster_box.setFilters(QgsMapLayerProxyModel.RasterLayer)
        self.raster_box.setAllowEmptyLayer(True)
        self.raster_box.setLayer(None)
        self.raster_box.setToolTip(tr("The favourability to validate, cut into targets and report on; "
                                      "left empty, the last full run's"))
        self.raster_note = QLabel()
        self.raster_note.setWordWrap(True)
        self.raster_note.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.deposits_box = QgsMapLayerComboBox()
        self.deposits_box.setFilters(QgsMapLayerProxyModel.PointLayer)
        self.deposits_box.setAllowEmptyLayer(True)
        self.deposits_box.setLayer(None)
        self.deposits_box.setToolTip(tr("Known deposits (points): validation needs them; the targets "
                                        "count them per zone and the report draws them"))
        inputs.addWidget(QLabel(tr("Favourability")), 0, 0)
        inputs.addWidget(self.raster_box, 0, 1)
        inputs.addWidget(self.raster_note, 1, 0, 1, 2)
        inputs.addWidget(QLabel(tr("Deposits")), 2, 0)
        inputs.addWidget(self.deposits_box, 2, 1)
        inputs.setColumnStretch(1, 1)
        layout.addLayout(inputs)
        layout.addWidget(self._validation_section())
        layout.addWidget(self._targets_section())
        layout.addWidget(self._report_section())
        layout.addStretch(1)
        # Combos as narrow as a dock about 600 px wide allows; their full texts are in the list.
        for combo in (self.raster_box, self.deposits_box, self.held_out_box, self.curve_box, self.cut_box):
            combo.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
            combo.setMinimumContentsLength(12)
        # Only what the page says follows the user's pick (``activated``; ``layerChanged`` also fires
        # while a layer leaves the project); runs read the boxes when they start.
        self.raster_box.activated.connect(lambda _index: self.refresh())
        self.deposits_box.activated.connect(lambda _index: self.refresh())

    def _validation_section(self) -> QgsCollapsibleGroupBox:
        box = QgsCollapsibleGroupBox(tr("Validate"))
        grid = QGridLayout(box)
        self.held_out_box = QgsMapLayerComboBox()
        self.held_out_box.setFilters(QgsMapLayerProxyModel.PointLayer)
        self.held_out_box.setAllowEmptyLayer(True)
        self.held_out_box.setLayer(None)
        self.held_out_box.setToolTip(tr("Deposits kept out of building the map (optional): they get a "
                                        "prediction-rate curve of their own"))
        self.curve_box = QComboBox()
        self.curve_box.addItem(tr("Deposits used to build the map (success rate)"), "success")
        self.curve_box.addItem(tr("Deposits kept out of the map (prediction rate)"), "prediction")
        self.curve_box.setToolTip(tr("Did the deposits help build or calibrate the map (success-rate "
                                     "curve), or were they kept out of it (prediction-rate curve)?"))
        self.capture_edit = QLineEdit("5, 10, 20")
        self.capture_edit.setToolTip(tr("Top shares of the area, in %, for the share of deposits they hold"))
        self.resamples_box = QSpinBox()
        self.resamples_box.setRange(1, 100_000)
        self.resamples_box.setValue(1000)
        self.seed_box = QSpinBox()
        self.seed_box.setRange(0, 2**31 - 1)
        self.seed_box.setValue(1)
        button = QPushButton(icon("validate"), tr("Validate"))
        button.setToolTip(tr("Rank the map's cells and place the deposits in that ranking: rate curve, "
                             "AUC with a bootstrap interval, capture and the prediction–area crossing"))
        self.validate_controls = RunControls(button)
        self.figures = QLabel()
        self.figures.setWordWrap(True)
        self.figures.setTextInteractionFlags(Qt.TextSelectableByMouse)
        grid.addWidget(QLabel(tr("Held out")), 0, 0)
        grid.addWidget(self.held_out_box, 0, 1, 1, 3)
        grid.addWidget(self.curve_box, 1, 0, 1, 4)
        grid.addWidget(QLabel(tr("Capture at (%)")), 2, 0)
        grid.addWidget(self.capture_edit, 2, 1, 1, 3)
        grid.addWidget(QLabel(tr("Resamples")), 3, 0)
        grid.addWidget(self.resamples_box, 3, 1)
        grid.addWidget(QLabel(tr("Seed")), 3, 2)
        grid.addWidget(self.seed_box, 3, 3)
        grid.addWidget(self.validate_controls, 4, 0, 1, 4)
        grid.addWidget(self.figures, 5, 0, 1, 4)
        grid.setColumnStretch(1, 1)
        grid.setColumnStretch(3, 1)
        button.clicked.connect(lambda: self.run_validation())
        self.validate_controls.cancel_button.clicked.connect(lambda: self.cancel(VALIDATE))
        return box

    def _targets_section(self) -> QgsCollapsibleGroupBox:
        box = QgsCollapsibleGroupBox(tr("Targets"))
        grid = QGridLayout(box)
        self.cut_box = QComboBox()
        self.cut_box.addItem(tr("Top of the area"), "top")
        self.cut_box.addItem(tr("Favourability at or above"), "threshold")
        self.cut_box.addItem(tr("The validation's P–A crossing"), "validation")
        self.cut_box.setToolTip(tr("Where the map is cut: the top share of the area, a favourability "
                                   "value, or the prediction–area crossing of the validation made here"))
        self.top_box = _spin(0.001, 99.999, 10.0, 3, " %")
        self.threshold_box = NumberBox()
        self.threshold_box.setValue(0.7)
        self.min_area_box = _spin(0.0, 1e9, 0.0, 4, " km²")
        self.merge_box = _spin(0.0, 1e9, 0.0, 2, tr(" map units"))
        self.merge_box.setToolTip(tr("Zones closer than this, edge to edge, become one (map units of the "
                                     "favourability's CRS)"))
        self.components_check = QCheckBox(tr("Components' μ per zone"))
        self.robustness_check = QCheckBox(tr("Monte Carlo robustness"))
        button = QPushButton(icon("targets"), tr("Find targets"))
        button.setToolTip(tr("Cut the map, turn the ground above the cut into zones, rank them and say "
                             "why each ranks; the zones join the project as a styled layer"))
        self.targets_controls = RunControls(button)
        rows = ((tr("Cut"), self.cut_box), (tr("Top area"), self.top_box),
                (tr("Threshold"), self.threshold_box), (tr("Smallest zone"), self.min_area_box),
                (tr("Merge within"), self.merge_box))
        for row, (label, widget) in enumerate(rows):
            grid.addWidget(QLabel(label), row, 0)
            grid.addWidget(widget, row, 1)
        grid.addWidget(self.components_check, 5, 0, 1, 2)
        grid.addWidget(self.robustness_check, 6, 0, 1, 2)
        grid.addWidget(self.targets_controls, 7, 0, 1, 2)
        grid.addWidget(caution_label(), 8, 0, 1, 2)
        grid.setColumnStretch(1, 1)
        self.cut_box.currentIndexChanged.connect(lambda _index: self.refresh())
        button.clicked.connect(lambda: self.run_targets())
        self.targets_controls.cancel_button.clicked.connect(lambda: self.cancel(TARGETS))
        return box

    def _report_section(self) -> QgsCollapsibleGroupBox:
        box = QgsCollapsibleGroupBox(tr("Report"))
        grid = QGridLayout(box)
        self.title_edit = QLineEdit()
        self.title_edit.setToolTip(tr("The report's title (default: the model's name)"))
        self.report_inputs = QLabel()
        self.report_inputs.setWordWrap(True)
        button = QPushButton(icon("report"), tr("Write report"))
        button.setToolTip(tr("One HTML page, readable offline: maps, the tree, memberships, validation, "
                             "targets, uncertainty and the lineage"))
        self.report_controls = RunControls(button)
        self.open_button = QPushButton(tr("Open report"))
        self.open_button.setEnabled(False)
        row = QHBoxLayout()
        row.addWidget(self.open_button)
        row.addStretch(1)
        grid.addWidget(QLabel(tr("Title")), 0, 0)
        grid.addWidget(self.title_edit, 0, 1)
        grid.addWidget(self.report_inputs, 1, 0, 1, 2)
        grid.addWidget(self.report_controls, 2, 0, 1, 2)
        grid.addLayout(row, 3, 0, 1, 2)
        grid.addWidget(caution_label(), 4, 0, 1, 2)
        grid.setColumnStretch(1, 1)
        button.clicked.connect(lambda: self.run_report())
        self.report_controls.cancel_button.clicked.connect(lambda: self.cancel(REPORT))
        self.open_button.clicked.connect(lambda: self.open_report())
        return box

    # -- what the runs take ------------------------------------------------------------------

    def set_last_run(self, outcome) -> None:
        """Remember a finished full run: its favourability is the default input from now on."""
        if outcome is None or not getattr(outcome, "ok", False) or getattr(outcome, "quick", False):
            return
        self.last_run = outcome
        self.raster_box.setLayer(None)
        self.refresh()

    def set_uncertainty(self, outcome) -> None:
        """Remember a finished Monte Carlo or sensitivity run (an :class:`~.ensemble_job.EnsembleOutcome`)."""
        if outcome is None or not getattr(outcome, "ok", False):
            return
        if "OUTPUT_ROBUSTNESS" in outcome.files or "OUTPUT_MEAN" in outcome.files:
            self.last_monte_carlo = outcome
            self.robustness_check.setChecked("OUTPUT_ROBUSTNESS" in outcome.files)
        elif "OUTPUT_TABLE" in outcome.files:
            self.last_sensitivity = outcome
        self.refresh()

    def favourability(self) -> str | None:
        """Return the raster the runs read: the layer chosen, else the last full run's output."""
        layer = self.raster_box.currentLayer()
        if layer is not None:
            return layer.source()
        if self.last_run is not None and self.last_run.output and os.path.exists(self.last_run.output):
            return os.path.abspath(self.last_run.output)
        return None

    def components_folder(self, raster: str | None = None) -> str | None:
        """Return the component rasters that go with the favourability, if a run wrote them.

        The last full run's node folder for its own favourability; for
        another raster, a ``components`` folder beside it (as dock runs
        write them).
        """
        raster = raster or self.favourability()
        if not raster:
            return None
        run = self.last_run
        if run is not None and run.output and _same(run.output, raster):
            folder = run.node_folder
        else:
            folder = os.path.join(os.path.dirname(os.path.abspath(raster)), COMPONENT_FOLDER)
        try:
            found = bool(folder) and any(name.lower().endswith(".tif") for name in os.listdir(folder))
        except OSError:  # no such folder (the run wrote no components), or it went meanwhile
            found = False
        return os.path.abspath(folder) if found else None

    def robustness(self) -> str | None:
        """Return the last Monte Carlo's robustness raster, if there is one."""
        outcome = self.last_monte_carlo
        path = outcome.files.get("OUTPUT_ROBUSTNESS") if outcome is not None else None
        return path if path and os.path.exists(path) else None

    def validation_for(self, raster: str | None) -> str | None:
        """Return the validation result made here from ``raster``, if any."""
        if self.last_validation and raster and _same(self.last_validation[1], raster) \
                and os.path.exists(self.last_validation[0]):
            return self.last_validation[0]
        return None

    def targets_for(self, raster: str | None) -> str | None:
        """Return the targets found here from ``raster``, if any."""
        if self.last_targets and raster and _same(self.last_targets[1], raster) \
                and os.path.exists(self.last_targets[0]):
            return self.last_targets[0]
        return None

    def refresh(self) -> None:
        """Say what the runs will read, and enable what can be used."""
        raster = self.favourability()
        if self.raster_box.currentLayer() is not None:
            self.raster_note.setText(tr("The layer chosen: {path}").format(path=display_path(raster or "")))
        elif raster:
            self.raster_note.setText(tr("Left empty: the last full run, {path}").format(
                path=display_path(raster)))
        else:
            self.raster_note.setText(tr("No full run yet: run the tree, or choose a raster layer."))
        components = self.components_folder(raster)
        self.components_check.setEnabled(components is not None)
        if components != self._components_shown:  # new components are used until the user says not
            self.components_check.setChecked(components is not None)
            self._components_shown = components
        self.components_check.setToolTip(display_path(components) if components else
                                         tr("No component rasters with this favourability: tick "
                                            "'Also write component rasters' before a run"))
        robustness = self.robustness()
        self.robustness_check.setEnabled(robustness is not None)
        if robustness is None:
            self.robustness_check.setChecked(False)
        self.robustness_check.setToolTip(display_path(robustness) if robustness else
                                         tr("No Monte Carlo run yet (Workshop tab)"))
        cut = self.cut_box.currentData()
        self.top_box.setEnabled(cut == "top")
        self.threshold_box.setEnabled(cut == "threshold")
        parts = [tr("the favourability")] if raster else []
        if components:
            parts.append(tr("its components"))
        if self.validation_for(raster):
            parts.append(tr("the validation"))
        if self.targets_for(raster):
            parts.append(tr("the targets"))
        if self.last_monte_carlo is not None:
            parts.append(tr("the Monte Carlo rasters"))
        if self.last_sensitivity is not None:
            parts.append(tr("the sensitivity table and chart"))
        if self.deposits_box.currentLayer() is not None:
            parts.append(tr("the deposits"))
        self.report_inputs.setText(tr("The report holds: {parts}.").format(parts=", ".join(parts))
                                   if parts else tr("Nothing to report yet."))
        if not self.title_edit.text() and self.controller.tree is not None:
            self.title_edit.setPlaceholderText(self.controller.tree.name or "")

    # -- running ----------------------------------------------------------------------------

    def run_validation(self) -> HandoverJob | None:
        """Start ``favour:validate``; return the job (None, with a named message, if refused)."""
        raster = self._raster_or_say()
        deposits = self.deposits_box.currentLayer()
        if raster is None:
            return None
        if deposits is None:
            notify(self.iface, tr("Validation needs known deposits: choose a point layer under "
                                  "Deposits."), Qgis.Warning)
            return None
        try:
            capture = parse_capture(self.capture_edit.text())
        except ValueError as exc:
            notify(self.iface, str(exc), Qgis.Warning)
            return None
        held_out = self.held_out_box.currentLayer()
        options = {"held_out": held_out.id() if held_out is not None else None,
                   "curve": self.curve_box.currentData(), "capture": capture,
                   "resamples": self.resamples_box.value(), "seed": self.seed_box.value()}
        self.figures.setText("")
        return self._start(VALIDATE, raster,
                           lambda folder: validate_parameters(folder, raster, deposits.id(), **options))

    def run_targets(self) -> HandoverJob | None:
        """Start ``favour:targets``; return the job (None, with a named message, if refused)."""
        raster = self._raster_or_say()
        if raster is None:
            return None
        cut = self.cut_box.currentData()
        validation = self.validation_for(raster)
        if cut == "validation" and validation is None:
            notify(self.iface, tr("Validate this favourability first: the cut from the validation takes "
                                  "its prediction–area crossing."), Qgis.Warning)
            return None
        deposits = self.deposits_box.currentLayer()
        options = {"cut": cut, "top_percent": self.top_box.value(), "threshold": self.threshold_box.value(),
                   "validation": validation, "min_area": self.min_area_box.value(),
                   "merge_distance": self.merge_box.value(),
                   "components": (self.components_folder(raster) if self.components_check.isChecked()
                                  else None),
                   "robustness": self.robustness() if self.robustness_check.isChecked() else None,
                   "deposits": deposits.id() if deposits is not None else None}
        return self._start(TARGETS, raster, lambda folder: targets_parameters(folder, raster, **options))

    def run_report(self) -> HandoverJob | None:
        """Start ``favour:report`` with everything the run folder and the session have; return the job."""
        raster = self._raster_or_say()
        if raster is None:
            return None
        deposits = self.deposits_box.currentLayer()
        mc = self.last_monte_carlo
        sensitivity = self.last_sensitivity
        options = {
            "title": self.title_edit.text(),  # empty: the job takes the model's name from the lineage
            "components": self.components_folder(raster), "validation": self.validation_for(raster),
            "targets": self.targets_for(raster),
            "monte_carlo": [mc.files[k] for k in MONTE_CARLO_KEYS
                            if mc is not None and mc.files.get(k) and os.path.exists(mc.files[k])],
            "sensitivity_table": _existing(sensitivity.files.get("OUTPUT_TABLE")) if sensitivity else None,
            "sensitivity_chart": _existing(sensitivity.files.get("OUTPUT_CHART")) if sensitivity else None,
            "deposits": deposits.id() if deposits is not None else None}
        self.open_button.setEnabled(False)
        return self._start(REPORT, raster, lambda folder: report_parameters(folder, raster, **options))

    def _raster_or_say(self) -> str | None:
        raster = self.favourability()
        if raster is None:
            notify(self.iface, tr("There is no favourability to work on: run the tree (Run, not Quick "
                                  "look) or choose a raster layer under Favourability."), Qgis.Warning)
        return raster

    def controls(self, algorithm: str) -> RunControls:
        """Return the run controls of one algorithm's section."""
        return {VALIDATE: self.validate_controls, TARGETS: self.targets_controls,
                REPORT: self.report_controls}[algorithm]

    def _start(self, algorithm: str, raster: str, parameters: Callable[[str], dict]) -> HandoverJob | None:
        running = self.jobs.get(algorithm)
        if running is not None and running.running:
            notify(self.iface, tr("A {run} run is already going on; wait for it or cancel it.").format(
                run=tr(STEMS[algorithm])), Qgis.Warning)
            return None
        try:
            folder = handover_folder(ensure_writable(self.results_folder()), algorithm)
        except OSError as exc:
            notify(self.iface, tr("The run did not start: {error}").format(error=exc), Qgis.Critical, 0)
            return None
        try:
            values = parameters(folder)
        except ValueError as exc:
            remove_empty_folders(folder)
            notify(self.iface, str(exc), Qgis.Warning)
            return None
        job = HandoverJob(algorithm, folder, values, self.project, raster)
        controls = self.controls(algorithm)
        job.progress_changed.connect(lambda percent: controls.progress.setValue(int(percent)))
        job.finished.connect(self._finished)
        try:
            job.start()
        except (RuntimeError, FavourError, OSError) as exc:
            remove_empty_folders(folder)
            notify(self.iface, tr("The run did not start: {error}").format(error=exc), Qgis.Critical)
            return None
        self.jobs[algorithm] = job
        controls.set_running(True, {VALIDATE: tr("Validating…"), TARGETS: tr("Finding targets…"),
                                    REPORT: tr("Writing the report…")}[algorithm])
        return job

    def cancel(self, algorithm: str) -> None:
        """Cancel the run of ``algorithm`` going on, if any."""
        job = self.jobs.get(algorithm)
        if job is not None and job.running:
            self.controls(algorithm).status.setText(tr("Cancelling…"))
            job.cancel()

    def busy(self) -> bool:
        """Return True while any of the three runs is going on."""
        return any(job.running for job in self.jobs.values())

    def shutdown(self) -> None:
        """Cancel the runs going on and stop listening to them (the dock is closing)."""
        for job in self.jobs.values():
            if job.running:
                job.finished.disconnect(self._finished)
                job.cancel()

    def open_report(self) -> bool:
        """Open the last report in the system's browser; return whether it opened."""
        if not self.last_report or not os.path.exists(self.last_report):
            return False
        return bool(self.open_url(QUrl.fromLocalFile(self.last_report)))

    def _finished(self, outcome) -> None:
        controls = self.controls(outcome.algorithm)
        controls.set_running(False)
        job = self.jobs.get(outcome.algorithm)
        raster = job.favourability if job is not None else None
        where = display_path(outcome.folder)
        try:
            if outcome.ok:
                controls.progress.setValue(100)
                {VALIDATE: self._validated, TARGETS: self._targets_found,
                 REPORT: self._report_written}[outcome.algorithm](outcome, raster, controls)
            elif outcome.cancelled:
                controls.status.setText(tr("Cancelled; nothing was written."))
            else:
                controls.status.setText(tr("The run failed; nothing was written."))
                notify(self.iface, tr("The {run} run failed: {error}").format(
                    run=tr(STEMS[outcome.algorithm]), error=outcome.message), Qgis.Critical, 0)
        except (FavourError, RuntimeError, OSError, KeyError, TypeError, ValueError) as exc:
            # The files are written; only showing them failed. A slot must not raise.
            controls.status.setText(tr("Written to {folder}, but not shown: {error}").format(
                folder=where, error=exc))
            notify(self.iface, str(exc), Qgis.Critical)
        self.refresh()
        self.finished.emit(outcome)

    def _validated(self, outcome, raster, controls) -> None:
        path = outcome.file("OUTPUT_JSON")
        self.last_validation = (path, raster)
        self.validation_result = validation_figures(path)
        self.figures.setText(figures_text(self.validation_result))
        controls.status.setText(tr("Validation written to {folder}").format(
            folder=display_path(outcome.folder)))
        notify(self.iface, tr("Validation written to {path}, with its lineage.").format(
            path=display_path(path)), Qgis.Success, 8)

    def _targets_found(self, outcome, raster, controls) -> None:
        path = outcome.file("OUTPUT")
        self.last_targets = (path, raster)
        tree = self.controller.tree
        self.targets_layer = add_targets_layer(path, tree.name if tree is not None else "", self.project)
        zones = int(outcome.results.get("ZONES", 0))
        controls.status.setText(tr("{zones} zones at favourability ≥ {value:.4g}, written to "
                                   "{folder}").format(
            zones=zones, value=float(outcome.results.get("THRESHOLD_USED", float("nan"))),
            folder=display_path(outcome.folder)))
        notify(self.iface, tr("Targets written to {path}, with their lineage. {caution}").format(
            path=display_path(path), caution=tr(CAUTION)), Qgis.Success, 8)

    def _report_written(self, outcome, raster, controls) -> None:
        path = outcome.file("OUTPUT")
        self.last_report = path
        self.open_button.setEnabled(True)
        controls.status.setText(tr("Report written to {path}").format(path=display_path(path)))
        notify(self.iface, tr("Report written to {path}; open it with 'Open report'. {caution}").format(
            path=display_path(path), caution=tr(CAUTION)), Qgis.Success, 10)


def _same(first: str, second: str) -> bool:
    """Return True when two paths name the same file."""
    try:
        return os.path.samefile(first, second)
    except OSError:
        return os.path.normcase(os.path.abspath(first)) == os.path.normcase(os.path.abspath(second))


def _existing(path: str | None) -> str | None:
    return path if path and os.path.exists(path) else None
