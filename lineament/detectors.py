"""Line detectors: each turns a filtered image into a zero level set to trace.

Every family of lines is found the same way: a *field* whose zero level set
holds the lines, a *strength* per pixel (in raster units, comparable across
scales), an optional mask of where lines may lie (a sign condition), and
samples of the background from which the noise level is measured.  The
tracer (:mod:`lineament.crossings`), tiling and stitching do not care which
detector made the level set.

Detectors are registered in :data:`DETECTORS` by feature name.
"""

from __future__ import annotations

import functools
import math
import threading
import weakref
from dataclasses import dataclass
from typing import Callable

import numpy as np


from .crossings import (log_strength_map, rounding_floor, step_strength_factor,
                        strength_map, unit_impulse)
from ._curvature import orient_and_field, orientation_flips, principal_directions
from .errors import SettingsError
from .pyramid import MIN_DECIMATED_SIGMA_PX, MIN_EDGE_SIGMA_CELLS
from ._kernels import derivative_sweep
from .scalespace import dog_response, gaussian_derivative, gaussian_kernel1d, log_response, residual_sigma
from .settings import DOG_RATIO


@dataclass(frozen=True)
class LevelSet:
    """What a detector hands to the tracer, for one scale on one window.

    Attributes
    ----------
    field : ndarray, shape (rows, cols), float32
        Lines are the zero level set of this field.
    strength : ndarray, shape (rows, cols), float32
        Strength per pixel, raster units.
    allowed : ndarray of bool or None
        Where lines may lie (None: everywhere).
    noise_samples : tuple
        Arrays (same shape as ``field``; or objects giving such an array's
        part for a pair of slices) whose pooled robust standard deviation,
        times ``noise_factor``, is the background noise level in strength
        units.
    noise_factor : float
    noise_floor : float
        Lowest noise level the arithmetic allows (float32 rounding), strength units.
    noise_mask : ndarray of bool or None
        Where the noise samples are taken (None: where ``allowed``).
    """

    field: np.ndarray
    strength: np.ndarray
    allowed: np.ndarray | None
    noise_samples: tuple
    noise_factor: float
    noise_floor: float
    noise_mask: np.ndarray | None = None


@dataclass(frozen=True)
class Detector:
    """A named line detector.

    Attributes
    ----------
    kind : str
        Value of the ``kind`` attribute of its lines.
    operator : str
        Value of the ``operator`` attribute.
    reach_factor : float
        The widest kernel reaches ``reach_factor * truncate * sigma``; sets the tile halo.
    run : callable
        ``run(image, sigma_m, pixel_size_m, *, truncate, rounding_std, prior_blur_px=0, noise=True)
        -> LevelSet``; ``pixel_size_m`` is the size of the cells of ``image`` (coarse cells on a
        decimated level, which already carries ``prior_blur_px`` cells of Gaussian blur).  With
        ``noise=False`` the level set may leave out its noise samples (only tracing follows).
    min_cells_per_sigma : float
        Cells per sigma the detector needs on a decimated grid (see
        :data:`lineament.pyramid.MIN_DECIMATED_SIGMA_PX`); a run decimates a scale only as far as
        its most demanding detector allows.
    whole_raster_pixels : int
        Largest raster (in pixels) that a run with only such detectors processes as one window
        when no tile size is asked for (see :data:`WHOLE_RASTER_PIXELS`); 0: always in tiles.
    """

    kind: str
    operator: str
    reach_factor: float
    run: Callable[..., LevelSet]
    min_cells_per_sigma: float = MIN_DECIMATED_SIGMA_PX
    whole_raster_pixels: int = 0


