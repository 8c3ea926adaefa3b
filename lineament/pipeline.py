"""The extraction pipeline: raster in, lineament records out.

Data flow (one call of :func:`extract_array`)::

    values, valid, GeoRef
      -> fill voids (normalised convolution)             scalespace.fill_voids
      -> per scale: scale-normalised LoG or DoG          scalespace.log_response / dog_response
      -> strength map and robust noise level            crossings.strength_map / robust_noise
      -> zero crossings, hysteresis on strength          crossings.trace_zero_crossings
      -> map coordinates, Douglas-Peucker, min length    vectorize.pieces_to_lines
      -> Lineament records with attributes

Nothing here reads or writes files except :func:`extract_file`, which reads
the raster with :mod:`lineament.raster_io`.
"""

from __future__ import annotations

import functools
import math
import os
import time
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from ._version import __version__
from .crossings import noise_gain, robust_noise, step_strength_factor, strength_map, trace_zero_crossings
from .errors import InputError
from .georef import GeoRef
from .raster_io import RasterData, read_raster
from .scalespace import dog_response, fill_voids, log_response
from .settings import DOG_RATIO, ExtractionSettings
from .vectorize import Lineament, pieces_to_lines


@dataclass(frozen=True)
class ScaleReport:
    """What happened at one scale: sigma, noise level, thresholds, output."""

    scale_m: float
    scale_px: float
    noise: float
    high_threshold: float
    low_threshold: float
    lines: int
    length_m: float

    def to_dict(self) -> dict:
        return {k: (round(v, 6) if isinstance(v, float) else v) for k, v in self.__dict__.items()}


@dataclass
class ExtractionResult:
    """Lines found in one raster plus everything needed to report and reproduce the run.

    Attributes
    ----------
    lines : list of Lineament
    georef : GeoRef
    source : str
    settings : ExtractionSettings
    scales : list of ScaleReport
    seconds : float
        Wall time of the extraction.
    """

    lines: list[Lineament]
    georef: GeoRef
    source: str
    settings: ExtractionSettings
    scales: list[ScaleReport] = field(default_factory=list)
    seconds: float = 0.0

    @property
    def total_length_m(self) -> float:
        return float(sum(line.length_m for line in self.lines))

    def metadata(self) -> dict:
        """Run parameters, thresholds and version, JSON-ready."""
        g = self.georef
        return {
            "software": "lineament",
            "version": __version__,
            "source": self.source,
            "crs": None if g.crs is None else g.crs.to_wkt(),
            "transform": list(g.transform)[:6],
            "shape": [g.height, g.width],
            "settings": self.settings.to_dict(),
            "scales": [s.to_dict() for s in self.scales],
            "lines": len(self.lines),
            "total_length_m": round(self.total_length_m, 3),
        }


def _usable_cells(valid: np.ndarray, sigma_rc: tuple[float, float], margin_sigmas: float) -> np.ndarray:
    """Cells at least ``margin_sigmas`` sigmas from any void and from the raster edge."""
    if margin_sigmas <= 0:
        return valid.copy()
    padded = np.pad(valid, 1, constant_values=False)
    # distance in units of sigma along each axis
    dist = ndimage.distance_transform_edt(padded, sampling=(1.0 / sigma_rc[0], 1.0 / sigma_rc[1]))
    return dist[1:-1, 1:-1] > margin_sigmas


