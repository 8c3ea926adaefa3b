"""Tests for lineament.analysis.orientation."""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
from pyproj import CRS
from scipy import stats
from shapely.geometry import LineString

from lineament.analysis.orientation import (
    axial_mean,
    axial_spread_deg,
    orientation_sets,
    plot_rose,
    rose_bins,
    rose_for_lines,
    write_rose_table,
)
from lineament.errors import OutputError, SettingsError


def axial_sample(rng, centre_deg: float, kappa: float, n: int) -> np.ndarray:
    """Axial directions: von Mises on doubled angles, halved (invented test data)."""
    doubled = rng.vonmises(math.radians(2.0 * centre_deg), kappa, n)
    return np.mod(np.degrees(doubled) / 2.0, 180.0)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_axial_mean_matches_scipy_on_doubled_angles(seed):
    rng = np.random.default_rng(seed)
    az = np.concatenate((axial_sample(rng, 20.0 + 50 * seed, 4.0, 300), rng.uniform(0, 180, 100)))
    mean, r = axial_mean(az)
    doubled = np.radians(2.0 * az)
    # Reference: scipy.stats.circmean / circvar on the doubled angles
    # (doubling for axial data: Mardia and Jupp 2000); scipy's circvar is 1 - R.
    ref_mean = math.degrees(stats.circmean(doubled)) / 2.0
    assert mean == pytest.approx(ref_mean, abs=1e-9)
    assert r == pytest.approx(1.0 - stats.circvar(doubled), abs=1e-12)
    # Reference: scipy.stats.circstd is sqrt(-2 ln R) on the doubled angles.
    assert axial_spread_deg(r) == pytest.approx(math.degrees(stats.circstd(doubled)) / 2.0, rel=1e-9)


def test_axial_mean_weights_equal_repeated_samples():
    az = np.array([10.0, 170.0, 35.0, 95.0])
    counts = np.array([3, 1, 2, 1])
    mean, r = axial_mean(az, counts.astype(float))
    doubled = np.radians(2.0 * np.repeat(az, counts))
    # Reference: scipy.stats.circmean / circvar of the repeated sample.
    assert mean == pytest.approx(math.degrees(stats.circmean(doubled)) / 2.0, abs=1e-9)
    assert r == pytest.approx(1.0 - stats.circvar(doubled), abs=1e-12)


def test_axial_mean_treats_opposite_directions_as_one_line():
    # Axial data: 10 deg and 190 deg are the same line (Mardia and Jupp 2000).
    mean, r = axial_mean([10.0, 190.0, -170.0])
    assert mean == pytest.approx(10.0, abs=1e-9)
    assert r == pytest.approx(1.0, abs=1e-12)
    # Perpendicular pair: doubled angles cancel, so the mean is undefined.
    mean, r = axial_mean([0.0, 90.0])
    assert math.isnan(mean)
    assert r == pytest.approx(0.0, abs=1e-12)


@pytest.mark.parametrize(("centres", "shares"), [((30.0, 120.0), (0.6, 0.4)), ((175.0, 80.0), (0.55, 0.45))])
def test_bimodal_orientations_give_two_sets(centres, shares):
    rng = np.random.default_rng(7)
    n = 2000
    groups = [axial_sample(rng, c, 25.0, int(round(s * n))) for c, s in zip(centres, shares)]
    found = orientation_sets(np.concatenate(groups))
    assert len(found) == 2
    for group, share, got in zip(groups, shares, found):  # both ordered by share
        # Reference: each generated cluster's axial mean via scipy.stats.circmean.
        ref = math.degrees(stats.circmean(np.radians(2.0 * group))) / 2.0 % 180.0
        diff = abs((got.mean_direction_deg - ref + 90.0) % 180.0 - 90.0)
        assert diff < 1.0
        assert got.share == pytest.approx(share, abs=0.02)
        # Reference: scipy.stats.circstd of the cluster, halved (axial).
        assert got.spread_deg == pytest.approx(math.degrees(stats.circstd(np.radians(2.0 * group))) / 2.0, rel=0.15)


def test_sets_respect_min_share_and_max_sets():
    rng = np.random.default_rng(11)
    az = np.concatenate((axial_sample(rng, 10, 30, 900), axial_sample(rng, 100, 30, 60), axial_sample(rng, 55, 30, 40)))
    three = orientation_sets(az, min_share=0.0)
    assert len(three) == 3
    one = orientation_sets(az, min_share=0.1)  # the two small sets hold 6 % and 4 %
    assert len(one) == 1
    assert one[0].share == pytest.approx(1.0)
    two = orientation_sets(az, min_share=0.0, max_sets=2)
    assert len(two) == 2
    assert sum(s.share for s in two) == pytest.approx(1.0)
    assert orientation_sets([]) == []


