"""Writing line layers: every format, CRS, attributes, RFC 7946, GeoPackage validity, atomicity."""

from __future__ import annotations

import errno
import json
import math
import sqlite3

import fiona
import fiona.errors
import numpy as np
import pytest
from pyproj import CRS, Transformer
from shapely.geometry import LineString

import lineament.vector_io as vector_io
from conftest import UTM33, utm_georef
from lineament.errors import OutputError
from lineament.georef import GeoRef
from lineament.pipeline import ExtractionResult, ScaleReport
from lineament.settings import ExtractionSettings
from lineament.vector_io import (
    DRIVERS, LAYER_NAME, SHAPEFILE_FIELD_NAMES, check_output, read_run_metadata, sidecar_path, write_lines,
)
from lineament.vectorize import ATTRIBUTE_TYPES, Lineament

FORMATS = [".gpkg", ".fgb", ".shp", ".geojson"]
WGS84 = CRS.from_epsg(4326)


def make_result(georef: GeoRef | None = None, n: int = 3, source: str = "dem.tif") -> ExtractionResult:
    """Hand-made lines with attribute values exact at the decimals written (see vectorize._DECIMALS)."""
    g = georef or utm_georef(100, 100)
    x0, y0 = g.transform.c, g.transform.f
    lines = []
    for i in range(n):
        geom = LineString([(x0 + 100.0 + 50.0 * i, y0 - 100.0), (x0 + 110.0 + 50.0 * i, y0 - 400.0),
                           (x0 + 160.0 + 50.0 * i, y0 - 700.0)])
        lines.append(Lineament(geom, "edge", "log", 20.0 + i, 2.0, 12.5 + i, 20.25, 612.125 + i,
                               3.5 + i, float("nan") if i == 0 else 2.75 + i, source))
    settings = ExtractionSettings(scales="2px")
    report = ScaleReport(20.0, 2.0, "edge", "log", 0.5, 2.0, 1.0, n, 1836.375)
    return ExtractionResult(lines, g, source, settings, [report], 0.25)


def _expected_properties(line: Lineament, driver: str) -> dict:
    rename = SHAPEFILE_FIELD_NAMES if driver == "ESRI Shapefile" else {}
    return {rename.get(k, k): v for k, v in line.properties().items()}


def _folder_listing(folder):
    return sorted(p.name for p in folder.iterdir())


# ------------------------------------------------------------------ round trips
@pytest.mark.parametrize("ext", FORMATS)
def test_every_format_reads_back_with_crs_and_attributes(tmp_path, ext):
    result = make_result()
    out = write_lines(result, tmp_path / f"lines{ext}")
    driver = DRIVERS[ext]
    with fiona.open(out) as src:
        assert src.driver == driver
        crs = CRS.from_wkt(src.crs_wkt)
        # GeoJSON is WGS84 by definition (RFC 7946 section 4); the others keep the raster's CRS
        assert crs.equals(WGS84 if ext == ".geojson" else UTM33, ignore_axis_order=True)
        # FlatGeobuf stores features in the order of its packed spatial index, so match by length_m
        feats = sorted(src, key=lambda f: f.properties["length_m"])
        schema_names = list(src.schema["properties"])
    assert len(feats) == len(result.lines)
    # every attribute survives under its own name (mapped names for dBASE's 10 characters)
    expected_names = [SHAPEFILE_FIELD_NAMES.get(k, k) if ext == ".shp" else k for k in ATTRIBUTE_TYPES]
    assert schema_names == expected_names
    for feat, line in zip(feats, result.lines):
        props = dict(feat.properties)
        for key, value in _expected_properties(line, driver).items():
            if value is None:
                assert props[key] is None, key
            elif isinstance(value, float):
                assert math.isclose(props[key], value, rel_tol=1e-12, abs_tol=1e-12), key
            else:
                assert props[key] == value, key
        coords = np.asarray(feat.geometry.coordinates)
        if ext != ".geojson":
            np.testing.assert_allclose(coords, np.asarray(line.geometry.coords), rtol=0, atol=1e-6)


