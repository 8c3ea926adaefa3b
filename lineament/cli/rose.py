"""``lineament rose``: rose diagram, bin table and orientation sets of a line layer."""

from __future__ import annotations

import math

import click

from ..analysis.orientation import orientation_sets, plot_rose, rose_bins, write_rose_table
from ..errors import InputError
from ..interpret import read_line_layer
from ..report import check_file_output, line_measures_of_layer, require_matplotlib
from .common import handle_errors, run_options


def rose_summary_lines(table, sets) -> list[str]:
    """Plain-text bin table, axial mean and orientation sets, one string per line."""
    unit = "m" if table.weighting == "length_m" else "lines"
    out = [f"{'bin deg':>11}  {table.weighting:>12}  {'share':>7}"]
    for row in table.rows():
        f = row[table.weighting]
        out.append(f"{row['bin_start_deg']:5g}-{row['bin_end_deg']:<5g}  "
                   f"{(f'{f:,.1f}' if unit == 'm' else str(f)):>12}  {100 * row['share']:6.1f}%")
    mean = table.mean_direction_deg
    out.append(f"lines: {table.n_lines}; mean axial direction: "
               f"{'undefined' if not math.isfinite(mean) else f'{mean:.1f} deg'} (true north); "
               f"mean resultant length: {table.mean_resultant_length:.3f}")
    if sets:
        out.append("orientation sets (mean deg, sector deg, share, spread deg, lines):")
        for i, s in enumerate(sets, 1):
            out.append(f"  {i}: {s.mean_direction_deg:6.1f}  {s.lower_deg:5.1f}-{s.upper_deg:<5.1f}  "
                       f"{100 * s.share:5.1f}%  {s.spread_deg:5.1f}  {s.n_lines}")
    else:
        out.append("orientation sets: none (no preferred direction)")
    return out


@click.command("rose")
@click.argument("lines_path", metavar="LINES", type=click.Path())
@click.option("-o", "--output", type=click.Path(), default=None,
              help="Rose diagram image, .png or .svg (needs the plot extra). Without it only the table is printed.")
@click.option("--weight", type=click.Choice(["length", "count"]), default="length", show_default=True,
              help="Weight each line by its ground length in metres, or count lines.")
@click.option("--bin-width", type=float, default=10.0, show_default=True,
              help="Bin width in degrees; must divide 180.")
@click.option("--table", "table_path", type=click.Path(), default=None,
              help="Also write the bin table as .csv or .json.")
@run_options("Replace existing outputs.")
@handle_errors
def rose(lines_path, output, weight, bin_width, table_path, overwrite, quiet, debug):
    """Rose diagram of lineament directions (axial, 0-180 deg from true north).

    \b
    Example:
      lineament rose lines.gpkg -o rose.png --bin-width 10 --table rose.csv

    Directions are the geodesic azimuths of each line's chord; lengths are
    geodesic metres.  Petal radius is proportional to the square root of
    the frequency, so petal area is proportional to it.
    """
    if output is not None:
        check_file_output(output, (".png", ".svg"), overwrite=overwrite, what="plot")
        require_matplotlib(f"{output}: the rose diagram")
    if table_path is not None:
        check_file_output(table_path, (".csv", ".json"), overwrite=overwrite, what="table")
    geoms, _, crs = read_line_layer(lines_path)
    if not geoms:
        raise InputError(f"{lines_path}: no lines")
    meas = line_measures_of_layer(geoms, crs)
    weights = meas["length_m"] if weight == "length" else None
    table = rose_bins(meas["azimuth_deg"], weights, bin_width, weighting="length_m" if weights is not None else "count")
    sets = orientation_sets(meas["azimuth_deg"], weights)
    if table_path is not None:
        write_rose_table(table, table_path, overwrite=overwrite)
    if output is not None:
        plot_rose(table, output, sets=sets, overwrite=overwrite, title=click.format_filename(lines_path))
    if not quiet:
        for line in rose_summary_lines(table, sets):
            click.echo(line)
