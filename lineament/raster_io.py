"""Reading rasters with rasterio: values as float32, a validity mask and a GeoRef."""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass

import numpy as np
import rasterio
from rasterio.enums import ColorInterp
from rasterio.errors import CRSError, NotGeoreferencedWarning, RasterioError

from .errors import InputError, RasterReadError, SettingsError
from .georef import GeoRef
from .settings import ExtractionSettings

#: GDAL block cache, megabytes.  GDAL sizes its cache once, at first use (default 5 % of RAM,
#: which a big raster's blocks fill up); every open and read here runs with this value so that
#: memory does not grow with raster size.
GDAL_CACHE_MB = 128

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


def _data_bands(ds) -> list[int]:
    """1-based numbers of the bands that hold data (alpha bands excluded)."""
    interp = list(ds.colorinterp)
    return [i for i, ci in enumerate(interp, start=1) if ci != ColorInterp.alpha]


def _rgb_bands(ds) -> tuple[int, int, int] | None:
    """Red, green and blue band numbers, or None when the raster has no such bands.

    Bands tagged red, green and blue are used in that order whatever their
    position.  Exactly three untagged data bands are taken as red, green,
    blue (common practice); with more bands and no tags the choice is left
    to ``--band``.
    """
    interp = list(ds.colorinterp)
    want = (ColorInterp.red, ColorInterp.green, ColorInterp.blue)
    if all(w in interp for w in want):
        return tuple(interp.index(w) + 1 for w in want)  # type: ignore[return-value]
    data = _data_bands(ds)
    if len(data) == 3:
        return tuple(data)  # type: ignore[return-value]
    return None


def _gdal_message(exc: BaseException, name: str) -> str:
    """The most informative one-line message in a rasterio/GDAL exception chain.

    rasterio wraps the GDAL error that caused a failure in a generic one
    ("Read failed. See previous exception for details."); the GDAL text is
    in the chain of causes.  The file name GDAL prefixes is removed, since
    the caller's message names the file already.
    """
    messages = []
    seen = set()
    cur: BaseException | None = exc
    while cur is not None and id(cur) not in seen:
        seen.add(id(cur))
        text = " ".join(str(cur).split())
        if text and "see previous exception" not in text.lower():
            messages.append(text)
        cur = cur.__cause__ or cur.__context__
    msg = messages[0] if messages else type(exc).__name__
    for prefix in (f"'{name}' ", f"{name}: ", f"{name}, ", f"{name} "):
        if msg.startswith(prefix):
            msg = msg[len(prefix):]
            break
    return msg


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
            except (CRSError, ValueError, TypeError) as exc:
                first = (str(exc).splitlines() or [type(exc).__name__])[0]
                raise SettingsError(f"--assume-crs {settings.assume_crs!r} is not a CRS ({first})") from None
        elif settings.pixel_coordinates:
            return GeoRef(transform, None, ds.height, ds.width)
        else:
            raise InputError(f"{name}: no coordinate reference system; pass --assume-crs EPSG:XXXX "
                             "to name it, or --pixel-coordinates to work without one")
    georef = GeoRef.from_rasterio(transform, crs, ds.height, ds.width)
    georef.check_usable(name, allow_rotation=settings.allow_rotation)
    return georef


@dataclass(frozen=True)
class RasterInfo:
    """An input raster checked and described, ready for windowed reads.

    Attributes
    ----------
    path : str
        Path or URL as given.
    georef : GeoRef
    bands : tuple of int
        1-based bands read: one band, or red, green, blue for luminance.
    description : str
    source : str
        File name written to the ``source`` attribute.
    dtype : str
        Storage type of the bands.
    """

    path: str
    georef: GeoRef
    bands: tuple
    description: str
    source: str
    dtype: str


def _open(name: str):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        try:
            return rasterio.open(name)
        except RasterioError as exc:
            raise RasterReadError(f"{name}: not a raster GDAL can open ({_gdal_message(exc, name)})") from None