#: Rasters of up to this many pixels are processed as one window by runs that find edges only
#: (when no tile size is asked for).  One window needs no noise blocks of its own (its noise
#: samples come from the same cells of the filtered window) and no halos, which for the cheap edge
#: filters are a large share of the work: on our 2-core benchmark raster (4096 x 4096 = 2**24
#: pixels, four scales) 0.47 to 0.49 s against 0.63 to 0.71 s in 2048 px tiles, at a peak of
#: 684 to 702 against 614 to 636 MB through the command line; with the DoG 0.97 to 1.04 against
#: 1.02 to 1.21 s (743 against 650 MB in-process).  The gradient edge detector, and the valley and
#: ridge filters, hold several whole-window arrays each and were no faster or slower as one window
#: (gradient edges 4.2 against 4.3 s at 1.7 GB against 0.75 GB; the DEM default 4.7 against 3.3 s
#: at 1.8 GB), so they keep tiles.
WHOLE_RASTER_PIXELS = 1 << 24


class _GradientPart:
    """One gradient component of a response (as :func:`strength_map` gives it), computed where asked.

    ``part[rows, cols]`` (two slices with bounds) is the same array, bit for
    bit, as ``strength_map(response, ...)[1 + axis][rows, cols]``: the 5-point
    differences reach two cells, so the part is computed on the response two
    cells wider on each side, whose own border (cells repeated) then only
    matters where the response itself ends.  Edge detectors hand these to
    the noise sampling instead of two whole component arrays: samples come
    from blocks that cover a small share of a large window.
    """

    def __init__(self, response: np.ndarray, sigma_m: float, pixel_size_m: tuple[float, float], axis: int):
        self.response, self.sigma_m, self.pixel_size_m, self.axis = response, sigma_m, pixel_size_m, axis

    @property
    def shape(self) -> tuple[int, int]:
        return self.response.shape

    def __getitem__(self, index: tuple[slice, slice]) -> np.ndarray:
        rows, cols = index
        h, w = self.response.shape
        r0, r1, _ = rows.indices(h)
        c0, c1, _ = cols.indices(w)
        a0, a1, b0, b1 = max(0, r0 - 2), min(h, r1 + 2), max(0, c0 - 2), min(w, c1 + 2)
        _, gx, gy = strength_map(self.response[a0:a1, b0:b1], self.sigma_m, self.pixel_size_m)
        g = gx if self.axis == 0 else gy
        return g[r0 - a0:r1 - a0, c0 - b0:c1 - b0]


def _edge_level_set(image: np.ndarray, sigma_m: float, pixel_size_m: tuple[float, float], *,
                    truncate: float, rounding_std: float, operator: str, prior_blur_px: float = 0.0,
                    noise: bool = True) -> LevelSet:
    """Zero crossings of the scale-normalised LoG or DoG (Marr and Hildreth 1980)."""
    if operator == "log":
        response_of = functools.partial(log_response, sigma_m=sigma_m, pixel_size_m=pixel_size_m,
                                        truncate=truncate, prior_blur_px=prior_blur_px)
        response_scale = 1.0
    else:
        response_of = functools.partial(dog_response, sigma_m=sigma_m, pixel_size_m=pixel_size_m,
                                        ratio=DOG_RATIO, truncate=truncate, prior_blur_px=prior_blur_px)
        response_scale = 2.0 / (DOG_RATIO - 1.0 / DOG_RATIO)
    if operator == "log":  # one sweep for the response and its strength (the same numbers)
        resp, strength, _, _ = log_strength_map(image, sigma_m, pixel_size_m, truncate=truncate,
                                                prior_blur_px=prior_blur_px, components=False)
    else:
        resp = response_of(image)
        strength, _, _ = strength_map(resp, sigma_m, pixel_size_m, components=False)
    factor = step_strength_factor(sigma_m)
    # Floors: input rounding through the filter and the float32 sums (crossings.rounding_floor),
    # and rounding of the response itself (the DoG subtracts two nearly equal blurred images)
    # through the 5-point derivative, whose white-noise gain is sqrt(130) / 12 per pixel.
    floor_in = _impulse_floor(lambda img: strength_map(response_of(img), sigma_m, pixel_size_m)[1:], sigma_m,
                              pixel_size_m, truncate=truncate, rounding_std=rounding_std,
                              key=("edge", operator, float(prior_blur_px)))
    floor_out = rounding_std * response_scale * math.sqrt(130.0) / 12.0 / min(pixel_size_m)
    noise_samples = (_GradientPart(resp, sigma_m, pixel_size_m, 0), _GradientPart(resp, sigma_m, pixel_size_m, 1))
    return LevelSet(resp, strength, None, noise_samples if noise else (), factor, max(floor_in, floor_out) * factor)


