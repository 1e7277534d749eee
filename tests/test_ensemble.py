"""Many trees in one pass: summaries of a stack, top-area thresholds, the Monte Carlo and sensitivity.

Outside references: numpy (mean, std, percentile, quantile) for the summaries;
scikit-learn's ``roc_auc_score`` for the AUC; and the ordinary single
evaluation (``evaluate_tree``) of each realisation, which the one-pass
Monte Carlo must reproduce cell for cell.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from sklearn.metrics import roc_auc_score

from favour_plugin.core.ensemble import BINS, UnitHistograms, summarise_stack
from favour_plugin.core.scoring import apply_values
from favour_plugin.core.tree import BlockCache
from favour_plugin.core.uncertainty import sample_values, sensitivity_variants
from favour_plugin.raster.engine import evaluate_tree
from favour_plugin.raster.ensemble_jobs import MC_OUTPUTS, monte_carlo, sensitivity
from tests.helpers import ORIGIN, read_raster, small_workshop, write_vector

SHAPE = (90, 110)  # the rasters of tests.helpers.small_workshop
SOURCE = "Favourability > Source"
MAG, GRAV, HOST = f"{SOURCE} > Mag", f"{SOURCE} > Grav", "Favourability > Trap > Host"


# -- summaries of a stack -----------------------------------------------------------------


@settings(max_examples=60, deadline=2000, derandomize=True, database=None)
@given(arrays(np.float32, st.tuples(st.integers(1, 12), st.integers(1, 5), st.integers(1, 5)),
              elements=st.floats(0, 1, width=32)))
def test_summaries_match_numpy(stack):
    """mean, std (ddof 1), p10/p50/p90 equal numpy's; robustness counts realisations at or above."""
    thresholds = np.linspace(0.2, 0.8, stack.shape[0])
    out = summarise_stack(stack, thresholds)
    np.testing.assert_allclose(out["mean"], stack.astype(np.float64).mean(axis=0), rtol=1e-12)
    if stack.shape[0] > 1:
        np.testing.assert_allclose(out["std"], stack.astype(np.float64).std(axis=0, ddof=1),
                                   rtol=1e-9, atol=1e-12)
    for q in (10, 50, 90):
        np.testing.assert_allclose(out[f"p{q}"], np.percentile(stack, q, axis=0), rtol=1e-6)
    expected = (stack >= thresholds[:, None, None]).mean(axis=0)
    np.testing.assert_allclose(out["robustness"], expected)


def test_summaries_skip_realisations_missing_a_cell():
    """A cell missing in some realisations is summarised over the others (numpy's nan functions)."""
    stack = np.array([[[0.2, np.nan]], [[0.4, np.nan]], [[np.nan, np.nan]]], dtype=np.float32)
    out = summarise_stack(stack, np.array([0.3, 0.3, 0.3]))
    assert out["mean"][0, 0] == pytest.approx(np.nanmean([0.2, 0.4]))
    assert out["p50"][0, 0] == pytest.approx(np.nanpercentile([0.2, 0.4], 50))
    assert out["robustness"][0, 0] == pytest.approx(0.5)
    assert all(np.isnan(out[key][0, 1]) for key in ("mean", "std", "p10", "p50", "p90", "robustness"))


def test_top_thresholds_sit_one_bin_below_the_kth_largest_value():
    """The threshold is the bin edge at or below the k-th largest value (k = ⌈n p⌉, by numpy's sort)."""
    rng = np.random.default_rng(3)
    maps = rng.beta(2, 5, (4, 200, 300)).astype(np.float32)
    histograms = UnitHistograms(4)
    histograms.add(maps)
    for percent in (1, 10, 37.5):
        thresholds = histograms.top_thresholds(percent)
        for r in range(4):
            kth = np.sort(maps[r].ravel())[-int(np.ceil(maps[r].size * percent / 100))]
            assert kth - 1.0 / BINS < thresholds[r] <= kth  # the bin edge below the k-th largest
            share = (maps[r] >= thresholds[r]).mean()
            assert share >= percent / 100 and share - percent / 100 < 0.002
        np.testing.assert_allclose(histograms.fraction_at_or_above(thresholds),
                                   (maps >= thresholds[:, None, None]).reshape(4, -1).mean(axis=1))


