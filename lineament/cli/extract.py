"""``lineament extract``: find lineaments in a raster and write them as lines."""

from __future__ import annotations

import re
import shutil
import time

import click
from pyproj import CRS
from pyproj.exceptions import CRSError

from ..detectors import WHOLE_RASTER_PIXELS
from ..errors import InputError, OutputError, SettingsError
from ..pipeline import default_workers
from ..raster_io import open_raster
from ..resume import resume_folder
from ..settings import FEATURES, OPERATORS, ExtractionSettings, parse_scales
from ..survey import expand_inputs, extract_survey
from ..tiling import DEFAULT_TILE_SIZE
from ..vector_io import check_output, write_lines
from .common import CAUTION, Progress, handle_errors, run_options


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
@click.argument("inputs", metavar="INPUT...", nargs=-1, required=True)
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Output layer; the extension chooses the format: .gpkg (recommended), .fgb, .shp, .geojson.")
@click.option("--scales", default=",".join(map(str, _DEFAULTS.scales)), show_default=True,
              help="Gaussian sigmas, comma-separated, in metres (30,60,120) or pixels with px (2px,4px). "
                   "A sigma of about half the width of the features sought is a good start.")
@click.option("--operator", type=click.Choice(list(OPERATORS)), default=_DEFAULTS.operator, show_default=True,
              help="Edge operator: Laplacian of Gaussian, difference of Gaussians (ratio 1.6)"
                   + (", or Gaussian gradient with non-maximum suppression." if "gradient" in OPERATORS else "."))
@click.option("--features", default=None, metavar="LIST",
              help="Families of lines, comma-separated: " + ",".join(FEATURES)
                   + ". Default: all on a DEM, edges on an image.")
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
@click.option("--select-scales", is_flag=True,
              help="Also find each line's own scale (attribute best_scale_m): where its scale-normalised "
                   "strength peaks, between half the smallest and twice the largest scale. Slower.")
@click.option("--full-resolution", is_flag=True,
              help="Filter every scale on the full-resolution grid instead of a decimated one (edges from "
                   "4 pixels, valleys and ridges from 6). Slower; the lines move by a small fraction of a pixel.")
@click.option("--output-crs", default=None, metavar="CRS",
              help="Write lines in this CRS (e.g. EPSG:4326). Default: the raster's CRS (GeoJSON: always WGS84).")
@click.option("--tile-size", type=int, default=None,
              help=f"Tile size in pixels; memory grows with it, results do not change. Default: "
                   f"{DEFAULT_TILE_SIZE}, or the whole raster as one window when only LoG or DoG edges "
                   f"are found on a raster of at most {WHOLE_RASTER_PIXELS:,} pixels.")
@click.option("--workers", type=int, default=None,
              help="Local processes running tiles in parallel. Default: one per 3 cores (each process "
                   "already uses several cores).")
@click.option("--cluster", default=None, metavar="ADDRESS",
              help="Send tiles to a running Dask scheduler (tcp://host:8786) instead of local processes; "
                   "its workers must be able to read the inputs.")
@click.option("--resume", is_flag=True,
              help="Finish an interrupted run of the same command without redoing finished tiles.")
