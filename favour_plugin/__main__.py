"""Run Favour's command line: ``python -m favour_plugin --help``."""

import sys

from .cli import main

sys.exit(main())
