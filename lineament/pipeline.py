"""The extraction pipeline: raster in, lineament records out.

Data flow::

    source (array or file), settings
      -> plan_run: scales in pixels, halo, centring offset, noise level and
         thresholds per scale and detector (from tile-independent sample blocks)
      -> per tile (serial, local processes or a Dask cluster):
           read window = core + halo; centre; per scale: fill voids, detector
           level set, usable cells; trace_level_set -> whole pieces + fragments
      -> stitch fragments across tiles, apply the hysteresis rule to them
      -> sort canonically; georeference, simplify, measure (vectorize)
      -> ExtractionResult

Every quantity a tile uses is either global (offset, thresholds) or computed
from cells inside its window, so the lines do not depend on tile size,
worker count or order of execution.
"""

from __future__ import annotations

import dataclasses
import math
import os
import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy import ndimage

from ._version import __version__
from ._kernels import _bands, available_cores
from ._order_stats import median, median_abs
from .crossings import MAD_TO_SIGMA, ROUNDING_STD_PER_SPAN, Core, Fragment, keep_run, stitch_fragments, trace_level_set
from .detectors import Detector, detectors_for
from .errors import InputError, SettingsError
from .geodesy import path_length_margin
from .georef import GeoRef
from .pyramid import LEVEL_BLUR_PX, Pyramid, decimation_factor, pyramid_reach
from .raster_io import RasterData, open_raster
from .scalespace import fill_voids
from .settings import ExtractionSettings, Scale
from .tiling import DEFAULT_TILE_SIZE, ArraySource, FileSource, Tile, spread_sample, strided_subsample, tile_grid
from .vectorize import Lineament, pieces_to_lines

#: Core size of the blocks the noise level is measured on; fixed, so that the
#: noise level (and every threshold) does not depend on the tile size.  512 px span 32 sigmas
#: of the default coarsest scale (16 px).
NOISE_BLOCK = 512
#: Noise blocks, spread evenly over the raster: an eighth of them, at least
#: :data:`MIN_NOISE_BLOCKS` and at most :data:`MAX_NOISE_BLOCKS`.  Up to :data:`MAX_NOISE_SAMPLES`
#: cells are sampled; with 512-px blocks, eight of them hold about 2 million cells, so an eighth
#: (rather than the quarter of 1024-px blocks used before) loses no samples, spreads them over
#: twice as many places and filters about 40 % fewer cells (halos included) on mid-size rasters.
MIN_NOISE_BLOCKS = 8
MAX_NOISE_BLOCKS = 64
#: At most this many samples per noise component, pooled over blocks.
MAX_NOISE_SAMPLES = 2_000_000
#: Cells read to find the centring offset and the value range.
OVERVIEW_PIXELS = 4_000_000


@dataclass(frozen=True)
class ScaleReport:
    """What happened at one scale and detector: sigma, noise level, thresholds, output."""

    scale_m: float
    scale_px: float
    kind: str
    operator: str
    noise: float
    high_threshold: float
    low_threshold: float
    lines: int
    length_m: float

    def to_dict(self) -> dict:
        return {k: (round(v, 6) if isinstance(v, float) else v) for k, v in self.__dict__.items()}


@dataclass(frozen=True)
class ScalePlan:
    """One scale: sigma in metres and in pixels along rows and columns.

    ``factor`` is the step of the decimated grid it is filtered on
    (:mod:`lineament.pyramid`; 1: full resolution).
    """

    scale: Scale
    sigma_m: float
    sigma_rc: tuple[float, float]
    factor: int = 1

    @property
    def scale_px(self) -> float:
        return math.sqrt(self.sigma_rc[0] * self.sigma_rc[1])


@dataclass(frozen=True)
class Thresholds:
    noise: float
    high: float
    low: float
    sustained: float | None


@dataclass(frozen=True)
class RunPlan:
    """Everything a tile needs, identical for every tile of a run."""

    georef: GeoRef
    pixel_m: tuple[float, float]
    settings: ExtractionSettings
    scales: tuple[ScalePlan, ...]
    detectors: tuple[Detector, ...]
    halo: tuple[int, int]
    offset: float
    rounding_std: float
    thresholds: dict = field(default_factory=dict)  # (scale index, detector index) -> Thresholds
    search_sigmas: tuple = ()  # scales searched for best_scale_m (metres); empty: not selected
    path_margin: float = 1.5  # geodesic length / length in pixel metres, at most (path_length_margin)


@dataclass
class TileOutput:
    """Pieces a tile owns whole, and fragments that continue into other tiles."""

    pieces: list  # (scale index, detector index, rows, cols, strength, profile or None)
    fragments: list  # (scale index, detector index, Fragment, profile or None)


@dataclass
class ExtractionResult:
    """Lines found in one raster plus everything needed to report and reproduce the run.

    Attributes
    ----------
    lines : list of Lineament
        In a canonical order: by scale, detector, then first vertex.
    georef : GeoRef
    source : str
    settings : ExtractionSettings
    scales : list of ScaleReport
    seconds : float
        Wall time of the extraction.
    tiles : int
        Number of tiles processed.
    """

    lines: list[Lineament]
    georef: GeoRef
    source: str
    settings: ExtractionSettings
    scales: list[ScaleReport] = field(default_factory=list)
    seconds: float = 0.0
    tiles: int = 1

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


# --------------------------------------------------------------------------- planning
def _scale_plans(georef: GeoRef, settings: ExtractionSettings, source: str, *,
                 size_of: GeoRef | None = None) -> tuple[tuple[float, float], list[ScalePlan]]:
    """Sigma in pixels per axis for each scale, at the pixel size of ``georef``.

    ``size_of`` is the whole raster, checked against the largest kernel
    (defaults to ``georef``).
    """
    pixel_m = georef.pixel_size_m()
    size_of = size_of or georef
    if georef.crs is None and any(s.unit == "m" for s in settings.scales):
        raise SettingsError(f"{source}: no CRS, so scales must be given in pixels (e.g. 2px,4px)")
    plans = []
    for s in settings.scales:
        sigma_m = s.sigma_m(pixel_m)
        plans.append(ScalePlan(s, sigma_m, (sigma_m / pixel_m[1], sigma_m / pixel_m[0])))
    smallest = min(plans[0].sigma_rc)
    if smallest < 0.5:
        raise SettingsError(f"{source}: scale {settings.scales[0]} is {smallest:.2f} pixels; use scales of at "
                            f"least 1 pixel (pixel size {pixel_m[0]:.3g} x {pixel_m[1]:.3g} m)")
    largest = plans[-1].sigma_rc
    need = [2 * settings.void_margin_sigmas * x + 3 for x in largest]
    if size_of.height < need[0] or size_of.width < need[1]:
        raise InputError(f"{source}: raster of {size_of.height} x {size_of.width} pixels is too small for scale "
                         f"{settings.scales[-1]} (needs at least {math.ceil(need[0])} x {math.ceil(need[1])})")
    return pixel_m, plans


