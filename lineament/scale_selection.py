"""Automatic scale selection along a traced line (Lindeberg 1998).

For each kind of line, a scale-normalised strength measure is evaluated at
the line's vertices over a fine geometric series of sigmas; the selected
scale is where its mean over the vertices peaks, refined by fitting a
parabola in log sigma through the largest sample and its two neighbours.

Normalised measures (derivatives in ground units, sigma in metres):

* ``valley``: ``sigma**(2 gamma) * L_pp`` with ``L_pp`` the larger Hessian
  eigenvalue (positive across a trough), gamma = 3/4 (Lindeberg 1998,
  section 4).  For a Gaussian trough ``-A exp(-d**2 / (2 w**2))`` the
  curvature on the axis at scale ``t = sigma**2`` is
  ``A sqrt(t0) (t0 + t)**(-3/2)`` with ``t0 = w**2``, so the measure is
  proportional to ``t**(3/4) (t0 + t)**(-3/2)``;
  ``d/dt log = 3 / (4 t) - 3 / (2 (t0 + t)) = 0`` gives ``t = t0``:
  **the selected sigma equals the width w** (derived here by
  differentiation; in general ``t = 2 gamma t0 / (3 - 2 gamma)``, so
  gamma = 1 would select ``sigma = sqrt(2) w``).
* ``ridge``: the same with ``-L_pp``, ``L_pp`` the smaller eigenvalue.
* ``edge``: ``sigma**gamma * |grad L|`` with gamma = 1/2 (Lindeberg 1998,
  section 3).  For a step of height ``h`` blurred by a Gaussian of
  standard deviation ``w``, ``|grad L| = h / sqrt(2 pi (t0 + t))`` on the
  edge, so the measure goes as ``t**(1/4) (t0 + t)**(-1/2)``, which peaks
  at ``t = t0``: again **sigma = w**.

Because the selected sigma equals the width for both profiles, the strength
the detectors report (depth of the Gaussian trough of width sigma,
:data:`lineament.detectors.TROUGH_DEPTH_FACTOR`; equivalent step height for
edges) read at the selected scale is the depth or height of the feature.

References
----------
Lindeberg, T. (1998). Edge detection and ridge detection with automatic
scale selection. IJCV 30(2), 117-156. doi:10.1023/A:1008097225773
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage

from .detectors import derivative_stack

#: Normalisation exponents gamma per kind of line (Lindeberg 1998).
GAMMA = {"valley": 0.75, "ridge": 0.75, "edge": 0.5}


def sigma_series(sigma_min_m: float, sigma_max_m: float, *, steps_per_octave: int = 8) -> np.ndarray:
    """Geometric series of sigmas from ``sigma_min_m`` to at least ``sigma_max_m``.

    Parameters
    ----------
    sigma_min_m, sigma_max_m : float
        Range of scales, metres, ``0 < sigma_min_m < sigma_max_m``.
    steps_per_octave : int
        Sigmas per doubling (ratio ``2 ** (1 / steps_per_octave)``).

    Returns
    -------
    ndarray, shape (n,), float64
    """
    if not (0 < sigma_min_m < sigma_max_m) or steps_per_octave < 1:
        raise ValueError(f"need 0 < sigma_min_m < sigma_max_m and steps_per_octave >= 1, got "
                         f"{sigma_min_m}, {sigma_max_m}, {steps_per_octave}")
    n = int(math.ceil(steps_per_octave * math.log2(sigma_max_m / sigma_min_m) - 1e-9)) + 1
    return sigma_min_m * 2.0 ** (np.arange(n) / steps_per_octave)


def normalised_strength(image: np.ndarray, rows: np.ndarray, cols: np.ndarray, kind: str,
                        sigmas_m: np.ndarray, pixel_size_m: tuple[float, float], *,
                        truncate: float = 4.0) -> np.ndarray:
    """Scale-normalised strength of one kind of line at vertices, per sigma.

    Parameters
    ----------
    image : ndarray, shape (rows, cols), float32
        Window of the raster (voids already filled).
    rows, cols : ndarray, shape (n,)
        Vertex positions, fractional pixel-centre indices in ``image``.
    kind : {"valley", "ridge", "edge"}
    sigmas_m : ndarray, shape (k,)
        Scales, metres.
    pixel_size_m : (float, float)
        Pixel size along columns and rows, metres.
    truncate : float
        Kernel half-width in sigmas.

    Returns
    -------
    ndarray, shape (k, n), float64
        The measure of the module docstring at each sigma and vertex
        (sampled by linear interpolation); only a crop of ``image`` around
        the vertices, ``truncate`` times the largest sigma wide, is filtered.
    """
    if kind not in GAMMA:
        raise ValueError(f"kind must be one of {', '.join(GAMMA)}, got {kind!r}")
    rows = np.asarray(rows, np.float64)
    cols = np.asarray(cols, np.float64)
    gamma = GAMMA[kind]
    h, w = image.shape
    pad_r = int(math.ceil(truncate * max(sigmas_m) / pixel_size_m[1])) + 2
    pad_c = int(math.ceil(truncate * max(sigmas_m) / pixel_size_m[0])) + 2
    r0 = max(0, int(math.floor(rows.min())) - pad_r)
    r1 = min(h, int(math.ceil(rows.max())) + pad_r + 1)
    c0 = max(0, int(math.floor(cols.min())) - pad_c)
    c1 = min(w, int(math.ceil(cols.max())) + pad_c + 1)
    crop = np.asarray(image[r0:r1, c0:c1], np.float32)
    coords = np.vstack((rows - r0, cols - c0))
    out = np.empty((len(sigmas_m), rows.size))
    for k, sigma in enumerate(sigmas_m):
        if kind == "edge":
            d = derivative_stack(crop, sigma, pixel_size_m, ((0, 1), (1, 0)), truncate=truncate)
            value = np.hypot(d[(0, 1)], d[(1, 0)])
        else:
            d = derivative_stack(crop, sigma, pixel_size_m, ((0, 2), (2, 0), (1, 1)), truncate=truncate)
            m = 0.5 * (d[(0, 2)] + d[(2, 0)])
            r = np.hypot(0.5 * (d[(0, 2)] - d[(2, 0)]), d[(1, 1)])
            value = m + r if kind == "valley" else -(m - r)
        sampled = ndimage.map_coordinates(value, coords, order=1, mode="nearest")
        order = 1 if kind == "edge" else 2
        out[k] = sigma ** (order * gamma) * sampled  # t**(gamma * order / 2) times the derivative
    return out


def peak_scale(sigmas_m: np.ndarray, profile: np.ndarray) -> float:
    """Sigma at the peak of a profile, by a parabola in log sigma through the top three samples.

    Parameters
    ----------
    sigmas_m : ndarray, shape (k,)
        Increasing scales (a geometric series, so equally spaced in log sigma).
    profile : ndarray, shape (k,)

    Returns
    -------
    float
        Sigma in metres at the highest interior local maximum (Lindeberg
        1998 selects scales at local maxima over scale); NaN when there is
        none (the feature is finer or coarser than the range).  Sigmas below
        about one pixel are unreliable: the sampled kernels are poor there.
    """
    profile = np.asarray(profile, np.float64)
    inner = np.arange(1, profile.size - 1)
    peaks = inner[(profile[inner] >= profile[inner - 1]) & (profile[inner] > profile[inner + 1])
                  & np.isfinite(profile[inner])]
    if peaks.size == 0:
        return float("nan")
    i = int(peaks[np.argmax(profile[peaks])])
    x = np.log(np.asarray(sigmas_m, np.float64)[i - 1:i + 2])
    y0, y1, y2 = profile[i - 1:i + 2]
    h = x[1] - x[0]
    denom = y0 - 2.0 * y1 + y2
    offset = 0.0 if denom >= 0 else 0.5 * (y0 - y2) / denom
    return float(math.exp(x[1] + offset * h))


def select_scale(image: np.ndarray, rows: np.ndarray, cols: np.ndarray, kind: str,
                 pixel_size_m: tuple[float, float], *, sigma_min_m: float, sigma_max_m: float,
                 steps_per_octave: int = 8, truncate: float = 4.0) -> float:
    """Scale at which the normalised strength along a line peaks (Lindeberg 1998).

    Parameters
    ----------
    image : ndarray, shape (rows, cols), float32
        Window of the raster around the line (voids filled).
    rows, cols : ndarray, shape (n,)
        Vertices of the line, fractional pixel-centre indices in ``image``.
    kind : {"valley", "ridge", "edge"}
    pixel_size_m : (float, float)
        Pixel size along columns and rows, metres.
    sigma_min_m, sigma_max_m : float
        Range searched, metres.
    steps_per_octave : int
        Density of the geometric series of sigmas (default 8, ratio 1.09).
    truncate : float
        Kernel half-width in sigmas.

    Returns
    -------
    float
        Selected sigma in metres (:func:`peak_scale` of the mean profile
        over the vertices); NaN when the peak lies at an end of the range.

    Examples
    --------
    A Gaussian trough of width 30 m on a 10 m grid is selected at sigma = 30 m:

    >>> import numpy as np
    >>> x = (np.arange(101) - 50) * 10.0
    >>> z = np.tile(-5.0 * np.exp(-x**2 / (2 * 30.0**2)), (101, 1)).astype(np.float32)
    >>> rows = np.arange(40, 61, dtype=float); cols = np.full(21, 50.0)
    >>> s = select_scale(z, rows, cols, "valley", (10.0, 10.0), sigma_min_m=10, sigma_max_m=100)
    >>> round(s / 30.0, 1)
    1.0
    """
    sigmas = sigma_series(sigma_min_m, sigma_max_m, steps_per_octave=steps_per_octave)
    prof = normalised_strength(image, rows, cols, kind, sigmas, pixel_size_m, truncate=truncate)
    return peak_scale(sigmas, prof.mean(axis=1))
