"""What the benchmark scripts share: the grid they build on, the smooth field, and measured children.

Each benchmark runs every stage in a child process of its own and measures
its wall time and peak resident memory through :data:`LAUNCHER` (see
:func:`run_child`); QGIS stages run ``qgis_process.bin`` with an isolated
profile (:class:`Qgis`). Importing this module also puts the checkout on
``sys.path``, so a script in ``bench/`` can import ``favour_plugin``.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from osgeo import osr

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

#: The local transverse Mercator over open ocean of tests/helpers.py TEST_CRS.
CRS = ("+proj=tmerc +lat_0=-48 +lon_0=-125 +k=1 +x_0=500000 +y_0=1000000 "
       "+datum=WGS84 +units=m +no_defs")
ORIGIN = (500000.0, 1020000.0)
CELL = 25.0

QGIS_PROCESS = "/usr/bin/qgis_process.bin"


def srs() -> osr.SpatialReference:
    """Return the benchmark's CRS with x, y axis order."""
    ref = osr.SpatialReference()
    ref.SetFromUserInput(CRS)
    ref.SetAxisMappingStrategy(osr.OAMS_TRADITIONAL_GIS_ORDER)
    return ref


class Field:
    """A smooth random field: a sum of plane waves plus a little white noise.

    Wavelengths run from 40 to 4000 cells with amplitudes rising with the
    wavelength, so the field looks like a gridded survey; the noise (1 % of
    the spread) keeps the low mantissa bits busy, as in real data. Values are
    standardised (mean 0, spread about 1). Each strip of rows is computed on
    its own from the seed, so memory stays at one strip whatever the size.
    """

    WAVES = 16

    def __init__(self, seed: int) -> None:
        rng = np.random.default_rng(seed)
        self.seed = seed
        wavelength = np.exp(rng.uniform(np.log(40.0), np.log(4000.0), self.WAVES))
        angle = rng.uniform(0.0, np.pi, self.WAVES)
        self.kx = 2 * np.pi * np.cos(angle) / wavelength
        self.ky = 2 * np.pi * np.sin(angle) / wavelength
        self.phase = rng.uniform(0.0, 2 * np.pi, self.WAVES)
        amplitude = (wavelength / 4000.0) ** 0.5
        self.amplitude = amplitude / np.sqrt(0.5 * np.sum(amplitude ** 2))

    def strip(self, row: int, rows: int, width: int) -> np.ndarray:
        """Return rows ``row`` to ``row + rows`` of the field (float64, standardised)."""
        x = np.arange(width, dtype=np.float64)
        y = np.arange(row, row + rows, dtype=np.float64)
        out = np.zeros((rows, width))
        for a, kx, ky, ph in zip(self.amplitude, self.kx, self.ky, self.phase):
            # cos(kx x + ky y + φ) = cos(kx x + φ) cos(ky y) − sin(kx x + φ) sin(ky y)
            out += np.outer(a * np.cos(ky * y), np.cos(kx * x + ph))
            out -= np.outer(a * np.sin(ky * y), np.sin(kx * x + ph))
        noise = np.random.default_rng([self.seed, row]).standard_normal((rows, width))
        return out + 0.01 * noise


# -- children: each stage in a process of its own -----------------------------


class Measure:
    """Wall time (s) and peak resident memory (MB) of one child process."""

    def __init__(self, label: str, seconds: float, peak_mb: float, inner: float | None = None):
        self.label = label
        self.seconds = seconds
        self.peak_mb = peak_mb
        self.inner = inner  # seconds the child measured itself, without start-up
        self.start = 0.0  # seconds of the inner time spent starting something (a cluster)

    def __repr__(self) -> str:
        return f"{self.label}: {self.seconds:.1f} s, {self.peak_mb:.0f} MB"


# A small launcher between a benchmark and each measured child. ``ru_maxrss`` of
# a child started straight from the benchmark would start at the benchmark's own
# peak (Linux carries the peak of the address space the child was forked, or
# vforked, from across exec), so every child is forked from this small
# interpreter instead, which reports its child's ru_maxrss (KiB) to a file.
LAUNCHER = """\
import os, sys
pid = os.fork()
if pid == 0:
    try:
        os.execvp(sys.argv[2], sys.argv[2:])
    finally:
        os._exit(127)
_, status, usage = os.wait4(pid, 0)
with open(sys.argv[1], "w") as out:
    out.write(str(usage.ru_maxrss))
sys.exit(os.waitstatus_to_exitcode(status))
"""


def bench_env(work: Path) -> dict:
    """Return the environment of every child: headless, with a checksum cache of the benchmark's own.

    Favour remembers input checksums (``core/checksums.py``), so only the
    first run over new inputs pays for hashing them. The cache here starts
    empty in ``work``, so the user's own cache is never read or written;
    :func:`hash_once` fills it before the stages.
    """
    work.mkdir(parents=True, exist_ok=True)
    cache = work / "checksums.json"
    cache.unlink(missing_ok=True)
    return dict(os.environ, QT_QPA_PLATFORM="offscreen", FAVOUR_CHECKSUM_CACHE=str(cache))


