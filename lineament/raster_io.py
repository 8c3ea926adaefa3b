"""Reading rasters with rasterio: values as float32, a validity mask and a GeoRef."""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass

import numpy as np
import rasterio
from rasterio.enums import ColorInterp
from rasterio.errors import NotGeoreferencedWarning, RasterioError

from .errors import InputError, RasterReadError
from .georef import GeoRef
from .settings import ExtractionSettings

#: Luma weights of ITU-R BT.709 (the same as ``skimage.color.rgb2gray``).
LUMA_709 = (0.2125, 0.7154, 0.0721)


@dataclass(frozen=True)
class RasterData:
    """A raster ready for filtering.

    Attributes
    ----------
    values : ndarray, shape (rows, cols), float32 (float64 for 32-bit integer or float64 data)
        Values as stored (luminance for RGB); 0 where ``valid`` is False.
    valid : ndarray, shape (rows, cols), bool
        True where the value is data (not nodata, masked, NaN or infinite).
    georef : GeoRef
    source : str
        File name (without directories) written to the ``source`` attribute.
    band_description : str
        What was read, e.g. ``"band 1"`` or ``"luminance of bands 1-3"``.
    """

    values: np.ndarray
    valid: np.ndarray
    georef: GeoRef
    source: str
    band_description: str


def _rgb_bands(ds) -> tuple[int, int, int] | None:
    interp = list(ds.colorinterp)
    want = (ColorInterp.red, ColorInterp.green, ColorInterp.blue)
    if all(w in interp for w in want):
        return tuple(interp.index(w) + 1 for w in want)  # type: ignore[return-value]
    if ds.count >= 3:
        return (1, 2, 3)
    return None


def resolve_georef(ds, name: str, settings: ExtractionSettings) -> GeoRef:
    """GeoRef of an open dataset, applying the georeferencing options."""
    transform = ds.transform
    has_transform = not transform.is_identity  # rasterio reports identity when there is none
    if ds.gcps[0] and not has_transform:
        raise InputError(f"{name}: georeferenced by ground control points only; warp it to a regular "
                         "grid first (for example with rasterio.warp.reproject)")
    if not has_transform:
        if not settings.pixel_coordinates:
            raise InputError(f"{name}: no geotransform; pass --pixel-coordinates to work in pixel units "
                             "(scales then need the px suffix)")
        return GeoRef.pixel_grid(ds.height, ds.width)
    crs = ds.crs
    if crs is None:
        if settings.assume_crs:
            try:
                crs = rasterio.crs.CRS.from_user_input(settings.assume_crs)
            except Exception as exc:
                raise InputError(f"{name}: cannot use --assume-crs {settings.assume_crs!r}: {exc}") from None
        elif settings.pixel_coordinates:
            return GeoRef(transform, None, ds.height, ds.width)
        else:
            raise InputError(f"{name}: no coordinate reference system; pass --assume-crs EPSG:XXXX "
                             "to name it, or --pixel-coordinates to work without one")
    georef = GeoRef.from_rasterio(transform, crs, ds.height, ds.width)
    georef.check_usable(name, allow_rotation=settings.allow_rotation)
    return georef


def read_raster(path: str | os.PathLike, settings: ExtractionSettings | None = None) -> RasterData:
    """Read a raster for extraction.

    A single-band raster is used as is; a multi-band image is reduced to
    luminance (ITU-R BT.709 weights on the red, green and blue bands) unless
    ``settings.band`` names one band.  Values become float32; nodata, masked,
    NaN and infinite cells become invalid.

    Parameters
    ----------
    path : path-like
        Any raster GDAL reads (GeoTIFF expected).
    settings : ExtractionSettings, optional

    Returns
    -------
    RasterData

    Raises
    ------
    RasterReadError
        The file is missing or not a readable raster.
    InputError
        The raster cannot be used (georeferencing, band, no valid data).
    """
    settings = settings or ExtractionSettings()
    name = os.fspath(path)
    if not os.path.exists(name) and "://" not in name and not name.startswith("/vsi"):
        raise RasterReadError(f"{name}: no such file")
    if os.path.isdir(name):
        raise RasterReadError(f"{name}: is a directory, not a raster")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            ds = rasterio.open(name)
        with ds:
            georef = resolve_georef(ds, name, settings)
            if settings.band is not None:
                if settings.band > ds.count:
                    raise InputError(f"{name}: band {settings.band} asked for, but the raster has "
                                     f"{ds.count} band{'s' if ds.count != 1 else ''}")
                bands = (settings.band,)
                description = f"band {settings.band}"
            elif ds.count == 1:
                bands = (1,)
                description = "band 1"
            else:
                rgb = _rgb_bands(ds)
                if rgb is None:
                    raise InputError(f"{name}: {ds.count} bands and no red/green/blue; choose one with --band N")
                bands = rgb
                description = "luminance of bands " + ",".join(map(str, rgb))
            data = ds.read(list(bands), masked=True)
    except (InputError, RasterReadError):
        raise
    except RasterioError as exc:
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise RasterReadError(f"{name}: cannot read raster ({msg})") from None
    except MemoryError:
        raise RasterReadError(f"{name}: raster too large to read into memory") from None

    mask = np.ma.getmaskarray(data).any(axis=0)
    raw = np.ma.getdata(data)
    # small integers and float32 fit float32 exactly; wider types stay float64 until centred
    wide = raw.dtype.itemsize > 2 and raw.dtype != np.float32
    arr = raw.astype(np.float64 if wide else np.float32, copy=False)
    with np.errstate(invalid="ignore"):
        valid = ~mask & np.isfinite(arr).all(axis=0)
    if not valid.any():
        raise InputError(f"{name}: no valid cells (everything is nodata, NaN or infinite)")
    if len(bands) == 3:
        w = LUMA_709
        with np.errstate(invalid="ignore", over="ignore"):
            values = w[0] * arr[0] + w[1] * arr[1] + w[2] * arr[2]
    else:
        values = arr[0]
    values = np.where(valid, values, 0).astype(arr.dtype)
    return RasterData(values, valid, georef, os.path.basename(name.rstrip("/")) or name, description)
