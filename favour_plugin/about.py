"""The plugin's name and version, read from ``metadata.txt`` so they are stated once."""

from __future__ import annotations

import configparser
from pathlib import Path

_META = configparser.ConfigParser(interpolation=None)
_META.read(Path(__file__).resolve().parent / "metadata.txt", encoding="utf-8")

NAME = _META.get("general", "name", fallback="Favour")
VERSION = _META.get("general", "version", fallback="0.0.0")
