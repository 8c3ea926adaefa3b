"""Lineament density grids.

Line density is the total lineament length per unit area inside a circular
search window around each cell: a moving-window estimate with a uniform
disc kernel (Silverman 1986, Density Estimation for Statistics and Data
Analysis), the usual lineament density map (common practice).

Method
------
1. Every line segment is clipped exactly to the grid cells it crosses
   (crossings with the cell edges are merged along the segment), and each
   piece's ground length is added to its cell.
2. The length grid is convolved with a disc of radius ``radius_m``
   (anti-aliased: cells on the rim count with the share of their area inside
   the disc) using overlap-add FFT convolution (``scipy.signal.oaconvolve``).
   Lines up to ``radius_m`` beyond the grid edge are counted.
3. Each value is divided by the area of the disc footprint (its discrete
   area, ``sum(kernel) * cell area``, which is ``pi r^2`` up to the rim's
   discretisation), so the density integrated over the grid returns the
   total line length away from the edges.

Units: km of line per km^2 (``km_per_km2``) for length density; count per
km^2 for point-like densities (line midpoints, line intersections).
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence

import numpy as np
import shapely
from affine import Affine
from pyproj import CRS

from ..atomic import replaced_atomically
from ..errors import InputError, OutputError, SettingsError
from ..georef import GeoRef
from ..geodesy import geod_of
from .layers import _as_array, _degrees_per_unit, crs_linear_unit_m, reproject_lines

__all__ = [
    "line_density",
    "intersection_density",
    "line_intersections",
    "disk_kernel",
    "grid_for_lines",
    "write_density",
]


# ====================================================================== kernel
def disk_kernel(radius_cols: float, radius_rows: float, *, supersample: int = 8) -> np.ndarray:
    """Anti-aliased elliptical disc on the pixel grid.

    Parameters
    ----------
    radius_cols, radius_rows : float
        Semi-axes in pixels along columns (x) and rows (y).
    supersample : int
        Sub-samples per axis used for cells crossed by the rim.

    Returns
    -------
    ndarray of float64, shape (2 * ceil(radius_rows) + 1, 2 * ceil(radius_cols) + 1)
        Share of each cell's area inside the ellipse centred on the middle
        cell.
    """
    hc, hr = int(math.ceil(radius_cols)), int(math.ceil(radius_rows))
    dc = np.arange(-hc, hc + 1, dtype=np.float64)
    dr = np.arange(-hr, hr + 1, dtype=np.float64)
    cc, rr = np.meshgrid(dc, dr)
    # nearest and farthest points of each cell from the centre, in ellipse units
    near_c = np.maximum(np.abs(cc) - 0.5, 0.0) / radius_cols
    near_r = np.maximum(np.abs(rr) - 0.5, 0.0) / radius_rows
    far_c = (np.abs(cc) + 0.5) / radius_cols
    far_r = (np.abs(rr) + 0.5) / radius_rows
    inside = far_c**2 + far_r**2 <= 1.0
    outside = near_c**2 + near_r**2 >= 1.0
    kernel = inside.astype(np.float64)
    rim = ~inside & ~outside
    if rim.any():
        n = int(supersample)
        sub = (np.arange(n) + 0.5) / n - 0.5
        su, sv = np.meshgrid(sub, sub)
        pc = cc[rim][:, None] + su.reshape(1, -1)
        pr = rr[rim][:, None] + sv.reshape(1, -1)
        kernel[rim] = ((pc / radius_cols) ** 2 + (pr / radius_rows) ** 2 <= 1.0).mean(axis=1)
    return kernel


# ====================================================================== helpers
def _prepare(geoms, georef: GeoRef, radius_m: float, crs: CRS | None, what: str):
    if not isinstance(georef, GeoRef):
        raise SettingsError(f"{what}: georef must be a lineament.georef.GeoRef")
    try:
        r = float(radius_m)
    except (TypeError, ValueError):
        raise SettingsError(f"{what}: radius_m must be a number, got {radius_m!r}") from None
    if not (math.isfinite(r) and r > 0):
        raise SettingsError(f"{what}: radius_m must be a positive number, got {r:g}")
    georef.check_usable(f"{what} grid", allow_rotation=True)
    if georef.is_geographic and not georef.is_rectilinear:
        raise InputError(f"{what} grid: a rotated grid in a geographic CRS is not supported; use a projected grid")
    arr = _as_array(geoms)
    if crs is not None and georef.crs is not None and CRS.from_user_input(crs) != georef.crs:
        arr = np.asarray(reproject_lines(arr, crs, georef.crs, source=what), dtype=object)
    if arr.size:
        bad = ~np.isin(shapely.get_type_id(arr), (1, 2, 5, -1))
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"{what}: geometry {i} is a {arr[i].geom_type}; expected lines")
    px_m, py_m = georef.pixel_size_m()
    radius_cols, radius_rows = r / px_m, r / py_m
    if max(radius_cols, radius_rows) > 20000:
        raise SettingsError(f"{what}: radius_m {r:g} spans more than 20000 cells; use a coarser grid")
    kernel = disk_kernel(radius_cols, radius_rows)
    return arr, kernel


def _row_cell_area_km2(georef: GeoRef) -> np.ndarray:
    """Ground area of one cell in each row, km^2, shape (H,)."""
    t = georef.transform
    if not georef.is_geographic:
        u = georef.linear_unit_m
        return np.full(georef.height, abs(t.a * t.e - t.b * t.d) * u * u / 1e6)
    geod = georef.geod
    k = _degrees_per_unit(georef.crs)
    lon0, lon1 = t.c * k, (t.c + t.a) * k
    areas = np.empty(georef.height)
    for row in range(georef.height):
        lat0, lat1 = (t.f + t.e * row) * k, (t.f + t.e * (row + 1)) * k
        area, _ = geod.polygon_area_perimeter([lon0, lon1, lon1, lon0], [lat0, lat0, lat1, lat1])
        areas[row] = abs(area) / 1e6
    return areas


def _segments(arr: np.ndarray, georef: GeoRef, pad_rows: int, pad_cols: int):
    """Segments in padded corner-based pixel coordinates.

    Returns ``u0, v0, u1, v1`` (column, row), the ground length of each
    segment in metres and the index of the part (single line) it belongs to.
    """
    if arr.size:
        coords, idx = shapely.get_coordinates(arr, return_index=True)
    else:
        coords, idx = np.zeros((0, 2)), np.zeros(0, np.intp)
    same = idx[1:] == idx[:-1]
    a, b = coords[:-1][same], coords[1:][same]
    seg_part = idx[:-1][same]
    if georef.is_geographic:
        k = _degrees_per_unit(georef.crs)
        _, _, seg_len = geod_of(georef.crs).inv(a[:, 0] * k, a[:, 1] * k, b[:, 0] * k, b[:, 1] * k)
        seg_len = np.asarray(seg_len, dtype=np.float64)
    else:
        seg_len = np.hypot(b[:, 0] - a[:, 0], b[:, 1] - a[:, 1]) * georef.linear_unit_m
    r0, c0 = georef.map_to_pixel(a[:, 0], a[:, 1])
    r1, c1 = georef.map_to_pixel(b[:, 0], b[:, 1])
    # corner-based: cell (r, c) covers [r, r+1) x [c, c+1); then shift by the pad
    return c0 + 0.5 + pad_cols, r0 + 0.5 + pad_rows, c1 + 0.5 + pad_cols, r1 + 0.5 + pad_rows, seg_len, seg_part


def _clip_to_box(u0, v0, u1, v1, width, height):
    """Parameter range [t0, t1] of each segment inside [0, width] x [0, height]."""
    t0 = np.zeros(u0.shape)
    t1 = np.ones(u0.shape)
    for p0, p1, lim in ((u0, u1, width), (v0, v1, height)):
        d = p1 - p0
        with np.errstate(divide="ignore", invalid="ignore"):
            ta = (0.0 - p0) / d
            tb = (lim - p0) / d
        lo = np.where(d == 0, np.where((p0 >= 0) & (p0 <= lim), -np.inf, np.inf), np.minimum(ta, tb))
        hi = np.where(d == 0, np.where((p0 >= 0) & (p0 <= lim), np.inf, -np.inf), np.maximum(ta, tb))
        t0 = np.maximum(t0, lo)
        t1 = np.minimum(t1, hi)
    return t0, t1


def _crossings(p0, p1, t0, t1):
    """Parameters t in (t0, t1) where p0 + t (p1 - p0) crosses an integer."""
    a = p0 + t0 * (p1 - p0)
    b = p0 + t1 * (p1 - p0)
    lo = np.floor(np.minimum(a, b)) + 1.0
    hi = np.ceil(np.maximum(a, b)) - 1.0
    count = np.maximum(hi - lo + 1.0, 0.0).astype(np.intp)
    seg = np.repeat(np.arange(p0.size), count)
    k = np.arange(seg.size) - np.repeat(np.concatenate(([0], np.cumsum(count)))[:-1], count)
    level = lo[seg] + k
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (level - p0[seg]) / (p1[seg] - p0[seg])
    return seg, t


def _rasterise_length(u0, v0, u1, v1, seg_len, height, width) -> np.ndarray:
    """Exact length of segments per cell on a ``(height, width)`` grid.

    ``u`` is the corner-based column coordinate and ``v`` the row
    coordinate; cell ``(r, c)`` covers ``[r, r+1) x [c, c+1)``.
    """
    out = np.zeros(height * width)
    if seg_len.size == 0:
        return out.reshape(height, width)
    t0, t1 = _clip_to_box(u0, v0, u1, v1, float(width), float(height))
    keep = np.flatnonzero((t1 > t0) & (seg_len > 0))
    u0, v0, u1, v1, seg_len, t0, t1 = (x[keep] for x in (u0, v0, u1, v1, seg_len, t0, t1))
    su, tu = _crossings(u0, u1, t0, t1)
    sv, tv = _crossings(v0, v1, t0, t1)
    n = seg_len.size
    seg = np.concatenate((np.arange(n), np.arange(n), su, sv))
    t = np.concatenate((t0, t1, tu, tv))
    order = np.lexsort((t, seg))
    seg, t = seg[order], t[order]
    same = seg[1:] == seg[:-1]
    s = seg[:-1][same]
    ta, tb = t[:-1][same], t[1:][same]
    dt = tb - ta
    tm = 0.5 * (ta + tb)
    cu = np.floor(u0[s] + tm * (u1[s] - u0[s])).astype(np.intp)
    cv = np.floor(v0[s] + tm * (v1[s] - v0[s])).astype(np.intp)
    ok = (dt > 0) & (cu >= 0) & (cu < width) & (cv >= 0) & (cv < height)
    np.add.at(out, cv[ok] * width + cu[ok], seg_len[s[ok]] * dt[ok])
    return out.reshape(height, width)


def _rasterise_points(xy: np.ndarray, weights, georef: GeoRef, pad_rows: int, pad_cols: int) -> np.ndarray:
    height, width = georef.height + 2 * pad_rows, georef.width + 2 * pad_cols
    out = np.zeros(height * width)
    if len(xy):
        r, c = georef.map_to_pixel(xy[:, 0], xy[:, 1])
        cv = np.floor(r + 0.5 + pad_rows).astype(np.intp)
        cu = np.floor(c + 0.5 + pad_cols).astype(np.intp)
        ok = (cu >= 0) & (cu < width) & (cv >= 0) & (cv < height)
        np.add.at(out, cv[ok] * width + cu[ok], np.asarray(weights, dtype=np.float64)[ok])
    return out.reshape(height, width)


def _smooth(padded: np.ndarray, kernel: np.ndarray, georef: GeoRef) -> np.ndarray:
    """Disc sum divided by the disc footprint area (km^2), float32 (H, W)."""
    if not padded.any():
        return np.zeros(georef.shape, dtype=np.float32)
    from scipy.signal import oaconvolve  # imported here: scipy.signal is slow to import
    total = oaconvolve(padded, kernel, mode="valid")
    total[total < 1e-9 * total.max()] = 0.0  # FFT round-off where there is nothing
    area = kernel.sum() * _row_cell_area_km2(georef)
    return (total / area[:, None]).astype(np.float32)


def _line_weights(weights, n: int, what: str) -> np.ndarray:
    if weights is None:
        return np.ones(n)
    w = np.asarray(weights, dtype=np.float64).reshape(-1)
    if w.size != n or not np.all(np.isfinite(w)):
        raise SettingsError(f"{what}: weights must be {n} finite numbers, one per line")
    return w


# ====================================================================== public
def line_density(
    geoms: Sequence,
    georef: GeoRef,
    *,
    radius_m: float,
    lengths_weight: bool = True,
    weights=None,
    crs: CRS | None = None,
) -> np.ndarray:
    """Lineament density within a circular search radius on a raster grid.

    Parameters
    ----------
    geoms : sequence of LineString or MultiLineString
        Lines in ``georef.crs`` (or in ``crs``, then reprojected).
    georef : GeoRef
        Output grid; values are for pixel centres.
    radius_m : float
        Search radius in metres (keyword).
    lengths_weight : bool
        True (default): length density, km of line per km^2.  False: line
        frequency, number of lines per km^2, each line counted at the point
        halfway along it.
    weights : array_like, shape (N,), optional
        Extra factor per line (e.g. ``strength``); lengths or counts are
        multiplied by it.
    crs : pyproj.CRS, optional
        CRS of ``geoms`` when it differs from ``georef.crs``.

    Returns
    -------
    ndarray of float32, shape (H, W)

    Notes
    -----
    Geographic grids are handled with the disc drawn at the grid's central
    latitude and each row divided by its own cell area on the ellipsoid, so
    values stay true lengths per area; the footprint is then only nearly
    circular away from the central latitude.  Prefer a projected grid.
    """
    arr, kernel = _prepare(geoms, georef, radius_m, crs, "line density")
    pad_rows, pad_cols = kernel.shape[0] // 2, kernel.shape[1] // 2
    w = _line_weights(weights, arr.size, "line density")
    if lengths_weight:
        parts, owner = shapely.get_parts(arr, return_index=True) if arr.size else (arr, np.zeros(0, np.intp))
        u0, v0, u1, v1, seg_len, seg_part = _segments(parts, georef, pad_rows, pad_cols)
        if weights is not None:
            seg_len = seg_len * w[owner[seg_part]]
        padded = _rasterise_length(
            u0, v0, u1, v1, seg_len / 1000.0, georef.height + 2 * pad_rows, georef.width + 2 * pad_cols
        )
    else:
        keep = ~shapely.is_empty(arr) if arr.size else np.zeros(0, bool)
        mids = shapely.line_interpolate_point(arr[keep], 0.5, normalized=True) if arr.size else arr
        xy = shapely.get_coordinates(mids) if arr.size else np.zeros((0, 2))
        padded = _rasterise_points(xy, w[keep], georef, pad_rows, pad_cols)
    return _smooth(padded, kernel, georef)


def line_intersections(geoms: Sequence) -> np.ndarray:
    """Points where distinct lines cross or touch, shape (K, 2).

    Each crossing of two lines counts once; where two lines overlap along a
    stretch, the overlap counts once, at its midpoint.  A line crossing
    itself is not counted.
    """
    arr = _as_array(geoms)
    if arr.size < 2:
        return np.zeros((0, 2))
    tree = shapely.STRtree(arr)
    i, j = tree.query(arr, predicate="intersects")
    keep = i < j
    i, j = i[keep], j[keep]
    if i.size == 0:
        return np.zeros((0, 2))
    inter = shapely.intersection(arr[i], arr[j])
    parts = shapely.get_parts(inter)
    types = shapely.get_type_id(parts)
    pts = parts[types == 0]
    lines = parts[(types == 1) | (types == 2)]
    if lines.size:
        pts = np.concatenate((pts, shapely.line_interpolate_point(lines, 0.5, normalized=True)))
    return shapely.get_coordinates(pts)


def intersection_density(
    geoms: Sequence,
    georef: GeoRef,
    *,
    radius_m: float,
    crs: CRS | None = None,
) -> np.ndarray:
    """Number of line intersections per km^2 within a circular search radius.

    Intersections come from :func:`line_intersections`; the rest is as in
    :func:`line_density`.

    Returns
    -------
    ndarray of float32, shape (H, W)
    """
    arr, kernel = _prepare(geoms, georef, radius_m, crs, "intersection density")
    pad_rows, pad_cols = kernel.shape[0] // 2, kernel.shape[1] // 2
    xy = line_intersections(arr)
    padded = _rasterise_points(xy, np.ones(len(xy)), georef, pad_rows, pad_cols)
    return _smooth(padded, kernel, georef)


def grid_for_lines(
    geoms: Sequence,
    crs: CRS | None,
    *,
    cell_size_m: float,
    margin_m: float = 0.0,
) -> GeoRef:
    """A north-up grid covering the lines, for density maps without a raster.

    Parameters
    ----------
    geoms : sequence of LineString
    crs : pyproj.CRS or None
        Must be projected (or None, coordinates in metres); reproject
        geographic lines first (see :func:`~lineament.analysis.layers.metric_crs_for`).
    cell_size_m : float
        Cell size in metres.
    margin_m : float
        Extra border around the lines' extent.

    Returns
    -------
    GeoRef
        Origin snapped to a multiple of the cell size.
    """
    if crs is not None and crs.is_geographic:
        raise InputError(f"{crs.name}: density grids need a projected CRS; reproject the lines first")
    cell = float(cell_size_m)
    margin = float(margin_m)
    if not (math.isfinite(cell) and cell > 0):
        raise SettingsError(f"density grid: cell_size_m must be positive, got {cell_size_m!r}")
    if not (math.isfinite(margin) and margin >= 0):
        raise SettingsError(f"density grid: margin_m must be zero or positive, got {margin_m!r}")
    arr = _as_array(geoms)
    if arr.size == 0 or shapely.is_empty(arr).all():
        raise InputError("density grid: no lines to cover")
    unit = crs_linear_unit_m(crs)
    step = cell / unit
    xmin, ymin, xmax, ymax = shapely.total_bounds(arr)
    pad = margin / unit
    x0 = math.floor((xmin - pad) / step) * step
    y1 = math.ceil((ymax + pad) / step) * step
    width = max(1, int(math.ceil((xmax + pad - x0) / step)))
    height = max(1, int(math.ceil((y1 - (ymin - pad)) / step)))
    return GeoRef(Affine(step, 0.0, x0, 0.0, -step, y1), crs, height, width)


def write_density(
    array: np.ndarray,
    georef: GeoRef,
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    nodata: float = -9999.0,
    tags: dict | None = None,
) -> None:
    """Write a density grid as a float32 GeoTIFF.

    NaN cells are written as ``nodata``.  The file is written under a
    temporary name in the target directory and renamed into place, so a
    failed write leaves no partial file.

    Parameters
    ----------
    array : ndarray, shape (H, W)
    georef : GeoRef
        Must match the array's shape.
    path : str or path-like
        ``.tif`` or ``.tiff``.
    overwrite : bool
        Replace an existing file (keyword).
    nodata : float
        Nodata value recorded in the file.
    tags : dict, optional
        Extra GeoTIFF metadata tags (e.g. ``{"units": "km_per_km2",
        "radius_m": "500"}``).

    Raises
    ------
    OutputError
        Wrong extension or shape, existing file without ``overwrite``,
        missing directory, or a failed write.
    """
    path = os.fspath(path)
    ext = os.path.splitext(path)[1].lower()
    if ext not in (".tif", ".tiff"):
        raise OutputError(f"{path}: density grids are written as GeoTIFF; use a .tif name")
    data = np.asarray(array, dtype=np.float32)
    if data.shape != georef.shape:
        raise OutputError(f"{path}: array shape {data.shape} does not match the grid {georef.shape}")
    if os.path.exists(path) and not overwrite:
        raise OutputError(f"{path}: file exists (pass overwrite=True to replace it)")
    parent = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(parent):
        raise OutputError(f"{path}: directory {parent} does not exist")
    data = np.where(np.isfinite(data), data, np.float32(nodata)).astype(np.float32)
    try:
        import rasterio
        from rasterio.crs import CRS as RioCRS
    except ImportError as exc:  # pragma: no cover - a core dependency
        raise OutputError(f"{path}: rasterio is needed to write GeoTIFF") from exc
    try:
        with replaced_atomically(path, suffix=".tif") as tmp:
            profile = {
                "driver": "GTiff",
                "height": data.shape[0],
                "width": data.shape[1],
                "count": 1,
                "dtype": "float32",
                "transform": georef.transform,
                "crs": None if georef.crs is None else RioCRS.from_wkt(georef.crs.to_wkt()),
                "nodata": float(nodata),
                "compress": "deflate",
                "predictor": 3,
            }
            if data.shape[0] >= 256 and data.shape[1] >= 256:
                profile.update(tiled=True, blockxsize=256, blockysize=256)
            with rasterio.open(tmp, "w", **profile) as dst:
                dst.write(data, 1)
                if tags:
                    dst.update_tags(**{str(k): str(v) for k, v in tags.items()})
    except OutputError:
        raise
    except Exception as exc:
        msg = " ".join(str(exc).split()) or type(exc).__name__
        raise OutputError(f"{path}: cannot write GeoTIFF ({msg})") from exc
