"""Candidate cells for zero-crossing tracing, found with whole-array operations.

Tracing every zero crossing of a window with marching squares costs far more
than filtering it, yet almost every crossing of a textured raster is weak and
is dropped by the hysteresis rule.  This module finds, with vectorised array
operations only, the marching-squares cells that *can* hold a kept run, so
that :func:`lineament.crossings.trace_level_set` traces those cells alone
(``skimage.measure.find_contours`` with a mask) and applies the unchanged
rule to what it traces.

The selection is conservative, so the traced pieces are the ones a trace of
the whole window gives:

1. An edge between two pixel centres holds a vertex when exactly one of its
   ends is above the level (the rule of ``find_contours``).  The vertex
   strength is a cubic convolution (Keys 1981) of the strength map along
   that edge's row or column; for non-negative data its four weights with
   positive sign sum to at most ``1 + t (1 - t) / 2 <= 1.125``, so the vertex
   strength is at most 1.125 times the largest of the taps it can use.  An
   edge is a *candidate* when that bound reaches the low threshold and the
   nearest-cell mask can be true.
2. A cell (four pixel centres) with two or more candidate edges may hold a
   segment of a kept run; a run is a chain of such cells, each joined to the
   next through a candidate edge, so it lies inside one component of the
   graph of such cells and edges.  The sum of the segment lengths of a
   component (at most ``sqrt 2`` per segment) bounds the length of any run
   in it; a vertex whose bound reaches the high threshold may be a seed, and
   a run can only average the sustained level if one of its vertices may
   reach it.
3. A component is traced when it has cells straddling (or next to) the edge
   of the tile core, since runs there may become fragments that the
   stitcher joins across tiles; or when it lies inside the core and has a
   possible seed or is long enough for the sustained rule.  Components
   wholly outside the core own nothing and are skipped.

A component that is not selected may still be partly traced where its cells
touch selected ones, but any run cut short that way lies in a component
without a possible seed and shorter than the sustained length, so the rule
drops it, exactly as it drops the whole run in a full trace.

References
----------
Keys, R. (1981). Cubic convolution interpolation for digital image
processing. IEEE TASSP 29(6), 1153-1160. doi:10.1109/TASSP.1981.1163711
Lorensen, W. E. and Cline, H. E. (1987). Marching cubes. SIGGRAPH '87,
163-169. doi:10.1145/37401.37422
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage

#: Largest sum of the positive cubic-convolution weights (Keys 1981, a = -1/2) at any fraction t.
CUBIC_POSITIVE_GAIN = 1.125
#: Relative slack on thresholds so float rounding in the bound never drops a vertex.
_SLACK = 1.0 - 1e-6


def _edge_bounds(strength: np.ndarray, axis: int) -> np.ndarray:
    """Largest strength among the cubic taps of each edge along ``axis``.

    An edge from index ``k`` to ``k + 1`` along ``axis`` samples taps
    ``floor(v) - 1 .. floor(v) + 2`` with ``k <= v <= k + 1``, i.e. at most
    ``k - 1 .. k + 3`` (clamped at the border).  Shape: one less than
    ``strength`` along ``axis``.
    """
    m = ndimage.maximum_filter1d(strength, 5, axis=axis, mode="nearest")  # k - 1 .. k + 3 at centre k + 1
    return m[:, 1:] if axis == 1 else m[1:, :]


def candidate_pixels(field: np.ndarray, strength: np.ndarray, mask: np.ndarray, *, high: float, low: float,
                     sustained: float | None, sustained_length_px: float,
                     core_local: tuple[int, int, int, int]) -> np.ndarray | None:
    """Pixels whose cells must be traced, as a mask for ``find_contours``.

    Parameters
    ----------
    field, strength : ndarray, shape (rows, cols), float32
        Field whose zero level set is traced, and strength per pixel.
    mask : ndarray of bool, shape (rows, cols)
        Where vertices count (nearest pixel decides).
    high, low, sustained, sustained_length_px
        Hysteresis rule (see :func:`lineament.crossings.keep_run`).
    core_local : (row0, col0, row1, col1)
        The owned core in window indices (half-open, may extend beyond the window).

    Returns
    -------
    ndarray of bool, shape (rows, cols), or None
        True at the four corners of every cell to trace; None when no cell
        needs tracing.
    """
    h, w = field.shape
    if h < 2 or w < 2:
        return None
    above = field > 0
    s = np.asarray(strength, dtype=np.float32)
    low_b = np.float32(low / CUBIC_POSITIVE_GAIN * _SLACK)
    high_b = np.float32(high / CUBIC_POSITIVE_GAIN * _SLACK)

    # horizontal edges (r, c) - (r, c + 1), shape (h, w - 1); vertical edges, shape (h - 1, w)
    bound_h = _edge_bounds(s, 1)
    bound_v = _edge_bounds(s, 0)
    keep_h = above[:, :-1] ^ above[:, 1:]
    keep_h &= mask[:, :-1] | mask[:, 1:]
    keep_h &= bound_h >= low_b
    keep_v = above[:-1, :] ^ above[1:, :]
    keep_v &= mask[:-1, :] | mask[1:, :]
    keep_v &= bound_v >= low_b

    count = keep_h[:-1, :].astype(np.uint8)
    count += keep_h[1:, :]
    count += keep_v[:, :-1]
    count += keep_v[:, 1:]
    cells_keep = count >= 2
    cells = np.flatnonzero(cells_keep)
    if cells.size == 0:
        return None
    # Components of the segment graph: two cells are joined only through a shared candidate edge
    # (a run passes from cell to cell through the vertex on that edge).  Cells sit at even
    # positions of a doubled grid, the edges between them at the odd positions; 4-connected
    # labelling of that grid gives the components.
    ch, cwid = h - 1, w - 1
    grid = np.zeros((2 * ch - 1, 2 * cwid - 1), dtype=bool)
    grid[::2, ::2] = cells_keep
    grid[1::2, ::2] = keep_h[1:-1, :]
    grid[::2, 1::2] = keep_v[:, 1:-1]
    labels, n = ndimage.label(grid)
    del grid
    cw = w - 1
    ci, cj = np.divmod(cells, cw)
    lab = labels[2 * ci, 2 * cj]
    del labels

    # possible seeds, evaluated only at candidate cells
    cell_seed = ((keep_h[ci, cj] & (bound_h[ci, cj] >= high_b))
                 | (keep_h[ci + 1, cj] & (bound_h[ci + 1, cj] >= high_b))
                 | (keep_v[ci, cj] & (bound_v[ci, cj] >= high_b))
                 | (keep_v[ci, cj + 1] & (bound_v[ci, cj + 1] >= high_b)))
    has_seed = np.bincount(lab[cell_seed], minlength=n + 1) > 0

    r0, c0, r1, c1 = core_local
    # cells entirely inside the core (segment midpoints lie in the cell; core edges at k - 0.5)
    inside = (ci >= r0) & (ci <= r1 - 2) & (cj >= c0) & (cj <= c1 - 2)
    # straddling cells, widened by one cell for safety
    near = ~((ci >= r0 + 1) & (ci <= r1 - 3) & (cj >= c0 + 1) & (cj <= c1 - 3)) & ~(
        (ci <= r0 - 3) | (ci >= r1 + 1) | (cj <= c0 - 3) | (cj >= c1 + 1))
    touches_edge = np.bincount(lab[near], minlength=n + 1) > 0
    in_core = np.bincount(lab[inside], minlength=n + 1) > 0
    wanted = has_seed
    if sustained is not None and math.isfinite(sustained_length_px):
        # a run whose mean reaches ``sustained`` has a vertex at or above it
        sus_b = np.float32(sustained / CUBIC_POSITIVE_GAIN * _SLACK)
        cell_sus = ((keep_h[ci, cj] & (bound_h[ci, cj] >= sus_b))
                    | (keep_h[ci + 1, cj] & (bound_h[ci + 1, cj] >= sus_b))
                    | (keep_v[ci, cj] & (bound_v[ci, cj] >= sus_b))
                    | (keep_v[ci, cj + 1] & (bound_v[ci, cj + 1] >= sus_b)))
        has_sus = np.bincount(lab[cell_sus], minlength=n + 1) > 0
        segments = (count.ravel()[cells] // 2).astype(np.float64)
        length_bound = np.bincount(lab, weights=segments * math.sqrt(2.0), minlength=n + 1)
        wanted = wanted | (has_sus & (length_bound >= sustained_length_px * _SLACK))
    wanted = touches_edge | (in_core & wanted)
    wanted[0] = False
    sel = wanted[lab]
    if not sel.any():
        return None
    ci, cj = ci[sel], cj[sel]
    px = np.zeros((h, w), dtype=bool)
    px[ci, cj] = True
    px[ci + 1, cj] = True
    px[ci, cj + 1] = True
    px[ci + 1, cj + 1] = True
    return px
