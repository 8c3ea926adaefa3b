"""End-to-end extraction on synthetic rasters with known answers."""

from __future__ import annotations

import json

import fiona
import numpy as np
import pytest
import shapely
from affine import Affine
from pyproj import CRS, Transformer
from shapely.geometry import LineString, shape

from conftest import step_image, utm_georef, write_geotiff
from lineament import ExtractionSettings, GeoRef, extract_array, extract_file, write_lines
from lineament.errors import SettingsError
from lineament.synthetic import fractal_terrain


def _scarp_scene(n=200, angle=30.0, offset_px=0.4, h=15.0):
    g = utm_georef(n, n, pixel=10.0)
    z = 300.0 + step_image(n, n, angle_deg=angle, offset_px=offset_px, height_step=h, blur_px=0.8)
    # the edge in pixel-centre indices: (c - cc) cos a - (r - rc) sin a = offset
    a = np.radians(angle)
    cc = rc = (n - 1) / 2.0
    t = np.array([-3.0 * n, 3.0 * n])  # beyond the raster on both sides
    # a point on the edge and the edge direction (perpendicular to the normal (cos a, -sin a))
    r0, c0 = rc - offset_px * np.sin(a), cc + offset_px * np.cos(a)
    rows = r0 + t * np.cos(a)
    cols = c0 + t * np.sin(a)
    x, y = g.pixel_to_map(rows, cols)
    return z, g, LineString(np.column_stack((x, y)))


def _vertex_distances(lines, truth: LineString) -> np.ndarray:
    pts = shapely.points(np.concatenate([np.asarray(line.coords) for line in lines]))
    return shapely.distance(pts, truth)


def test_scarp_round_trip_within_half_a_pixel(tmp_path):
    z, g, truth = _scarp_scene()
    tif = write_geotiff(tmp_path / "scarp.tif", z, g)
    result = extract_file(tif, ExtractionSettings(scales="20,40"))
    assert result.georef.crs.equals(CRS.from_epsg(32633))
    lines = [ln.geometry for ln in result.lines]
    assert lines, "the scarp was not found"
    # every vertex of every line lies on the planted scarp, within half a pixel (5 m)
    assert _vertex_distances(lines, truth).max() < 5.0
    for ln in result.lines:
        # strength is the height of the step (15 m) reduced by the blur (analytic, see crossings)
        assert ln.strength == pytest.approx(15.0 * (ln.scale_px / np.hypot(ln.scale_px, 0.8)) ** 3, rel=0.1)
        # the edge runs along (row, col) direction (cos a, sin a): map azimuth 180 - a (analytic)
        assert ln.azimuth_grid_deg == pytest.approx(150.0, abs=0.5)

    # the same through a GeoJSON file (RFC 7946: WGS84 longitude, latitude), back through pyproj
    out = tmp_path / "lines.geojson"
    write_lines(result, out)
    doc = json.loads(out.read_text())
    assert "crs" not in doc  # RFC 7946 section 4: no crs member
    to_utm = Transformer.from_crs(4326, 32633, always_xy=True)
    back = []
    for feat in doc["features"]:
        lon, lat = np.asarray(feat["geometry"]["coordinates"]).T
        assert (np.abs(lon) <= 180).all() and (np.abs(lat) <= 90).all()
        x, y = to_utm.transform(lon, lat)
        back.append(LineString(np.column_stack((x, y))))
    assert _vertex_distances(back, truth).max() < 5.0


def test_gpkg_keeps_crs_attributes_and_run_metadata(tmp_path, scarp_raster):
    path, g = scarp_raster
    result = extract_file(path)
    out = tmp_path / "scarp.gpkg"
    write_lines(result, out)
    with fiona.open(out) as src:
        assert CRS.from_wkt(src.crs_wkt).equals(CRS.from_epsg(32633))
        feats = list(src)
        meta = json.loads(src.tags()["lineament_run"])
    assert len(feats) == len(result.lines) > 0
    props = feats[0]["properties"]
    for key in ("scale_m", "scale_px", "operator", "strength", "strength_max", "length_m", "azimuth_deg",
                "source", "kind"):
        assert key in props
    assert props["source"] == "scarp.tif"
    assert props["length_m"] == pytest.approx(shape(feats[0]["geometry"]).length, rel=2e-3)  # UTM scale ~0.9996
    assert meta["version"] and meta["settings"]["operator"] == "log"
    edges = [s for s in meta["scales"] if s["kind"] == "edge"]
    assert len(edges) == 3 and all(s["high_threshold"] > 0 for s in meta["scales"])


