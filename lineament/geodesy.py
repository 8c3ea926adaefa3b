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

import math
import threading

import numpy as np
from pyproj import CRS, Transformer

from .georef import GeoRef


def fold_axial(deg: np.ndarray) -> np.ndarray:
    """Fold directions in degrees into the axial range [0, 180)."""
    out = np.mod(np.asarray(deg, dtype=np.float64), 180.0)
    out[out >= 180.0] = 0.0  # mod can round up to exactly 180
    return out


#: Transformers to longitude and latitude made in this thread, by CRS (pyproj's transformers are
#: not to be shared between threads; making one took about half a millisecond, several per run).
_LONLAT = threading.local()


def _to_lonlat(x: np.ndarray, y: np.ndarray, crs: CRS) -> tuple[np.ndarray, np.ndarray]:
    """Longitude and latitude in degrees (x, y taken in GDAL's traditional longitude-first order)."""
    made = getattr(_LONLAT, "made", None)
    if made is None:
        made = _LONLAT.made = {}
    tr = made.get(crs)
    if tr is None:
        if len(made) >= 8:  # a few CRSs at a time are all a run or a survey uses
            made.clear()
        tr = made[crs] = Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    return tr.transform(x, y)


def _sum_per_line(seg: np.ndarray, first: np.ndarray, last: np.ndarray) -> np.ndarray:
    """Sum segment values per line over concatenated vertices.

    ``seg[i]`` joins vertex ``i`` to ``i + 1``; the segments that join the last
    vertex of one line to the first of the next are ignored.
    """
    seg = seg.copy()
    seg[last[:-1]] = 0.0
    return np.add.reduceat(np.append(seg, 0.0), first)


def _axis_chords(u: np.ndarray, v: np.ndarray, first: np.ndarray, last: np.ndarray):
    """End points of each line's principal axis in a local planar frame.

    The axis direction is the length-weighted axial mean of the segment
    directions (doubled angles, Mardia and Jupp 2000), through the
    length-weighted centroid of the segments; its ends are the extreme
    projections of the vertices.  For a straight line these are its end
    points; a short hook at one end barely moves the axis, where it would
    swing a first-to-last chord.

    Returns
    -------
    u0, v0, u1, v1 : ndarray
        Axis end points per line, ordered along increasing azimuth direction.
    """
    du, dv = np.diff(u), np.diff(v)
    w = np.hypot(du, dv)
    w[last[:-1]] = 0.0  # joins between consecutive lines
    theta = np.arctan2(du, dv)
    c2 = _sum_per_line(w * np.cos(2 * theta), first, last)
    s2 = _sum_per_line(w * np.sin(2 * theta), first, last)
    phi = 0.5 * np.arctan2(s2, c2)
    total = _sum_per_line(w, first, last)
    total[total == 0] = 1.0
    mu = 0.5 * (u[:-1] + u[1:])
    mv = 0.5 * (v[:-1] + v[1:])
    uc = _sum_per_line(w * mu, first, last) / total
    vc = _sum_per_line(w * mv, first, last) / total
    line_of = np.repeat(np.arange(first.size), last - first + 1)
    sp, cp = np.sin(phi), np.cos(phi)
    proj = (u - uc[line_of]) * sp[line_of] + (v - vc[line_of]) * cp[line_of]
    pmin = np.minimum.reduceat(proj, first)
    pmax = np.maximum.reduceat(proj, first)
    return uc + pmin * sp, vc + pmin * cp, uc + pmax * sp, vc + pmax * cp


def line_measures(xs: list[np.ndarray], ys: list[np.ndarray], georef: GeoRef) -> dict[str, np.ndarray]:
    """Lengths and azimuths of lines in the CRS of a raster; see :func:`measure_lines`."""
    return measure_lines(xs, ys, georef.crs)


#: Directions of the unit steps :func:`path_length_margin` measures (half a turn: a step and its
#: reverse have the same length).
_MARGIN_DIRECTIONS = 8


