"""The workshop view's uncertainty runs: Monte Carlo from the experts, and one-at-a-time sensitivity.

The panel only gathers options and starts an
:class:`~.ensemble_job.EnsembleJob`; the algorithms do the work in a QGIS
task. Each run writes into a new folder under the dock's lasting results
folder (the one full runs use). A Monte Carlo's rasters join the project as
one group (:func:`~.results.add_uncertainty_results`); a sensitivity run's
tornado chart is shown in the panel and its table named in the message bar.
"""

from __future__ import annotations

import os
from collections.abc import Callable

from qgis.core import Qgis, QgsMapLayerProxyModel, QgsProject
from qgis.gui import QgsCollapsibleGroupBox, QgsMapLayerComboBox
from qgis.PyQt.QtCore import Qt, pyqtSignal
from qgis.PyQt.QtGui import QPixmap
from qgis.PyQt.QtWidgets import (
    QComboBox,
    QDoubleSpinBox,
    QGridLayout,
    QLabel,
    QProgressBar,
    QPushButton,
    QSpinBox,
)

from ..core.errors import FavourError
from ..core.lineage import CAUTION
from .algorithm_job import remove_empty_folders
from .common import icon, notify, tr
from .ensemble_job import (
    MONTE_CARLO,
    SENSITIVITY,
    EnsembleJob,
    ensemble_folder,
    monte_carlo_parameters,
    sensitivity_parameters,
)
from .output_folders import display_path, ensure_writable
from .results import add_uncertainty_results

#: Widest the tornado chart is shown in the panel, in pixels.
CHART_WIDTH = 520