@run_options()
@handle_errors
def extract(inputs, output, scales, operator, features, band, min_length, simplify, high_threshold,
            low_threshold, high_noise_multiple, low_noise_multiple, z_factor, allow_rotation,
            assume_crs, pixel_coordinates, select_scales, full_resolution, output_crs, tile_size, workers, cluster, resume, overwrite,
            quiet, debug):
    """Find lineaments in GeoTIFF DEMs or images and write them as lines.

    \b
    Examples:
      lineament extract dem.tif -o lines.gpkg --scales 30,60,120 --min-length 500
      lineament extract tiles/*.tif -o survey.gpkg --workers 2
      lineament extract tiles/ -o survey.gpkg --cluster tcp://scheduler:8786

    Several inputs on one CRS and pixel grid are processed as one mosaic, so
    lines cross tile seams whole. Each line carries kind, operator, scale_m,
    scale_px, strength, strength_max, length_m, azimuth_deg,
    azimuth_grid_deg, best_scale_m (with --select-scales) and source.
    """
    t0 = time.perf_counter()
    try:
        settings = ExtractionSettings(
            scales=parse_scales(str(scales)), operator=operator, features=features, band=band,
            min_length_m=_float_or_none(min_length), simplify_tolerance_m=_float_or_none(simplify),
            high_threshold=_float_or_none(high_threshold), low_threshold=_float_or_none(low_threshold),
            high_noise_multiple=float(high_noise_multiple), low_noise_multiple=float(low_noise_multiple),
            z_factor=float(z_factor), allow_rotation=bool(allow_rotation), assume_crs=assume_crs,
            pixel_coordinates=bool(pixel_coordinates), select_scales=bool(select_scales),
            full_resolution=bool(full_resolution))
    except (TypeError, ValueError) as exc:
        raise SettingsError(_with_option_names(str(exc))) from None
    for option, value in (("--assume-crs", assume_crs), ("--output-crs", output_crs)):
        if value is not None:
            try:
                CRS.from_user_input(value)
            except CRSError as exc:
                first = (str(exc).splitlines() or ["not recognised"])[0]
                raise SettingsError(f"{option} {value!r} is not a CRS ({first})") from None
    if tile_size is not None and tile_size < 64:
        raise SettingsError(f"--tile-size must be at least 64 pixels, got {tile_size}")
    if workers is not None and workers < 1:
        raise SettingsError(f"--workers must be at least 1, got {workers}")
    driver = check_output(output, overwrite=overwrite)
    paths, notes = expand_inputs(list(inputs))
    for note in notes:
        click.echo(f"lineament: note: {note}", err=True)
    infos = [open_raster(p, settings) for p in paths]  # check every input before any work
    if driver == "GeoJSON" and any(i.georef.crs is None for i in infos):
        # refuse before the (possibly long) extraction rather than after it
        raise OutputError(f"{output}: GeoJSON is always WGS84, but an input is processed without "
                          "a CRS; write a GeoPackage (.gpkg) instead")
    crss = {i.georef.crs.to_wkt() if i.georef.crs is not None else None for i in infos}
    if None in crss and len(crss) > 1:
        raise InputError("inputs mix rasters with and without a CRS; give them a CRS (--assume-crs) "
                         "or process them separately")
    progress = None if quiet else Progress()
    keep_folder = resume_folder(output)
    existed = keep_folder.exists()
    try:
        results = extract_survey(paths, settings, tile_size=tile_size,
                                 workers=workers or default_workers(), cluster=cluster,
                                 progress=progress, resume_output=output, resume=resume)
        if progress is not None:
            progress.close()
        write_lines(results, output, overwrite=overwrite, crs=output_crs)
    except Exception:
        # a failed run leaves nothing behind; an interrupted one (Ctrl-C, kill) keeps its
        # finished tiles for --resume
        if not existed:
            shutil.rmtree(keep_folder, ignore_errors=True)
        raise
    shutil.rmtree(keep_folder, ignore_errors=True)
    if not quiet:
        if len(crss) > 1:
            target = output_crs or "the first input's CRS"
            click.echo(f"inputs are in {len(crss)} CRSs; each was processed on its own grid and the lines "
                       f"were reprojected to {target}", err=True)
        for result in results:
            _summary(result)
        click.echo(f"written to {output} in {time.perf_counter() - t0:.1f} s", err=True)
        click.echo(CAUTION, err=True)


def _summary(result) -> None:
    echo = lambda s="": click.echo(s, err=True)  # noqa: E731
    echo(f"{result.source}: {len(result.lines)} lines, {result.total_length_m / 1000:.2f} km, "
         f"{result.tiles} tile{'s' if result.tiles != 1 else ''}")
    echo(f"  {'kind':<7}{'operator':<9}{'sigma m':>9} {'sigma px':>8} {'noise':>9} {'high':>9} {'low':>9} "
         f"{'lines':>6} {'km':>8}")
    for s in result.scales:
        echo(f"  {s.kind:<7}{s.operator:<9}{s.scale_m:9.2f} {s.scale_px:8.2f} {s.noise:9.3g} "
             f"{s.high_threshold:9.3g} {s.low_threshold:9.3g} {s.lines:6d} {s.length_m / 1000:8.2f}")
    echo("  strength and thresholds in raster units (metres of step or depth for a DEM)")