# --------------------------------------------------------------------------- Gaussian derivative stack
def derivative_stack(image: np.ndarray, sigma_m: float, pixel_size_m: tuple[float, float],
                     orders: tuple[tuple[int, int], ...], *, truncate: float, prior_blur_px: float = 0.0) -> dict:
    """Gaussian derivatives of one image at one scale, in ground units.

    The separable passes are shared, in one sweep over rolling buffers
    (:func:`lineament._kernels.derivative_sweep`): each x kernel runs once
    along every row, then each output's y kernel down the columns.  The result is
    the same as :func:`~lineament.scalespace.gaussian_derivative` (same
    kernels, same border mode) divided by the pixel size per axis.

    Parameters
    ----------
    image : ndarray, shape (rows, cols), float32
    sigma_m : float
        Scale in metres.
    pixel_size_m : (float, float)
        Pixel size along columns (x) and along rows (y), metres.
    orders : tuple of (int, int)
        Derivative orders ``(along y, along x)`` wanted (row axis first, as
        ``gaussian_derivative``), each order 0 to 3.
    truncate : float
        Kernel half-width in sigmas.
    prior_blur_px : float
        Gaussian blur the image already carries, in its pixels (see
        :func:`~lineament.scalespace.residual_sigma`).

    Returns
    -------
    dict
        ``(order_y, order_x) -> ndarray (rows, cols) float32``, the derivative
        in raster units per metre to the total order.
    """
    dx, dy = pixel_size_m
    srow, scol = residual_sigma(sigma_m / dy, prior_blur_px), residual_sigma(sigma_m / dx, prior_blur_px)
    # one sweep (lineament._kernels.derivative_sweep): the numbers, bit for bit, of
    # correlate1d(correlate1d(image, x kernel, 1), y kernel, 0) * scale for each order
    x_orders = sorted({o[1] for o in orders})
    y_orders = sorted({o[0] for o in orders})
    pairs = [(x_orders.index(ocol), y_orders.index(orow)) for orow, ocol in orders]
    stack = derivative_sweep(image, [gaussian_kernel1d(scol, o, truncate) for o in x_orders],
                             [gaussian_kernel1d(srow, o, truncate) for o in y_orders], pairs,
                             [1.0 / (dy ** orow * dx ** ocol) for orow, ocol in orders])
    return {order: stack[k] for k, order in enumerate(orders)}


#: Rounding floors already computed, by detector, scale, cell size, truncation, prior blur and
#: rounding level: they depend on nothing else, and a run asks for the same few in every window.
_FLOORS: dict = {}


def _impulse_floor(component_of, sigma_m: float, pixel_size_m: tuple[float, float], *, truncate: float,
                   rounding_std: float, key: tuple) -> float:
    """:func:`~lineament.crossings.rounding_floor` of linear filter components, from their impulse responses.

    ``key`` names the components (detector and prior blur); the value is
    kept for the next window with the same scalars.
    """
    k = (key, float(sigma_m), float(pixel_size_m[0]), float(pixel_size_m[1]), float(truncate), float(rounding_std))
    floor = _FLOORS.get(k)
    if floor is None:
        floor = rounding_floor(component_of(unit_impulse(sigma_m, pixel_size_m, truncate)), rounding_std)
        if len(_FLOORS) >= 4096:
            _FLOORS.clear()
        _FLOORS[k] = floor
    return floor


# --------------------------------------------------------------------------- valleys and ridges
#: The last Hessian stack made by each thread: (weak reference to its window, key, stack).
_LAST_STACKS: dict = {}


