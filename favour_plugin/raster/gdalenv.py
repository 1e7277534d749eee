"""GDAL settings held for the length of a job: exceptions on, a small explicit block cache.

GDAL's default block cache is 5% of RAM; while streaming it doubled peak
memory and slowed streamed passes, so jobs run with ``STREAM_CACHE_BYTES``.
The previous settings come back when the outermost job ends, so a QGIS
session around us is left as it was.
"""

from __future__ import annotations

import threading
from contextlib import contextmanager

from osgeo import gdal, ogr, osr

STREAM_CACHE_BYTES = 64 * 1024 * 1024

_lock = threading.Lock()
_depth = 0
_saved: dict = {}


@contextmanager
def gdal_job(cache_bytes: int = STREAM_CACHE_BYTES):
    """Run the body with GDAL exceptions enabled and the block cache at ``cache_bytes``."""
    global _depth
    with _lock:
        if _depth == 0:
            _saved["exceptions"] = (gdal.GetUseExceptions(), ogr.GetUseExceptions(),
                                    osr.GetUseExceptions())
            _saved["cache"] = gdal.GetCacheMax()
            gdal.UseExceptions()
            ogr.UseExceptions()
            osr.UseExceptions()
            gdal.SetCacheMax(cache_bytes)
        _depth += 1
    try:
        yield
    finally:
        with _lock:
            _depth -= 1
            if _depth == 0:
                gdal.SetCacheMax(_saved["cache"])
                # GDAL keeps one stack of error handlers: undo in reverse order.
                for module, was_on in reversed(list(zip((gdal, ogr, osr), _saved["exceptions"]))):
                    if not was_on:
                        module.DontUseExceptions()
