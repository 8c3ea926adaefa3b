"""Gaussian scale space: separable Gaussian derivative filters, LoG and DoG.

All filters are separable: a 2-D Gaussian derivative is applied as two 1-D
passes (one along rows, one along columns), never as a 2-D kernel.  Arrays
stay float32.

References
----------
Marr, D. and Hildreth, E. (1980). Theory of edge detection. Proc. R. Soc.
Lond. B 207, 187-217. doi:10.1098/rspb.1980.0020
Lindeberg, T. (1994). Scale-Space Theory in Computer Vision. Kluwer.
doi:10.1007/978-1-4757-6465-9
Knutsson, H. and Westin, C.-F. (1993). Normalized and differential
convolution. Proc. CVPR 1993, 515-523. doi:10.1109/CVPR.1993.341081
"""

from __future__ import annotations

import math

import numpy as np

from ._kernels import derivative_sweep, laplacian_passes
from .settings import DOG_RATIO


def gaussian_kernel1d(sigma: float, order: int = 0, truncate: float = 4.0) -> np.ndarray:
    """Sampled 1-D Gaussian or Gaussian derivative kernel.

    Parameters
    ----------
    sigma : float
        Standard deviation in samples (pixels), > 0.
    order : {0, 1, 2, 3}
        Derivative order.
    truncate : float
        Half-width of the kernel in sigmas; the kernel has
        ``2 * ceil(truncate * sigma) + 1`` taps.

    Returns
    -------
    ndarray, float64
        Kernel for correlation (tap ``i`` at offset ``i - radius``).  The
        order-0 kernel is the normalised sampled Gaussian; derivative
        kernels are the analytic derivatives of it, as in
        ``scipy.ndimage.gaussian_filter1d``.  Sampling and truncation leave
        the order-2 kernel a tiny response to a constant (its taps sum to
        about -4e-5 at sigma = 2.4 px); the pipeline subtracts one global
        offset (the median of the raster) before filtering, so results do
        not depend on the absolute elevation or on tiling.
    """
    if sigma <= 0:
        raise ValueError(f"sigma must be > 0, got {sigma}")
    radius = int(math.ceil(truncate * sigma))
    x = np.arange(-radius, radius + 1, dtype=np.float64)
    phi = np.exp(-0.5 * (x / sigma) ** 2)
    phi /= phi.sum()
    s2 = sigma * sigma
    if order == 0:
        k = phi
    elif order == 1:
        k = -x / s2 * phi
    elif order == 2:
        k = (x * x / (s2 * s2) - 1.0 / s2) * phi
    elif order == 3:
        k = (3.0 * x / (s2 * s2) - x**3 / (s2**3)) * phi
    else:
        raise ValueError(f"order must be 0..3, got {order}")
    # correlate1d uses the kernel as given; odd-order kernels are mirrored so
    # that the result is the derivative along increasing index.
    return k[::-1].copy() if order % 2 else k


def residual_sigma(sigma_px: float, prior_blur_px: float = 0.0) -> float:
    """Sigma still to apply to an image that already carries a Gaussian blur of ``prior_blur_px``.

    Gaussian blurs add in variance (Lindeberg 1994, semi-group property), so
    the result is ``sqrt(sigma_px**2 - prior_blur_px**2)``.

    Parameters
    ----------
    sigma_px, prior_blur_px : float
        Total and already applied sigma, in pixels of the image.
    """
    if prior_blur_px <= 0:
        return float(sigma_px)
    if sigma_px <= prior_blur_px:
        raise ValueError(f"sigma {sigma_px:g} px is not larger than the blur already applied ({prior_blur_px:g} px)")
    return math.sqrt(sigma_px * sigma_px - prior_blur_px * prior_blur_px)


def gaussian_derivative(image: np.ndarray, sigma_rc: tuple[float, float], order_rc: tuple[int, int],
                        *, truncate: float = 4.0) -> np.ndarray:
    """Separable Gaussian derivative of a 2-D float32 image.

    Parameters
    ----------
    image : ndarray, shape (rows, cols), float32
    sigma_rc : (float, float)
        Sigma along rows and along columns, in pixels.
    order_rc : (int, int)
        Derivative order along rows (axis 0) and columns (axis 1).
    truncate : float
        Kernel half-width in sigmas.

    Returns
    -------
    ndarray, shape (rows, cols), float32
        Derivative per pixel squared (pixel units); borders by mirror
        reflection (``mode="reflect"``).
    """
    k0 = gaussian_kernel1d(sigma_rc[0], order_rc[0], truncate)
    k1 = gaussian_kernel1d(sigma_rc[1], order_rc[1], truncate)
    # correlate1d(correlate1d(image, k1, 1), k0, 0), bit for bit, in one sweep (no whole
    # intermediate image)
    return derivative_sweep(image, [k1], [k0], [(0, 0)], [1.0])[0]