def _hessian_stack(image: np.ndarray, sigma_m: float, pixel_size_m: tuple[float, float], truncate: float,
                   prior_blur_px: float) -> dict:
    """First and second Gaussian derivatives for the valley and ridge detectors.

    The two detectors run one after the other on the same window and scale,
    so the second reuses the first's stack: each thread keeps its last one
    while the window it came from lives (a weak reference drops it with the
    window); the arrays are never changed in place.
    """
    key = (float(sigma_m), float(pixel_size_m[0]), float(pixel_size_m[1]), float(truncate), float(prior_blur_px),
           image.shape)
    thread = threading.get_ident()
    last = _LAST_STACKS.pop(thread, None)  # let the previous stack go before the next is made
    if last is not None and last[0]() is image and last[1] == key:
        d = last[2]
    else:
        del last
        d = derivative_stack(image, sigma_m, pixel_size_m, ((0, 1), (1, 0), (0, 2), (2, 0), (1, 1)),
                             truncate=truncate, prior_blur_px=prior_blur_px)

    def forget(ref) -> None:
        entry = _LAST_STACKS.get(thread)
        if entry is not None and entry[0] is ref:
            _LAST_STACKS.pop(thread, None)

    _LAST_STACKS[thread] = (weakref.ref(image, forget), key, d)
    return d


#: Exponent gamma of the scale normalisation ``sigma**(2 gamma) * L_pp`` used to compare
#: principal curvature across scales (Lindeberg 1998, section 4: gamma = 3/4 for ridges).  With
#: it, a Gaussian trough or crest of standard deviation ``w`` has its normalised curvature
#: peak at sigma = w: ``d/dt log(t**(3/4) (t0 + t)**(-3/2)) = 0`` at ``t = t0``.
RIDGE_GAMMA = 0.75

#: ``2 sqrt(2) sigma**2 |L_pp|`` is the depth of the Gaussian trough of standard deviation
#: sigma that gives principal curvature ``L_pp`` on its axis at scale sigma: blurring
#: ``-A exp(-d**2 / (2 w**2))`` by sigma gives ``-A (w / s) exp(-d**2 / (2 s**2))`` with
#: ``s**2 = w**2 + sigma**2``, whose curvature on the axis is ``A w / s**3``; at w = sigma that is
#: ``A / (2 sqrt(2) sigma**2)`` (analytic).
TROUGH_DEPTH_FACTOR = 2.0 * math.sqrt(2.0)

#: Direction (unit vector in (x east, y down the rows)) that fixes the sign of the smoothed
#: principal direction.  Lines running within a few degrees of it (grid azimuth 37.5 degrees,
#: chosen 7.5 degrees from every multiple of 15 degrees, where synthetic and man-made features
#: seldom run) may break where their direction wobbles across it; see :func:`_curvature_level_set`.
ORIENTATION_REFERENCE = (math.sin(math.radians(37.5)), -math.cos(math.radians(37.5)))

#: Calibration of the valley and ridge noise level (see :func:`_curvature_level_set`).  In units
#: of the pooled robust standard deviation, the strength at valley crossings on Gaussian random
#: terrain (spectral exponents 2.6 and 3.4) has its 99.9 % quantile at 6.0 to 6.5, against 4.0 for
#: the LoG edges (our measurement); with 1.75, lines written on such terrain with no features
#: (0.00 to 0.02 km per km^2 per family at the default scales) match the LoG edges (0.01 to 0.02).
#: That was with the spread sampled where lines are allowed, which leaves out the orientation-flip
#: cells and read 1.05 to 1.12 times the spread over the whole sign condition (more at 2 px than at
#: 4 px; our measurement on the same terrain); sampled over the sign condition, 1.9 keeps the
#: thresholds of the default scales within a few per cent of the calibrated ones.
CURVATURE_NOISE_CALIBRATION = 1.9


