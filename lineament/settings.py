"""Validated, immutable settings of an extraction run.

Every tuning value lives in one frozen :class:`ExtractionSettings` object that
checks itself on creation, so a bad value fails before any pixel is read.
"""

from __future__ import annotations

import math
import re
from dataclasses import asdict, dataclass

from .errors import SettingsError

OPERATORS = ("log", "dog", "gradient")

#: Families of lines a run can extract (``kind`` attribute: edge, valley, ridge).
FEATURES = ("edges", "valleys", "ridges")

#: Ratio of the two Gaussians of the DoG operator (Marr and Hildreth 1980).
DOG_RATIO = 1.6

_SCALE_RE = re.compile(r"^\s*([0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*([a-zA-Z]*)\s*$")
_UNITS = {"": "m", "m": "m", "km": "km", "px": "px"}


@dataclass(frozen=True, order=True)
class Scale:
    """A Gaussian scale (standard deviation sigma) in metres or pixels.

    Parameters
    ----------
    value : float
        Sigma, > 0.
    unit : {"m", "px"}
        ``"m"``: ground metres.  ``"px"``: pixels, i.e. multiples of the
        geometric-mean pixel size of the raster.
    """

    value: float
    unit: str = "m"

    def __post_init__(self) -> None:
        if self.unit not in ("m", "px"):
            raise SettingsError(f"scale unit must be 'm' or 'px', got {self.unit!r}")
        if not (isinstance(self.value, (int, float)) and math.isfinite(self.value) and self.value > 0):
            raise SettingsError(f"scale must be a positive number, got {self.value!r}")

    @classmethod
    def parse(cls, text: str | float | int) -> "Scale":
        """Parse ``"30"``, ``"30m"``, ``"0.5km"`` or ``"2px"``.

        Examples
        --------
        >>> Scale.parse("2px")
        Scale(value=2.0, unit='px')
        >>> Scale.parse("0.12km")
        Scale(value=120.0, unit='m')
        """
        if isinstance(text, (int, float)) and not isinstance(text, bool):
            return cls(float(text), "m")
        m = _SCALE_RE.match(str(text))
        if not m:
            raise SettingsError(f"cannot read scale {text!r}: expected a number with an optional unit m, km or px")
        number, unit = float(m.group(1)), m.group(2).lower()
        if unit not in _UNITS:
            raise SettingsError(f"unknown unit {m.group(2)!r} in scale {text!r}: use m (default), km or px")
        if unit == "km":
            return cls(number * 1000.0, "m")
        if number <= 0:
            raise SettingsError(f"scale must be positive, got {text!r}")
        return cls(number, _UNITS[unit])

    def sigma_m(self, pixel_size_m: tuple[float, float]) -> float:
        """Sigma in metres for a raster with the given ground pixel size."""
        if self.unit == "m":
            return float(self.value)
        return float(self.value) * math.sqrt(pixel_size_m[0] * pixel_size_m[1])

    def __str__(self) -> str:
        v = f"{self.value:g}"
        return v + ("px" if self.unit == "px" else "m")


def parse_scales(text: str | list | tuple) -> tuple[Scale, ...]:
    """Parse a comma-separated list (or a sequence) of scales, sorted ascending by value."""
    if isinstance(text, str):
        items = [t for t in text.split(",") if t.strip()]
    else:
        items = list(text)
    if not items:
        raise SettingsError("no scales given")
    scales = tuple(s if isinstance(s, Scale) else Scale.parse(s) for s in items)
    units = {s.unit for s in scales}
    if len(units) > 1:
        raise SettingsError("scales mix metres and pixels; give all in one unit")
    if len(set(scales)) != len(scales):
        raise SettingsError("the same scale is given twice")
    return tuple(sorted(scales, key=lambda s: s.value))


DEFAULT_SCALES = (Scale(2.0, "px"), Scale(4.0, "px"), Scale(8.0, "px"))