class UncertaintyPanel(QgsCollapsibleGroupBox):
    """Options and buttons for ``favour:montecarlo`` and ``favour:sensitivity``; progress and Cancel.

    Parameters
    ----------
    controller : TreeController
        Whose tree the runs evaluate (a copy with absolute paths).
    state : WorkshopState
        The round shown gives the sheets, the statistic and the expert weights.
    results_folder : callable
        Returns the lasting folder runs write under (the dock's :meth:`next_folder`).

    Signals
    -------
    finished(EnsembleOutcome)
        After every run, once its layers are added.
    """

    finished = pyqtSignal(object)

    def __init__(self, controller, state, iface, project: QgsProject, results_folder: Callable[[], str],
                 parent=None) -> None:
        super().__init__(tr("Uncertainty"), parent)
        self.controller, self.state, self.iface, self.project = controller, state, iface, project
        self.results_folder = results_folder
        self.job: EnsembleJob | None = None
        self.last_layers: list = []
        self.setCollapsed(True)
        self._build()

    def _build(self) -> None:
        grid = QGridLayout(self)
        self.realisations = QSpinBox()
        self.realisations.setRange(2, 100_000)
        self.realisations.setValue(200)
        self.seed = QSpinBox()
        self.seed.setRange(0, 2**31 - 1)
        self.seed.setValue(1)
        self.mode = QComboBox()
        self.mode.addItem(tr("Resample experts"), "experts")
        self.mode.addItem(tr("Within the stated ranges"), "ranges")
        self.top_percent = QDoubleSpinBox()
        self.top_percent.setRange(0.1, 99.9)
        self.top_percent.setValue(10.0)
        self.top_percent.setSuffix(" %")
        self.fraction = QDoubleSpinBox()
        self.fraction.setRange(0.01, 0.9)
        self.fraction.setSingleStep(0.05)
        self.fraction.setValue(0.1)
        self.fraction.setToolTip(tr("Sensitivity: each weight is changed by ± this fraction"))
        self.deposits = QgsMapLayerComboBox()
        self.deposits.setFilters(QgsMapLayerProxyModel.PointLayer)
        self.deposits.setAllowEmptyLayer(True)
        self.deposits.setLayer(None)
        self.deposits.setToolTip(tr("Known deposits (points, optional): the sensitivity then also "
                                    "reports the change in AUC"))
        self.mc_button = QPushButton(icon("monte-carlo"), tr("Monte Carlo"))
        self.mc_button.setToolTip(tr("Evaluate many trees drawn from the experts' scores in one pass; "
                                     "writes mean, standard deviation, P10, P50, P90 and robustness"))
        self.sensitivity_button = QPushButton(icon("sensitivity"), tr("Sensitivity"))
        self.sensitivity_button.setToolTip(tr("Change each weight by ± the fraction and leave each "
                                              "criterion out; writes a table and a tornado chart"))
        self.cancel_button = QPushButton(icon("cancel"), tr("Cancel"))
        self.progress = QProgressBar()
        self.progress.setRange(0, 100)
        self.status = QLabel()
        self.status.setWordWrap(True)
        self.status.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.chart = QLabel()
        self.chart.setAlignment(Qt.AlignCenter)
        for combo in (self.mode, self.deposits):
            combo.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
            combo.setMinimumContentsLength(12)
        # Short boxes two to a row, combos across: the dock is about 600 px wide.
        grid.addWidget(QLabel(tr("Draws")), 0, 0)
        grid.addWidget(self.realisations, 0, 1)
        grid.addWidget(QLabel(tr("Seed")), 0, 2)
        grid.addWidget(self.seed, 0, 3)
        grid.addWidget(QLabel(tr("Draw")), 1, 0)
        grid.addWidget(self.mode, 1, 1, 1, 3)
        grid.addWidget(QLabel(tr("Top area")), 2, 0)
        grid.addWidget(self.top_percent, 2, 1)
        grid.addWidget(QLabel(tr("Weights ±")), 2, 2)
        grid.addWidget(self.fraction, 2, 3)
        grid.addWidget(QLabel(tr("Deposits")), 3, 0)
        grid.addWidget(self.deposits, 3, 1, 1, 3)
        grid.addWidget(self.mc_button, 4, 0, 1, 2)
        grid.addWidget(self.sensitivity_button, 4, 2)
        grid.addWidget(self.cancel_button, 4, 3)
        grid.addWidget(self.progress, 5, 0, 1, 4)
        grid.addWidget(self.status, 6, 0, 1, 4)
        grid.addWidget(self.chart, 7, 0, 1, 4)
        grid.setColumnStretch(1, 1)
        grid.setColumnStretch(3, 1)
        self.mc_button.clicked.connect(lambda: self.run_monte_carlo())
        self.sensitivity_button.clicked.connect(lambda: self.run_sensitivity())
        self.cancel_button.clicked.connect(self.cancel)
        self._set_running(False)

    # -- running -------------------------------------------------------------------------

    def run_monte_carlo(self) -> EnsembleJob | None:
        """Start ``favour:montecarlo`` on the round shown; return the job (None, with a message, if not)."""
        scores = self.state.scores()
        if scores is None:
            notify(self.iface, tr("Load a round of score sheets first: the Monte Carlo draws from them."),
                   Qgis.Warning)
            return None
        options = {"sheets": scores.files, "realisations": self.realisations.value(),
                   "seed": self.seed.value(), "mode": self.mode.currentData(),
                   "statistic": self.state.statistic, "expert_weights": self.state.weights_text(scores),
                   "top_percent": self.top_percent.value()}
        return self._start(MONTE_CARLO, lambda folder: monte_carlo_parameters(folder, **options))

    def run_sensitivity(self) -> EnsembleJob | None:
        """Start ``favour:sensitivity`` on the tree; return the job (None, with a message, if refused)."""
        layer = self.deposits.currentLayer()
        options = {"fraction": self.fraction.value(), "top_percent": self.top_percent.value(),
                   "deposits": layer.source() if layer is not None else None}
        return self._start(SENSITIVITY, lambda folder: sensitivity_parameters(folder, **options))

    def _start(self, algorithm: str, parameters: Callable[[str], dict]) -> EnsembleJob | None:
        tree = self.controller.tree
        if tree is None:
            notify(self.iface, tr("There is no tree to run."), Qgis.Warning)
            return None
        if self.job is not None and self.job.running:
            notify(self.iface, tr("An uncertainty run is already going on; wait for it or cancel it."),
                   Qgis.Warning)
            return None
        errors = [p for p in tree.problems() if p.level == "error"]
        if errors:
            notify(self.iface, tr("The tree cannot run yet: {problems}").format(
                problems="; ".join(str(p) for p in errors[:3])), Qgis.Critical, 10)
            return None
        try:
            folder = ensemble_folder(ensure_writable(self.results_folder()), algorithm)
        except OSError as exc:
            notify(self.iface, tr("The run did not start: {error}").format(error=exc), Qgis.Critical, 0)
            return None
        job = EnsembleJob(algorithm, self.controller.run_copy(), folder, parameters(folder))
        job.progress_changed.connect(lambda percent: self.progress.setValue(int(percent)))
        job.finished.connect(self._finished)
        try:
            job.start()
        except (RuntimeError, FavourError, OSError) as exc:
            remove_empty_folders(folder)
            notify(self.iface, tr("The run did not start: {error}").format(error=exc), Qgis.Critical)
            return None
        self.job = job
        self._set_running(True)
        self.status.setText(tr("Monte Carlo running…") if algorithm == MONTE_CARLO
                            else tr("Sensitivity running…"))
        return job

    def cancel(self) -> None:
        """Cancel the uncertainty run going on, if any."""
        if self.job is not None and self.job.running:
            self.status.setText(tr("Cancelling…"))
            self.job.cancel()

    def shutdown(self) -> None:
        """Cancel a run going on and stop listening to it (the dock is closing)."""
        if self.job is not None and self.job.running:
            self.job.finished.disconnect(self._finished)
            self.job.cancel()

    def _set_running(self, running: bool) -> None:
        self.mc_button.setEnabled(not running)
        self.sensitivity_button.setEnabled(not running)
        self.cancel_button.setEnabled(running)
        if running:
            self.progress.setValue(0)

    def _finished(self, outcome) -> None:
        self._set_running(False)
        self.last_layers = []
        where = display_path(outcome.folder)
        if outcome.ok and outcome.algorithm == MONTE_CARLO:
            name = self.controller.tree.name if self.controller.tree is not None else ""
            try:
                self.last_layers = add_uncertainty_results(outcome, name, self.project)
            except RuntimeError as exc:
                notify(self.iface, str(exc), Qgis.Critical)
            self.progress.setValue(100)
            self.status.setText(tr("Monte Carlo written to {folder}").format(folder=where))
            notify(self.iface, tr("Monte Carlo written to {folder}, with its lineage. {caution}").format(
                folder=where, caution=tr(CAUTION)), Qgis.Success, 8)
        elif outcome.ok:
            self.progress.setValue(100)
            chart = outcome.files.get("OUTPUT_CHART")
            pixmap = QPixmap(chart) if chart and os.path.exists(chart) else QPixmap()
            if not pixmap.isNull():
                self.chart.setPixmap(pixmap.scaledToWidth(min(CHART_WIDTH, pixmap.width()),
                                                          Qt.SmoothTransformation))
            table = outcome.files.get("OUTPUT_TABLE", "")
            self.status.setText(tr("Sensitivity written to {folder}").format(folder=where))
            notify(self.iface, tr("Sensitivity table written to {path}").format(path=display_path(table)),
                   Qgis.Success, 8)
        elif outcome.cancelled:
            self.status.setText(tr("Cancelled; nothing was written."))
        else:
            self.status.setText(tr("The run failed."))
            notify(self.iface, tr("The run failed: {error}").format(error=outcome.message), Qgis.Critical, 0)
        self.finished.emit(outcome)