def path_length_margin(georef: GeoRef, pixel_m: tuple[float, float], *, samples: int = 9,
                       safety: float = 1.01) -> float:
    """Bound on a path's geodesic length over its length in pixel metres, anywhere in a raster.

    A traced path is measured cheaply as the sum of its steps, each
    ``hypot(d_col * pixel_m[0], d_row * pixel_m[1])``; the length a line is
    written with is geodesic (:func:`measure_lines`).  The geodesic between
    two vertices is no longer than the ellipsoid curve the straight map
    segment between them comes from, which is the segment's map length
    divided by the map's scale along it.  So the ratio of geodesic to pixel
    metres is at most the largest ratio over the raster and over directions
    of a short step.  It is measured here: unit pixel steps in
    :data:`_MARGIN_DIRECTIONS` directions at ``samples`` x ``samples`` points
    spread over the raster, mapped and measured as the writer measures
    (``pyproj`` transformation to longitude and latitude, geodesic on the
    CRS's ellipsoid).  The largest ratio is divided by cos(pi / 16), which
    covers a direction between the sampled ones (the ratio's square is a
    quadratic form in the direction), then multiplied by ``safety`` for the
    variation between sample points (smooth for the map projections of
    surveys; UTM's scale changes by 4e-4 across a zone).

    Returns ``safety`` without a CRS (lengths are planar there), and 1.5
    (a bound for scales above 2/3) when the measurement fails.
    """
    if georef.crs is None:
        return safety
    h, w = georef.shape
    r0, c0 = np.meshgrid(np.linspace(0.0, h - 1.0, samples), np.linspace(0.0, w - 1.0, samples), indexing="ij")
    angle = np.arange(_MARGIN_DIRECTIONS) * (np.pi / _MARGIN_DIRECTIONS)
    dr, dc = np.sin(angle), np.cos(angle)
    r0 = np.repeat(r0.ravel(), angle.size)
    c0 = np.repeat(c0.ravel(), angle.size)
    dr = np.tile(dr, samples * samples)
    dc = np.tile(dc, samples * samples)
    try:
        x, y = georef.pixel_to_map(np.concatenate([r0, r0 + dr]), np.concatenate([c0, c0 + dc]))
        if georef.crs.is_geographic:
            lon, lat = x, y
        else:
            lon, lat = _to_lonlat(x, y, georef.crs)
        n = r0.size
        _, _, dist = geod_of(georef.crs).inv(lon[:n], lat[:n], lon[n:], lat[n:])
        ratio = np.asarray(dist, dtype=np.float64) / np.hypot(dc * pixel_m[0], dr * pixel_m[1])
        worst = float(np.max(ratio))
    except Exception:  # pragma: no cover - a CRS pyproj cannot transform
        return 1.5
    if not np.isfinite(worst) or worst <= 0.0:
        return 1.5
    return worst / math.cos(math.pi / 16) * safety


def geod_of(crs: CRS) -> Geod:
    """Ellipsoid of a CRS (WGS84 when it has none)."""
    try:
        return crs.get_geod() or Geod(ellps="WGS84")
    except Exception:  # pragma: no cover - exotic CRS
        return Geod(ellps="WGS84")


def measure_lines(xs: list[np.ndarray], ys: list[np.ndarray], crs: CRS | None) -> dict[str, np.ndarray]:
    """Lengths and azimuths of many polylines in map coordinates.

    The azimuth is that of the line's overall direction: the chord of its
    principal axis (see :func:`_axis_chords`, computed in grid coordinates,
    or in longitude scaled by the cosine of latitude for a geographic CRS),
    measured as the geodesic forward azimuth between the axis ends on the
    ellipsoid and folded into [0, 180).  For a straight line this is the
    azimuth between its end points.

    Parameters
    ----------
    xs, ys : list of ndarray
        Vertex coordinates of each line in ``crs``.
    crs : pyproj.CRS or None

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
    geographic = crs is not None and crs.is_geographic
    if not geographic:
        x0, y0, x1, y1 = _axis_chords(x, y, first, last)
        grid_az = fold_axial(np.degrees(np.arctan2(x1 - x0, y1 - y0)))
    if crs is None:
        return {"length_m": _sum_per_line(np.hypot(np.diff(x), np.diff(y)), first, last),
                "azimuth_deg": grid_az, "azimuth_grid_deg": grid_az.copy()}
    lon, lat = _to_lonlat(x, y, crs)
    geod = geod_of(crs)
    _, _, dist = geod.inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    lengths = _sum_per_line(np.asarray(dist, dtype=np.float64), first, last)
    if geographic:
        coslat = np.cos(np.radians(np.repeat(0.5 * (lat[first] + lat[last]), counts)))
        u0, v0, u1, v1 = _axis_chords(lon * coslat, lat, first, last)
        c = coslat[first]
        lon0, lat0, lon1, lat1 = u0 / c, v0, u1 / c, v1
        grid = np.full(n, np.nan)
    else:
        lon0, lat0 = _to_lonlat(x0, y0, crs)
        lon1, lat1 = _to_lonlat(x1, y1, crs)
        grid = grid_az
    az, _, _ = geod.inv(lon0, lat0, lon1, lat1)
    true_az = fold_axial(np.asarray(az, dtype=np.float64))
    return {"length_m": lengths, "azimuth_deg": true_az, "azimuth_grid_deg": grid}
