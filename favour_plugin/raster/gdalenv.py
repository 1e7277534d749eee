"""GDAL settings held for the length of a job: exceptions on, a small explicit block cache.

GDAL's default block cache is 5% of RAM; while streaming it doubled peak
memory and slowed streamed passes, so jobs run with ``STREAM_CACHE_BYTES``
(enough for tiled inputs, whose tiles are each read once) and
:func:`set_stream_cache` raises it, within ``MAX_STREAM_CACHE_BYTES``, for
inputs stored in strips.
The previous settings come back when the outermost job ends, so a QGIS
session around us is left as it was.
"""

from __future__ import annotations

import threading
from contextlib import contextmanager

from osgeo import gdal, ogr, osr

STREAM_CACHE_BYTES = 16 * 1024 * 1024
MAX_STREAM_CACHE_BYTES = 512 * 1024 * 1024

_lock = threading.Lock()
_depth = 0
_saved: dict = {}


def set_stream_cache(extra_bytes: int) -> int:
    """Set the block cache to ``STREAM_CACHE_BYTES`` plus ``extra_bytes`` (capped); return it.

    Call inside :func:`gdal_job`, which restores the caller's cache at the end.
    """
    size = int(min(MAX_STREAM_CACHE_BYTES, STREAM_CACHE_BYTES + max(0, extra_bytes)))
    gdal.SetCacheMax(size)
    return size


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