def test_void_edges_produce_no_lines():
    # A flat plain with a rectangular nodata hole: only the hole's edge could produce crossings
    # if voids were filled with a constant; normalised convolution leaves none.
    n = 200
    g = utm_georef(n, n)
    z = np.full((n, n), 250.0, np.float32)
    z += (np.random.default_rng(1).normal(0, 0.2, (n, n))).astype(np.float32)
    valid = np.ones((n, n), bool)
    valid[70:130, 60:140] = False
    z[~valid] = -9999.0
    result = extract_array(z, g, valid=valid)
    assert result.lines == []
    # a scarp that runs into the void is kept away from it by 3 sigma
    z2 = np.where(valid, z + step_image(n, n, angle_deg=90, offset_px=0.3, height_step=20, blur_px=1), -9999)
    result = extract_array(z2.astype(np.float32), g, ExtractionSettings(scales="20"), valid=valid)
    assert result.lines
    x, y = g.pixel_to_map(np.array([69.5, 129.5]), np.array([59.5, 139.5]))
    hole = shapely.box(min(x), min(y), max(x), max(y))
    for ln in result.lines:
        assert ln.geometry.distance(hole) >= 3 * 20.0 - 10.0  # 3 sigma, within one pixel


def test_featureless_terrain_is_quiet():
    # Gaussian random terrain with no planted features: default thresholds sit in the far tail
    # of the crossing-strength distribution, so at most 0.1 km of lines per km^2 are written.
    for seed in (11, 12):
        n = 768
        z = fractal_terrain((n, n), pixel_size_m=10.0, relief_m=30.0, seed=seed)
        z = z + np.random.default_rng(seed).normal(0, 0.3, z.shape).astype(np.float32)
        g = utm_georef(n, n)
        result = extract_array(z, g)
        area_km2 = (n * 10.0 / 1000.0) ** 2
        assert result.total_length_m / 1000.0 / area_km2 <= 0.1


def test_scaling_and_offset_do_not_change_geometry():
    # Invariance: the LoG is linear and thresholds follow the noise level, so multiplying the
    # values by c > 0 or adding a constant leaves the lines unchanged (common practice).
    n = 160
    g = utm_georef(n, n)
    z = fractal_terrain((n, n), pixel_size_m=10.0, relief_m=20.0, seed=5)
    z = z + step_image(n, n, angle_deg=50, offset_px=0.2, height_step=40, blur_px=1)
    base = extract_array(z, g, ExtractionSettings(scales="20,40"))
    for variant in (z * 3.0, z + 1000.0):
        other = extract_array(variant.astype(np.float32), g, ExtractionSettings(scales="20,40"))
        assert len(other.lines) == len(base.lines)
        for a, b in zip(base.lines, other.lines):
            np.testing.assert_allclose(np.asarray(a.geometry.coords), np.asarray(b.geometry.coords), atol=1e-3)


def test_geographic_raster_and_pixel_coordinates():
    n = 200
    arcsec = 1 / 3600
    g = GeoRef(Affine(arcsec, 0, 15.0, 0, -arcsec, 45.0), CRS.from_epsg(4326), n, n)
    z = step_image(n, n, angle_deg=0, offset_px=0.3, height_step=20, blur_px=1)
    result = extract_array(z, g, ExtractionSettings(scales="40,80"))
    assert result.lines and all(ln.azimuth_deg == pytest.approx(0, abs=1) or ln.azimuth_deg > 179
                                for ln in result.lines)
    with pytest.raises(SettingsError, match="px"):
        extract_array(z, GeoRef.pixel_grid(n, n), ExtractionSettings(scales="40"))
    plain = extract_array(z, GeoRef.pixel_grid(n, n), ExtractionSettings(scales="2px"))
    assert plain.lines


