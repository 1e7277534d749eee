"""A leaf's membership function beside what it does to the layer's values.

Joins the :class:`~.membership_form.MembershipForm` and the
:class:`~.plot.MembershipPlot`: the plot shows μ(x) over the histogram of the
proxy's sampled values, which the :class:`~.histogram.SampleService` takes off
the main thread. Choosing another function type, or *Fit to data*, starts
from parameters spanning the sampled values (:mod:`.defaults`).

The class table of a raster criterion lists every class of the whole band
with its cells: :func:`~favour_plugin.raster.classes.count_classes` runs in a
task (:class:`~.tasks.KeyedTasks`) once a class table is shown; until it is
in, or where the band holds continuous values, the sample's classes stand in
and the note under the table says so.
"""

from __future__ import annotations

from qgis.PyQt.QtWidgets import QGroupBox, QVBoxLayout

from ..raster.classes import count_classes
from .common import tr
from .defaults import code_key, starting_membership
from .membership_form import CLASS_TYPES, MembershipForm, code_order
from .plot import MembershipPlot, _parameter_xs
from .sampling import sample_key
from .tasks import KeyedTasks


def is_falling(spec: dict | None, is_distance: bool) -> bool:
    """Return True when ``spec`` gives high μ to low values (or, with no spec, for distances)."""
    if not spec:
        return is_distance
    kind = spec.get("type")
    if kind == "linear":
        return spec.get("lower", 0) > spec.get("upper", 1)
    if kind == "logistic":
        return spec.get("slope", 1) < 0
    if kind == "piecewise":
        points = [p for p in spec.get("points", []) if isinstance(p, list) and len(p) == 2]
        return len(points) >= 2 and points[0][1] > points[-1][1]
    if kind == "gaussian":
        return is_distance and spec.get("centre", 1) == 0
    return is_distance