def _guard(name: str, func):
    """Run ``func`` and turn rasterio/GDAL failures into one-line RasterReadErrors."""
    try:
        with warnings.catch_warnings():
            # The "no geotransform" warning is replaced by our own error or by --pixel-coordinates.
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            return func()
    except (InputError, RasterReadError, SettingsError):
        raise
    except (RasterioError, CRSError, OSError) as exc:
        raise RasterReadError(f"{name}: cannot read raster, the file may be damaged or truncated "
                              f"({_gdal_message(exc, name)})") from None
    except MemoryError:
        raise RasterReadError(f"{name}: raster too large to read into memory") from None
    except Exception as exc:
        # GDAL errors surface as rasterio._err.CPLE_* classes that derive from Exception only
        if type(exc).__module__.startswith("rasterio"):
            raise RasterReadError(f"{name}: cannot read raster ({_gdal_message(exc, name)})") from None
        raise


def open_raster(path: str | os.PathLike, settings: ExtractionSettings | None = None) -> RasterInfo:
    """Check an input raster and decide what to read from it (no pixels are read).

    A single-band raster (alpha bands aside) is used as is; a multi-band
    image is reduced to luminance (ITU-R BT.709 weights on the red, green
    and blue bands) unless ``settings.band`` names one band.

    Raises
    ------
    RasterReadError
        The file is missing or not a readable raster.
    InputError
        The raster cannot be used (georeferencing, band).
    SettingsError
        ``settings.assume_crs`` is not a CRS.
    """
    settings = settings or ExtractionSettings()
    name = os.fspath(path)
    if not os.path.exists(name) and "://" not in name and not name.startswith("/vsi"):
        raise RasterReadError(f"{name}: no such file")
    if os.path.isdir(name):
        raise RasterReadError(f"{name}: is a folder, not a raster")
    if os.path.isfile(name) and os.path.getsize(name) == 0:
        raise RasterReadError(f"{name}: file is empty, not a raster")

    def inspect():
        with rasterio.Env(GDAL_CACHEMAX=GDAL_CACHE_MB), _open(name) as ds:
            georef = resolve_georef(ds, name, settings)
            data_bands = _data_bands(ds)
            if settings.band is not None:
                if settings.band > ds.count:
                    raise InputError(f"{name}: band {settings.band} asked for, but the raster has "
                                     f"{ds.count} band{'s' if ds.count != 1 else ''}")
                bands: tuple[int, ...] = (settings.band,)
                description = f"band {settings.band}"
            elif len(data_bands) == 1:
                bands = (data_bands[0],)
                description = f"band {data_bands[0]}"
            else:
                rgb = _rgb_bands(ds)
                if rgb is None:
                    raise InputError(f"{name}: {ds.count} bands and none tagged red/green/blue; "
                                     "choose one with --band N")
                bands = rgb
                description = "luminance of bands " + ",".join(map(str, rgb))
            dtype = ds.dtypes[bands[0] - 1]
        if np.dtype(dtype).kind not in "iuf":
            raise InputError(f"{name}: values of type {dtype} are not real numbers; "
                             "convert the band to a real type first")
        return RasterInfo(name, georef, bands, description, os.path.basename(name.rstrip("/")) or name, dtype)

    return _guard(name, inspect)


def _to_values(data: np.ma.MaskedArray, bands: tuple) -> tuple[np.ndarray, np.ndarray]:
    raw = np.ma.getdata(data)
    # small integers and float32 fit float32 exactly; wider types stay float64 until centred
    wide = raw.dtype.itemsize > 2 and raw.dtype != np.float32
    arr = raw.astype(np.float64 if wide else np.float32, copy=False)
    with np.errstate(invalid="ignore"):
        valid = np.isfinite(arr).all(axis=0) if arr.shape[0] > 1 else np.isfinite(arr[0])
    mask = np.ma.getmask(data)
    if mask is not np.ma.nomask:
        valid &= ~mask.any(axis=0)
    if len(bands) == 3:
        w = LUMA_709
        with np.errstate(invalid="ignore", over="ignore"):
            values = w[0] * arr[0] + w[1] * arr[1] + w[2] * arr[2]
    else:
        values = arr[0]
    if valid.all():  # the usual case: no copy
        return np.ascontiguousarray(values, dtype=arr.dtype), valid
    return np.where(valid, values, 0).astype(arr.dtype), valid


