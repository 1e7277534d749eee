"""Generate the layers of the Tarrowin demo district from a seed.

Tarrowin is an invented orogenic-gold district; every layer here is made by
this script and nothing in it describes a real place. The story the layers
tell:

* A folded greenstone belt strikes east-north-east: ultramafic flows at the
  base, a thick pile of mafic volcanics with two banded-iron beds, felsic
  volcanics, and turbiditic sediments at the top. Upright, gently plunging
  folds repeat the stratigraphy across strike; their axial traces are the
  fold hinges.
* The crustal-scale Greywhistle Shear Zone runs along the belt. Second-order
  splays leave it at a low angle and curve back towards it; short
  third-order cross faults link them.
* Gold-bearing fluid rose along the shear zone but was trapped on the
  splays where they cross reactive mafic volcanics and banded iron near fold
  hinges. Alteration along the corridors destroyed magnetite (magnetic lows)
  and added potassium (high K/Th); the occurrences shed arsenic into the soil.
* A late granite (the Mothwing Granite) and a small stock intrude after the
  gold and truncate the faults; mineralisation inside them was consumed.
* A younger cover sequence thickens eastward into the Sallow Basin and hides
  the belt; Sallow Lake sits on it. Radiometrics and soil geochemistry see
  little through the cover and nothing over the lake.
* Late joints cut the district. They are drawn from a random stream of their
  own and never look at the occurrences: they are planted noise.

``generate(folder, seed)`` writes the layers and ``manifest.json`` (seed,
layers, units, planted controls with their distances and thresholds, planted
noise). The same seed gives the same cells and features on every run.

Run as a script (``make demo-data``) it writes ``resources/demo/layers/``,
skipping the work when the layers there already come from the same seed and
generator version.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import math
import os
import sys
from pathlib import Path

import numpy as np
from osgeo import gdal, ogr, osr
from scipy import ndimage

GENERATOR_VERSION = 1
DEFAULT_SEED = 20_417
DISTRICT = "Tarrowin"
DEFAULT_FOLDER = Path(__file__).resolve().parent / "layers"

# A local transverse Mercator over open ocean, so the district lies nowhere real.
CRS_NAME = "Tarrowin local grid (transverse Mercator)"
CRS_PROJ = ("+proj=tmerc +lat_0=-48 +lon_0=-125 +k=1 +x_0=500000 +y_0=1000000 "
            "+datum=WGS84 +units=m +no_defs")
WIDTH, HEIGHT, CELL = 1200, 900, 25.0
XMIN, YMIN = 500_000.0, 1_000_000.0
YMAX = YMIN + HEIGHT * CELL
COARSE = 2  # the radiometric grid has cells of COARSE * CELL
NODATA = -9999.0
LITHO_NODATA = 255
STRIKE_DEG = 28.0  # strike of the belt, degrees anticlockwise from east

#: Lithology class codes of litho.tif.
LITHO = {1: "sediments", 2: "felsic volcanics", 3: "mafic volcanics", 4: "banded iron",
         5: "granite", 6: "ultramafic"}

#: The controls the occurrences were placed on, as the manifest states them.
PLANTED = {"second_order_distance_m": 500.0, "host_codes": [3, 4], "hinge_distance_m": 700.0,
           "cover_max_m": 40.0}
# Occurrences are placed a little inside the stated limits so that a distance
# measured on the grid (exact to about a cell) still finds them within.
_PLACE_MARGIN_M = 100.0
_ON_PATTERN, _OFF_PATTERN = 13, 2
_MIN_SPACING_M = 900.0

_NAMES = ("Quillon", "Marrowby Lode", "Fennet's Find", "Skellock", "Orrin Well", "Vantry",
          "Colliwake", "Hobblecrest", "Saltreach", "Brindlemoor", "Pell's Folly", "Wickerby",
          "Dunsallow", "Ketterfold", "Tarrowin Reef")
_STATUS = ("old workings", "prospect", "drill intercept")

_TIFF_OPTIONS = ["TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "COMPRESS=DEFLATE"]
# GeoPackages stamp a time in gpkg_contents; a fixed one keeps the bytes reproducible.
_FIXED_DATE = "2000-01-01T00:00:00.000Z"


# -- grids and fields ----------------------------------------------------------


def _srs() -> osr.SpatialReference:
    """Return the district's spatial reference with x, y axis order."""
    ref = osr.SpatialReference()
    ref.SetFromUserInput(CRS_PROJ)
    ref.SetProjCS(CRS_NAME)  # a name of its own, so QGIS does not call it "unknown"
    ref.SetAxisMappingStrategy(osr.OAMS_TRADITIONAL_GIS_ORDER)
    return ref


def _coordinates() -> tuple[np.ndarray, np.ndarray]:
    """Return local east and north (m from the south-west corner) of each cell centre."""
    east = (np.arange(WIDTH) + 0.5) * CELL
    north = HEIGHT * CELL - (np.arange(HEIGHT) + 0.5) * CELL
    return np.meshgrid(east, north)


def _to_strike(east, north):
    """Return (along-strike t, across-strike n) in metres for local coordinates."""
    theta = math.radians(STRIKE_DEG)
    return (east * math.cos(theta) + north * math.sin(theta),
            -east * math.sin(theta) + north * math.cos(theta))


