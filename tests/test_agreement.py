"""Tests for lineament.analysis.agreement and lineament.analysis.layers."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import shapely
from pyproj import CRS, Geod, Transformer
from shapely.geometry import LineString, MultiLineString, Polygon

from lineament.analysis.agreement import compare_line_files, compare_lines
from lineament.analysis.layers import (
    azimuths_deg,
    ground_lengths_m,
    metric_crs_for,
    read_lines,
    reproject_lines,
)
from lineament.errors import InputError, SettingsError


# ---------------------------------------------------------------- invented data
def wiggly_lines(seed: int, n: int, extent_m: float, step_m: float, n_vertices: int) -> list[LineString]:
    """Random curved lines made by our own seeded random walk."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        p = rng.uniform(0, extent_m, 2)
        heading = rng.uniform(0, math.pi)
        pts = [p]
        for _ in range(n_vertices - 1):
            heading += rng.normal(0, 0.15)
            p = p + step_m * np.array([math.sin(heading), math.cos(heading)])
            pts.append(p)
        out.append(LineString(pts))
    return out


def parallel_lines(n: int, spacing_m: float, length_m: float) -> list[LineString]:
    """East-west lines ``spacing_m`` apart, vertices every 7 m."""
    xs = np.linspace(0.0, length_m, int(length_m // 7) + 1)
    return [LineString(np.column_stack((xs, np.full_like(xs, k * spacing_m)))) for k in range(n)]


def shapely_recall(detected, reference, buffer_m: float) -> float:
    """Reference length within the union of detected buffers / reference length.

    Reference implementation with shapely's buffer/union/intersection
    (polygonal buffers with 64 segments per quarter circle).
    """
    zone = shapely.unary_union(shapely.buffer(np.array(detected, dtype=object), buffer_m, quad_segs=64))
    ref = np.array(reference, dtype=object)
    return float(shapely.length(shapely.intersection(ref, zone)).sum() / shapely.length(ref).sum())


# ---------------------------------------------------------------- agreement
def test_layer_against_itself_scores_one():
    lines = wiggly_lines(1, 60, 3000.0, 15.0, 40)
    res = compare_lines(lines, lines, buffer_m=20.0, angle_deg=15.0)
    # Definition: every point lies at distance 0 from itself, directions equal.
    assert res.recall == pytest.approx(1.0, abs=1e-12)
    assert res.precision == pytest.approx(1.0, abs=1e-12)
    assert res.f1 == pytest.approx(1.0, abs=1e-12)
    assert res.offset_median_m == pytest.approx(0.0, abs=1e-9)
    assert res.n_reference_matched == res.n_reference == 60
    # Reference lengths: shapely's planar length.
    total = float(shapely.length(np.array(lines, dtype=object)).sum())
    assert res.reference_length_m == pytest.approx(total, rel=1e-12)
    assert res.detected_length_m == pytest.approx(total, rel=1e-12)


def test_shift_of_three_buffers_scores_zero():
    buffer_m = 25.0
    ref = parallel_lines(6, 10 * buffer_m, 2000.0)
    det = [shapely.affinity.translate(g, 0.0, 3 * buffer_m) for g in ref]
    res = compare_lines(det, ref, buffer_m=buffer_m)
    # Analytic: every detected point is 3 buffers from its own line and 7 from the next.
    assert res.recall == 0.0
    assert res.precision == 0.0
    assert res.f1 == 0.0
    assert math.isnan(res.offset_median_m)


def test_shift_within_buffer_keeps_everything_and_measures_offset():
    ref = parallel_lines(4, 500.0, 1500.0)
    det = [shapely.affinity.translate(g, 0.0, 6.0) for g in ref]
    res = compare_lines(det, ref, buffer_m=10.0, angle_deg=5.0)
    # Analytic: a 6 m perpendicular shift of parallel lines keeps all points 6 m away.
    assert res.recall == pytest.approx(1.0, abs=1e-12)
    assert res.precision == pytest.approx(1.0, abs=1e-12)
    assert res.offset_median_m == pytest.approx(6.0, abs=1e-9)
    assert res.offset_p90_m == pytest.approx(6.0, abs=1e-9)


def test_partial_overlap_matches_closed_form():
    d, dy = 10.0, 6.0
    det = [LineString([(0, 0), (1000, 0)])]
    ref = [LineString([(500, dy), (1500, dy)])]
    res = compare_lines(det, ref, buffer_m=d)
    # Analytic: reference points within d of the detected segment run from x=500 to
    # x = 1000 + sqrt(d^2 - dy^2) (the round end cap), out of 1000 m.
    expected = (500.0 + math.sqrt(d * d - dy * dy)) / 1000.0
    assert res.recall == pytest.approx(expected, rel=1e-12)
    assert res.precision == pytest.approx(expected, rel=1e-12)


def test_perpendicular_reference_needs_direction_to_match():
    det = [LineString([(0, 0), (1000, 0)])]
    ref = [LineString([(500, -300), (500, 300)])]
    res = compare_lines(det, ref, buffer_m=10.0)
    # Analytic: without a direction test, 2 * buffer of the crossing line is within reach.
    assert res.recall == pytest.approx(20.0 / 600.0, rel=1e-12)
    assert res.precision == pytest.approx(20.0 / 1000.0, rel=1e-12)
    res = compare_lines(det, ref, buffer_m=10.0, angle_deg=30.0)
    # Definition of the direction test: 90 deg apart never matches, even where they overlap.
    assert res.recall == 0.0
    assert res.precision == 0.0


def test_direction_test_keeps_only_the_compatible_set():
    horizontal = parallel_lines(3, 300.0, 900.0)
    vertical = [shapely.affinity.rotate(g, 90.0, origin=(450.0, 300.0)) for g in horizontal]
    res = compare_lines(horizontal, horizontal + vertical, buffer_m=15.0, angle_deg=20.0)
    # Analytic: only the horizontal half of the reference has a compatible detected line.
    assert res.recall == pytest.approx(0.5, abs=1e-12)
    assert res.precision == pytest.approx(1.0, abs=1e-12)


def test_given_azimuths_override_piece_directions():
    lines = parallel_lines(2, 400.0, 800.0)
    res = compare_lines(lines, lines, buffer_m=10.0, angle_deg=10.0, detected_azimuths=[0.0, 0.0])
    # The lines run at 90 deg; claimed 0 deg is 90 deg off, so nothing matches.
    assert res.recall == 0.0
    res = compare_lines(lines, lines, buffer_m=10.0, angle_deg=10.0, detected_azimuths=[268.0, 95.0])
    # 268 deg is the axial direction 88 deg; both within 10 deg of 90 deg.
    assert res.recall == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("buffer_m", [8.0, 40.0])
def test_covered_length_agrees_with_shapely_buffers(buffer_m):
    det = wiggly_lines(2, 120, 4000.0, 20.0, 30)
    ref = wiggly_lines(3, 120, 4000.0, 20.0, 30)
    res = compare_lines(det, ref, buffer_m=buffer_m)
    # Reference: shapely buffer + unary_union + intersection; its polygonal buffer is
    # inscribed in the circle, short by at most buffer * (1 - cos(pi / 256)) ~ 7.5e-5.
    assert res.recall == pytest.approx(shapely_recall(det, ref, buffer_m), abs=2e-4)
    assert res.precision == pytest.approx(shapely_recall(ref, det, buffer_m), abs=2e-4)
    assert 0.0 < res.recall < 1.0


def test_result_serialises_and_summarises():
    lines = parallel_lines(2, 300.0, 600.0)
    res = compare_lines(lines, [], buffer_m=10.0)
    data = res.to_dict(per_line=True)
    # RFC 8259 JSON has no NaN: undefined ratios must come out as null.
    text = json.dumps(data, allow_nan=False)
    assert json.loads(text)["recall"] is None
    assert data["precision"] == 0.0
    assert len(data["detected_matched_share"]) == 2
    lines_out = res.summary_lines()
    assert any(line.startswith("precision") and "0.0 %" in line for line in lines_out)


def test_bad_settings_and_inputs_raise_one_line_errors():
    line = [LineString([(0, 0), (10, 0)])]
    with pytest.raises(SettingsError, match="buffer_m"):
        compare_lines(line, line, buffer_m=0.0)
    with pytest.raises(SettingsError, match="angle_deg"):
        compare_lines(line, line, buffer_m=1.0, angle_deg=120.0)
    with pytest.raises(InputError, match="Polygon"):
        compare_lines(line, [Polygon([(0, 0), (1, 0), (1, 1)])], buffer_m=1.0)


# ---------------------------------------------------------------- layers
def test_geographic_length_is_geodesic():
    line = LineString([(10.0, 45.0), (10.3, 45.2), (10.9, 45.1)])
    got = ground_lengths_m([line], CRS.from_epsg(4326))
    # Reference: pyproj.Geod on WGS84.
    expected = Geod(ellps="WGS84").line_length([10.0, 10.3, 10.9], [45.0, 45.2, 45.1])
    assert got[0] == pytest.approx(expected, rel=1e-12)


def test_projected_length_is_geodesic_in_any_unit():
    # A US survey foot CRS: the ground length is the geodesic between the end points
    # (pyproj Transformer + Geod), close to 5000 ft = 5000 * 1200/3937 m (EPSG unit 9003) times
    # the projection's scale factor.
    x0, y0 = 6_400_000.0, 1_800_000.0
    line = LineString([(x0, y0), (x0 + 3000, y0 + 4000)])
    crs = CRS.from_epsg(2229)
    got = ground_lengths_m([line], crs)
    lon, lat = Transformer.from_crs(crs, 4326, always_xy=True).transform([x0, x0 + 3000], [y0, y0 + 4000])
    _, _, expected = Geod(ellps="GRS80").inv(lon[0], lat[0], lon[1], lat[1])
    assert got[0] == pytest.approx(expected, rel=1e-6)
    assert got[0] == pytest.approx(5000.0 * 1200.0 / 3937.0, rel=2e-4)


def test_azimuths_geodesic_and_grid():
    lon = [20.0, 20.5]
    lat = [60.0, 60.4]
    got = azimuths_deg([LineString(zip(lon, lat))], CRS.from_epsg(4326))
    # Reference: pyproj.Geod forward azimuth, folded to the axial range.
    fwd, _, _ = Geod(ellps="WGS84").inv(lon[0], lat[0], lon[1], lat[1])
    assert got[0] == pytest.approx(fwd % 180.0, abs=1e-9)
    x0, y0 = 500_000.0, 5_000_000.0  # on the central meridian of UTM 33N: true north = grid north
    grid = azimuths_deg(
        [LineString([(x0, y0), (x0 + 100, y0 + 100)]), LineString([(x0, y0), (x0 - 100, y0 + 100)]),
         LineString([(x0 + 5, y0 + 5), (x0 + 5, y0)])],
        CRS.from_epsg(32633),
    )
    # Analytic: NE is 45 deg, NW is 315 = 135 deg axial, due south is 180 = 0 deg (axial, so a value
    # a hair below 180 is the same direction); meridian convergence is zero on the central meridian.
    axial_gap = np.minimum(np.abs(grid - [45.0, 135.0, 0.0]), 180.0 - np.abs(grid - [45.0, 135.0, 0.0]))
    assert axial_gap.max() < 1e-4


def test_metric_crs_is_local_and_equidistant():
    lines = [LineString([(5.0, 50.0), (5.4, 50.3)]), LineString([(5.2, 49.8), (5.1, 50.1)])]
    crs = metric_crs_for(lines, CRS.from_epsg(4326))
    assert crs.is_projected
    assert crs.axis_info[0].unit_name == "metre"
    utm = CRS.from_epsg(32631)
    assert metric_crs_for(lines, utm) is utm
    tr = Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
    lon0, lat0 = tr.transform(0.0, 0.0)
    proj = reproject_lines(lines, CRS.from_epsg(4326), crs)
    x, y = proj[0].coords[1]
    _, _, dist = Geod(ellps="WGS84").inv(lon0, lat0, 5.4, 50.3)
    # Azimuthal equidistant: distance from the centre is the geodesic distance
    # (Snyder 1987, USGS Professional Paper 1395); reference pyproj.Geod.
    assert math.hypot(x, y) == pytest.approx(dist, rel=1e-9)


def test_read_lines_explodes_multilines_and_keeps_crs(tmp_path):
    fiona = pytest.importorskip("fiona")
    path = tmp_path / "lines.gpkg"
    schema = {"geometry": "MultiLineString", "properties": {"strength": "float", "kind": "str"}}
    with fiona.open(path, "w", driver="GPKG", crs="EPSG:32633", schema=schema) as dst:
        dst.write(
            {
                "geometry": shapely.geometry.mapping(
                    MultiLineString([[(0, 0), (10, 0)], [(0, 5), (0, 15), (3, 20)]])
                ),
                "properties": {"strength": 2.5, "kind": "valley"},
            }
        )
        dst.write(
            {
                "geometry": shapely.geometry.mapping(MultiLineString([[(1, 1), (2, 2)]])),
                "properties": {"strength": 1.0, "kind": "ridge"},
            }
        )
    geoms, props, crs = read_lines(path)
    assert [g.geom_type for g in geoms] == ["LineString"] * 3
    assert [p["kind"] for p in props] == ["valley", "valley", "ridge"]
    assert props[0] is not props[1]
    assert crs == CRS.from_epsg(32633)
    assert geoms[1].equals(LineString([(0, 5), (0, 15), (3, 20)]))


def test_read_lines_errors_name_the_file(tmp_path):
    fiona = pytest.importorskip("fiona")
    missing = tmp_path / "nope.gpkg"
    with pytest.raises(InputError, match="nope.gpkg: file not found"):
        read_lines(missing)
    poly = tmp_path / "poly.geojson"
    with fiona.open(poly, "w", driver="GeoJSON", crs="EPSG:4326", schema={"geometry": "Polygon", "properties": {}}) as dst:
        dst.write({"geometry": shapely.geometry.mapping(Polygon([(0, 0), (1, 0), (1, 1)])), "properties": {}})
    with pytest.raises(InputError, match=r"poly\.geojson: feature 0 is a Polygon"):
        read_lines(poly)
    junk = tmp_path / "junk.gpkg"
    junk.write_bytes(b"not a geopackage")
    with pytest.raises(InputError, match="junk.gpkg: cannot read"):
        read_lines(junk)


def test_compare_files_across_crs(tmp_path):
    fiona = pytest.importorskip("fiona")
    utm = CRS.from_epsg(32633)
    lines_utm = [shapely.affinity.translate(g, 400000.0, 5000000.0) for g in wiggly_lines(5, 30, 3000.0, 10.0, 30)]
    lines_ll = reproject_lines(lines_utm, utm, CRS.from_epsg(4326))
    schema = {"geometry": "LineString", "properties": {"azimuth_deg": "float"}}
    det = tmp_path / "detected.geojson"
    with fiona.open(det, "w", driver="GeoJSON", crs="EPSG:4326", schema=schema) as dst:
        for g in lines_ll:
            dst.write({"geometry": shapely.geometry.mapping(g), "properties": {"azimuth_deg": None}})
    ref = tmp_path / "reference.gpkg"
    with fiona.open(ref, "w", driver="GPKG", crs="EPSG:32633", schema=schema) as dst:
        for g in lines_utm:
            dst.write({"geometry": shapely.geometry.mapping(g), "properties": {"azimuth_deg": 0.0}})
    res = compare_line_files(det, ref, buffer_m=2.0, angle_deg=10.0)
    # Same lines in two CRSs: brought into one frame (the UTM one, chosen because it is
    # metric) they coincide up to the round trip through lon/lat and the file format.
    assert res.recall == pytest.approx(1.0, abs=1e-6)
    assert res.precision == pytest.approx(1.0, abs=1e-6)
    assert res.offset_p90_m < 0.2
