"""Lengths and azimuths against pyproj.Geod."""

from __future__ import annotations

import numpy as np
import pytest
from affine import Affine
from pyproj import CRS, Geod, Transformer

from conftest import utm_georef
from lineament.geodesy import fold_axial, line_measures
from lineament.georef import GeoRef


def test_fold_axial():
    np.testing.assert_allclose(fold_axial(np.array([-10.0, 0.0, 180.0, 190.0, 359.9])), [170, 0, 0, 10, 179.9])


def test_projected_lines_match_geod_inv():
    # Reference: pyproj.Geod.inv on the endpoints transformed to WGS84 (Karney 2013).
    g = utm_georef(100, 100)
    xs = [np.array([500000.0, 503000.0]), np.array([520000.0, 521000.0, 522000.0])]
    ys = [np.array([5200000.0, 5204000.0]), np.array([5150000.0, 5150000.0, 5150000.0])]
    m = line_measures(xs, ys, g)
    tr = Transformer.from_crs(32633, 4326, always_xy=True)
    geod = Geod(ellps="WGS84")
    for i, (x, y) in enumerate(zip(xs, ys)):
        lon, lat = tr.transform(x, y)
        az, _, _ = geod.inv(lon[0], lat[0], lon[-1], lat[-1])
        length = geod.line_length(lon, lat)
        assert m["length_m"][i] == pytest.approx(length, rel=1e-3)
        assert m["azimuth_deg"][i] == pytest.approx(az % 180.0, abs=0.1)
    # grid azimuth of the first line: atan2(3000, 4000) (analytic)
    assert m["azimuth_grid_deg"][0] == pytest.approx(np.degrees(np.arctan2(3, 4)), abs=1e-9)
    assert m["azimuth_grid_deg"][1] == pytest.approx(90.0, abs=1e-9)


def test_geographic_lines_are_geodesic():
    g = GeoRef(Affine(1 / 3600, 0, 10, 0, -1 / 3600, 61), CRS.from_epsg(4326), 100, 100)
    geod = Geod(ellps="WGS84")
    # vertices along one geodesic (pyproj.Geod.npts), so its overall direction is the end-point azimuth
    mid = geod.npts(10.0, 60.0, 10.4, 60.15, 3)
    lon = np.array([10.0] + [p[0] for p in mid] + [10.4])
    lat = np.array([60.0] + [p[1] for p in mid] + [60.15])
    m = line_measures([lon], [lat], g)
    assert m["length_m"][0] == pytest.approx(geod.line_length(lon, lat), rel=1e-9)
    az, _, _ = geod.inv(lon[0], lat[0], lon[-1], lat[-1])
    assert m["azimuth_deg"][0] == pytest.approx(az % 180, abs=0.01)
    assert np.isnan(m["azimuth_grid_deg"][0])


def test_without_crs_lengths_are_planar():
    g = GeoRef.pixel_grid(10, 10)
    m = line_measures([np.array([0.0, 3.0, 3.0])], [np.array([0.0, 4.0, 0.0])], g)
    assert m["length_m"][0] == pytest.approx(9.0)


def test_overall_direction_ignores_a_short_hook():
    # A 1000 m line running north-east with a 60 m hook at its end: the overall direction is that
    # of the long part (length-weighted axial mean of segment directions, Mardia and Jupp 2000),
    # where a first-to-last chord would swing by atan(60 / 1000) = 3.4 degrees (analytic).
    g = utm_georef(10, 10)
    d = 1000 / np.sqrt(2)
    x = np.array([500000.0, 500000.0 + d, 500000.0 + d + 60 / np.sqrt(2)])
    y = np.array([5200000.0, 5200000.0 + d, 5200000.0 + d - 60 / np.sqrt(2)])
    m = line_measures([x], [y], g)
    assert m["azimuth_grid_deg"][0] == pytest.approx(45.0, abs=0.5)
    chord = np.degrees(np.arctan2(x[-1] - x[0], y[-1] - y[0]))
    assert abs(chord - 45.0) > 3.0


def test_lonlat_transformers_are_kept_per_thread_and_crs():
    # geodesy._to_lonlat keeps one transformer per CRS and thread; the numbers are pyproj's own
    # (a transformer made for the call), for several CRSs in turn and from another thread.
    import threading

    from pyproj import CRS, Transformer

    from lineament.geodesy import _to_lonlat

    x = np.array([500_000.0, 512_345.6, 487_000.0])
    y = np.array([6_600_000.0, 6_612_000.0, 6_590_000.0])
    crss = [CRS.from_epsg(e) for e in (32633, 32632, 3035, 32633)]

    def check(out):
        for crs in crss:
            ref = Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(x, y)
            got = _to_lonlat(x, y, crs)
            out.append(np.array_equal(got[0], ref[0]) and np.array_equal(got[1], ref[1]))

    here, there = [], []
    check(here)
    t = threading.Thread(target=check, args=(there,))
    t.start()
    t.join()
    assert here == there == [True] * 4
