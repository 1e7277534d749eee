#!/usr/bin/env bash
# Prepare a machine to build, test and demo Favour: Debian packages (QGIS and the
# scientific stack, never numpy from pip), then a virtual environment that sees
# the system packages, then the pure-Python extras pinned in requirements-dev.txt.
# Safe to run again; it only installs what is missing.
set -euo pipefail
cd "$(dirname "$0")/.."

VENV=${VENV:-.venv}
SYSTEM_PYTHON=/usr/bin/python3

# QGIS and everything that links against the system numpy come from Debian.
PACKAGES=(qgis qgis-providers python3-qgis python3-gdal gdal-bin
          python3-numpy python3-scipy python3-pandas python3-matplotlib
          python3-statsmodels python3-sklearn python3-jsonschema python3-openpyxl
          python3-dask python3-distributed
          python3-venv python3-pip xvfb xauth zip chromium)

missing=()
for pkg in "${PACKAGES[@]}"; do
    dpkg-query -W -f='${Status}' "$pkg" 2>/dev/null | grep -q "install ok installed" || missing+=("$pkg")
done
if [ ${#missing[@]} -gt 0 ]; then
    echo "setup: installing Debian packages: ${missing[*]}"
    if [ "$(id -u)" -eq 0 ]; then
        SUDO=()
    elif command -v sudo >/dev/null; then
        SUDO=(sudo)
    else
        echo "setup: these Debian packages are missing and this user cannot install them:" >&2
        echo "  apt-get install --no-install-recommends ${missing[*]}" >&2
        exit 1
    fi
    "${SUDO[@]}" apt-get update -qq
    DEBIAN_FRONTEND=noninteractive "${SUDO[@]}" apt-get install -y -qq --no-install-recommends "${missing[@]}"
fi

if ! "$SYSTEM_PYTHON" -c "import qgis.core, osgeo.gdal, numpy" 2>/dev/null; then
    echo "setup: $SYSTEM_PYTHON cannot import qgis, osgeo and numpy after installing the packages" >&2
    exit 1
fi

if [ ! -x "$VENV/bin/python" ]; then
    "$SYSTEM_PYTHON" -m venv --system-site-packages "$VENV"
fi

# Pin numpy (and the other compiled Debian packages) to the system's versions so pip
# can never pull a wheel that GDAL's bindings were not built against.
"$VENV/bin/python" - > "$VENV/constraints.txt" <<'PY'
import importlib.metadata as md
for dist in ("numpy", "scipy", "pandas", "matplotlib", "statsmodels", "scikit-learn"):
    try:
        print(f"{dist}=={md.version(dist)}")
    except md.PackageNotFoundError:
        pass
PY
"$VENV/bin/python" -m pip install --quiet --disable-pip-version-check \
    -c "$VENV/constraints.txt" -r requirements-dev.txt

"$VENV/bin/python" - <<'PY'
import numpy, osgeo.gdal, qgis.core
print(f"setup: ready (QGIS {qgis.core.Qgis.QGIS_VERSION}, GDAL {osgeo.gdal.__version__}, numpy {numpy.__version__})")
PY
touch "$VENV/.installed"