def _from_strike(t, n):
    """Return local (east, north) for along- and across-strike coordinates."""
    theta = math.radians(STRIKE_DEG)
    return t * math.cos(theta) - n * math.sin(theta), t * math.sin(theta) + n * math.cos(theta)


def _spectral_filter(values: np.ndarray, response, pad: int = 128) -> np.ndarray:
    """Filter a grid in the wavenumber domain; ``response(k)`` takes |k| in cycles per metre.

    The grid is padded by reflection first so the FFT's wrap-around does not
    pull one edge's values onto the other.
    """
    padded = np.pad(values, pad, mode="reflect")
    ky = np.fft.fftfreq(padded.shape[0], d=CELL)
    kx = np.fft.rfftfreq(padded.shape[1], d=CELL)
    k = np.hypot(ky[:, None], kx[None, :])
    out = np.fft.irfft2(np.fft.rfft2(padded) * response(k), s=padded.shape)
    return out[pad:-pad, pad:-pad]


def _smooth_noise(rng: np.random.Generator, length_m: float, shape=(HEIGHT, WIDTH)) -> np.ndarray:
    """Return a Gaussian-smoothed random field with zero mean and unit standard deviation."""
    white = rng.standard_normal(shape)
    field = _spectral_filter(white, lambda k: np.exp(-2.0 * (math.pi * length_m * k) ** 2))
    return (field - field.mean()) / field.std()


def _upward(values: np.ndarray, height_m: float) -> np.ndarray:
    """Upward-continue a potential-field-like grid by ``height_m`` (exp(−2π|k|h) filter)."""
    return _spectral_filter(values, lambda k: np.exp(-2.0 * math.pi * k * height_m))


# -- vector geometry -------------------------------------------------------------


def _map_polygon() -> ogr.Geometry:
    """Return the district's extent in local coordinates as a polygon."""
    ring = ogr.Geometry(ogr.wkbLinearRing)
    w, h = WIDTH * CELL, HEIGHT * CELL
    for x, y in ((0, 0), (w, 0), (w, h), (0, h), (0, 0)):
        ring.AddPoint_2D(float(x), float(y))
    poly = ogr.Geometry(ogr.wkbPolygon)
    poly.AddGeometry(ring)
    return poly


def _line(east: np.ndarray, north: np.ndarray) -> ogr.Geometry:
    """Return an OGR line string through local coordinates."""
    line = ogr.Geometry(ogr.wkbLineString)
    for x, y in zip(east.tolist(), north.tolist()):
        line.AddPoint_2D(x, y)
    return line


def _parts(geometry: ogr.Geometry | None, min_length: float = 200.0) -> list[ogr.Geometry]:
    """Split a clipped geometry into its line strings, dropping slivers shorter than ``min_length``."""
    if geometry is None or geometry.IsEmpty():
        return []
    name = geometry.GetGeometryName()
    if name == "LINESTRING":
        return [geometry.Clone()] if geometry.Length() >= min_length else []
    out = []
    for i in range(geometry.GetGeometryCount()):
        out.extend(_parts(geometry.GetGeometryRef(i), min_length))
    return out


def _clip(lines: list[ogr.Geometry], keep_out: ogr.Geometry | None) -> list[ogr.Geometry]:
    """Clip lines to the map and cut out ``keep_out`` (the late granites)."""
    extent = _map_polygon()
    out = []
    for line in lines:
        clipped = line.Intersection(extent)
        if keep_out is not None and clipped is not None and not clipped.IsEmpty():
            clipped = clipped.Difference(keep_out)
        out.extend(_parts(clipped))
    return out


def _blob(rng: np.random.Generator, centre, axes, rotation_deg: float, vertices: int = 160
          ) -> ogr.Geometry:
    """Return an irregular ellipse-like polygon around ``centre`` (local metres)."""
    phi = np.linspace(0.0, 2.0 * math.pi, vertices, endpoint=False)
    radius = np.ones_like(phi)
    for order, amplitude in ((2, 0.06), (3, 0.07), (5, 0.04), (8, 0.02)):
        radius += amplitude * np.cos(order * phi + rng.uniform(0, 2 * math.pi))
    x, y = axes[0] * radius * np.cos(phi), axes[1] * radius * np.sin(phi)
    rot = math.radians(rotation_deg)
    east = centre[0] + x * math.cos(rot) - y * math.sin(rot)
    north = centre[1] + x * math.sin(rot) + y * math.cos(rot)
    ring = ogr.Geometry(ogr.wkbLinearRing)
    for xe, yn in zip(east.tolist() + east[:1].tolist(), north.tolist() + north[:1].tolist()):
        ring.AddPoint_2D(xe, yn)
    poly = ogr.Geometry(ogr.wkbPolygon)
    poly.AddGeometry(ring)
    return poly


