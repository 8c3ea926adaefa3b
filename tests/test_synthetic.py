"""Tests of lineament.synthetic and of the bundled sample rasters.

Reference sources are named beside each check.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from affine import Affine
from rasterio.transform import xy as rasterio_xy
from scipy import ndimage
from scipy.special import ndtr
from shapely.geometry import LineString, Point

from lineament.errors import SettingsError
from lineament.georef import GeoRef
from lineament.synthetic import (
    LUMINANCE_WEIGHTS,
    fields_image,
    fractal_terrain,
    plant_ridge,
    plant_scarp,
    plant_valley,
    void_mask,
)

SAMPLES = Path(__file__).resolve().parent.parent / "sample_rasters"


# ------------------------------------------------------------------ helpers
def pixel_centres(transform: Affine, shape):
    """Pixel-centre map coordinates from rasterio (OGC GeoTIFF PixelIsArea, offset='center')."""
    rows, cols = np.indices(shape)
    x, y = rasterio_xy(transform, rows.ravel(), cols.ravel(), offset="center")
    return np.asarray(x).reshape(shape), np.asarray(y).reshape(shape)


def radial_power_slope(z: np.ndarray) -> float:
    """Log-log slope of the radially averaged periodogram between 2/N and Nyquist.

    Periodogram |FFT|^2 averaged in 15 logarithmic wavenumber bins, fitted with
    numpy.polyfit (common practice for estimating a spectral exponent).
    """
    n = z.shape[0]
    power = np.abs(np.fft.fft2(z.astype(np.float64))) ** 2
    ky, kx = np.meshgrid(np.fft.fftfreq(n), np.fft.fftfreq(n), indexing="ij")
    k = np.hypot(kx, ky)
    edges = np.logspace(math.log10(2.0 / n), math.log10(0.5), 16)
    k_mean, p_mean = [], []
    for lo, hi in zip(edges[:-1], edges[1:]):
        sel = (k >= lo) & (k < hi)
        k_mean.append(k[sel].mean())
        p_mean.append(power[sel].mean())
    return float(np.polyfit(np.log10(k_mean), np.log10(p_mean), 1)[0])


def luminance(image: np.ndarray) -> np.ndarray:
    # Luma weights of ITU-R BT.601 (0.299, 0.587, 0.114).
    assert LUMINANCE_WEIGHTS == (0.299, 0.587, 0.114)
    return np.tensordot(np.asarray(LUMINANCE_WEIGHTS), image.astype(np.float64), axes=1)


def line_samples(line, transform: Affine, step_px: float = 1.0, keep: float = 0.8):
    """Fractional (row, col) of points every step along the middle `keep` of a line."""
    (x0, y0), (x1, y1) = line.start_xy, line.end_xy
    length_px = line.length_m / transform.a
    t = np.linspace(0.5 - keep / 2, 0.5 + keep / 2, max(int(length_px * keep / step_px), 2))
    x = x0 + t * (x1 - x0)
    y = y0 + t * (y1 - y0)
    # Inverse of a north-up transform: pixel corners at integer indices.
    col = (x - transform.c) / transform.a
    row = (y - transform.f) / transform.e
    return row - 0.5, col - 0.5


# ------------------------------------------------------------- fractal terrain
@pytest.mark.parametrize("beta", [2.0, 3.0, 3.6])
def test_fractal_spectrum_follows_requested_power_law(beta):
    # Analytic: spectral synthesis gives PSD proportional to |k|^-beta (Voss 1985;
    # Saupe 1988).  Slope of the radially averaged periodogram, averaged over 4
    # seeds; per-seed scatter seen at 256 x 256 is about +-0.08.
    slopes = [
        radial_power_slope(
            fractal_terrain((256, 256), pixel_size_m=10.0, relief_m=40.0, spectral_exponent=beta, seed=seed)
        )
        for seed in range(4)
    ]
    assert np.mean(slopes) == pytest.approx(-beta, abs=0.1)


def test_fractal_std_mean_dtype_and_shape():
    z = fractal_terrain((96, 160), pixel_size_m=5.0, relief_m=37.5, seed=1)
    assert z.dtype == np.float32
    assert z.shape == (96, 160)
    # Definition in the docstring: population standard deviation equals relief_m, mean 0.
    assert float(np.std(z, dtype=np.float64)) == pytest.approx(37.5, rel=1e-5)
    assert abs(float(np.mean(z, dtype=np.float64))) < 1e-4


def test_fractal_is_deterministic_per_seed():
    a = fractal_terrain((64, 64), pixel_size_m=10.0, relief_m=10.0, seed=42)
    b = fractal_terrain((64, 64), pixel_size_m=10.0, relief_m=10.0, seed=42)
    c = fractal_terrain((64, 64), pixel_size_m=10.0, relief_m=10.0, seed=43)
    np.testing.assert_array_equal(a, b)
    assert not np.allclose(a, c)


def test_fractal_max_wavelength_flattens_long_wavelengths():
    # With max_wavelength_m the PSD is constant for k < 1 / max_wavelength_m:
    # fitting only those wavenumbers gives a slope near 0 (analytic), while the
    # pure power law keeps -beta there.
    n, px = 256, 10.0
    ky, kx = np.meshgrid(np.fft.fftfreq(n, d=px), np.fft.fftfreq(n, d=px), indexing="ij")
    k = np.hypot(kx, ky)
    low = (k > 0) & (k < 1.0 / 800.0)
    slopes = {}
    for max_wl in (None, 800.0):
        logs_k, logs_p = [], []
        for seed in range(6):
            z = fractal_terrain((n, n), pixel_size_m=px, relief_m=1.0, max_wavelength_m=max_wl, seed=seed)
            power = np.abs(np.fft.fft2(z.astype(np.float64))) ** 2
            logs_k.append(np.log10(k[low]))
            logs_p.append(np.log10(power[low]))
        slopes[max_wl] = np.polyfit(np.concatenate(logs_k), np.concatenate(logs_p), 1)[0]
    assert abs(slopes[800.0]) < 0.5
    assert slopes[None] < -2.0


def test_fractal_rejects_bad_settings():
    with pytest.raises(SettingsError):
        fractal_terrain((1, 10), pixel_size_m=1.0, relief_m=1.0, seed=0)
    with pytest.raises(ValueError):  # SettingsError is also a ValueError
        fractal_terrain((10, 10), pixel_size_m=0.0, relief_m=1.0, seed=0)
    with pytest.raises(SettingsError):
        fractal_terrain((10, 10), pixel_size_m=1.0, relief_m=-1.0, seed=0)


# ------------------------------------------------------------ planted features
TRANSFORM = Affine(5.0, 0.0, 1000.0, 0.0, -5.0, 2000.0)  # 5 m pixels, north-up
SHAPE = (200, 200)  # covers x 1000..2000, y 1000..2000


def frame_from_shapely(start, end, shape=SHAPE, transform=TRANSFORM):
    """Along distance (shapely project), |d| (shapely distance) and side of each pixel centre."""
    x, y = pixel_centres(transform, shape)
    line = LineString([start, end])
    points = [Point(px, py) for px, py in zip(x.ravel(), y.ravel())]
    along = np.array([line.project(p) for p in points]).reshape(shape)
    dist = np.array([line.distance(p) for p in points]).reshape(shape)
    # Left of the direction start -> end: positive z of the 2-D cross product.
    side = np.sign((end[0] - start[0]) * (y - start[1]) - (end[1] - start[1]) * (x - start[0]))
    return along, side * dist, line.length


def test_scarp_profile_is_error_function_away_from_ends():
    start, end = (1150.0, 1250.0), (1850.0, 1750.0)
    offset, width = 12.0, 15.0
    dem = plant_scarp(np.zeros(SHAPE, np.float32), TRANSFORM, start, end, offset_m=offset, width_m=width)
    assert dem.dtype == np.float32
    along, d, length = frame_from_shapely(start, end)
    middle = (along > 0.2 * length) & (along < 0.8 * length)
    # Reference: offset * (Phi(d / w) - 0.5), Phi from scipy.special.ndtr.
    np.testing.assert_allclose(dem[middle], offset * (ndtr(d[middle] / width) - 0.5), atol=1e-5)
    # Far from the line the two sides sit at +-offset/2 (analytic limit of Phi).
    far = middle & (np.abs(d) > 6 * width)
    np.testing.assert_allclose(np.abs(dem[far]), offset / 2, atol=1e-4)
    assert np.all(dem[far & (d > 0)] > 0)


def test_scarp_end_taper_is_raised_cosine_and_zero_beyond_ends():
    start, end = (1150.0, 1250.0), (1850.0, 1750.0)
    offset, width, taper = 12.0, 15.0, 0.15
    dem = plant_scarp(np.zeros(SHAPE, np.float32), TRANSFORM, start, end, offset_m=offset, width_m=width)
    x, y = pixel_centres(TRANSFORM, SHAPE)
    ux, uy = (end[0] - start[0]), (end[1] - start[1])
    length = math.hypot(ux, uy)
    # Signed along-line position (may be negative beyond the start, unlike shapely's project).
    along = ((x - start[0]) * ux + (y - start[1]) * uy) / length
    outside = (along < -1e-9) | (along > length + 1e-9)
    assert np.all(dem[outside] == 0.0)
    _, d, _ = frame_from_shapely(start, end)
    in_taper = (along >= 0) & (along < taper * length)
    s = along[in_taper] / (taper * length)
    expected = offset * (ndtr(d[in_taper] / width) - 0.5) * (0.5 - 0.5 * np.cos(np.pi * s))
    np.testing.assert_allclose(dem[in_taper], expected, atol=1e-5)


def test_valley_depth_at_axis_and_ridge_is_its_negative():
    # Horizontal line through the centres of row 80 (x from rasterio offset='center').
    _, y_row = rasterio_xy(TRANSFORM, 80, 0, offset="center")
    start, end = (1050.0, y_row), (1950.0, y_row)
    depth, width = 7.0, 20.0
    zero = np.zeros(SHAPE, np.float32)
    valley = plant_valley(zero, TRANSFORM, start, end, depth_m=depth, width_m=width)
    ridge = plant_ridge(zero, TRANSFORM, start, end, height_m=depth, width_m=width)
    cols = slice(60, 140)  # well inside the untapered middle
    np.testing.assert_allclose(valley[80, cols], -depth, atol=1e-5)
    # Gaussian cross profile: -depth * exp(-d^2 / (2 w^2)); 4 rows = 20 m = 1 w away.
    np.testing.assert_allclose(valley[84, cols], -depth * math.exp(-0.5), atol=1e-5)
    np.testing.assert_allclose(valley[76, cols], -depth * math.exp(-0.5), atol=1e-5)
    np.testing.assert_array_equal(ridge, -valley)
    assert valley.min() == pytest.approx(-depth, abs=1e-5)


def test_pixel_centre_convention_puts_half_offset_level_on_the_line():
    # A north-running scarp along the centres of column 37: the raised (left = west)
    # side is columns < 37 and column 37 sits at the half-offset level (added 0).
    # Pixel centres from rasterio.transform.xy(offset='center'); the same column
    # from lineament.georef.GeoRef.map_to_pixel.
    x_centre, _ = rasterio_xy(TRANSFORM, 0, 37, offset="center")
    dem = plant_scarp(
        np.zeros(SHAPE, np.float32), TRANSFORM, (x_centre, 1000.0), (x_centre, 2000.0), offset_m=10.0, width_m=5.0
    )
    rows = slice(60, 140)
    np.testing.assert_allclose(dem[rows, 37], 0.0, atol=1e-6)
    assert np.all(dem[rows, 36] > 1.0) and np.all(dem[rows, 38] < -1.0)
    np.testing.assert_allclose(dem[rows, 36], -dem[rows, 38], atol=1e-6)
    _, col = GeoRef(TRANSFORM, None, *SHAPE).map_to_pixel(x_centre, 1500.0)
    assert float(col) == pytest.approx(37.0)
    # On the corner line between columns 36 and 37 the two columns are symmetric.
    x_corner, _ = rasterio_xy(TRANSFORM, 0, 37, offset="ul")
    dem = plant_scarp(
        np.zeros(SHAPE, np.float32), TRANSFORM, (x_corner, 1000.0), (x_corner, 2000.0), offset_m=10.0, width_m=5.0
    )
    # Analytic: d = +-2.5 m -> 10 * (Phi(+-0.5) - 0.5).
    np.testing.assert_allclose(dem[rows, 36], 10.0 * (ndtr(0.5) - 0.5), atol=1e-5)
    np.testing.assert_allclose(dem[rows, 37], 10.0 * (ndtr(-0.5) - 0.5), atol=1e-5)


def test_planting_does_not_modify_input_and_adds():
    base = fractal_terrain((64, 64), pixel_size_m=5.0, relief_m=3.0, seed=5)
    before = base.copy()
    t = Affine(5.0, 0.0, 0.0, 0.0, -5.0, 320.0)
    out = plant_valley(base, t, (20.0, 160.0), (300.0, 160.0), depth_m=4.0, width_m=10.0)
    np.testing.assert_array_equal(base, before)
    alone = plant_valley(np.zeros_like(base), t, (20.0, 160.0), (300.0, 160.0), depth_m=4.0, width_m=10.0)
    np.testing.assert_allclose(out, base + alone, atol=1e-5)


@pytest.mark.parametrize(
    "kwargs",
    [
        {"start_xy": (1500.0, 1500.0), "end_xy": (1500.0, 1500.0)},  # zero length
        {"width_m": 0.0},
        {"taper_fraction": 0.6},
        {"dem": np.zeros((2, 3, 4), np.float32)},
    ],
)
def test_plant_rejects_bad_settings(kwargs):
    args = {
        "dem": np.zeros(SHAPE, np.float32),
        "transform": TRANSFORM,
        "start_xy": (1100.0, 1100.0),
        "end_xy": (1900.0, 1900.0),
        "offset_m": 5.0,
        "width_m": 10.0,
    }
    args.update(kwargs)
    with pytest.raises(SettingsError):
        plant_scarp(**args)


# ----------------------------------------------------------------------- voids
def test_void_mask_blobs_are_separate_filled_and_deterministic():
    centres = [(40.0, 40.0), (40.0, 160.0), (150.0, 100.0)]
    mask = void_mask((200, 200), seed=7, centers_rc=centres, radius_px=(12.0, 20.0))
    again = void_mask((200, 200), seed=7, centers_rc=centres, radius_px=(12.0, 20.0))
    np.testing.assert_array_equal(mask, again)
    assert mask.dtype == bool
    labels, n = ndimage.label(mask)  # scipy.ndimage connected components
    assert n == 3
    assert len({labels[int(r), int(c)] for r, c in centres} - {0}) == 3
    np.testing.assert_array_equal(ndimage.binary_fill_holes(mask), mask)
    areas = ndimage.sum_labels(mask, labels, index=[1, 2, 3])
    # Mean radius 12-20 px: area between a disc of 0.35 * 12 and one of 2 * 20 px (loose).
    assert np.all(areas > math.pi * (0.35 * 12) ** 2) and np.all(areas < math.pi * 40**2)


def test_void_outlines_are_irregular():
    # Isoperimetric ratio P^2 / (4 pi A) is 1 for a disc and larger for any other
    # shape (analytic); perimeter from skimage.measure.perimeter.  Digital
    # discs (roughness 0) are the control.
    from skimage.measure import perimeter

    def ratio(roughness):
        m = void_mask((160, 160), seed=3, centers_rc=[(80.0, 80.0)], radius_px=(40.0, 40.0), roughness=roughness)
        return perimeter(m) ** 2 / (4 * math.pi * m.sum())

    assert ratio(0.4) > ratio(0.0) * 1.1


# ---------------------------------------------------------------------- fields
@pytest.fixture(scope="module")
def fields():
    image, lines = fields_image((384, 384), pixel_size_m=0.5, seed=11, upper_left_xy=(600000.0, 4100000.0))
    transform = Affine(0.5, 0.0, 600000.0, 0.0, -0.5, 4100000.0)
    return image, lines, transform


def test_fields_image_shape_dtype_and_determinism(fields):
    image, lines, _ = fields
    assert image.shape == (3, 384, 384) and image.dtype == np.uint8
    again, lines_again = fields_image((384, 384), pixel_size_m=0.5, seed=11, upper_left_xy=(600000.0, 4100000.0))
    np.testing.assert_array_equal(image, again)
    assert lines == lines_again
    assert {line.kind for line in lines} == {"field_boundary", "drain"}


def test_fields_truth_lines_lie_inside_the_image(fields):
    _, lines, transform = fields
    extent = (600000.0, 600000.0 + 192.0, 4100000.0 - 192.0, 4100000.0)
    for line in lines:
        for x, y in (line.start_xy, line.end_xy):
            assert extent[0] - 1e-6 <= x <= extent[1] + 1e-6 and extent[2] - 1e-6 <= y <= extent[3] + 1e-6
        assert line.length_m >= 10 * 0.5
        if line.kind == "drain":
            assert 1.5 * 0.5 <= line.width_m <= 3.0 * 0.5


def test_field_boundaries_lie_on_strong_luminance_gradients(fields):
    image, lines, transform = fields
    lum = luminance(image)
    grad = ndimage.gaussian_gradient_magnitude(lum, 1.0)  # scipy.ndimage reference
    # Analytic: a step of height h blurred by a Gaussian of sigma s has peak
    # gradient h / (s sqrt(2 pi)); the smallest step is 25 DN (min_contrast_dn),
    # s = sqrt(0.6^2 + 1^2) px (PSF and derivative filter).  Threshold: half of that.
    threshold = 0.5 * 25.0 / (math.sqrt(0.6**2 + 1.0) * math.sqrt(2 * math.pi))
    local_max = ndimage.maximum_filter(grad, size=3)
    boundaries = [line for line in lines if line.kind == "field_boundary"]
    assert len(boundaries) >= 5
    for line in boundaries:
        rows, cols = line_samples(line, transform)
        values = local_max[np.clip(np.rint(rows).astype(int), 0, 383), np.clip(np.rint(cols).astype(int), 0, 383)]
        assert np.mean(values > threshold) >= 0.9, line
    # Control: most of the image is not that strong, so the check is selective.
    assert np.mean(grad > threshold) < 0.25


def test_drains_are_darker_than_their_flanks(fields):
    image, lines, transform = fields
    lum = luminance(image)
    drains = [line for line in lines if line.kind == "drain"]
    assert len(drains) >= 3
    for line in drains:
        rows, cols = line_samples(line, transform)
        (x0, y0), (x1, y1) = line.start_xy, line.end_xy
        # Unit normal in (row, col): map (dx, dy) -> (col, row) = (dx, -dy) for north-up.
        nx, ny = -(y1 - y0) / line.length_m, (x1 - x0) / line.length_m
        n_col, n_row = nx, -ny
        offset_px = line.width_m / 0.5 / 2 + 3.0
        centre = ndimage.map_coordinates(lum, [rows, cols], order=1)
        left = ndimage.map_coordinates(
            lum, [rows + offset_px * n_row, cols + offset_px * n_col], order=1, mode="nearest"
        )
        right = ndimage.map_coordinates(
            lum, [rows - offset_px * n_row, cols - offset_px * n_col], order=1, mode="nearest"
        )
        inside = (left > 0) & (right > 0)
        darker = np.minimum(left, right)[inside] - centre[inside]
        assert np.median(darker) > 15.0, line


def test_fields_image_runs_fast_at_1024():
    import time

    t0 = time.perf_counter()
    image, _ = fields_image((1024, 1024), pixel_size_m=0.5, seed=2)
    assert image.shape == (3, 1024, 1024)
    assert time.perf_counter() - t0 < 5.0


# ------------------------------------------------------------- sample rasters
needs_samples = pytest.mark.skipif(
    not (SAMPLES / "dem_faulted.tif").exists(), reason="run python sample_rasters/make_samples.py first"
)


@needs_samples
def test_sample_dem_format():
    import rasterio
    from pyproj import CRS

    for name, shape in (("dem_faulted.tif", (1024, 1024)), ("dem_plain.tif", (512, 512))):
        with rasterio.open(SAMPLES / name) as src:
            # OGC GeoTIFF georeferencing as read by rasterio.
            assert CRS.from_user_input(src.crs.to_wkt()) == CRS.from_epsg(32633)
            assert src.shape == shape and src.count == 1 and src.dtypes[0] == "float32"
            assert src.transform.a == 10.0 and src.transform.e == -10.0
            assert src.nodata == -9999.0
            assert src.block_shapes[0] == (256, 256)
            structure = src.tags(ns="IMAGE_STRUCTURE")
            assert structure["COMPRESSION"] == "DEFLATE" and structure["PREDICTOR"] == "3"
            data = src.read(1, masked=True)
            assert float(data.min()) > 0.0
    total = sum(p.stat().st_size for p in SAMPLES.iterdir() if p.suffix in (".tif", ".gpkg"))
    assert total < 6e6


@needs_samples
def test_sample_dem_matches_its_script():
    # Regenerating the faulted DEM in memory gives the file's values exactly
    # (the bundled files are up to date with make_samples.py).
    import importlib.util

    import rasterio

    spec = importlib.util.spec_from_file_location("make_samples", SAMPLES / "make_samples.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    terrain, plain = module.terrain_pair()
    dem, truth, voids = module.faulted_dem(terrain)
    with rasterio.open(SAMPLES / "dem_faulted.tif") as src:
        np.testing.assert_array_equal(src.read(1), dem)
        assert np.array_equal(src.read_masks(1) == 0, voids)
    with rasterio.open(SAMPLES / "dem_plain.tif") as src:
        np.testing.assert_array_equal(src.read(1), module.plain_dem(plain))


@needs_samples
def test_sample_truth_layers():
    import fiona

    for name, kinds in (
        ("dem_faulted_truth.gpkg", {"scarp": 6, "valley": 4, "ridge": 2}),
        ("fields_truth.gpkg", None),
    ):
        path = SAMPLES / name
        # OGC GeoPackage 1.2, requirements 1-2: SQLite header and application_id "GPKG".
        head = path.read_bytes()[:72]
        assert head[:16] == b"SQLite format 3\x00"
        assert head[68:72] == b"GPKG"
        with fiona.open(path) as layer:
            assert layer.crs.to_epsg() == 32633
            features = list(layer)
        counts = {}
        for feature in features:
            props = feature["properties"]
            geom = LineString(feature["geometry"]["coordinates"])
            assert props["length_m"] == pytest.approx(geom.length, abs=1e-3)  # shapely length
            counts[props["kind"]] = counts.get(props["kind"], 0) + 1
        if kinds is not None:
            assert counts == kinds
        else:
            assert set(counts) == {"field_boundary", "drain"}


@needs_samples
def test_sample_fields_tiles_share_one_grid_and_lines_cross_seams():
    import fiona
    import rasterio
    from rasterio.enums import ColorInterp

    origins = {}
    for r in (0, 1):
        for c in (0, 1):
            with rasterio.open(SAMPLES / f"fields_r{r}c{c}.tif") as src:
                assert src.shape == (384, 384) and src.count == 3 and src.dtypes == ("uint8",) * 3
                assert src.colorinterp == (ColorInterp.red, ColorInterp.green, ColorInterp.blue)
                assert src.crs.to_epsg() == 32633
                origins[r, c] = (src.transform.c, src.transform.f)
    x0, y0 = origins[0, 0]
    for (r, c), (x, y) in origins.items():
        assert (x, y) == (x0 + c * 384 * 0.5, y0 - r * 384 * 0.5)
    seam_x, seam_y = x0 + 192.0, y0 - 192.0
    crossing = {"drain": 0, "field_boundary": 0}
    with fiona.open(SAMPLES / "fields_truth.gpkg") as layer:
        for feature in layer:
            (ax, ay), (bx, by) = feature["geometry"]["coordinates"]
            if (ax - seam_x) * (bx - seam_x) < 0 or (ay - seam_y) * (by - seam_y) < 0:
                crossing[feature["properties"]["kind"]] += 1
    assert crossing["drain"] >= 2 and crossing["field_boundary"] >= 4
