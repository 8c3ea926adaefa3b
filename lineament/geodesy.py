"""Ground lengths and azimuths of lines, on the CRS's ellipsoid.

Lengths are geodesic (Karney 2013, through ``pyproj.Geod``) for geographic
and projected CRSs alike; azimuths are geodesic forward azimuths of a line's
overall direction, clockwise from true north, folded into [0, 180).  For a
projected CRS the grid azimuth (clockwise from grid north) is given too; the
two differ by the meridian convergence.

Karney, C. F. F. (2013). Algorithms for geodesics. J. Geodesy 87, 43-55.
doi:10.1007/s00190-012-0578-z
"""

from __future__ import annotations

import numpy as np
from pyproj import CRS, Transformer

from .georef import GeoRef


def fold_axial(deg: np.ndarray) -> np.ndarray:
    """Fold directions in degrees into the axial range [0, 180)."""
    out = np.mod(np.asarray(deg, dtype=np.float64), 180.0)
    out[out >= 180.0] = 0.0  # mod can round up to exactly 180
    return out


def _to_lonlat(x: np.ndarray, y: np.ndarray, crs: CRS) -> tuple[np.ndarray, np.ndarray]:
    if crs.is_geographic:
        # Axis order of a geographic CRS in a raster is longitude, latitude (GDAL traditional order).
        return x, y
    tr = Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    return tr.transform(x, y)


def _sum_per_line(seg: np.ndarray, first: np.ndarray, last: np.ndarray) -> np.ndarray:
    """Sum segment values per line over concatenated vertices.

    ``seg[i]`` joins vertex ``i`` to ``i + 1``; the segments that join the last
    vertex of one line to the first of the next are ignored.
    """
    seg = seg.copy()
    seg[last[:-1]] = 0.0
    return np.add.reduceat(np.append(seg, 0.0), first)


def line_measures(xs: list[np.ndarray], ys: list[np.ndarray], georef: GeoRef) -> dict[str, np.ndarray]:
    """Lengths and azimuths of many polylines in map coordinates.

    Parameters
    ----------
    xs, ys : list of ndarray
        Vertex coordinates of each line in the CRS of ``georef``.
    georef : GeoRef

    Returns
    -------
    dict of ndarray, one value per line
        ``length_m`` (geodesic, metres), ``azimuth_deg`` (true north, [0, 180)),
        ``azimuth_grid_deg`` (grid north, [0, 180); NaN for a geographic CRS).
        Without a CRS, lengths are planar in map units and both azimuths are
        grid azimuths.
    """
    n = len(xs)
    if n == 0:
        empty = np.zeros(0)
        return {"length_m": empty, "azimuth_deg": empty, "azimuth_grid_deg": empty}
    counts = np.array([len(x) for x in xs])
    x = np.concatenate(xs).astype(np.float64)
    y = np.concatenate(ys).astype(np.float64)
    first = np.concatenate(([0], np.cumsum(counts)[:-1]))
    last = first + counts - 1
    grid_az = fold_axial(np.degrees(np.arctan2(x[last] - x[first], y[last] - y[first])))
    if georef.crs is None:
        return {"length_m": _sum_per_line(np.hypot(np.diff(x), np.diff(y)), first, last),
                "azimuth_deg": grid_az, "azimuth_grid_deg": grid_az.copy()}
    lon, lat = _to_lonlat(x, y, georef.crs)
    geod = georef.geod
    fwd, _, dist = geod.inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    lengths = _sum_per_line(np.asarray(dist, dtype=np.float64), first, last)
    az, _, _ = geod.inv(lon[first], lat[first], lon[last], lat[last])
    true_az = fold_axial(np.asarray(az, dtype=np.float64))
    grid = np.full(n, np.nan) if georef.is_geographic else grid_az
    return {"length_m": lengths, "azimuth_deg": true_az, "azimuth_grid_deg": grid}
