"""Reading rasters: luminance, bands, data types, voids, masks and georeferencing checks."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import rasterio
import rasterio.transform
from affine import Affine
from pyproj import CRS
from rasterio.control import GroundControlPoint
from rasterio.enums import ColorInterp
from rasterio.errors import NotGeoreferencedWarning
from skimage.color import rgb2gray

from conftest import UTM33, utm_georef, write_geotiff
from lineament.errors import InputError, RasterReadError, SettingsError
from lineament.georef import GeoRef
from lineament.raster_io import read_raster
from lineament.settings import ExtractionSettings

RNG_SEED = 20240611


def _rgb(height=20, width=30, dtype=np.uint8):
    rng = np.random.default_rng(RNG_SEED)
    return rng.integers(0, 256, size=(3, height, width)).astype(dtype)


# ------------------------------------------------------------------ bands and luminance
def test_rgb_luminance_equals_skimage_rgb2gray(tmp_path):
    rgb = _rgb()
    path = write_geotiff(tmp_path / "rgb.tif", rgb, utm_georef(20, 30), photometric="RGB")
    data = read_raster(path)
    # Reference: skimage.color.rgb2gray (ITU-R BT.709 luma weights); float input is not rescaled.
    expected = rgb2gray(np.moveaxis(rgb, 0, -1).astype(np.float64))
    assert data.values.dtype == np.float32
    np.testing.assert_allclose(data.values, expected, rtol=1e-6, atol=1e-4)
    assert data.valid.all()
    assert data.band_description == "luminance of bands 1,2,3"


def test_luminance_follows_colour_tags_not_band_order(tmp_path):
    rgb = _rgb()
    bgr = rgb[::-1].copy()
    path = tmp_path / "bgr.tif"
    write_geotiff(path, bgr, utm_georef(20, 30))
    with rasterio.open(path, "r+") as ds:
        ds.colorinterp = [ColorInterp.blue, ColorInterp.green, ColorInterp.red]
    data = read_raster(path)
    # Reference: skimage.color.rgb2gray on the bands put back in red, green, blue order.
    expected = rgb2gray(np.moveaxis(rgb, 0, -1).astype(np.float64))
    np.testing.assert_allclose(data.values, expected, rtol=1e-6, atol=1e-4)
    assert data.band_description == "luminance of bands 3,2,1"


@pytest.mark.parametrize("band", [1, 2, 3])
def test_band_option_reads_that_band_exactly(tmp_path, band):
    rgb = _rgb()
    path = write_geotiff(tmp_path / "rgb.tif", rgb, utm_georef(20, 30), photometric="RGB")
    data = read_raster(path, ExtractionSettings(band=band))
    np.testing.assert_array_equal(data.values, rgb[band - 1].astype(np.float32))
    assert data.band_description == f"band {band}"


def test_band_out_of_range_is_an_input_error_naming_the_file(tmp_path):
    path = write_geotiff(tmp_path / "one.tif", np.zeros((10, 10), np.float32), utm_georef(10, 10))
    with pytest.raises(InputError, match=r"one\.tif: band 2 asked for, but the raster has 1 band$"):
        read_raster(path, ExtractionSettings(band=2))


def test_many_untagged_bands_need_band_option(tmp_path):
    arr = np.arange(5 * 8 * 8, dtype=np.float32).reshape(5, 8, 8)
    path = write_geotiff(tmp_path / "multi.tif", arr, utm_georef(8, 8))
    with pytest.raises(InputError, match="--band"):
        read_raster(path)
    np.testing.assert_array_equal(read_raster(path, ExtractionSettings(band=4)).values, arr[3])


# ------------------------------------------------------------------ data types
@pytest.mark.parametrize("dtype", ["uint8", "int8", "uint16", "int16", "float32"])
def test_small_types_become_float32_exactly(tmp_path, dtype):
    info = np.iinfo(dtype) if np.dtype(dtype).kind in "iu" else np.finfo(dtype)
    arr = np.linspace(float(info.min) if np.dtype(dtype).kind in "iu" else -1e3,
                      float(info.max) if np.dtype(dtype).kind in "iu" else 1e3, 64).reshape(8, 8)
    arr = arr.astype(dtype)
    path = write_geotiff(tmp_path / f"{dtype}.tif", arr, utm_georef(8, 8))
    data = read_raster(path)
    assert data.values.dtype == np.float32
    # every value of these types is exactly representable in float32 (24-bit significand, IEEE 754)
    np.testing.assert_array_equal(data.values.astype(np.float64), arr.astype(np.float64))


@pytest.mark.parametrize("dtype", ["int32", "uint32", "int64", "uint64", "float64"])
def test_wide_types_keep_float64_so_extremes_are_not_rounded(tmp_path, dtype):
    kind = np.dtype(dtype).kind
    info = np.iinfo(dtype) if kind in "iu" else np.finfo(dtype)
    arr = np.full((8, 8), info.max, dtype=dtype)
    arr[:, :4] = info.min if kind in "iu" else -1e300
    path = write_geotiff(tmp_path / f"{dtype}.tif", arr, utm_georef(8, 8))
    data = read_raster(path)
    assert data.values.dtype == np.float64
    # the conversion is numpy's own int -> float64 rounding, nothing worse
    np.testing.assert_array_equal(data.values, arr.astype(np.float64))
    assert np.isfinite(data.values).all()


def test_complex_band_is_refused(tmp_path):
    arr = (np.ones((8, 8)) + 1j).astype(np.complex64)
    path = write_geotiff(tmp_path / "c.tif", arr, utm_georef(8, 8))
    with pytest.raises(InputError, match="not real numbers"):
        read_raster(path)


# ------------------------------------------------------------------ voids and masks
def test_nodata_value_becomes_invalid(tmp_path):
    arr = np.arange(100, dtype=np.int16).reshape(10, 10)
    arr[2:4, 5:7] = -9999
    path = write_geotiff(tmp_path / "nd.tif", arr, utm_georef(10, 10), nodata=-9999)
    data = read_raster(path)
    expected_valid = arr != -9999
    np.testing.assert_array_equal(data.valid, expected_valid)
    assert (data.values[~expected_valid] == 0).all()
    np.testing.assert_array_equal(data.values[expected_valid], arr[expected_valid].astype(np.float32))


def test_nan_and_inf_become_invalid_without_warnings(tmp_path):
    arr = np.ones((10, 10), np.float32)
    arr[1, 1] = np.nan
    arr[2, 2] = np.inf
    arr[3, 3] = -np.inf
    path = write_geotiff(tmp_path / "nan.tif", arr, utm_georef(10, 10))
    data = read_raster(path)
    assert not data.valid[1, 1] and not data.valid[2, 2] and not data.valid[3, 3]
    assert data.valid.sum() == 97
    assert np.isfinite(data.values).all()


def test_nan_nodata_declared(tmp_path):
    arr = np.ones((10, 10), np.float32)
    arr[4:6, :] = np.nan
    path = write_geotiff(tmp_path / "nannd.tif", arr, utm_georef(10, 10), nodata=float("nan"))
    data = read_raster(path)
    assert data.valid.sum() == 80


def test_rgba_alpha_band_masks_cells(tmp_path):
    rgb = _rgb(10, 10)
    alpha = np.full((1, 10, 10), 255, np.uint8)
    alpha[0, :3, :] = 0
    rgba = np.concatenate([rgb, alpha])
    path = write_geotiff(tmp_path / "rgba.tif", rgba, utm_georef(10, 10), photometric="RGB", alpha="YES")
    with rasterio.open(path) as ds:  # the file really carries an alpha band (precondition)
        assert ds.colorinterp[3] == ColorInterp.alpha
    data = read_raster(path)
    assert not data.valid[:3].any()
    assert data.valid[3:].all()
    expected = rgb2gray(np.moveaxis(rgb, 0, -1).astype(np.float64))
    np.testing.assert_allclose(data.values[3:], expected[3:], rtol=1e-6, atol=1e-4)


def test_grey_plus_alpha_uses_the_grey_band(tmp_path):
    grey = np.arange(100, dtype=np.uint8).reshape(1, 10, 10)
    alpha = np.full((1, 10, 10), 255, np.uint8)
    alpha[0, :, :2] = 0
    path = tmp_path / "ga.tif"
    write_geotiff(path, np.concatenate([grey, alpha]), utm_georef(10, 10))
    with rasterio.open(path, "r+") as ds:
        ds.colorinterp = [ColorInterp.gray, ColorInterp.alpha]
    data = read_raster(path)
    assert data.band_description == "band 1"
    assert not data.valid[:, :2].any() and data.valid[:, 2:].all()
    np.testing.assert_array_equal(data.values[:, 2:], grey[0, :, 2:].astype(np.float32))


def test_internal_mask_band_masks_cells(tmp_path):
    arr = np.arange(100, dtype=np.float32).reshape(10, 10)
    path = write_geotiff(tmp_path / "mask.tif", arr, utm_georef(10, 10))
    mask = np.full((10, 10), 255, np.uint8)
    mask[5:, 5:] = 0
    with rasterio.Env(GDAL_TIFF_INTERNAL_MASK=True):
        with rasterio.open(path, "r+") as ds:
            ds.write_mask(mask)
    data = read_raster(path)
    np.testing.assert_array_equal(data.valid, mask > 0)


def test_all_nodata_is_refused(tmp_path):
    path = write_geotiff(tmp_path / "void.tif", np.full((10, 10), -1, np.int16), utm_georef(10, 10), nodata=-1)
    with pytest.raises(InputError, match=r"void\.tif: no valid cells"):
        read_raster(path)


# ------------------------------------------------------------------ georeferencing
def _step(h=16, w=16):
    return np.tile(np.arange(w, dtype=np.float32), (h, 1))


def test_missing_crs_is_refused_with_hint_and_accepted_with_assume_crs(tmp_path):
    g = utm_georef(16, 16)
    path = write_geotiff(tmp_path / "nocrs.tif", _step(), GeoRef(g.transform, None, 16, 16))
    with pytest.raises(InputError, match=r"nocrs\.tif: no coordinate reference system.*--assume-crs"):
        read_raster(path)
    data = read_raster(path, ExtractionSettings(assume_crs="EPSG:32633"))
    assert data.georef.crs.equals(UTM33)
    assert tuple(data.georef.transform)[:6] == tuple(g.transform)[:6]


def test_bad_assume_crs_is_a_settings_error(tmp_path):
    g = utm_georef(16, 16)
    path = write_geotiff(tmp_path / "nocrs.tif", _step(), GeoRef(g.transform, None, 16, 16))
    with pytest.raises(SettingsError, match="--assume-crs 'EPSG:99999999'"):
        read_raster(path, ExtractionSettings(assume_crs="EPSG:99999999"))


def write_without_georeferencing(path, array):
    """A GeoTIFF with neither geotransform nor CRS (rasterio warns about that on writing)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        with rasterio.open(path, "w", driver="GTiff", height=array.shape[0], width=array.shape[1], count=1,
                           dtype=array.dtype) as ds:
            ds.write(array[None])
    return path