def _halo(plans: list[ScalePlan], detectors: list[Detector], settings: ExtractionSettings) -> tuple[int, int]:
    """Cells a window needs beyond its core: fill reach + kernel reach + margin + stencils.

    On a decimated grid the stencils (derivatives, cubic sampling) span
    coarse cells, and the halving blurs reach further; the halo is a multiple
    of the largest decimation factor, so windows stay aligned with the
    decimated grids.
    """
    reach = max(d.reach_factor for d in detectors) * settings.truncate
    step = max(p.factor for p in plans)
    out = []
    for axis in (0, 1):
        need = max(int(math.ceil((settings.truncate + reach + settings.void_margin_sigmas) * p.sigma_rc[axis]))
                   + 6 * p.factor + pyramid_reach(p.factor, settings.truncate) for p in plans)
        out.append(step * int(math.ceil(need / step)))
    return (out[0], out[1])


def _coarse_window(tile: Tile, factor: int) -> tuple[tuple[int, int], Core]:
    """Offset and core of a tile on the grid decimated by ``factor`` (window offsets are multiples of it)."""
    r0, c0 = tile.offset
    c = tile.core
    return ((r0 // factor, c0 // factor),
            Core(c.row0 // factor, c.col0 // factor, -(-c.row1 // factor), -(-c.col1 // factor)))


def _centre(values: np.ndarray, valid: np.ndarray, offset: float, z_factor: float) -> np.ndarray:
    """``(values - offset) * z_factor`` as float32, 0 at invalid cells (one new array).

    Computed in bands of rows on the kernel threads (element by element, so
    the same numbers however the rows are split).
    """
    arr = np.empty(values.shape, (values[:1, :1] - offset).dtype)  # the dtype numpy gives (no copy)
    voids = not valid.all()

    def rows(r0: int, r1: int) -> None:
        part = arr[r0:r1]
        with np.errstate(invalid="ignore", over="ignore"):
            np.subtract(values[r0:r1], offset, out=part)
            if z_factor != 1.0:  # multiplying by 1 changes no value (IEEE 754), so the pass is saved
                part *= z_factor
        if voids:
            part[~valid[r0:r1]] = 0

    _bands(rows, values.shape[0], values.size)
    return arr.astype(np.float32, copy=False)


def _span(values: np.ndarray, offset: float, z_factor: float) -> float:
    """``max(|(values - offset) * z_factor|)`` as NumPy computes it, from the two extreme values.

    Rounding is monotonic, so the largest and smallest rounded differences
    come from the largest and smallest values, and the largest magnitude is
    one of them (multiplying by ``z_factor``, of either sign, keeps the order
    of magnitudes).
    """
    lo, hi = values.min(), values.max()
    with np.errstate(invalid="ignore", over="ignore"):
        ends = (np.asarray([lo, hi]) - offset) * z_factor
    return float(np.max(np.abs(ends)))


def _usable(valid: np.ndarray, edges: tuple[bool, bool, bool, bool], pixel_m: tuple[float, float]) -> np.ndarray | None:
    """Distance in metres from each cell to the nearest void or raster edge (None: nothing near).

    Window sides inside the raster are padded as valid, raster edges as void.
    """
    top, bottom, left, right = edges
    if valid.all():
        return None  # only raster edges, if any: see _usable_mask
    padded = np.pad(valid, 1, constant_values=True)
    if top:
        padded[0, :] = False
    if bottom:
        padded[-1, :] = False
    if left:
        padded[:, 0] = False
    if right:
        padded[:, -1] = False
    dist = ndimage.distance_transform_edt(padded, sampling=(pixel_m[1], pixel_m[0]))
    return dist[1:-1, 1:-1]


def _usable_mask(dist: np.ndarray | None, edges: tuple[bool, bool, bool, bool], shape: tuple[int, int],
                 pixel_m: tuple[float, float], margin_m: float, step: int) -> np.ndarray:
    """Cells (on the grid decimated by ``step``) farther than ``margin_m`` from voids and raster edges.

    ``dist`` is :func:`_usable`'s distance map, or None when the window has
    no voids; then the distance is to the nearest raster edge among
    ``edges``, measured from the cell centre to the edge's outer cell
    centre row or column, as the distance transform measures it.
    """
    if dist is not None:
        return dist[::step, ::step] > margin_m
    top, bottom, left, right = edges
    h, w = shape
    dx, dy = pixel_m
    rows, cols = np.arange(0, h, step), np.arange(0, w, step)
    ok_r, ok_c = np.ones(rows.size, bool), np.ones(cols.size, bool)
    if top:
        ok_r &= (rows + 1) * dy > margin_m
    if bottom:
        ok_r &= (h - rows) * dy > margin_m
    if left:
        ok_c &= (cols + 1) * dx > margin_m
    if right:
        ok_c &= (w - cols) * dx > margin_m
    # every row a copy of the column test, then the rows that fail cleared: the same array as
    # ok_r[:, None] & ok_c[None, :], made 10 to 20 times faster than that broadcast (our timing)
    out = np.empty((rows.size, cols.size), bool)
    out[:] = ok_c
    out[~ok_r] = False
    return out


def _scale_halo(plan: RunPlan, sp: ScalePlan, *, voids: bool = True) -> tuple[int, int]:
    """Halo one scale needs around a core (as :func:`_halo`, for this scale alone; a multiple of its factor).

    With ``voids=False`` the halo of a window known to have no voids: the
    filling reach is left out (filling changes nothing there), and the margin
    kept from voids and raster edges only counts where it is wider than the
    kernels' reach.
    """
    s = plan.settings
    reach = max(d.reach_factor for d in plan.detectors) * s.truncate
    sigmas = (s.truncate + reach + s.void_margin_sigmas) if voids else max(reach, s.void_margin_sigmas)
    out = []
    for axis in (0, 1):
        need = (int(math.ceil(sigmas * sp.sigma_rc[axis]))
                + 6 * sp.factor + pyramid_reach(sp.factor, s.truncate))
        out.append(sp.factor * int(math.ceil(need / sp.factor)))
    return (out[0], out[1])


def _void_free_window(plan: RunPlan, tile: Tile, values: np.ndarray, valid: np.ndarray):
    """A window without voids, cut down to what its core needs (else the window as it is).

    The halo of :func:`_halo` covers the reach of void filling and the
    margin kept from voids besides the kernels.  In a window without voids
    neither matters: every value a core cell depends on within the kernels'
    reach is read, and no void is within the margin of a core cell (the cut
    window still covers the margin).  So the window is cut to the
    core plus :func:`_scale_halo` ``(voids=False)`` of the widest scale, and
    the core's values, level sets and lines are the same as on the whole
    window.  Windows stay aligned with every decimated grid.  Not done when
    best scales are searched, which filter the whole window.

    Returns ``(tile, values, valid, voids)``; ``voids`` is False when the window was cut.
    """
    if plan.search_sigmas or not valid.all():
        return tile, values, valid, True
    step = max(sp.factor for sp in plan.scales)
    halos = [_scale_halo(plan, sp, voids=False) for sp in plan.scales]
    hr, hc = (step * int(math.ceil(max(h[axis] for h in halos) / step)) for axis in (0, 1))
    c = tile.core
    w0r, w0c, w1r, w1c = tile.window
    window = (max(w0r, c.row0 - hr), max(w0c, c.col0 - hc), min(w1r, c.row1 + hr), min(w1c, c.col1 + hc))
    cut = (slice(window[0] - w0r, window[2] - w0r), slice(window[1] - w0c, window[3] - w0c))
    return Tile(tile.index, c, window), values[cut], valid[cut], False


def _window_level_sets(plan: RunPlan, tile: Tile, values: np.ndarray, valid: np.ndarray, *, noise: bool = True):
    """Yield (scale index, detector index, LevelSet, usable mask, filled window, factor, sub-tile) for one window.

    Each scale is filtered on the part of the window its own halo needs
    around the core (the sub-tile's window; the whole window when best
    scales are searched, whose widest sigma needs it): a fine scale does not
    pay for the halo of the coarsest.  Values at core cells are the same
    either way (each depends only on cells within the scale's halo).  A
    scale with ``factor > 1`` is filtered on the decimated grid (its
    LevelSet and usable mask are on that grid); the filled window is the
    full-resolution one, made only when best scales are searched.
    With ``noise=False`` only tracing follows, so detectors may leave out
    their noise samples.
    """
    s = plan.settings
    shape = plan.georef.shape
    tile, values, valid, voids = _void_free_window(plan, tile, values, valid)
    arr = _centre(values, valid, plan.offset, s.z_factor)
    dist = _usable(valid, tile.edges(shape), plan.pixel_m)
    pyramid = Pyramid(arr, valid, truncate=s.truncate)
    w0r, w0c, w1r, w1c = tile.window
    c = tile.core
    for si, sp in enumerate(plan.scales):
        f = sp.factor
        if plan.search_sigmas:
            sub = tile
        else:
            hr, hc = _scale_halo(plan, sp, voids=voids)
            sub = Tile(tile.index, c, (max(w0r, c.row0 - hr), max(w0c, c.col0 - hc),
                                       min(w1r, c.row1 + hr), min(w1c, c.col1 + hc)))
        r0, c0, r1, c1 = (sub.window[0] - w0r, sub.window[1] - w0c, sub.window[2] - w0r, sub.window[3] - w0c)
        sub_valid = valid[r0:r1, c0:c1]
        sub_dist = None if dist is None else dist[r0:r1, c0:c1]
        fine_filled = None
        if f == 1 or plan.search_sigmas:
            fine_filled = fill_voids(arr[r0:r1, c0:c1], sub_valid, sp.sigma_rc, truncate=s.truncate)
        if f == 1:
            filled = fine_filled
            pixel, blur = plan.pixel_m, 0.0
        else:
            level, level_valid = pyramid.level(f)
            cut = (slice(r0 // f, -(-r1 // f)), slice(c0 // f, -(-c1 // f)))
            filled = fill_voids(level[cut], level_valid[cut], (sp.sigma_rc[0] / f, sp.sigma_rc[1] / f),
                                truncate=s.truncate)
            pixel, blur = (plan.pixel_m[0] * f, plan.pixel_m[1] * f), LEVEL_BLUR_PX
        usable = _usable_mask(sub_dist, sub.edges(shape), sub_valid.shape, plan.pixel_m,
                              s.void_margin_sigmas * sp.sigma_m, f)
        for di, det in enumerate(plan.detectors):
            ls = det.run(filled, sp.sigma_m, pixel, truncate=s.truncate, rounding_std=plan.rounding_std,
                         prior_blur_px=blur, noise=noise)
            yield si, di, ls, usable, fine_filled, f, sub


def _noise_samples(plan: RunPlan, tile: Tile, values, valid, per_block: int) -> dict:
    """Noise components at usable core cells of one block, subsampled on a fixed lattice."""
    return _noise_from(_window_level_sets(plan, tile, values, valid), tile.core, per_block)


def _noise_from(level_sets, core: Core, per_block: int) -> dict:
    """Noise components of each level set at usable cells of ``core`` (which its window holds)."""
    out: dict = {}
    for si, di, ls, usable, _, f, sub in level_sets:
        (r0, c0), cc = _coarse_window(Tile(sub.index, core, sub.window), f)
        sl = (slice(cc.row0 - r0, cc.row1 - r0), slice(cc.col0 - c0, cc.col1 - c0))
        ok = usable[sl]
        where = ls.allowed if ls.noise_mask is None else ls.noise_mask
        if where is not None:
            ok = ok & where[sl]
        comps = ls.noise_samples
        if comps and ok.size // max(1, per_block) <= 1 and ok.all():
            # the usual case: every cell of the block is a sample (the step below would be 1),
            # copied once, row by row, in the order of an index over the raveled block
            both = np.empty((len(comps),) + ok.shape, np.float32)
            for k, x in enumerate(comps):
                both[k] = x[sl]
            samples = both.reshape(-1)
        else:
            idx = np.flatnonzero(ok.ravel())
            step = max(1, idx.size // max(1, per_block))
            idx = idx[::step]
            parts = [np.asarray(x[sl]).ravel()[idx] for x in comps]
            samples = np.concatenate(parts).astype(np.float32, copy=False) if parts else np.zeros(0, np.float32)
        out[(si, di)] = (samples, ls.noise_floor, ls.noise_factor)
    return out


def _profile_sum(plan: RunPlan, filled: np.ndarray, tile: Tile, kind: str, rows: np.ndarray, cols: np.ndarray,
                 skip_first: bool, skip_last: bool) -> np.ndarray | None:
    """Sum over vertices of the scale-normalised strength at each searched sigma, and the count.

    Sums add up over the fragments of a line (each shared vertex counted
    once), so the line's mean profile, and the scale where it peaks, do not
    depend on tiling.
    """
    if not plan.search_sigmas:
        return None
    from .scale_selection import normalised_strength

    a, b = (1 if skip_first else 0), rows.size - (1 if skip_last else 0)
    if b <= a:
        return np.zeros(len(plan.search_sigmas) + 1)
    r0, c0 = tile.offset
    prof = normalised_strength(filled, rows[a:b] - r0, cols[a:b] - c0, kind, np.asarray(plan.search_sigmas),
                               plan.pixel_m, truncate=plan.settings.truncate)
    return np.append(prof.sum(axis=1), b - a)


def min_length_m(settings: ExtractionSettings, sigma_m: float) -> float:
    """Shortest line written at a scale, metres (``min_length_m``, else ``min_length_sigmas`` sigmas)."""
    return settings.min_length_m if settings.min_length_m is not None else settings.min_length_sigmas * sigma_m


def _surely_shorter(rows: np.ndarray, cols: np.ndarray, pixel_m: tuple[float, float], length_m: float,
                    margin: float) -> bool:
    """True when a traced path cannot measure ``length_m`` once written.

    A piece whose path, in pixel metres, times ``margin`` (a bound on the
    ratio of geodesic to pixel metres, :func:`~lineament.geodesy.path_length_margin`)
    is shorter than the minimum length cannot be written: its written length
    is geodesic and measured after simplification, which only shortens a
    path.  Such pieces are dropped as soon as they are traced.
    """
    if rows.size < 2:
        return True
    path = float(np.hypot(np.diff(cols) * pixel_m[0], np.diff(rows) * pixel_m[1]).sum())
    return path * margin < length_m


def _trace_one(plan: RunPlan, item) -> tuple[list, list]:
    """Trace one level set of a window: pieces it owns whole, and fragments (full-resolution indices).

    Pieces too short to be written are dropped here (:func:`_surely_shorter`);
    fragments are kept whatever their length, since they join others.
    """
    si, di, ls, usable, filled, factor, tile = item
    th = plan.thresholds[(si, di)]
    sp = plan.scales[si]
    kind = plan.detectors[di].kind
    offset, core = _coarse_window(tile, factor)
    p, f = trace_level_set(ls.field, ls.strength, usable, high=th.high, low=th.low, sustained=th.sustained,
                           sustained_length_px=plan.settings.min_length_sigmas * min(sp.sigma_rc) / factor,
                           allowed=ls.allowed, offset=offset, core=core)
    if factor != 1:  # back to full-resolution indices (exact: the factor is a power of two)
        p = [(r * factor, c * factor, st) for r, c, st in p]
        f = [Fragment(fr.rows * factor, fr.cols * factor, fr.strength, fr.start_open, fr.end_open) for fr in f]
    shortest = min_length_m(plan.settings, sp.sigma_m)
    p = [(r, c, st) for r, c, st in p if not _surely_shorter(r, c, plan.pixel_m, shortest, plan.path_margin)]
    pieces, fragments = [], []
    for r, c, st in p:
        ring = r.size > 2 and r[0] == r[-1] and c[0] == c[-1]
        pieces.append((si, di, r, c, st, _profile_sum(plan, filled, tile, kind, r, c, False, ring)))
    for fr in f:
        fragments.append((si, di, fr, _profile_sum(plan, filled, tile, kind, fr.rows, fr.cols,
                                                   fr.start_open, False)))
    return pieces, fragments


#: Level sets traced at once on background threads while the next one is filtered.  Since the
#: filters got faster, tracing is the longer of the two: on our 2-core benchmark (4096 x 4096,
#: four scales, edges) two threads ran the whole extraction in 0.70 to 0.83 s (median 0.74) against
#: 0.73 to 0.97 s (median 0.86) with one, eight alternating rounds; the last tile's finest and
#: coarser scales are then traced side by side instead of one after the other.
TRACE_THREADS = 2
#: Level sets of one window handed to the tracing threads and not yet collected, at most.  Each
#: holds a few arrays of its window (the finest scale's the largest), so this bounds the extra
#: memory; since the serial executor filters the next window while the last traces of one finish
#: (:func:`serial_executor`), up to twice this many can be held.
TRACE_QUEUE = 4
#: Bands of rows each level set of a raster processed as one window is traced in (see
#: :func:`_row_bands`): one window's finest level set is the longest single trace of a run, and
#: in bands the tracing threads share it.
WHOLE_RASTER_TRACE_BANDS = 4


def _tracer_threads():
    """Background threads for tracing (one pool per process)."""
    from ._kernels import thread_pool

    return thread_pool("lineament-trace", TRACE_THREADS)


#: Rows (of the grid a level set is on) beyond its part of the core that a band of a level set
#: traced on its own takes along (:func:`_row_bands`): the vertices of segments that cross the
#: part's edge and their strength taps (three rows either way) lie within them.
BAND_MARGIN = 8


def _row_bands(item, parts: int, search: bool = False) -> list:
    """Split one level set's tracing into ``parts`` bands of core rows, each with its own window.

    A band is traced like a tile of its own: its core is its rows of the
    window's core, its window those rows plus :data:`BAND_MARGIN` either way
    (views of the level set, no copies).  Runs crossing from one band to the
    next come out as fragments and are joined with the others, so the lines
    are the same as from one trace of the whole level set (the tile-size
    tests check the same property for tiles).  Small level sets are not
    split; nor are any when best scales are searched, whose profiles are
    sampled on the whole filled window.
    """
    si, di, ls, usable, filled, factor, tile = item
    (r0, _), core = _coarse_window(tile, factor)
    rows = core.row1 - core.row0
    parts = min(parts, rows // (4 * BAND_MARGIN))
    if parts < 2 or search:
        return [item]
    h = ls.field.shape[0]
    cuts = [core.row0 + (rows * k) // parts for k in range(parts + 1)]
    out = []
    for a, b in zip(cuts[:-1], cuts[1:]):
        w0, w1 = max(r0, a - BAND_MARGIN), min(r0 + h, b + BAND_MARGIN)
        sl = slice(w0 - r0, w1 - r0)
        band_ls = dataclasses.replace(ls, field=ls.field[sl], strength=ls.strength[sl],
                                      allowed=None if ls.allowed is None else ls.allowed[sl],
                                      noise_samples=(), noise_mask=None)
        c = tile.core
        band_core = Core(c.row0 if a == core.row0 else a * factor, c.col0,
                         c.row1 if b == core.row1 else b * factor, c.col1)
        band = Tile(tile.index, band_core, (w0 * factor, tile.window[1], w1 * factor, tile.window[3]))
        out.append((si, di, band_ls, usable[sl], None, factor, band))
    return out


def _trace_from(plan: RunPlan, level_sets, before=None, *, deferred: bool = False, bands: int = 1):
    """Trace every level set of a window, in order.

    The compiled tracer releases the interpreter lock, so level sets are
    traced on background threads (at most :data:`TRACE_THREADS` at once,
    :data:`TRACE_QUEUE` handed over and not yet traced) while the next one
    is filtered; results are gathered in the order of ``level_sets``, so
    nothing depends on timing.  ``before(item)``, if given, runs on each
    item first (in this thread).  With ``bands`` > 1 each level set is
    traced in that many bands of rows (:func:`_row_bands`), so the tracing
    threads share one large level set.

    Returns the :class:`TileOutput`, or with ``deferred`` a function that
    waits for the traces still running and returns it (the caller may filter
    the next window meanwhile).
    """
    from collections import deque

    pieces, fragments = [], []
    pending: deque = deque()  # per level set handed over, the futures of its bands

    def collect() -> None:
        for fut in pending.popleft():
            p, f = fut.result()
            pieces.extend(p)
            fragments.extend(f)

    def drain() -> None:  # after an error: let the traces handed over finish first
        for futs in pending:
            for fut in futs:
                fut.exception()

    try:
        for item in level_sets:
            if before is not None:
                before(item)
            while len(pending) >= TRACE_QUEUE:
                collect()
            parts = _row_bands(item, bands, bool(plan.search_sigmas)) if bands > 1 else [item]
            pending.append([_tracer_threads().submit(_trace_one, plan, part) for part in parts])
            del item, parts
    except BaseException:
        drain()
        raise

    def finish() -> TileOutput:
        try:
            while pending:
                collect()
        finally:
            drain()
        return TileOutput(pieces, fragments)

    return finish if deferred else finish()


def run_tile_task(task) -> object:
    """Worker entry point: ``(kind, plan, source, tile, data, per_block)`` -> samples or TileOutput."""
    return start_tile_task(task)()


def start_tile_task(task) -> Callable[[], object]:
    """:func:`run_tile_task` in two steps: do the work of this thread, return a function for the result.

    For a tracing task the level sets are filtered and handed to the tracing
    threads; the function returned waits for their traces.
    """
    kind, plan, source, tile, data, per_block = task
    values, valid = data if data is not None else source.read(tile.window)
    if kind == "noise":
        samples = _noise_samples(plan, tile, values, valid, per_block)
        return lambda: samples
    return _trace_from(plan, _window_level_sets(plan, tile, values, valid, noise=False), deferred=True)


def _noise_thresholds(settings: ExtractionSettings, samples: list[dict], key: tuple[int, int]) -> Thresholds:
    """Thresholds for one scale and detector from the noise samples of every block."""
    parts = [smp[key] for smp in samples]
    comps = np.concatenate([p[0] for p in parts])
    floor, factor = parts[0][1], parts[0][2]
    robust = 0.0
    if comps.size:
        # The components have zero mean on a background without preferred direction, so the
        # spread is taken about zero: a quarter turn of the raster (which negates one component)
        # then leaves the noise level unchanged.
        robust = float(MAD_TO_SIGMA * median_abs(comps)) * factor
    return _thresholds(settings, max(robust, floor))


def _thresholds(settings: ExtractionSettings, noise: float) -> Thresholds:
    high = settings.high_threshold if settings.high_threshold is not None else settings.high_noise_multiple * noise
    low = settings.low_threshold if settings.low_threshold is not None else settings.low_noise_multiple * noise
    low = min(low, high)
    sustained = None
    if settings.high_threshold is None:
        sustained = min(high, max(low, settings.sustained_noise_multiple * noise))
    return Thresholds(noise, high, low, sustained)


# --------------------------------------------------------------------------- execution
#: ``executor(tasks, on_done) -> results``: runs :func:`run_tile_task` on every task and calls
#: ``on_done(index, result)`` in the calling process as each one finishes.
Executor = Callable[..., list]


#: Noise blocks filtered at once in a serial run (each on its own thread; the filter passes share
#: the kernel threads).  Blocks are small, so one alone leaves the cores idle between passes; with
#: two the noise phase of our 4096 x 4096 benchmark took 85 to 130 ms instead of 121 to 157 ms,
#: and the whole run 0.56 to 0.58 s instead of 0.63 to 0.66 s (best of five, alternating runs).
NOISE_LANES = 2


def _noise_lanes():
    from ._kernels import thread_pool

    return thread_pool("lineament-noise", NOISE_LANES)


def serial_executor(tasks: list, on_done: Callable[[int, object], None] | None = None) -> list:
    """Run tasks in this process.

    A tile's filters run while the tracing threads finish the traces of the
    tile before (:func:`start_tile_task`); noise blocks run
    :data:`NOISE_LANES` at a time.  Results and ``on_done`` calls come in
    task order.
    """
    if tasks and all(t[0] == "noise" for t in tasks):
        return _noise_executor(tasks, on_done)
    out: list = []
    waiting = None  # (index, finish) of the last task started, whose traces may still be running

    def settle(k: int, finish) -> None:
        res = finish()
        out.append(res)
        if on_done:
            on_done(k, res)

    try:
        for k, t in enumerate(tasks):
            started = (k, start_tile_task(t))
            previous, waiting = waiting, started
            if previous is not None:
                settle(*previous)
        if waiting is not None:
            last, waiting = waiting, None
            settle(*last)
    except BaseException:
        if waiting is not None:  # let the traces handed over finish; the error is what counts
            try:
                waiting[1]()
            except BaseException:
                pass
        raise
    return out


def _noise_executor(tasks: list, on_done) -> list:
    """Noise-block tasks, :data:`NOISE_LANES` at a time on threads; results in task order."""
    from collections import deque

    pool = _noise_lanes()
    out: list = []
    pending: deque = deque()

    def settle() -> None:
        out.append(pending.popleft().result())
        if on_done:
            on_done(len(out) - 1, out[-1])

    try:
        for t in tasks:
            pending.append(pool.submit(run_tile_task, t))
            if len(pending) > NOISE_LANES:  # one queued, so a lane never waits for this thread
                settle()
        while pending:
            settle()
    except BaseException:
        for fut in pending:  # let running blocks finish; the error is what counts
            fut.cancel() or fut.exception()
        raise
    return out


def load_compiled_code() -> None:
    """Load (or, the first time after installing, compile) the compiled kernels and tracer.

    Each process pays this once, about half a second from numba's cache;
    calling it before forking worker processes saves it in every worker.
    """
    from ._kernels import correlate1d

    probe = np.linspace(-1.0, 1.0, 64, dtype=np.float32).reshape(8, 8)
    for axis in (0, 1):
        correlate1d(probe, np.array([0.25, 0.5, 0.25]), axis)
        correlate1d(probe, np.array([-0.5, 0.0, 0.5]), axis)
    from .crossings import strength_map

    strength, _, _ = strength_map(probe, 1.0, (1.0, 1.0))
    trace_level_set(probe, strength, np.ones(probe.shape, bool), high=0.0, low=0.0)
    median_abs(probe)


def process_executor(workers: int) -> Executor:
    """Run tasks in ``workers`` local processes; results in task order."""
    from concurrent.futures import ProcessPoolExecutor, as_completed

    def run(tasks: list, on_done=None) -> list:
        if workers <= 1 or len(tasks) <= 1:
            return serial_executor(tasks, on_done)
        out: list = [None] * len(tasks)
        load_compiled_code()  # once here, so forked workers start with it loaded
        n = min(workers, len(tasks))
        # the cores are shared among the processes (each also runs a tracing thread)
        with ProcessPoolExecutor(max_workers=n, initializer=_share_cores,
                                 initargs=(max(1, available_cores() // n),)) as pool:
            futures = {pool.submit(run_tile_task, t): k for k, t in enumerate(tasks)}
            try:
                for fut in as_completed(futures):
                    k = futures[fut]
                    out[k] = fut.result()
                    if on_done:
                        on_done(k, out[k])
            except BaseException:
                for f in futures:
                    f.cancel()
                raise
        return out

    return run


def dask_executor(address: str) -> Executor:
    """Run tasks on an existing Dask distributed scheduler; results in task order.

    The scheduler's workers import :mod:`lineament` and read input files
    themselves, so they must reach the same paths (shared storage) or URLs.
    """
    try:
        from dask.distributed import Client, as_completed
    except ImportError:
        raise SettingsError("--cluster needs Dask: pip install 'lineament[cluster]'") from None

    def run(tasks: list, on_done=None) -> list:
        try:
            client = Client(address, timeout="10s")
        except (OSError, TimeoutError) as exc:
            raise SettingsError(f"cannot reach the Dask scheduler at {address} ({exc})") from None
        try:
            futures = client.map(run_tile_task, tasks, pure=False)
            index = {f.key: k for k, f in enumerate(futures)}
            out: list = [None] * len(tasks)
            for fut in as_completed(futures):
                k = index[fut.key]
                out[k] = fut.result()
                if on_done:
                    on_done(k, out[k])
            return out
        finally:
            client.close()

    return run


# --------------------------------------------------------------------------- driver
#: Cores per local worker process by default.  One process already keeps several cores busy (the
#: filter passes run on a thread per core, tracing on a thread of its own): on 2 cores one process
#: ran 1.17 s and two 1.37 s on a 4096 x 4096 raster (our measurement); with more cores, several
#: processes keep more tracers busy.  Three is a rule of thumb, not measured beyond 2 cores.
CORES_PER_WORKER = 3


def default_workers() -> int:
    """Local worker processes by default: one per :data:`CORES_PER_WORKER` cores, at least one."""
    return max(1, available_cores() // CORES_PER_WORKER)


def _share_cores(threads: int) -> None:
    """Worker process initialiser: filter passes on ``threads`` threads unless LINEAMENT_THREADS says otherwise."""
    os.environ.setdefault("LINEAMENT_THREADS", str(threads))


#: Geographic rasters are processed in latitude bands within which the east-west pixel size
#: changes by at most this fraction, so sigma in pixels is right to this tolerance everywhere.
LATITUDE_BAND_TOLERANCE = 0.01
#: Geographic rasters reaching closer to a pole than this are refused (pixels degenerate).
MAX_ABS_LATITUDE = 85.0


def latitude_bands(georef: GeoRef, tolerance: float = LATITUDE_BAND_TOLERANCE) -> list[tuple[int, int]]:
    """Row ranges of a geographic raster within which the pixel size is constant to ``tolerance``.

    East-west ground size is proportional to cos(latitude); over a band of
    rows its relative change is about tan(latitude) times the band's height
    in radians.  Bands are fixed by the raster's grid alone (not by tiling).
    A projected raster is one band.

    Returns
    -------
    list of (row0, row1)
        Half-open, covering all rows, top to bottom.
    """
    if not georef.is_geographic:
        return [(0, georef.height)]
    t = georef.transform
    dlat = abs(math.radians(t.e)) if t.e else abs(math.radians(t.d))
    bands = []
    r0 = 0
    while r0 < georef.height:
        r1 = r0 + 1
        lat0 = t.f + t.e * r0
        while r1 < georef.height:
            lat1 = t.f + t.e * (r1 + 1)
            worst = max(abs(lat0), abs(lat1))
            if math.tan(math.radians(worst)) * dlat * (r1 + 1 - r0) > tolerance:
                break
            r1 += 1
        bands.append((r0, r1))
        r0 = r1
    return bands


def _aligned_bands(bands: list[tuple[int, int]], step: int) -> list[tuple[int, int]]:
    """Latitude bands with every inner boundary moved down to a multiple of ``step`` (empty bands dropped)."""
    cuts = sorted({step * (b0 // step) for b0, _ in bands[1:]} - {0})
    edges = [0] + cuts + [bands[-1][1]]
    return [(a, b) for a, b in zip(edges[:-1], edges[1:]) if b > a]


def _check_geographic(georef: GeoRef, name: str) -> None:
    if not georef.is_geographic:
        return
    t = georef.transform
    lats = (t.f, t.f + t.e * georef.height)
    if max(abs(v) for v in lats) > MAX_ABS_LATITUDE:
        raise InputError(f"{name}: reaches latitude {max(abs(v) for v in lats):.1f}; east-west pixels "
                         f"degenerate beyond {MAX_ABS_LATITUDE:g} degrees, so reproject it first (for example "
                         "to a polar stereographic CRS)")
    if not georef.is_rectilinear:
        raise InputError(f"{name}: a rotated grid in a geographic CRS is not supported; reproject it first")


def run_extraction(source, settings: ExtractionSettings | None = None, *, tile_size: int | None = None,
                   executor=None, progress: Callable[[int, int], None] | None = None,
                   cache=None) -> ExtractionResult:
    """Extract lineaments from an :class:`ArraySource`, :class:`FileSource` or mosaic.

    Parameters
    ----------
    source : ArraySource, FileSource or MosaicSource
    settings : ExtractionSettings, optional
    tile_size : int, optional
        Core size of tiles in pixels.  Default: the whole raster as one window when it has at
        most ``whole_raster_pixels`` of every detector of the run
        (:data:`~lineament.detectors.WHOLE_RASTER_PIXELS` for edges) and lies in one latitude
        band, else :data:`~lineament.tiling.DEFAULT_TILE_SIZE`.  Results do not depend on it.
    executor : callable, optional
        ``executor(tasks, on_done) -> results``; default serial.
    progress : callable, optional
        Called as ``progress(done, total)`` after each tile.
    cache : TileCache, optional
        Where finished tiles are kept, so an interrupted run can resume
        (see :mod:`lineament.resume`).

    Returns
    -------
    ExtractionResult

    Notes
    -----
    A geographic raster is processed in latitude bands (:func:`latitude_bands`)
    with sigma converted to pixels at each band's central latitude; lines
    crossing from one band to the next are joined where their ends meet
    within half a pixel.
    """
    t0 = time.perf_counter()
    settings = settings or ExtractionSettings()
    whole_if_small = tile_size is None
    tile_size = int(tile_size or DEFAULT_TILE_SIZE)
    if tile_size < 64:
        raise SettingsError(f"tile size must be at least 64 pixels, got {tile_size}")
    executor = executor or serial_executor
    georef, name = source.georef, source.source
    _check_geographic(georef, name)
    detectors = detectors_for(settings, is_image=source.is_image)
    bands = latitude_bands(georef)
    if whole_if_small and len(bands) == 1 and \
            georef.height * georef.width <= min(d.whole_raster_pixels for d in detectors):
        tile_size = max(tile_size, georef.height, georef.width)  # one window (noise from its own cells)
    band_scales = [_scale_plans(georef.window(b0, 0, b1 - b0, georef.width), settings, name, size_of=georef)
                   for b0, b1 in bands]
    # one decimation factor per scale for the whole raster, from its smallest sigma in pixels and
    # the cells per sigma the most demanding detector of the run needs
    min_cells = max(d.min_cells_per_sigma for d in detectors)
    factors = [decimation_factor(min(min(sc[si].sigma_rc) for _, sc in band_scales),
                                 enabled=not settings.full_resolution, min_cells=min_cells)
               for si in range(len(settings.scales))]
    step = max(factors)
    if step > 1:
        # tiles, halos and latitude bands start on rows and columns of every decimated grid
        tile_size = step * int(math.ceil(tile_size / step))
        bands = _aligned_bands(bands, step)
        band_scales = [_scale_plans(georef.window(b0, 0, b1 - b0, georef.width), settings, name, size_of=georef)
                       for b0, b1 in bands]
    band_scales = [(pixel_m, [dataclasses.replace(sp, factor=f) for sp, f in zip(sc, factors)])
                   for pixel_m, sc in band_scales]
    halo = tuple(max(_halo(sc, detectors, settings)[axis] for _, sc in band_scales) for axis in (0, 1))

    # global centring offset and value range, from a tile-independent overview; a raster that is
    # one window is read whole once, and its overview taken from that (the same cells)
    whole = None
    if len(bands) == 1 and georef.height <= tile_size and georef.width <= tile_size:
        whole = source.read((0, 0, georef.height, georef.width))
        ov_values, ov_valid = strided_subsample(*whole, OVERVIEW_PIXELS)
    else:
        ov_values, ov_valid = source.overview(OVERVIEW_PIXELS)
    if not ov_valid.any():
        raise InputError(f"{name}: no valid cells (everything is nodata, NaN or infinite)")
    inside = ov_values.ravel() if ov_valid.all() else ov_values[ov_valid]
    offset = median(inside) if inside.dtype == np.float32 else float(np.median(inside))
    span = _span(inside, offset, settings.z_factor)
    if not math.isfinite(span) or span > float(np.finfo(np.float32).max) / 16:
        raise InputError(f"{name}: values overflow float32 after centring and the z factor")
    rounding_std = ROUNDING_STD_PER_SPAN * span

    def task(kind, plan, tile, per_block=0):
        data = None if source.reads_in_worker else source.read(tile.window)
        return (kind, plan, source, tile, data, per_block)

    search = ()
    if settings.select_scales:
        from .scale_selection import sigma_series

        # from half the smallest scale (but not below one pixel) to twice the largest
        lo = max(0.5 * band_scales[0][1][0].sigma_m, max(band_scales[0][0]))
        hi = 2.0 * band_scales[0][1][-1].sigma_m
        search = tuple(float(v) for v in sigma_series(lo, hi))
    plans, band_tiles = [], []
    first_index = 0
    for band_no, ((b0, b1), (pixel_m, scales)) in enumerate(zip(bands, band_scales)):
        margin = path_length_margin(georef.window(b0, 0, b1 - b0, georef.width), pixel_m)
        plan = RunPlan(georef, pixel_m, settings, tuple(scales), tuple(detectors), halo, offset, rounding_std,
                       search_sigmas=search)
        # noise level per scale and detector, on fixed blocks of this band
        all_blocks = tile_grid(georef.shape, NOISE_BLOCK, halo, rows=(b0, b1))
        blocks = spread_sample(all_blocks, min(MAX_NOISE_BLOCKS, max(MIN_NOISE_BLOCKS, math.ceil(len(all_blocks) / 8))))
        per_block = MAX_NOISE_SAMPLES // len(blocks)
        tiles = tile_grid(georef.shape, tile_size, halo, rows=(b0, b1), first_index=first_index)
        if len(bands) == 1 and len(tiles) == 1:
            # The whole raster is one tile: filter it once.  Each scale and detector gets its noise
            # level from the noise blocks' cores inside this window (the same cells and values a
            # separate pass would see), then is traced at once, so only one level set is held.
            tile = tiles[0]
            assert whole is not None and tile.window == (0, 0, georef.height, georef.width)
            values, valid = whole
            del whole
            plan = RunPlan(georef, pixel_m, settings, tuple(scales), tuple(detectors), halo, offset, rounding_std,
                           {}, search, margin)
            def set_thresholds(item) -> None:
                # the blocks' samples are copies of parts of the level set: two at a time on threads
                samples = list(_noise_lanes().map(lambda b: _noise_from([item], b.core, per_block), blocks))
                plan.thresholds[item[:2]] = _noise_thresholds(settings, samples, item[:2])

            out = _trace_from(plan, _window_level_sets(plan, tile, values, valid), before=set_thresholds,
                              bands=WHOLE_RASTER_TRACE_BANDS)
            if progress:
                progress(1, 1)
            return _finish([plan], bands, [[out]], name, 1, time.perf_counter() - t0)
        samples = None if cache is None else cache.load_noise(band_no)
        if samples is None:
            samples = executor([task("noise", plan, b, per_block) for b in blocks], None)
            if cache is not None:
                cache.save_noise(samples, band_no)
        thresholds = {(si, di): _noise_thresholds(settings, samples, (si, di))
                      for si in range(len(scales)) for di in range(len(detectors))}
        plans.append(RunPlan(georef, pixel_m, settings, tuple(scales), tuple(detectors), halo, offset,
                             rounding_std, thresholds, search, margin))
        first_index += len(tiles)
        band_tiles.append(tiles)

    all_tiles = [(band_no, t) for band_no, tiles in enumerate(band_tiles) for t in tiles]
    outputs: dict = {}
    if cache is not None:
        for _, t in all_tiles:
            out = cache.load_tile(t.index)
            if out is not None:
                outputs[t.index] = out
    todo = [(b, t) for b, t in all_tiles if t.index not in outputs]
    done = len(all_tiles) - len(todo)
    if progress:
        progress(done, len(all_tiles))

    def on_done(k: int, result: TileOutput) -> None:
        nonlocal done
        tile = todo[k][1]
        outputs[tile.index] = result
        if cache is not None:
            cache.save_tile(tile.index, result)
        done += 1
        if progress:
            progress(done, len(all_tiles))

    executor([task("trace", plans[b], t) for b, t in todo], on_done)
    band_outputs = [[outputs[t.index] for t in tiles] for tiles in band_tiles]
    return _finish(plans, bands, band_outputs, name, len(all_tiles), time.perf_counter() - t0)


def _join_band_seams(frags: list[tuple], bands: list[tuple[int, int]]) -> list[Fragment]:
    """Make fragments that meet at a latitude-band seam share their meeting vertex exactly.

    Bands use slightly different sigmas in pixels, so a line crossing a
    seam ends in one band a small distance from where it starts in the next.
    Open ends within half a pixel of each other across a seam are joined by
    moving the later fragment's first vertex onto the earlier one's last.
    """
    from scipy.spatial import cKDTree

    if len(bands) == 1:
        return [f[1] for f in frags]
    out = [f[1] for f in frags]
    ends = [(k, f[1]) for k, f in enumerate(frags) if f[1].end_open]
    starts = [(k, f[1]) for k, f in enumerate(frags) if f[1].start_open]
    if not ends or not starts:
        return out
    start_xy = np.array([(f.rows[0], f.cols[0]) for _, f in starts])
    tree = cKDTree(start_xy)
    taken = set()
    for k, f in ends:
        d, j = tree.query((f.rows[-1], f.cols[-1]))
        kk, g = starts[j]
        if d == 0 or d > 0.5 or kk in taken or frags[kk][0] == frags[k][0]:
            continue
        taken.add(kk)
        rows, cols = g.rows.copy(), g.cols.copy()
        rows[0], cols[0] = f.rows[-1], f.cols[-1]
        out[kk] = Fragment(rows, cols, g.strength, g.start_open, g.end_open)
    return out


def _finish(plans: list[RunPlan], bands: list[tuple[int, int]], band_outputs: list[list[TileOutput]],
            name: str, n_tiles: int, seconds: float) -> ExtractionResult:
    plan0 = plans[0]
    s = plan0.settings
    groups: dict = {}
    frags: dict = {}
    for band_no, outputs in enumerate(band_outputs):
        for out in outputs:
            for si, di, r, c, st, prof in out.pieces:
                groups.setdefault((si, di), []).append((r, c, st, prof))
            for si, di, fr, prof in out.fragments:
                frags.setdefault((si, di), []).append((band_no, fr, prof))
    for key, fl in frags.items():
        # thresholds of the band where a joined run starts decide (bands differ by < 1 % in sigma)
        for r, c, st, _closed, members in stitch_fragments(_join_band_seams(fl, bands), with_members=True):
            band_no = next((k for k, (b0, b1) in enumerate(bands) if b0 - 0.5 <= r[0] < b1 - 0.5), 0)
            th = plans[band_no].thresholds[key]
            sp = plans[band_no].scales[key[0]]
            if keep_run(r, c, st, high=th.high, sustained=th.sustained,
                        sustained_length_px=s.min_length_sigmas * min(sp.sigma_rc)):
                profs = [fl[m][2] for m in members]
                prof = None if profs[0] is None else np.sum(profs, axis=0)
                groups.setdefault(key, []).append((r, c, st, prof))
    lines: list[Lineament] = []
    reports: list[ScaleReport] = []
    pixel_m = tuple(float(np.mean([p.pixel_m[a] for p in plans])) for a in (0, 1))
    tol = s.simplify_tolerance_m if s.simplify_tolerance_m is not None else 0.5 * min(pixel_m)
    for si, sp in enumerate(plan0.scales):
        scale_px = float(np.mean([p.scales[si].scale_px for p in plans]))
        for di, det in enumerate(plan0.detectors):
            ths = [p.thresholds[(si, di)] for p in plans]
            noise, high, low = (float(np.mean([getattr(t, a) for t in ths])) for a in ("noise", "high", "low"))
            pieces = sorted(groups.get((si, di), []), key=lambda p: (float(p[0][0]), float(p[1][0])))
            min_len = min_length_m(s, sp.sigma_m)
            best = None
            if plan0.search_sigmas:
                from .scale_selection import peak_scale

                best = [peak_scale(np.asarray(plan0.search_sigmas), p[3][:-1] / max(p[3][-1], 1.0)) for p in pieces]
            found = pieces_to_lines([p[:3] for p in pieces], plan0.georef, tolerance_m=tol, min_length_m=min_len,
                                    attributes={"scale_m": sp.sigma_m, "scale_px": scale_px,
                                                "operator": det.operator, "kind": det.kind, "source": name},
                                    best_scales=best)
            lines.extend(found)
            reports.append(ScaleReport(sp.sigma_m, scale_px, det.kind, det.operator, noise, high, low,
                                       len(found), float(sum(f.length_m for f in found))))
    return ExtractionResult(lines, plan0.georef, name, s, reports, seconds, n_tiles)


# --------------------------------------------------------------------------- public API
def extract_array(values: np.ndarray, georef: GeoRef, settings: ExtractionSettings | None = None, *,
                  valid: np.ndarray | None = None, source: str = "array", tile_size: int | None = None,
                  workers: int = 1) -> ExtractionResult:
    """Find lineaments in an array.

    Parameters
    ----------
    values : ndarray, shape (rows, cols)
        Elevations (DEM) or grey levels (image).  NaN and infinite values
        count as voids.
    georef : GeoRef
        Georeferencing of the grid.
    settings : ExtractionSettings, optional
    valid : ndarray of bool, shape (rows, cols), optional
        False at nodata cells.
    source : str
        Written to each line's ``source`` attribute.
    tile_size : int, optional
        Process in tiles of this many pixels (results do not depend on it).
    workers : int
        Local processes to use.

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
    settings = settings or ExtractionSettings()
    return run_extraction(ArraySource(arr, ok, georef, source), settings, tile_size=tile_size,
                          executor=process_executor(workers) if workers > 1 else None)


def extract_raster(data: RasterData, settings: ExtractionSettings | None = None, **kwargs) -> ExtractionResult:
    """Run :func:`extract_array` on a :class:`~lineament.raster_io.RasterData`."""
    return extract_array(data.values, data.georef, settings, valid=data.valid, source=data.source, **kwargs)


def extract_file(path: str | os.PathLike, settings: ExtractionSettings | None = None, *,
                 tile_size: int | None = None, workers: int = 1, cluster: str | None = None,
                 progress: Callable[[int, int], None] | None = None, cache=None) -> ExtractionResult:
    """Read a raster file tile by tile and find its lineaments.

    Parameters
    ----------
    path : path-like
        GeoTIFF (or any raster GDAL reads): a DEM or an image.
    settings : ExtractionSettings, optional
    tile_size : int, optional
        Core size of tiles in pixels; memory grows with it, results do not change.
    workers : int
        Local processes (ignored with ``cluster``).
    cluster : str, optional
        Address of a Dask distributed scheduler (``tcp://host:8786``); its
        workers must be able to read ``path``.
    progress : callable, optional
        ``progress(done, total)`` after each tile.

    Returns
    -------
    ExtractionResult
    """
    settings = settings or ExtractionSettings()
    source = FileSource(open_raster(path, settings))
    return run_extraction(source, settings, tile_size=tile_size, executor=make_executor(workers, cluster),
                          progress=progress, cache=cache)


def make_executor(workers: int = 1, cluster: str | None = None) -> Executor:
    """Serial, local-process or Dask executor."""
    if cluster:
        return dask_executor(cluster)
    return process_executor(workers) if workers > 1 else serial_executor
