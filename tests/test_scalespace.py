"""Scale space: separable LoG and DoG against scipy.ndimage and analytic results."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from lineament.scalespace import dog_response, fill_voids, gaussian_derivative, gaussian_kernel1d, log_response


@pytest.fixture(scope="module")
def texture():
    rng = np.random.default_rng(42)
    return ndimage.gaussian_filter(rng.normal(size=(160, 180)), 1.0).astype(np.float32)


@pytest.mark.parametrize("sigma", [1.0, 2.0, 3.5, 8.0])
def test_log_matches_scipy_gaussian_laplace(texture, sigma):
    # Reference: scipy.ndimage.gaussian_laplace (same truncation, reflect borders), times sigma^2
    # for the scale normalisation of Lindeberg (1994).
    ours = log_response(texture, sigma, (1.0, 1.0))
    ref = sigma**2 * ndimage.gaussian_laplace(texture.astype(np.float64), sigma)
    m = int(4 * sigma) + 1
    inner = (slice(m, -m), slice(m, -m))
    rel = np.abs(ours[inner] - ref[inner]).max() / np.abs(ref[inner]).max()
    assert rel < 1e-4
    assert ours.dtype == np.float32


@pytest.mark.parametrize("order", [0, 1, 2, 3])
def test_kernels_match_scipy_gaussian_filter1d(order):
    # Reference: scipy.ndimage.gaussian_filter1d applied to an impulse is its kernel.
    impulse = np.zeros(81)
    impulse[40] = 1.0
    ours = ndimage.correlate1d(impulse, gaussian_kernel1d(3.0, order))
    ref = ndimage.gaussian_filter1d(impulse, 3.0, order=order)
    np.testing.assert_allclose(ours, ref, atol=1e-12)


def test_log_kernel_changes_sign_at_sqrt2_sigma():
    # Analytic: the 2-D LoG kernel (r^2 / sigma^2 - 2) exp(-r^2 / 2 sigma^2) / (2 pi sigma^4)
    # is zero at r = sqrt(2) sigma (Marr and Hildreth 1980).  The separable filter's impulse
    # response is that kernel, sampled.
    sigma = 8.0
    n = 129
    impulse = np.zeros((n, n), np.float32)
    impulse[n // 2, n // 2] = 1.0
    k = log_response(impulse, sigma, (1.0, 1.0)).astype(np.float64)
    for profile in (k[n // 2, n // 2:], k[n // 2:, n // 2]):
        i = int(np.flatnonzero(np.diff(np.sign(profile)) != 0)[0])
        r0 = i + profile[i] / (profile[i] - profile[i + 1])  # linear interpolation of the sign change
        assert r0 == pytest.approx(np.sqrt(2.0) * sigma, abs=0.05 * sigma)
    # along the diagonal, radius measured in pixels times sqrt(2)
    diag = np.array([k[n // 2 + j, n // 2 + j] for j in range(n // 2)])
    i = int(np.flatnonzero(np.diff(np.sign(diag)) != 0)[0])
    r0 = (i + diag[i] / (diag[i] - diag[i + 1])) * np.sqrt(2.0)
    assert r0 == pytest.approx(np.sqrt(2.0) * sigma, abs=0.05 * sigma)
    # centre value: -2 / (2 pi sigma^4) * sigma^2 after normalisation (analytic)
    assert k[n // 2, n // 2] == pytest.approx(-1.0 / (np.pi * sigma**2), rel=0.01)


@pytest.mark.parametrize("sigma", [2.0, 4.0, 8.0])
def test_dog_correlates_with_log(texture, sigma):
    # Marr and Hildreth (1980): a DoG with sigma ratio 1.6 closely approximates the LoG.
    big = np.tile(texture, (2, 2))
    log = log_response(big, sigma, (1.0, 1.0))
    dog = dog_response(big, sigma, (1.0, 1.0))
    m = int(6 * sigma)
    inner = (slice(m, -m), slice(m, -m))
    assert np.corrcoef(log[inner].ravel(), dog[inner].ravel())[0, 1] > 0.99
    # and it is scaled like the normalised LoG (same units), within 15 %
    ratio = np.std(dog[inner]) / np.std(log[inner])
    assert 0.85 < ratio < 1.15


def test_non_square_pixels_use_ground_units():
    # Analytic: for f = sin(kx x) sin(ky y) (x, y in metres), Gaussian smoothing multiplies f by
    # exp(-sigma^2 (kx^2 + ky^2) / 2) and the Laplacian by -(kx^2 + ky^2), so
    # sigma^2 LoG f = -sigma^2 (kx^2 + ky^2) exp(-sigma^2 (kx^2 + ky^2) / 2) f.
    dx, dy = 10.0, 25.0
    rows, cols = np.mgrid[0:200, 0:300]
    x, y = cols * dx, rows * dy
    kx, ky = 2 * np.pi / 400.0, 2 * np.pi / 900.0
    f = (np.sin(kx * x) * np.sin(ky * y)).astype(np.float32)
    sigma_m = 60.0
    k2 = kx * kx + ky * ky
    expected = -(sigma_m**2) * k2 * np.exp(-0.5 * sigma_m**2 * k2) * f
    resp = log_response(f, sigma_m, (dx, dy))
    inner = (slice(20, -20), slice(30, -30))
    assert np.abs(resp[inner] - expected[inner]).max() < 2e-3 * np.abs(expected[inner]).max()


def test_constant_image_gives_zero_response():
    # Invariant: derivatives of a constant vanish (common practice).
    z = np.full((64, 64), 1234.5, np.float32)
    assert np.abs(log_response(z - 1234.5, 3.0, (1.0, 1.0))).max() == 0.0
    assert np.abs(dog_response(z - 1234.5, 3.0, (1.0, 1.0))).max() == 0.0


def test_separable_derivative_equals_scipy_gaussian_filter_order(texture):
    # Reference: scipy.ndimage.gaussian_filter with a per-axis derivative order.
    ours = gaussian_derivative(texture, (2.0, 3.0), (1, 2))
    ref = ndimage.gaussian_filter(texture.astype(np.float64), (2.0, 3.0), order=(1, 2))
    np.testing.assert_allclose(ours[20:-20, 20:-20], ref[20:-20, 20:-20], atol=1e-6)


def test_fill_voids_keeps_valid_cells_and_fills_smoothly():
    rows, cols = np.mgrid[0:100, 0:100]
    plane = (0.5 * rows + 0.25 * cols).astype(np.float32)
    valid = np.ones_like(plane, bool)
    valid[40:60, 40:60] = False
    filled = fill_voids(np.where(valid, plane, 0).astype(np.float32), valid, (6.0, 6.0))
    assert np.array_equal(filled[valid], plane[valid])
    # Zeroth-order normalised convolution (Knutsson and Westin 1993) is a weighted mean of the
    # valid neighbours: exact for a constant; for a plane, within the range of the valid values in
    # reach, and close to the plane at the hole's centre (support is symmetric there).
    reach = plane[40 - 24:60 + 24, 40 - 24:60 + 24]
    assert filled[~valid].min() >= reach.min() and filled[~valid].max() <= reach.max()
    assert filled[50, 50] == pytest.approx(plane[50, 50], abs=2.0)
    # cells out of the kernel's reach stay at 0, the centring value
    far = fill_voids(np.where(valid, plane, 0).astype(np.float32), valid, (1.0, 1.0))
    assert far[50, 50] == 0.0
    const = fill_voids(np.where(valid, 7.0, 0).astype(np.float32), valid, (6.0, 6.0))
    np.testing.assert_allclose(const, 7.0, rtol=1e-6)


@pytest.mark.parametrize("order_rc", [(0, 0), (1, 0), (0, 2), (1, 1), (2, 1)])
def test_gaussian_derivative_is_the_two_passes_bit_for_bit(order_rc):
    # Reference: the separable passes one after the other (lineament._kernels.correlate1d, held to
    # scipy.ndimage.correlate1d in test_kernels).
    from lineament._kernels import correlate1d

    rng = np.random.default_rng(sum(order_rc))
    img = (rng.normal(size=(57, 43)) * 50).astype(np.float32)
    sigma_rc = (2.5, 1.7)
    k0 = gaussian_kernel1d(sigma_rc[0], order_rc[0], 4.0)
    k1 = gaussian_kernel1d(sigma_rc[1], order_rc[1], 4.0)
    assert np.array_equal(gaussian_derivative(img, sigma_rc, order_rc), correlate1d(correlate1d(img, k1, 1), k0, 0))
