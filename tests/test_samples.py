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
    detected = [ln.geometry for ln in result.lines if ln.kind == "edge"]  # scarps are edges
    for geom, p in zip(truth, props):
        if p["kind"] != "scarp" or geom.length < 20 * largest_sigma:
            continue
        # recall: share of the planted scarp within 1.5 px of a detected line (issue criterion)
        score = compare_lines(detected, [geom], buffer_m=1.5 * pixel)
        assert score.recall >= 0.9, f"scarp {p['feature_id']} found over {score.recall:.0%} of its length"


def test_written_length_lies_near_planted_features(faulted):
    # "Near" for an edge line: within 1.5 px plus half the line's sigma of a planted scarp (a
    # coarse scale localises to a fraction of its sigma), or within the flank offset of a valley
    # or ridge: the LoG of a Gaussian profile of width w crosses zero at sqrt(w^2 + sigma^2) from
    # its axis (analytic, second derivative of a Gaussian), plus 20 %.
    # For a valley or ridge line: within 1.5 px plus sigma of a planted feature of the same kind
    # (terrain sloping across it moves the line by slope / curvature, see test_valleys_sample),
    # or within 1.5 px + sigma / 2 + 2.5 s of a scarp, s^2 = w^2 + sigma^2: a scarp h Phi(d / s)
    # on ground sloping the other way at g has a real trough at its foot and a crest at its top,
    # where h phi(d / s) / s = g, i.e. |d| = s sqrt(2 ln(h / (sqrt(2 pi) s g))) (analytic), up
    # to 2.4 s for the sample's scarps (h 14-30 m, s 20-85 m) on slopes of 0.02 or more.
    result, truth, props = faulted
    near_len = total = 0.0
    for sigma in sorted({ln.scale_m for ln in result.lines}):
        zones: dict = {"edge": [], "valley": [], "ridge": []}
        for geom, p in zip(truth, props):
            b = 15.0 + 0.5 * sigma
            s = np.hypot(p["width_m"], sigma)
            if p["kind"] in ("valley", "ridge"):
                zones["edge"].append(geom.buffer(b + 1.2 * s))
                zones[p["kind"]].append(geom.buffer(15.0 + sigma))
            else:
                zones["edge"].append(geom.buffer(b))
                zones["valley"].append(geom.buffer(b + 2.5 * s))
                zones["ridge"].append(geom.buffer(b + 2.5 * s))
        zone = {kind: unary_union(z) for kind, z in zones.items()}
        for ln in result.lines:
            if ln.scale_m == sigma:
                total += ln.geometry.length
                near_len += ln.geometry.intersection(zone[ln.kind]).length
    assert total > 0
    assert near_len / total >= 0.85


def test_plain_terrain_stays_quiet():
    # No planted features: at most 0.1 km of lines per km^2 with default settings.
    result = extract_file(SAMPLES / "dem_plain.tif")
    g = result.georef
    area_km2 = g.height * g.width * np.prod(g.pixel_size_m()) / 1e6
    assert result.total_length_m / 1000.0 / area_km2 <= 0.1


def test_field_tiles_form_one_layer_with_lines_whole_across_seams():
    # The 2 x 2 aerial tiles share one pixel grid: as a survey they are one mosaic, and the lines
    # equal those of the same image processed as one array (so nothing breaks at the seams).
    from lineament import extract_array
    from lineament.survey import extract_survey
    from lineament.raster_io import read_raster

    paths = sorted(str(p) for p in SAMPLES.glob("fields_r?c?.tif"))
    assert len(paths) == 4
    from lineament import ExtractionSettings

    edges = ExtractionSettings(features=("edges",))  # what an image gets by default
    results = extract_survey(paths, edges, tile_size=256)
    assert len(results) == 1
    survey = results[0]
    assert survey.georef.shape == (768, 768)
    parts = {p: read_raster(p) for p in paths}
    mosaic = np.zeros((768, 768), np.float32)
    for p, data in parts.items():
        r0, c0 = (int(round(v)) for v in survey.georef.map_to_pixel(*data.georef.pixel_to_map(0, 0)))
        mosaic[r0:r0 + 384, c0:c0 + 384] = data.values
    whole = extract_array(mosaic, survey.georef, edges, tile_size=4096)
    assert len(whole.lines) == len(survey.lines) > 20
    for a, b in zip(whole.lines, survey.lines):
        np.testing.assert_allclose(np.asarray(a.geometry.coords), np.asarray(b.geometry.coords), atol=1e-6)
    assert {ln.source for ln in survey.lines} == {p.rsplit("/", 1)[-1] for p in paths}
    # drains planted across the seams come out as single lines crossing them
    truth, props, _ = read_lines(SAMPLES / "fields_truth.gpkg")
    seam_x = survey.georef.pixel_to_map(0, 383.5)[0]
    crossing = [ln for ln in survey.lines
                if min(ln.geometry.coords)[0] < seam_x - 20 and max(ln.geometry.coords)[0] > seam_x + 20]
    assert crossing


def test_edges_alone_find_every_long_scarp_as_full_resolution_does():
    # A run that finds edges only filters 4 and 8 px on grids decimated by 2 and 4
    # (pyramid.MIN_EDGE_SIGMA_CELLS); the criterion: planted-feature recall does not drop
    # against the full-resolution filters (our synthetic ground truth; recall within 1.5 px).
    from lineament import ExtractionSettings

    truth, props, _ = read_lines(SAMPLES / "dem_faulted_truth.gpkg")
    runs = {}
    for full in (False, True):
        result = extract_file(SAMPLES / "dem_faulted.tif", ExtractionSettings(features=("edges",), full_resolution=full))
        runs[full] = [ln.geometry for ln in result.lines]
    largest_sigma = max(s.scale_m for s in result.scales)
    for geom, p in zip(truth, props):
        if p["kind"] != "scarp" or geom.length < 20 * largest_sigma:
            continue
        fast = compare_lines(runs[False], [geom], buffer_m=15.0).recall
        full = compare_lines(runs[True], [geom], buffer_m=15.0).recall
        assert fast >= 0.9 and fast >= full - 0.02, (p["feature_id"], fast, full)
