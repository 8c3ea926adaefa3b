"""Line detectors: each turns a filtered image into a zero level set to trace.

Every family of lines is found the same way: a *field* whose zero level set
holds the lines, a *strength* per pixel (in raster units, comparable across
scales), an optional mask of where lines may lie (a sign condition), and
samples of the background from which the noise level is measured.  The
tracer (:mod:`lineament.crossings`), tiling and stitching do not care which
detector made the level set.

Detectors are registered in :data:`DETECTORS` by feature name.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from .crossings import noise_gain, step_strength_factor, strength_map
from .scalespace import dog_response, log_response
from .errors import SettingsError
from .settings import DOG_RATIO


@dataclass(frozen=True)
class LevelSet:
    """What a detector hands to the tracer, for one scale on one window.

    Attributes
    ----------
    field : ndarray, shape (rows, cols), float32
        Lines are the zero level set of this field.
    strength : ndarray, shape (rows, cols), float32
        Strength per pixel, raster units.
    allowed : ndarray of bool or None
        Where lines may lie (None: everywhere).
    noise_samples : tuple of ndarray
        Arrays (same shape as ``field``) whose pooled robust standard
        deviation, times ``noise_factor``, is the background noise level in
        strength units.
    noise_factor : float
    noise_floor : float
        Lowest noise level the arithmetic allows (float32 rounding), strength units.
    """

    field: np.ndarray
    strength: np.ndarray
    allowed: np.ndarray | None
    noise_samples: tuple
    noise_factor: float
    noise_floor: float


@dataclass(frozen=True)
class Detector:
    """A named line detector.

    Attributes
    ----------
    kind : str
        Value of the ``kind`` attribute of its lines.
    operator : str
        Value of the ``operator`` attribute.
    reach_factor : float
        The widest kernel reaches ``reach_factor * truncate * sigma``; sets the tile halo.
    run : callable
        ``run(image, sigma_m, pixel_size_m, *, truncate, rounding_std) -> LevelSet``.
    """

    kind: str
    operator: str
    reach_factor: float
    run: Callable[..., LevelSet]


def _edge_level_set(image: np.ndarray, sigma_m: float, pixel_size_m: tuple[float, float], *,
                    truncate: float, rounding_std: float, operator: str) -> LevelSet:
    """Zero crossings of the scale-normalised LoG or DoG (Marr and Hildreth 1980)."""
    if operator == "log":
        response_of = functools.partial(log_response, sigma_m=sigma_m, pixel_size_m=pixel_size_m,
                                        truncate=truncate)
        response_scale = 1.0
    else:
        response_of = functools.partial(dog_response, sigma_m=sigma_m, pixel_size_m=pixel_size_m,
                                        ratio=DOG_RATIO, truncate=truncate)
        response_scale = 2.0 / (DOG_RATIO - 1.0 / DOG_RATIO)
    resp = response_of(image)
    strength, gx, gy = strength_map(resp, sigma_m, pixel_size_m)
    factor = step_strength_factor(sigma_m)
    # Floors: input rounding through the filter, and rounding of the response itself (the DoG
    # subtracts two nearly equal blurred images) through the 5-point derivative, whose white-noise
    # gain is sqrt(130) / 12 per pixel.
    floor_in = rounding_std * noise_gain(response_of, sigma_m, pixel_size_m, truncate=truncate)
    floor_out = rounding_std * response_scale * math.sqrt(130.0) / 12.0 / min(pixel_size_m)
    return LevelSet(resp, strength, None, (gx, gy), factor, max(floor_in, floor_out) * factor)


#: Detectors by feature name; ``edges`` uses the operator chosen in the settings.
DETECTORS: dict[str, dict[str, Detector]] = {
    "edges": {
        "log": Detector("edge", "log", 1.0, functools.partial(_edge_level_set, operator="log")),
        "dog": Detector("edge", "dog", math.sqrt(DOG_RATIO),
                        functools.partial(_edge_level_set, operator="dog")),
    },
}


def detectors_for(settings, *, is_image: bool = False) -> list[Detector]:
    """Detectors a run uses, in output order (edges, valleys, ridges).

    Without ``settings.features``, a DEM gets every family that is
    available and an image gets edges.
    """
    if settings.features is not None:
        wanted = settings.features
    else:
        wanted = ("edges",) if is_image else tuple(f for f in ("edges", "valleys", "ridges") if f in DETECTORS)
    out = []
    for feature in wanted:
        if feature not in DETECTORS:
            raise SettingsError(f"feature {feature!r} is not available in this version")
        table = DETECTORS[feature]
        out.append(table[settings.operator] if feature == "edges" else next(iter(table.values())))
    return out
