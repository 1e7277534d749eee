"""The report: one self-contained HTML file holding every figure, that a real browser renders.

Outside references: Python's own HTML parser (html.parser) for what the page
holds and fetches, matplotlib's PNG reader for every embedded image,
hashlib for the checksums the lineage section shows, the lineage records the
other jobs wrote (the posterior's weights, the targets' rows), and Debian's
headless Chromium, which must render the page with its figures (a screenshot
that is not blank and shows Favour's ramp).
"""

from __future__ import annotations

import base64
import hashlib
import io
import json
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from favour_plugin.core.lineage import CAUTION, read_lineage
from favour_plugin.raster.engine import evaluate_tree
from favour_plugin.raster.ensemble_jobs import MC_OUTPUTS, monte_carlo, sensitivity
from favour_plugin.raster.report_jobs import write_report
from favour_plugin.raster.style import RAMP
from favour_plugin.raster.target_jobs import find_targets
from favour_plugin.raster.validation_jobs import validate
from favour_plugin.raster.wofe_jobs import posterior
from tests.helpers import ORIGIN, read_raster, run_cli, small_workshop, write_raster, write_vector

#: The figures of a report given every input, in order.
ALL_FIGURES = ["Favourability map", "Component maps", "Criteria tree", "Membership curves",
               "Success-rate curve", "Prediction–area plot", "Monte Carlo maps", "Tornado chart"]


class Page(HTMLParser):
    """What a page holds: its images' sources, every other URL it would fetch, its tags and text."""

    def __init__(self, text: str) -> None:
        super().__init__()
        self.images: list[str] = []
        self.fetches: list[str] = []
        self.tags: list[str] = []
        self.text: list[str] = []
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        """Collect image sources and any other URL."""
        self.tags.append(tag)
        for name, value in attrs:
            if tag == "img" and name == "src":
                self.images.append(value)
            elif name in ("src", "href", "data", "poster", "srcset") and not value.startswith("#"):
                self.fetches.append(value)

    def handle_data(self, data):
        """Collect the text."""
        self.text.append(data)


def decode_png(uri: str) -> np.ndarray:
    """Decode a data: URI's PNG with matplotlib's reader."""
    import matplotlib.image

    assert uri.startswith("data:image/png;base64,")
    return matplotlib.image.imread(io.BytesIO(base64.b64decode(uri.split(",", 1)[1])), format="png")


@pytest.fixture(scope="module")
def district(tmp_path_factory) -> dict:
    """A small model evaluated with its components, validated, cut into targets, with its uncertainty."""
    folder = tmp_path_factory.mktemp("report")
    tree, _, sheets = small_workshop(folder)
    for node in tree.root.children:
        node.rationale = f"Why {node.name} matters, in the model's own words."
    fav = str(folder / "out" / "favourability.tif")
    evaluation = evaluate_tree(tree, fav, str(folder / "out" / "components"))
    values = read_raster(fav)
    rows, cols = np.unravel_index(np.argsort(np.nan_to_num(values, nan=-1).ravel())[::-1][:400:40],
                                  values.shape)
    points = [f"POINT ({ORIGIN[0] + (c + 0.5) * 100} {ORIGIN[1] - (r + 0.5) * 100})"
              for r, c in zip(rows, cols)]
    deposits = write_vector(folder / "deposits.gpkg", points, layer="deposits")
    mc = monte_carlo(tree, sheets, {n: str(folder / "mc" / f"favourability-{n}.tif") for n in MC_OUTPUTS},
                     n=6, seed=3)
    sens = sensitivity(tree, str(folder / "mc" / "sensitivity.csv"), str(folder / "mc" / "tornado.png"),
                       deposits=deposits)
    check = validate(fav, deposits, str(folder / "out" / "validation.json"), resamples=50)
    components = str(folder / "out" / "components")
    targets = find_targets(fav, str(folder / "out" / "targets.gpkg"), components=components,
                           deposits=deposits, robustness=mc.files["robustness"])
    return {"folder": folder, "fav": fav, "evaluation": evaluation, "deposits": deposits, "mc": mc,
            "sens": sens, "validation": check.json_file, "targets": targets, "components": components}


