"""Run Favour's command line: ``python -m favour_plugin --help``."""

import sys

from .cli import main

if __name__ == "__main__":  # worker processes of a local Dask cluster import this module again
    sys.exit(main())
