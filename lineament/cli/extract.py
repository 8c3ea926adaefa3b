"""``lineament extract``: find lineaments in a raster and write them as lines."""

from __future__ import annotations

import re
import time

import click
from pyproj import CRS
from pyproj.exceptions import CRSError

from ..errors import OutputError, SettingsError
from ..pipeline import extract_raster
from ..raster_io import read_raster
from ..settings import ExtractionSettings, parse_scales
from ..vector_io import check_output, write_lines
from .common import CAUTION, handle_errors, load_config


_DEFAULTS = ExtractionSettings()


#: ExtractionSettings field -> command-line option, so messages name what the user typed.
_OPTION_NAMES = {
    "min_length_m": "--min-length", "simplify_tolerance_m": "--simplify", "z_factor": "--z-factor",
    "high_threshold": "--high-threshold", "low_threshold": "--low-threshold",
    "high_noise_multiple": "--high-noise-multiple", "low_noise_multiple": "--low-noise-multiple",
    "assume_crs": "--assume-crs",
}
_OPTION_RE = re.compile(r"\b(" + "|".join(map(re.escape, _OPTION_NAMES)) + r")\b")


def _float_or_none(value):
    return None if value is None else float(value)


def _with_option_names(message: str) -> str:
    """Replace settings field names (``z_factor``) by the options that set them (``--z-factor``)."""
    return _OPTION_RE.sub(lambda m: _OPTION_NAMES[m.group(1)], message)


@click.command("extract")
# INPUT and --output are plain paths: their problems are reported by read_raster and
# check_output with the documented exit codes (3 input, 4 output), not as usage errors.
@click.argument("input_path", metavar="INPUT", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Output layer; the extension chooses the format: .gpkg (recommended), .fgb, .shp, .geojson.")
@click.option("--scales", default=",".join(map(str, _DEFAULTS.scales)), show_default=True,
              help="Gaussian sigmas, comma-separated, in metres (30,60,120) or pixels with px (2px,4px). "
                   "A sigma of about half the width of the features sought is a good start.")
@click.option("--operator", type=click.Choice(["log", "dog"]), default="log", show_default=True,
              help="Laplacian of Gaussian, or difference of Gaussians (ratio 1.6).")
@click.option("--band", type=int, default=None,
              help="Use this band (1-based). Default: the only band, or luminance of an RGB image.")
@click.option("--min-length", "min_length", type=float, default=None,
              help=f"Drop lines shorter than this, in metres. Default: {_DEFAULTS.min_length_sigmas:g} "
                   "times the sigma of each scale.")
@click.option("--simplify", "simplify", type=float, default=None,
              help="Douglas-Peucker tolerance in metres. Default: half a pixel.")
@click.option("--high-threshold", type=float, default=None,
              help="Strength that seeds a line, in raster units (metres of step for a DEM). "
                   "Default: --high-noise-multiple times the noise level at each scale.")
@click.option("--low-threshold", type=float, default=None,
              help="Strength a line needs to continue. Default: --low-noise-multiple times the noise level.")
@click.option("--high-noise-multiple", type=float, default=_DEFAULTS.high_noise_multiple, show_default=True,
              help="Seed threshold as a multiple of the robust noise level of each scale.")
@click.option("--low-noise-multiple", type=float, default=_DEFAULTS.low_noise_multiple, show_default=True,
              help="Continuation threshold as a multiple of the noise level.")
@click.option("--z-factor", type=float, default=1.0, show_default=True,
              help="Multiply raster values by this first (e.g. 0.3048 for elevations in feet).")
@click.option("--allow-rotation", is_flag=True, help="Accept a rotated geotransform (filtering runs on the rotated grid).")
@click.option("--assume-crs", default=None, metavar="CRS",
              help="CRS for a raster that has none, e.g. EPSG:32633.")
@click.option("--pixel-coordinates", is_flag=True,
              help="Accept a raster without georeferencing; lines are written in pixel units without a CRS.")
@click.option("--overwrite", is_flag=True, help="Replace an existing output.")
@click.option("--config", type=click.Path(), callback=load_config, is_eager=True,
              expose_value=False, help="Read options from a TOML file (command-line options win).")
@click.option("-q", "--quiet", is_flag=True, help="Print only errors.")
@click.option("--debug", is_flag=True, help="Show the full traceback on errors.")
@handle_errors
def extract(input_path, output, scales, operator, band, min_length, simplify, high_threshold,
            low_threshold, high_noise_multiple, low_noise_multiple, z_factor, allow_rotation,
            assume_crs, pixel_coordinates, overwrite, quiet, debug):
    """Find lineaments in a GeoTIFF DEM or image and write them as lines.

    \b
    Example:
      lineament extract dem.tif -o lines.gpkg --scales 30,60,120 --min-length 500

    Each line carries scale_m, scale_px, operator, kind, strength,
    strength_max, length_m, azimuth_deg, azimuth_grid_deg and source.
    """
    t0 = time.perf_counter()
    try:
        settings = ExtractionSettings(
            scales=parse_scales(str(scales)), operator=operator, band=band,
            min_length_m=_float_or_none(min_length), simplify_tolerance_m=_float_or_none(simplify),
            high_threshold=_float_or_none(high_threshold), low_threshold=_float_or_none(low_threshold),
            high_noise_multiple=float(high_noise_multiple), low_noise_multiple=float(low_noise_multiple),
            z_factor=float(z_factor), allow_rotation=bool(allow_rotation), assume_crs=assume_crs,
            pixel_coordinates=bool(pixel_coordinates))
    except (TypeError, ValueError) as exc:
        raise SettingsError(_with_option_names(str(exc))) from None
    if assume_crs is not None:
        try:
            CRS.from_user_input(assume_crs)
        except CRSError as exc:
            first = (str(exc).splitlines() or ["not recognised"])[0]
            raise SettingsError(f"--assume-crs {assume_crs!r} is not a CRS ({first})") from None
    driver = check_output(output, overwrite=overwrite)
    data = read_raster(input_path, settings)
    if driver == "GeoJSON" and data.georef.crs is None:
        # refuse before the (possibly long) extraction rather than after it
        raise OutputError(f"{output}: GeoJSON is always WGS84, but {data.source} is processed without "
                          "a CRS; write a GeoPackage (.gpkg) instead")
    result = extract_raster(data, settings)
    write_lines(result, output, overwrite=overwrite)
    if not quiet:
        _summary(result, output, time.perf_counter() - t0)


def _summary(result, output, seconds: float) -> None:
    echo = lambda s="": click.echo(s, err=True)  # noqa: E731
    echo(f"{result.source}: {len(result.lines)} lines, {result.total_length_m / 1000:.2f} km, "
         f"written to {output} in {seconds:.1f} s")
    echo(f"  {'sigma m':>9} {'sigma px':>8} {'noise':>9} {'high':>9} {'low':>9} {'lines':>6} {'km':>8}")
    for s in result.scales:
        echo(f"  {s.scale_m:9.2f} {s.scale_px:8.2f} {s.noise:9.3g} {s.high_threshold:9.3g} "
             f"{s.low_threshold:9.3g} {s.lines:6d} {s.length_m / 1000:8.2f}")
    echo(f"  strength and thresholds in raster units (metres of equivalent step for a DEM)")
    echo(CAUTION)
