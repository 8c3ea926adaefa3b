"""Tests for lineament.analysis.density."""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from affine import Affine
from pyproj import CRS, Geod
from shapely.geometry import LineString

from lineament.analysis.density import (
    _rasterise_length,
    _segments,
    disk_kernel,
    grid_for_lines,
    intersection_density,
    line_density,
    line_intersections,
    write_density,
)
from lineament.errors import OutputError, SettingsError
from lineament.georef import GeoRef

UTM = CRS.from_epsg(32633)


def utm_grid(cell: float = 10.0, height: int = 300, width: int = 400) -> GeoRef:
    return GeoRef(Affine(cell, 0.0, 500000.0, 0.0, -cell, 4100000.0), UTM, height, width)


def random_lines(seed: int, n: int, xmin, ymin, xmax, ymax) -> list[LineString]:
    """Invented three-vertex lines with starts in the given box."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        p = rng.uniform((xmin, ymin), (xmax, ymax))
        a = rng.uniform(0, math.pi)
        length = rng.uniform(30, 400)
        q = p + length * np.array([math.sin(a), math.cos(a)])
        out.append(LineString([p, q, q + rng.normal(0, 40, 2)]))
    return out


def test_density_integrates_to_total_length():
    g = utm_grid()
    radius = 300.0
    # Lines kept more than the radius (plus their own extent) inside the grid.
    lines = random_lines(0, 150, 500000 + 900, 4100000 - 3000 + 900, 500000 + 4000 - 900, 4100000 - 900)
    dens = line_density(lines, g, radius_m=radius)
    assert dens.dtype == np.float32 and dens.shape == g.shape
    cell_km2 = 10.0 * 10.0 / 1e6
    # Reference: shapely's planar length (UTM, metres), in km.
    total_km = float(shapely.length(np.array(lines, dtype=object)).sum()) / 1000.0
    # Discrete footprint areas make the integral exact up to float32 round-off.
    assert float(dens.astype(np.float64).sum()) * cell_km2 == pytest.approx(total_km, rel=1e-5)


def test_density_of_one_long_line_matches_chord_formula():
    g = utm_grid(cell=5.0, height=400, width=400)
    y_line = 4100000.0 - 1000.0 + 2.5  # on a row of cell centres
    line = LineString([(499000.0, y_line), (503000.0, y_line)])
    radius = 250.0
    dens = line_density([line], g, radius_m=radius)
    for offset in (0.0, 100.0, 200.0):
        row = int(round((4100000.0 - 2.5 - (y_line - offset)) / 5.0))
        # Analytic: chord 2 sqrt(r^2 - d^2) of line inside a disc of area pi r^2, km/km^2.
        expected = 2.0 * math.sqrt(radius**2 - offset**2) / 1000.0 / (math.pi * radius**2 / 1e6)
        assert dens[row, 200] == pytest.approx(expected, rel=0.02)
    # The line extends beyond the grid: edge cells still see it (no edge fall-off).
    assert dens[row, 0] == pytest.approx(dens[row, 200], rel=1e-4)


def test_cell_lengths_are_exact():
    g = utm_grid(cell=10.0, height=60, width=80)
    lines = random_lines(4, 40, 500050, 4100000 - 550, 500750, 4100000 - 50)
    arr = np.array(lines, dtype=object)
    u0, v0, u1, v1, seg_len, _ = _segments(arr, g, 0, 0)
    grid = _rasterise_length(u0, v0, u1, v1, seg_len, g.height, g.width)
    rng = np.random.default_rng(0)
    for r, c in rng.integers(0, (g.height, g.width), (150, 2)):
        x0, y1 = g.transform.c + c * g.transform.a, g.transform.f + r * g.transform.e
        box = shapely.box(x0, y1 - 10.0, x0 + 10.0, y1)
        # Reference: shapely intersection of the lines with the cell square.
        assert grid[r, c] == pytest.approx(float(shapely.length(shapely.intersection(arr, box)).sum()), abs=1e-6)


def test_disk_kernel_area():
    k = disk_kernel(37.3, 37.3)
    # Analytic: area of a disc, pi r^2 in cells; anti-aliased rim keeps the error small.
    assert k.sum() == pytest.approx(math.pi * 37.3**2, rel=1e-3)
    e = disk_kernel(20.0, 8.0)
    # Analytic: area of an ellipse, pi a b.
    assert e.sum() == pytest.approx(math.pi * 20.0 * 8.0, rel=2e-3)
    assert e.shape == (17, 41)


def test_line_frequency_and_intersection_density_integrate_to_counts():
    g = utm_grid()
    x0, y0 = 500000.0 + 1000.0, 4100000.0 - 2500.0
    horizontal = [LineString([(x0, y0 + 300 * k), (x0 + 1500, y0 + 300 * k)]) for k in range(5)]
    vertical = [LineString([(x0 + 200 + 300 * k, y0 - 100), (x0 + 200 + 300 * k, y0 + 1400)]) for k in range(4)]
    lines = horizontal + vertical
    # Analytic: every one of 5 horizontal lines crosses every one of 4 vertical lines.
    pts = line_intersections(lines)
    assert len(pts) == 20
    # Reference: shapely finds the same crossing points.
    ref = shapely.get_coordinates(shapely.intersection(shapely.MultiLineString([g.coords for g in horizontal]),
                                                       shapely.MultiLineString([g.coords for g in vertical])))
    np.testing.assert_allclose(np.sort(pts, axis=0), np.sort(ref, axis=0))
    cell_km2 = 1e-4
    inter = intersection_density(lines, g, radius_m=200.0)
    assert float(inter.astype(np.float64).sum()) * cell_km2 == pytest.approx(20.0, rel=1e-5)
    freq = line_density(lines, g, radius_m=200.0, lengths_weight=False)
    assert float(freq.astype(np.float64).sum()) * cell_km2 == pytest.approx(9.0, rel=1e-5)


def test_geographic_grid_integrates_to_geodesic_length():
    wgs84 = CRS.from_epsg(4326)
    cell = 0.001
    g = GeoRef(Affine(cell, 0.0, 14.0, 0.0, -cell, 61.0), wgs84, 300, 400)
    line = LineString([(14.12, 60.75), (14.2, 60.8), (14.28, 60.84)])
    dens = line_density([line], g, radius_m=500.0)
    geod = Geod(ellps="WGS84")
    areas = np.array(
        [abs(geod.polygon_area_perimeter([14.0, 14.001, 14.001, 14.0], [61 - cell * r, 61 - cell * r, 61 - cell * (r + 1), 61 - cell * (r + 1)])[0]) for r in range(g.height)]
    ) / 1e6
    integral = float((dens.astype(np.float64) * areas[:, None]).sum())
    # Reference: pyproj.Geod line length (km) and cell areas on the ellipsoid.
    expected = geod.line_length([14.12, 14.2, 14.28], [60.75, 60.8, 60.84]) / 1000.0
    assert integral == pytest.approx(expected, rel=1e-4)


def test_lines_in_another_crs_are_reprojected():
    g = utm_grid()
    lines = random_lines(9, 30, 500000 + 900, 4100000 - 2100, 500000 + 3100, 4100000 - 900)
    from lineament.analysis.layers import reproject_lines

    lonlat = reproject_lines(lines, UTM, CRS.from_epsg(4326))
    a = line_density(lines, g, radius_m=200.0)
    b = line_density(lonlat, g, radius_m=200.0, crs=CRS.from_epsg(4326))
    np.testing.assert_allclose(a, b, atol=1e-4 * float(a.max()))


def test_grid_for_lines_covers_them():
    lines = random_lines(2, 10, 1000, 2000, 3000, 4000)
    g = grid_for_lines(lines, UTM, cell_size_m=25.0, margin_m=100.0)
    xmin, ymin, xmax, ymax = shapely.total_bounds(np.array(lines, dtype=object))
    left, top = g.transform.c, g.transform.f
    assert left <= xmin - 100.0 and top >= ymax + 100.0
    assert left + 25.0 * g.width >= xmax + 100.0 and top - 25.0 * g.height <= ymin - 100.0
    assert left % 25.0 == 0.0
    with pytest.raises(SettingsError, match="cell_size_m"):
        grid_for_lines(lines, UTM, cell_size_m=0.0)


def test_write_density_round_trip(tmp_path):
    rasterio = pytest.importorskip("rasterio")
    g = utm_grid(height=40, width=50)
    data = np.linspace(0, 3, 2000, dtype=np.float32).reshape(40, 50)
    data[0, 0] = np.nan
    path = tmp_path / "density.tif"
    write_density(data, g, path, tags={"units": "km_per_km2"})
    with rasterio.open(path) as src:
        # OGC GeoTIFF: CRS and transform as written; float32, nodata recorded.
        assert CRS.from_wkt(src.crs.to_wkt()) == UTM
        assert tuple(src.transform)[:6] == tuple(g.transform)[:6]
        assert src.dtypes[0] == "float32"
        assert src.nodata == -9999.0
        out = src.read(1)
        assert src.tags()["units"] == "km_per_km2"
    assert out[0, 0] == -9999.0
    np.testing.assert_array_equal(out.ravel()[1:], data.ravel()[1:])
    with pytest.raises(OutputError, match="exists"):
        write_density(data, g, path)
    write_density(data * 2, g, path, overwrite=True)
    with rasterio.open(path) as src:
        assert src.read(1)[5, 5] == pytest.approx(float(data[5, 5] * 2))
    assert [p.name for p in tmp_path.iterdir()] == ["density.tif"]
    with pytest.raises(OutputError, match="GeoTIFF"):
        write_density(data, g, tmp_path / "density.png")
    with pytest.raises(OutputError, match="shape"):
        write_density(data[:10], g, tmp_path / "other.tif")


def test_bad_radius_is_a_settings_error():
    with pytest.raises(SettingsError, match="radius_m"):
        line_density([], utm_grid(), radius_m=-1.0)
    assert not line_density([], utm_grid(), radius_m=50.0).any()
