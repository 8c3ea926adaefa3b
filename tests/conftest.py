"""Shared fixtures: small georeferenced rasters built in code and written to temporary GeoTIFFs."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import rasterio
from affine import Affine
from pyproj import CRS
from scipy.special import ndtr

from lineament.georef import GeoRef

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_rasters"

#: A UTM zone 33N grid with 10 m pixels (invented origin).
UTM33 = CRS.from_epsg(32633)


def utm_georef(height: int, width: int, pixel: float = 10.0, x0: float = 500_000.0,
               y0: float = 5_200_000.0) -> GeoRef:
    return GeoRef(Affine(pixel, 0.0, x0, 0.0, -pixel, y0), UTM33, height, width)


def step_image(height: int, width: int, *, angle_deg: float, offset_px: float, height_step: float = 10.0,
               blur_px: float = 0.0, supersample: int = 8) -> np.ndarray:
    """Area-sampled straight step through the image centre.

    The edge is the line of points whose signed distance ``d`` to the centre
    line is zero; ``d = (col - cc) cos(a) - (row - rc) sin(a) - offset_px`` in
    pixel-centre coordinates, ``a`` the edge normal angle.  Each pixel holds
    the share of its area on the high side (``supersample`` squared
    sub-samples), or ``h * Phi(d / blur)`` when ``blur_px`` > 0.
    """
    a = np.radians(angle_deg)
    rc, cc = (height - 1) / 2.0, (width - 1) / 2.0
    if blur_px > 0:
        r, c = np.mgrid[0:height, 0:width].astype(np.float64)
        d = (c - cc) * np.cos(a) - (r - rc) * np.sin(a) - offset_px
        return (height_step * ndtr(d / blur_px)).astype(np.float32)
    sub = (np.arange(supersample) + 0.5) / supersample - 0.5
    acc = np.zeros((height, width))
    r, c = np.mgrid[0:height, 0:width].astype(np.float64)
    for dr in sub:
        for dc in sub:
            d = (c + dc - cc) * np.cos(a) - (r + dr - rc) * np.sin(a) - offset_px
            acc += d > 0
    return (height_step * acc / supersample**2).astype(np.float32)


def write_geotiff(path: Path, array: np.ndarray, georef: GeoRef | None = None, *, nodata=None,
                  crs="keep", **profile) -> Path:
    """Write ``array`` (2-D, or 3-D bands-first) as a GeoTIFF."""
    arr = np.asarray(array)
    if arr.ndim == 2:
        arr = arr[None]
    kwargs = dict(driver="GTiff", height=arr.shape[1], width=arr.shape[2], count=arr.shape[0],
                  dtype=arr.dtype)
    if georef is not None:
        kwargs["transform"] = georef.transform
        kwargs["crs"] = None if georef.crs is None else georef.crs.to_wkt()
    if nodata is not None:
        kwargs["nodata"] = nodata
    kwargs.update(profile)
    with rasterio.open(path, "w", **kwargs) as dst:
        dst.write(arr)
    return path


@pytest.fixture
def scarp_raster(tmp_path):
    """A 256 x 256 DEM (10 m, UTM 33N) with a 20 m north-south scarp at column 128.3."""
    g = utm_georef(256, 256)
    z = 400.0 + step_image(256, 256, angle_deg=0.0, offset_px=0.8, height_step=20.0, blur_px=1.0)
    path = write_geotiff(tmp_path / "scarp.tif", z, g)
    return path, g
