"""Georeferencing of a raster grid: affine transform, CRS and shape.

The single place where array indices become map coordinates.

Conventions
-----------
* Arrays are indexed ``[row, col]``; row 0 is the first row stored in the
  file (the top row for a usual north-up raster).
* The affine transform maps *pixel corners*: ``transform @ (col, row)`` is
  the upper-left corner of pixel ``(row, col)`` (OGC GeoTIFF, PixelIsArea,
  as rasterio reports it).
* Contour tracers and filters work on *pixel centres*: the value ``a[r, c]``
  is taken to sit at fractional index ``(r, c)``.  The centre of pixel
  ``(r, c)`` is at ``transform @ (c + 0.5, r + 0.5)``.

:meth:`GeoRef.pixel_to_map` applies both the axis swap and the half-pixel
shift; nothing else in the package should.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
from affine import Affine
from pyproj import CRS, Geod

from .errors import InputError


@dataclass(frozen=True)
class GeoRef:
    """Georeferencing of a ``(height, width)`` raster grid.

    Parameters
    ----------
    transform : affine.Affine
        Pixel-corner affine transform (column, row) -> (x, y).
    crs : pyproj.CRS or None
        Coordinate reference system of the map coordinates, or None for a
        raster processed in plain pixel coordinates.
    height, width : int
        Grid shape in pixels.
    """

    transform: Affine
    crs: CRS | None
    height: int
    width: int
    _cache: dict = field(default_factory=dict, compare=False, repr=False, hash=False)

    # ------------------------------------------------------------------ build
    @classmethod
    def from_rasterio(cls, transform: Affine, crs, height: int, width: int) -> "GeoRef":
        """Build from a rasterio transform and CRS (``rasterio.crs.CRS`` or None)."""
        pcrs = None if crs is None else CRS.from_user_input(crs.to_wkt() if hasattr(crs, "to_wkt") else crs)
        return cls(Affine(*tuple(transform)[:6]), pcrs, int(height), int(width))

    @classmethod
    def pixel_grid(cls, height: int, width: int) -> "GeoRef":
        """Plain pixel coordinates: x = column, y = -row, no CRS, 1 unit = 1 pixel."""
        return cls(Affine(1.0, 0.0, 0.0, 0.0, -1.0, 0.0), None, int(height), int(width))

    @property
    def shape(self) -> tuple[int, int]:
        return (self.height, self.width)

    # -------------------------------------------------------------- geometry
    @property
    def is_rectilinear(self) -> bool:
        """True when the transform has no rotation or shear terms."""
        return self.transform.b == 0.0 and self.transform.d == 0.0

    @property
    def is_orthogonal(self) -> bool:
        """True when pixel axes are perpendicular (rotation allowed, no shear)."""
        t = self.transform
        dot = t.a * t.b + t.d * t.e
        scale = math.hypot(t.a, t.d) * math.hypot(t.b, t.e)
        return scale > 0 and abs(dot) <= 1e-9 * scale

    @property
    def pixel_size(self) -> tuple[float, float]:
        """Pixel size ``(along columns, along rows)`` in CRS units, positive."""
        t = self.transform
        return (math.hypot(t.a, t.d), math.hypot(t.b, t.e))

    @cached_property
    def is_geographic(self) -> bool:
        return self.crs is not None and self.crs.is_geographic

    @cached_property
    def linear_unit_m(self) -> float:
        """Metres per CRS unit for a projected CRS (1.0 without a CRS)."""
        if self.crs is None or self.crs.is_geographic:
            return 1.0
        factor = None
        try:
            factor = self.crs.axis_info[0].unit_conversion_factor
        except (IndexError, AttributeError):
            factor = None
        return float(factor) if factor else 1.0

    @cached_property
    def geod(self) -> Geod:
        """Ellipsoid of the CRS (WGS84 when the CRS has none)."""
        if self.crs is not None:
            try:
                return self.crs.get_geod() or Geod(ellps="WGS84")
            except Exception:  # pragma: no cover - exotic CRS
                pass
        return Geod(ellps="WGS84")

    def pixel_size_m(self, rows: slice | None = None) -> tuple[float, float]:
        """Ground size of a pixel in metres, ``(along columns, along rows)``.

        For a projected CRS this is the pixel size times the CRS's linear
        unit.  For a geographic CRS it is the geodesic length of one pixel
        step on the ellipsoid at the latitude of the grid centre (or of the
        middle of ``rows`` when given), so the east-west size shrinks with
        the cosine of latitude.  Without a CRS, one pixel counts as one unit.
        """
        px, py = self.pixel_size
        if not self.is_geographic:
            u = self.linear_unit_m
            return (px * u, py * u)
        r0 = 0 if rows is None else (rows.start or 0)
        r1 = self.height if rows is None else (rows.stop if rows.stop is not None else self.height)
        t = self.transform
        lon, lat = t @ (self.width / 2.0, (r0 + r1) / 2.0)
        lon1, lat1 = t @ (self.width / 2.0 + 1.0, (r0 + r1) / 2.0)
        lon2, lat2 = t @ (self.width / 2.0, (r0 + r1) / 2.0 + 1.0)
        g = self.geod
        _, _, dx = g.inv(lon, lat, lon1, lat1)
        _, _, dy = g.inv(lon, lat, lon2, lat2)
        return (float(dx), float(dy))

    # ----------------------------------------------------------- conversion
    def pixel_to_map(self, rows, cols) -> tuple[np.ndarray, np.ndarray]:
        """Map coordinates of fractional pixel-centre indices.

        Parameters
        ----------
        rows, cols : array_like
            Fractional row and column indices where integer values are pixel
            centres (the convention of ``skimage.measure.find_contours``).

        Returns
        -------
        x, y : ndarray of float64
            Map coordinates in the CRS.
        """
        r = np.asarray(rows, dtype=np.float64) + 0.5
        c = np.asarray(cols, dtype=np.float64) + 0.5
        t = self.transform
        x = t.a * c + t.b * r + t.c
        y = t.d * c + t.e * r + t.f
        return x, y

    def map_to_pixel(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Inverse of :meth:`pixel_to_map`: fractional (row, col) at pixel centres."""
        inv = ~self.transform
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        c = inv.a * x + inv.b * y + inv.c
        r = inv.d * x + inv.e * y + inv.f
        return r - 0.5, c - 0.5

    def window(self, row_off: int, col_off: int, height: int, width: int) -> "GeoRef":
        """Georeferencing of a sub-grid starting at ``(row_off, col_off)``."""
        t = self.transform @ Affine.translation(col_off, row_off)
        return GeoRef(t, self.crs, int(height), int(width))

    def check_usable(self, source: str, *, allow_rotation: bool = False) -> None:
        """Raise :class:`InputError` when the transform cannot be filtered on.

        A sheared grid (pixel axes not perpendicular) is always refused; a
        rotated one only when ``allow_rotation`` is False.
        """
        t = self.transform
        if t.a * t.e - t.b * t.d == 0:
            raise InputError(f"{source}: geotransform is degenerate (zero pixel size)")
        if not self.is_rectilinear:
            if not self.is_orthogonal:
                raise InputError(
                    f"{source}: geotransform is sheared; pixel axes are not perpendicular, so "
                    "distances on the grid are distorted (warp it to a north-up grid first, "
                    "for example with rasterio.warp)"
                )
            if not allow_rotation:
                raise InputError(
                    f"{source}: geotransform is rotated; pass --allow-rotation to filter on the "
                    "rotated grid and map lines through the full transform"
                )
