"""Feedback on the terminal: progress every tenth, notes with ``--verbose``, warnings always."""

from __future__ import annotations

import sys

from ..core.feedback import Feedback


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


def add_compression(parser) -> None:
    """Add ``--compress`` to a subcommand that writes rasters."""
    from ..raster.writer import COMPRESSIONS

    parser.add_argument("--compress", choices=COMPRESSIONS, default=None,
                        help="compression of the rasters (default: ZSTD level 1, or DEFLATE level 1 "
                             "where GDAL has no ZSTD)")


def add_cluster(parser) -> None:
    """Add ``--cluster`` to a subcommand that can run its blocks on a Dask cluster."""
    parser.add_argument("--cluster", metavar="local|tcp://HOST:PORT", default=None,
                        help="run the blocks on a Dask cluster: 'local' starts one on this machine, "
                             "tcp://HOST:PORT joins a running scheduler (inputs and outputs must be "
                             "reachable from every worker under the same paths)")


def add_common(parser) -> None:
    """Add the options every long-running subcommand takes: threads, verbose, quiet."""
    parser.add_argument("--threads", type=int, default=None,
                        help="worker threads (default: one per core, at most 16)")
    parser.add_argument("-v", "--verbose", action="store_true", help="print notes too")
    parser.add_argument("-q", "--quiet", action="store_true", help="no progress")
