"""Hillshade and the one-page HTML report."""

from __future__ import annotations

import base64
import html
import math
import re
import sys

import numpy as np
import pytest
from click.testing import CliRunner

from conftest import step_image, utm_georef, write_geotiff
from lineament import ExtractionSettings, extract_array, write_lines
from lineament.cli.common import CAUTION
from lineament.cli.main import cli
from lineament.report import MULTI_SUN_AZIMUTHS_DEG, hillshade


def run(*args):
    return CliRunner().invoke(cli, list(map(str, args)), catch_exceptions=False)


def test_hillshade_of_a_plane_is_the_lambert_cosine():
    # plane z = a x_east + b y_north on a 10 m grid (row 0 north); Horn's (1981) gradient is exact
    # on planes, so the shade is the analytic n . s = (-a s_e - b s_n + s_up) / sqrt(1 + a^2 + b^2)
    a, b = 0.2, -0.1
    rows, cols = np.mgrid[0:20, 0:30].astype(float)
    z = a * cols * 10.0 + b * (-rows) * 10.0
    for azimuth, altitude in ((315.0, 45.0), (90.0, 30.0)):
        A, h = math.radians(azimuth), math.radians(altitude)
        expected = (-a * math.sin(A) * math.cos(h) - b * math.cos(A) * math.cos(h) + math.sin(h)) / math.sqrt(
            1 + a * a + b * b)
        shade = hillshade(z, (10.0, 10.0), sun_azimuth_deg=azimuth, sun_altitude_deg=altitude)
        np.testing.assert_allclose(shade[1:-1, 1:-1], max(0.0, expected), rtol=1e-5)
    # the multi-directional shade is the mean of its single-sun shades (its definition)
    single = [hillshade(z, (10.0, 10.0), sun_azimuth_deg=s) for s in MULTI_SUN_AZIMUTHS_DEG]
    np.testing.assert_allclose(hillshade(z, (10.0, 10.0)), np.mean(single, axis=0), rtol=1e-6)


@pytest.fixture
def extracted(tmp_path):
    g = utm_georef(160, 160)
    z = 300.0 + step_image(160, 160, angle_deg=20.0, offset_px=0.3, height_step=20.0, blur_px=1.0)
    dem = write_geotiff(tmp_path / "dem.tif", z, g)
    result = extract_array(z, g, ExtractionSettings(scales="20,40,80"), source="dem.tif")
    lines = tmp_path / "lines.gpkg"
    write_lines(result, lines)
    return dem, lines


def test_report_is_one_self_contained_html_file(extracted, tmp_path):
    dem, lines = extracted
    out = tmp_path / "report.html"
    before = {p.name for p in tmp_path.iterdir()}
    result = run("report", lines, "--raster", dem, "-o", out)
    assert result.exit_code == 0, result.output
    assert {p.name for p in tmp_path.iterdir()} - before == {"report.html"}
    page = out.read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>") and page.rstrip().endswith("</html>")
    # nothing to fetch: no http(s) or protocol-relative references, every src/href inline
    assert not re.search(r"https?://", page)
    refs = re.findall(r'(?:src|href)\s*=\s*"([^"]*)"', page)
    assert len(refs) == 3 and all(r.startswith("data:image/png;base64,") for r in refs)
    for r in refs:  # each picture decodes to a PNG (signature from the PNG specification)
        assert base64.b64decode(r.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"
    assert html.escape(CAUTION) in page
    assert "settings.scales" in page and "20m, 40m, 80m" in page  # run parameters from the layer


def test_report_without_matplotlib_is_one_line_and_no_output(extracted, tmp_path, monkeypatch):
    _, lines = extracted
    monkeypatch.setitem(sys.modules, "matplotlib", None)  # makes `import matplotlib` raise ImportError
    out = tmp_path / "report.html"
    result = run("report", lines, "-o", out)
    assert result.exit_code == 4
    assert result.stderr.count("\n") == 1 and "pip install lineament[plot]" in result.stderr
    assert not out.exists()


def test_report_bad_raster_is_one_line_and_no_output(extracted, tmp_path):
    _, lines = extracted
    bad = tmp_path / "bad.tif"
    bad.write_bytes(b"not a tiff")
    out = tmp_path / "report.html"
    result = run("report", lines, "--raster", bad, "-o", out)
    assert result.exit_code == 3 and result.stderr.count("\n") == 1
    assert not out.exists()
