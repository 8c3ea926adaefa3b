"""``lineament report``: one self-contained HTML page about a line layer."""

from __future__ import annotations

import click

from ..report import write_report
from .common import CAUTION, handle_errors, run_options


@click.command("report")
@click.argument("lines_path", metavar="LINES", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(), help="HTML file to write (.html).")
@click.option("--raster", type=click.Path(), default=None,
              help="DEM to draw as a hillshade under the lines (GeoTIFF).")
@click.option("--image", type=click.Path(), default=None,
              help="Image to draw under the lines as it is (instead of --raster).")
@click.option("--colour-by", type=click.Choice(["scale", "kind"]), default="scale", show_default=True,
              help="Attribute that colours the lines.")
@click.option("--sun-azimuth-deg", type=float, default=None,
              help="One hillshade sun azimuth in degrees from north. Default: multi-directional "
                   "(225, 270, 315, 360 averaged), which hides no direction.")
@click.option("--sun-altitude-deg", type=float, default=45.0, show_default=True,
              help="Hillshade sun altitude in degrees.")
@click.option("--z-factor", type=float, default=1.0, show_default=True,
              help="Multiply DEM values by this for the hillshade (0.3048 for feet).")
@click.option("--bin-width", type=float, default=10.0, show_default=True, help="Rose bin width in degrees.")
@click.option("--weight", type=click.Choice(["length", "count"]), default="length", show_default=True,
              help="Rose weighting.")
@click.option("--title", default=None, help="Page title.")
@run_options()
@handle_errors
def report(lines_path, output, raster, image, colour_by, sun_azimuth_deg, sun_altitude_deg, z_factor,
           bin_width, weight, title, overwrite, quiet, debug):
    """Write a one-page HTML report: map, rose, lengths, statistics, run parameters.

    \b
    Example:
      lineament report lines.gpkg --raster dem.tif -o report.html

    The page is self-contained (pictures embedded), so it can be mailed or
    opened offline.  Needs the plot extra (pip install lineament[plot]).
    """
    write_report(lines_path, output, overwrite=overwrite, caution=CAUTION, raster=raster, image=image,
                 colour_by=colour_by, sun_azimuth_deg=sun_azimuth_deg, sun_altitude_deg=sun_altitude_deg,
                 z_factor=z_factor, bin_width_deg=bin_width, weight=weight, title=title)
    if not quiet:
        click.echo(f"{output}: report written", err=True)