def _shear_zone(rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Return the first-order shear zone's trace as along- and across-strike coordinates."""
    t = np.linspace(-6000.0, 40000.0, 461)
    n = (1500.0 + 0.035 * t + 450.0 * np.sin(2 * math.pi * t / 17000.0 + rng.uniform(0, 6.28))
         + 150.0 * np.sin(2 * math.pi * t / 5300.0 + rng.uniform(0, 6.28)))
    return t, n


def _splays(rng: np.random.Generator, shear_t, shear_n) -> list[tuple[np.ndarray, np.ndarray]]:
    """Return second-order splays leaving the shear zone at a low angle and bending back.

    Each splay starts on the shear zone, leaves it at 18-32 degrees on either
    side and turns towards the shear zone's strike along its length.
    """
    starts = np.linspace(500.0, 29000.0, 11) + rng.uniform(-600.0, 600.0, 11)
    sides = np.array([1, -1, 1, -1, 1, 1, -1, 1, -1, 1, -1]) * np.where(rng.random(11) < 0.15, -1, 1)
    out = []
    for t0, side in zip(starts, sides):
        length = rng.uniform(5000.0, 9500.0)
        s = np.linspace(0.0, length, 120)
        angle = math.radians(rng.uniform(18.0, 32.0)) * side * (1.0 - 0.55 * s / length)
        step = np.diff(s, prepend=0.0)
        n0 = float(np.interp(t0, shear_t, shear_n))
        t = t0 + np.cumsum(step * np.cos(angle))
        n = n0 + np.cumsum(step * np.sin(angle)) + 60.0 * np.sin(s / 900.0 + rng.uniform(0, 6.28))
        n[0] = n0
        out.append((t, n))
    return out


def _cross_faults(rng: np.random.Generator, count: int = 16) -> list[tuple[np.ndarray, np.ndarray]]:
    """Return short third-order faults at a high angle to the belt, in local coordinates."""
    out = []
    for _ in range(count):
        east0, north0 = rng.uniform(1000, WIDTH * CELL - 1000), rng.uniform(1000, HEIGHT * CELL - 1000)
        azimuth = math.radians(STRIKE_DEG + 90.0 + rng.uniform(-25.0, 25.0))
        length = rng.uniform(900.0, 2800.0)
        s = np.linspace(-length / 2, length / 2, 9)
        kink = rng.uniform(-0.08, 0.08) * np.abs(s)
        east = east0 + s * math.cos(azimuth) - kink * math.sin(azimuth)
        north = north0 + s * math.sin(azimuth) + kink * math.cos(azimuth)
        out.append((east, north))
    return out


def _joints(rng: np.random.Generator, count: int = 45) -> list[tuple[np.ndarray, np.ndarray]]:
    """Return late joints: straight NNW lines at places drawn uniformly over the map."""
    east0 = rng.uniform(0, WIDTH * CELL, count)
    north0 = rng.uniform(0, HEIGHT * CELL, count)
    azimuth = np.radians(rng.uniform(100.0, 115.0, count))
    length = rng.uniform(600.0, 2200.0, count)
    out = []
    for x, y, a, ell in zip(east0, north0, azimuth, length):
        s = np.array([-ell / 2, ell / 2])
        out.append((x + s * math.cos(a), y + s * math.sin(a)))
    return out


# -- stratigraphy ------------------------------------------------------------------

# Stratigraphic height h (m) = G·n' + A·sin(K·n') + along-strike plunge terms,
# with n' = n + W(t) the across-strike coordinate bent by a hinge sinuosity W.
_G, _A, _WAVE = 0.18, 950.0, 6400.0
_K = 2.0 * math.pi / _WAVE


def _sinuosity(t: np.ndarray, phase: float) -> np.ndarray:
    """Return W(t), the across-strike wander of the fold axial traces (m)."""
    return 380.0 * np.sin(2 * math.pi * t / 14000.0 + phase)


def _height(t, n, phase, plunge_phase) -> np.ndarray:
    """Return stratigraphic height (m above the base of the mafic pile)."""
    n_bent = n + _sinuosity(t, phase)
    return (_G * n_bent + _A * np.sin(_K * n_bent)
            + 0.02 * t + 420.0 * np.cos(2 * math.pi * t / 21000.0 + plunge_phase) + 850.0)


def _hinges(phase: float) -> list[tuple[np.ndarray, np.ndarray, str]]:
    """Return fold axial traces as (t, n, kind): where ∂h/∂n' = 0 across strike.

    ∂h/∂n' = G + A·K·cos(K·n') = 0 gives cos(K·n') = −G/(A·K); where h is a
    minimum across strike the oldest rocks sit in the core (antiform), where
    it is a maximum the youngest (synform).
    """
    base = math.acos(-_G / (_A * _K))
    t = np.linspace(-8000.0, 40000.0, 481)
    out = []
    for m in range(-4, 6):
        for root in (base, -base):
            n_bent = (root + 2 * math.pi * m) / _K
            kind = "synform" if math.sin(root) > 0 else "antiform"
            out.append((t, n_bent - _sinuosity(t, phase), kind))
    return out


def _classify(h: np.ndarray) -> np.ndarray:
    """Return litho codes for stratigraphic heights (the belt's column, base to top)."""
    litho = np.full(h.shape, 3, dtype=np.uint8)
    litho[h < 0.0] = 6
    litho[(h >= 2000.0) & (h < 2900.0)] = 2
    litho[h >= 2900.0] = 1
    litho[((h >= 700.0) & (h < 790.0)) | ((h >= 1450.0) & (h < 1520.0))] = 4
    return litho


# -- rasterising -------------------------------------------------------------------


def _mem_raster() -> gdal.Dataset:
    """Return an in-memory Byte raster on the district grid (local coordinates)."""
    ds = gdal.GetDriverByName("MEM").Create("", WIDTH, HEIGHT, 1, gdal.GDT_Byte)
    ds.SetGeoTransform((0.0, CELL, 0.0, HEIGHT * CELL, 0.0, -CELL))
    ds.SetProjection(_srs().ExportToWkt())  # local coordinates; the same CRS on both sides
    return ds


def _burn(geometries: list[ogr.Geometry], all_touched: bool = True) -> np.ndarray:
    """Rasterise geometries (local coordinates) to a boolean grid."""
    ds = _mem_raster()
    # GDAL 3.11 folds the vector "Memory" driver into "MEM".
    driver = ogr.GetDriverByName("Memory") or ogr.GetDriverByName("MEM")
    source = driver.CreateDataSource("burn")
    layer = source.CreateLayer("burn", _srs(), ogr.wkbUnknown)
    for geometry in geometries:
        feature = ogr.Feature(layer.GetLayerDefn())
        feature.SetGeometry(geometry)
        layer.CreateFeature(feature)
    options = ["ALL_TOUCHED=TRUE"] if all_touched else []
    gdal.RasterizeLayer(ds, [1], layer, burn_values=[1], options=options)
    band = ds.GetRasterBand(1)
    return band.ReadAsArray() > 0


def _distance(mask: np.ndarray) -> np.ndarray:
    """Return the distance (m) from each cell centre to the nearest cell of ``mask``."""
    return ndimage.distance_transform_edt(~mask, sampling=CELL)


# -- writing -----------------------------------------------------------------------


def _write_raster(path: Path, array: np.ndarray, data_type: int, nodata: float, cell: float = CELL,
                  description: str = "", units: str = "") -> None:
    """Write a tiled, DEFLATE-compressed one-band GeoTIFF on the district grid."""
    predictor = "PREDICTOR=3" if data_type == gdal.GDT_Float32 else "PREDICTOR=2"
    options = [*_TIFF_OPTIONS, predictor] if data_type != gdal.GDT_Byte else list(_TIFF_OPTIONS)
    tmp = path.with_name(f".{path.stem}.partial{path.suffix}")
    ds = gdal.GetDriverByName("GTiff").Create(str(tmp), array.shape[1], array.shape[0], 1,
                                              data_type, options)
    ds.SetGeoTransform((XMIN, cell, 0.0, YMAX, 0.0, -cell))
    ds.SetProjection(_srs().ExportToWkt())
    band = ds.GetRasterBand(1)
    band.SetNoDataValue(nodata)
    if description:
        band.SetDescription(description)
    if units:
        band.SetUnitType(units)
    band.WriteArray(array)
    band = None
    ds = None
    os.replace(tmp, path)


def _write_vector(path: Path, layers: dict[str, tuple[int, list[tuple[ogr.Geometry, dict]], dict]]
                  ) -> None:
    """Write GeoPackage layers: name -> (geometry type, [(geometry, attributes)], field types)."""
    tmp = path.with_name(f".{path.stem}.partial{path.suffix}")
    if tmp.exists():
        tmp.unlink()
    previous = gdal.GetConfigOption("OGR_CURRENT_DATE")
    gdal.SetConfigOption("OGR_CURRENT_DATE", _FIXED_DATE)
    try:
        ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(tmp))
        for name, (geometry_type, features, fields) in layers.items():
            layer = ds.CreateLayer(name, _srs(), geometry_type, ["SPATIAL_INDEX=NO"])
            for field_name, field_type in fields.items():
                layer.CreateField(ogr.FieldDefn(field_name, field_type))
            layer.StartTransaction()
            for geometry, attributes in features:
                feature = ogr.Feature(layer.GetLayerDefn())
                moved = geometry.Clone()
                _translate(moved, XMIN, YMIN)
                feature.SetGeometry(moved)
                for key, value in attributes.items():
                    feature.SetField(key, value)
                layer.CreateFeature(feature)
            layer.CommitTransaction()
        ds = None
    finally:
        gdal.SetConfigOption("OGR_CURRENT_DATE", previous)
    os.replace(tmp, path)


