"""Detection quality on the bundled sample rasters (our own synthetic ground truth)."""

from __future__ import annotations

import numpy as np
import pytest
from shapely.ops import unary_union

from conftest import SAMPLES
from lineament import extract_file
from lineament.analysis import compare_lines, read_lines

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def faulted():
    result = extract_file(SAMPLES / "dem_faulted.tif")
    truth, props, _ = read_lines(SAMPLES / "dem_faulted_truth.gpkg")
    return result, truth, props


def test_every_long_scarp_is_found(faulted):
    result, truth, props = faulted
    pixel = 10.0
    largest_sigma = max(s.scale_m for s in result.scales)
    detected = [ln.geometry for ln in result.lines]
    for geom, p in zip(truth, props):
        if p["kind"] != "scarp" or geom.length < 20 * largest_sigma:
            continue
        # recall: share of the planted scarp within 1.5 px of a detected line (issue criterion)
        score = compare_lines(detected, [geom], buffer_m=1.5 * pixel)
        assert score.recall >= 0.9, f"scarp {p['feature_id']} found over {score.recall:.0%} of its length"


def test_written_length_lies_near_planted_features(faulted):
    # "Near": within 1.5 px plus half the line's sigma of a planted scarp (a coarse scale
    # localises to a fraction of its sigma), or within the flank offset of a valley or ridge: the
    # LoG of a Gaussian profile of width w crosses zero at sqrt(w^2 + sigma^2) from its axis
    # (analytic, second derivative of a Gaussian), plus 20 %.
    result, truth, props = faulted
    near_len = total = 0.0
    for sigma in sorted({ln.scale_m for ln in result.lines}):
        zones = []
        for geom, p in zip(truth, props):
            b = 15.0 + 0.5 * sigma
            if p["kind"] in ("valley", "ridge"):
                b += 1.2 * np.hypot(p["width_m"], sigma)
            zones.append(geom.buffer(b))
        zone = unary_union(zones)
        for ln in result.lines:
            if ln.scale_m == sigma:
                total += ln.geometry.length
                near_len += ln.geometry.intersection(zone).length
    assert total > 0
    assert near_len / total >= 0.85


def test_plain_terrain_stays_quiet():
    # No planted features: at most 0.1 km of lines per km^2 with default settings.
    result = extract_file(SAMPLES / "dem_plain.tif")
    g = result.georef
    area_km2 = g.height * g.width * np.prod(g.pixel_size_m()) / 1e6
    assert result.total_length_m / 1000.0 / area_km2 <= 0.1
