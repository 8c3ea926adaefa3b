"""Straight pieces, linking and multi-scale persistence (lineament.interpret)."""

from __future__ import annotations

import math

import fiona
import numpy as np
import pytest
from shapely.geometry import LineString

from conftest import UTM33, step_image, utm_georef
from lineament import ExtractionSettings, extract_array
from lineament.errors import SettingsError
from lineament.interpret import (
    RefineSettings,
    group_across_scales,
    link_collinear,
    read_line_layer,
    refine_lines,
    split_at_bends,
    straightness,
    write_line_layer,
)


def polyline(points, step=10.0):
    """Densify a polyline through ``points`` with vertices every ``step`` metres."""
    out = [np.asarray(points[0], float)]
    for a, b in zip(points[:-1], points[1:]):
        a, b = np.asarray(a, float), np.asarray(b, float)
        n = max(1, int(math.ceil(np.hypot(*(b - a)) / step)))
        out.extend(a + (b - a) * k / n for k in range(1, n + 1))
    return LineString(out)


def test_straightness_analytic():
    # straight line: chord = path (analytic)
    assert straightness(LineString([(0, 0), (3, 4), (6, 8)])) == pytest.approx(1.0)
    # quarter circle: chord r*sqrt(2), arc pi*r/2 -> 2*sqrt(2)/pi (analytic; polygon of 2000 sides)
    t = np.linspace(0, math.pi / 2, 501)
    arc = LineString(np.column_stack((1000 * np.cos(t), 1000 * np.sin(t))))
    assert straightness(arc) == pytest.approx(2 * math.sqrt(2) / math.pi, rel=1e-5)


def test_sharp_bend_gives_two_straight_pieces():
    # 500 m north, then 300 m east: a 90 deg corner (analytic lengths 500 and 300 m)
    line = polyline([(0, 0), (0, 500), (300, 500)])
    pieces, src = split_at_bends([line], max_bend_deg=20.0)
    assert len(pieces) == 2 and list(src) == [0, 0]
    assert pieces[0].length == pytest.approx(500.0)
    assert pieces[1].length == pytest.approx(300.0)
    for p in pieces:
        assert straightness(p) == pytest.approx(1.0, abs=1e-12)  # analytic: straight legs
    # a gentle 5 deg kink is kept whole under a 20 deg limit (analytic: half-chords differ by 5 deg)
    kink = polyline([(0, 0), (0, 500), (500 * math.sin(math.radians(5)), 500 + 500 * math.cos(math.radians(5)))])
    assert len(split_at_bends([kink], max_bend_deg=20.0)[0]) == 1
    # ... but not under a 10 m deviation limit: the corner lies 500 sin(2.5 deg) = 21.8 m off the chord
    assert len(split_at_bends([kink], max_bend_deg=None, max_deviation_m=10.0)[0]) == 2
    with pytest.raises(SettingsError):
        split_at_bends([line], max_bend_deg=None, max_deviation_m=None)


def test_linking_joins_a_dashed_line_and_keeps_crossing_lines_apart():
    rng = np.random.default_rng(6)
    az = math.radians(30.0)
    u = np.array([math.sin(az), math.cos(az)])
    v = np.array([u[1], -u[0]])
    # planted dashed line: 8 dashes of 120 m with 40 m gaps, 1 m sideways jitter
    dashes = [LineString([u * s + v * rng.normal(0, 1), u * (s + 120) + v * rng.normal(0, 1)])
              for s in np.arange(8) * 160.0]
    # two lines crossing at 90 deg whose ends meet 7 m apart, far from the dashes
    cross = [LineString([(5000, 5000), (5100, 5100)]), LineString([(5105, 5105), (5205, 5005)])]
    # a parallel line 30 m beside dash 0: side by side, never joined (offset 30 m > 10 m)
    beside = [LineString([u * 10 + v * 30, u * 110 + v * 30])]
    lines, members = link_collinear(dashes + cross + beside, max_gap_m=50.0, max_angle_deg=10.0, max_offset_m=10.0)
    assert sorted(map(sorted, members)) == [list(range(8)), [8], [9], [10]]
    joined = lines[[k for k, m in enumerate(members) if len(m) == 8][0]]
    # the joined line spans the planted line, 7 * 160 + 120 m (analytic, up to the jitter)
    ends = np.asarray(joined.coords)[[0, -1]]
    assert np.hypot(*(ends[1] - ends[0])) == pytest.approx(1240.0, abs=5.0)
    assert straightness(joined) > 0.999


def scarp_lines():
    """Lines of a 20 m scarp at 20, 40 and 80 m sigma (synthetic step through the centre)."""
    g = utm_georef(160, 160)
    z = 300.0 + step_image(160, 160, angle_deg=20.0, offset_px=0.3, height_step=20.0, blur_px=1.0)
    result = extract_array(z, g, ExtractionSettings(scales="20,40,80"))
    return result, g


def test_scarp_found_at_several_scales_is_written_once(tmp_path):
    result, g = scarp_lines()
    found = {round(line.scale_m) for line in result.lines}
    assert found == {20, 40, 80}  # precondition: every scale sees the scarp
    geoms = [line.geometry for line in result.lines]
    props = [line.properties() for line in result.lines]
    out_g, out_p = refine_lines(geoms, props, g.crs)
    assert len(out_g) == 1
    p = out_p[0]
    assert p["scales_found"] == 3 and p["scale_min_m"] == 20 and p["scale_max_m"] == 80
    # the representative follows the planted edge: signed distance d = (c - cc) cos a - (r - rc) sin a
    # - offset = 0 (conftest.step_image), here checked in map coordinates within one pixel (10 m)
    xy = np.asarray(out_g[0].coords)
    r, c = g.map_to_pixel(xy[:, 0], xy[:, 1])
    a = math.radians(20.0)
    d = (c - 79.5) * math.cos(a) - (r - 79.5) * math.sin(a) - 0.3
    assert np.abs(d).max() < 1.0
    # all lines, with the feature id; and the --min-scales filter
    all_g, all_p = refine_lines(geoms, props, g.crs, RefineSettings(all_lines=True))
    assert len(all_g) == len(geoms) and {q["feature_id"] for q in all_p} == {0}
    assert refine_lines(geoms, props, g.crs, RefineSettings(min_scales=4)) == ([], [])
    assert len(refine_lines(geoms, props, g.crs, RefineSettings(merge_scales=False))[0]) == 3
    # written and read back with every attribute (GeoPackage and Shapefile names)
    for name in ("feat.gpkg", "feat.shp"):
        write_line_layer(out_g, out_p, g.crs, tmp_path / name)
        back_g, back_p, back_crs = read_line_layer(tmp_path / name)
        assert back_crs.equals(UTM33) and len(back_g) == 1
        assert back_p[0]["scales_found"] == 3 and back_p[0]["straightness"] == pytest.approx(p["straightness"])
    with fiona.open(tmp_path / "feat.shp") as src:
        assert "scales_fnd" in src.schema["properties"]  # dBASE names are at most 10 characters


def test_group_across_scales_keeps_distinct_features_apart():
    # two parallel lines 500 m apart at different scales are different features; the same
    # line at another scale joins the first (distance 0, same direction)
    a = LineString([(0, 0), (0, 1000)])
    b = LineString([(500, 0), (500, 1000)])
    a2 = LineString([(5, 0), (5, 900)])
    crossing = LineString([(-500, 500), (500, 500)])
    ids = group_across_scales([a, b, a2, crossing], [20, 40, 40, 80])
    assert ids[0] == ids[2] and len({ids[0], ids[1], ids[3]}) == 3
