"""The analysis commands (refine, rose, density, compare) through click's CliRunner."""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
import rasterio
from click.testing import CliRunner
from pyproj import CRS, Geod, Transformer
from shapely.geometry import LineString

from conftest import UTM33, utm_georef, write_geotiff
from lineament.analysis import compare_lines, line_density, rose_bins
from lineament.cli.main import cli
from lineament.interpret import read_line_layer, write_line_layer


def run(*args):
    return CliRunner().invoke(cli, list(map(str, args)), catch_exceptions=False)


X0, Y0 = 500_000.0, 5_200_000.0


@pytest.fixture
def layer(tmp_path):
    """Lines in UTM 33N: a 4 km line through the centre of a 5 km square, and crossing lines."""
    geoms = [
        LineString([(X0 + 500, Y0 - 2500), (X0 + 4500, Y0 - 2500)]),  # east-west, through the centre
        LineString([(X0 + 1000, Y0 - 1000), (X0 + 2000, Y0 - 2000)]),
        LineString([(X0 + 1000, Y0 - 2000), (X0 + 2000, Y0 - 1000)]),
        LineString([(X0 + 3000, Y0 - 4000), (X0 + 3300, Y0 - 3000)]),
    ]
    props = [{"kind": "edge", "scale_m": 20.0} for _ in geoms]
    path = tmp_path / "lines.gpkg"
    write_line_layer(geoms, props, UTM33, path)
    return path, geoms