def test_missing_geotransform_is_refused_with_hint_and_accepted_with_pixel_coordinates(tmp_path):
    path = write_without_georeferencing(tmp_path / "nogt.tif", _step())
    with pytest.raises(InputError, match=r"nogt\.tif: no geotransform.*--pixel-coordinates"):
        read_raster(path)
    data = read_raster(path, ExtractionSettings(pixel_coordinates=True, scales="2px"))
    assert data.georef == GeoRef.pixel_grid(16, 16)
    assert data.georef.crs is None


def test_gcp_only_raster_is_refused(tmp_path):
    path = tmp_path / "gcp.tif"
    gcps = [GroundControlPoint(row=0, col=0, x=500000, y=5200000), GroundControlPoint(row=0, col=16, x=500160, y=5200000),
            GroundControlPoint(row=16, col=0, x=500000, y=5199840)]
    with rasterio.open(path, "w", driver="GTiff", height=16, width=16, count=1, dtype="float32",
                       gcps=gcps, crs="EPSG:32633") as ds:
        ds.write(_step()[None])
    with pytest.raises(InputError, match="ground control points"):
        read_raster(path)


def _rotated(deg=30.0, pixel=10.0):
    return Affine.translation(500_000.0, 5_200_000.0) @ Affine.rotation(deg) @ Affine.scale(pixel, -pixel)