@dataclass(frozen=True)
class ExtractionSettings:
    """Settings of one extraction run.

    Parameters
    ----------
    scales : tuple of Scale
        Gaussian scales (sigma).  Default 2, 4 and 8 pixels: an octave series
        from the finest scale a grid resolves reliably.
    operator : {"log", "dog"}
        Laplacian of Gaussian, or difference of Gaussians with ratio 1.6,
        for the ``edges`` feature.
    features : tuple of {"edges", "valleys", "ridges"} or None
        Families of lines to extract.  None: all three on a DEM, edges on
        an image.
    high_noise_multiple, low_noise_multiple : float
        Hysteresis thresholds as multiples of the robust noise level of the
        response gradient at each scale (used when the absolute thresholds
        are not given).
    sustained_noise_multiple : float
        A line with no vertex above the high threshold is still kept when it
        is at least ``min_length_sigmas`` sigmas long and its mean strength
        is at least this multiple of the noise level.
    high_threshold, low_threshold : float or None
        Absolute hysteresis thresholds on strength (z units, see README).
    min_length_m : float or None
        Drop lines shorter than this (ground metres).  Default:
        ``min_length_sigmas`` times the sigma of the line's scale.
    min_length_sigmas : float
        Default minimum length in multiples of sigma.
    simplify_tolerance_m : float or None
        Douglas-Peucker tolerance in ground metres; default half a pixel.
    band : int or None
        1-based band to use; default a single band as is, or luminance of an RGB image.
    z_factor : float
        Multiplier applied to raster values before filtering (vertical unit to metres).
    select_scales : bool
        Find each line's own scale (``best_scale_m``): where its
        scale-normalised strength peaks between half the smallest and twice
        the largest scale (Lindeberg 1998).  Costs extra filtering.
    void_margin_sigmas : float
        Crossings closer than this many sigmas to a void or the raster edge are dropped.
    truncate : float
        Gaussian kernels are cut at this many sigmas.
    allow_rotation : bool
        Accept a rotated (not sheared) geotransform.
    assume_crs : str or None
        CRS to use when the raster has none (any pyproj user input).
    pixel_coordinates : bool
        Accept a raster without georeferencing and work in pixel units.
    full_resolution : bool
        Filter every scale on the full-resolution grid.  By default a scale
        is filtered on a decimated grid where it spans 2 to 4 cells for edges
        (from 4 pixels), or 3 to 6 cells when valleys or ridges are found in
        the same run (from 6 pixels; :mod:`lineament.pyramid`), which is
        several times faster and gives lines within a small fraction of a
        pixel of the full-resolution ones.
    """

    scales: tuple[Scale, ...] = DEFAULT_SCALES
    operator: str = "log"
    features: tuple[str, ...] | None = None
    high_noise_multiple: float = 4.0
    low_noise_multiple: float = 2.0
    sustained_noise_multiple: float = 3.0
    high_threshold: float | None = None
    low_threshold: float | None = None
    min_length_m: float | None = None
    min_length_sigmas: float = 8.0
    simplify_tolerance_m: float | None = None
    band: int | None = None
    z_factor: float = 1.0
    select_scales: bool = False
    void_margin_sigmas: float = 3.0
    truncate: float = 4.0
    allow_rotation: bool = False
    assume_crs: str | None = None
    pixel_coordinates: bool = False
    full_resolution: bool = False

    def __post_init__(self) -> None:
        object.__setattr__(self, "scales", parse_scales(self.scales))
        if self.features is not None:
            feats = (self.features.split(",") if isinstance(self.features, str) else list(self.features))
            feats = tuple(f.strip() for f in feats if f.strip())
            unknown = [f for f in feats if f not in FEATURES]
            if unknown or not feats:
                raise SettingsError(f"features must be some of {', '.join(FEATURES)}, got {self.features!r}")
            object.__setattr__(self, "features", tuple(f for f in FEATURES if f in feats))
        if self.operator not in OPERATORS:
            raise SettingsError(f"operator must be one of {', '.join(OPERATORS)}, got {self.operator!r}")
        for name in ("high_noise_multiple", "low_noise_multiple", "sustained_noise_multiple",
                     "min_length_sigmas", "z_factor",
                     "truncate"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v > 0):
                raise SettingsError(f"{name} must be a positive number, got {v!r}")
        if not (math.isfinite(self.void_margin_sigmas) and self.void_margin_sigmas >= 0):
            raise SettingsError(f"void_margin_sigmas must be >= 0, got {self.void_margin_sigmas!r}")
        if self.low_noise_multiple > self.high_noise_multiple:
            raise SettingsError("low_noise_multiple must not exceed high_noise_multiple")
        for name in ("high_threshold", "low_threshold", "min_length_m", "simplify_tolerance_m"):
            v = getattr(self, name)
            if v is not None and not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise SettingsError(f"{name} must be a number >= 0, got {v!r}")
        if self.high_threshold is not None and self.low_threshold is not None:
            if self.low_threshold > self.high_threshold:
                raise SettingsError("low threshold must not exceed high threshold")
        if self.band is not None and (not isinstance(self.band, int) or self.band < 1):
            raise SettingsError(f"band numbers start at 1, got {self.band!r}")
        if self.truncate < 3:
            raise SettingsError("truncate must be at least 3 sigmas")

    def to_dict(self) -> dict:
        """Plain, JSON-ready view for run metadata."""
        d = asdict(self)
        d["scales"] = [str(s) for s in self.scales]
        return d