def extract_array(values: np.ndarray, georef: GeoRef, settings: ExtractionSettings | None = None, *,
                  valid: np.ndarray | None = None, source: str = "array") -> ExtractionResult:
    """Find lineaments in an array.

    Parameters
    ----------
    values : ndarray, shape (rows, cols)
        Elevations (DEM) or grey levels (image); converted to float32.
        NaN and infinite values count as voids.
    georef : GeoRef
        Georeferencing of the grid.
    settings : ExtractionSettings, optional
    valid : ndarray of bool, shape (rows, cols), optional
        False at nodata cells.
    source : str
        Written to each line's ``source`` attribute.

    Returns
    -------
    ExtractionResult

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> from pyproj import CRS
    >>> from lineament import GeoRef, extract_array
    >>> z = np.zeros((200, 200), np.float32); z[:, 100:] = 10.0   # a 10 m north-south step
    >>> g = GeoRef(Affine(10, 0, 500000, 0, -10, 5200000), CRS.from_epsg(32633), 200, 200)
    >>> result = extract_array(z, g)
    >>> round(result.lines[0].azimuth_grid_deg)
    0
    """
    t0 = time.perf_counter()
    settings = settings or ExtractionSettings()
    arr = np.asarray(values)
    if arr.ndim != 2:
        raise InputError(f"{source}: expected a 2-D array, got shape {arr.shape}")
    if arr.shape != georef.shape:
        raise InputError(f"{source}: array shape {arr.shape} does not match georeferencing {georef.shape}")
    if arr.dtype.kind not in "fiub":
        raise InputError(f"{source}: values of type {arr.dtype} are not numbers")
    if arr.dtype != np.float32:
        arr = arr.astype(np.float64)  # wide integers and float64 are centred before float32
    ok = np.isfinite(arr)
    if valid is not None:
        ok &= np.asarray(valid, dtype=bool)
    if not ok.any():
        raise InputError(f"{source}: no valid cells (everything is nodata, NaN or infinite)")
    pixel_m = georef.pixel_size_m()
    if georef.crs is None and any(s.unit == "m" for s in settings.scales):
        raise InputError(f"{source}: no CRS, so scales must be given in pixels (e.g. 2px,4px)")
    sigmas = [s.sigma_m(pixel_m) for s in settings.scales]
    smallest_px = min(sigmas[0] / pixel_m[0], sigmas[0] / pixel_m[1])
    if smallest_px < 0.5:
        raise InputError(f"{source}: scale {settings.scales[0]} is {smallest_px:.2f} pixels; "
                         "use scales of at least 1 pixel (pixel size "
                         f"{pixel_m[0]:.3g} x {pixel_m[1]:.3g} m)")
    largest_px = max(sigmas[-1] / pixel_m[0], sigmas[-1] / pixel_m[1])
    need = 2 * settings.void_margin_sigmas * largest_px + 3
    if min(arr.shape) < need:
        raise InputError(f"{source}: raster of {arr.shape[0]} x {arr.shape[1]} pixels is too small for "
                         f"scale {settings.scales[-1]} (needs at least {math.ceil(need)} pixels across)")
    # Remove the median so float32 keeps small differences (the Laplacian ignores a constant),
    # then apply the z factor.
    offset = np.median(arr[ok])
    with np.errstate(invalid="ignore", over="ignore"):
        arr = np.where(ok, (arr - offset) * settings.z_factor, 0).astype(np.float32)
    if not np.isfinite(arr).all():
        raise InputError(f"{source}: values overflow float32 after centring and the z factor")
    filled = fill_voids(arr, ok, sigmas[0] / min(pixel_m))
    # float32 rounding noise of the centred values, a few units in the last place
    rounding_std = 4.0 * float(np.finfo(np.float32).eps) * float(np.abs(filled).max())

    lines: list[Lineament] = []
    reports: list[ScaleReport] = []
    response_scale = 2.0 / (DOG_RATIO - 1.0 / DOG_RATIO) if settings.operator == "dog" else 1.0
    for scale, sigma_m in zip(settings.scales, sigmas):
        sigma_rc = (sigma_m / pixel_m[1], sigma_m / pixel_m[0])
        if settings.operator == "log":
            resp = log_response(filled, sigma_m, pixel_m, truncate=settings.truncate)
        else:
            resp = dog_response(filled, sigma_m, pixel_m, ratio=DOG_RATIO, truncate=settings.truncate)
        strength, gx, gy = strength_map(resp, sigma_m, pixel_m)
        usable = _usable_cells(ok, sigma_rc, settings.void_margin_sigmas)
        # Noise level: robust spread of the response gradient, floored by what float32
        # rounding of the input alone would produce (flat areas, synthetic data).
        response_of = functools.partial(log_response if settings.operator == "log" else dog_response,
                                        sigma_m=sigma_m, pixel_size_m=pixel_m, truncate=settings.truncate)
        floor_in = rounding_std * noise_gain(response_of, sigma_m, pixel_m, truncate=settings.truncate)
        # rounding of the response itself (the DoG subtracts two nearly equal blurred images),
        # through the 5-point derivative whose white-noise gain is sqrt(130) / 12 per pixel
        floor_out = rounding_std * response_scale * math.sqrt(130.0) / 12.0 / min(pixel_m)
        floor = max(floor_in, floor_out)
        noise = max(robust_noise(gx, gy, usable), floor) * step_strength_factor(sigma_m)
        high = settings.high_threshold if settings.high_threshold is not None else settings.high_noise_multiple * noise
        low = settings.low_threshold if settings.low_threshold is not None else settings.low_noise_multiple * noise
        low = min(low, high)
        min_len = settings.min_length_m if settings.min_length_m is not None else settings.min_length_sigmas * sigma_m
        sustained = None
        if settings.high_threshold is None:
            sustained = min(high, max(low, settings.sustained_noise_multiple * noise))
        pieces = trace_zero_crossings(resp, strength, usable, high=high, low=low, sustained=sustained,
                                      sustained_length_px=settings.min_length_sigmas * min(sigma_rc))
        tol = settings.simplify_tolerance_m
        if tol is None:
            tol = 0.5 * min(pixel_m)
        scale_px = sigma_m / math.sqrt(pixel_m[0] * pixel_m[1])
        found = pieces_to_lines(pieces, georef, tolerance_m=tol, min_length_m=min_len,
                                attributes={"scale_m": sigma_m, "scale_px": scale_px,
                                            "operator": settings.operator, "kind": "edge", "source": source})
        lines.extend(found)
        reports.append(ScaleReport(sigma_m, scale_px, noise, high, low, len(found),
                                   float(sum(f.length_m for f in found))))
    return ExtractionResult(lines, georef, source, settings, reports, time.perf_counter() - t0)


def extract_raster(data: RasterData, settings: ExtractionSettings | None = None) -> ExtractionResult:
    """Run :func:`extract_array` on a :class:`~lineament.raster_io.RasterData`."""
    return extract_array(data.values, data.georef, settings, valid=data.valid, source=data.source)


def extract_file(path: str | os.PathLike, settings: ExtractionSettings | None = None) -> ExtractionResult:
    """Read a raster file and find its lineaments.

    Parameters
    ----------
    path : path-like
        GeoTIFF (or any raster GDAL reads): a DEM or an image.
    settings : ExtractionSettings, optional

    Returns
    -------
    ExtractionResult
    """
    settings = settings or ExtractionSettings()
    return extract_raster(read_raster(path, settings), settings)