def test_histogram_auc_agrees_with_scikit_learn():
    """AUC from histograms equals roc_auc_score (deposits against all cells) within the bin tolerance."""
    rng = np.random.default_rng(8)
    cells = rng.random(50_000).astype(np.float32)
    deposits = np.sort(cells)[-400:][rng.choice(400, 12, replace=False)]  # a dozen high cells
    histograms = UnitHistograms(1)
    histograms.add(cells[None])
    ours = histograms.auc([deposits])[0]
    labels = np.r_[np.ones(deposits.size), np.zeros(cells.size)]
    reference = roc_auc_score(labels, np.r_[deposits, cells])
    assert ours == pytest.approx(reference, abs=5e-4)


# -- the shared cache --------------------------------------------------------------------------


def test_plans_sharing_a_cache_give_what_each_gives_alone(tmp_path):
    """Evaluating realisations with one shared cache gives each one's own result, bit for bit."""
    tree, scores, _ = small_workshop(tmp_path)
    plans = [apply_values(tree, v).compile() for v in sample_values(tree, scores, 12, seed=5)]
    rng = np.random.default_rng(1)
    values = {MAG: rng.normal(50, 20, (30, 40)), GRAV: rng.normal(0, 3, (30, 40)),
              HOST: rng.integers(1, 5, (30, 40)).astype(float)}
    cache = BlockCache.for_plans(plans)
    for plan in plans:
        shared = plan.evaluate_block(values, cache=cache)[plan.root_path]
        alone = plan.evaluate_block(values)[plan.root_path]
        np.testing.assert_array_equal(shared, alone)
    assert 0 < len(cache) < sum(len(p.leaves) + len(p.steps) for p in plans)  # shared, and only that


# -- the Monte Carlo and sensitivity on small rasters ------------------------------------------


def _mc_outputs(folder, tag=""):
    return {name: str(folder / f"mc{tag}-{name}.tif") for name in MC_OUTPUTS}


def test_zero_spread_gives_the_single_evaluation_everywhere(tmp_path):
    """With experts who agree, every summary equals the single evaluation cell for cell; std is 0."""
    tree, _, sheets = small_workshop(tmp_path, agree=True)
    result = monte_carlo(tree, sheets, _mc_outputs(tmp_path), n=7, seed=3)
    single = evaluate_tree(tree, str(tmp_path / "single.tif"))
    expected = read_raster(single.output)
    for name in ("mean", "p10", "p50", "p90"):
        np.testing.assert_array_equal(read_raster(result.files[name]), expected)
    spread = read_raster(result.files["std"])
    assert np.nanmax(spread) == 0 and np.array_equal(np.isnan(spread), np.isnan(expected))
    robustness = read_raster(result.files["robustness"])
    assert set(np.unique(robustness[~np.isnan(robustness)])) <= {0.0, 1.0}


def test_percentiles_match_numpy_over_single_evaluations(tmp_path):
    """P50, P10, mean and std of the one-pass run equal numpy's over N ordinary evaluations."""
    tree, scores, sheets = small_workshop(tmp_path)
    n, seed = 9, 21
    result = monte_carlo(tree, sheets, _mc_outputs(tmp_path), n=n, seed=seed, top_percent=20)
    singles = []
    for i, values in enumerate(sample_values(tree, scores, n, seed)):
        realisation = apply_values(tree, values)
        singles.append(read_raster(evaluate_tree(realisation, str(tmp_path / f"r{i}.tif")).output))
    stack = np.array(singles, dtype=np.float32)
    np.testing.assert_allclose(read_raster(result.files["p50"]), np.percentile(stack, 50, axis=0), rtol=1e-6)
    np.testing.assert_allclose(read_raster(result.files["p10"]), np.percentile(stack, 10, axis=0), rtol=1e-6)
    np.testing.assert_allclose(read_raster(result.files["mean"]), stack.mean(axis=0), rtol=1e-6)
    np.testing.assert_allclose(read_raster(result.files["std"]), stack.std(axis=0, ddof=1),
                               rtol=1e-5, atol=1e-7)
    # every row is sampled on a grid this small, so each threshold is exact to a bin
    thresholds = [np.quantile(s[~np.isnan(s)], 0.8) for s in stack]
    robust = np.mean([s >= t - 1.0 / BINS for s, t in zip(stack, thresholds)], axis=0)
    measured = read_raster(result.files["robustness"])
    valid = ~np.isnan(measured)
    assert np.mean(np.abs(measured[valid] - robust[valid]) > 1e-6) < 0.01
    record = json.loads((tmp_path / "mc-mean.tif.lineage.json").read_text())
    assert record["seed"] == seed and record["sampling"]["n"] == n and len(record["realisations"]) == n
    assert record["top_area"]["threshold_source"] == "every cell of the grid"
    assert 20 <= record["top_area"]["realised_top_percent"]["min"] < 21


