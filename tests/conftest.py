"""Shared fixtures: Favour's provider in the QGIS test application, and a qgis_process runner.

Tests start with an empty QGIS profile (pytest-qgis), so the provider is
registered here; qgis_process runs get an isolated profile with the plugin
enabled from this checkout.
"""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="session", autouse=True)
def checksum_cache(tmp_path_factory):
    """Keep the remembered input checksums of the tests out of the user's configuration."""
    path = tmp_path_factory.mktemp("checksums") / "checksums.json"
    os.environ["FAVOUR_CHECKSUM_CACHE"] = str(path)
    yield path


@pytest.fixture(scope="session")
def favour_provider(qgis_app, qgis_processing):
    """Register Favour's processing provider for the session and return it."""
    from qgis.core import QgsApplication

    from favour_plugin.processing.provider import FavourProvider

    registry = QgsApplication.processingRegistry()
    provider = registry.providerById("favour")
    if provider is None:
        provider = FavourProvider()
        registry.addProvider(provider)
    yield provider


def qgis_process_binary() -> str:
    """Return the qgis_process executable that works on this machine.

    On Debian 12 the ``qgis_process`` wrapper fails ("--noversioncheck not
    known"), so the real binary ``qgis_process.bin`` is preferred.
    """
    for candidate in ("/usr/bin/qgis_process.bin", shutil.which("qgis_process") or ""):
        if candidate and os.path.exists(candidate):
            return candidate
    pytest.skip("qgis_process is not installed")


@pytest.fixture(scope="session")
def qgis_process(tmp_path_factory):
    """Return ``run(algorithm_id, **params) -> CompletedProcess`` for qgis_process.

    The profile is isolated (``QGIS_CUSTOM_CONFIG_PATH``) and the plugin is
    loaded from this checkout (``QGIS_PLUGINPATH``) and enabled once.
    """
    binary = qgis_process_binary()
    profile = tmp_path_factory.mktemp("qgis-profile")
    env = dict(os.environ, QGIS_CUSTOM_CONFIG_PATH=str(profile), QGIS_PLUGINPATH=str(ROOT),
               QT_QPA_PLATFORM="offscreen")
    subprocess.run([binary, "plugins", "enable", "favour_plugin"], env=env, check=True,
                   capture_output=True, text=True, timeout=300)

    def run(algorithm: str, **params) -> subprocess.CompletedProcess:
        args = [binary, "run", algorithm, "--"] + [f"{k}={v}" for k, v in params.items()]
        return subprocess.run(args, env=env, capture_output=True, text=True, timeout=1800)

    return run
