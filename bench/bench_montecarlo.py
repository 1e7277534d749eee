"""Benchmark the workshop's Monte Carlo: 200 realisations of the demo tree in one pass on 10⁷ cells.

Prints figures measured in one run on this machine, against the targets of
the workshop issue (not timed tests; a miss does not fail ``make bench``):

- the Monte Carlo of 200 realisations on about 10⁷ cells: under 60 s;
- its time against 200 single evaluations of the same tree on the same grid
  (one single evaluation measured, times 200): at most 0.3;
- peak memory of the Monte Carlo child: at most 500 MB, and flat when the
  grid doubles (``--no-double`` skips that run).

The grid is the demo district's (resources/demo/generate.py) refined so it
holds about ``--cells`` cells; the proxies are read through warped VRTs, the
same for the single evaluation and the Monte Carlo. The experts are the demo
workshop's round 2 (resources/demo/workshop.py). Each stage runs in a child
process of its own (bench/common.py), which reports its own time and peak.
"""

from __future__ import annotations

import argparse
import glob
import importlib.util
import json
import math
import os
import shutil
import sys
import time
from pathlib import Path

from common import ROOT, bench_env, hash_once, python_child, run_child, verdict, write_seconds

DEMO = ROOT / "resources" / "demo"


def _module(name: str):
    spec = importlib.util.spec_from_file_location(f"favour_bench_{name}", DEMO / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    if str(DEMO) not in sys.path:
        sys.path.insert(0, str(DEMO))
    spec.loader.exec_module(module)
    return module


def build(work: Path, cells: int) -> tuple[str, list[str]]:
    """Write the demo layers, a tree on a grid of about ``cells`` cells, and the workshop's sheets."""
    generate = _module("generate")
    layers = work / "layers"
    if not generate.is_up_to_date(layers):
        generate.generate(layers)
    doc = json.loads((DEMO / "district.favour.json").read_text(encoding="utf-8"))
    factor = math.sqrt(cells / (generate.WIDTH * generate.HEIGHT))
    cell = generate.CELL / factor
    doc["grid"] = {"crs": generate.CRS_PROJ, "cell_size": cell,
                   "extent": [generate.XMIN, generate.YMIN, generate.XMIN + generate.WIDTH * generate.CELL,
                              generate.YMIN + generate.HEIGHT * generate.CELL]}
    tree = work / f"tree-{cells}.json"
    tree.write_text(json.dumps(doc, indent=2), encoding="utf-8")
    sheets = work / "workshop"
    if not (sheets / "workshop.json").exists():
        _module("workshop").generate_workshop(sheets, tree_file=DEMO / "district.favour.json")
    return str(tree), sorted(glob.glob(str(sheets / "round2" / "*.csv")))


def child_single(result: str, tree: str, output: str) -> None:
    """One ordinary evaluation of the tree (the engine's path, 2 threads)."""
    from favour_plugin.raster.engine import evaluate_tree_file

    start = time.perf_counter()
    evaluate_tree_file(tree, output)
    write_seconds(result, time.perf_counter() - start)


def child_mc(result: str, tree: str, folder: str, n: str, *sheets: str) -> None:
    """Run the Monte Carlo of ``n`` realisations (2 threads)."""
    from favour_plugin.core.tree import Tree
    from favour_plugin.raster.ensemble_jobs import MC_OUTPUTS, monte_carlo

    outputs = {name: os.path.join(folder, f"mc-{name}.tif") for name in MC_OUTPUTS}
    start = time.perf_counter()
    run = monte_carlo(Tree.load(tree), list(sheets), outputs, n=int(n), seed=1, tree_file=tree)
    write_seconds(result, time.perf_counter() - start, cells=run.record["grid"]["width"] *
                  run.record["grid"]["height"])


CHILDREN = {"single": child_single, "mc": child_mc}


def main(argv: list[str] | None = None) -> int:
    """Build the inputs, run the stages, print the ratios and PASS/MISS."""
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--workdir", default=str(ROOT / "build" / "bench-montecarlo"))
    parser.add_argument("--cells", type=int, default=10_000_000, help="cells of the grid (default 10⁷)")
    parser.add_argument("--realisations", type=int, default=200)
    parser.add_argument("--no-double", action="store_true", help="skip the run on a grid of twice the cells")
    parser.add_argument("--child", nargs=argparse.REMAINDER, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        CHILDREN[args.child[0]](*args.child[1:])
        return 0
    work = Path(args.workdir).resolve()
    work.mkdir(parents=True, exist_ok=True)
    env = bench_env(work)
    logs, result = work / "logs", work / "logs" / "result.json"
    load = os.getloadavg()[0]
    tree, sheets = build(work, args.cells)
    hash_once(env, sorted(str(p) for p in (work / "layers").iterdir() if p.is_file()))
    out = work / "out"
    shutil.rmtree(out, ignore_errors=True)
    out.mkdir()
    script = str(Path(__file__).resolve())
    print(f"Monte Carlo benchmark: {args.realisations} realisations, load average at start {load:.2f}")
    single = run_child("single evaluation", python_child(script, "single", str(result), tree,
                                                         str(out / "single.tif")), env, logs / "single.log",
                       result)
    mc = run_child("Monte Carlo", python_child(script, "mc", str(result), tree, str(out),
                                               str(args.realisations), *sheets), env, logs / "mc.log", result)
    cells = json.loads(result.read_text())["cells"]
    doubled = None
    if not args.no_double:
        tree2, _ = build(work, 2 * args.cells)
        doubled = run_child("Monte Carlo, twice the cells", python_child(
            script, "mc", str(result), tree2, str(out), str(args.realisations), *sheets), env,
            logs / "mc-double.log", result)
    ratio = mc.inner / (args.realisations * single.inner)
    print()
    print(f"grid: {cells} cells; single evaluation {single.inner:.2f} s inside the child")
    print(f"Monte Carlo of {args.realisations}: {mc.inner:.1f} s inside the child "
          f"(target under 60 s): {verdict(mc.inner < 60)}")
    print(f"Monte Carlo / ({args.realisations} single evaluations) = {ratio:.3f} "
          f"(target ≤ 0.3): {verdict(ratio <= 0.3)}")
    print(f"peak memory: {mc.peak_mb:.0f} MB (target ≤ 500 MB): {verdict(mc.peak_mb <= 500)}")
    if doubled is not None:
        growth = doubled.peak_mb / mc.peak_mb
        print(f"peak with twice the cells: {doubled.peak_mb:.0f} MB, {growth:.2f} × "
              f"(flat: ≤ 1.15 ×): {verdict(growth <= 1.15)}; "
              f"under 500 MB: {verdict(doubled.peak_mb <= 500)}; "
              f"time {doubled.inner:.1f} s ({doubled.inner / mc.inner:.2f} ×)")
    print("Favourability ranks ground for exploration; it is not a resource estimate.")
    return 0


if __name__ == "__main__":
    sys.exit(main())