def read_window(info: RasterInfo, row0: int, col0: int, row1: int, col1: int) -> tuple[np.ndarray, np.ndarray]:
    """Read rows ``row0:row1`` and columns ``col0:col1`` of a checked raster.

    Returns
    -------
    values : ndarray, float32 (float64 for 32-bit integer or float64 data)
        Values as stored (luminance for RGB); 0 where invalid.
    valid : ndarray of bool
        False at nodata, masked, NaN and infinite cells.
    """
    from rasterio.windows import Window

    def read():
        with rasterio.Env(GDAL_CACHEMAX=GDAL_CACHE_MB), _open(info.path) as ds:
            window = Window(col0, row0, col1 - col0, row1 - row0)
            return _read_masked(ds, list(info.bands), window)

    return _to_values(_guard(info.path, read), info.bands)


def _nodata_mask(values: np.ndarray, nodata: float) -> np.ndarray | None:
    """Cells equal to ``nodata`` as the band type holds it (None: no cell can be)."""
    kind = values.dtype.kind
    if kind == "f":
        if np.isnan(nodata):
            return np.isnan(values)
        return values == values.dtype.type(nodata)
    info = np.iinfo(values.dtype)
    if not float(nodata).is_integer() or not info.min <= nodata <= info.max:
        return None  # a value the band cannot hold marks no cell
    return values == values.dtype.type(int(nodata))


def _read_masked(ds, bands: list[int], window) -> np.ma.MaskedArray:
    """``ds.read(bands, masked=True, window=window)``, faster where validity is only a nodata value.

    rasterio builds the mask from GDAL's mask band, which for a plain nodata
    value took 13 times as long as the values themselves on a 64 Mpx float32
    DEM (0.42 s against 0.03 s; our measurement).  Where every band's mask is
    its nodata value (or all valid) and the values are not float64, the
    mask is the cells equal to nodata, the test GDAL's nodata mask applies
    (GDAL raster data model, "Nodata masks"); float64 data, mask bands, alpha
    bands and per-dataset masks go through rasterio.  ``tests/test_raster_io.py``
    compares both on every kind.
    """
    from rasterio.enums import MaskFlags

    flags = [ds.mask_flag_enums[b - 1] for b in bands]
    simple = all(set(f) <= {MaskFlags.nodata, MaskFlags.all_valid} for f in flags)
    if not simple or any(ds.dtypes[b - 1] == "float64" for b in bands):
        return ds.read(bands, masked=True, window=window)
    raw = ds.read(bands, window=window)
    mask = None
    for i, b in enumerate(bands):
        nodata = ds.nodatavals[b - 1]
        if MaskFlags.nodata not in flags[i] or nodata is None:
            continue
        m = _nodata_mask(raw[i], nodata)
        if m is None:
            continue
        if mask is None:
            mask = np.zeros(raw.shape, bool)
        mask[i] = m
    return np.ma.MaskedArray(raw, mask=np.ma.nomask if mask is None else mask)


def read_raster(path: str | os.PathLike, settings: ExtractionSettings | None = None) -> RasterData:
    """Read a whole raster for extraction.

    See :func:`open_raster` for how bands are chosen.  Values become float32
    (float64 for 32- and 64-bit integers and float64, so that wide ranges
    keep their precision until the pipeline removes the median); nodata,
    masked (mask or alpha band), NaN and infinite cells become invalid.

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
    RasterReadError, InputError, SettingsError
        As :func:`open_raster`; InputError also when no cell is valid.
    """
    info = open_raster(path, settings)
    g = info.georef
    values, valid = read_window(info, 0, 0, g.height, g.width)
    if not valid.any():
        raise InputError(f"{info.path}: no valid cells (everything is nodata, NaN or infinite)")
    return RasterData(values, valid, g, info.source, info.description)