def _curvature_level_set(image: np.ndarray, sigma_m: float, pixel_size_m: tuple[float, float], *,
                         truncate: float, rounding_std: float, sign: int, prior_blur_px: float = 0.0,
                         noise: bool = True) -> LevelSet:
    """Valley (``sign=+1``) or ridge (``sign=-1``) axes from the Hessian at one scale.

    The principal direction ``p`` is the eigenvector of the Hessian whose
    eigenvalue ``L_pp`` has the largest magnitude; a valley axis (trough
    line) is where the first derivative along it, ``L_p``, crosses zero with
    ``L_pp > 0`` (``L_pp < 0`` for a ridge or crest line), and
    ``|L_pp| > |L_qq|`` holds by the choice of ``p`` (Lindeberg 1998,
    section 4; Steger 1998, section 2).  In the valley detector ``p`` always
    belongs to the larger eigenvalue ``L_pp = m + r`` (ridge: the smaller,
    ``m - r``), ``m = (Lxx + Lyy) / 2``, ``r = sqrt(((Lxx - Lyy) / 2)**2 +
    Lxy**2)``, so ``p`` turns smoothly and the sign condition
    ``sign * L_pp > |L_qq|`` is ``sign * m > 0``.

    ``p`` is only defined up to its sign, and ``L_p`` changes sign with it.
    The field traced is ``L_p`` with ``p`` oriented by a smooth rule: the
    principal directions are averaged over a Gaussian window of sigma as
    double angles (``|L_pp| (cos 2 theta, sin 2 theta)``, where the sign
    condition holds), the mean direction ``n`` is oriented so that
    ``n . b > 0`` with ``b`` the fixed :data:`ORIENTATION_REFERENCE`, and
    ``p`` so that ``p . n > 0``.  Near a line ``n`` is almost constant, so
    ``p`` keeps one orientation along it even where ``p`` itself wobbles
    with the terrain.  No rule can orient every direction continuously (a
    direction field has two orientations), so cells whose oriented ``p``
    points against that of one of their 8 neighbours are taken out of
    ``allowed``: there the sign of ``L_p`` jumps without a line.  This
    happens where ``n`` turns through the direction perpendicular to ``b``,
    so a line running within a few degrees of ``b`` (grid azimuth 37.5
    degrees) breaks where its mean direction wobbles across it, and at
    junctions where ``p`` turns by more than 90 degrees within sigma.

    Strength is ``2 sqrt(2) sigma**2 |L_pp|``: the depth (valley) or height
    (ridge) of the Gaussian profile of standard deviation sigma that has the
    same curvature on its axis, in raster units.  A Gaussian profile of
    standard deviation ``w`` and depth ``A`` reads ``A * 2 sqrt(2) sigma**2 w
    / (w**2 + sigma**2)**1.5``, exactly ``A`` at sigma = w, the scale that
    gamma = 3/4 selects (:mod:`lineament.scale_selection`).

    Noise: for an isotropic Gaussian random surface, ``(Lxx - Lyy) / 2`` and
    ``Lxy`` have equal variance, zero mean, and are independent of
    ``m`` (uncorrelated jointly Gaussian), so sampling them where
    ``sign * m > 0`` does not bias them; their pooled robust standard
    deviation times ``2 sqrt(2) sigma**2`` (times
    :data:`CURVATURE_NOISE_CALIBRATION`) is the noise level.

    The smoothed direction uses a second Gaussian of sigma, so the detector
    reaches twice as far as its derivative kernels (``reach_factor`` 2).

    References
    ----------
    Lindeberg, T. (1998). Edge detection and ridge detection with automatic
    scale selection. IJCV 30(2), 117-156. doi:10.1023/A:1008097225773
    Steger, C. (1998). An unbiased detector of curvilinear structures. IEEE
    TPAMI 20(2), 113-125. doi:10.1109/34.659930
    """
    d = _hessian_stack(image, sigma_m, pixel_size_m, truncate, prior_blur_px)
    lx, ly, lxx, lyy, lxy = d[(0, 1)], d[(1, 0)], d[(0, 2)], d[(2, 0)], d[(1, 1)]

    def components(img):
        dd = derivative_stack(img, sigma_m, pixel_size_m, ((0, 2), (2, 0), (1, 1)), truncate=truncate,
                              prior_blur_px=prior_blur_px)
        return (np.float32(0.5) * (dd[(0, 2)] - dd[(2, 0)]), dd[(1, 1)])

    floor = _impulse_floor(components, sigma_m, pixel_size_m, truncate=truncate, rounding_std=rounding_std,
                           key=("curvature", float(prior_blur_px)))
    factor = TROUGH_DEPTH_FACTOR * sigma_m * sigma_m
    # Compiled passes (lineament._curvature), the formulas of the docstring cell by cell:
    # m = (Lxx + Lyy) / 2, a = (Lxx - Lyy) / 2, r = hypot(a, Lxy), L_pp = m + sign r, p at angle
    # atan2(Lxy, a) / 2 (ridges: + 90 degrees).  Where the principal curvatures differ by no more
    # than float32 arithmetic can produce (r at the rounding floor: a plane, a flattened lake, the
    # plateaus of a clean step) the principal direction is undefined: no line lies there and the
    # cell is no sample of the background (``condition``: sign m > 0 and r above the floor).
    px, py, wc, ws, strength, condition = principal_directions(lxx, lyy, lxy, sign=sign, factor=factor,
                                                               floor=floor)
    # smoothed principal direction (double-angle average weighted by |L_pp| where the sign
    # condition holds), oriented by the reference direction; p is then oriented along it
    sigma_rc = (sigma_m / pixel_size_m[1], sigma_m / pixel_size_m[0])
    c2 = gaussian_derivative(wc, sigma_rc, (0, 0), truncate=truncate)
    s2 = gaussian_derivative(ws, sigma_rc, (0, 0), truncate=truncate)
    field = orient_and_field(c2, s2, ORIENTATION_REFERENCE, lx, ly, px, py)
    allowed = condition & ~orientation_flips(px, py)
    a = np.float32(0.5) * (lxx - lyy) if noise else None

    noise_factor = factor * CURVATURE_NOISE_CALIBRATION
    # Noise is sampled wherever the sign condition holds: the cells dropped at orientation flips
    # are where the principal direction turns, which favours small |(Lxx - Lyy) / 2| and |Lxy|, and
    # their share depends on the grid spacing (one cell wide), so leaving them in keeps the noise
    # level a property of the terrain alone.
    return LevelSet(field, strength, allowed, (a, lxy) if noise else (), noise_factor, floor * noise_factor,
                    noise_mask=condition)