def test_shapefile_names_fit_dbase_limit():
    # dBASE III field names: at most 10 characters (ESRI Shapefile Technical Description, 1998)
    for name in ATTRIBUTE_TYPES:
        assert len(SHAPEFILE_FIELD_NAMES.get(name, name)) <= 10, name
    mapped = [SHAPEFILE_FIELD_NAMES.get(k, k) for k in ATTRIBUTE_TYPES]
    assert len(set(mapped)) == len(mapped)


@pytest.mark.parametrize("ext", FORMATS)
def test_zero_lines_write_an_empty_layer(tmp_path, ext):
    out = write_lines(make_result(n=0), tmp_path / f"empty{ext}")
    with fiona.open(out) as src:
        assert len(list(src)) == 0
        assert src.crs_wkt
    assert read_run_metadata(out)["lines"] == 0


def test_json_extension_is_geojson(tmp_path):
    out = write_lines(make_result(), tmp_path / "lines.json")
    with fiona.open(out) as src:
        assert src.driver == "GeoJSON"


# ------------------------------------------------------------------ GeoJSON RFC 7946
def test_geojson_follows_rfc7946(tmp_path):
    result = make_result()
    out = write_lines(result, tmp_path / "lines.geojson")
    doc = json.loads(out.read_text(encoding="utf-8"))
    # RFC 7946 section 4: no "crs" member; coordinates are WGS84 longitude, latitude
    assert "crs" not in doc
    assert doc["type"] == "FeatureCollection"
    to_lonlat = Transformer.from_crs(UTM33, WGS84, always_xy=True)
    for feat, line in zip(doc["features"], result.lines):
        assert feat["type"] == "Feature"
        assert feat["geometry"]["type"] == "LineString"
        got = np.asarray(feat["geometry"]["coordinates"])
        xy = np.asarray(line.geometry.coords)
        lon, lat = to_lonlat.transform(xy[:, 0], xy[:, 1])
        # Reference: pyproj Transformer; GDAL writes 7 decimals under RFC 7946 (about 1 cm), from memory
        np.testing.assert_allclose(got[:, 0], lon, rtol=0, atol=1.1e-7)
        np.testing.assert_allclose(got[:, 1], lat, rtol=0, atol=1.1e-7)
        # easting 500000 is the central meridian 15 deg E of UTM zone 33 (common practice: false easting)
        assert 14.9 < got[0, 0] < 15.1 and 46.0 < got[0, 1] < 47.5
        assert feat["properties"]["azimuth_grid_deg"] == line.properties()["azimuth_grid_deg"]


def test_geojson_refuses_lines_without_crs(tmp_path):
    result = make_result(GeoRef.pixel_grid(100, 100))
    with pytest.raises(OutputError, match="no CRS"):
        write_lines(result, tmp_path / "lines.geojson")
    assert _folder_listing(tmp_path) == []


def test_lines_without_crs_go_to_geopackage(tmp_path):
    out = write_lines(make_result(GeoRef.pixel_grid(100, 100)), tmp_path / "px.gpkg")
    with fiona.open(out) as src:
        assert not src.crs_wkt
        assert len(list(src)) == 3


def test_reprojection_to_another_crs(tmp_path):
    result = make_result()
    out = write_lines(result, tmp_path / "ll.gpkg", crs="EPSG:4326")
    to_lonlat = Transformer.from_crs(UTM33, WGS84, always_xy=True)
    with fiona.open(out) as src:
        assert CRS.from_wkt(src.crs_wkt).equals(WGS84, ignore_axis_order=True)
        for feat, line in zip(src, result.lines):
            xy = np.asarray(line.geometry.coords)
            lon, lat = to_lonlat.transform(xy[:, 0], xy[:, 1])
            np.testing.assert_allclose(np.asarray(feat.geometry.coordinates), np.column_stack([lon, lat]),
                                       rtol=0, atol=1e-9)


def test_several_results_in_one_layer(tmp_path):
    a = make_result(n=2, source="a.tif")
    b = make_result(utm_georef(100, 100, x0=501_000.0), n=3, source="b.tif")
    out = write_lines([a, b], tmp_path / "both.gpkg")
    with fiona.open(out) as src:
        sources = [f.properties["source"] for f in src]
    assert sources == ["a.tif"] * 2 + ["b.tif"] * 3
    meta = read_run_metadata(out)
    assert [r["source"] for r in meta["runs"]] == ["a.tif", "b.tif"]


