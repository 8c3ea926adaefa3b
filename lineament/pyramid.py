"""Decimated grids for coarse scales (a Gaussian pyramid).

A scale of several pixels holds no detail finer than about sigma, so it can
be filtered on a grid with fewer cells.  Level ``f`` (a power of two) is the
raster blurred and sampled at every ``f``-th row and column; it is built by
repeated halving, each halving a separable Gaussian blur followed by taking
every second cell (Burt and Adelson 1983).  The blurs are chosen so that
level ``f`` carries a Gaussian blur of exactly ``f`` fine pixels (one pixel of
its own grid): the first halving blurs by 2 fine pixels, each later one by
``sqrt(3)`` pixels of the level it starts from (``f**2 + 3 f**2 = (2 f)**2``).
A scale ``sigma`` (fine pixels) is then filtered on level ``f`` with
``sqrt((sigma / f)**2 - 1)`` pixels of that grid, so the total blur is
``sigma`` exactly (Gaussian blurs add in variance), and derivatives are taken
per metre of the coarse cells, so the scale-normalised response, its
strength and its thresholds mean what they mean at full resolution.

Aliasing is small by construction: a blur of ``f`` fine pixels passes
``exp(-pi**2 / 2)`` (0.7 %) at the coarse grid's Nyquist frequency, and a
scale is only decimated to a level where it spans at least
:data:`MIN_DECIMATED_SIGMA_PX` cells (:data:`MIN_EDGE_SIGMA_CELLS` when the run
finds edges only).

Cell ``(i, j)`` of level ``f`` sits on fine cell ``(f i, f j)`` (global
indices), so a window whose first row and column are multiples of ``f``
decimates to exactly the cells of the whole raster's level, and fractional
indices on the level map back by multiplying by ``f``.

Voids are carried by normalised convolution (Knutsson and Westin 1993): the
valid-weighted values and the validity weights are decimated side by side;
a coarse cell is valid where at least half its weight is valid, and its value
is their ratio wherever its footprint touches a void (elsewhere the ratio's
denominator is one, and the value is taken as is).

References
----------
Burt, P. J. and Adelson, E. H. (1983). The Laplacian pyramid as a compact
image code. IEEE Trans. Communications 31(4), 532-540.
doi:10.1109/TCOM.1983.1095851
Lindeberg, T. (1994). Scale-Space Theory in Computer Vision. Kluwer, chapter 3
(semi-group property: Gaussian blurs add in variance).
doi:10.1007/978-1-4757-6465-9
Knutsson, H. and Westin, C.-F. (1993). Normalized and differential
convolution. Proc. CVPR 1993, 515-523. doi:10.1109/CVPR.1993.341081
"""

from __future__ import annotations

import math

import numpy as np
from ._kernels import correlate1d
from .scalespace import gaussian_kernel1d

#: A scale is filtered on the coarsest level where sigma spans at least this many cells, unless
#: the run's detectors ask for fewer (:attr:`lineament.detectors.Detector.min_cells_per_sigma`).
#: With 3 cells the residual filter, ``sqrt((sigma / f)**2 - 1)``, is at least sqrt(8) = 2.8 cells
#: wide.  Valley and ridge axes need it: at 2 cells, 83 to 90 % of the length of the
#: full-resolution axes at 4 and 8 px had a decimated axis within a pixel on our benchmark DEM,
#: against 97 to 98 % at 4 cells (8 px).  LoG, DoG and gradient edges kept 94 to 99 % at 2 cells,
#: with their lines 0.06 to 0.17 px (median) from the full-resolution ones, and are decimated
#: from 2 cells (:data:`MIN_EDGE_SIGMA_CELLS`); our measurements, in benchmarks/README.md.
MIN_DECIMATED_SIGMA_PX = 3.0
#: Cells per sigma the edge detectors need on a decimated grid (see :data:`MIN_DECIMATED_SIGMA_PX`).
MIN_EDGE_SIGMA_CELLS = 2.0
#: Blur of the first halving, in fine pixels; then each level carries one of its own cells of blur.
FIRST_HALVING_BLUR_PX = 2.0
#: Blur of every later halving, in cells of the level being halved.
NEXT_HALVING_BLUR_PX = math.sqrt(3.0)
#: Blur that level ``f`` carries, in its own cells.
LEVEL_BLUR_PX = 1.0


def decimation_factor(sigma_px: float, *, enabled: bool = True, min_cells: float = MIN_DECIMATED_SIGMA_PX) -> int:
    """Coarsest power-of-two grid step on which a scale of ``sigma_px`` fine pixels is filtered.

    Parameters
    ----------
    sigma_px : float
        The scale's smallest sigma in fine pixels (over both axes).
    enabled : bool
        False gives 1 (every scale at full resolution).
    min_cells : float
        Cells of the decimated grid that sigma must span (at least 2: the level itself carries
        one cell of blur).

    Returns
    -------
    int
        ``f = 2**k``, the largest with ``sigma_px / f >= min_cells`` (at least 1).
    """
    if min_cells < 2.0:
        raise ValueError(f"min_cells must be at least 2, got {min_cells}")
    if not enabled or sigma_px < 2 * min_cells:
        return 1
    return 2 ** int(math.floor(math.log2(sigma_px / min_cells) + 1e-9))