def hash_once(env: dict, inputs: list[str]) -> None:
    """Hash ``inputs`` into the cache of ``env``, as a first run would; print what it took.

    Every stage then measures a re-run, so no stage gets checksums another
    stage paid for.
    """
    code = ("import sys, time; from favour_plugin.core.lineage import describe_files; "
            "t = time.perf_counter(); n = sum(e['size'] for e in describe_files(sys.argv[1:])); "
            "print(f'{n / 2**20:.0f} MB in {time.perf_counter() - t:.1f} s')")
    done = subprocess.run([sys.executable, "-c", code, *inputs], env=dict(env, PYTHONPATH=str(ROOT)),
                          capture_output=True, text=True, check=True)
    print(f"  inputs hashed once, as a first run would, then remembered for every stage: "
          f"{done.stdout.strip()}", flush=True)


def run_child(label: str, args: list[str], env: dict, log: Path, result: Path | None = None,
              quiet: bool = False) -> Measure:
    """Run ``args`` as a child; return its wall time and its own peak RSS.

    The child is started through :data:`LAUNCHER`, whose own size (about
    10 MB) bounds the error of the peak. The child's output goes to ``log``;
    a non-zero exit stops the benchmark. When ``result`` is given, the child
    writes ``{"seconds": ...}`` there (:func:`write_seconds`): the time it
    measured itself, without start-up.
    """
    log.parent.mkdir(parents=True, exist_ok=True)
    rss_file = log.with_suffix(".maxrss")
    for stale in (result, rss_file):
        if stale is not None and stale.exists():
            stale.unlink()
    with open(log, "w") as out:
        start = time.perf_counter()
        code = subprocess.call([sys.executable, "-S", "-c", LAUNCHER, str(rss_file), *args],
                               env=env, stdout=out, stderr=subprocess.STDOUT,
                               stdin=subprocess.DEVNULL)
        seconds = time.perf_counter() - start
    if code != 0:
        tail = log.read_text(errors="replace")[-3000:]
        sys.exit(f"{label} failed (exit {code}); the end of {log}:\n{tail}")
    inner = json.loads(result.read_text())["seconds"] if result is not None else None
    measure = Measure(label, seconds, int(rss_file.read_text()) / 1024.0, inner)
    if not quiet:
        print(f"  {measure}" + (f" (inside the child {inner:.1f} s)" if inner is not None else ""),
              flush=True)
    return measure


def python_child(script: str, kind: str, *args: str) -> list[str]:
    """Return the command running ``script --child kind args`` in a new interpreter."""
    return [sys.executable, str(Path(script).resolve()), "--child", kind, *args]


def write_seconds(result: str, seconds: float, **extra) -> None:
    """Write the time a child measured itself (and any ``extra`` figures) for :func:`run_child`."""
    Path(result).write_text(json.dumps({"seconds": seconds, **extra}))


# -- QGIS ---------------------------------------------------------------------


class Qgis:
    """Runs ``qgis_process.bin`` with an isolated profile, optionally with Favour enabled."""

    def __init__(self, profile: Path, with_plugin: bool) -> None:
        profile.mkdir(parents=True, exist_ok=True)
        self.env = dict(os.environ, QGIS_CUSTOM_CONFIG_PATH=str(profile), QT_QPA_PLATFORM="offscreen")
        if with_plugin:
            self.env["QGIS_PLUGINPATH"] = str(ROOT)
            done = subprocess.run([QGIS_PROCESS, "plugins", "enable", "favour_plugin"],
                                  env=self.env, capture_output=True, text=True, timeout=300)
            # A profile kept from an earlier run answers "already enabled" with exit 1.
            if done.returncode != 0 and "already enabled" not in done.stdout + done.stderr:
                sys.exit(f"cannot enable favour_plugin in {profile}:\n{done.stdout}{done.stderr}")

    def algorithms(self) -> str:
        """Return the output of ``qgis_process.bin list``."""
        return subprocess.run([QGIS_PROCESS, "list"], env=self.env, check=True,
                              capture_output=True, text=True, timeout=300).stdout

    def run(self, label: str, algorithm: str, params: list[tuple[str, object]], log: Path) -> Measure:
        """Run one algorithm; ``params`` may repeat a key (a multi-layer parameter)."""
        args = [QGIS_PROCESS, "run", algorithm, "--"] + [f"{k}={v}" for k, v in params]
        return run_child(label, args, self.env, log)


# -- small helpers --------------------------------------------------------------


def folder_bytes(folder: Path) -> int:
    """Return the bytes of the files directly in ``folder``."""
    return sum(p.stat().st_size for p in folder.iterdir() if p.is_file())


def fresh(path: Path) -> str:
    """Remove an earlier output at ``path`` (and its sidecars); return the path as text."""
    for p in path.parent.glob(path.name + "*"):
        p.unlink()
    for p in path.parent.glob(path.stem + ".qml"):
        p.unlink()
    return str(path)


def mb(value: float) -> str:
    """Format megabytes."""
    return f"{value:.0f} MB"


def verdict(ok: bool) -> str:
    """Return PASS or MISS."""
    return "PASS" if ok else "MISS"


def housekeeping(args, parser, children: dict, stages: str) -> int | None:
    """Do what both scripts do before a run: a child's job, --clean, and the checks of --size.

    Returns an exit status when the script should stop here, None to go on
    with the run. ``stages`` names the stages that need qgis_process.
    """
    if args.child:
        children[args.child[0]](*args.child[1:])
        return 0
    work = Path(args.workdir).resolve()
    if args.clean:
        if work.exists():
            shutil.rmtree(work)
            print(f"removed {work}")
        else:
            print(f"nothing to remove: {work} does not exist")
        return 0
    if args.size < 64:
        parser.error("--size must be at least 64")
    if not os.path.exists(QGIS_PROCESS):
        sys.exit(f"{QGIS_PROCESS} is not installed; {stages} need it")
    return None
