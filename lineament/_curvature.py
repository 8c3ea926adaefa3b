"""Compiled cell-by-cell passes of the valley and ridge detector.

:func:`lineament.detectors._curvature_level_set` works from the Hessian of
the smoothed surface to an oriented principal direction, a field to trace
and the cells where lines may lie.  Written with NumPy, that took some twenty
whole-image temporaries and three trigonometric passes per call, about two
thirds of the detector's time (0.2 of 0.3 s on a 2100 x 2100 window at
sigma 2 px, our measurement); here each step is one compiled pass over
bands of rows on the kernel threads (:func:`lineament._kernels._bands`),
with the angles halved by the half-angle formulas instead of ``atan2``,
``cos`` and ``sin`` (in float64, then rounded to float32), so that the
compiled loops need no trigonometric calls; results may differ from the
trigonometric formulas in the last bits.  ``tests/test_curvature.py``
compares the two.

Three passes:

1. :func:`principal_directions`: ``m = (Lxx + Lyy) / 2``, ``a = (Lxx - Lyy) / 2``,
   ``r = hypot(a, Lxy)``, ``L_pp = m + sign r``, the principal direction
   ``p`` at angle ``atan2(Lxy, a) / 2`` (plus 90 degrees for ridges), the
   weighted double-angle components to be smoothed, the strength and the
   sign condition.
2. :func:`orient_and_field`: the smoothed double angle halved into ``n``,
   ``n`` turned towards the reference direction, ``p`` turned towards ``n``,
   and the field ``L_p = Lx px + Ly py``.
3. :func:`orientation_flips`: cells whose ``p`` points against that of one
   of their eight neighbours.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ._kernels import _bands

_JIT = dict(cache=True, nogil=True, fastmath=False)


@numba.njit(inline="always", **_JIT)
def _half_angle(c, s):
    """Unit vector at half the angle of the vector ``(c, s)``, in (-90, 90] degrees, without trigonometry.

    ``cos(t / 2) = sqrt((1 + cos t) / 2)`` and ``sin(t / 2) = +-sqrt((1 - cos t) / 2)`` with the
    sign of ``s`` (signed zeros included, as ``atan2``); a zero vector gives the angle ``atan2``
    gives for it (0 for ``+0`` in ``c``, 90 degrees with the sign of ``s`` for ``-0``).  For
    components of float32 magnitude, whose squares in float64 neither overflow nor underflow.
    """
    r = math.sqrt(c * c + s * s)
    if r > 0.0:
        ct = c / r
    else:
        ct = math.copysign(1.0, c)
    ct = min(max(ct, -1.0), 1.0)
    return math.sqrt(0.5 * (1.0 + ct)), math.copysign(math.sqrt(0.5 * (1.0 - ct)), s)


@numba.njit(**_JIT)
def _principal_rows(lxx, lyy, lxy, sign, factor, floor, px, py, wc, ws, strength, condition,
                    row0, row1):  # pragma: no cover - compiled
    h, w = lxx.shape
    half = np.float32(0.5)
    s32 = np.float32(sign)
    f = np.float32(factor)
    fl = np.float32(floor)
    for i in range(row0, row1):
        for j in range(w):
            m = half * (lxx[i, j] + lyy[i, j])
            a = half * (lxx[i, j] - lyy[i, j])
            b = lxy[i, j]
            ad = np.float64(a)
            bd = np.float64(b)
            rd = math.sqrt(ad * ad + bd * bd)  # in float64: no overflow
            r = np.float32(rd)
            lpp = m + s32 * r
            cx, sy = _half_angle(ad, bd)  # p of the larger eigenvalue, at atan2(Lxy, a) / 2
            if sign < 0:  # ridges: the smaller eigenvalue, 90 degrees on
                cx, sy = -sy, cx
            px[i, j] = np.float32(cx)
            py[i, j] = np.float32(sy)
            inside = s32 * m > 0
            weight = abs(np.float64(lpp)) if inside else 0.0
            # w (cos 2 theta, sin 2 theta) of p: (a, Lxy) / r, turned half a circle for ridges
            if rd > 0.0:
                k = weight / rd * sign
                wc[i, j] = np.float32(k * ad)
                ws[i, j] = np.float32(k * bd)
            else:
                wc[i, j] = np.float32(weight * sign)
                ws[i, j] = np.float32(0.0)
            strength[i, j] = abs(lpp) * f
            condition[i, j] = inside and r > fl


def principal_directions(lxx: np.ndarray, lyy: np.ndarray, lxy: np.ndarray, *, sign: int, factor: float,
                         floor: float) -> tuple:
    """Pass 1: principal direction, double-angle components, strength and sign condition.

    Parameters
    ----------
    lxx, lyy, lxy : ndarray, float32, one shape
        Second derivatives of the smoothed surface.
    sign : {1, -1}
        Valleys (+1, the larger eigenvalue) or ridges (-1, the smaller).
    factor : float
        Strength per unit of ``|L_pp|``.
    floor : float
        ``r`` at or below this counts as no direction (flat).

    Returns
    -------
    px, py : ndarray, float32
        Unit principal direction (not yet oriented).
    wc, ws : ndarray, float32
        ``w cos 2 theta`` and ``w sin 2 theta`` with ``w = |L_pp|`` where ``sign m > 0``, else 0.
    strength : ndarray, float32
        ``|L_pp| * factor``.
    condition : ndarray of bool
        ``sign m > 0`` and ``r > floor``.
    """
    shape = lxx.shape
    px, py, wc, ws, strength = (np.empty(shape, np.float32) for _ in range(5))
    condition = np.empty(shape, np.bool_)
    if lxx.size:
        _bands(_principal_rows, shape[0], lxx.size, lxx, lyy, lxy, int(sign), float(factor), float(floor),
               px, py, wc, ws, strength, condition)
    return px, py, wc, ws, strength, condition


@numba.njit(**_JIT)
def _orient_rows(c2, s2, bx, by, lx, ly, px, py, field, row0, row1):  # pragma: no cover - compiled
    h, w = c2.shape
    for i in range(row0, row1):
        for j in range(w):
            nx, ny = _half_angle(np.float64(c2[i, j]), np.float64(s2[i, j]))
            if nx * bx + ny * by < 0:
                nx = -nx
                ny = -ny
            x = px[i, j]
            y = py[i, j]
            if np.float64(x) * nx + np.float64(y) * ny < 0:
                x = -x
                y = -y
                px[i, j] = x
                py[i, j] = y
            field[i, j] = lx[i, j] * x + ly[i, j] * y


def orient_and_field(c2: np.ndarray, s2: np.ndarray, reference: tuple[float, float], lx: np.ndarray,
                     ly: np.ndarray, px: np.ndarray, py: np.ndarray) -> np.ndarray:
    """Pass 2: orient ``p`` (in place) by the smoothed direction and return the field ``Lx px + Ly py``.

    The smoothed direction ``n`` is at half the angle of ``(c2, s2)``,
    turned so that ``n . reference > 0``; ``p`` is turned so that
    ``p . n > 0``.
    """
    field = np.empty(c2.shape, np.float32)
    if c2.size:
        _bands(_orient_rows, c2.shape[0], c2.size, c2, s2, float(reference[0]), float(reference[1]), lx, ly,
               px, py, field)
    return field


@numba.njit(inline="always", **_JIT)
def _against(x, y, px, py, ii, jj):
    return x * px[ii, jj] + y * py[ii, jj] < 0


@numba.njit(**_JIT)
def _flip_cell(px, py, i, j):
    """Whether cell (i, j) points against one of its neighbours inside the image (any position)."""
    h, w = px.shape
    x = px[i, j]
    y = py[i, j]
    bad = False
    for di in range(-1, 2):
        ii = i + di
        if ii < 0 or ii >= h:
            continue
        for dj in range(-1, 2):
            jj = j + dj
            if (di == 0 and dj == 0) or jj < 0 or jj >= w:
                continue
            bad |= _against(x, y, px, py, ii, jj)
    return bad


@numba.njit(**_JIT)
def _flip_rows(px, py, flip, row0, row1):  # pragma: no cover - compiled
    h, w = px.shape
    for i in range(row0, row1):
        if i == 0 or i == h - 1 or w < 3:
            for j in range(w):
                flip[i, j] = _flip_cell(px, py, i, j)
            continue
        flip[i, 0] = _flip_cell(px, py, i, 0)
        for j in range(1, w - 1):  # interior: the eight neighbours written out (vectorises)
            x = px[i, j]
            y = py[i, j]
            flip[i, j] = (_against(x, y, px, py, i - 1, j - 1) | _against(x, y, px, py, i - 1, j)
                          | _against(x, y, px, py, i - 1, j + 1) | _against(x, y, px, py, i, j - 1)
                          | _against(x, y, px, py, i, j + 1) | _against(x, y, px, py, i + 1, j - 1)
                          | _against(x, y, px, py, i + 1, j) | _against(x, y, px, py, i + 1, j + 1))
        flip[i, w - 1] = _flip_cell(px, py, i, w - 1)


def orientation_flips(px: np.ndarray, py: np.ndarray) -> np.ndarray:
    """Pass 3: cells whose oriented direction points against that of one of their 8 neighbours."""
    flip = np.empty(px.shape, np.bool_)
    if px.size:
        _bands(_flip_rows, px.shape[0], px.size, px, py, flip)
    return flip