def test_rotated_geotransform_refused_with_hint_and_accepted_with_allow_rotation(tmp_path):
    path = write_geotiff(tmp_path / "rot.tif", _step(), GeoRef(_rotated(), UTM33, 16, 16))
    with pytest.raises(InputError, match=r"rot\.tif: geotransform is rotated.*--allow-rotation"):
        read_raster(path)
    data = read_raster(path, ExtractionSettings(allow_rotation=True))
    np.testing.assert_allclose(tuple(data.georef.transform)[:6], tuple(_rotated())[:6])


def test_sheared_geotransform_always_refused(tmp_path):
    sheared = Affine(10.0, 4.0, 500_000.0, 0.0, -10.0, 5_200_000.0)
    path = write_geotiff(tmp_path / "shear.tif", _step(), GeoRef(sheared, UTM33, 16, 16))
    for settings in (ExtractionSettings(), ExtractionSettings(allow_rotation=True)):
        with pytest.raises(InputError, match=r"shear\.tif: geotransform is sheared"):
            read_raster(path, settings)


@pytest.mark.parametrize("transform", [utm_georef(9, 13, pixel=7.5).transform, _rotated(23.0, 5.0)])
def test_pixel_to_map_matches_rasterio_pixel_centres(tmp_path, transform):
    path = write_geotiff(tmp_path / "t.tif", np.zeros((9, 13), np.float32), GeoRef(transform, UTM33, 9, 13))
    data = read_raster(path, ExtractionSettings(allow_rotation=True))
    rows, cols = np.meshgrid(np.arange(9), np.arange(13), indexing="ij")
    x, y = data.georef.pixel_to_map(rows.ravel(), cols.ravel())
    # Reference: rasterio.transform.xy with offset="center" (OGC GeoTIFF PixelIsArea, pixel centres).
    rx, ry = rasterio.transform.xy(data.georef.transform, rows.ravel(), cols.ravel(), offset="center")
    np.testing.assert_allclose(x, rx, rtol=0, atol=1e-6)
    np.testing.assert_allclose(y, ry, rtol=0, atol=1e-6)


