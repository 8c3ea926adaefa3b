"""Analysis of lineament line layers: agreement, orientation, density.

Functions take plain shapely LineStrings plus a pyproj CRS (or a
:class:`~lineament.georef.GeoRef` grid) so that a thin command line can call
them directly.
"""

from .agreement import AgreementResult, compare_line_files, compare_lines
from .density import (
    grid_for_lines,
    intersection_density,
    line_density,
    line_intersections,
    write_density,
)
from .layers import (
    azimuths_deg,
    ground_lengths_m,
    metric_crs_for,
    read_lines,
    reproject_lines,
)
from .orientation import (
    OrientationSet,
    RoseTable,
    axial_mean,
    axial_spread_deg,
    orientation_sets,
    plot_rose,
    rose_bins,
    rose_for_lines,
    write_rose_table,
)

__all__ = [
    "AgreementResult",
    "OrientationSet",
    "RoseTable",
    "axial_mean",
    "axial_spread_deg",
    "azimuths_deg",
    "compare_line_files",
    "compare_lines",
    "grid_for_lines",
    "ground_lengths_m",
    "intersection_density",
    "line_density",
    "line_intersections",
    "metric_crs_for",
    "orientation_sets",
    "plot_rose",
    "read_lines",
    "reproject_lines",
    "rose_bins",
    "rose_for_lines",
    "write_density",
    "write_rose_table",
]
