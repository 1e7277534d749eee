"""Favour's command line, for scripts and machines without the QGIS desktop.

    python -m favour_plugin evaluate TREE -o OUT.tif [--nodes FOLDER]
    python -m favour_plugin reproduce OUT.tif
    python -m favour_plugin sheets TREE -o FOLDER [--experts 4] [--previous SHEETS…]
    python -m favour_plugin aggregate TREE SHEETS… --table T.csv [--round2 SHEETS…] [--tree-out A.json]
    python -m favour_plugin pairwise MATRIX.csv [--tree T --node PATH --tree-out T2.json]
    python -m favour_plugin montecarlo TREE SHEETS… -o FOLDER [-n 200] [--seed 1] [--mode experts]
    python -m favour_plugin sensitivity TREE --table S.csv [--chart S.png] [--deposits D.gpkg]
    python -m favour_plugin validate MAP.tif DEPOSITS.gpkg --json OUT.json [--csv C.csv] [--held-out H.gpkg]
    python -m favour_plugin holdouts EVIDENCE… --deposits D.gpkg --json OUT.json [--block-size 5000]
    python -m favour_plugin redundancy TREE --json OUT.json [--threshold 0.8] [--posterior P.tif]
    python -m favour_plugin targets MAP.tif -o T.gpkg [--top 10 | --threshold MU | --validation V.json]
    python -m favour_plugin report MAP.tif -o R.html [--components DIR] [--validation V] [--targets T.gpkg]

Every subcommand calls the same functions as the processing algorithms. Exit
status: 0 on success (and, for ``reproduce``, identical cells), 1 when
``reproduce`` finds differences, 2 on an error, 130 when interrupted (Ctrl-C
or SIGTERM). Nothing is left under an output's final name after an error or an
interrupt, and an earlier file under that name is as it was.
"""

from __future__ import annotations

import argparse
import signal
import sys
import threading

from ..about import VERSION
from ..core.errors import FavourError
from ..core.lineage import CAUTION
from . import evaluate, targets, validation, workshop
from .console import ConsoleFeedback

__all__ = ["ConsoleFeedback", "main"]


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="python -m favour_plugin",
        description="Favour: knowledge-driven favourability mapping from a criteria tree.",
        epilog=CAUTION)
    parser.add_argument("--version", action="version", version=f"Favour {VERSION}")
    sub = parser.add_subparsers(dest="command", required=True)
    for module in (evaluate, workshop, validation, targets):
        module.add_parsers(sub)
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
    try:
        return args.run(args, feedback)
    except FavourError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("interrupted; nothing was written under the output's name and earlier outputs "
              "are as they were", file=sys.stderr)
        return 130