def test_the_same_seed_gives_the_same_rasters(tmp_path):
    """The same seed writes identical cells; another seed other cells."""
    tree, _, sheets = small_workshop(tmp_path)
    first = monte_carlo(tree, sheets, _mc_outputs(tmp_path, "a"), n=6, seed=4)
    again = monte_carlo(tree, sheets, _mc_outputs(tmp_path, "b"), n=6, seed=4)
    other = monte_carlo(tree, sheets, _mc_outputs(tmp_path, "c"), n=6, seed=5)
    for name in MC_OUTPUTS:
        np.testing.assert_array_equal(read_raster(first.files[name]), read_raster(again.files[name]))
    assert not np.array_equal(read_raster(first.files["mean"]), read_raster(other.files["mean"]),
                              equal_nan=True)


def test_a_pilot_of_small_windows_gives_thresholds_near_the_full_grid(tmp_path):
    """With a pilot of a fifth of the cells the realised top share stays near the one asked for."""
    tree, _, sheets = small_workshop(tmp_path)
    result = monte_carlo(tree, sheets, _mc_outputs(tmp_path), n=5, seed=2, top_percent=10,
                         pilot_cells=SHAPE[0] * SHAPE[1] // 5)
    note = result.record["top_area"]
    assert note["threshold_source"].startswith("a pilot of ")
    assert 7 <= note["realised_top_percent"]["min"] <= note["realised_top_percent"]["max"] <= 13


def test_pilot_strips_span_the_grid_and_stay_inside_it():
    """The pilot's strips hold about the cells asked for, cover every column, top row to bottom row."""
    from favour_plugin.raster.ensemble_jobs import pilot_windows
    from favour_plugin.raster.grid import Grid

    for width, height in ((3000, 2000), (700, 9000), (9000, 300), (600, 40)):
        grid = Grid.from_spec("EPSG:32633", [0, 0, width * 10, height * 10], 10)
        windows = pilot_windows(grid, 200_000)
        cells = sum(w.width * w.height for w in windows)
        assert 100_000 <= cells <= 400_000 or cells == grid.cells
        assert all(0 <= w.col_off and w.col_off + w.width <= width and 0 <= w.row_off
                   and w.row_off + w.height <= height for w in windows)
        assert min(w.row_off for w in windows) == 0 and max(w.row_off + w.height for w in windows) == height
        first_strip = [w for w in windows if w.row_off == 0]
        assert sum(w.width for w in first_strip) == width


def test_sensitivity_counts_cells_entering_and_leaving_the_top(tmp_path):
    """Entering and leaving counts equal numpy's on variants evaluated one by one; AUC near sklearn's."""
    tree, _, _ = small_workshop(tmp_path)
    rng = np.random.default_rng(5)
    cells = [(int(r), int(c)) for r, c in zip(rng.integers(10, 90, 15), rng.integers(10, 110, 15))]
    deposits = write_vector(tmp_path / "deposits.gpkg", [
        f"POINT ({ORIGIN[0] + (c + 0.5) * 100} {ORIGIN[1] - (r + 0.5) * 100})" for r, c in cells])
    result = sensitivity(tree, str(tmp_path / "s.csv"), str(tmp_path / "s.png"), fraction=0.2,
                         top_percent=15, deposits=deposits)
    assert (tmp_path / "s.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    base = read_raster(evaluate_tree(tree, str(tmp_path / "base.tif")).output)
    base_top = base >= _edge(base, 15)
    rows = {row["label"]: row for row in result.rows}
    used = [v for v in sensitivity_variants(tree, 0.2) if not v.skipped]
    assert len(used) >= 5
    for i, variant in enumerate(used):
        values = read_raster(evaluate_tree(variant.tree, str(tmp_path / f"v{i}.tif")).output)
        top = values >= _edge(values, 15)
        both = ~np.isnan(values) & ~np.isnan(base)
        row = rows[variant.label]
        assert row["entering"] == int((top & ~base_top & both).sum())
        assert row["leaving"] == int((~top & base_top & both).sum())
        scores = values[~np.isnan(values)]
        at = np.array([values[r, c] for r, c in cells])
        reference = roc_auc_score(np.r_[np.ones(at.size), np.zeros(scores.size)], np.r_[at, scores])
        assert row["auc"] == pytest.approx(reference, abs=2e-3)


def _edge(values: np.ndarray, percent: float) -> float:
    """The top-area threshold as the job takes it: the bin edge below numpy's quantile."""
    histograms = UnitHistograms(1)
    histograms.add(values[None].astype(np.float32))
    return float(histograms.top_thresholds(percent)[0])