def test_mixing_results_with_and_without_crs_is_refused(tmp_path):
    with pytest.raises(OutputError, match="some results have a CRS"):
        write_lines([make_result(), make_result(GeoRef.pixel_grid(100, 100))], tmp_path / "mix.gpkg")


def test_nothing_to_write_is_refused(tmp_path):
    with pytest.raises(OutputError, match="nothing to write"):
        write_lines([], tmp_path / "none.gpkg")


# ------------------------------------------------------------------ GeoPackage
def test_geopackage_run_metadata_reads_back(tmp_path):
    result = make_result()
    out = write_lines(result, tmp_path / "lines.gpkg")
    meta = read_run_metadata(out)
    expected = json.loads(json.dumps(result.metadata()))
    for key, value in expected.items():
        assert meta[key] == value, key
    assert CRS.from_wkt(meta["output_crs"]).equals(UTM33)
    assert not sidecar_path(out).exists()


def test_geopackage_is_valid_per_ogc_12_128(tmp_path):
    out = write_lines(make_result(), tmp_path / "lines.gpkg")
    # OGC 12-128 GeoPackage: application_id 'GPKG' (0x47504B47) at byte offset 68 of the SQLite header
    # (SQLite file format, "Database Header"), big-endian.
    header = out.read_bytes()[:100]
    assert header[:16] == b"SQLite format 3\x00"
    assert header[68:72] == b"GPKG"
    con = sqlite3.connect(out)
    try:
        assert con.execute("PRAGMA application_id").fetchone()[0] == 0x47504B47
        # integrity_check must return "ok" and foreign_key_check nothing (OGC 12-128, from memory)
        assert con.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
        assert con.execute("PRAGMA foreign_key_check").fetchall() == []
        tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type IN ('table', 'view')")}
        assert {"gpkg_contents", "gpkg_spatial_ref_sys", "gpkg_geometry_columns", LAYER_NAME} <= tables
        row = con.execute("SELECT data_type, srs_id FROM gpkg_contents WHERE table_name = ?",
                          (LAYER_NAME,)).fetchone()
        assert row[0] == "features"
        srs = con.execute("SELECT organization, organization_coordsys_id FROM gpkg_spatial_ref_sys "
                          "WHERE srs_id = ?", (row[1],)).fetchone()
        assert srs[0].upper() == "EPSG" and srs[1] == 32633
        # the spatial reference table holds the -1 (undefined Cartesian), 0 (undefined geographic)
        # and 4326 rows (OGC 12-128, from memory)
        ids = {r[0] for r in con.execute("SELECT srs_id FROM gpkg_spatial_ref_sys")}
        assert {-1, 0, 4326} <= ids
        geom = con.execute("SELECT geometry_type_name FROM gpkg_geometry_columns WHERE table_name = ?",
                           (LAYER_NAME,)).fetchone()
        assert geom[0].upper() == "LINESTRING"
    finally:
        con.close()


# ------------------------------------------------------------------ sidecars
@pytest.mark.parametrize("ext", [".fgb", ".shp", ".geojson"])
def test_sidecar_json_for_other_formats(tmp_path, ext):
    result = make_result()
    out = write_lines(result, tmp_path / f"lines{ext}")
    side = sidecar_path(out)
    assert side.name == f"lines{ext}.run.json"
    on_disk = json.loads(side.read_text(encoding="utf-8"))
    assert on_disk == read_run_metadata(out)
    assert on_disk["source"] == "dem.tif"
    assert on_disk["settings"]["scales"] == ["2px"]
    assert on_disk["lines"] == 3


# ------------------------------------------------------------------ existing outputs
@pytest.mark.parametrize("ext", FORMATS)
def test_existing_output_is_refused_and_left_byte_identical(tmp_path, ext):
    out = write_lines(make_result(n=1), tmp_path / f"lines{ext}")
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    with pytest.raises(OutputError, match="exists; pass --overwrite"):
        write_lines(make_result(n=3), out)
    with pytest.raises(OutputError, match="exists; pass --overwrite"):
        check_output(out)
    after = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    assert after == before


