"""Synthetic terrain and imagery with planted linear features of known position.

Pure numpy functions used to build the bundled sample rasters and by the
tests as scenes whose lineaments are known exactly.

* :func:`fractal_terrain` -- Gaussian random surface with a power-law
  spectrum (spectral synthesis of fractional Brownian surfaces, Voss 1985;
  Saupe 1988).
* :func:`plant_scarp`, :func:`plant_valley`, :func:`plant_ridge` -- add a
  fault scarp (error-function step), a linear valley or a ridge (Gaussian
  trough or crest) along a map-coordinate segment, tapered at both ends.
* :func:`void_mask` -- irregular blob-shaped nodata holes.
* :func:`fields_image` -- a 3-band aerial-like image of straight-edged
  agricultural fields with dark drains, and its truth lines.

Georeferencing convention (as in :mod:`lineament.georef`): the affine
transform maps pixel *corners*, so the centre of pixel ``(row, col)`` is at
``transform * (col + 0.5, row + 0.5)``.  Map units are metres.

References
----------
Voss, R. F. (1985). Random fractal forgeries. In R. A. Earnshaw (ed.),
    *Fundamental Algorithms for Computer Graphics*, NATO ASI Series F17,
    805-835. Springer.
Saupe, D. (1988). Algorithms for random fractals. In H.-O. Peitgen and
    D. Saupe (eds.), *The Science of Fractal Images*, 71-136. Springer.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
from affine import Affine
from scipy import ndimage
from scipy.special import ndtr

from .errors import SettingsError

__all__ = [
    "TruthLine",
    "fractal_terrain",
    "plant_scarp",
    "plant_valley",
    "plant_ridge",
    "void_mask",
    "north_up_transform",
    "fields_image",
    "LUMINANCE_WEIGHTS",
]

#: Luma weights of ITU-R BT.601 used to turn RGB into one luminance band.
LUMINANCE_WEIGHTS = (0.299, 0.587, 0.114)


# --------------------------------------------------------------------- truth
@dataclass(frozen=True)
class TruthLine:
    """A planted straight linear feature in map coordinates.

    Parameters
    ----------
    kind : str
        ``"scarp"``, ``"valley"``, ``"ridge"``, ``"field_boundary"`` or
        ``"drain"``.
    start_xy, end_xy : tuple of float
        End points in map units (metres).  For a scarp, the side to the left
        when looking from start to end is the raised side.
    width_m : float
        Width of the feature across the line, in metres (see the function
        that planted it for its exact meaning).
    amplitude_m : float or None
        Scarp offset, valley depth or ridge height in metres; None for image
        features.
    """

    kind: str
    start_xy: tuple[float, float]
    end_xy: tuple[float, float]
    width_m: float
    amplitude_m: float | None = None

    @property
    def length_m(self) -> float:
        """Length of the segment in map units (metres)."""
        return math.hypot(self.end_xy[0] - self.start_xy[0], self.end_xy[1] - self.start_xy[1])

    @property
    def azimuth_deg(self) -> float:
        """Axial grid azimuth in degrees clockwise from grid north, in [0, 180)."""
        dx = self.end_xy[0] - self.start_xy[0]
        dy = self.end_xy[1] - self.start_xy[1]
        return math.degrees(math.atan2(dx, dy)) % 180.0


# ------------------------------------------------------------------- helpers
def _check_shape(shape: Sequence[int], name: str = "shape") -> tuple[int, int]:
    try:
        rows, cols = (int(v) for v in shape)
    except (TypeError, ValueError):
        raise SettingsError(f"{name} must be a pair (rows, cols), got {shape!r}") from None
    if rows < 2 or cols < 2:
        raise SettingsError(f"{name} must be at least 2 x 2 pixels, got {rows} x {cols}")
    return rows, cols


def _check_positive(value: float, name: str) -> float:
    value = float(value)
    if not (value > 0.0 and math.isfinite(value)):
        raise SettingsError(f"{name} must be a positive finite number, got {value!r}")
    return value


def _pixel_centres(shape: tuple[int, int], transform: Affine) -> tuple[np.ndarray, np.ndarray]:
    """Map coordinates (float64) of every pixel centre, each of shape ``shape``."""
    t = Affine(*tuple(transform)[:6])
    if t.a * t.e - t.b * t.d == 0:
        raise SettingsError("transform is degenerate (zero pixel size)")
    rows, cols = shape
    c = np.arange(cols, dtype=np.float64)[None, :] + 0.5
    r = np.arange(rows, dtype=np.float64)[:, None] + 0.5
    x = t.a * c + t.b * r + t.c
    y = t.d * c + t.e * r + t.f
    return x, y


def _segment_frame(
    shape: tuple[int, int], transform: Affine, start_xy, end_xy
) -> tuple[np.ndarray, np.ndarray, float]:
    """Along-line and signed across-line distance of every pixel centre.

    Returns ``along`` (metres from ``start_xy`` towards ``end_xy``),
    ``across`` (perpendicular distance, positive on the left looking from
    start to end) and the segment length.
    """
    sx, sy = (float(v) for v in start_xy)
    ex, ey = (float(v) for v in end_xy)
    length = math.hypot(ex - sx, ey - sy)
    if not (length > 0.0 and math.isfinite(length)):
        raise SettingsError(f"segment {start_xy!r} -> {end_xy!r} has no length")
    ux, uy = (ex - sx) / length, (ey - sy) / length
    x, y = _pixel_centres(shape, transform)
    px = x - sx
    py = y - sy
    along = px * ux + py * uy
    across = py * ux - px * uy
    return along, across, length


def _end_taper(along: np.ndarray, length: float, taper_fraction: float) -> np.ndarray:
    """Weight 1 along the middle of the segment, raised-cosine to 0 at both ends, 0 beyond."""
    taper_fraction = float(taper_fraction)
    if not 0.0 <= taper_fraction <= 0.5:
        raise SettingsError(f"taper_fraction must be between 0 and 0.5, got {taper_fraction!r}")
    inside = (along >= 0.0) & (along <= length)
    if taper_fraction == 0.0:
        return inside.astype(np.float64)
    to_end = np.minimum(along, length - along)
    s = np.clip(to_end / (taper_fraction * length), 0.0, 1.0)
    return np.where(inside, 0.5 - 0.5 * np.cos(np.pi * s), 0.0)


def _check_dem(dem) -> np.ndarray:
    dem = np.asarray(dem)
    if dem.ndim != 2:
        raise SettingsError(f"dem must be a 2-D array, got shape {dem.shape}")
    return dem


# ------------------------------------------------------------------- terrain
def fractal_terrain(
    shape: Sequence[int],
    *,
    pixel_size_m: float,
    relief_m: float,
    spectral_exponent: float = 3.0,
    max_wavelength_m: float | None = None,
    seed: int | None,
) -> np.ndarray:
    """Gaussian random surface with a power-law spectrum (fractal terrain).

    Spectral synthesis (Fourier filtering) of a fractional Brownian surface
    (Voss 1985; Saupe 1988): white Gaussian noise is transformed with the
    FFT, every coefficient is multiplied by ``|k| ** (-spectral_exponent / 2)``
    so that the power spectral density is proportional to
    ``|k| ** -spectral_exponent``, and the inverse FFT gives the surface.
    Filtering white Gaussian noise is the same as drawing Rayleigh
    amplitudes with uniform random phases.  The surface is periodic across
    the array edges, has zero mean and is rescaled so that its standard
    deviation equals ``relief_m``.

    A spectral exponent ``beta`` corresponds to a Hurst exponent
    ``H = (beta - 2) / 2`` for ``2 < beta < 4`` (fractal dimension
    ``D = 3 - H``); ``beta = 3`` is ordinary Brownian roughness.

    Parameters
    ----------
    shape : (int, int)
        ``(rows, cols)`` of the output, each at least 2.
    pixel_size_m : float
        Ground size of a (square) pixel in metres; sets the wavenumber unit
        (cycles per metre).  Without ``max_wavelength_m`` the result does not
        depend on it, because the surface is rescaled to ``relief_m``.
    relief_m : float
        Standard deviation of the output in metres (>= 0).
    spectral_exponent : float, default 3.0
        Exponent ``beta`` of the power spectral density ``|k| ** -beta``
        (>= 0; 0 gives white noise).
    max_wavelength_m : float or None, keyword-only
        When given, the spectrum is flat (no further growth) at wavelengths
        longer than this, which limits regional tilt.  None keeps the pure
        power law down to the lowest wavenumber of the grid.
    seed : int or None
        Seed for :func:`numpy.random.default_rng`.

    Returns
    -------
    ndarray of float32, shape ``(rows, cols)``
        Heights in metres, mean 0 and standard deviation ``relief_m``.

    References
    ----------
    Voss, R. F. (1985). Random fractal forgeries. NATO ASI Series F17.
    Saupe, D. (1988). Algorithms for random fractals. In *The Science of
    Fractal Images*, Springer, 71-136.
    """
    rows, cols = _check_shape(shape)
    pixel_size_m = _check_positive(pixel_size_m, "pixel_size_m")
    relief_m = float(relief_m)
    if not (relief_m >= 0.0 and math.isfinite(relief_m)):
        raise SettingsError(f"relief_m must be zero or positive, got {relief_m!r}")
    beta = float(spectral_exponent)
    if not (beta >= 0.0 and math.isfinite(beta)):
        raise SettingsError(f"spectral_exponent must be zero or positive, got {spectral_exponent!r}")
    if max_wavelength_m is not None:
        max_wavelength_m = _check_positive(max_wavelength_m, "max_wavelength_m")

    rng = np.random.default_rng(seed)
    white = rng.standard_normal((rows, cols))
    spectrum = np.fft.rfft2(white)
    ky = np.fft.fftfreq(rows, d=pixel_size_m)[:, None]
    kx = np.fft.rfftfreq(cols, d=pixel_size_m)[None, :]
    k = np.hypot(kx, ky)
    k[0, 0] = 1.0  # placeholder; the mean term is removed below
    if max_wavelength_m is not None:
        k = np.maximum(k, 1.0 / max_wavelength_m)
    spectrum *= k ** (-beta / 2.0)
    spectrum[0, 0] = 0.0
    surface = np.fft.irfft2(spectrum, s=(rows, cols))
    surface -= surface.mean()
    std = surface.std()
    if relief_m == 0.0 or std == 0.0:
        return np.zeros((rows, cols), dtype=np.float32)
    surface *= relief_m / std
    return surface.astype(np.float32)


def plant_scarp(
    dem,
    transform: Affine,
    start_xy: Sequence[float],
    end_xy: Sequence[float],
    *,
    offset_m: float,
    width_m: float,
    taper_fraction: float = 0.15,
) -> np.ndarray:
    """Add a fault scarp along a map-coordinate segment.

    Across the line the added height is
    ``offset_m * (Phi(d / width_m) - 0.5)``, where ``Phi`` is the standard
    normal cumulative distribution (:func:`scipy.special.ndtr`) and ``d`` is
    the signed perpendicular distance in metres from the line through
    ``start_xy`` and ``end_xy``, positive on the left when looking from
    start to end.  The left side is therefore raised by ``offset_m / 2`` and
    the right side lowered by as much, with the half-offset level (added
    height 0) exactly on the line.  This error-function profile is the
    diffusion-degraded form of a vertical step, common practice in scarp
    morphology.

    Along the line the offset is multiplied by a raised-cosine taper rising
    from 0 to 1 over ``taper_fraction`` of the length at each end, and is 0
    for pixel centres whose projection falls beyond the ends.  The offset
    extends sideways without limit within that strip.

    Parameters
    ----------
    dem : ndarray, shape ``(rows, cols)``
        Input heights in metres (not modified).
    transform : affine.Affine
        Pixel-corner transform; the centre of pixel ``(row, col)`` is at
        ``transform * (col + 0.5, row + 0.5)``.  Map units must be metres.
    start_xy, end_xy : (float, float)
        Segment end points in map coordinates.
    offset_m : float
        Total vertical offset across the scarp in metres (negative raises
        the right side instead).
    width_m : float
        Scale ``w`` of the error-function profile in metres (> 0); 68 % of
        the offset happens within ``|d| < w``.
    taper_fraction : float, default 0.15
        Fraction of the length (0 to 0.5) over which the offset tapers to 0
        at each end.

    Returns
    -------
    ndarray of float32, shape ``(rows, cols)``
        ``dem`` plus the scarp.
    """
    dem = _check_dem(dem)
    width_m = _check_positive(width_m, "width_m")
    along, across, length = _segment_frame(dem.shape, transform, start_xy, end_xy)
    weight = _end_taper(along, length, taper_fraction)
    added = float(offset_m) * (ndtr(across / width_m) - 0.5) * weight
    return (dem + added).astype(np.float32)


def _plant_gaussian(dem, transform, start_xy, end_xy, amplitude_m, width_m, taper_fraction):
    dem = _check_dem(dem)
    width_m = _check_positive(width_m, "width_m")
    along, across, length = _segment_frame(dem.shape, transform, start_xy, end_xy)
    weight = _end_taper(along, length, taper_fraction)
    added = float(amplitude_m) * np.exp(-(across * across) / (2.0 * width_m * width_m)) * weight
    return (dem + added).astype(np.float32)


def plant_valley(
    dem,
    transform: Affine,
    start_xy: Sequence[float],
    end_xy: Sequence[float],
    *,
    depth_m: float,
    width_m: float,
    taper_fraction: float = 0.15,
) -> np.ndarray:
    """Add a straight linear valley (Gaussian trough) along a segment.

    The added height is ``-depth_m * exp(-d**2 / (2 * width_m**2))`` with
    ``d`` the perpendicular distance in metres from the line, multiplied by
    the same raised-cosine end taper as :func:`plant_scarp` and 0 beyond the
    ends.

    Parameters
    ----------
    dem : ndarray, shape ``(rows, cols)``
        Input heights in metres (not modified).
    transform : affine.Affine
        Pixel-corner transform (pixel centres at ``col + 0.5, row + 0.5``),
        metres.
    start_xy, end_xy : (float, float)
        Segment end points in map coordinates.
    depth_m : float
        Depth of the axis below the surroundings in metres.
    width_m : float
        Gaussian standard deviation of the cross profile in metres (> 0).
    taper_fraction : float, default 0.15
        Fraction of the length (0 to 0.5) tapered to 0 at each end.

    Returns
    -------
    ndarray of float32, shape ``(rows, cols)``
    """
    return _plant_gaussian(dem, transform, start_xy, end_xy, -float(depth_m), width_m, taper_fraction)


def plant_ridge(
    dem,
    transform: Affine,
    start_xy: Sequence[float],
    end_xy: Sequence[float],
    *,
    height_m: float,
    width_m: float,
    taper_fraction: float = 0.15,
) -> np.ndarray:
    """Add a straight ridge (dyke): :func:`plant_valley` with the opposite sign.

    The added height is ``+height_m * exp(-d**2 / (2 * width_m**2))``, tapered
    at both ends.

    Parameters
    ----------
    dem, transform, start_xy, end_xy, width_m, taper_fraction
        As in :func:`plant_valley`.
    height_m : float
        Height of the crest above the surroundings in metres.

    Returns
    -------
    ndarray of float32, shape ``(rows, cols)``
    """
    return _plant_gaussian(dem, transform, start_xy, end_xy, float(height_m), width_m, taper_fraction)


# --------------------------------------------------------------------- voids
def void_mask(
    shape: Sequence[int],
    *,
    seed: int | None,
    count: int = 3,
    radius_px: tuple[float, float] = (12.0, 40.0),
    centers_rc: Sequence[tuple[float, float]] | None = None,
    roughness: float = 0.25,
    harmonics: int = 6,
) -> np.ndarray:
    """Boolean mask of a few irregular blob-shaped nodata holes.

    Each blob is star-shaped around its centre with radius
    ``r(theta) = R * (1 + sum_k a_k cos(k * theta + phi_k))`` for
    ``k = 2 .. harmonics + 1``, with random ``R`` in ``radius_px``, random
    phases and amplitudes ``a_k ~ N(0, roughness / k)`` (like a lake or a
    radar shadow).  The radius never drops below ``0.35 * R``.

    Parameters
    ----------
    shape : (int, int)
        ``(rows, cols)`` of the mask.
    seed : int or None
        Seed for :func:`numpy.random.default_rng`.
    count : int, default 3
        Number of blobs when ``centers_rc`` is None (centres drawn at random
        inside the array).
    radius_px : (float, float), default (12, 40)
        Range of the mean blob radius in pixels.
    centers_rc : sequence of (float, float) or None
        Explicit blob centres as ``(row, col)`` indices; overrides ``count``.
    roughness : float, default 0.25
        Irregularity of the outline (0 gives discs).
    harmonics : int, default 6
        Number of Fourier harmonics in the outline.

    Returns
    -------
    ndarray of bool, shape ``(rows, cols)``
        True inside a void.
    """
    rows, cols = _check_shape(shape)
    r_lo, r_hi = (float(v) for v in radius_px)
    if not (0.0 < r_lo <= r_hi):
        raise SettingsError(f"radius_px must be (low, high) with 0 < low <= high, got {radius_px!r}")
    if roughness < 0:
        raise SettingsError(f"roughness must be zero or positive, got {roughness!r}")
    rng = np.random.default_rng(seed)
    if centers_rc is None:
        if int(count) < 0:
            raise SettingsError(f"count must be zero or positive, got {count!r}")
        centers = [(rng.uniform(0, rows), rng.uniform(0, cols)) for _ in range(int(count))]
    else:
        centers = [(float(r), float(c)) for r, c in centers_rc]
    mask = np.zeros((rows, cols), dtype=bool)
    ks = np.arange(2, int(harmonics) + 2, dtype=np.float64)
    for rc, cc in centers:
        radius = rng.uniform(r_lo, r_hi)
        amps = rng.normal(0.0, 1.0, ks.size) * roughness / ks
        phases = rng.uniform(0.0, 2.0 * np.pi, ks.size)
        reach = radius * (1.0 + np.abs(amps).sum()) + 1.0
        r0, r1 = max(int(math.floor(rc - reach)), 0), min(int(math.ceil(rc + reach)) + 1, rows)
        c0, c1 = max(int(math.floor(cc - reach)), 0), min(int(math.ceil(cc + reach)) + 1, cols)
        if r0 >= r1 or c0 >= c1:
            continue
        dr = np.arange(r0, r1, dtype=np.float64)[:, None] - rc
        dc = np.arange(c0, c1, dtype=np.float64)[None, :] - cc
        theta = np.arctan2(dr, dc)
        outline = radius * (1.0 + np.tensordot(amps, np.cos(ks[:, None, None] * theta + phases[:, None, None]), 1))
        outline = np.maximum(outline, 0.35 * radius)
        mask[r0:r1, c0:c1] |= np.hypot(dr, dc) <= outline
    return mask


# -------------------------------------------------------------------- fields
def north_up_transform(upper_left_xy: Sequence[float], pixel_size_m: float) -> Affine:
    """Pixel-corner transform of a north-up grid with square pixels.

    Parameters
    ----------
    upper_left_xy : (float, float)
        Map coordinates of the upper-left corner of pixel ``(0, 0)``.
    pixel_size_m : float
        Pixel size in metres.

    Returns
    -------
    affine.Affine
        ``Affine(pixel_size_m, 0, x0, 0, -pixel_size_m, y0)``.
    """
    pixel_size_m = _check_positive(pixel_size_m, "pixel_size_m")
    x0, y0 = (float(v) for v in upper_left_xy)
    return Affine(pixel_size_m, 0.0, x0, 0.0, -pixel_size_m, y0)


def _clip_segment(p0, p1, xmin, xmax, ymin, ymax):
    """Liang-Barsky clipping of segment p0-p1 to a rectangle; None when outside."""
    x0, y0 = p0
    dx, dy = p1[0] - x0, p1[1] - y0
    t0, t1 = 0.0, 1.0
    for p, q in ((-dx, x0 - xmin), (dx, xmax - x0), (-dy, y0 - ymin), (dy, ymax - y0)):
        if p == 0.0:
            if q < 0.0:
                return None
            continue
        t = q / p
        if p < 0.0:
            t0 = max(t0, t)
        else:
            t1 = min(t1, t)
        if t0 > t1:
            return None
    return (x0 + t0 * dx, y0 + t0 * dy), (x0 + t1 * dx, y0 + t1 * dy)


# Field colour families as (low RGB, high RGB): crop greens, grass, bare soil, stubble.
_FIELD_PALETTE = (
    ((60, 100, 45), (85, 125, 65)),  # dark crop
    ((85, 130, 55), (115, 160, 80)),  # green crop
    ((110, 145, 70), (140, 175, 95)),  # grass
    ((125, 105, 80), (165, 140, 110)),  # bare soil
    ((175, 165, 110), (215, 200, 145)),  # stubble
)
_DRAIN_RGB = (38, 52, 36)


def _luma(rgb) -> float:
    return float(np.dot(LUMINANCE_WEIGHTS, rgb))


def _random_cuts(rng, low: float, high: float, spacing: tuple[float, float]) -> np.ndarray:
    cuts = [low]
    while cuts[-1] < high:
        cuts.append(cuts[-1] + rng.uniform(*spacing))
    return np.asarray(cuts)


def fields_image(
    shape: Sequence[int],
    *,
    pixel_size_m: float,
    seed: int | None,
    upper_left_xy: Sequence[float] = (0.0, 0.0),
    field_size_m: tuple[float, float] = (35.0, 95.0),
    rotation_deg: float | None = None,
    boundary_drains: int = 3,
    field_drains: int = 2,
    drain_width_px: tuple[float, float] = (1.5, 3.0),
    min_contrast_dn: float = 25.0,
    noise_dn: float = 2.5,
) -> tuple[np.ndarray, list[TruthLine]]:
    """Aerial-like 3-band image of straight-edged agricultural fields with drains.

    The scene is a slightly rotated irregular grid of parcels: parallel
    strips at random spacings, each cut into fields at its own random
    positions.  Each field gets a colour from a family (crop, grass, bare
    soil, stubble) whose luminance differs from every neighbour's by at
    least ``min_contrast_dn``, a mild low-frequency brightness texture and
    faint cultivation rows.  Narrow dark drains are drawn along some strip
    boundaries (``boundary_drains``, each running the full length of the
    scene), across the strips (one main drain perpendicular to them) and
    through the middle of some strips (``field_drains``).  The image is then
    blurred by a Gaussian point-spread function (sigma 0.6 px) and Gaussian
    sensor noise of ``noise_dn`` is added.

    Parameters
    ----------
    shape : (int, int)
        ``(rows, cols)`` of the image.
    pixel_size_m : float
        Ground size of a square pixel in metres.
    seed : int or None
        Seed for :func:`numpy.random.default_rng`.
    upper_left_xy : (float, float), default (0, 0)
        Map coordinates of the upper-left image corner; the image transform
        is ``north_up_transform(upper_left_xy, pixel_size_m)``.
    field_size_m : (float, float), default (35, 95)
        Range of field widths and lengths in metres.
    rotation_deg : float or None
        Rotation of the parcel grid from grid north, counter-clockwise; None
        draws it at random between 5 and 20 degrees in either direction.
    boundary_drains : int, default 3
        Number of strip boundaries that carry a drain.
    field_drains : int, default 2
        Number of drains through the middle of a strip (across the fields of
        that strip); one further main drain crosses all strips.
    drain_width_px : (float, float), default (1.5, 3.0)
        Range of drain widths in pixels.
    min_contrast_dn : float, default 25
        Smallest luminance difference between neighbouring fields (digital
        numbers, BT.601 luma).
    noise_dn : float, default 2.5
        Standard deviation of the sensor noise per band, digital numbers.

    Returns
    -------
    image : ndarray of uint8, shape ``(3, rows, cols)``
        Red, green and blue bands.
    lines : list of TruthLine
        Field boundaries (``kind="field_boundary"``, ``width_m`` one pixel:
        a sharp colour step) and drains (``kind="drain"``, ``width_m`` the
        drawn width), clipped to the image extent.  A boundary that carries
        a drain is listed once, as a drain.  Lines shorter than 10 pixels
        after clipping are dropped.
    """
    rows, cols = _check_shape(shape)
    ps = _check_positive(pixel_size_m, "pixel_size_m")
    f_lo, f_hi = (float(v) for v in field_size_m)
    if not (0.0 < f_lo <= f_hi):
        raise SettingsError(f"field_size_m must be (low, high) with 0 < low <= high, got {field_size_m!r}")
    w_lo, w_hi = (float(v) for v in drain_width_px)
    if not (0.0 < w_lo <= w_hi):
        raise SettingsError(f"drain_width_px must be (low, high) with 0 < low <= high, got {drain_width_px!r}")
    rng = np.random.default_rng(seed)
    transform = north_up_transform(upper_left_xy, ps)
    x0, y0 = transform.c, transform.f
    xmin, xmax, ymin, ymax = x0, x0 + cols * ps, y0 - rows * ps, y0
    xc, yc = 0.5 * (xmin + xmax), 0.5 * (ymin + ymax)
    half_diag = 0.5 * math.hypot(xmax - xmin, ymax - ymin) + f_hi

    if rotation_deg is None:
        rotation_deg = float(rng.uniform(5.0, 20.0) * rng.choice([-1.0, 1.0]))
    theta = math.radians(rotation_deg)
    cos_t, sin_t = math.cos(theta), math.sin(theta)

    def to_map(u, v):
        return (xc + u * cos_t - v * sin_t, yc + u * sin_t + v * cos_t)

    x, y = _pixel_centres((rows, cols), transform)
    u = (x - xc) * cos_t + (y - yc) * sin_t
    v = -(x - xc) * sin_t + (y - yc) * cos_t
    del x, y

    # Strips between u cuts; fields between v cuts within each strip.
    u_cuts = _random_cuts(rng, -half_diag, half_diag, (f_lo, f_hi))
    v_cuts = [_random_cuts(rng, -half_diag, half_diag, (f_lo, f_hi)) for _ in range(len(u_cuts) - 1)]
    first_label = np.cumsum([0] + [len(vc) - 1 for vc in v_cuts])
    n_fields = int(first_label[-1])

    # Colours: luminance contrast against every already coloured neighbour.
    colours = np.zeros((n_fields, 3))
    for i, vc in enumerate(v_cuts):
        for j in range(len(vc) - 1):
            neighbours = []
            if j > 0:
                neighbours.append(first_label[i] + j - 1)
            if i > 0:
                prev = v_cuts[i - 1]
                for jj in range(len(prev) - 1):
                    if prev[jj] < vc[j + 1] and prev[jj + 1] > vc[j]:
                        neighbours.append(first_label[i - 1] + jj)
            taken = [_luma(colours[n]) for n in neighbours]
            best, best_contrast = None, -1.0
            for _attempt in range(200):  # keep the most contrasting draw if none reaches the minimum
                lo, hi = _FIELD_PALETTE[rng.integers(len(_FIELD_PALETTE))]
                lo_a, hi_a = np.asarray(lo, float), np.asarray(hi, float)
                rgb = lo_a + rng.uniform(0.0, 1.0) * (hi_a - lo_a) + rng.normal(0.0, 4.0, 3)
                contrast = min((abs(_luma(rgb) - t) for t in taken), default=np.inf)
                if contrast > best_contrast:
                    best, best_contrast = rgb, contrast
                if contrast >= min_contrast_dn:
                    break
            colours[first_label[i] + j] = best

    strip = np.clip(np.searchsorted(u_cuts, u, side="right") - 1, 0, len(v_cuts) - 1)
    labels = np.empty((rows, cols), dtype=np.int64)
    for i, vc in enumerate(v_cuts):
        sel = strip == i
        if sel.any():
            labels[sel] = first_label[i] + np.clip(np.searchsorted(vc, v[sel], side="right") - 1, 0, len(vc) - 2)

    # Texture: smooth brightness variation and faint cultivation rows.
    smooth = ndimage.gaussian_filter(rng.standard_normal((rows, cols)), max(2.0, 0.15 * f_lo / ps))
    smooth /= smooth.std() or 1.0
    tex_amp = rng.uniform(0.01, 0.04, n_fields)
    row_amp = rng.uniform(0.0, 3.0, n_fields)
    row_period_m = rng.uniform(3.0, 6.0, n_fields) * ps
    row_along_u = rng.random(n_fields) < 0.5
    row_phase = rng.uniform(0, 2 * np.pi, n_fields)
    coord = np.where(row_along_u[labels], v, u)
    rows_term = row_amp[labels] * np.sin(2 * np.pi * coord / row_period_m[labels] + row_phase[labels])
    gain = 1.0 + tex_amp[labels] * smooth
    image = colours[labels].transpose(2, 0, 1) * gain[None] + rows_term[None]
    del coord, rows_term, gain, smooth, labels

    # Lines in (u, v) frame: ("kind", (u0, v0), (u1, v1), width_m)
    lines_uv: list[tuple[str, tuple[float, float], tuple[float, float], float]] = []
    interior = list(range(1, len(u_cuts) - 1))
    # Drains go on strip boundaries that cross at least half of the image.
    long_enough = []
    for k in interior:
        clipped = _clip_segment(to_map(u_cuts[k], -half_diag), to_map(u_cuts[k], half_diag), xmin, xmax, ymin, ymax)
        if clipped is not None and math.dist(*clipped) >= 0.5 * min(xmax - xmin, ymax - ymin):
            long_enough.append(k)
    n_bd = min(int(boundary_drains), len(long_enough))
    drained = set(rng.choice(long_enough, size=n_bd, replace=False).tolist()) if n_bd else set()
    for k in interior:
        kind = "drain" if k in drained else "field_boundary"
        width = rng.uniform(w_lo, w_hi) * ps if kind == "drain" else ps
        lines_uv.append((kind, (u_cuts[k], -half_diag), (u_cuts[k], half_diag), width))
    for i, vc in enumerate(v_cuts):
        for j in range(1, len(vc) - 1):
            lines_uv.append(("field_boundary", (u_cuts[i], vc[j]), (u_cuts[i + 1], vc[j]), ps))
    # Main drain across all strips, along v = const, away from the image edges.
    v_main = rng.uniform(-0.25, 0.25) * min(xmax - xmin, ymax - ymin)
    lines_uv.append(("drain", (-half_diag, v_main), (half_diag, v_main), rng.uniform(w_lo, w_hi) * ps))
    # Drains through the middle of strips (across that strip's fields).
    strips_visible = [i for i in range(len(v_cuts)) if np.any(strip == i)]
    n_fd = min(int(field_drains), len(strips_visible))
    for i in rng.choice(strips_visible, size=n_fd, replace=False) if n_fd else []:
        um = 0.5 * (u_cuts[i] + u_cuts[i + 1])
        lines_uv.append(("drain", (um, -half_diag), (um, half_diag), rng.uniform(w_lo, w_hi) * ps))
    del strip

    drain_rgb = np.asarray(_DRAIN_RGB, dtype=np.float64)[:, None, None]
    truth: list[TruthLine] = []
    min_len = 10.0 * ps
    for kind, p_uv, q_uv, width in lines_uv:
        clipped = _clip_segment(to_map(*p_uv), to_map(*q_uv), xmin, xmax, ymin, ymax)
        if clipped is None:
            continue
        a, b = clipped
        if math.hypot(b[0] - a[0], b[1] - a[1]) < min_len:
            continue
        if kind == "drain":
            along, across, length = _segment_frame((rows, cols), transform, a, b)
            cover = np.clip((0.5 * width - np.abs(across)) / ps + 0.5, 0.0, 1.0)
            cover *= np.clip(np.minimum(along, length - along) / ps + 0.5, 0.0, 1.0)
            alpha = 0.85 * cover
            image = image * (1.0 - alpha)[None] + drain_rgb * alpha[None]
        truth.append(TruthLine(kind, (float(a[0]), float(a[1])), (float(b[0]), float(b[1])), float(width)))

    image = ndimage.gaussian_filter(image, sigma=(0.0, 0.6, 0.6))
    image += rng.normal(0.0, float(noise_dn), image.shape)
    return np.clip(np.rint(image), 0, 255).astype(np.uint8), truth
