"""Evaluate the Tarrowin demo model and draw a quicklook map (``make demo``).

Generates the synthetic layers if they are missing, evaluates
``district.favour.json`` through Favour's one evaluation path
(:func:`favour_plugin.raster.engine.evaluate_tree_file`), writes a PNG
quicklook of the favourability with the known occurrences, runs the demo
workshop and its uncertainty, writes the ranked targets and the report
(``report.html``, one self-contained page), and prints where every output
is. Outputs go to ``build/demo/`` in the checkout.
"""

from __future__ import annotations

import argparse
import json
import sys
import textwrap
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent.parent
if str(ROOT) not in sys.path:  # run as a script from anywhere: make the plugin importable
    sys.path.insert(0, str(ROOT))
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

import matplotlib  # noqa: E402

matplotlib.use("Agg")

import generate  # noqa: E402
import matplotlib.patheffects as path_effects  # noqa: E402
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import workshop  # noqa: E402
from matplotlib.colors import LinearSegmentedColormap  # noqa: E402
from matplotlib.ticker import FuncFormatter  # noqa: E402
from osgeo import gdal, ogr  # noqa: E402

from favour_plugin.cli import ConsoleFeedback  # noqa: E402
from favour_plugin.core.lineage import CAUTION  # noqa: E402
from favour_plugin.core.tree import Tree  # noqa: E402
from favour_plugin.raster.engine import evaluate_tree_file  # noqa: E402
from favour_plugin.raster.ensemble_jobs import MC_OUTPUTS, monte_carlo, sensitivity  # noqa: E402
from favour_plugin.raster.report_jobs import write_report  # noqa: E402
from favour_plugin.raster.style import RAMP  # noqa: E402
from favour_plugin.raster.target_jobs import find_targets  # noqa: E402
from favour_plugin.raster.validation_jobs import validate  # noqa: E402
from favour_plugin.raster.workshop_jobs import aggregate_scores  # noqa: E402

TREE_FILE = HERE / "district.favour.json"
OUT_FOLDER = ROOT / "build" / "demo"
#: Realisations of the demo's Monte Carlo (the seed is fixed, so the maps are the same each time).
DEMO_REALISATIONS, DEMO_SEED = 100, 20261202
# Longest side of the decimated read for the main map and for the component panels.
MAIN_CELLS, PANEL_CELLS = 800, 300


def ramp_colormap() -> LinearSegmentedColormap:
    """Return Favour's favourability ramp (raster/style.py RAMP) as a matplotlib colour map."""
    cmap = LinearSegmentedColormap.from_list("favour", [(value, colour) for value, colour in RAMP])
    cmap.set_bad("#d9d9d9")
    return cmap