# --------------------------------------------------------------------------- gradient edges
#: Calibration of the gradient-edge noise level (see :func:`_gradient_level_set`).  Maxima of the
#: gradient magnitude on Gaussian random terrain form long, smooth lines along hillslopes; with
#: 1.0 the defaults wrote 0.04 to 0.18 km per km^2, with 1.1 0.003 to 0.03, like the LoG edges
#: (our measurement, spectral exponents 2.6 to 3.4).
GRADIENT_NOISE_CALIBRATION = 1.1


def _gradient_level_set(image: np.ndarray, sigma_m: float, pixel_size_m: tuple[float, float], *,
                        truncate: float, rounding_std: float, prior_blur_px: float = 0.0,
                        noise: bool = True) -> LevelSet:
    """Gradient edges (Canny 1986) at one scale, as a level set.

    Non-maximum suppression of the Gaussian gradient magnitude along the
    gradient direction ``w`` is the zero crossing of the second derivative
    along ``w``, ``L_ww = (Lx**2 Lxx + 2 Lx Ly Lxy + Ly**2 Lyy) / |grad L|**2``,
    where the third derivative along ``w``, ``L_www``, is negative (a
    maximum of the gradient magnitude, not a minimum); this differential
    form is Lindeberg's (1998, section 3).  ``w`` is oriented by the
    gradient itself, so the field has no sign ambiguity.

    Strength is ``sqrt(2 pi) sigma |grad L|``: an ideal step of height
    ``h`` has ``|grad L| = h / (sqrt(2 pi) sigma)`` on the edge at scale
    sigma (analytic), so strength is the equivalent step height, as for the
    LoG edges.  Noise: the gradient components ``Lx``, ``Ly`` (zero mean for
    the background; sampled where ``L_www < 0``, a condition unchanged by
    ``L -> -L``, so they stay symmetric, and where the gradient is flat, at
    the float32 rounding floor) times ``sqrt(2 pi) sigma``.

    References
    ----------
    Canny, J. (1986). A computational approach to edge detection. IEEE TPAMI
    8(6), 679-698. doi:10.1109/TPAMI.1986.4767851
    Lindeberg, T. (1998). Edge detection and ridge detection with automatic
    scale selection. IJCV 30(2), 117-156. doi:10.1023/A:1008097225773
    """
    orders = ((0, 1), (1, 0), (0, 2), (2, 0), (1, 1), (0, 3), (1, 2), (2, 1), (3, 0))
    d = derivative_stack(image, sigma_m, pixel_size_m, orders, truncate=truncate, prior_blur_px=prior_blur_px)
    lx, ly = d[(0, 1)], d[(1, 0)]
    g = np.hypot(lx, ly)

    def components(img):
        dd = derivative_stack(img, sigma_m, pixel_size_m, ((0, 1), (1, 0)), truncate=truncate,
                              prior_blur_px=prior_blur_px)
        return (dd[(0, 1)], dd[(1, 0)])

    floor = _impulse_floor(components, sigma_m, pixel_size_m, truncate=truncate, rounding_std=rounding_std,
                           key=("gradient", float(prior_blur_px)))
    # a gradient no larger than float32 arithmetic can produce (the rounding floor) is flat: its
    # direction is undefined, it carries no line, and it is a background sample (as an exact zero)
    nz = g > np.float32(floor * math.sqrt(2.0))
    safe = np.where(nz, g, np.float32(1.0))
    wx, wy = lx / safe, ly / safe
    lww = wx * wx * d[(0, 2)] + np.float32(2.0) * wx * wy * d[(1, 1)] + wy * wy * d[(2, 0)]
    lwww = (wx ** 3 * d[(0, 3)] + np.float32(3.0) * wx * wx * wy * d[(1, 2)]
            + np.float32(3.0) * wx * wy * wy * d[(2, 1)] + wy ** 3 * d[(3, 0)])
    field = np.where(nz, lww, np.float32(0.0)).astype(np.float32)
    allowed = ~(lwww > 0) | ~nz  # a maximum along w; also flat cells, which carry no line (field 0)

    factor = step_strength_factor(sigma_m)
    strength = (g * np.float32(factor)).astype(np.float32)

    noise_factor = factor * GRADIENT_NOISE_CALIBRATION
    return LevelSet(field, strength, allowed, (lx, ly), noise_factor, floor * noise_factor)