def test_rose_writes_plot_and_table_matching_rose_bins(layer, tmp_path):
    path, geoms = layer
    png, table = tmp_path / "rose.png", tmp_path / "rose.csv"
    result = run("rose", path, "-o", png, "--table", table, "--bin-width", "15")
    assert result.exit_code == 0, result.output
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, ISO/IEC 15948)
    assert "mean axial direction" in result.stdout
    # reference: geodesic azimuths and lengths from pyproj.Geod on the WGS84 ellipsoid
    to_ll = Transformer.from_crs(UTM33, UTM33.geodetic_crs, always_xy=True)
    geod = Geod(ellps="WGS84")
    az, lengths = [], []
    for g in geoms:
        (x0, y0), (x1, y1) = g.coords
        lon, lat = to_ll.transform([x0, x1], [y0, y1])
        fwd, _, dist = geod.inv(lon[0], lat[0], lon[1], lat[1])
        az.append(fwd % 180.0)
        lengths.append(dist)
    expected = rose_bins(az, lengths, 15.0)
    with open(table, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 12
    np.testing.assert_allclose([float(r["length_m"]) for r in rows], expected.frequency, rtol=1e-9, atol=1e-6)
    assert f"{expected.mean_direction_deg:.1f} deg" in result.stdout


def test_density_on_the_grid_of_a_raster(layer, tmp_path):
    path, geoms = layer
    like = write_geotiff(tmp_path / "like.tif", np.zeros((100, 100), np.float32), utm_georef(100, 100, pixel=50.0))
    out = tmp_path / "density.tif"
    result = run("density", path, "--like", like, "-o", out, "--radius", 500)
    assert result.exit_code == 0, result.output
    with rasterio.open(out) as src:
        grid = src.read(1)
        assert src.crs.to_epsg() == 32633 and src.shape == (100, 100)
        assert src.tags()["units"] == "km_per_km2"
    expected = line_density(geoms, utm_georef(100, 100, pixel=50.0), radius_m=500.0)
    np.testing.assert_allclose(grid, expected, rtol=1e-6, atol=1e-6)
    # analytic: a straight line d from the disc centre has a chord of 2 sqrt(r^2 - d^2) in pi r^2;
    # the centre of cell (50, 60) is (x0 + 3025, y0 - 2525), d = 25 m from the east-west line,
    # with no other line within 500 m
    chord_km = 2 * math.sqrt(500.0**2 - 25.0**2) / 1000
    assert grid[50, 60] == pytest.approx(chord_km / (math.pi * 0.25), rel=0.02)
    # intersections: the two diagonal lines cross once
    out2 = tmp_path / "crossings.tif"
    assert run("density", path, "--like", like, "-o", out2, "--radius", 500, "--intersections").exit_code == 0
    with rasterio.open(out2) as src:
        # one point in a disc of pi 0.25 km^2 (analytic), at the crossing (x0+1500, y0-1500) = cell (29, 29)
        assert src.read(1)[29, 29] == pytest.approx(1 / (math.pi * 0.25), rel=0.05)


def test_compare_json_matches_compare_lines(layer, tmp_path):
    path, geoms = layer
    ref_geoms = [LineString([(X0 + 500, Y0 - 2510), (X0 + 4500, Y0 - 2510)])]  # 10 m off the first line
    ref = tmp_path / "ref.gpkg"
    write_line_layer(ref_geoms, [{}], UTM33, ref)
    result = run("compare", path, ref, "--buffer-m", 25, "--angle-deg", 20, "--json")
    assert result.exit_code == 0, result.output
    doc = json.loads(result.stdout)
    expected = compare_lines(geoms, ref_geoms, buffer_m=25.0, angle_deg=20.0).to_dict()
    for key, value in expected.items():
        assert doc[key] == pytest.approx(value, nan_ok=True), key
    # analytic: the reference is fully matched; 4 km of 4 + 2 * 1.414 + 1.044 km detected is
    assert doc["recall"] == pytest.approx(1.0)
    assert doc["precision"] == pytest.approx(4000 / (4000 + 2 * math.hypot(1000, 1000) + math.hypot(300, 1000)))
    # JSON to a file; the table goes to the screen
    out = tmp_path / "scores.json"
    result = run("compare", path, ref, "--buffer-m", 25, "--json", out)
    assert result.exit_code == 0 and json.loads(out.read_text())["recall"] == pytest.approx(1.0)
    assert "recall" in result.stdout


def test_compare_reference_without_crs(layer, tmp_path):
    path, _ = layer
    ref = tmp_path / "nocrs.gpkg"
    write_line_layer([LineString([(X0 + 500, Y0 - 2500), (X0 + 4500, Y0 - 2500)])], [{}], None, ref)
    out = tmp_path / "scores.json"
    result = run("compare", path, ref, "--buffer-m", 25, "--json", out)
    assert result.exit_code == 3  # unusable input (lineament.errors.EXIT_CODES)
    assert result.stderr.count("\n") == 1 and "--assume-reference-crs" in result.stderr
    assert not out.exists()
    result = run("compare", path, ref, "--buffer-m", 25, "--assume-reference-crs", "EPSG:32633", "--json")
    assert result.exit_code == 0 and json.loads(result.stdout)["recall"] == pytest.approx(1.0)


def test_refine_command_links_a_dashed_line(tmp_path):
    dashes = [LineString([(X0, Y0 + s), (X0, Y0 + s + 200)]) for s in np.arange(5) * 250.0]
    src = tmp_path / "dashes.gpkg"
    write_line_layer(dashes, [{"scale_m": 20.0, "kind": "edge"} for _ in dashes], UTM33, src)
    out = tmp_path / "refined.gpkg"
    result = run("refine", src, "-o", out, "--max-gap-m", 60)
    assert result.exit_code == 0, result.output
    geoms, props, crs = read_line_layer(out)
    assert len(geoms) == 1 and props[0]["n_parts"] == 5
    # planar length of the joined line: 4 * 250 + 200 m (analytic); length_m is geodesic,
    # which differs by the UTM scale factor (0.9996 at the central meridian, Snyder 1987)
    assert geoms[0].length == pytest.approx(1200.0)
    assert props[0]["length_m"] == pytest.approx(1200.0 / 0.9996, rel=1e-4)


@pytest.mark.parametrize("args, code", [
    (["rose", "{missing}", "-o", "{out}.png"], 3),
    (["density", "{lines}", "--cell-size", "50", "--radius", "-5", "-o", "{out}.tif"], 2),
    (["density", "{lines}", "--radius", "500", "-o", "{out}.tif"], 2),
    (["refine", "{lines}", "--max-bend-deg", "-5", "-o", "{out}.gpkg"], 2),
    (["refine", "{lines}", "-o", "{out}.txt"], 4),
    (["compare", "{lines}", "{missing}", "--buffer-m", "10", "--json", "{out}.json"], 3),
    (["rose", "{lines}", "-o", "{lines}"], 4),
])
def test_bad_input_one_line_and_no_output(layer, tmp_path, args, code):
    path, _ = layer
    before = sorted(p.name for p in tmp_path.iterdir())
    filled = [a.format(missing=tmp_path / "missing.gpkg", out=tmp_path / "out", lines=path) for a in args]
    result = run(*filled)
    assert result.exit_code == code, result.output
    assert result.stderr.startswith("lineament: error: ") and result.stderr.count("\n") == 1
    assert "Traceback" not in result.output
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def test_existing_output_needs_overwrite(layer, tmp_path):
    path, _ = layer
    out = tmp_path / "rose.csv"
    out.write_text("keep")
    result = run("rose", path, "--table", out)
    assert result.exit_code == 4 and "--overwrite" in result.stderr
    assert out.read_text() == "keep"
    assert run("rose", path, "--table", out, "--overwrite").exit_code == 0
    assert out.read_text().startswith("bin_start_deg")