@pytest.fixture(scope="module")
def full(district) -> dict:
    """The report given every input."""
    d = district
    result = write_report(d["fav"], str(d["folder"] / "report.html"), components=d["components"],
                          validation=d["validation"], targets=d["targets"].output,
                          monte_carlo=list(d["mc"].files.values()),
                          sensitivity_table=d["sens"].files["table"],
                          sensitivity_chart=d["sens"].files["chart"])
    text = Path(result.output).read_text(encoding="utf-8")
    return {"result": result, "text": text, "page": Page(text)}


def test_every_figure_is_embedded_and_nothing_is_fetched(full):
    """Every figure is a PNG in a data: URI (matplotlib decodes each); no script, no outside URL."""
    page = full["page"]
    assert full["result"].figures == ALL_FIGURES
    assert len(page.images) == len(ALL_FIGURES)
    for uri in page.images:
        image = decode_png(uri)
        assert image.shape[0] > 200 and image.shape[1] > 300
        assert image[..., :3].std() > 0.05  # not a blank image
    assert page.fetches == []
    assert "script" not in page.tags and "link" not in page.tags and "iframe" not in page.tags


def test_the_page_states_the_tree_the_targets_the_validation_and_the_caution(district, full):
    """The page names every node with its rationale, every target, the AUC, and the caution twice."""
    text = " ".join(full["page"].text)
    tree = district["evaluation"].lineage["tree"]
    assert "Why Source matters, in the model's own words." in text
    assert "Favourability > Trap > Host" in text
    assert tree["name"] in text
    validation = json.loads(Path(district["validation"]).read_text())
    assert f"{validation['auc']:.3f}" in text
    assert text.count(CAUTION) == 2
    assert f"{len(district['targets'].rows)} zones" in text
    for row in district["targets"].rows[:5]:
        assert f"{row['area_km2']:.4g}" in text


def test_the_lineage_section_shows_each_files_sha256(district, full):
    """Every file the report read appears with hashlib's SHA-256, and the report has a lineage of its own."""
    text = full["text"]
    for path in (district["fav"], district["validation"], district["targets"].output):
        assert hashlib.sha256(Path(path).read_bytes()).hexdigest() in text
    record = read_lineage(full["result"].output)
    assert record["job"] == "report" and record["figures"] == ALL_FIGURES
    roles = {entry["node"] for entry in record["inputs"]}
    assert {"favourability", "validation result", "targets", "sensitivity table"} <= roles