#: Detectors by feature name; ``edges`` uses the operator chosen in the settings.
DETECTORS: dict[str, dict[str, Detector]] = {
    "edges": {
        "log": Detector("edge", "log", 1.0, functools.partial(_edge_level_set, operator="log"),
                        MIN_EDGE_SIGMA_CELLS, WHOLE_RASTER_PIXELS),
        "dog": Detector("edge", "dog", math.sqrt(DOG_RATIO),
                        functools.partial(_edge_level_set, operator="dog"), MIN_EDGE_SIGMA_CELLS,
                        WHOLE_RASTER_PIXELS),
        "gradient": Detector("edge", "gradient", 1.0, _gradient_level_set, MIN_EDGE_SIGMA_CELLS),
    },
    "valleys": {
        "hessian": Detector("valley", "hessian", 2.0, functools.partial(_curvature_level_set, sign=1)),
    },
    "ridges": {
        "hessian": Detector("ridge", "hessian", 2.0, functools.partial(_curvature_level_set, sign=-1)),
    },
}


def detectors_for(settings, *, is_image: bool = False) -> list[Detector]:
    """Detectors a run uses, in output order (edges, valleys, ridges).

    Without ``settings.features``, a DEM gets every family that is
    available and an image gets edges.
    """
    if settings.features is not None:
        wanted = settings.features
    else:
        wanted = ("edges",) if is_image else tuple(f for f in ("edges", "valleys", "ridges") if f in DETECTORS)
    out = []
    for feature in wanted:
        if feature not in DETECTORS:
            raise SettingsError(f"feature {feature!r} is not available in this version")
        table = DETECTORS[feature]
        out.append(table[settings.operator] if feature == "edges" else next(iter(table.values())))
    return out
