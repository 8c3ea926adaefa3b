"""Georeferencing: pixel-centre convention, pixel sizes, transform checks."""

from __future__ import annotations

import numpy as np
import pytest
import rasterio.transform
from affine import Affine
from pyproj import CRS, Geod

from conftest import utm_georef
from lineament.errors import InputError
from lineament.georef import GeoRef


def test_pixel_to_map_matches_rasterio_centre_convention():
    # Reference: rasterio.transform.xy(..., offset="center") gives pixel-centre coordinates
    # (OGC GeoTIFF PixelIsArea).
    g = utm_georef(50, 70, pixel=7.5)
    rows = np.array([0, 3, 49, 10])
    cols = np.array([0, 69, 5, 33])
    xs, ys = rasterio.transform.xy(g.transform, rows, cols, offset="center")
    x, y = g.pixel_to_map(rows, cols)
    np.testing.assert_allclose(x, xs)
    np.testing.assert_allclose(y, ys)
    # fractional indices: half a pixel up-left of a centre is the pixel's corner
    cx, cy = g.pixel_to_map(-0.5, -0.5)
    assert (cx, cy) == (g.transform.c, g.transform.f)


def test_map_to_pixel_inverts_pixel_to_map():
    g = GeoRef(Affine(3.0, 0.5, 100.0, 0.5, -3.0, 900.0), CRS.from_epsg(32633), 20, 20)
    r = np.array([0.25, 7.5, 13.0])
    c = np.array([1.0, 2.75, 19.0])
    rr, cc = g.map_to_pixel(*g.pixel_to_map(r, c))
    np.testing.assert_allclose(rr, r, atol=1e-9)
    np.testing.assert_allclose(cc, c, atol=1e-9)


def test_pixel_size_geographic_follows_cosine_of_latitude():
    # Reference: pyproj.Geod on WGS84; east-west pixel size shrinks with latitude.
    arcsec = 1.0 / 3600.0
    for lat in (0.0, 45.0, 60.0):
        g = GeoRef(Affine(arcsec, 0, 10.0, 0, -arcsec, lat + 0.05), CRS.from_epsg(4326), 360, 360)
        dx, dy = g.pixel_size_m()
        lat_c = lat + 0.05 - 180 * arcsec
        _, _, ref_dx = Geod(ellps="WGS84").inv(10.05, lat_c, 10.05 + arcsec, lat_c)
        assert dx == pytest.approx(ref_dx, rel=1e-3)
        assert dy == pytest.approx(30.87, rel=0.01)  # one arc-second of latitude is about 30.9 m (from memory)


def test_pixel_size_uses_linear_unit_of_crs():
    # EPSG:2277 (Texas Central, US survey feet): 1 ftUS = 1200/3937 m (NIST definition).
    g = GeoRef(Affine(10.0, 0, 2e6, 0, -10.0, 1e7), CRS.from_epsg(2277), 10, 10)
    assert g.pixel_size_m()[0] == pytest.approx(10 * 1200 / 3937, rel=1e-9)


def test_rotated_and_sheared_transforms():
    rot = Affine.translation(500000, 5200000) @ Affine.rotation(20) @ Affine.scale(10, -10)
    g = GeoRef(rot, CRS.from_epsg(32633), 10, 10)
    assert not g.is_rectilinear and g.is_orthogonal
    assert g.pixel_size == pytest.approx((10.0, 10.0))
    with pytest.raises(InputError, match="rotated"):
        g.check_usable("x.tif")
    g.check_usable("x.tif", allow_rotation=True)
    shear = GeoRef(Affine(10, 3, 0, 0, -10, 0), CRS.from_epsg(32633), 10, 10)
    with pytest.raises(InputError, match="sheared"):
        shear.check_usable("x.tif", allow_rotation=True)


def test_window_shifts_origin():
    g = utm_georef(100, 100)
    w = g.window(10, 20, 30, 40)
    assert w.shape == (30, 40)
    np.testing.assert_allclose(w.pixel_to_map(0, 0), g.pixel_to_map(10, 20))
