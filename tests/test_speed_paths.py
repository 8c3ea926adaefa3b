"""The production tracer gives the pieces a trace of every crossing gives.

The reference is :func:`trace_level_set_reference`, which runs
``skimage.measure.find_contours`` (scikit-image) over the whole window and
applies the hysteresis rule to every contour in Python;
:func:`trace_level_set` runs the compiled tracer
(:mod:`lineament._compiled_trace`).  Both must return the same pieces and
fragments, vertex for vertex.
"""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
from scipy import ndimage

from conftest import SAMPLES
from lineament.crossings import (
    MAD_TO_SIGMA,
    Core,
    strength_map,
    trace_level_set,
    trace_level_set_reference,
)
from lineament.scalespace import log_response


def _canonical(result):
    pieces, fragments = result
    p = sorted((tuple(r), tuple(c), tuple(s)) for r, c, s in pieces)
    f = sorted((tuple(x.rows), tuple(x.cols), tuple(x.strength), x.start_open, x.end_open) for x in fragments)
    return p, f


def _level_set(z, sigma):
    r = log_response(z, sigma, (1.0, 1.0))
    s, gx, gy = strength_map(r, sigma, (1.0, 1.0))
    comps = np.concatenate([gx.ravel(), gy.ravel()]).astype(np.float64)
    noise = MAD_TO_SIGMA * np.median(np.abs(comps - np.median(comps))) * np.sqrt(2 * np.pi) * sigma
    return r, s, noise


@pytest.mark.parametrize("seed", range(6))
def test_production_tracer_matches_full_trace_on_random_fields(seed):
    rng = np.random.default_rng(seed)
    n = 220
    z = ndimage.gaussian_filter(rng.normal(size=(n, n)), 1.0 + 0.3 * seed).astype(np.float32)
    sigma = (2.0, 3.0, 4.0)[seed % 3]
    r, s, noise = _level_set(z, sigma)
    usable = np.zeros((n, n), bool)
    usable[9:-9, 9:-9] = True
    # thresholds low enough that many runs are kept, a core that cuts runs into fragments
    kw = dict(high=(4.0, 2.5)[seed % 2] * noise, low=2.0 * noise, sustained=3.0 * noise,
              sustained_length_px=8 * sigma, offset=(300, 40), core=Core(340, 90, 480, 230))
    ref = _canonical(trace_level_set_reference(r, s, usable, **kw))
    fast = _canonical(trace_level_set(r, s, usable, **kw))
    assert len(ref[0]) + len(ref[1]) > 0
    assert fast == ref


def test_production_tracer_matches_full_trace_with_allowed_mask():
    rng = np.random.default_rng(11)
    z = ndimage.gaussian_filter(rng.normal(size=(180, 200)), 1.5).astype(np.float32)
    r, s, noise = _level_set(z, 2.0)
    usable = np.ones(r.shape, bool)
    allowed = ndimage.gaussian_filter(rng.normal(size=r.shape), 4.0) > 0
    kw = dict(high=3.0 * noise, low=1.5 * noise, sustained=None, allowed=allowed)
    ref = _canonical(trace_level_set_reference(r, s, usable, **kw))
    assert len(ref[0]) > 0
    assert _canonical(trace_level_set(r, s, usable, **kw)) == ref


def test_production_tracer_matches_full_trace_on_sample_dem():
    with rasterio.open(SAMPLES / "dem_faulted.tif") as src:
        z = src.read(1).astype(np.float32)
    z = np.where(z > -9000, z - np.median(z[z > -9000]), 0).astype(np.float32)[:512, :512]
    for sigma in (2.0, 4.0):
        r, s, noise = _level_set(z, sigma)
        usable = np.zeros(r.shape, bool)
        m = int(3 * sigma) + 1
        usable[m:-m, m:-m] = True
        kw = dict(high=4.0 * noise, low=2.0 * noise, sustained=3.0 * noise, sustained_length_px=8 * sigma,
                  offset=(0, 0), core=Core(0, 0, 256, 300))
        ref = _canonical(trace_level_set_reference(r, s, usable, **kw))
        assert len(ref[0]) + len(ref[1]) > 0
        assert _canonical(trace_level_set(r, s, usable, **kw)) == ref


def test_production_tracer_is_independent_of_the_window():
    # Pieces owned by a core are the same whatever window (with enough halo) surrounds it:
    # the selection only ever adds cells, and tracing is local (marching squares).
    rng = np.random.default_rng(4)
    z = ndimage.gaussian_filter(rng.normal(size=(300, 300)), 1.2).astype(np.float32)
    r, s, noise = _level_set(z, 2.0)
    usable = np.ones(r.shape, bool)
    kw = dict(high=3.0 * noise, low=2.0 * noise, sustained=3.0 * noise, sustained_length_px=16.0)
    core = Core(100, 100, 200, 200)
    whole = _canonical(trace_level_set(r, s, usable, core=core, **kw))
    win = (slice(60, 250), slice(70, 240))
    part = _canonical(trace_level_set(r[win], s[win], usable[win], offset=(60, 70), core=core, **kw))
    assert len(whole[0]) + len(whole[1]) > 0
    # local indices plus the window offset round differently in the last bit (1e-14 px)
    for got, want in zip(part, whole):
        assert len(got) == len(want)
        for a, b in zip(got, want):
            for x, y in zip(a[:3], b[:3]):
                np.testing.assert_allclose(x, y, rtol=0, atol=1e-9)
            assert a[3:] == b[3:]
