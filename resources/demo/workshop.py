"""Write an invented scoring workshop for the Tarrowin demo tree, from a seed.

Five anonymous experts (E1 … E5) score ``district.favour.json``: each starts
from the tree's values and moves them a little, in the direction of an
invented leaning of their own (one trusts structure, one geochemistry, one is
cautious about distances, …), gives ranges for the distance parameters, and
states a confidence. They strongly disagree on one node, the weight of the
fault mesh in the pathway: two hold that the third-order cross faults carry
the high-grade shoots (importance 7–8), three that the mesh is mostly noise
(importance 1–2). That node's coefficient of variation passes the default
threshold, so the aggregate flags it for discussion; nothing else is flagged.

A second round is written too: each expert sees the group's first-round
median and IQR and moves halfway towards the median; on the fault mesh the
two camps move closer without agreeing.

Usage::

    python resources/demo/workshop.py OUT_FOLDER [--seed 7] [--experts 5] [--format csv]

writes ``OUT_FOLDER/E1.csv`` … (round 1), ``OUT_FOLDER/round2/E1-round2.csv`` …
and ``OUT_FOLDER/workshop.json`` (seed, experts, files, the disputed node).
Every sheet is read back through the import checks before the script ends.
Nothing here describes a real person, place, company or deposit.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent.parent
if str(ROOT) not in sys.path:  # run as a script from anywhere: make the plugin importable
    sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from favour_plugin.core import sheets  # noqa: E402
from favour_plugin.core.scoring import (  # noqa: E402
    IMPORTANCE,
    MEMBERSHIP_PREFIX,
    Score,
    Scores,
    node_items,
)
from favour_plugin.core.sheet_import import read_sheets  # noqa: E402
from favour_plugin.core.tree import Tree  # noqa: E402
from favour_plugin.core.workshop import aggregate  # noqa: E402

TREE_FILE = HERE / "district.favour.json"
DEFAULT_SEED = 7
DISPUTED = "Favourability > Pathway > Fault mesh"
# The fault-mesh camps: importance the "shoots" camp and the "noise" camp give in round 1.
SHOOTS_CAMP, NOISE_CAMP = (7.0, 8.0), (1.0, 2.0)

# Each invented expert's leaning: factors on the importance of nodes whose path holds a word,
# the relative width of their ranges, and their usual confidence.
LEANINGS = (
    {"lean": {"Pathway": 1.15, "shear": 1.1}, "width": 0.25, "confidence": "high", "camp": "shoots"},
    {"lean": {"Arsenic": 1.2, "alteration": 1.15}, "width": 0.35, "confidence": "medium",
     "camp": "noise"},
    {"lean": {"Trap": 1.1, "hinge": 1.1}, "width": 0.2, "confidence": "medium", "camp": "shoots"},
    {"lean": {"Preservation": 1.15, "cover": 1.1}, "width": 0.3, "confidence": "low", "camp": "noise"},
    {"lean": {"Source": 1.1}, "width": 0.3, "confidence": "medium", "camp": "noise"},
)


def _round(value: float, digits: int = 3) -> float:
    """Round to ``digits`` significant figures, as a person writes a number down."""
    if value == 0 or not math.isfinite(value):
        return value
    return round(value, digits - 1 - math.floor(math.log10(abs(value))))


def _expert_scores(tree: Tree, expert: str, leaning: dict, rng: np.random.Generator) -> dict:
    """Return node → item → Score for one expert's first round."""
    out: dict[str, dict[str, Score]] = {}
    for node, items in node_items(tree).items():
        for item, spec in items.items():
            note, low, high = "", None, None
            if item == IMPORTANCE:
                factor = math.prod(f for word, f in leaning["lean"].items() if word in node)
                value = min(9.0, max(1.0, round(2 * spec.value * factor * rng.lognormal(0, 0.05)) / 2))
                if node == DISPUTED:
                    low_camp, high_camp = SHOOTS_CAMP if leaning["camp"] == "shoots" else NOISE_CAMP
                    value = float(rng.integers(int(low_camp), int(high_camp) + 1))
                    note = ("cross faults carry the high-grade shoots" if leaning["camp"] == "shoots"
                            else "the mesh is mostly noise between the splays")
            else:
                # Multiplicative noise keeps zeros at zero and signs as they are.
                value = _round(spec.value * rng.lognormal(0, 0.04))
                if spec.unit.startswith("μ"):
                    value = min(1.0, value)
                elif value != 0 and "map units" in spec.unit and not item.endswith("slope"):
                    width = leaning["width"] * rng.uniform(0.8, 1.2)
                    low, high = sorted((_round(value * (1 - width)), _round(value * (1 + width))))
            out.setdefault(node, {})[item] = Score(value=value, low=low, high=high,
                                                   confidence=leaning["confidence"], note=note)
    return out