def test_rose_bins_match_numpy_histogram():
    rng = np.random.default_rng(3)
    az = rng.uniform(0, 180, 500)
    lengths = rng.uniform(10, 1000, 500)
    table = rose_bins(az, lengths, 15.0)
    # Reference: numpy.histogram with the same edges and weights.
    ref, _ = np.histogram(az, bins=np.arange(0, 181, 15.0), weights=lengths)
    np.testing.assert_allclose(table.frequency, ref, rtol=1e-12)
    np.testing.assert_allclose(table.share, ref / ref.sum(), rtol=1e-12)
    assert table.weighting == "length_m"
    counts = rose_bins(az, bin_width_deg=15.0)
    np.testing.assert_array_equal(counts.frequency, np.histogram(az, bins=np.arange(0, 181, 15.0))[0])
    assert counts.weighting == "count"


def test_rose_bins_offset_and_folding():
    table = rose_bins([178.0, 3.0, 183.0, -2.0, 90.0], bin_width_deg=10.0, start_deg=-5.0)
    # A bin centred on north gathers 178, 3, 183 (= 3) and -2 (= 178): axial folding.
    assert table.bin_start_deg[0] == -5.0
    assert table.frequency[0] == 4
    assert table.frequency[9] == 1  # 85-95 deg
    with pytest.raises(SettingsError, match="does not divide"):
        rose_bins([1.0], bin_width_deg=7.0)


def test_rose_for_lines_weights_by_ground_length():
    x0, y0 = 500_000.0, 5_000_000.0  # on the UTM 33N central meridian (scale factor 0.9996)
    lines = [LineString([(x0, y0), (x0, y0 + 300)]), LineString([(x0, y0), (x0 + 100, y0)])]
    table = rose_for_lines(lines, CRS.from_epsg(32633), bin_width_deg=30.0)
    # Analytic: a 300 m north line and a 100 m east line; ground length = grid length / 0.9996
    # (UTM central scale factor, from memory).
    assert table.frequency[0] == pytest.approx(300.0 / 0.9996, rel=1e-4)
    assert table.frequency[3] == pytest.approx(100.0 / 0.9996, rel=1e-4)
    by_count = rose_for_lines(lines, CRS.from_epsg(32633), by="count", bin_width_deg=30.0)
    assert by_count.share[0] == pytest.approx(0.5)


def test_rose_table_files(tmp_path):
    table = rose_bins([5.0, 15.0, 16.0, 100.0], [10.0, 20.0, 30.0, 40.0], 20.0)
    path = tmp_path / "rose.csv"
    write_rose_table(table, path)
    with open(path, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0]) == ["bin_start_deg", "bin_end_deg", "bin_centre_deg", "length_m", "share"]
    assert [float(r["length_m"]) for r in rows][:2] == [60.0, 0.0]
    assert float(rows[5]["length_m"]) == 40.0
    with pytest.raises(OutputError, match="exists"):
        write_rose_table(table, path)
    jpath = tmp_path / "rose.json"
    write_rose_table(table, jpath)
    data = json.loads(jpath.read_text())
    assert data["weighting"] == "length_m"
    assert sum(b["share"] for b in data["bins"]) == pytest.approx(1.0)
    with pytest.raises(OutputError, match="unknown table format"):
        write_rose_table(table, tmp_path / "rose.txt")


def test_plot_rose_png_and_svg(tmp_path):
    pytest.importorskip("matplotlib")
    rng = np.random.default_rng(5)
    az = np.concatenate((axial_sample(rng, 40, 10, 200), axial_sample(rng, 140, 10, 100)))
    table = rose_bins(az, bin_width_deg=10.0)
    png = tmp_path / "rose.png"
    plot_rose(table, png, title="Invented lineaments", sets=orientation_sets(az))
    # PNG signature bytes (PNG specification, ISO/IEC 15948).
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    svg = tmp_path / "rose.svg"
    plot_rose(table, svg)
    assert "<svg" in svg.read_text()
    with pytest.raises(OutputError, match="exists"):
        plot_rose(table, png)
    with pytest.raises(OutputError, match="unknown plot format"):
        plot_rose(table, tmp_path / "rose.pdf")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["rose.png", "rose.svg"]