def _translate(geometry: ogr.Geometry, dx: float, dy: float) -> None:
    """Move a geometry by (dx, dy) in place, part by part."""
    if geometry.GetGeometryCount() > 0:
        for i in range(geometry.GetGeometryCount()):
            _translate(geometry.GetGeometryRef(i), dx, dy)
        return
    for i in range(geometry.GetPointCount()):
        x, y = geometry.GetX(i), geometry.GetY(i)
        geometry.SetPoint_2D(i, x + dx, y + dy)


def _cells_digest(array: np.ndarray) -> str:
    """Return the SHA-256 of an array's cells (dtype and shape included)."""
    digest = hashlib.sha256(f"{array.dtype.str}{array.shape}".encode())
    digest.update(np.ascontiguousarray(array).tobytes())
    return digest.hexdigest()


# -- the district ------------------------------------------------------------------


def _place_occurrences(rng, candidates: np.ndarray, count: int, taken: list, east, north,
                       attempts: int = 50) -> list[tuple[int, int]]:
    """Pick ``count`` cells from a boolean mask, at least ``_MIN_SPACING_M`` apart.

    One candidate is drawn at random, every candidate closer than the spacing
    to it is struck off, and so on; cells already ``taken`` strike off theirs
    first. A draw that runs out of candidates is started again (up to
    ``attempts`` times). Returns (row, column) pairs and appends the picks'
    coordinates to ``taken``.
    """
    rows, cols = np.nonzero(candidates)
    xs, ys = east[rows, cols], north[rows, cols]
    free = np.ones(rows.size, dtype=bool)
    for px, py in taken:
        free &= np.hypot(xs - px, ys - py) >= _MIN_SPACING_M
    best: list[int] = []
    for _ in range(attempts):
        alive, picked = free.copy(), []
        while len(picked) < count and alive.any():
            left = np.flatnonzero(alive)
            index = int(left[rng.integers(left.size)])
            picked.append(index)
            alive &= np.hypot(xs - xs[index], ys - ys[index]) >= _MIN_SPACING_M
        if len(picked) == count:
            taken.extend((float(xs[i]), float(ys[i])) for i in picked)
            return [(int(rows[i]), int(cols[i])) for i in picked]
        best = max(best, picked, key=len)
    raise RuntimeError(f"only {len(best)} of {count} occurrences fit the planted controls "
                       f"({rows.size} candidate cells)")


