"""Compiled correlation passes (lineament._kernels) against scipy.ndimage.correlate1d."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from lineament import _kernels
from lineament._kernels import correlate1d
from lineament.scalespace import gaussian_kernel1d

#: Unit roundoff of float32 (IEEE 754 binary32: 2**-24).
UNIT_ROUNDOFF = 2.0 ** -24


def _gamma(n: int) -> float:
    """Higham's gamma_n = n u / (1 - n u): a float32 sum of n products is within
    gamma_n * sum |products| of the exact sum (Higham 2002, Accuracy and Stability of
    Numerical Algorithms, 2nd ed., eq. 3.5 and lemma 3.1)."""
    return n * UNIT_ROUNDOFF / (1.0 - n * UNIT_ROUNDOFF)


def _abs_pass(img: np.ndarray, kernel: np.ndarray, axis: int, mode: str) -> np.ndarray:
    """sum |k_t| |v_t| at every cell (scipy.ndimage.correlate1d in float64)."""
    return ndimage.correlate1d(np.abs(img.astype(np.float64)), np.abs(kernel), axis=axis, mode=mode)


@pytest.mark.parametrize("axis", [0, 1])
@pytest.mark.parametrize("mode", ["reflect", "nearest"])
@pytest.mark.parametrize("shape", [(1, 1), (2, 7), (5, 3), (64, 80), (700, 600)])
def test_matches_scipy_correlate1d(axis, mode, shape):
    # Reference: scipy.ndimage.correlate1d in float64 with the same border mode; kernels longer
    # than the line (the 25-tap kernel on 1 to 7 cells) reflect repeatedly, as scipy does.
    rng = np.random.default_rng(sum(shape))
    img = (rng.normal(size=shape) * 100).astype(np.float32)
    for kernel in (gaussian_kernel1d(3.0, 0), gaussian_kernel1d(2.0, 2), gaussian_kernel1d(1.5, 1),
                   np.array([1.0, -8.0, 0.0, 8.0, -1.0]) / 12.0):
        ref = ndimage.correlate1d(img.astype(np.float64), kernel, axis=axis, mode=mode)
        out = correlate1d(img, kernel, axis, mode=mode)
        assert out.dtype == np.float32 and out.shape == img.shape
        # float32 sums of float32 products: within gamma_n * sum |k v| per cell (Higham 2002),
        # n = taps + 2 (the kernel taps rounded to float32, a folded pair's sum, the final rounding)
        bound = _gamma(kernel.size + 2) * _abs_pass(img, kernel, axis, mode)
        assert np.all(np.abs(out - ref) <= bound + 1e-30)
        # and the bound is not vacuous: relative to the whole sum it is about 1e-6
        assert bound.max() <= 2e-6 * np.abs(img).max() * np.abs(kernel).sum()


def test_window_gives_the_same_bits_as_the_whole_image():
    # tiling invariance: away from a window's borders, every cell is the same sum in the same order
    rng = np.random.default_rng(1)
    img = rng.normal(size=(600, 640)).astype(np.float32)
    k = gaussian_kernel1d(2.5, 2)
    r = k.size // 2
    whole = correlate1d(correlate1d(img, k, 1), k, 0)
    win = img[100:400, 150:520]
    part = correlate1d(correlate1d(win, k, 1), k, 0)
    assert np.array_equal(part[2 * r:-2 * r, 2 * r:-2 * r], whole[100 + 2 * r:400 - 2 * r, 150 + 2 * r:520 - 2 * r])


def test_thread_count_changes_no_bit(monkeypatch):
    rng = np.random.default_rng(2)
    img = rng.normal(size=(1024, 700)).astype(np.float32)
    k = gaussian_kernel1d(4.0, 2)
    monkeypatch.setenv("LINEAMENT_THREADS", "1")
    one = [correlate1d(img, k, a) for a in (0, 1)]
    monkeypatch.setenv("LINEAMENT_THREADS", "3")
    assert _kernels.kernel_threads() == 3
    three = [correlate1d(img, k, a) for a in (0, 1)]
    assert all(np.array_equal(a, b) for a, b in zip(one, three))


def test_bad_arguments_are_refused():
    img = np.zeros((4, 4), np.float32)
    with pytest.raises(ValueError):
        correlate1d(img, np.ones(4), 0)
    with pytest.raises(ValueError):
        correlate1d(img, np.ones(3), 2)
    with pytest.raises(ValueError):
        correlate1d(np.zeros(4, np.float32), np.ones(3), 0)


@pytest.mark.parametrize("shape", [(1, 1), (3, 9), (300, 257)])
def test_gradient_and_magnitude_matches_scipy_differences(shape):
    # Reference: scipy.ndimage.correlate1d with mode="nearest" and numpy.hypot
    from lineament._kernels import gradient_and_magnitude

    rng = np.random.default_rng(shape[0])
    img = rng.normal(size=shape).astype(np.float32)
    stencil = np.array([1.0, -8.0, 0.0, 8.0, -1.0]) / 12.0
    mag, gx, gy = gradient_and_magnitude(img, stencil, 0.1, 0.05, 3.0)
    rx = ndimage.correlate1d(img.astype(np.float64), stencil, axis=1, mode="nearest") * 0.1
    ry = ndimage.correlate1d(img.astype(np.float64), stencil, axis=0, mode="nearest") * 0.05
    # float32 sums of 5 products (Higham 2002 bound, as above) and one float32 product with the scale
    bx = (_gamma(5 + 2) * _abs_pass(img, stencil, 1, "nearest") + UNIT_ROUNDOFF * np.abs(rx / 0.1)) * 0.1
    by = (_gamma(5 + 2) * _abs_pass(img, stencil, 0, "nearest") + UNIT_ROUNDOFF * np.abs(ry / 0.05)) * 0.05
    assert np.all(np.abs(gx - rx) <= bx + 1e-30)
    assert np.all(np.abs(gy - ry) <= by + 1e-30)
    np.testing.assert_allclose(mag, 3.0 * np.hypot(rx, ry), rtol=1e-5, atol=3 * (bx.max() + by.max()))


@pytest.mark.parametrize("shape", [(1, 1), (4, 9), (257, 300)])
def test_laplacian_passes_match_four_scipy_passes(shape):
    # Reference: scipy.ndimage.correlate1d (float64), four separable passes: Lxx = second derivative
    # along rows then smoothing down columns, Lyy the other way round (a LoG; Marr and Hildreth 1980)
    from lineament._kernels import laplacian_passes

    rng = np.random.default_rng(shape[1])
    img = (rng.normal(size=shape) * 50).astype(np.float32)
    kx0, kx2 = gaussian_kernel1d(2.0, 0), gaussian_kernel1d(2.0, 2)
    ky0, ky2 = gaussian_kernel1d(3.0, 0), gaussian_kernel1d(3.0, 2)
    out = laplacian_passes(img, kx0, kx2, ky0, ky2, 4.0, 1.5)
    f64 = img.astype(np.float64)
    lxx = ndimage.correlate1d(ndimage.correlate1d(f64, kx2, axis=1, mode="reflect"), ky0, axis=0, mode="reflect")
    lyy = ndimage.correlate1d(ndimage.correlate1d(f64, kx0, axis=1, mode="reflect"), ky2, axis=0, mode="reflect")
    ref = 4.0 * lxx + 1.5 * lyy
    # two float32 passes compose (Higham 2002, as above): each of Lxx and Lyy is within
    # gamma_(n1 + n2 + 4) of its sum of |products|; two products and one sum in float32 follow
    n = kx0.size + ky0.size + 4
    axx = ndimage.correlate1d(_abs_pass(img, kx2, 1, "reflect"), np.abs(ky0), axis=0, mode="reflect")
    ayy = ndimage.correlate1d(_abs_pass(img, kx0, 1, "reflect"), np.abs(ky2), axis=0, mode="reflect")
    bound = _gamma(n + 3) * (4.0 * axx + 1.5 * ayy)
    assert np.all(np.abs(out - ref) <= bound + 1e-30)
    with pytest.raises(ValueError):
        laplacian_passes(img, kx0, gaussian_kernel1d(3.0, 2), ky0, ky2, 1.0, 1.0)


@pytest.mark.parametrize("shape", [(1, 1), (2, 3), (7, 6), (65, 80), (301, 257)])
@pytest.mark.parametrize("axis", [0, 1])
def test_every_second_cell_is_the_full_pass_sliced(shape, axis):
    # step=2 computes only the kept cells: the same bits as the full pass sliced with ::2
    # (and within the float32 bound of scipy.ndimage.correlate1d sliced the same way)
    rng = np.random.default_rng(shape[0] * 7 + axis)
    img = (rng.normal(size=shape) * 30).astype(np.float32)
    for kernel in (gaussian_kernel1d(2.0, 0), gaussian_kernel1d(1.7, 0), np.array([0.25, 0.5, 0.25])):
        full = correlate1d(img, kernel, axis)
        half = correlate1d(img, kernel, axis, step=2)
        cut = (slice(None), slice(None, None, 2)) if axis == 1 else (slice(None, None, 2), slice(None))
        assert half.shape == full[cut].shape
        assert np.array_equal(half, full[cut])
        ref = ndimage.correlate1d(img.astype(np.float64), kernel, axis=axis, mode="reflect")[cut]
        assert np.all(np.abs(half - ref) <= _gamma(kernel.size + 2) * _abs_pass(img, kernel, axis, "reflect")[cut] + 1e-30)
    with pytest.raises(ValueError):
        correlate1d(img, gaussian_kernel1d(2.0, 0), axis, step=3)


def test_magnitude_alone_is_the_same_magnitude():
    # components=False writes only the magnitude: the same bits as with the components
    from lineament._kernels import gradient_and_magnitude

    img = np.random.default_rng(5).normal(size=(300, 257)).astype(np.float32)
    stencil = np.array([1.0, -8.0, 0.0, 8.0, -1.0]) / 12.0
    mag, gx, gy = gradient_and_magnitude(img, stencil, 0.1, 0.05, 3.0)
    alone, no_x, no_y = gradient_and_magnitude(img, stencil, 0.1, 0.05, 3.0, components=False)
    assert no_x is None and no_y is None and gx.shape == img.shape
    assert np.array_equal(alone, mag)


@pytest.mark.parametrize("shape", [(1, 1), (2, 3), (4, 9), (7, 40), (61, 5), (300, 257)])
@pytest.mark.parametrize("threads", ["1", "3"])
def test_log_sweep_is_four_passes_then_the_gradient_bit_for_bit(shape, threads, monkeypatch):
    # The rolling-buffer sweep must give, cell for cell, what four correlate1d passes (each checked
    # against scipy.ndimage above), the float32 combination and the gradient pass give; kernels
    # longer than the image reflect as scipy does.  Bands of rows (threads) change no bit.
    from lineament._kernels import gradient_and_magnitude, laplacian_passes, log_and_gradient

    monkeypatch.setenv("LINEAMENT_THREADS", threads)
    monkeypatch.setattr(_kernels, "_MIN_PARALLEL_CELLS", 1)
    rng = np.random.default_rng(shape[0] * 31 + shape[1])
    img = (rng.normal(size=shape) * 40).astype(np.float32)
    kx0, kx2 = gaussian_kernel1d(2.0, 0), gaussian_kernel1d(2.0, 2)
    ky0, ky2 = gaussian_kernel1d(3.0, 0), gaussian_kernel1d(3.0, 2)
    sx, sy = np.float32(4.0), np.float32(1.5)
    lxx = correlate1d(correlate1d(img, kx2, 1), ky0, 0)
    lyy = correlate1d(correlate1d(img, kx0, 1), ky2, 0)
    ref = lxx * sx + lyy * sy
    assert np.array_equal(laplacian_passes(img, kx0, kx2, ky0, ky2, 4.0, 1.5), ref)
    stencil = np.array([1.0, -8.0, 0.0, 8.0, -1.0]) / 12.0
    mag, gx, gy = gradient_and_magnitude(ref, stencil, 0.1, 0.05, 2.5)
    out, mag2, gx2, gy2 = log_and_gradient(img, kx0, kx2, ky0, ky2, 4.0, 1.5, stencil, 0.1, 0.05, 2.5)
    assert np.array_equal(out, ref) and np.array_equal(mag2, mag)
    assert np.array_equal(gx2, gx) and np.array_equal(gy2, gy)
    out3, mag3, no_x, no_y = log_and_gradient(img, kx0, kx2, ky0, ky2, 4.0, 1.5, stencil, 0.1, 0.05, 2.5,
                                              components=False)
    assert no_x is None and no_y is None and np.array_equal(out3, ref) and np.array_equal(mag3, mag)


@pytest.mark.parametrize("shape", [(1, 1), (3, 2), (9, 31), (64, 50), (131, 77)])
@pytest.mark.parametrize("threads", ["1", "3"])
def test_derivative_sweep_is_the_passes_one_after_the_other(shape, threads, monkeypatch):
    # Reference: correlate1d along rows, then along columns, then the scale, for each output (bit for
    # bit), as lineament.detectors.derivative_stack computed them before; those passes are held to
    # scipy.ndimage.correlate1d above.  Symmetric, antisymmetric and asymmetric column kernels.
    from lineament._kernels import correlate1d, derivative_sweep, kernel_symmetry
    from lineament.scalespace import gaussian_kernel1d

    monkeypatch.setenv("LINEAMENT_THREADS", threads)
    rng = np.random.default_rng(shape[0] * 31 + shape[1])
    img = (rng.normal(size=shape) * 100).astype(np.float32)
    xk = [gaussian_kernel1d(2.0, o, 4.0) for o in (0, 1, 2)]
    yk = [gaussian_kernel1d(2.5, o, 4.0) for o in (0, 1, 2)]
    yk.append(rng.normal(size=yk[0].size))  # no symmetry
    assert [kernel_symmetry(np.float32(k)) for k in yk] == [1, -1, 1, 0]
    pairs = [(1, 0), (0, 1), (2, 0), (0, 2), (1, 1), (2, 3)]
    scales = [0.1, 0.2, 0.01, 0.02, 0.04, 3.0]
    got = derivative_sweep(img, xk, yk, pairs, scales)
    for p, (i, k) in enumerate(pairs):
        ref = correlate1d(correlate1d(img, xk[i], 1), yk[k], 0)
        ref *= np.float32(scales[p])
        assert np.array_equal(got[p], ref), (p, np.abs(got[p] - ref).max())