def test_dog_operator_finds_the_same_scarp():
    z, g, truth = _scarp_scene()
    result = extract_array(z, g, ExtractionSettings(scales="20,40", operator="dog"))
    assert result.lines and {ln.operator for ln in result.lines} == {"dog"}
    assert _vertex_distances([ln.geometry for ln in result.lines], truth).max() < 5.0


@pytest.mark.parametrize("crs,transform", [
    ("EPSG:32633", Affine(10.0, 0.0, 500000.0, 0.0, -10.0, 6600000.0)),             # UTM, 10 m
    ("EPSG:4326", Affine(1 / 3600, 0.0, 15.0, 0.0, -1 / 3600, 60.2)),               # 1 arc-second at 60 N
    ("EPSG:3857", Affine(10.0, 0.0, 1_600_000.0, 0.0, -10.0, 8_400_000.0)),         # Web Mercator near 60 N
    ("EPSG:2249", Affine(30.0, 0.0, 700_000.0, 0.0, -30.0, 3_000_000.0)),           # US survey feet
    ("EPSG:3031", Affine(100.0, 0.0, -20_000.0, 0.0, -100.0, 20_000.0)),            # polar stereographic
    (None, Affine(1.0, 0.0, 0.0, 0.0, -1.0, 0.0)),                                   # pixel grid
])
def test_pieces_dropped_early_are_shorter_than_written_lines_need(crs, transform):
    # A piece dropped right after tracing (pipeline._surely_shorter, with the raster's
    # geodesy.path_length_margin) must be one the writer would drop too: its written, geodesic
    # length (pyproj.Geod through vectorize.pieces_to_lines) is below the minimum whenever the early
    # test says so.  The margin is also tight: within 4 % of the largest ratio of written length to
    # path length among the pieces themselves.
    from lineament.geodesy import path_length_margin
    from lineament.pipeline import _surely_shorter
    from lineament.vectorize import pieces_to_lines

    g = GeoRef.from_rasterio(transform, None if crs is None else CRS.from_user_input(crs), 400, 400)
    pixel_m = g.pixel_size_m()
    margin = path_length_margin(g, pixel_m)
    rng = np.random.default_rng(12)
    pieces = []
    for _ in range(300):
        n = int(rng.integers(2, 40))
        steps = rng.normal(size=(n - 1, 2)) * rng.uniform(0.2, 1.5)
        start = rng.uniform(20, 380, 2)
        path = np.vstack([start, start + np.cumsum(steps, axis=0)])
        pieces.append((path[:, 0], path[:, 1], np.ones(n, np.float32)))
    lines = pieces_to_lines(pieces, g, tolerance_m=0.5 * min(pixel_m), min_length_m=0.0,
                            attributes={"scale_m": 20.0, "scale_px": 2.0, "operator": "log", "kind": "edge",
                                        "source": "test"})
    assert len(lines) == len(pieces)  # none is degenerate here, so lines and pieces pair up in order
    dropped = 0
    worst = 0.0
    for (r, c, _), line in zip(pieces, lines):
        path_m = np.hypot(np.diff(c) * pixel_m[0], np.diff(r) * pixel_m[1]).sum()
        worst = max(worst, line.length_m / path_m)
        for need in np.array([20.0, 60.0, 160.0, 400.0]) * pixel_m[0] / 10.0:
            if _surely_shorter(r, c, pixel_m, need, margin):
                dropped += 1
                assert line.length_m < need
    assert dropped > 100  # the test exercises the early drop
    assert worst <= margin < 1.04 * worst


