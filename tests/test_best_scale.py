"""best_scale_m: the scale at which each line's scale-normalised strength peaks, in a full run."""

from __future__ import annotations

import numpy as np
import pytest

from conftest import utm_georef
from lineament import ExtractionSettings, extract_array


def _valley_scene(width_m: float, n: int = 240):
    g = utm_georef(n, n)
    rows, cols = np.mgrid[0:n, 0:n].astype(np.float64)
    # a Gaussian trough 8 m deep along a line at 30 degrees from the columns, 10 m pixels
    a = np.radians(30.0)
    d = ((cols - n / 2) * np.cos(a) - (rows - n / 2) * np.sin(a)) * 10.0
    z = 300.0 - 8.0 * np.exp(-d**2 / (2 * width_m**2))
    z += np.random.default_rng(2).normal(0.0, 0.1, z.shape)
    return z.astype(np.float32), g


@pytest.mark.parametrize("width_m", [25.0, 40.0])
def test_selected_scale_of_a_gaussian_valley_is_its_width(width_m):
    # Analytic: with gamma = 3/4 the normalised principal curvature t^(3/4) (t0 + t)^(-3/2) of a
    # Gaussian trough of variance t0 = w^2 peaks at t = t0, i.e. sigma = w (differentiate in t;
    # Lindeberg 1998 gives t = 2 gamma t0 / (3 - 2 gamma) for this family).
    z, g = _valley_scene(width_m)
    result = extract_array(z, g, ExtractionSettings(scales="20,40", features=("valleys",), select_scales=True))
    valleys = [ln for ln in result.lines if ln.kind == "valley" and ln.length_m > 1000]
    assert valleys
    for ln in valleys:
        assert ln.best_scale_m == pytest.approx(width_m, rel=0.1)


def test_best_scale_does_not_depend_on_tiling():
    z, g = _valley_scene(30.0)
    settings = ExtractionSettings(scales="20,40", features=("valleys", "edges"), select_scales=True)
    whole = extract_array(z, g, settings, tile_size=4096)
    tiled = extract_array(z, g, settings, tile_size=64)
    assert [ln.properties() for ln in whole.lines] == [ln.properties() for ln in tiled.lines]
    assert any(np.isfinite(ln.best_scale_m) for ln in whole.lines)


def test_best_scale_is_empty_unless_asked():
    z, g = _valley_scene(30.0)
    result = extract_array(z, g, ExtractionSettings(scales="20", features=("valleys",)))
    assert result.lines and all(ln.properties()["best_scale_m"] is None for ln in result.lines)