def _second_round(first: Scores, group, rng: np.random.Generator) -> Scores:
    """Move each expert halfway towards the group's median; ranges shrink by a fifth."""
    table = {}
    for expert in first.experts:
        table[expert] = {}
        for node, items in first.table[expert].items():
            table[expert][node] = {}
            for item, score in items.items():
                median = group.get(node, item).median
                value = (score.value + median) / 2
                if item == IMPORTANCE:
                    value = round(2 * value) / 2
                elif not item.startswith(MEMBERSHIP_PREFIX) or score.value == 0:
                    value = score.value
                else:
                    value = _round(value)
                low = high = None
                if score.has_range:
                    half = 0.4 * (score.high - score.low)
                    low, high = _round(value - half), _round(value + half)
                if node == DISPUTED and item == IMPORTANCE:
                    # each camp gives ground towards the other, without agreeing
                    value = score.value + (1.5 if score.value < 5 else -1.5) * rng.uniform(0.8, 1.0)
                    value = min(9.0, max(1.0, round(2 * value) / 2))
                table[expert][node][item] = Score(value=value, low=low, high=high,
                                                  confidence=score.confidence, note=score.note)
    return Scores(table=table, experts=first.experts, round_number=2)


def generate_workshop(folder: Path | str, seed: int = DEFAULT_SEED, experts: int = 5,
                      fmt: str = "csv", tree_file: Path | str = TREE_FILE) -> dict:
    """Write both rounds' sheets and ``workshop.json`` into ``folder``; return the manifest."""
    if not 4 <= experts <= len(LEANINGS):
        raise SystemExit(f"the demo workshop has 4 to {len(LEANINGS)} experts, got {experts}")
    folder = Path(folder)
    tree = Tree.load(tree_file)
    rng = np.random.default_rng(seed)
    ids = sheets.default_experts(experts)
    first = Scores(table={e: _expert_scores(tree, e, LEANINGS[k], rng) for k, e in enumerate(ids)},
                   experts=ids, round_number=1)
    round1 = sheets.export_sheets(tree, folder, ids, fmt=fmt, previous=first)
    imported = read_sheets(round1, tree)          # the import checks every cell
    group = aggregate(imported)
    second = _second_round(imported, group, rng)
    round2 = sheets.export_sheets(tree, folder / "round2", ids, fmt=fmt, previous=second, group=group,
                                  round_number=2)
    read_sheets(round2, tree, round_number=2)
    manifest = {
        "district": "Tarrowin (invented)",
        "tree": Path(tree_file).name,
        "seed": seed,
        "experts": list(ids),
        "round1": [p.relative_to(folder).as_posix() for p in round1],
        "round2": [p.relative_to(folder).as_posix() for p in round2],
        "disputed_node": DISPUTED,
        "flagged_round1": group.flagged_nodes,
    }
    tmp = folder / ".workshop.json.partial"
    tmp.write_text(json.dumps(manifest, indent=2) + "\n", encoding="utf-8")
    os.replace(tmp, folder / "workshop.json")
    return manifest


def main(argv=None) -> int:
    """Command line: write the demo workshop into the folder given."""
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("folder", type=Path, help="folder to write the sheets into (made if missing)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED)
    parser.add_argument("--experts", type=int, default=5, help="4 or 5")
    parser.add_argument("--format", choices=("csv", "xlsx"), default="csv")
    args = parser.parse_args(argv)
    manifest = generate_workshop(args.folder, args.seed, args.experts, args.format)
    print(f"workshop: {len(manifest['experts'])} experts, sheets in {args.folder}; "
          f"flagged in round 1: {', '.join(manifest['flagged_round1']) or 'nothing'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