def read_decimated(path: str | Path, longest: int) -> tuple[np.ndarray, list[float]]:
    """Read band 1 through GDAL's averaging overview read, at most ``longest`` cells a side.

    Returns the values (NaN for nodata) and the extent [xmin, xmax, ymin, ymax]
    for ``imshow``.
    """
    ds = gdal.Open(str(path))
    band = ds.GetRasterBand(1)
    factor = max(1, -(-max(ds.RasterXSize, ds.RasterYSize) // longest))
    width, height = -(-ds.RasterXSize // factor), -(-ds.RasterYSize // factor)
    raw = band.ReadAsArray(buf_xsize=width, buf_ysize=height, resample_alg=gdal.GRIORA_Average)
    values = raw.astype(np.float64)
    nodata = band.GetNoDataValue()
    if nodata is not None:
        values[raw == nodata] = np.nan
    x0, dx, _, y0, _, dy = ds.GetGeoTransform()
    extent = [x0, x0 + dx * ds.RasterXSize, y0 + dy * ds.RasterYSize, y0]
    return values, extent


def read_features(path: str | Path, layer_name: str) -> list[tuple[np.ndarray, dict]]:
    """Return each feature's vertices (n x 2, outer ring for polygons) and its attributes."""
    ds = ogr.Open(str(path))
    layer = ds.GetLayerByName(layer_name)
    out = []
    for feature in layer:
        geometry = feature.GetGeometryRef()
        if geometry.GetGeometryCount() > 0:  # polygon: its outer ring
            geometry = geometry.GetGeometryRef(0)
        points = np.array(geometry.GetPoints())[:, :2]
        out.append((points, feature.items()))
    return out


def _km(axis) -> None:
    """Label an axis' ticks in kilometres of the local grid."""
    axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v / 1000:.0f}"))


# Where a label may sit around its point (offset points), tried in this order.
_LABEL_OFFSETS = ((5, 3), (5, -10), (-5, 3), (-5, -10), (0, 7), (0, -14), (9, -3), (-9, -3))


def label_points(ax, xy: np.ndarray, names: list[str]) -> None:
    """Name each point, placing each label where it covers the fewest earlier labels and points.

    A small greedy placement: each label tries the offsets around its point
    in turn and keeps the first whose box, in display coordinates, clears the
    labels already placed and the other points' markers; if none is clear it
    keeps the one with the fewest overlaps (a label counts more than a point).
    """
    halo = [path_effects.withStroke(linewidth=2.2, foreground="white")]
    ax.apply_aspect()  # fix the axes' box so data-to-display transforms are final
    renderer = ax.figure.canvas.get_renderer()
    points = ax.transData.transform(xy)
    pad = 6.0  # display units: about a marker's radius
    placed: list = []
    for i, ((x, y), name) in enumerate(zip(xy, names)):
        others = np.delete(points, i, axis=0)
        best = None
        for dx, dy in _LABEL_OFFSETS:
            label = ax.annotate(name, (x, y), xytext=(dx, dy), textcoords="offset points",
                                fontsize=6.5, color="#101010", path_effects=halo, zorder=6,
                                ha="left" if dx >= 0 else "right")
            box = label.get_window_extent(renderer).expanded(1.04, 1.1)
            covered = np.count_nonzero((others[:, 0] > box.x0 - pad) & (others[:, 0] < box.x1 + pad)
                                       & (others[:, 1] > box.y0 - pad) & (others[:, 1] < box.y1 + pad))
            score = 10 * sum(box.overlaps(other) for other in placed) + covered
            if best is None or score < best[0]:
                if best is not None:
                    best[1].remove()
                best = (score, label, box)
            else:
                label.remove()
            if score == 0:
                break
        placed.append(best[2])


def quicklook(favourability: str | Path, components: dict[str, str], layers: Path, png: Path,
              district: str) -> Path:
    """Draw the favourability map with occurrences and structures, and the four components.

    Parameters
    ----------
    favourability : path
        The favourability GeoTIFF.
    components : dict
        Component name to raster path, drawn as small panels.
    layers : Path
        Folder of the demo layers (faults, intrusions, occurrences).
    png : Path
        The PNG to write.
    district : str
        The district's name for the title.
    """
    cmap = ramp_colormap()
    fig = plt.figure(figsize=(15.5, 8.4), dpi=110)
    grid = fig.add_gridspec(2, 4, width_ratios=[1, 1, 0.62, 0.62], left=0.05, right=0.985,
                            top=0.87, bottom=0.13, wspace=0.16, hspace=0.22)
    ax = fig.add_subplot(grid[:, :2])
    values, extent = read_decimated(favourability, MAIN_CELLS)
    image = ax.imshow(values, extent=extent, cmap=cmap, vmin=0.0, vmax=1.0, interpolation="nearest")

    for points, _ in read_features(layers / "intrusions.gpkg", "intrusions"):
        ax.plot(points[:, 0], points[:, 1], color="#f2f2f2", lw=0.9, ls=(0, (3, 2)))
    for points, attributes in read_features(layers / "faults.gpkg", "faults"):
        order = attributes["order"]
        ax.plot(points[:, 0], points[:, 1], color="#101010", alpha={1: 0.9, 2: 0.75, 3: 0.45}[order],
                lw={1: 1.8, 2: 1.0, 3: 0.6}[order])
    occurrences = read_features(layers / "occurrences.gpkg", "occurrences")
    xy = np.array([points[0] for points, _ in occurrences])
    ax.scatter(xy[:, 0], xy[:, 1], marker="o", s=34, facecolor="white", edgecolor="#101010",
               linewidth=1.0, zorder=5)
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    label_points(ax, xy, [attributes["name"] for _, attributes in occurrences])
    _km(ax.xaxis)
    _km(ax.yaxis)
    ax.set_xlabel("easting, km (local grid)")
    ax.set_ylabel("northing, km (local grid)")
    ax.set_title("Favourability", fontsize=11, loc="left")
    handles = [
        plt.Line2D([], [], color="#101010", lw=1.8, label="first-order shear zone"),
        plt.Line2D([], [], color="#101010", lw=1.0, alpha=0.75, label="second-order splay"),
        plt.Line2D([], [], color="#101010", lw=0.6, alpha=0.45, label="third-order fault"),
        plt.Line2D([], [], color="#9a9a9a", lw=0.9, ls=(0, (3, 2)), label="late granite"),
        plt.Line2D([], [], marker="o", ls="", markerfacecolor="white", markeredgecolor="#101010",
                   label="known occurrence"),
    ]
    ax.legend(handles=handles, loc="lower right", fontsize=7, framealpha=0.9)

    for i, (name, path) in enumerate(components.items()):
        panel = fig.add_subplot(grid[i // 2, 2 + i % 2])
        values, extent = read_decimated(path, PANEL_CELLS)
        panel.imshow(values, extent=extent, cmap=cmap, vmin=0.0, vmax=1.0, interpolation="nearest")
        panel.scatter(xy[:, 0], xy[:, 1], marker="o", s=7, facecolor="white", edgecolor="#101010",
                      linewidth=0.5, zorder=5)
        panel.set_title(name, fontsize=9.5, loc="left")
        panel.set_xticks([])
        panel.set_yticks([])
    bar = fig.colorbar(image, ax=fig.axes[1:], orientation="horizontal", fraction=0.05, pad=0.04,
                       aspect=40)
    bar.set_label("favourability, μ (a relative ranking, not a probability)", fontsize=8.5)
    bar.ax.tick_params(labelsize=8)

    fig.suptitle(f"{district} district: orogenic-gold favourability (demo)", x=0.05, ha="left",
                 fontsize=15, fontweight="bold", y=0.965)
    fig.text(0.05, 0.905, "An invented district: every layer is synthetic, made by "
             "resources/demo/generate.py from a seed. Criteria tree: resources/demo/district.favour.json.",
             fontsize=9, color="#404040")
    fig.text(0.05, 0.035, "\n".join(textwrap.wrap("Caution: " + CAUTION, 175)), fontsize=8.5,
             color="#7a2e16")
    png.parent.mkdir(parents=True, exist_ok=True)
    tmp = png.with_name(f".{png.stem}.partial.png")
    fig.savefig(tmp)
    plt.close(fig)
    tmp.replace(png)
    return png


def values_at_points(raster: str | Path, xy: np.ndarray) -> np.ndarray:
    """Return the raster's value in the cell under each map point (NaN outside or nodata)."""
    ds = gdal.Open(str(raster))
    band = ds.GetRasterBand(1)
    nodata = band.GetNoDataValue()
    x0, dx, _, y0, _, dy = ds.GetGeoTransform()
    out = np.full(len(xy), np.nan)
    for i, (x, y) in enumerate(xy):
        col, row = int((x - x0) // dx), int((y - y0) // dy)
        if 0 <= col < ds.RasterXSize and 0 <= row < ds.RasterYSize:
            value = float(band.ReadAsArray(col, row, 1, 1)[0, 0])
            out[i] = np.nan if nodata is not None and value == nodata else value
    return out


def run(tree_file: Path = TREE_FILE, out_folder: Path = OUT_FOLDER, feedback=None,
        seed: int = generate.DEFAULT_SEED, with_workshop: bool = True,
        realisations: int = DEMO_REALISATIONS, validation_json: Path | None = None) -> dict:
    """Generate missing layers, evaluate the tree, draw the quicklook; return the output paths.

    The layers are the ``layers/`` folder beside ``tree_file``. With
    ``with_workshop`` the demo workshop runs too (:func:`run_workshop`), and then the
    targets and the report (:func:`run_targets_and_report`), which take the
    validation result ``validation_json`` into the report when one is given.
    """
    tree_file, out_folder = Path(tree_file), Path(out_folder)
    layers = tree_file.parent / "layers"
    if not generate.is_up_to_date(layers, seed):
        print(f"generating the demo layers in {layers} (seed {seed})")
        generate.generate(layers, seed)
    feedback = feedback or ConsoleFeedback()
    tree = Tree.load(tree_file)
    result = evaluate_tree_file(str(tree_file), str(out_folder / "favourability.tif"),
                                node_folder=str(out_folder / "components"), feedback=feedback)
    components = {tree.find(path).name: raster for path, raster in result.node_outputs.items()
                  if tree.find(path).component is not None}
    png = quicklook(result.output, components, layers, out_folder / "favourability.png",
                    generate.DISTRICT)
    occurrences = read_features(layers / "occurrences.gpkg", "occurrences")
    at = values_at_points(result.output, np.array([points[0] for points, _ in occurrences]))
    outputs = {"favourability": result.output, "nodes": result.node_outputs,
               "lineage": result.lineage_file, "png": str(png), "result": result,
               "occurrences": {attributes["name"]: float(v) for (_, attributes), v in zip(occurrences, at)},
               "map_mean": result.lineage["statistics"][result.lineage["root"]]["mean"]}
    if validation_json is None:
        validation_json = run_validation(out_folder, result, layers, feedback)
        outputs["validation"] = str(validation_json)
    if with_workshop:
        outputs["workshop"] = run_workshop(tree_file, out_folder, layers, feedback, realisations)
        outputs["targets_report"] = run_targets_and_report(out_folder, result, layers, outputs["workshop"],
                                                           feedback, validation_json)
    return outputs


def run_validation(out_folder: Path, result, layers: Path, feedback) -> Path:
    """Validate the demo map against the known occurrences; return the result's JSON file.

    The tree was written from the mineral-systems model, not fitted to the
    occurrences, so their curve is a prediction-rate curve.
    """
    validated = validate(result.output, str(layers / "occurrences.gpkg"), str(out_folder / "validation.json"),
                         str(out_folder / "validation-curves.csv"), curve="prediction", feedback=feedback)
    return Path(validated.json_file)


#: The demo's targets: the top 10 % of the area, zones under a quarter of a km² dropped, zones
#: within two cells (50 m) of each other merged.
DEMO_TOP_PERCENT, DEMO_MIN_AREA_KM2, DEMO_MERGE_M = 10.0, 0.25, 50.0


def run_targets_and_report(out_folder: Path, result, layers: Path, shop: dict, feedback,
                           validation_json: Path | None = None) -> dict:
    """Write the demo's ranked targets and its report (``targets/``, ``report.html``).

    The targets take the top 10 % of the demo favourability with the component
    rasters, the known occurrences and the Monte Carlo robustness; the report
    holds every figure of the run, and the validation result when
    ``validation_json`` is given.
    """
    targets = find_targets(result.output, str(out_folder / "targets" / "targets.gpkg"),
                           top_percent=DEMO_TOP_PERCENT, min_area_km2=DEMO_MIN_AREA_KM2,
                           merge_distance=DEMO_MERGE_M, components=str(out_folder / "components"),
                           deposits=str(layers / "occurrences.gpkg"),
                           robustness=shop["uncertainty"]["robustness"], feedback=feedback)
    report = write_report(result.output, str(out_folder / "report.html"),
                          components=str(out_folder / "components"),
                          validation=str(validation_json) if validation_json else None,
                          targets=targets.output, monte_carlo=list(shop["uncertainty"].values()),
                          sensitivity_table=shop["sensitivity"]["table"],
                          sensitivity_chart=shop["sensitivity"].get("chart"), feedback=feedback)
    return {"targets": targets.output, "rows": targets.rows, "threshold": targets.threshold["value"],
            "report": report.output, "figures": report.figures}


def run_workshop(tree_file: Path, out_folder: Path, layers: Path, feedback,
                 realisations: int = DEMO_REALISATIONS) -> dict:
    """Run the demo workshop: five invented experts' sheets, two rounds aggregated, uncertainty.

    Writes the sheets (``workshop/``), the aggregate table and tree, the Monte
    Carlo rasters from the second round (``uncertainty/``) and the
    sensitivity table and tornado chart against the known occurrences.
    """
    tree = Tree.load(tree_file)
    folder = out_folder / "workshop"
    manifest = workshop.generate_workshop(folder, tree_file=tree_file)
    round1 = [str(folder / p) for p in manifest["round1"]]
    round2 = [str(folder / p) for p in manifest["round2"]]
    aggregated = aggregate_scores(tree, round1, str(out_folder / "workshop-aggregate.csv"), [round2],
                                  output_tree=str(out_folder / "aggregate.favour.json"),
                                  tree_file=str(tree_file))
    uncertainty = out_folder / "uncertainty"
    mc = monte_carlo(tree, round2, {name: str(uncertainty / f"favourability-{name}.tif")
                                    for name in MC_OUTPUTS}, n=realisations, seed=DEMO_SEED,
                     feedback=feedback, tree_file=str(tree_file))
    sens = sensitivity(tree, str(uncertainty / "sensitivity.csv"), str(uncertainty / "tornado.png"),
                       deposits=str(layers / "occurrences.gpkg"), feedback=feedback,
                       tree_file=str(tree_file))
    return {"sheets": round1 + round2, "aggregate": aggregated.table_file,
            "aggregate_tree": aggregated.tree_file,
            "flagged": [f"{s.node} ({s.item})" for s in aggregated.rounds[0].flagged],
            "flagged_round2": [f"{s.node} ({s.item})" for s in aggregated.latest.flagged],
            "uncertainty": mc.files, "sensitivity": sens.files, "rows": sens.rows}


def main(argv: list[str] | None = None) -> int:
    """Run the demo and print where every output is."""
    parser = argparse.ArgumentParser(description="Evaluate the demo district and draw a quicklook.")
    parser.add_argument("--out", default=str(OUT_FOLDER), help="output folder (default build/demo)")
    args = parser.parse_args(argv)
    outputs = run(TREE_FILE, Path(args.out))
    print()
    print(f"{generate.DISTRICT} demo: outputs")
    print(f"  favourability:  {outputs['favourability']}")
    for node, path in outputs["nodes"].items():
        print(f"  node raster:    {path}  ({node})")
    print(f"  lineage:        {outputs['lineage']}")
    print(f"  quicklook PNG:  {outputs['png']}")
    print(f"  reproduce with: {sys.executable} -m favour_plugin reproduce "
          f"{outputs['favourability']}")
    at = np.array(list(outputs["occurrences"].values()))
    print(f"  known occurrences: median favourability {np.median(at):.2f}, lowest {at.min():.2f}; "
          f"map mean {outputs['map_mean']:.2f}")
    shop = outputs["workshop"]
    print(f"  workshop sheets: {Path(shop['sheets'][0]).parent} (5 invented experts, two rounds)")
    first, second = ("; ".join(shop[key]) or "nothing" for key in ("flagged", "flagged_round2"))
    print(f"  aggregate:       {shop['aggregate']}  (flagged in round 1: {first}; in round 2: {second})")
    print(f"  aggregate tree:  {shop['aggregate_tree']}")
    for name, path in shop["uncertainty"].items():
        print(f"  Monte Carlo {name + ':':11s} {path}")
    print(f"  sensitivity:     {shop['sensitivity']['table']}")
    print(f"  tornado chart:   {shop['sensitivity']['chart']}")
    validated = json.loads(Path(outputs["validation"]).read_text(encoding="utf-8"))
    low, high = validated["auc_ci"]
    print(f"  validation:      {outputs['validation']}  (AUC {validated['auc']:.3f}, "
          f"95 % interval {low:.3f}–{high:.3f}, {validated['n_deposits']} occurrences; "
          f"P–A crossing {validated['pa_crossing'][0]:.0f} % of them in {validated['pa_crossing'][1]:.0f} % "
          "of the area)")
    done = outputs["targets_report"]
    print(f"  targets:         {done['targets']}  ({len(done['rows'])} zones, top "
          f"{DEMO_TOP_PERCENT:g} % at favourability ≥ {done['threshold']:.3f})")
    print(f"  report:          {done['report']}  ({len(done['figures'])} figures; open it in a browser)")
    print()
    print(CAUTION)
    return 0


if __name__ == "__main__":
    sys.exit(main())
