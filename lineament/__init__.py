"""lineament: find linear features in DEMs and aerial rasters as georeferenced lines.

The Python API mirrors the ``lineament`` command::

    from lineament import ExtractionSettings, extract_file, write_lines
    result = extract_file("dem.tif", ExtractionSettings(scales="30,60,120"))
    for line in result.lines:
        print(line.azimuth_deg, line.length_m, line.geometry.wkt)
    write_lines(result, "lines.gpkg")

Names are imported on first use (PEP 562), so ``import lineament`` is quick
and the command line can take over Ctrl-C before the heavy libraries load.
"""

from __future__ import annotations

import importlib

from ._version import __version__
from .errors import InputError, LineamentError, OutputError, RasterReadError, SettingsError

_LAZY = {
    "GeoRef": "georef",
    "ExtractionResult": "pipeline", "ScaleReport": "pipeline", "extract_array": "pipeline",
    "extract_file": "pipeline", "extract_raster": "pipeline",
    "RasterData": "raster_io", "read_raster": "raster_io",
    "ExtractionSettings": "settings", "Scale": "settings", "parse_scales": "settings",
    "Lineament": "vectorize",
    "write_lines": "vector_io",
    "extract_survey": "survey",
}

__all__ = ["__version__", "InputError", "LineamentError", "OutputError", "RasterReadError", "SettingsError",
           *_LAZY]


def __getattr__(name: str):
    if name in _LAZY:
        value = getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'lineament' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