def residual_sigma_px(sigma_px: float, factor: int) -> float:
    """Sigma, in cells of level ``factor``, that brings the level's own blur up to ``sigma_px`` fine pixels."""
    if factor == 1:
        return float(sigma_px)
    return math.sqrt((sigma_px / factor) ** 2 - LEVEL_BLUR_PX ** 2)


def _halving_blurs(factor: int) -> list[float]:
    blurs = []
    f = 1
    while f < factor:
        blurs.append(FIRST_HALVING_BLUR_PX if f == 1 else NEXT_HALVING_BLUR_PX)
        f *= 2
    return blurs


def pyramid_reach(factor: int, truncate: float) -> int:
    """Fine pixels that a cell of level ``factor`` depends on, beyond its own position."""
    reach, f = 0, 1
    for blur in _halving_blurs(factor):
        reach += int(math.ceil(truncate * blur)) * f
        f *= 2
    return reach


def halve(image: np.ndarray, blur_px: float, *, truncate: float = 4.0) -> np.ndarray:
    """Blur by ``blur_px`` cells (separable Gaussian) and keep every second row and column.

    Parameters
    ----------
    image : ndarray, shape (rows, cols), float32
    blur_px : float
        Gaussian sigma in cells of ``image``.
    truncate : float
        Kernel half-width in sigmas.

    Returns
    -------
    ndarray, shape (ceil(rows / 2), ceil(cols / 2)), float32
        Cells ``(2 i, 2 j)`` of the blurred image (borders by mirror reflection).
    """
    k = gaussian_kernel1d(blur_px, 0, truncate)
    # only the kept cells are computed (the same values as filtering everything, then slicing)
    return correlate1d(correlate1d(image, k, 1, step=2), k, 0, step=2)


class Pyramid:
    """Decimated levels of one window, built on demand and kept for the window's scales.

    Parameters
    ----------
    values : ndarray, shape (rows, cols), float32
        Centred values (any value at invalid cells).
    valid : ndarray of bool, same shape
    truncate : float
        Kernel half-width in sigmas.

    Notes
    -----
    The window's first row and column must be multiples of every factor asked
    for, so that its levels are cut from the whole raster's levels.
    """

    def __init__(self, values: np.ndarray, valid: np.ndarray, *, truncate: float = 4.0) -> None:
        self.truncate = truncate
        has_voids = not bool(valid.all())
        weights = valid.astype(np.float32) if has_voids else None
        vals = np.where(valid, values, np.float32(0)).astype(np.float32) if has_voids else values
        # level -> (valid-weighted values, validity weights or None)
        self._levels: dict[int, tuple[np.ndarray, np.ndarray | None]] = {1: (vals, weights)}
        self._out: dict[int, tuple[np.ndarray, np.ndarray]] = {1: (values, valid)}

    def _clean_weight(self, factor: int) -> np.float32:
        """Validity weight of a level-``factor`` cell whose footprint is all valid."""
        w = np.ones((1, 1), np.float32)
        f = 1
        while f < factor:
            w = halve(w, FIRST_HALVING_BLUR_PX if f == 1 else NEXT_HALVING_BLUR_PX, truncate=self.truncate)
            f *= 2
        return np.float32(w[0, 0])

    def level(self, factor: int) -> tuple[np.ndarray, np.ndarray]:
        """Values and validity of level ``factor`` (a power of two).

        Returns
        -------
        values : ndarray, shape (ceil(rows / factor), ceil(cols / factor)), float32
            Blurred by ``factor`` fine pixels (one cell) when ``factor > 1``.
        valid : ndarray of bool, same shape
        """
        if factor in self._out:
            return self._out[factor]
        if factor < 1 or factor & (factor - 1):
            raise ValueError(f"factor must be a power of two, got {factor}")
        half = factor // 2
        self.level(half)
        num, den = self._levels[half]
        blur = FIRST_HALVING_BLUR_PX if half == 1 else NEXT_HALVING_BLUR_PX
        num2 = halve(num, blur, truncate=self.truncate)
        den2 = None if den is None else halve(den, blur, truncate=self.truncate)
        self._levels[factor] = (num2, den2)
        if den2 is None:
            out = (num2, np.ones(num2.shape, bool))
        else:
            valid = den2 >= np.float32(0.5)
            # Where the footprint holds no void the weights sum to the kernels' own sum, the same
            # float32 number at every such cell (same taps, same order); the ratio is taken only
            # where a void reaches, so cells away from voids keep the values a void-free window gets.
            vals = num2.copy()
            fix = valid & (den2 != self._clean_weight(factor))
            vals[fix] = num2[fix] / den2[fix]
            out = (vals, valid)
        self._out[factor] = out
        return out
