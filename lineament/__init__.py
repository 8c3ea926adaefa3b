"""lineament: find linear features in DEMs and aerial rasters as georeferenced lines.

The Python API mirrors the ``lineament`` command::

    from lineament import ExtractionSettings, extract_file, write_lines
    result = extract_file("dem.tif", ExtractionSettings(scales="30,60,120"))
    for line in result.lines:
        print(line.azimuth_deg, line.length_m, line.geometry.wkt)
    write_lines(result, "lines.gpkg")
"""

from ._version import __version__
from .errors import InputError, LineamentError, OutputError, RasterReadError, SettingsError
from .georef import GeoRef
from .pipeline import ExtractionResult, ScaleReport, extract_array, extract_file, extract_raster
from .raster_io import RasterData, read_raster
from .settings import ExtractionSettings, Scale, parse_scales
from .vectorize import Lineament
from .vector_io import write_lines

__all__ = [
    "__version__", "ExtractionResult", "ExtractionSettings", "GeoRef", "InputError", "Lineament",
    "LineamentError", "OutputError", "RasterData", "RasterReadError", "Scale", "ScaleReport",
    "SettingsError", "extract_array", "extract_file", "extract_raster", "parse_scales", "read_raster",
    "write_lines",
]