class MembershipPanel(QGroupBox):
    """Membership form and plot of the selected leaf."""

    def __init__(self, controller, samples, parent=None) -> None:
        super().__init__(tr("Membership μ"), parent)
        self.controller = controller
        self.samples = samples
        self.tree = None
        self.path = ""
        self.key = None
        #: (file, band) of a raster criterion, whose classes are counted over the whole band.
        self.count_key = None
        self.classes = KeyedTasks(count_classes, tr("Favour: counting the classes of {0}"), self)
        self.classes.ready.connect(self._counts_arrived)
        self.classes.failed.connect(self._counts_arrived)
        layout = QVBoxLayout(self)
        self.form = MembershipForm()
        self.plot = MembershipPlot()
        layout.addWidget(self.form)
        self.form.insert_below_type(self.plot)
        self.form.edited.connect(self._edited)
        self.form.type_chosen.connect(self._type_chosen)
        self.form.fit_requested.connect(self._fit)
        self.form.fill_requested.connect(self._fill_classes)
        samples.ready.connect(self._sample_arrived)
        samples.failed.connect(self._sample_arrived)

    def show_node(self, tree, path: str, node) -> None:
        """Show the leaf's function; ask for its layer's sample if it has a layer."""
        self.tree, self.path = tree, path
        sample = None
        self.key = self.count_key = None
        if node.proxy is not None:
            self.key = sample_key(tree, path)
            sample = self.samples.request(tree, path)
            if not node.proxy.is_vector:
                self.count_key = (str(node.proxy.resolve(tree.base_dir)), node.proxy.band or 1)
        self._show_form(node.membership, sample)
        self._draw(node.membership, sample)

    def _show_form(self, spec, sample) -> None:
        """Show the function, with the class table's counts and where they come from."""
        counts, note, whole = self._class_counts(spec, sample)
        self.form.show_spec(spec, counts, note, whole)

    def _class_counts(self, spec, sample) -> tuple[dict | None, str, bool]:
        """Return (class → cells, a note on where they come from, whether they cover every cell)."""
        sampled = sample.classes if sample is not None else None
        note = tr("Classes found in a sample of about {n} cells.").format(n=sample.count) \
            if sampled else ""
        kind = (spec or {}).get("type")
        if self.count_key is None or kind not in CLASS_TYPES:
            return sampled, note, False
        counted = self.classes.request(*self.count_key)
        if counted is not None:
            source = tr("from the raster's attribute table") if counted.source == "attribute table" \
                else tr("counted over every block")
            return counted.as_dict(), tr("Every class of the whole raster: {n} cells, {source}.").format(
                n=counted.total, source=source), True
        error = self.classes.error(self.count_key)
        if error:
            return sampled, tr("{note} The whole raster is not counted: {error}").format(
                note=note, error=error).strip(), False
        return sampled, tr("Counting the classes of the whole raster…"), False

    def _classes(self) -> list:
        """Return the layer's class codes: every class of the raster if counted, else the sample's."""
        counted = self.classes.get(self.count_key) if self.count_key is not None else None
        if counted is not None:
            return list(counted.codes)
        sample = self.samples.get(self.key) if self.key is not None else None
        return list(sample.classes) if sample is not None and sample.classes else []

    def _counts_arrived(self, key, *args) -> None:
        node = self._node()
        if key == self.count_key and node is not None:
            sample = self.samples.get(self.key) if self.key is not None else None
            self._show_form(node.membership, sample)

    def _draw(self, spec, sample) -> None:
        note = ""
        if self.key is None:
            note = tr("Give the criterion a layer to see its values.")
        elif sample is None:
            error = self.samples.error(self.key)
            note = tr("The layer's values cannot be sampled: {error}").format(error=error) if error \
                else tr("Sampling the layer's values…")
        self.plot.show_data(sample, spec, note)

    def _sample_arrived(self, key, *args) -> None:
        node = self._node()
        if key == self.key and node is not None:
            sample = self.samples.get(key)
            self._show_form(node.membership, sample)
            self._draw(node.membership, sample)

    def _node(self):
        """Return the leaf being edited, or None if it is gone (undo, project cleared)."""
        try:
            return self.controller.tree.find(self.path) if self.path else None
        except (KeyError, AttributeError):
            return None

    def _range(self, spec) -> tuple[float, float]:
        sample = self.samples.get(self.key) if self.key is not None else None
        if sample is not None and sample.count:
            return sample.fit
        xs = _parameter_xs(spec)
        return (min(xs), max(xs)) if len(xs) >= 2 and min(xs) < max(xs) else (0.0, 1.0)

    def _edited(self, spec: dict, key: str) -> None:
        if self._node() is not None:
            self.controller.set_membership(self.path, spec, merge_key=key)

    def _type_chosen(self, kind: str) -> None:
        node = self._node()
        if node is None:
            return
        is_distance = node.proxy is not None and node.proxy.measure == "distance"
        low, high = self._range(node.membership)
        spec = starting_membership(kind, low, high, self._classes(), is_falling(node.membership, is_distance))
        self.controller.set_membership(self.path, spec)

    def _fit(self) -> None:
        node = self._node()
        if node is None:
            return
        kind = (node.membership or {}).get("type", "linear")
        is_distance = node.proxy is not None and node.proxy.measure == "distance"
        sample = self.samples.get(self.key) if self.key is not None else None
        if sample is None or not sample.count:
            return
        low, high = sample.fit
        self.controller.set_membership(self.path, starting_membership(
            kind, low, high, None, is_falling(node.membership, is_distance)))

    def _fill_classes(self) -> None:
        node = self._node()
        if node is None:
            return
        classes = self._classes()
        if not classes:
            return
        spec = dict(node.membership or {"type": "categories", "default": None})
        key, start = ("weights", 0.0) if spec.get("type") == "weights" else ("scores", 0.5)
        values = dict(spec.get(key) or {})
        for code in classes:
            values.setdefault(code_key(code), start)
        spec[key] = dict(sorted(values.items(), key=lambda kv: code_order(kv[0])))
        spec.setdefault("default", None)
        self.controller.set_membership(self.path, spec)