def test_stray_shapefile_part_counts_as_existing(tmp_path):
    (tmp_path / "lines.dbf").write_bytes(b"old")
    with pytest.raises(OutputError, match="exists"):
        check_output(tmp_path / "lines.shp")


@pytest.mark.parametrize("ext", FORMATS)
def test_overwrite_replaces_output(tmp_path, ext):
    out = write_lines(make_result(n=1), tmp_path / f"lines{ext}")
    write_lines(make_result(n=3), out, overwrite=True)
    with fiona.open(out) as src:
        assert len(list(src)) == 3
    assert read_run_metadata(out)["lines"] == 3
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".lineament-")]


# ------------------------------------------------------------------ failures leave nothing
def _failing_records(real):
    def records(*args, **kwargs):
        gen = real(*args, **kwargs)
        yield next(gen)
        raise RuntimeError("boom half way")
    return records


@pytest.mark.parametrize("ext", FORMATS)
def test_failure_while_writing_leaves_no_partial_file(tmp_path, monkeypatch, ext):
    monkeypatch.setattr(vector_io, "_records", _failing_records(vector_io._records))
    with pytest.raises(RuntimeError, match="boom half way"):
        write_lines(make_result(n=3), tmp_path / f"lines{ext}")
    assert _folder_listing(tmp_path) == []


@pytest.mark.parametrize("ext", FORMATS)
def test_failure_while_overwriting_keeps_the_old_output(tmp_path, monkeypatch, ext):
    out = write_lines(make_result(n=1), tmp_path / f"lines{ext}")
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    monkeypatch.setattr(vector_io, "_records", _failing_records(vector_io._records))
    with pytest.raises(RuntimeError):
        write_lines(make_result(n=3), out, overwrite=True)
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir()} == before


def test_driver_failure_becomes_output_error(tmp_path, monkeypatch):
    # simulated: GDAL refusing to create the layer (fiona raises DriverError)
    def refuse(*args, **kwargs):
        raise fiona.errors.DriverError("simulated driver failure\nsecond line")
    monkeypatch.setattr(vector_io.fiona, "open", refuse)
    with pytest.raises(OutputError, match=r"lines\.gpkg: cannot write GPKG layer \(simulated driver failure\)$"):
        write_lines(make_result(), tmp_path / "lines.gpkg")
    assert _folder_listing(tmp_path) == []


def test_disk_full_while_moving_into_place_becomes_output_error(tmp_path, monkeypatch):
    # simulated: the file system refusing the final rename (errno ENOSPC, POSIX)
    def no_space(src, dst):
        raise OSError(errno.ENOSPC, "No space left on device")
    monkeypatch.setattr(vector_io.os, "replace", no_space)
    with pytest.raises(OutputError, match="No space left on device"):
        write_lines(make_result(), tmp_path / "lines.shp")
    assert _folder_listing(tmp_path) == []


# ------------------------------------------------------------------ check_output
def test_check_output_returns_driver(tmp_path):
    for ext, driver in DRIVERS.items():
        assert check_output(tmp_path / f"x{ext.upper()}") == driver


@pytest.mark.parametrize("name, pattern", [
    ("lines.txt", r"unknown output format '\.txt'"),
    ("lines", r"unknown output format '\(no extension\)'"),
    ("missing/lines.gpkg", "does not exist"),
])
def test_check_output_refusals(tmp_path, name, pattern):
    with pytest.raises(OutputError, match=pattern):
        check_output(tmp_path / name)


def test_check_output_refuses_folder_and_path_under_a_file(tmp_path):
    (tmp_path / "dir.gpkg").mkdir()
    with pytest.raises(OutputError, match="is a folder"):
        check_output(tmp_path / "dir.gpkg")
    (tmp_path / "plain").write_text("x")
    with pytest.raises(OutputError, match="is a file, not a folder"):
        check_output(tmp_path / "plain" / "lines.gpkg")
    with pytest.raises(OutputError, match="is a file, not a folder"):
        check_output(tmp_path / "plain" / "deeper" / "lines.gpkg")


def test_output_errors_are_oserrors(tmp_path):
    # errors.py: OutputError also derives from OSError
    with pytest.raises(OSError):
        check_output(tmp_path / "lines.txt")