def test_geographic_crs_is_read(tmp_path):
    g = GeoRef(Affine(0.001, 0.0, 15.0, 0.0, -0.001, 47.0), CRS.from_epsg(4326), 16, 16)
    path = write_geotiff(tmp_path / "geo.tif", _step(), g)
    data = read_raster(path)
    assert data.georef.crs.equals(CRS.from_epsg(4326))


# ------------------------------------------------------------------ unreadable files
def test_missing_file(tmp_path):
    with pytest.raises(RasterReadError, match=r"nope\.tif: no such file$"):
        read_raster(tmp_path / "nope.tif")


def test_read_errors_are_oserrors(tmp_path):
    # errors.py: RasterReadError also derives from OSError
    with pytest.raises(OSError):
        read_raster(tmp_path / "nope.tif")


def test_directory(tmp_path):
    with pytest.raises(RasterReadError, match="is a folder"):
        read_raster(tmp_path)


def test_truncated_geotiff_gives_one_line_with_the_gdal_reason(tmp_path):
    g = utm_georef(64, 64)
    full = write_geotiff(tmp_path / "full.tif", np.random.default_rng(1).random((64, 64)).astype(np.float32), g)
    blob = full.read_bytes()
    half = tmp_path / "half.tif"
    half.write_bytes(blob[: len(blob) // 2])
    with pytest.raises(RasterReadError) as info:
        read_raster(half)
    msg = str(info.value)
    assert msg.startswith(f"{half}: cannot read raster")
    assert "\n" not in msg
    assert "See previous exception" not in msg


def test_text_file(tmp_path):
    p = tmp_path / "notes.tif"
    p.write_text("not a raster\n")
    with pytest.raises(RasterReadError, match=r"notes\.tif: not a raster GDAL can open"):
        read_raster(p)


def test_source_is_file_name_only(tmp_path):
    path = write_geotiff(tmp_path / "dem.tif", _step(), utm_georef(16, 16))
    assert read_raster(path).source == "dem.tif"


def _write(path, data: np.ndarray, **extra) -> None:
    count = data.shape[0]
    profile = dict(driver="GTiff", width=data.shape[2], height=data.shape[1], count=count, dtype=data.dtype.name,
                   crs="EPSG:32633", transform=Affine(10, 0, 500000, 0, -10, 5200000), **extra)
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(data)


@pytest.mark.parametrize("dtype,nodata", [("float32", -9999.0), ("float32", float("nan")), ("float32", None),
                                          ("int16", -32768), ("uint8", 0), ("uint16", 65535), ("int32", 7),
                                          ("float64", -9999.0), ("int16", 12)])
def test_fast_nodata_read_equals_rasterio_masked_read(tmp_path, dtype, nodata):
    # Reference: rasterio's masked read (GDAL's mask band) of the same window, value for value and
    # mask for mask, for every band type and kind of nodata (GDAL raster data model, nodata masks)
    from rasterio.windows import Window

    from lineament.raster_io import _read_masked

    rng = np.random.default_rng(4)
    data = (rng.integers(0, 6, (1, 40, 50)) + (0.25 if dtype.startswith("float") else 0)).astype(dtype)
    if nodata is not None and np.isfinite(nodata) and nodata != 12:  # 12: a nodata no cell holds
        data[0, rng.random((40, 50)) < 0.2] = nodata
    elif nodata is not None and np.isnan(nodata):
        data[0, rng.random((40, 50)) < 0.2] = np.nan
    path = tmp_path / "r.tif"
    _write(path, data, **({} if nodata is None else {"nodata": nodata}))
    with rasterio.open(path) as ds:
        win = Window(3, 5, 30, 20)
        ours = _read_masked(ds, [1], win)
        ref = ds.read([1], masked=True, window=win)
    assert np.array_equal(np.ma.getdata(ours), np.ma.getdata(ref), equal_nan=dtype.startswith("float"))
    assert np.array_equal(np.ma.getmaskarray(ours), np.ma.getmaskarray(ref))


def test_fast_read_leaves_alpha_and_mask_bands_to_rasterio(tmp_path):
    # Reference: rasterio's masked read; an alpha band or an internal mask is not a nodata value
    from rasterio.windows import Window

    from lineament.raster_io import _read_masked

    rng = np.random.default_rng(5)
    grey = rng.integers(1, 200, (40, 50)).astype("uint8")
    alpha = np.where(rng.random((40, 50)) < 0.3, 0, 255).astype("uint8")
    path = tmp_path / "ga.tif"
    _write(path, np.stack([grey, alpha]), photometric="MINISBLACK", alpha="UNSPECIFIED")
    with rasterio.open(path, "r+") as ds:
        ds.colorinterp = [ColorInterp.gray, ColorInterp.alpha]
    with rasterio.open(path) as ds:
        ours = _read_masked(ds, [1], Window(0, 0, 50, 40))
        ref = ds.read([1], masked=True, window=Window(0, 0, 50, 40))
    assert np.ma.getmaskarray(ref).any()
    assert np.array_equal(np.ma.getmaskarray(ours), np.ma.getmaskarray(ref))
    assert np.array_equal(np.ma.getdata(ours), np.ma.getdata(ref))
