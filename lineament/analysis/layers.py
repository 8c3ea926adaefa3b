"""Reading line layers and measuring their lines on the ground.

Line layers are the lineament outputs of the extraction core (GeoPackage,
GeoJSON, Shapefile, FlatGeobuf) or any reference layer of LineStrings.
Everything here works on plain lists of :class:`shapely.LineString` plus a
:class:`pyproj.CRS` (or None when the layer has no CRS).

Axis order: coordinates are taken as ``(x, y)`` = ``(easting, northing)`` or
``(longitude, latitude)``, the order in which fiona/GDAL hand them out (and
the order RFC 7946 prescribes for GeoJSON).
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence

import numpy as np
import shapely
from pyproj import CRS, Geod, Transformer
from pyproj.crs import ProjectedCRS
from pyproj.crs.coordinate_operation import AzimuthalEquidistantConversion
from shapely.geometry import LineString, MultiLineString, shape

from ..errors import InputError

__all__ = [
    "read_lines",
    "ground_lengths_m",
    "azimuths_deg",
    "reproject_lines",
    "metric_crs_for",
    "crs_linear_unit_m",
]


# ---------------------------------------------------------------- reading
def read_lines(
    path: str | os.PathLike, *, layer: str | int | None = None
) -> tuple[list[LineString], list[dict], CRS | None]:
    """Read a line layer with fiona.

    Parameters
    ----------
    path : str or path-like
        Any vector file fiona can open (GeoPackage, GeoJSON, Shapefile,
        FlatGeobuf, ...).
    layer : str or int, optional
        Layer name or index for multi-layer files (GeoPackage); the first
        layer by default.

    Returns
    -------
    geoms : list of shapely.LineString
        One entry per line; MultiLineString features are exploded into their
        parts, each part keeping a copy of the feature's properties.  Features
        with a null or empty geometry are skipped.
    properties : list of dict
        Attribute dictionaries, parallel to ``geoms``.
    crs : pyproj.CRS or None
        The layer's CRS, or None when the file declares none.

    Raises
    ------
    InputError
        The file is missing or unreadable, or holds a non-line geometry.
    """
    name = os.fspath(path)
    if not os.path.exists(name):
        raise InputError(f"{name}: file not found")
    try:
        import fiona  # local import keeps module import light

        opts = {} if layer is None else {"layer": layer}
        with fiona.open(name, "r", **opts) as src:
            crs = _crs_from_fiona(src)
            geoms: list[LineString] = []
            props: list[dict] = []
            for i, feat in enumerate(src):
                geom_obj = feat.geometry
                if geom_obj is None:
                    continue
                geom = shape(geom_obj)
                if geom.is_empty:
                    continue
                attrs = dict(feat.properties or {})
                if isinstance(geom, LineString):
                    geoms.append(geom)
                    props.append(attrs)
                elif isinstance(geom, MultiLineString):
                    for part in geom.geoms:
                        if not part.is_empty:
                            geoms.append(part)
                            props.append(dict(attrs))
                else:
                    raise InputError(
                        f"{name}: feature {i} is a {geom.geom_type}; expected LineString or "
                        "MultiLineString geometries"
                    )
    except InputError:
        raise
    except Exception as exc:  # fiona/GDAL errors come in many classes
        msg = " ".join(str(exc).split()) or type(exc).__name__
        raise InputError(f"{name}: cannot read line layer ({msg})") from exc
    return geoms, props, crs


def _crs_from_fiona(src) -> CRS | None:
    crs = getattr(src, "crs", None)
    if not crs:
        return None
    wkt = crs.to_wkt() if hasattr(crs, "to_wkt") else src.crs_wkt
    if not wkt:
        return None
    return CRS.from_user_input(wkt)


# ---------------------------------------------------------------- measuring
def crs_linear_unit_m(crs: CRS | None) -> float:
    """Metres per horizontal CRS unit of a projected CRS (1.0 without a CRS).

    Raises
    ------
    InputError
        For a geographic CRS, whose unit is angular.
    """
    if crs is None:
        return 1.0
    if crs.is_geographic:
        raise InputError(f"{crs.name}: geographic CRS has no linear unit")
    try:
        factor = crs.axis_info[0].unit_conversion_factor
    except (IndexError, AttributeError):
        factor = None
    return float(factor) if factor else 1.0


def _degrees_per_unit(crs: CRS) -> float:
    """Degrees per axis unit of a geographic CRS (1.0 for degrees)."""
    try:
        rad = crs.axis_info[0].unit_conversion_factor
    except (IndexError, AttributeError):
        return 1.0
    if not rad or abs(rad - math.pi / 180.0) < 1e-15:
        return 1.0
    return float(rad) * 180.0 / math.pi


def _geod_of(crs: CRS) -> Geod:
    try:
        return crs.get_geod() or Geod(ellps="WGS84")
    except Exception:  # pragma: no cover - exotic CRS
        return Geod(ellps="WGS84")


def _as_array(geoms) -> np.ndarray:
    arr = np.asarray(list(geoms) if not isinstance(geoms, np.ndarray) else geoms, dtype=object)
    return arr.reshape(-1)


def ground_lengths_m(geoms: Sequence[LineString], crs: CRS | None) -> np.ndarray:
    """Ground length of each line in metres.

    Parameters
    ----------
    geoms : sequence of LineString, length N
    crs : pyproj.CRS or None
        Geographic CRS: geodesic length on the CRS's ellipsoid
        (:meth:`pyproj.Geod.inv` summed over the segments).  Projected CRS:
        planar length times the CRS's linear unit (grid length, which
        differs from ground length by the projection's scale factor).
        None: planar length, coordinates taken as metres.

    Returns
    -------
    ndarray of float64, shape (N,)
    """
    arr = _as_array(geoms)
    if arr.size == 0:
        return np.zeros(0, dtype=np.float64)
    if crs is None or not crs.is_geographic:
        return shapely.length(arr).astype(np.float64) * crs_linear_unit_m(crs)
    coords, idx = shapely.get_coordinates(arr, return_index=True)
    if len(coords) < 2:
        return np.zeros(arr.size, dtype=np.float64)
    coords = coords * _degrees_per_unit(crs)
    same = idx[1:] == idx[:-1]
    a, b = coords[:-1][same], coords[1:][same]
    _, _, dist = _geod_of(crs).inv(a[:, 0], a[:, 1], b[:, 0], b[:, 1])
    return np.bincount(idx[1:][same], weights=np.asarray(dist, dtype=np.float64), minlength=arr.size)


def _fold_axial(az: np.ndarray) -> np.ndarray:
    """Fold directions in degrees into [0, 180)."""
    out = np.mod(az, 180.0)
    out[out >= 180.0] = 0.0  # np.mod(-tiny, 180) rounds to 180.0
    return out


def azimuths_deg(geoms: Sequence[LineString], crs: CRS | None) -> np.ndarray:
    """Overall direction of each line, first to last vertex, in [0, 180).

    Clockwise from north.  For a geographic CRS this is the geodesic forward
    azimuth on the CRS's ellipsoid (:meth:`pyproj.Geod.inv`); otherwise the
    grid azimuth ``atan2(dx, dy)`` (the y axis taken as grid north).  Lines
    whose first and last vertices coincide (closed rings) have no direction
    and get NaN.

    Returns
    -------
    ndarray of float64, shape (N,)
    """
    arr = _as_array(geoms)
    if arr.size == 0:
        return np.zeros(0, dtype=np.float64)
    first = shapely.get_coordinates(shapely.get_point(arr, 0))
    last = shapely.get_coordinates(shapely.get_point(arr, -1))
    if len(first) != arr.size:
        raise InputError("azimuths_deg: empty line geometry")
    dx = last[:, 0] - first[:, 0]
    dy = last[:, 1] - first[:, 1]
    degenerate = (dx == 0) & (dy == 0)
    if crs is not None and crs.is_geographic:
        k = _degrees_per_unit(crs)
        az, _, _ = _geod_of(crs).inv(first[:, 0] * k, first[:, 1] * k, last[:, 0] * k, last[:, 1] * k)
        az = np.asarray(az, dtype=np.float64)
    else:
        az = np.degrees(np.arctan2(dx, dy))
    out = _fold_axial(az)
    out[degenerate] = np.nan
    return out


# ---------------------------------------------------------------- reprojecting
def reproject_lines(
    geoms: Sequence[LineString], src_crs: CRS, dst_crs: CRS, *, source: str = "lines"
) -> list[LineString]:
    """Transform lines between CRSs (pyproj Transformer, ``always_xy=True``).

    Vertices are transformed one by one; lines are not densified, so long
    segments stay straight in the target CRS.

    Parameters
    ----------
    geoms : sequence of LineString
    src_crs, dst_crs : pyproj.CRS or anything :meth:`pyproj.CRS.from_user_input` takes
    source : str
        Name used in error messages (usually the file name).

    Raises
    ------
    InputError
        A vertex cannot be transformed (outside the target CRS's domain).
    """
    arr = _as_array(geoms)
    src = CRS.from_user_input(src_crs)
    dst = CRS.from_user_input(dst_crs)
    if arr.size == 0 or src == dst:
        return list(arr)
    tr = Transformer.from_crs(src, dst, always_xy=True)

    out = shapely.transform(arr, lambda xy: np.column_stack(tr.transform(xy[:, 0], xy[:, 1])))
    coords = shapely.get_coordinates(out)
    bad = ~np.isfinite(coords).all(axis=1)
    if bad.any():
        raise InputError(
            f"{source}: {int(bad.sum())} vertices cannot be transformed from {src.name} to {dst.name}"
        )
    return list(out)


def metric_crs_for(geoms: Sequence[LineString], crs: CRS | None) -> CRS | None:
    """A CRS in metres suitable for measuring the given lines.

    * ``crs`` None: None (coordinates are taken as metres already).
    * Projected CRS in metres: ``crs`` itself.
    * Geographic CRS, or projected in another unit (feet): a local azimuthal
      equidistant CRS on the same datum, centred on the lines' extent, in
      metres.  Distances from the centre are true and distortion grows
      slowly away from it (Snyder 1987, Map Projections - A Working Manual,
      USGS Professional Paper 1395).

    Parameters
    ----------
    geoms : sequence of LineString, in ``crs``
    crs : pyproj.CRS or None

    Returns
    -------
    pyproj.CRS or None
    """
    if crs is None:
        return None
    if not crs.is_geographic and abs(crs_linear_unit_m(crs) - 1.0) < 1e-12:
        return crs
    arr = _as_array(geoms)
    coords = shapely.get_coordinates(arr) if arr.size else np.zeros((0, 2))
    geodetic = crs.geodetic_crs if crs.geodetic_crs is not None else CRS.from_epsg(4326)
    if len(coords) == 0:
        lon0, lat0 = 0.0, 0.0
    else:
        if crs.is_geographic:
            k = _degrees_per_unit(crs)
            lon, lat = coords[:, 0] * k, coords[:, 1] * k
        else:
            tr = Transformer.from_crs(crs, geodetic, always_xy=True)
            lon, lat = tr.transform(coords[:, 0], coords[:, 1])
            lon, lat = np.asarray(lon), np.asarray(lat)
        # circular mean of longitudes survives data straddling the antimeridian
        lam = np.radians(lon)
        lon0 = float(np.degrees(np.arctan2(np.sin(lam).mean(), np.cos(lam).mean())))
        lat0 = float((np.nanmin(lat) + np.nanmax(lat)) / 2.0)
    conv = AzimuthalEquidistantConversion(latitude_natural_origin=lat0, longitude_natural_origin=lon0)
    return ProjectedCRS(conversion=conv, geodetic_crs=geodetic, name=f"Local azimuthal equidistant ({lat0:.4f}, {lon0:.4f})")
