"""Favour's command line, for scripts and machines without the QGIS desktop.

    python -m favour_plugin evaluate TREE -o OUT.tif [--nodes FOLDER]
    python -m favour_plugin reproduce OUT.tif

Both call the same functions as the processing algorithms. Exit status: 0 on
success (and, for ``reproduce``, identical cells), 1 when ``reproduce`` finds
differences, 2 on an error, 130 when interrupted (Ctrl-C or SIGTERM). Nothing
is left under an output's final name after an error or an interrupt, and an
earlier file under that name is as it was.
"""

from __future__ import annotations

import argparse
import signal
import sys
import threading

from .about import VERSION
from .core.errors import FavourError
from .core.feedback import Feedback
from .core.lineage import CAUTION


class ConsoleFeedback(Feedback):
    """Feedback on standard error: progress every 10%, notes with ``--verbose``, warnings always."""

    def __init__(self, verbose: bool = False, quiet: bool = False) -> None:
        super().__init__()
        self.verbose = verbose
        self.quiet = quiet
        self._shown = -1

    def set_progress(self, fraction: float) -> None:
        """Print the progress when it passes another tenth."""
        tenth = int(fraction * 10)
        if not self.quiet and tenth > self._shown:
            self._shown = tenth
            print(f"  {10 * tenth:3d}%", file=sys.stderr, flush=True)

    def info(self, text: str) -> None:
        """Print a note with ``--verbose``."""
        if self.verbose:
            print(f"note: {text}", file=sys.stderr)

    def warning(self, text: str, category=None) -> None:
        """Print and record a warning."""
        if category is None:
            super().warning(text)
        else:
            super().warning(text, category)
        print(f"warning: {text}", file=sys.stderr)


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="python -m favour_plugin",
        description="Favour: knowledge-driven favourability mapping from a criteria tree.",
        epilog=CAUTION)
    parser.add_argument("--version", action="version", version=f"Favour {VERSION}")
    sub = parser.add_subparsers(dest="command", required=True)

    evaluate = sub.add_parser("evaluate", help="evaluate a tree file into a favourability raster")
    evaluate.add_argument("tree", help="the tree file (.json)")
    evaluate.add_argument("-o", "--output", required=True, help="favourability GeoTIFF to write")
    evaluate.add_argument("--nodes", metavar="FOLDER",
                          help="also write one raster per component (and per node marked save_output)")
    evaluate.add_argument("--threads", type=int, default=None, help="worker threads (default 2)")
    evaluate.add_argument("-v", "--verbose", action="store_true", help="print notes too")
    evaluate.add_argument("-q", "--quiet", action="store_true", help="no progress")

    reproduce = sub.add_parser(
        "reproduce", help="evaluate an output's lineage again and compare every cell")
    reproduce.add_argument("output", help="an output raster with its .lineage.json beside it")
    reproduce.add_argument("--threads", type=int, default=None, help="worker threads (default 2)")
    reproduce.add_argument("-v", "--verbose", action="store_true", help="print notes too")
    reproduce.add_argument("-q", "--quiet", action="store_true", help="no progress")
    return parser


def _interrupt_on_terminate() -> None:
    """Turn a termination request (SIGTERM) into the same clean stop as Ctrl-C.

    Without this the process would die at once, leaving temporary files and
    locks beside the outputs; with it, the job's clean-up runs first.
    """
    def stop(signum, frame):
        raise KeyboardInterrupt
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, stop)


def main(argv: list[str] | None = None) -> int:
    """Run the command line; return the exit status."""
    args = _parser().parse_args(argv)
    _interrupt_on_terminate()
    feedback = ConsoleFeedback(args.verbose, args.quiet)
    # Imported here so --help and --version work even where GDAL is missing.
    from .raster.engine import evaluate_tree_file, reproduce
    try:
        if args.command == "evaluate":
            result = evaluate_tree_file(args.tree, args.output, args.nodes, feedback, args.threads)
            print(f"favourability: {result.output}")
            for node, path in result.node_outputs.items():
                print(f"node raster:   {path}  ({node})")
            print(f"lineage:       {result.lineage_file}")
            print(CAUTION, file=sys.stderr)
            return 0
        outcome = reproduce(args.output, feedback, args.threads)
        print(outcome.summary())
        return 0 if outcome.identical or outcome.rebuilt else 1
    except FavourError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("interrupted; nothing was written under the output's name and earlier outputs "
              "are as they were", file=sys.stderr)
        return 130