def generate(folder: str | os.PathLike = DEFAULT_FOLDER, seed: int = DEFAULT_SEED) -> dict:
    """Write the Tarrowin demo layers and their manifest into ``folder``; return the manifest.

    Parameters
    ----------
    folder : path
        Created if missing. Existing layer files of the same names are replaced.
    seed : int
        Seed of every random stream (``numpy.random.SeedSequence``). The same
        seed gives the same cells and features.

    Returns
    -------
    dict
        The manifest also written as ``folder/manifest.json``.
    """
    gdal.UseExceptions()
    ogr.UseExceptions()
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    streams = dict(zip(("geology", "faults", "intrusions", "occurrences", "geophysics",
                        "geochemistry", "cover", "joints"),
                       (np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(8))))
    east, north = _coordinates()
    t, n = _to_strike(east, north)

    # Late granites and the lake (local coordinates).
    rng = streams["intrusions"]
    granite = _blob(rng, (5200.0 + rng.uniform(-400, 400), 16800.0 + rng.uniform(-400, 400)),
                    (3300.0, 2300.0), 20.0)
    stock = _blob(rng, (24800.0, 19600.0), (900.0, 750.0), -10.0, 80)
    lake = _blob(rng, (21800.0, 6200.0), (2100.0, 1200.0), 12.0)
    granites = granite.Union(stock)

    # Stratigraphy, folded; granites cut it.
    rng = streams["geology"]
    phase, plunge_phase = rng.uniform(0, 2 * math.pi, 2)
    h = _height(t, n, phase, plunge_phase) + 70.0 * _smooth_noise(rng, 1500.0)
    litho = _classify(h)
    in_granite = _burn([granites], all_touched=False)
    litho[in_granite] = 5

    # Faults and fold hinges, truncated by the granites.
    rng = streams["faults"]
    shear_t, shear_n = _shear_zone(rng)
    first = _clip([_line(*_from_strike(shear_t, shear_n))], granites)
    second = _clip([_line(*_from_strike(st, sn)) for st, sn in _splays(rng, shear_t, shear_n)],
                   granites)
    third = _clip([_line(e, nn) for e, nn in _cross_faults(rng)], granites)
    hinge_lines = []
    for ht, hn, kind in _hinges(phase):
        hinge_lines.extend((g, kind) for g in _clip([_line(*_from_strike(ht, hn))], granites))
    joints = _clip([_line(e, nn) for e, nn in _joints(streams["joints"])], None)

    d_first = _distance(_burn(first))
    d_second = _distance(_burn(second))
    d_corridor = np.minimum(d_first, d_second)
    d_hinge = _distance(_burn([g for g, _ in hinge_lines]))

    # Cover: thickening east into the basin, with a palaeochannel feeding it.
    rng = streams["cover"]
    channel_north = 15500.0 - 0.35 * east + 900.0 * np.sin(east / 2600.0 + rng.uniform(0, 6.28))
    cover = (np.maximum(0.0, east - 18500.0) * 0.03
             + 38.0 * np.exp(-(((north - channel_north) / 420.0) ** 2)) * (east < 21000.0)
             + 9.0 * _smooth_noise(rng, 900.0) - 4.0)
    cover = np.maximum(0.0, cover)
    in_lake = _burn([lake], all_touched=True)

    # Occurrences where the planted controls coincide, and a couple off the pattern.
    rng = streams["occurrences"]
    margin = ((east > 1000) & (east < WIDTH * CELL - 1000) & (north > 1000)
              & (north < HEIGHT * CELL - 1000))
    on = (margin & (d_second <= PLANTED["second_order_distance_m"] - _PLACE_MARGIN_M)
          & np.isin(litho, PLANTED["host_codes"])
          & (d_hinge <= PLANTED["hinge_distance_m"] - _PLACE_MARGIN_M)
          & (cover <= PLANTED["cover_max_m"] - 10.0) & ~in_lake)
    off = (margin & (d_second > 2500.0) & (litho != 5) & (cover <= 20.0) & ~in_lake)
    taken: list = []
    picks = _place_occurrences(rng, on, _ON_PATTERN, taken, east, north)
    picks += _place_occurrences(rng, off, _OFF_PATTERN, taken, east, north)
    order = rng.permutation(len(picks))
    occurrences = []
    for rank, index in enumerate(order):
        row, col = picks[index]
        x = float(east[row, col] + rng.uniform(-8, 8))
        y = float(north[row, col] + rng.uniform(-8, 8))
        point = ogr.Geometry(ogr.wkbPoint)
        point.AddPoint_2D(x, y)
        occurrences.append({"geometry": point, "name": _NAMES[rank], "row": int(row), "col": int(col),
                            "host": LITHO[int(litho[row, col])],
                            "status": _STATUS[int(rng.integers(len(_STATUS)))],
                            "on_pattern": bool(index < _ON_PATTERN)})

    # Geophysics.
    rng = streams["geophysics"]
    susceptibility = np.choose(litho.astype(np.intp) - 1,
                               [0.0004, 0.0010, 0.0045, 0.0800, 0.0020, 0.0300])
    destruction = 1.0 - 0.85 * np.exp(-((d_corridor / 220.0) ** 2))
    source = susceptibility * destruction * 25_000.0  # nT per SI of susceptibility, induced
    shallow, deep = _upward(source, 60.0), _upward(source, 460.0)
    weight = np.clip(cover / 400.0, 0.0, 1.0)
    magnetics = ((1 - weight) * shallow + weight * deep + 0.0015 * (east - 15000.0)
                 + 4.0 * _smooth_noise(rng, 2500.0) + 0.6 * rng.standard_normal(east.shape) - 120.0)

    density = np.choose(litho.astype(np.intp) - 1, [2.66, 2.71, 2.92, 3.25, 2.63, 3.02]) - 2.75
    keel_n = np.interp(t, shear_t, shear_n) - 1500.0
    gc = granite.Centroid()
    gravity = (28.0 * _upward(density, 700.0)
               + 9.0 * np.exp(-(((n - keel_n) / 5200.0) ** 2))
               - 7.0 * np.exp(-(((east - gc.GetX()) ** 2 + (north - gc.GetY()) ** 2) / (2 * 4200.0 ** 2)))
               - 0.00018 * (east - 15000.0) + 0.4 * _smooth_noise(rng, 4000.0)
               + 0.04 * rng.standard_normal(east.shape) - 6.0)

    base_ratio = np.choose(litho.astype(np.intp) - 1, [0.27, 0.34, 0.14, 0.11, 0.42, 0.07])
    ratio = (ndimage.gaussian_filter(base_ratio, 1.5)
             + 0.24 * np.exp(-((d_corridor / 260.0) ** 2))
             + 0.02 * _smooth_noise(rng, 600.0))
    seen = np.exp(-cover / 2.0)  # gamma rays come from the top few tens of centimetres
    ratio = seen * ratio + (1 - seen) * (0.21 + 0.015 * _smooth_noise(rng, 1200.0))
    ratio *= 1.0 + 0.04 * rng.standard_normal(east.shape)
    coarse_shape = (HEIGHT // COARSE, COARSE, WIDTH // COARSE, COARSE)
    k_th = ratio.reshape(coarse_shape).mean(axis=(1, 3))
    k_th[in_lake.reshape(coarse_shape).any(axis=(1, 3))] = NODATA

    # Soil arsenic: background by rock type, halos around the occurrences and weak
    # leakage along the splays, muted by transported cover.
    rng = streams["geochemistry"]
    log_as = (math.log10(4.0) + np.choose(litho.astype(np.intp) - 1, [0.2, 0.0, 0.1, 0.15, -0.2, 0.05])
              + 0.12 * _smooth_noise(rng, 700.0))
    anomaly = 0.3 * np.exp(-((d_second / 160.0) ** 2)) * np.isin(litho, (3, 4))
    for occ in occurrences:
        x, y = occ["geometry"].GetX(), occ["geometry"].GetY()
        anomaly = anomaly + rng.uniform(0.8, 1.3) * np.exp(-((east - x) ** 2 + (north - y) ** 2)
                                                           / (2 * 330.0 ** 2))
    log_as += anomaly * np.exp(-cover / 15.0) + 0.06 * rng.standard_normal(east.shape)
    arsenic = 10.0 ** log_as
    gaps = (((east > 9000) & (east < 11500) & (north > 1500) & (north < 5200))
            | ((east > 13500) & (east < 15000) & (north > 19500)))
    arsenic[in_lake | (cover > 120.0) | gaps] = NODATA

    # Write everything.
    _write_raster(folder / "litho.tif", litho, gdal.GDT_Byte, LITHO_NODATA,
                  description="lithology class code")
    _write_raster(folder / "magnetics.tif", magnetics.astype(np.float32), gdal.GDT_Float32, NODATA,
                  description="total magnetic intensity, reduced to pole", units="nT")
    _write_raster(folder / "gravity.tif", gravity.astype(np.float32), gdal.GDT_Float32, NODATA,
                  description="Bouguer anomaly", units="mGal")
    _write_raster(folder / "radiometric_k_th.tif", k_th.astype(np.float32), gdal.GDT_Float32, NODATA,
                  cell=CELL * COARSE, description="potassium / equivalent thorium ratio",
                  units="% per ppm")
    _write_raster(folder / "cover_depth.tif", cover.astype(np.float32), gdal.GDT_Float32, NODATA,
                  description="depth of transported cover", units="m")
    _write_raster(folder / "arsenic.tif", arsenic.astype(np.float32), gdal.GDT_Float32, NODATA,
                  description="arsenic in soil", units="ppm")

    names = {1: "Greywhistle Shear Zone"}
    faults = [(g, {"order": 1, "name": names[1]}) for g in first]
    faults += [(g, {"order": 2, "name": f"Greywhistle splay {i + 1}"}) for i, g in enumerate(second)]
    faults += [(g, {"order": 3, "name": ""}) for g in third]
    fault_fields = {"order": ogr.OFTInteger, "name": ogr.OFTString}
    _write_vector(folder / "faults.gpkg", {
        "faults": (ogr.wkbLineString, faults, fault_fields),
        "first_order": (ogr.wkbLineString, [f for f in faults if f[1]["order"] == 1], fault_fields),
        "second_order": (ogr.wkbLineString, [f for f in faults if f[1]["order"] == 2], fault_fields)})
    _write_vector(folder / "fold_hinges.gpkg", {"fold_hinges": (
        ogr.wkbLineString, [(g, {"kind": kind}) for g, kind in hinge_lines], {"kind": ogr.OFTString})})
    _write_vector(folder / "intrusions.gpkg", {"intrusions": (
        ogr.wkbPolygon, [(granite, {"name": "Mothwing Granite", "age": "late"}),
                         (stock, {"name": "Cindle Stock", "age": "late"})],
        {"name": ogr.OFTString, "age": ogr.OFTString})})
    _write_vector(folder / "late_joints.gpkg", {"late_joints": (
        ogr.wkbLineString, [(g, {"set": "NNW"}) for g in joints], {"set": ogr.OFTString})})
    _write_vector(folder / "occurrences.gpkg", {"occurrences": (
        ogr.wkbPoint, [(o["geometry"], {"id": i + 1, "name": o["name"], "host": o["host"],
                                        "status": o["status"]}) for i, o in enumerate(occurrences)],
        {"id": ogr.OFTInteger, "name": ogr.OFTString, "host": ogr.OFTString,
         "status": ogr.OFTString})})

    cells = {"litho.tif": litho, "magnetics.tif": magnetics.astype(np.float32),
             "gravity.tif": gravity.astype(np.float32),
             "radiometric_k_th.tif": k_th.astype(np.float32),
             "cover_depth.tif": cover.astype(np.float32), "arsenic.tif": arsenic.astype(np.float32)}
    manifest = _manifest(seed, cells, occurrences, len(first), len(second), len(third),
                         len(hinge_lines), len(joints))
    tmp = folder / ".manifest.json.partial"
    tmp.write_text(json.dumps(manifest, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
    os.replace(tmp, folder / "manifest.json")
    return manifest


def _manifest(seed, cells, occurrences, n_first, n_second, n_third, n_hinges, n_joints) -> dict:
    """Return the manifest: seed, grid, each layer with units and role, the planted model."""
    def raster(name, units, role, component, description, cell=CELL, nodata=NODATA, dtype="Float32"):
        return {"file": name, "kind": "raster", "data_type": dtype, "units": units,
                "nodata": nodata, "cell_size": cell, "shape": list(cells[name].shape),
                "component": component, "role": role, "description": description,
                "cells_sha256": _cells_digest(cells[name])}

    def vector(name, layers, geometry, role, component, description, fields):
        return {"file": name, "kind": "vector", "layers": layers, "geometry": geometry,
                "fields": fields, "component": component, "role": role, "description": description}

    on = [o["name"] for o in occurrences if o["on_pattern"]]
    off = [o["name"] for o in occurrences if not o["on_pattern"]]
    return {
        "format": "favour-demo-manifest", "version": 1, "district": DISTRICT,
        "note": "Invented district; synthetic layers from resources/demo/generate.py. "
                "No real place, company or deposit.",
        "generator": "resources/demo/generate.py", "generator_version": GENERATOR_VERSION,
        "generator_sha256": generator_digest(), "seed": seed,
        "crs_proj": CRS_PROJ, "crs_wkt": _srs().ExportToWkt(),
        "grid": {"xmin": XMIN, "ymin": YMIN, "xmax": XMIN + WIDTH * CELL, "ymax": YMAX,
                 "cell_size": CELL, "width": WIDTH, "height": HEIGHT},
        "litho_codes": {str(k): v for k, v in LITHO.items()},
        "layers": [
            raster("litho.tif", "class code", "planted control (host rocks: codes 3 and 4)", "trap",
                   "interpreted bedrock lithology; " + ", ".join(f"{k} {v}" for k, v in LITHO.items()),
                   nodata=LITHO_NODATA, dtype="Byte"),
            raster("magnetics.tif", "nT", "responds to alteration: magnetite destroyed within about 300 m "
                   "of first- and second-order faults (Gaussian taper, 220 m)", "pathway",
                   "magnetic field from rock susceptibility, smoother under thick cover"),
            raster("gravity.tif", "mGal", "background geology: dense mafic-ultramafic keel", "source",
                   "Bouguer-like anomaly; a deep dense keel along the shear zone, a low over the granite"),
            raster("radiometric_k_th.tif", "% per ppm", "responds to alteration: potassium added "
                   "along first- and second-order faults; masked by cover", "pathway",
                   "K/eTh ratio on a 50 m grid (exercises alignment); nodata over Sallow Lake",
                   cell=CELL * COARSE),
            raster("cover_depth.tif", "m", f"planted control (occurrences under ≤ {PLANTED['cover_max_m']:g}"
                   " m of cover)", "preservation", "depth of transported cover; thickens east into "
                   "the Sallow Basin, with a palaeochannel"),
            raster("arsenic.tif", "ppm", "responds to mineralisation: halo of ~330 m around each "
                   "occurrence and weak leakage along splays, muted by cover", "trap",
                   "arsenic in soil; nodata over the lake, under > 120 m of cover and in two survey gaps"),
            vector("faults.gpkg", {"faults": n_first + n_second + n_third, "first_order": n_first,
                                   "second_order": n_second}, "LineString",
                   "planted control (second-order faults within "
                   f"{PLANTED['second_order_distance_m']:g} m)", "pathway",
                   "faults with 'order' 1 (Greywhistle Shear Zone), 2 (splays), 3 (cross faults); "
                   "layers first_order and second_order repeat the features of one order",
                   {"order": "integer 1/2/3", "name": "string"}),
            vector("fold_hinges.gpkg", {"fold_hinges": n_hinges}, "LineString",
                   f"planted control (fold hinges within {PLANTED['hinge_distance_m']:g} m)", "trap",
                   "axial traces of upright plunging folds", {"kind": "antiform or synform"}),
            vector("intrusions.gpkg", {"intrusions": 2}, "Polygon",
                   "background geology: late granites, no occurrence inside", "preservation",
                   "Mothwing Granite and Cindle Stock; they truncate the faults",
                   {"name": "string", "age": "string"}),
            vector("late_joints.gpkg", {"late_joints": n_joints}, "LineString",
                   "planted noise: placed uniformly at random, independent of the occurrences",
                   None, "late NNW joints; not used by the demo tree", {"set": "string"}),
            vector("occurrences.gpkg", {"occurrences": len(occurrences)}, "Point",
                   "known occurrences", None, "invented gold occurrences",
                   {"id": "integer", "name": "string", "host": "string", "status": "string"}),
        ],
        "planted": {
            "controls": [
                {"name": "second-order faults", "layer": "faults.gpkg:second_order",
                 "rule": "distance <= 500 m", "distance_m": PLANTED["second_order_distance_m"]},
                {"name": "host rocks", "layer": "litho.tif", "rule": "class code in [3, 4]",
                 "codes": PLANTED["host_codes"]},
                {"name": "fold hinges", "layer": "fold_hinges.gpkg:fold_hinges",
                 "rule": "distance <= 700 m", "distance_m": PLANTED["hinge_distance_m"]},
                {"name": "thin cover", "layer": "cover_depth.tif", "rule": "cover <= 40 m",
                 "threshold_m": PLANTED["cover_max_m"]},
            ],
            "noise": [{"name": "late joints", "layer": "late_joints.gpkg:late_joints",
                       "rule": "none: drawn from a random stream of their own, "
                               "never related to the occurrences"}],
            "occurrences": {
                "count": len(occurrences), "on_pattern": on, "off_pattern": off,
                "placement": f"on-pattern: cells satisfying every control with {_PLACE_MARGIN_M:g} m "
                             "to spare on the distances, at least "
                             f"{_MIN_SPACING_M:g} m apart; off-pattern: more than 2500 m from "
                             "second-order faults, outside granite, under <= 20 m of cover"},
        },
    }


def generator_digest() -> str:
    """Return the SHA-256 of this script's text, so layers made by older code are remade."""
    return hashlib.sha256(Path(__file__).read_bytes()).hexdigest()


def is_up_to_date(folder: str | os.PathLike, seed: int = DEFAULT_SEED) -> bool:
    """Return True when ``folder`` holds every layer this generator makes from ``seed``."""
    folder = Path(folder)
    try:
        manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return (manifest.get("seed") == seed and manifest.get("generator_version") == GENERATOR_VERSION
            and manifest.get("generator_sha256") == generator_digest()
            and all((folder / layer["file"]).is_file() for layer in manifest.get("layers", ())))


def main(argv: list[str] | None = None) -> int:
    """Generate the demo layers unless they are already there for the same seed."""
    parser = argparse.ArgumentParser(description=f"Generate the {DISTRICT} demo district's layers.")
    parser.add_argument("--folder", default=str(DEFAULT_FOLDER), help="where to write the layers")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="random seed")
    parser.add_argument("--force", action="store_true", help="write the layers even if up to date")
    args = parser.parse_args(argv)
    folder = Path(args.folder)
    if not args.force and is_up_to_date(folder, args.seed):
        print(f"demo layers in {folder} are up to date (seed {args.seed})")
        return 0
    manifest = generate(folder, args.seed)
    print(f"wrote {len(manifest['layers'])} layers of the {DISTRICT} district to {folder} "
          f"(seed {args.seed})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
