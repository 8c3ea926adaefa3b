"""Zero crossings of a filter response: sub-pixel tracing, strength, hysteresis.

The zero level set of the response is traced with marching squares
(Lorensen and Cline 1987, as implemented by ``skimage.measure.find_contours``),
which interpolates each crossing linearly between neighbouring pixel
centres.  Each vertex gets a strength from the response's gradient across
the crossing, and pieces are kept by hysteresis along the traced path
(Canny 1986): a vertex at or above the high threshold seeds a piece, which
continues through neighbouring vertices while they stay at or above the low
threshold.

References
----------
Lorensen, W. E. and Cline, H. E. (1987). Marching cubes: a high resolution
3D surface construction algorithm. SIGGRAPH '87, 163-169.
doi:10.1145/37401.37422
Canny, J. (1986). A computational approach to edge detection. IEEE TPAMI
8(6), 679-698. doi:10.1109/TPAMI.1986.4767851
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterator

import numpy as np
from skimage.measure import find_contours

from ._kernels import gradient_and_magnitude, log_and_gradient
from .scalespace import log_kernels

#: Consistency factor turning a median absolute deviation into a Gaussian
#: standard deviation (1 / Phi^-1(3/4); Rousseeuw and Croux 1993).
MAD_TO_SIGMA = 1.482602218505602


#: Fourth-order central difference (-1, 8, 0, -8, 1) / 12 for correlation: the response is
#: smooth at the filter scale, so this keeps the gradient within a few per cent at sigma = 2 px
#: where the 3-point difference is about 10 % low (Fornberg 1988, "Generation of finite
#: difference formulas on arbitrarily spaced grids", Math. Comp. 51, 699-706).
_DERIVATIVE_5 = np.array([1.0, -8.0, 0.0, 8.0, -1.0]) / 12.0


@dataclass(frozen=True)
class CrossingPiece:
    """A traced piece of a zero crossing, in fractional pixel-centre indices.

    Attributes
    ----------
    rows, cols : ndarray, shape (n,), float64
    strength : ndarray, shape (n,), float32
        Strength at each vertex.
    """

    rows: np.ndarray
    cols: np.ndarray
    strength: np.ndarray


def step_strength_factor(sigma_m: float) -> float:
    """Factor turning the gradient of ``sigma**2 * LoG`` into an equivalent step height.

    For an ideal step of height ``h`` the scale-normalised LoG response
    ``R = sigma**2 * d2L/dx2`` has slope ``h / (sigma * sqrt(2 pi))`` at its
    zero crossing (differentiate ``h * Phi(x / sigma)`` three times).  The
    factor ``sqrt(2 pi) * sigma`` therefore reports strength as the height of
    the step that would give the same response: metres of offset on a DEM,
    grey levels on an image, at every scale.
    """
    return math.sqrt(2.0 * math.pi) * float(sigma_m)


def strength_map(response: np.ndarray, sigma_m: float, pixel_size_m: tuple[float, float], *,
                 components: bool = True) -> tuple:
    """Per-pixel strength: equivalent step height of the response gradient.

    Parameters
    ----------
    response : ndarray, shape (rows, cols), float32
        Scale-normalised LoG or DoG response.
    sigma_m : float
        Scale in metres.
    pixel_size_m : (float, float)
        Pixel size along columns and rows, metres.
    components : bool
        False: the gradient components are not kept (None), which saves time.

    Returns
    -------
    strength : ndarray, float32
        ``sqrt(2 pi) * sigma * |grad R|`` in the units of the raster values.
    gx, gy : ndarray, float32, or None
        Gradient components of ``R`` per metre along columns and rows.
    """
    # one compiled pass: the 5-point differences along rows and columns (border cells repeated),
    # per metre, and their magnitude (lineament._kernels; scipy.ndimage is the reference in tests)
    return gradient_and_magnitude(response, _DERIVATIVE_5, 1.0 / pixel_size_m[0], 1.0 / pixel_size_m[1],
                                  step_strength_factor(sigma_m), components=components)


def log_strength_map(image: np.ndarray, sigma_m: float, pixel_size_m: tuple[float, float], *,
                     truncate: float = 4.0, prior_blur_px: float = 0.0, components: bool = True) -> tuple:
    """The scale-normalised LoG of an image and its :func:`strength_map`, in one compiled sweep.

    The same numbers, bit for bit, as
    ``strength_map(log_response(image, ...), ...)``
    (:func:`lineament._kernels.log_and_gradient`), with the LoG rows
    differenced while they are still in the cache.

    Returns
    -------
    response, strength : ndarray, float32
    gx, gy : ndarray, float32, or None when ``components`` is False
    """
    return log_and_gradient(image, *log_kernels(sigma_m, pixel_size_m, truncate=truncate, prior_blur_px=prior_blur_px),
                            _DERIVATIVE_5, 1.0 / pixel_size_m[0], 1.0 / pixel_size_m[1], step_strength_factor(sigma_m),
                            components=components)


def robust_noise(gx: np.ndarray, gy: np.ndarray, usable: np.ndarray, *, max_samples: int = 4_000_000) -> float:
    """Robust standard deviation of the response gradient components.

    The gradient components of a band-passed background (terrain texture,
    sensor noise) are close to Gaussian with zero mean; linear features
    cover a small share of the cells, so the median absolute deviation
    ignores them (Hampel 1974).  Sampling on a regular lattice keeps the
    estimate deterministic.

    Returns
    -------
    float
        ``1.4826 * MAD`` of the pooled components at usable cells (0 if none).
    """
    idx = np.flatnonzero(usable.ravel())
    if idx.size == 0:
        return 0.0
    step = max(1, idx.size // max_samples)
    idx = idx[::step]
    comps = np.concatenate([gx.ravel()[idx], gy.ravel()[idx]]).astype(np.float64)
    med = np.median(comps)
    return float(MAD_TO_SIGMA * np.median(np.abs(comps - med)))


#: The pipeline's rounding allowance: ``rounding_std = ROUNDING_STD_PER_SPAN * span``, where
#: ``span`` is the largest magnitude of the centred float32 values (4 float32 epsilons).
ROUNDING_STD_PER_SPAN = 4.0 * float(np.finfo(np.float32).eps)


def unit_impulse(sigma_m: float, pixel_size_m: tuple[float, float], truncate: float) -> np.ndarray:
    """A unit impulse in a window wide enough for the filters of one scale (plus the 5-point stencil)."""
    rr = int(math.ceil(truncate * sigma_m / pixel_size_m[1])) + 3
    rc = int(math.ceil(truncate * sigma_m / pixel_size_m[0])) + 3
    impulse = np.zeros((2 * rr + 1, 2 * rc + 1), np.float32)
    impulse[rr, rc] = 1.0
    return impulse


def float32_sum_bound(impulse_response: np.ndarray) -> float:
    """Bound on the rounding of a linear filter computed with float32 sums, per unit of input magnitude.

    A float32 sum of ``n`` products is within ``gamma_n * sum |k v|`` of the
    exact sum, ``gamma_n = n u / (1 - n u)``, ``u = 2**-24`` (Higham 2002,
    eq. 3.5); for a chain of separable passes ``n`` is about the taps of all
    passes, here the support's rows plus columns plus 4 (the products and
    roundings that follow), and ``sum |k v| <= sum |h| * max |v|`` with ``h``
    the chain's impulse response.

    References
    ----------
    Higham, N. J. (2002). Accuracy and Stability of Numerical Algorithms, 2nd
    ed. SIAM, chapter 3. doi:10.1137/1.9780898718027
    """
    h = np.asarray(impulse_response, dtype=np.float64)
    nz = np.nonzero(h)
    if nz[0].size == 0:
        return 0.0
    n = (int(nz[0].max() - nz[0].min()) + 1) + (int(nz[1].max() - nz[1].min()) + 1) + 4
    u = 2.0 ** -24
    return n * u / (1.0 - n * u) * float(np.abs(h).sum())


def rounding_floor(impulse_responses, rounding_std: float) -> float:
    """Noise level that float32 arithmetic alone can produce in components with these impulse responses.

    The larger of the input rounding as white noise of ``rounding_std``
    through the filters (the output variance of a linear filter for white
    input is the sum of its squared taps), and the bound on the rounding of
    float32 sums (:func:`float32_sum_bound`) for values up to ``span =
    rounding_std / ROUNDING_STD_PER_SPAN``.  On noise-free surfaces (planes,
    clean synthetic steps) the measured noise level is arithmetic, and lines
    made of it must not pass thresholds that are multiples of it.

    Returns
    -------
    float
        In the components' units (before any noise factor).
    """
    comps = [np.asarray(c, np.float64) for c in impulse_responses]
    white = math.sqrt(np.mean([np.sum(c * c) for c in comps]))
    sums = max(float32_sum_bound(c) for c in comps)
    return max(rounding_std * white, sums * rounding_std / ROUNDING_STD_PER_SPAN)


def gradient_impulse_responses(response_of, sigma_m: float, pixel_size_m: tuple[float, float], *,
                               truncate: float) -> tuple[np.ndarray, np.ndarray]:
    """Impulse responses of the two response-gradient components (as :func:`strength_map` takes them)."""
    _, gx, gy = strength_map(response_of(unit_impulse(sigma_m, pixel_size_m, truncate)), sigma_m, pixel_size_m)
    return gx, gy


#: Taps of the strength interpolation, at offsets -2 .. 3 from the cell below the point.
CUBIC_TAPS = 6


def _keys_weights(t: np.ndarray) -> np.ndarray:
    """Weights of the six taps at offsets -2 .. 3 (Keys 1981, the 6-point cubic convolution kernel).

    ``W(s) = 4/3 s**3 - 7/3 s**2 + 1`` for ``s < 1``, ``-7/12 s**3 + 3 s**2 - 59/12 s + 5/2``
    for ``1 <= s < 2``, ``1/12 s**3 - 2/3 s**2 + 7/4 s - 3/2`` for ``2 <= s < 3`` (``s`` the distance
    to the tap); the weights are exactly (0, 0, 1, 0, 0, 0) at ``t = 0``.
    """
    t = np.asarray(t, dtype=np.float64)
    near = lambda s: (4.0 / 3.0 * s - 7.0 / 3.0) * s * s + 1.0  # noqa: E731
    mid = lambda s: ((-7.0 / 12.0 * s + 3.0) * s - 59.0 / 12.0) * s + 2.5  # noqa: E731
    far = lambda s: ((1.0 / 12.0 * s - 2.0 / 3.0) * s + 1.75) * s - 1.5  # noqa: E731
    w = np.stack([far(t + 2.0), mid(t + 1.0), near(t), near(1.0 - t), mid(2.0 - t), far(3.0 - t)])
    at_node = t == 0.0
    if np.any(at_node):
        w[:, at_node] = np.array([0.0, 0.0, 1.0, 0.0, 0.0, 0.0])[:, None]
    return w


def sample_cubic(image: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """Sample ``image`` at fractional indices by 6-point cubic convolution.

    The strength profile across a crossing is a narrow peak (about sigma
    cells wide on each side), which interpolation flattens: bilinear
    interpolation reads about 9 % low at sigma = 2 px, Keys' 4-point kernel
    1 % low on average (1.9 % at worst), and his 6-point kernel, which is
    exact for cubics (fourth order), within 0.2 % on average (0.33 % at
    worst) for sigmas of 2 cells or more (our computation on the profile of
    an ideal step).  That lets scales of 2 cells per sigma, the finest and
    the decimated ones, keep the strengths they have at finer sampling.
    Indices are clamped at the border.

    Keys, R. (1981). Cubic convolution interpolation for digital image
    processing. IEEE TASSP 29(6), 1153-1160. doi:10.1109/TASSP.1981.1163711
    """
    h, w = image.shape
    r0 = np.floor(rows).astype(np.intp)
    c0 = np.floor(cols).astype(np.intp)
    wr = _keys_weights(rows - r0)
    wc = _keys_weights(cols - c0)
    out = np.zeros(rows.shape, dtype=np.float64)
    for i in range(CUBIC_TAPS):
        ri = np.clip(r0 + i - 2, 0, h - 1)
        acc = np.zeros(rows.shape, dtype=np.float64)
        for j in range(CUBIC_TAPS):
            acc += wc[j] * image[ri, np.clip(c0 + j - 2, 0, w - 1)]
        out += wr[i] * acc
    return out


def _hysteresis_runs(keep: np.ndarray, seed: np.ndarray, closed: bool) -> list[tuple[int, int]]:
    """Half-open index runs of consecutive ``keep`` that contain a ``seed``.

    For a closed path a run may wrap around; it is returned with an end
    beyond ``n`` (indices taken modulo ``n``).
    """
    n = keep.size
    if n == 0:
        return []
    if closed and keep.all():
        return [(0, n)] if seed.any() else []
    start_shift = 0
    if closed:
        start_shift = int(np.flatnonzero(~keep)[0])
        keep = np.roll(keep, -start_shift)
        seed = np.roll(seed, -start_shift)
    padded = np.concatenate(([False], keep, [False]))
    d = np.diff(padded.astype(np.int8))
    starts = np.flatnonzero(d == 1)
    ends = np.flatnonzero(d == -1)
    if starts.size == 0:
        return []
    cs = np.concatenate(([0], np.cumsum(seed)))
    has_seed = cs[ends] - cs[starts] > 0
    return [(int(s) + start_shift, int(e) + start_shift) for s, e, h in zip(starts, ends, has_seed) if h]


@dataclass(frozen=True)
class Core:
    """The part of the raster a tile owns, in global pixel indices (half-open).

    A traced segment belongs to the tile whose core contains its midpoint,
    with core edges on pixel edges (``row0 - 0.5`` to ``row1 - 0.5``), so
    every segment has exactly one owner.
    """

    row0: int
    col0: int
    row1: int
    col1: int

    def owns(self, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        return ((rows >= self.row0 - 0.5) & (rows < self.row1 - 0.5)
                & (cols >= self.col0 - 0.5) & (cols < self.col1 - 0.5))


@dataclass(frozen=True)
class Fragment:
    """Part of a strong run that continues into another tile.

    Attributes
    ----------
    rows, cols, strength : ndarray
        Global pixel-centre indices and vertex strengths.
    start_open, end_open : bool
        Whether the run continues before the first / after the last vertex.
    """

    rows: np.ndarray
    cols: np.ndarray
    strength: np.ndarray
    start_open: bool
    end_open: bool


def keep_run(rows: np.ndarray, cols: np.ndarray, strength: np.ndarray, *, high: float,
             sustained: float | None, sustained_length_px: float) -> bool:
    """Whether a run of vertices all at or above the low threshold is kept.

    Kept when a vertex reaches ``high`` (a seed), or, when ``sustained`` is
    given, when the run is at least ``sustained_length_px`` long and its mean
    strength reaches ``sustained``.
    """
    if rows.size < 2:
        return False
    if float(strength.max()) >= high:
        return True
    if sustained is None:
        return False
    path = float(np.hypot(np.diff(rows), np.diff(cols)).sum())
    return path >= sustained_length_px and float(np.mean(strength)) >= sustained


def canonical_ring(rows: np.ndarray, cols: np.ndarray, strength: np.ndarray):
    """Rotate a closed ring so it starts at its smallest (row, col) vertex, and close it."""
    k = int(np.lexsort((cols, rows))[0])
    idx = np.concatenate((np.arange(k, rows.size), np.arange(0, k + 1)))
    return rows[idx], cols[idx], strength[idx]


def trace_level_set(field: np.ndarray, strength: np.ndarray, usable: np.ndarray, *,
                    high: float, low: float, sustained: float | None = None,
                    sustained_length_px: float = np.inf, allowed: np.ndarray | None = None,
                    offset: tuple[int, int] = (0, 0), core: Core | None = None):
    """Trace the zero level set of ``field`` on one window; keep strong runs.

    Runs compiled code (:func:`lineament._compiled_trace.trace_compiled`):
    marching squares, vertex strengths, hysteresis and ownership in one
    pass, with only the kept runs returned to Python, and only vertices
    strong enough to be kept assembled into runs.  Every piece and fragment
    is, vertex for vertex, one :func:`trace_level_set_reference` gives with
    ``skimage.measure.find_contours`` and a Python loop over contours; the
    lists may come in another order (callers sort pieces and join fragments
    by their ends).

    Parameters
    ----------
    field, strength : ndarray, shape (rows, cols), float32
        Field whose zero level set is traced, and strength per pixel
        (sampled at vertices by cubic convolution, :func:`sample_cubic`).
    usable : ndarray of bool
        Cells far enough from voids and the raster edge (nearest cell decides).
    high, low, sustained, sustained_length_px
        Hysteresis rule, see :func:`keep_run`.
    allowed : ndarray of bool, optional
        Where the level set counts at all (a sign condition of the detector).
    offset : (int, int)
        Global index of the window's first row and column.
    core : Core, optional
        The part of the raster this window owns (default: all of it).

    Returns
    -------
    pieces : list of (rows, cols, strength)
        Runs owned entirely by this window that pass the rule, in global
        indices; closed rings start at their smallest vertex and repeat it
        at the end.
    fragments : list of Fragment
        Owned parts of runs that continue into other windows; the rule is
        applied after :func:`stitch_fragments` has joined them.
    """
    from ._compiled_trace import trace_compiled  # imports this module's Core and Fragment

    return trace_compiled(field, strength, usable, high=high, low=low, sustained=sustained,
                          sustained_length_px=sustained_length_px, allowed=allowed, offset=offset, core=core)


def trace_level_set_reference(field: np.ndarray, strength: np.ndarray, usable: np.ndarray, *,
                              high: float, low: float, sustained: float | None = None,
                              sustained_length_px: float = np.inf, allowed: np.ndarray | None = None,
                              offset: tuple[int, int] = (0, 0), core: Core | None = None):
    """:func:`trace_level_set` with ``skimage.measure.find_contours`` and a Python loop (slow; the reference)."""
    return _trace(field, strength, usable, high=high, low=low, sustained=sustained,
                  sustained_length_px=sustained_length_px, allowed=allowed, offset=offset, core=core)


def window_to_raster(rows: np.ndarray, cols: np.ndarray, field: np.ndarray, offset: tuple[int, int]):
    """Vertex indices of a window's zero crossings in raster indices, rounded once.

    Marching squares puts a vertex on the pixel edge from ``(r, c)`` to
    ``(r, c + 1)`` at ``c + q``, ``q = (0 - f[r, c]) / (f[r, c + 1] - f[r, c])``
    (likewise down a column).  Adding the window's offset afterwards would
    round twice (``c + q``, then ``+ offset``), which now and then differs
    in the last bit from ``(c + offset) + q``, the value a window at another
    offset (a whole-raster run, another tile size) computes; so ``q`` is
    recomputed and added to the offset index.  Integral coordinates (vertices
    on pixel centres, or ``q`` rounded to 0 or 1) are shifted exactly.

    Parameters
    ----------
    rows, cols : ndarray, float64
        Vertex indices in the window, as the tracer found them.
    field : ndarray, shape (rows, cols)
        The field whose zero level set was traced.
    offset : (int, int)
        Raster indices of the window's first cell.
    """
    rows = np.asarray(rows, dtype=np.float64)
    cols = np.asarray(cols, dtype=np.float64)
    out_r = rows + offset[0]
    out_c = cols + offset[1]
    if offset == (0, 0) or rows.size == 0:
        return out_r, out_c
    with np.errstate(invalid="ignore"):
        on_row = (rows == np.floor(rows)) & (cols != np.floor(cols))
        on_col = (cols == np.floor(cols)) & (rows != np.floor(rows))
    if on_row.any():
        r = rows[on_row].astype(np.intp)
        c = np.floor(cols[on_row]).astype(np.intp)
        a = field[r, c].astype(np.float64)
        b = field[r, c + 1].astype(np.float64)
        out_c[on_row] = (c + offset[1]).astype(np.float64) + (0.0 - a) / (b - a)
    if on_col.any():
        c = cols[on_col].astype(np.intp)
        r = np.floor(rows[on_col]).astype(np.intp)
        a = field[r, c].astype(np.float64)
        b = field[r + 1, c].astype(np.float64)
        out_r[on_col] = (r + offset[0]).astype(np.float64) + (0.0 - a) / (b - a)
    return out_r, out_c


def _trace(field, strength, usable, *, high, low, sustained, sustained_length_px, allowed, offset, core):
    pieces: list = []
    fragments: list[Fragment] = []
    mask = usable if allowed is None else (usable & allowed)
    if not mask.any():
        return pieces, fragments
    h, w = field.shape
    if core is None:
        core = Core(offset[0], offset[1], offset[0] + h, offset[1] + w)
    contours = find_contours(field, 0.0)
    contours = [c for c in contours if c.shape[0] >= 2]
    if not contours:
        return pieces, fragments
    # vertex strength and keep flags for all contours at once (same values as one contour at a time)
    closed_all = [bool(np.array_equal(c[0], c[-1])) and c.shape[0] > 3 for c in contours]
    contours = [c[:-1] if cl else c for c, cl in zip(contours, closed_all)]
    sizes = np.array([c.shape[0] for c in contours])
    bounds = np.concatenate(([0], np.cumsum(sizes)))
    allv = np.concatenate(contours)
    s_all = np.maximum(sample_cubic(strength, allv[:, 0], allv[:, 1]), 0.0).astype(np.float32)
    ri = np.clip(np.rint(allv[:, 0]).astype(np.intp), 0, h - 1)
    ci = np.clip(np.rint(allv[:, 1]).astype(np.intp), 0, w - 1)
    keep_all = mask[ri, ci] & (s_all >= low)
    any_keep = np.add.reduceat(keep_all.astype(np.intp), bounds[:-1]) > 0
    for k in np.flatnonzero(any_keep):
        a0, b0 = bounds[k], bounds[k + 1]
        contour, closed = contours[k], closed_all[k]
        lr, lc = contour[:, 0], contour[:, 1]
        s, keep = s_all[a0:b0], keep_all[a0:b0]
        rows, cols = window_to_raster(lr, lc, field, tuple(offset))
        n = rows.size
        nxt = (np.arange(n) + 1) % n
        owned = core.owns(0.5 * (rows + rows[nxt]), 0.5 * (cols + cols[nxt]))  # segment i -> i+1
        for a, b in _hysteresis_runs(keep, keep, closed):
            whole_ring = closed and b - a == n
            idx = np.arange(a, b + (1 if whole_ring else 0)) % n
            if idx.size < 2:
                continue
            seg_owned = owned[idx[:-1]]
            if seg_owned.all():
                pr, pc, ps = rows[idx], cols[idx], s[idx]
                if whole_ring:
                    pr, pc, ps = canonical_ring(pr[:-1], pc[:-1], ps[:-1])
                if keep_run(pr, pc, ps, high=high, sustained=sustained,
                            sustained_length_px=sustained_length_px):
                    pieces.append((pr, pc, ps))
                continue
            if not seg_owned.any():
                continue
            # split the run's segments into maximal owned stretches
            d = np.diff(np.concatenate(([0], seg_owned.astype(np.int8), [0])))
            starts, ends = np.flatnonzero(d == 1), np.flatnonzero(d == -1)
            m = seg_owned.size
            for s0, e0 in zip(starts, ends):
                vidx = idx[s0:e0 + 1]
                start_open = s0 > 0 or whole_ring
                end_open = e0 < m or whole_ring
                fragments.append(Fragment(rows[vidx], cols[vidx], s[vidx], bool(start_open), bool(end_open)))
    return pieces, fragments


def _vertex_key(r: float, c: float) -> tuple[int, int]:
    return (int(round(r * 1e6)), int(round(c * 1e6)))


def stitch_fragments(fragments: list[Fragment], *, with_members: bool = False) -> list[tuple]:
    """Join fragments from neighbouring tiles into whole runs.

    Fragments meet at a shared vertex (the end of one is the start of the
    next; both tiles compute it identically), matched to 1e-6 px.

    Parameters
    ----------
    fragments : list of Fragment
    with_members : bool
        Also return the indices of the fragments each run is made of.

    Returns
    -------
    list of (rows, cols, strength, closed) or (rows, cols, strength, closed, members)
        Closed rings start at their smallest vertex and repeat it at the end.
    """
    by_start = {}
    for i, f in enumerate(fragments):
        if f.start_open:
            by_start[_vertex_key(f.rows[0], f.cols[0])] = i
    used = np.zeros(len(fragments), bool)
    out = []

    def follow(i: int):
        parts = [i]
        used[i] = True
        while fragments[parts[-1]].end_open:
            f = fragments[parts[-1]]
            j = by_start.get(_vertex_key(f.rows[-1], f.cols[-1]))
            if j is None or used[j]:
                return parts, j is not None and j == parts[0]
            used[j] = True
            parts.append(j)
        return parts, False

    def join(parts):
        rs = [fragments[parts[0]].rows] + [fragments[p].rows[1:] for p in parts[1:]]
        cs = [fragments[parts[0]].cols] + [fragments[p].cols[1:] for p in parts[1:]]
        ss = [fragments[parts[0]].strength] + [fragments[p].strength[1:] for p in parts[1:]]
        return np.concatenate(rs), np.concatenate(cs), np.concatenate(ss)

    order = sorted(range(len(fragments)), key=lambda k: (fragments[k].rows[0], fragments[k].cols[0]))
    for i in order:
        if used[i] or fragments[i].start_open:
            continue
        parts, _ = follow(i)
        r, c, s = join(parts)
        out.append((r, c, s, False, parts) if with_members else (r, c, s, False))
    for i in order:  # what is left are rings that cross tile edges
        if used[i]:
            continue
        parts, closed = follow(i)
        r, c, s = join(parts)
        if closed:
            r, c, s = canonical_ring(r[:-1], c[:-1], s[:-1])
        out.append((r, c, s, closed, parts) if with_members else (r, c, s, closed))
    return out


def trace_zero_crossings(response: np.ndarray, strength: np.ndarray, usable: np.ndarray,
                         *, high: float, low: float, sustained: float | None = None,
                         sustained_length_px: float = np.inf) -> Iterator[CrossingPiece]:
    """Trace the zero crossings of a whole array and keep strong pieces.

    Parameters
    ----------
    response : ndarray, shape (rows, cols), float32
    strength : ndarray, shape (rows, cols), float32
    usable : ndarray of bool, shape (rows, cols)
    high, low, sustained, sustained_length_px
        Hysteresis rule, see :func:`keep_run`.

    Yields
    ------
    CrossingPiece
        Sub-pixel positions (pixel-centre convention) and vertex strengths.
    """
    pieces, _ = trace_level_set(response, strength, usable, high=high, low=low, sustained=sustained,
                                sustained_length_px=sustained_length_px)
    for r, c, s in pieces:
        yield CrossingPiece(r, c, s)
