"""Compiled passes of the valley and ridge detector against the NumPy formulas they replace."""

from __future__ import annotations

import math

import numpy as np
import pytest

from lineament._curvature import _half_angle, orient_and_field, orientation_flips, principal_directions
from lineament.detectors import ORIENTATION_REFERENCE


def _numpy_principal(lxx, lyy, lxy, sign, factor, floor):
    # Reference: the detector's former NumPy code (trigonometric, float32).
    m = np.float32(0.5) * (lxx + lyy)
    a = np.float32(0.5) * (lxx - lyy)
    r = np.hypot(a, lxy)
    lpp = m + np.float32(sign) * r
    theta = np.float32(0.5) * np.arctan2(lxy, a)
    if sign < 0:
        theta += np.float32(0.5 * math.pi)
    px, py = np.cos(theta), np.sin(theta)
    weight = np.where(np.float32(sign) * m > 0, np.abs(lpp), np.float32(0.0))
    wc = weight * (px * px - py * py)
    ws = weight * (np.float32(2.0) * px * py)
    strength = (np.abs(lpp) * np.float32(factor)).astype(np.float32)
    condition = (np.float32(sign) * m > 0) & (r > np.float32(floor))
    return px, py, wc, ws, strength, condition, r


def _numpy_flips(px, py):
    # Reference: the detector's former NumPy neighbour test.
    flip = np.zeros(px.shape, bool)
    h, w = px.shape
    for dr, dc in ((0, 1), (1, 0), (1, 1), (1, -1)):
        a = (slice(0, h - dr), slice(max(0, -dc), w - max(0, dc)))
        b = (slice(dr, h), slice(max(0, dc), w - max(0, -dc)))
        bad = px[a] * px[b] + py[a] * py[b] < 0
        flip[a] |= bad
        flip[b] |= bad
    return flip


@pytest.mark.parametrize("c, s", [(1.0, 0.0), (0.0, 1.0), (-1.0, 0.0), (-1.0, -0.0), (0.0, -1.0), (0.3, -0.7),
                                  (-2.0, 1e-30), (0.0, 0.0), (-0.0, 0.0), (-0.0, -0.0), (1e-45, -3e-45), (3e38, 1e38)])
def test_half_angle_is_atan2_halved(c, s):
    # Over the range of float32 values (from the smallest subnormal to the largest finite).
    # Reference: math.atan2 (C99 Annex F: signed zeros and quadrants), cos and sin of half of it.
    t = 0.5 * math.atan2(s, c)
    x, y = _half_angle(c, s)
    assert x == pytest.approx(math.cos(t), abs=1e-15)
    assert y == pytest.approx(math.sin(t), abs=1e-15)
    assert math.copysign(1.0, y) == math.copysign(1.0, t) or y == 0.0 and t == 0.0


def test_half_angle_on_random_vectors():
    rng = np.random.default_rng(1)
    for c, s in rng.normal(size=(2000, 2)) * 10.0 ** rng.uniform(-20, 20, (2000, 1)):
        t = 0.5 * math.atan2(s, c)
        x, y = _half_angle(c, s)
        assert abs(x - math.cos(t)) < 2e-8 and abs(y - math.sin(t)) < 2e-8


@pytest.mark.parametrize("sign", [1, -1])
def test_principal_directions_match_the_numpy_formulas(sign):
    rng = np.random.default_rng(2 + sign)
    lxx, lyy, lxy = (rng.normal(size=(97, 131)).astype(np.float32) for _ in range(3))
    lxy[::7, ::5] = 0.0  # axis-aligned principal directions
    lxx[3, :] = lyy[3, :]  # a = 0 rows
    px, py, wc, ws, strength, condition = principal_directions(lxx, lyy, lxy, sign=sign, factor=7.5, floor=0.05)
    rpx, rpy, rwc, rws, rstrength, rcondition, r = _numpy_principal(lxx, lyy, lxy, sign, 7.5, 0.05)
    # the same direction up to float32 rounding (a direction at exactly 90 degrees may come out
    # with either sign of the vanishing component, which the detector's orientation step removes)
    assert np.abs(np.abs(px) - np.abs(rpx)).max() < 4e-7 and np.abs(np.abs(py) - np.abs(rpy)).max() < 4e-7
    assert np.abs(px * rpx + py * rpy).min() > 1 - 1e-6
    scale = np.abs(rwc).max()
    assert np.abs(wc - rwc).max() < 2e-6 * scale and np.abs(ws - rws).max() < 2e-6 * scale
    near = np.abs(np.hypot(lxx - lyy, 2 * lxy) / 2 - 0.05) < 1e-6  # r within rounding of the floor
    assert np.array_equal(condition[~near], rcondition[~near])
    assert np.allclose(strength, rstrength, rtol=1e-6, atol=0)
    assert np.hypot(px, py) == pytest.approx(1.0, abs=1e-6)


