"""``lineament density``: lineament length (or intersection) density as a GeoTIFF."""

from __future__ import annotations

import os

import click
import numpy as np
from pyproj import CRS

from ..analysis.density import grid_for_lines, intersection_density, line_density, write_density
from ..analysis.layers import metric_crs_for, reproject_lines
from ..errors import InputError, RasterReadError, SettingsError
from ..georef import GeoRef
from ..interpret import read_line_layer
from ..report import check_file_output
from .common import CAUTION, handle_errors, warn, run_options


def grid_of_raster(path: str) -> GeoRef:
    """Grid (transform, CRS, shape) of a raster, without reading its values."""
    import rasterio
    from rasterio.errors import RasterioError

    if not os.path.exists(path):
        raise RasterReadError(f"{path}: no such file")
    try:
        with rasterio.open(path) as ds:
            if ds.transform.is_identity:
                raise InputError(f"{path}: raster has no geotransform, so it cannot serve as a density grid")
            return GeoRef.from_rasterio(ds.transform, ds.crs, ds.height, ds.width)
    except InputError:
        raise
    except (RasterioError, OSError) as exc:
        first = " ".join(str(exc).split()) or type(exc).__name__
        raise RasterReadError(f"{path}: not a raster GDAL can open ({first})") from None


@click.command("density")
@click.argument("lines_path", metavar="LINES", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(), help="Density grid, GeoTIFF (.tif).")
@click.option("--like", "like", type=click.Path(), default=None,
              help="Reference raster whose grid and CRS the density is computed on (lines are reprojected).")
@click.option("--cell-size", type=float, default=None,
              help="Without --like: cell size in metres of a grid covering the lines.")
@click.option("--radius", type=float, required=True, help="Search radius in metres.")
@click.option("--intersections", is_flag=True,
              help="Count line intersections per km^2 instead of km of line per km^2.")
@run_options()
@handle_errors
def density(lines_path, output, like, cell_size, radius, intersections, overwrite, quiet, debug):
    """Lineament density: km of line per km^2 within a search radius.

    \b
    Example:
      lineament density lines.gpkg --like dem.tif -o density.tif --radius 500

    With --intersections, the number of line crossings per km^2.  Values
    are for cell centres; lines up to the radius beyond the grid count.
    """
    if (like is None) == (cell_size is None):
        raise SettingsError("give either --like RASTER or --cell-size METRES (one of them)")
    check_file_output(output, (".tif", ".tiff"), overwrite=overwrite, what="density grid")
    geoms, _, crs = read_line_layer(lines_path)
    if not geoms:
        raise InputError(f"{lines_path}: no lines")
    if like is not None:
        grid = grid_of_raster(like)
        if (grid.crs is None) != (crs is None):
            missing = like if grid.crs is None else lines_path
            raise InputError(f"{missing}: has no CRS while the other input has one; the lines cannot be "
                             "placed on the grid")
    else:
        frame = metric_crs_for(geoms, crs)
        if frame is not None and crs is not None and not CRS(crs).equals(frame):
            geoms = reproject_lines(geoms, crs, frame, source=lines_path)
            crs = frame
        grid = grid_for_lines(geoms, crs, cell_size_m=cell_size, margin_m=radius)
    if intersections:
        values = intersection_density(geoms, grid, radius_m=radius, crs=crs)
        units = "intersections_per_km2"
    else:
        values = line_density(geoms, grid, radius_m=radius, crs=crs)
        units = "km_per_km2"
    write_density(values, grid, output, overwrite=overwrite,
                  tags={"units": units, "radius_m": f"{radius:g}", "lines": os.path.basename(lines_path),
                        "software": "lineament"})
    if not quiet:
        nonzero = values[values > 0]
        if nonzero.size == 0:
            warn("the density is zero everywhere: no lines fall within the radius of the grid")
        click.echo(f"{output}: {grid.height} x {grid.width} cells, {units.replace('_', ' ')}, radius "
                   f"{radius:g} m; max {float(values.max()):.3g}, mean {float(np.mean(values)):.3g}", err=True)
        click.echo(CAUTION, err=True)
