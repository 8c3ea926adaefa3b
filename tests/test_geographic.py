"""Geographic rasters, true-north azimuths, geodesic lengths, meridian convergence."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from affine import Affine
from pyproj import CRS, Geod, Proj, Transformer
from scipy.special import ndtr

import lineament.pipeline as pipeline
from lineament import ExtractionSettings, GeoRef, extract_array
from lineament.errors import InputError
from lineament.geodesy import line_measures

WGS84 = CRS.from_epsg(4326)
UTM33 = CRS.from_epsg(32633)
GEOD = Geod(ellps="WGS84")


def _plant(georef: GeoRef, lon0: float, lat0: float, azimuth: float, length_m: float | None = None,
           height: float = 20.0, width_m: float = 20.0) -> np.ndarray:
    """A scarp along the geodesic through (lon0, lat0) at ``azimuth``, ``length_m`` long (None: unbounded).

    Distances are taken in an azimuthal equidistant projection centred on (lon0, lat0), where
    geodesics through the centre are straight lines at their true azimuth (Snyder 1987,
    "Map projections: a working manual", USGS PP 1395, azimuthal equidistant).  The offset tapers
    with a raised cosine over the last 10 % at each end; gentle hills and white noise of 0.3 m
    are added.
    """
    aeqd = CRS.from_proj4(f"+proj=aeqd +lat_0={lat0} +lon_0={lon0} +datum=WGS84 +units=m")
    rows, cols = np.mgrid[0:georef.height, 0:georef.width].astype(np.float64)
    x, y = georef.pixel_to_map(rows, cols)
    tr = Transformer.from_crs(georef.crs, aeqd, always_xy=True)
    ex, ny = tr.transform(x, y)
    a = np.radians(azimuth)
    along = ex * np.sin(a) + ny * np.cos(a)
    across = ex * np.cos(a) - ny * np.sin(a)
    taper = 1.0
    if length_m is not None:
        t = np.clip((length_m / 2 - np.abs(along)) / (0.1 * length_m), 0, 1)
        taper = 0.5 - 0.5 * np.cos(np.pi * t)
    # rolling terrain fixed on the ground (so two grids of one scene see the same hills) and
    # survey noise set the thresholds, as on a real DEM
    noise = 1.5 * np.sin(ex / 310.0 + 1.0) * np.cos(ny / 270.0) + 1.0 * np.sin((ex - 2 * ny) / 190.0)
    noise = noise + np.random.default_rng(7).normal(0.0, 0.3, rows.shape)
    return (100.0 + height * (ndtr(across / width_m) - 0.5) * taper + noise).astype(np.float32)


def _main_line(result):
    """The longest line at the finest scale (coarser scales round off the scarp's tapered ends)."""
    finest = min(ln.scale_m for ln in result.lines)
    return max((ln for ln in result.lines if ln.scale_m == finest), key=lambda ln: ln.length_m)


def test_scarp_at_60_degrees_latitude_on_a_one_arcsecond_grid():
    # Reference: the planted geodesic azimuth (pyproj.Geod / AEQD construction above).
    arcsec = 1.0 / 3600.0
    n_rows, n_cols = 360, 560
    lon0, lat0 = 10.0, 60.0
    g = GeoRef(Affine(arcsec, 0, lon0 - n_cols / 2 * arcsec, 0, -arcsec, lat0 + n_rows / 2 * arcsec),
               WGS84, n_rows, n_cols)
    assert g.pixel_size_m()[0] == pytest.approx(15.5, rel=0.01)  # 30.9 m * cos 60 (analytic)
    for azimuth in (35.0, 120.0):
        z = _plant(g, lon0, lat0, azimuth)
        line = _main_line(extract_array(z, g, ExtractionSettings(scales="40,80", features=("edges",))))
        assert line.azimuth_deg == pytest.approx(azimuth, abs=1.0)
        # position: the line's middle lies on the planted geodesic within one pixel (about 16 m)
        coords = np.asarray(line.geometry.coords)
        mid = coords[len(coords) // 2]
        fwd, _, dist = GEOD.inv(lon0, lat0, mid[0], mid[1])
        off = abs(dist * np.sin(np.radians(fwd - azimuth)))
        assert off < 16.0


def test_utm_and_geographic_give_the_same_ground_length_and_azimuth():
    lon0, lat0, azimuth = 15.6, 47.0, 58.0
    # UTM 33N grid, 15 m pixels, centred on the scarp
    x0, y0 = Transformer.from_crs(WGS84, UTM33, always_xy=True).transform(lon0, lat0)
    n = 480
    g_utm = GeoRef(Affine(15.0, 0, x0 - n / 2 * 15.0, 0, -15.0, y0 + n / 2 * 15.0), UTM33, n, n)
    # geographic grid of about the same ground resolution (0.7 arc-seconds east, 0.5 north)
    dlon, dlat = 0.7 / 3600, 0.5 / 3600
    g_geo = GeoRef(Affine(dlon, 0, lon0 - 520 / 2 * dlon, 0, -dlat, lat0 + 460 / 2 * dlat), WGS84, 460, 520)
    settings = ExtractionSettings(scales="30", features=("edges",))
    a = _main_line(extract_array(_plant(g_utm, lon0, lat0, azimuth), g_utm, settings))
    b = _main_line(extract_array(_plant(g_geo, lon0, lat0, azimuth), g_geo, settings))
    assert b.azimuth_deg == pytest.approx(a.azimuth_deg, abs=1.0)
    assert a.azimuth_deg == pytest.approx(azimuth, abs=1.0)
    # ground length of the part of each line within 2.5 km of the centre (a disc both grids cover)
    aeqd = CRS.from_proj4(f"+proj=aeqd +lat_0={lat0} +lon_0={lon0} +datum=WGS84 +units=m")
    disc = shapely.Point(0, 0).buffer(2500.0, 256)
    lengths = []
    for line, g in ((a, g_utm), (b, g_geo)):
        x, y = np.asarray(line.geometry.coords).T
        ex, ny = Transformer.from_crs(g.crs, aeqd, always_xy=True).transform(x, y)
        inside = shapely.LineString(np.column_stack((ex, ny))).intersection(disc)
        ix, iy = np.asarray(inside.coords).T
        back_x, back_y = Transformer.from_crs(aeqd, g.crs, always_xy=True).transform(ix, iy)
        lengths.append(line_measures([np.asarray(back_x)], [np.asarray(back_y)], g)["length_m"][0])
    assert lengths[0] == pytest.approx(5000.0, rel=0.01)
    assert lengths[1] == pytest.approx(lengths[0], rel=0.01)


def test_true_minus_grid_azimuth_is_the_meridian_convergence():
    # Reference: pyproj Proj.get_factors(...).meridian_convergence at the line's middle.
    lon0, lat0 = 17.8, 60.0  # about 2.8 degrees east of the zone's central meridian (15 E)
    x0, y0 = Transformer.from_crs(WGS84, UTM33, always_xy=True).transform(lon0, lat0)
    n = 400
    g = GeoRef(Affine(15.0, 0, x0 - n / 2 * 15.0, 0, -15.0, y0 + n / 2 * 15.0), UTM33, n, n)
    line = _main_line(extract_array(_plant(g, lon0, lat0, 20.0), g,
                                    ExtractionSettings(scales="30", features=("edges",))))
    coords = np.asarray(line.geometry.coords)
    lon, lat = Transformer.from_crs(UTM33, WGS84, always_xy=True).transform(*coords[len(coords) // 2])
    convergence = Proj(UTM33).get_factors(lon, lat).meridian_convergence
    assert abs(convergence) > 2.0
    assert line.azimuth_deg - line.azimuth_grid_deg == pytest.approx(convergence, abs=0.05)


def test_rows_running_south_to_north_give_the_same_lines():
    # A north-up raster stored bottom row first (positive y pixel size) is the same ground.
    n = 200
    g = GeoRef(Affine(10, 0, 500000, 0, -10, 5202000), UTM33, n, n)
    lon0, lat0 = Transformer.from_crs(UTM33, WGS84, always_xy=True).transform(501000, 5201000)
    z = _plant(g, lon0, lat0, 70.0, 1500.0)
    flipped = GeoRef(Affine(10, 0, 500000, 0, 10, 5202000 - n * 10), UTM33, n, n)
    settings = ExtractionSettings(scales="20", features=("edges",))
    a = _main_line(extract_array(z, g, settings))
    b = _main_line(extract_array(z[::-1].copy(), flipped, settings))
    assert b.length_m == pytest.approx(a.length_m, rel=1e-3)
    assert b.azimuth_deg == pytest.approx(a.azimuth_deg, abs=0.05)
    assert a.geometry.hausdorff_distance(b.geometry) < 1.0


def test_latitude_bands_and_lines_across_their_seams(monkeypatch):
    # Bands are fixed by the grid: at 60 degrees, 1 % of pixel size change is about 0.33 degrees
    # of latitude (tan 60 * dlat = 0.01).
    arcsec = 1.0 / 3600.0
    g = GeoRef(Affine(arcsec, 0, 10.0, 0, -arcsec, 61.0), WGS84, 4000, 100)
    bands = pipeline.latitude_bands(g)
    assert bands[0][0] == 0 and bands[-1][1] == 4000 and len(bands) >= 3
    heights = [b1 - b0 for b0, b1 in bands]
    assert heights[0] == pytest.approx(0.01 / (np.tan(np.radians(61.0)) * np.radians(arcsec)), rel=0.05)
    # with narrow bands, a north-south scarp crossing several seams still comes out whole
    monkeypatch.setattr(pipeline, "LATITUDE_BAND_TOLERANCE", 0.0004)
    n_rows, n_cols = 420, 300
    lon0, lat0 = 10.0, 60.0
    g2 = GeoRef(Affine(arcsec, 0, lon0 - n_cols / 2 * arcsec, 0, -arcsec, lat0 + n_rows / 2 * arcsec),
                WGS84, n_rows, n_cols)
    assert len(pipeline.latitude_bands(g2, 0.0004)) >= 3
    z = _plant(g2, lon0, lat0, 2.0, 11000.0)
    result = extract_array(z, g2, ExtractionSettings(scales="40", features=("edges",)))
    long_lines = [ln for ln in result.lines if ln.length_m > 3000]
    assert len(long_lines) == 1


def test_polar_rasters_are_refused():
    g = GeoRef(Affine(0.01, 0, 0, 0, -0.01, 88.0), WGS84, 200, 200)
    with pytest.raises(InputError, match="polar stereographic"):
        extract_array(np.zeros((200, 200), np.float32), g)
