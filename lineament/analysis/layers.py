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
from ..geodesy import measure_lines

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


def _as_array(geoms) -> np.ndarray:
    arr = np.asarray(list(geoms) if not isinstance(geoms, np.ndarray) else geoms, dtype=object)
    return arr.reshape(-1)


def _measures(geoms: Sequence[LineString], crs: CRS | None) -> dict[str, np.ndarray] | None:
    arr = _as_array(geoms)
    if arr.size == 0:
        return None
    coords, idx = shapely.get_coordinates(arr, return_index=True)
    counts = np.bincount(idx, minlength=arr.size)
    if (counts < 2).any():
        raise InputError("line with fewer than two vertices")
    splits = np.cumsum(counts)[:-1]
    return measure_lines(np.split(coords[:, 0], splits), np.split(coords[:, 1], splits), crs)


def ground_lengths_m(geoms: Sequence[LineString], crs: CRS | None) -> np.ndarray:
    """Ground length of each line in metres, as ``lineament extract`` measures ``length_m``.

    Geodesic on the CRS's ellipsoid for geographic and projected CRSs alike
    (:func:`lineament.geodesy.measure_lines`, Karney 2013); planar, in CRS
    units, without a CRS.

    Parameters
    ----------
    geoms : sequence of LineString, length N
    crs : pyproj.CRS or None

    Returns
    -------
    ndarray of float64, shape (N,)
    """
    m = _measures(geoms, crs)
    return np.zeros(0, dtype=np.float64) if m is None else m["length_m"]


def azimuths_deg(geoms: Sequence[LineString], crs: CRS | None) -> np.ndarray:
    """Overall direction of each line in [0, 180), as ``lineament extract`` measures ``azimuth_deg``.

    Clockwise from true north: the geodesic forward azimuth of the line's
    principal axis (:func:`lineament.geodesy.measure_lines`); grid azimuth
    without a CRS.  Lines whose first and last vertices coincide (closed
    rings) have no overall direction and get NaN.

    Returns
    -------
    ndarray of float64, shape (N,)
    """
    m = _measures(geoms, crs)
    if m is None:
        return np.zeros(0, dtype=np.float64)
    arr = _as_array(geoms)
    first = shapely.get_coordinates(shapely.get_point(arr, 0))
    last = shapely.get_coordinates(shapely.get_point(arr, -1))
    out = m["azimuth_deg"].copy()
    out[(first == last).all(axis=1)] = np.nan
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