def test_orientation_and_field_match_the_numpy_formulas():
    rng = np.random.default_rng(5)
    shape = (64, 80)
    c2, s2, lx, ly = (rng.normal(size=shape).astype(np.float32) for _ in range(4))
    t = rng.uniform(-np.pi / 2, np.pi / 2, shape)
    px, py = np.cos(t).astype(np.float32), np.sin(t).astype(np.float32)
    bx, by = (np.float32(v) for v in ORIENTATION_REFERENCE)
    half = np.float32(0.5) * np.arctan2(s2, c2)
    nx, ny = np.cos(half), np.sin(half)
    turn = np.where(nx * bx + ny * by < 0, np.float32(-1.0), np.float32(1.0))
    nx, ny = nx * turn, ny * turn
    flipped = px * nx + py * ny < 0
    rpx, rpy = np.where(flipped, -px, px), np.where(flipped, -py, py)
    rfield = (lx * rpx + ly * rpy).astype(np.float32)
    ox, oy = px.copy(), py.copy()
    field = orient_and_field(c2, s2, ORIENTATION_REFERENCE, lx, ly, ox, oy)
    # away from knife edges (p nearly perpendicular to n, or n nearly perpendicular to the reference)
    ok = (np.abs(px * nx + py * ny) > 1e-5) & (np.abs(nx * bx + ny * by) > 1e-5)
    assert ok.mean() > 0.99
    assert np.array_equal(ox[ok], rpx[ok]) and np.array_equal(oy[ok], rpy[ok])
    assert np.array_equal(field[ok], rfield[ok])


def test_orientation_flips_match_the_numpy_neighbour_test():
    rng = np.random.default_rng(6)
    t = np.cumsum(rng.normal(scale=0.6, size=(50, 70)), axis=1)
    px, py = np.cos(t).astype(np.float32), np.sin(t).astype(np.float32)
    assert np.array_equal(orientation_flips(px, py), _numpy_flips(px, py))
    assert orientation_flips(px[:1, :1], py[:1, :1]).tolist() == [[False]]
    for shape in ((1, 7), (2, 2), (3, 1), (2, 9), (6, 3)):  # borders only, no interior
        a, b = px[:shape[0], :shape[1]].copy(), py[:shape[0], :shape[1]].copy()
        assert np.array_equal(orientation_flips(a, b), _numpy_flips(a, b)), shape


def test_ridges_reuse_the_valleys_stack_only_for_the_same_window():
    # The second detector on a window reuses the first's Gaussian derivatives; the level sets are
    # those of a detector run alone, and another window (even an equal copy) gets its own stack.
    import gc

    from lineament import detectors
    from lineament.detectors import DETECTORS

    rng = np.random.default_rng(7)
    img = rng.normal(size=(90, 110)).astype(np.float32)
    kw = dict(truncate=4.0, rounding_std=1e-5)
    valley, ridge = DETECTORS["valleys"]["hessian"], DETECTORS["ridges"]["hessian"]
    detectors._LAST_STACKS.clear()
    alone = ridge.run(img.copy(), 20.0, (10.0, 10.0), **kw)
    valley.run(img, 20.0, (10.0, 10.0), **kw)
    stack = detectors._LAST_STACKS[next(iter(detectors._LAST_STACKS))][2]
    shared = ridge.run(img, 20.0, (10.0, 10.0), **kw)
    assert detectors._LAST_STACKS[next(iter(detectors._LAST_STACKS))][2] is stack
    for name in ("field", "strength", "allowed"):
        assert np.array_equal(getattr(alone, name), getattr(shared, name))
    ridge.run(img, 30.0, (10.0, 10.0), **kw)  # another scale: a new stack
    assert detectors._LAST_STACKS[next(iter(detectors._LAST_STACKS))][2] is not stack
    other = img + np.float32(1.0)
    ridge.run(other, 30.0, (10.0, 10.0), **kw)
    del other, img
    gc.collect()
    assert not detectors._LAST_STACKS  # dropped with its window