def log_response(image: np.ndarray, sigma_m: float, pixel_size_m: tuple[float, float],
                 *, truncate: float = 4.0, prior_blur_px: float = 0.0) -> np.ndarray:
    """Scale-normalised Laplacian of Gaussian, ``sigma**2 * (Lxx + Lyy)``.

    Derivatives are taken in ground units, so non-square pixels get the
    right sigma per axis.  The result has the units of the image values and
    is comparable across scales (Lindeberg 1994, gamma = 1).

    Parameters
    ----------
    image : ndarray, shape (rows, cols), float32
    sigma_m : float
        Scale in metres (ground units).
    pixel_size_m : (float, float)
        Pixel size along columns (x) and along rows (y), metres.
    truncate : float
        Kernel half-width in sigmas.
    prior_blur_px : float
        Gaussian blur the image already carries, in its pixels (a decimated
        level of :mod:`lineament.pyramid`); the filters add only the rest.

    Returns
    -------
    ndarray, shape (rows, cols), float32
    """
    # lxx * float32(s2 / dx**2) + lyy * float32(s2 / dy**2), with lxx and lyy from the separable
    # Gaussian second-derivative kernels, in one compiled sweep (the same numbers as four passes)
    return laplacian_passes(image, *log_kernels(sigma_m, pixel_size_m, truncate=truncate,
                                                prior_blur_px=prior_blur_px))


def log_kernels(sigma_m: float, pixel_size_m: tuple[float, float], *, truncate: float = 4.0,
                prior_blur_px: float = 0.0) -> tuple:
    """The 1-D kernels and scales of :func:`log_response`.

    Returns
    -------
    row_smooth, row_second, col_smooth, col_second : ndarray
        Gaussian and second-derivative kernels along rows (x) and down columns (y).
    scale_x, scale_y : numpy.float32
        ``sigma**2 / dx**2`` and ``sigma**2 / dy**2``.
    """
    dx, dy = pixel_size_m
    srow, scol = residual_sigma(sigma_m / dy, prior_blur_px), residual_sigma(sigma_m / dx, prior_blur_px)
    s2 = np.float32(sigma_m * sigma_m)
    return (gaussian_kernel1d(scol, 0, truncate), gaussian_kernel1d(scol, 2, truncate),
            gaussian_kernel1d(srow, 0, truncate), gaussian_kernel1d(srow, 2, truncate),
            np.float32(s2 / (dx * dx)), np.float32(s2 / (dy * dy)))


def dog_response(image: np.ndarray, sigma_m: float, pixel_size_m: tuple[float, float],
                 *, ratio: float = DOG_RATIO, truncate: float = 4.0, prior_blur_px: float = 0.0) -> np.ndarray:
    """Scale-normalised difference of Gaussians centred on ``sigma_m``.

    The two Gaussians have sigmas ``sigma_m / sqrt(ratio)`` and
    ``sigma_m * sqrt(ratio)`` (geometric mean ``sigma_m``).  Because
    ``dL/dsigma = sigma * Laplacian(L)``, their difference divided by
    ``(ratio - 1/ratio) / 2`` approximates ``sigma**2 * Laplacian(L)`` at
    ``sigma_m``, the quantity :func:`log_response` computes (Marr and
    Hildreth 1980 chose ratio 1.6).

    Parameters and returns as :func:`log_response`.
    """
    dx, dy = pixel_size_m
    r = math.sqrt(ratio)
    s_lo, s_hi = sigma_m / r, sigma_m * r
    b = prior_blur_px
    g_hi = gaussian_derivative(image, (residual_sigma(s_hi / dy, b), residual_sigma(s_hi / dx, b)), (0, 0),
                               truncate=truncate)
    g_lo = gaussian_derivative(image, (residual_sigma(s_lo / dy, b), residual_sigma(s_lo / dx, b)), (0, 0),
                               truncate=truncate)
    g_hi -= g_lo
    g_hi *= np.float32(2.0 / (ratio - 1.0 / ratio))
    return g_hi


def fill_voids(values: np.ndarray, valid: np.ndarray, sigma_rc: tuple[float, float], *,
               truncate: float = 4.0) -> np.ndarray:
    """Fill invalid cells by normalised convolution (Knutsson and Westin 1993).

    ``filled = G * (f w) / G * w`` with ``w`` the validity mask and ``G`` a
    Gaussian of ``sigma_rc`` cut at ``truncate`` sigmas.  Valid cells keep
    their values.  Cells the kernel does not reach from any valid cell (deep
    inside a large void, where ``G * w`` < 1e-3) become 0, the raster's
    centring value; they lie more than about 3.7 sigma inside the void, out
    of reach of any response that is kept (crossings closer than 3 sigma to a
    void are dropped and kernels reach 4 sigma).  Everything depends only on
    cells within ``truncate`` sigmas, so tiles give the same result as the
    whole raster.

    Parameters
    ----------
    values : ndarray, shape (rows, cols), float32
        Centred values (any value at invalid cells).
    valid : ndarray of bool, same shape
    sigma_rc : (float, float)
        Filling scale along rows and columns, pixels.
    truncate : float
        Kernel half-width in sigmas.

    Returns
    -------
    ndarray, float32
    """
    if valid.all():
        return np.asarray(values, dtype=np.float32)
    w = valid.astype(np.float32)
    fw = np.where(valid, values, 0).astype(np.float32)
    num = gaussian_derivative(fw, sigma_rc, (0, 0), truncate=truncate)
    den = gaussian_derivative(w, sigma_rc, (0, 0), truncate=truncate)
    out = fw
    fill = ~valid & (den > 1e-3)
    out[fill] = num[fill] / den[fill]
    return out
