"""Decimated grids for coarse scales (lineament.pyramid) against scipy.ndimage and analytic results."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import ndimage

from conftest import step_image, utm_georef
from lineament import ExtractionSettings, extract_array
from lineament.pyramid import (MIN_DECIMATED_SIGMA_PX, MIN_EDGE_SIGMA_CELLS, Pyramid, decimation_factor,
                               pyramid_reach, residual_sigma_px)
from lineament.scalespace import log_response, residual_sigma


def smooth_noise(shape, seed=0, blur=1.5):
    rng = np.random.default_rng(seed)
    return ndimage.gaussian_filter(rng.normal(size=shape), blur).astype(np.float32)


@pytest.mark.parametrize("sigma, expected", [(1.0, 1), (2.0, 1), (4.0, 1), (5.99, 1), (6.0, 2), (11.99, 2),
                                             (12.0, 4), (16.0, 4), (24.0, 8), (48.0, 16)])
def test_decimation_factor_keeps_three_cells_per_sigma(sigma, expected):
    # the coarsest power of two on which sigma still spans at least 3 cells
    assert decimation_factor(sigma) == expected
    assert decimation_factor(sigma, enabled=False) == 1


@pytest.mark.parametrize("sigma, expected", [(2.0, 1), (3.99, 1), (4.0, 2), (6.0, 2), (8.0, 4), (16.0, 8)])
def test_decimation_factor_for_edges_keeps_two_cells_per_sigma(sigma, expected):
    assert decimation_factor(sigma, min_cells=MIN_EDGE_SIGMA_CELLS) == expected
    with pytest.raises(ValueError):
        decimation_factor(sigma, min_cells=1.5)  # the level's own blur is one cell


def test_detectors_ask_for_the_sampling_they_need():
    # edges (LoG, DoG, gradient) are decimated to 2 cells per sigma, valley and ridge axes to 3
    from lineament.detectors import DETECTORS

    assert {d.min_cells_per_sigma for d in DETECTORS["edges"].values()} == {MIN_EDGE_SIGMA_CELLS}
    assert DETECTORS["valleys"]["hessian"].min_cells_per_sigma == MIN_DECIMATED_SIGMA_PX
    assert DETECTORS["ridges"]["hessian"].min_cells_per_sigma == MIN_DECIMATED_SIGMA_PX


def test_residual_sigma_adds_up_in_variance():
    # Gaussian blurs add in variance (Lindeberg 1994, semi-group property)
    assert residual_sigma(5.0, 3.0) == pytest.approx(4.0)
    assert residual_sigma(2.0) == 2.0
    assert residual_sigma_px(16.0, 4) == pytest.approx(math.sqrt(15.0))
    with pytest.raises(ValueError):
        residual_sigma(1.0, 1.0)


@pytest.mark.parametrize("factor", [2, 4, 8])
def test_level_is_the_image_blurred_by_factor_pixels_then_sampled(factor):
    # Reference: scipy.ndimage.gaussian_filter with sigma = factor, sampled at every factor-th cell.
    # The cascade of halvings equals it up to the aliasing of each halving, small for an image
    # that is itself smooth (blurred by 1.5 px here): under 1 % of the level's spread.
    img = smooth_noise((256, 256), seed=factor)
    level, valid = Pyramid(img, np.ones(img.shape, bool)).level(factor)
    ref = ndimage.gaussian_filter(img.astype(np.float64), factor, truncate=4.0, mode="reflect")[::factor, ::factor]
    assert level.shape == ref.shape == (256 // factor, 256 // factor)
    assert valid.all()
    m = 64 // factor  # away from the mirrored borders
    err = level[m:-m, m:-m] - ref[m:-m, m:-m]
    assert np.sqrt(np.mean(err ** 2)) < 0.01 * ref[m:-m, m:-m].std()


def test_window_aligned_on_the_lattice_decimates_to_the_same_cells():
    # Tiling invariance: a window starting on a multiple of the factor gives, beyond the reach of
    # the halving blurs, bit for bit the cells of the whole raster's level.
    img = smooth_noise((300, 280), seed=3)
    f = 8
    whole, _ = Pyramid(img, np.ones(img.shape, bool)).level(f)
    r0, c0 = 64, 96
    win = img[r0:r0 + 160, c0:c0 + 168]
    part, _ = Pyramid(win, np.ones(win.shape, bool)).level(f)
    reach = -(-pyramid_reach(f, 4.0) // f)
    inner = part[reach:-reach, reach:-reach]
    ref = whole[r0 // f + reach:r0 // f + part.shape[0] - reach, c0 // f + reach:c0 // f + part.shape[1] - reach]
    assert inner.size > 0
    assert np.array_equal(inner, ref)


def test_constant_with_voids_stays_constant():
    # Normalised convolution reproduces a constant whatever the voids (Knutsson and Westin 1993)
    img = np.full((128, 128), 7.25, np.float32)
    valid = np.ones(img.shape, bool)
    valid[30:50, 40:90] = False
    valid[100:, :20] = False
    pyr = Pyramid(np.where(valid, img, 0).astype(np.float32), valid)
    for f in (2, 4, 8):
        level, lvalid = pyr.level(f)
        assert lvalid.any() and not lvalid.all()
        np.testing.assert_allclose(level[lvalid], 7.25, rtol=1e-5)
        # a coarse cell is valid where at least half its footprint is: deep inside a void it is not
        assert not lvalid[40 // f, 64 // f]


def test_void_far_away_changes_no_cell():
    # cells whose footprint holds no void keep exactly the values a void-free window gives
    img = smooth_noise((256, 256), seed=5)
    valid = np.ones(img.shape, bool)
    valid[200:220, 200:220] = False
    with_void, _ = Pyramid(np.where(valid, img, 0).astype(np.float32), valid).level(4)
    without, _ = Pyramid(img, np.ones(img.shape, bool)).level(4)
    assert np.array_equal(with_void[:32, :32], without[:32, :32])
    assert not np.array_equal(with_void[50:55, 50:55], without[50:55, 50:55])


@pytest.mark.parametrize("sigma, factor", [(4.0, 2), (8.0, 4), (12.0, 4), (16.0, 8)])
def test_log_on_level_matches_full_resolution_log(sigma, factor):
    # Reference: scipy.ndimage.gaussian_laplace at full resolution times sigma**2 (scale-normalised
    # LoG, Lindeberg 1994), sampled on the level's cells; pixel size 10 m, so the level's cells are
    # 10 * factor m.  Sampling the kernels at 1.7-3 cells per sigma costs a few per cent.
    img = smooth_noise((512, 512), seed=int(sigma), blur=1.0) * np.float32(50.0)
    level, _ = Pyramid(img, np.ones(img.shape, bool)).level(factor)
    coarse = log_response(level, sigma * 10.0, (10.0 * factor, 10.0 * factor), prior_blur_px=1.0)
    ref = (sigma ** 2 * ndimage.gaussian_laplace(img.astype(np.float64), sigma))[::factor, ::factor]
    m = int(6 * sigma / factor) + 2
    err = coarse[m:-m, m:-m] - ref[m:-m, m:-m]
    assert np.sqrt(np.mean(err ** 2)) < 0.05 * ref[m:-m, m:-m].std()
    assert np.corrcoef(coarse[m:-m, m:-m].ravel(), ref[m:-m, m:-m].ravel())[0, 1] > 0.998


@pytest.mark.parametrize("offset_px", [0.0, 0.3, 0.5, 0.77])
def test_step_found_in_place_on_decimated_scale(offset_px):
    # A straight north-south step (band-limited by a 0.5 px blur) at a known sub-pixel column:
    # the LoG zero crossing lies on the step (Marr and Hildreth 1980, analytic), also when the
    # 120 m scale (12 px) is filtered on the grid decimated by 4.
    h, w = 256, 256
    z = step_image(h, w, angle_deg=0.0, offset_px=offset_px, height_step=10.0, blur_px=0.5)
    g = utm_georef(h, w)
    result = extract_array(z, g, ExtractionSettings(scales="120", features="edges"))
    assert result.lines
    x_expected = g.transform.c + (w / 2 + offset_px) * g.transform.a
    longest = max(result.lines, key=lambda ln: ln.length_m)
    xs = np.asarray(longest.geometry.coords)[:, 0]
    assert np.median(np.abs(xs - x_expected)) < 0.1 * g.transform.a


@pytest.mark.slow
def test_decimated_lines_lie_on_full_resolution_lines_on_sample_dem():
    # The accuracy criterion for the fast path: lines of the decimated scales lie within
    # 0.25 px (median) of the lines the full-resolution filters give, on the bundled sample DEM
    # (our own synthetic ground truth; the full-resolution run is the reference).  The finest scale
    # is not decimated and must be identical.
    from shapely import distance, points, union_all

    from conftest import SAMPLES
    from lineament import extract_file

    # min_length_m=0: no line is cut because it came out a few metres shorter than 8 sigma
    settings = dict(scales="2px,8px,16px", features=("edges", "valleys"), min_length_m=0.0)
    fast = extract_file(SAMPLES / "dem_faulted.tif", ExtractionSettings(**settings))
    full = extract_file(SAMPLES / "dem_faulted.tif", ExtractionSettings(**settings, full_resolution=True))
    pixel = 10.0
    assert any(ln.scale_m == 160.0 for ln in full.lines)
    for scale in (20.0, 80.0, 160.0):
        for kind in ("edge", "valley"):
            a = [ln.geometry for ln in full.lines if ln.scale_m == scale and ln.kind == kind]
            b = [ln.geometry for ln in fast.lines if ln.scale_m == scale and ln.kind == kind]
            if not a and not b:
                continue
            assert a and b, (scale, kind)
            if scale == 20.0:
                assert [g.wkb for g in a] == [g.wkb for g in b]
                continue
            verts = points(np.concatenate([np.asarray(g.segmentize(pixel).coords) for g in b]))
            d_px = distance(verts, union_all(a)) / pixel
            assert np.median(d_px) < 0.25, (scale, kind, np.median(d_px))
            total_a, total_b = sum(g.length for g in a), sum(g.length for g in b)
            assert abs(total_b - total_a) < 0.1 * total_a, (scale, kind, total_a, total_b)


@pytest.mark.slow
def test_edges_decimated_to_two_cells_lie_on_full_resolution_lines_on_sample_dem():
    # As above for a run that finds edges only, where 4 px is filtered on the grid decimated by 2
    # and 8 px on the one decimated by 4 (2 cells per sigma, pyramid.MIN_EDGE_SIGMA_CELLS): within
    # 0.25 px (median) of the full-resolution lines, and at least 90 % of the full-resolution
    # length has a decimated line within a pixel (our measurement: 96 to 97 % at 4 px).
    from shapely import distance, points, union_all

    from conftest import SAMPLES
    from lineament import extract_file

    settings = dict(scales="4px,8px", features=("edges",), min_length_m=0.0)
    fast = extract_file(SAMPLES / "dem_faulted.tif", ExtractionSettings(**settings))
    full = extract_file(SAMPLES / "dem_faulted.tif", ExtractionSettings(**settings, full_resolution=True))
    pixel = 10.0
    for scale in (40.0, 80.0):
        a = [ln.geometry for ln in full.lines if ln.scale_m == scale]
        b = [ln.geometry for ln in fast.lines if ln.scale_m == scale]
        assert a and b
        assert [g.wkb for g in a] != [g.wkb for g in b]  # decimated: not the full-resolution run
        vb = points(np.concatenate([np.asarray(g.segmentize(pixel).coords) for g in b]))
        va = points(np.concatenate([np.asarray(g.segmentize(pixel).coords) for g in a]))
        d_px = distance(vb, union_all(a)) / pixel
        assert np.median(d_px) < 0.25, (scale, np.median(d_px))
        assert np.mean(distance(va, union_all(b)) < pixel) > 0.9
        assert np.mean(d_px < 1.0) > 0.9