@pytest.mark.parametrize("z_factor", [1.0, 2.5, -1.0])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_centring_is_the_plain_formula(z_factor, dtype):
    # pipeline._centre skips the multiplication by a z factor of 1; every value, signed zeros and
    # infinities included, must still be numpy's (values - offset) * z_factor as float32, with 0 at
    # invalid cells.
    from lineament.pipeline import _centre

    values = np.array([[0.0, -0.0, 1e30, -np.inf], [np.inf, 3.25, -7.5e-3, 123456.789]], dtype)
    valid = np.array([[True, True, True, False], [True, True, False, True]])
    with np.errstate(invalid="ignore", over="ignore"):
        ref = ((values - 0.0) * z_factor).astype(np.float32)
        ref_off = ((values - 12.5) * z_factor).astype(np.float32)
    ref[~valid] = 0.0
    ref_off[~valid] = 0.0
    for offset, want in ((0.0, ref), (12.5, ref_off)):
        got = _centre(values, valid, offset, z_factor)
        assert got.dtype == np.float32
        np.testing.assert_array_equal(got, want)
        assert np.array_equal(np.signbit(got), np.signbit(want))


@pytest.mark.parametrize("edges", [(False, False, False, False), (True, False, True, False),
                                   (True, True, True, True), (False, True, False, True)])
@pytest.mark.parametrize("step", [1, 2, 4])
def test_usable_mask_without_voids_is_distance_to_raster_edges(edges, step):
    # pipeline._usable_mask without voids: a cell is usable when farther than the margin from each
    # raster edge among ``edges``, measured as scipy's Euclidean distance transform measures it on a
    # grid padded with a void row or column at those edges (the path with voids, _usable).
    from scipy import ndimage

    from lineament.pipeline import _usable_mask

    shape, pixel_m, margin = (37, 29), (10.0, 12.5), 40.0
    padded = np.pad(np.ones(shape, bool), 1, constant_values=True)
    top, bottom, left, right = edges
    if top:
        padded[0, :] = False
    if bottom:
        padded[-1, :] = False
    if left:
        padded[:, 0] = False
    if right:
        padded[:, -1] = False
    if padded.all():
        dist = np.full(shape, np.inf)
    else:
        dist = ndimage.distance_transform_edt(padded, sampling=(pixel_m[1], pixel_m[0]))[1:-1, 1:-1]
    got = _usable_mask(None, edges, shape, pixel_m, margin, step)
    np.testing.assert_array_equal(got, (dist > margin)[::step, ::step])


@pytest.mark.parametrize("threads", ["1", "3"])
def test_centring_in_bands_of_rows_is_the_plain_formula(monkeypatch, threads):
    # Large windows are centred in bands of rows on the kernel threads; the numbers must be those of
    # the one-array formula for any split.
    from lineament.pipeline import _centre

    monkeypatch.setenv("LINEAMENT_THREADS", threads)
    rng = np.random.default_rng(5)
    values = (rng.normal(size=(701, 409)) * 300 + 1200).astype(np.float32)
    valid = rng.random(values.shape) > 0.01
    values[~valid] = np.nan
    for z in (1.0, 0.3048):
        with np.errstate(invalid="ignore"):
            want = np.where(valid, (values - 1234.5) * z, 0).astype(np.float32)
        np.testing.assert_array_equal(_centre(values, valid, 1234.5, z), want)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
@pytest.mark.parametrize("z_factor", [1.0, 0.3048, -2.5, 1e30])
def test_span_from_extremes_is_numpys(dtype, z_factor):
    # pipeline._span takes the largest magnitude of (values - offset) * z from the two extreme
    # values; it must equal numpy's whole-array expression (overflow to inf included).
    from lineament.pipeline import _span

    rng = np.random.default_rng(11)
    for offset in (0.0, 1234.567, -1e20):
        values = (rng.normal(size=5001) * rng.uniform(1, 1e6)).astype(dtype)
        with np.errstate(invalid="ignore", over="ignore"):
            want = float(np.max(np.abs((values - offset) * z_factor)))
        got = _span(values, offset, z_factor)
        assert got == want or (np.isinf(got) and np.isinf(want))