def test_weights_of_evidence_tables_come_from_the_posteriors_lineage(district, tmp_path):
    """Given a posterior, the page tables its layers' weights exactly as its lineage holds them."""
    shape = read_raster(district["fav"]).shape
    rows, cols = np.indices(shape)
    binary = write_raster(tmp_path / "blocks.tif", ((rows // 3 + cols // 3) % 2).astype(np.uint8))
    job = posterior([binary], district["deposits"], str(tmp_path / "p.tif"), str(tmp_path / "s.tif"),
                    unit_area_km2=0.01)
    result = write_report(district["fav"], str(tmp_path / "r.html"), posterior=job.probability_file)
    text = Path(result.output).read_text(encoding="utf-8")
    assert "Weights of evidence" in text
    summary = read_lineage(job.probability_file)["summary"]
    for weight in summary["layers"][0]["weights"]:
        assert f">{weight:.4g}<" in text


def test_a_raster_alone_gives_the_map_the_tree_and_the_curves(district, tmp_path):
    """With only the favourability: its map, the tree and the membership curves, from its lineage."""
    result = write_report(district["fav"], str(tmp_path / "alone.html"))
    assert result.figures == ["Favourability map", "Criteria tree", "Membership curves"]
    plain = write_raster(tmp_path / "plain.tif", np.random.default_rng(2).random((40, 50)).astype(np.float32))
    bare = write_report(plain, str(tmp_path / "bare.html"))
    assert bare.figures == ["Favourability map"]
    assert "has no lineage beside it" in Path(bare.output).read_text(encoding="utf-8")


def test_command_line_and_processing_write_the_report_of_the_core_call(district, full, tmp_path,
                                                                        favour_provider):
    """``report`` and ``favour:report`` write pages with the same figures and sections as write_report."""
    import processing
    from qgis.core import QgsProcessingFeedback

    d = district
    cli = tmp_path / "cli.html"
    done = run_cli("report", d["fav"], "-o", cli, "--components", d["components"], "--validation",
                   d["validation"], "--targets", d["targets"].output, "--montecarlo", *d["mc"].files.values(),
                   "--sensitivity", d["sens"].files["table"], "--tornado", d["sens"].files["chart"], "-q")
    assert done.returncode == 0, done.stderr
    out = str(tmp_path / "processing.html")
    result = processing.run("favour:report", {
        "INPUT": d["fav"], "COMPONENTS": d["components"], "VALIDATION": d["validation"],
        "TARGETS": d["targets"].output, "MONTE_CARLO": list(d["mc"].files.values()),
        "SENSITIVITY_TABLE": d["sens"].files["table"], "SENSITIVITY_CHART": d["sens"].files["chart"],
        "OUTPUT": out}, feedback=QgsProcessingFeedback())
    assert result["FIGURES"] == len(ALL_FIGURES)
    core = read_lineage(full["result"].output)
    for path in (str(cli), out):
        record = read_lineage(path)
        assert record["figures"] == core["figures"] and record["sections"] == core["sections"]
        assert len(Page(Path(path).read_text(encoding="utf-8")).images) == len(ALL_FIGURES)


def _chromium() -> str:
    for name in ("chromium", "chromium-browser"):
        found = shutil.which(name)
        if found:
            return found
    pytest.skip("Chromium is not installed (scripts/setup.sh installs Debian's 'chromium'); the browser "
                "check cannot run")


def test_headless_chromium_renders_the_report_with_its_figures(full, tmp_path):
    """Debian's headless Chromium renders the page: the screenshot is not blank and shows the ramp."""
    import matplotlib.image

    browser = _chromium()
    shot = tmp_path / "report.png"
    done = subprocess.run(
        [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         f"--user-data-dir={tmp_path / 'profile'}", f"--screenshot={shot}", "--window-size=1400,4000",
         Path(full["result"].output).as_uri()], capture_output=True, text=True, timeout=180)
    assert shot.is_file(), done.stderr[-2000:]
    image = matplotlib.image.imread(str(shot))[..., :3]
    assert image.shape[:2] == (4000, 1400)
    assert image.std() > 0.1
    assert len(np.unique((image[::4, ::4] * 255).astype(np.uint8).reshape(-1, 3), axis=0)) > 500
    rust = np.array([int(RAMP[-1][1][i:i + 2], 16) for i in (1, 3, 5)]) / 255.0
    near = np.abs(image - rust).max(axis=-1) < 0.04
    assert near.sum() > 200  # the colour bar's top, at least: the map's figure was drawn


def test_a_cancel_writes_nothing(district, tmp_path):
    """A cancel while the figures are drawn ends in CancelledError, with no page and no lineage."""
    from favour_plugin.core.errors import CancelledError
    from favour_plugin.core.feedback import Feedback

    class Stop(Feedback):
        def __init__(self):
            super().__init__()
            self.seen = 0.0

        def set_progress(self, fraction):
            self.seen = max(self.seen, fraction)

        def is_cancelled(self):
            return self.seen > 0.5

    with pytest.raises(CancelledError):
        write_report(district["fav"], str(tmp_path / "r.html"), targets=district["targets"].output,
                     feedback=Stop())
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("path", sorted((Path(__file__).resolve().parent.parent / "favour_plugin" / "report")
                                        .glob("*.py")), ids=lambda p: p.name)
def test_report_modules_import_no_qgis(path):
    """report/ draws with matplotlib alone: no qgis or Qt import (read with Python's ast)."""
    import ast

    names = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            names.add(node.module.split(".")[0])
    assert not names & {"qgis", "PyQt5", "PyQt6", "osgeo"}
