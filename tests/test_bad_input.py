"""Bad input through the command: one error line, the documented exit code, no traceback, no output.

Every case builds its own files under ``tmp_path``, runs ``lineament extract``
with click's CliRunner and checks:

* the exit code is the documented one (``EXIT_CODES`` in errors.py:
  2 settings, 3 input, 4 output);
* stderr is exactly one line, starting with ``lineament: error:``, naming
  the file concerned (when there is one) and the problem;
* no ``Traceback`` anywhere;
* the folder is unchanged: no output, no temporary folder, an existing
  output byte-identical.

A few cases also run as a real process (``python -m lineament.cli.main``).
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import fiona
import numpy as np
import pytest
import rasterio
from affine import Affine
from click.testing import CliRunner
from rasterio.errors import NotGeoreferencedWarning

from conftest import ROOT, UTM33, step_image, utm_georef, write_geotiff
from lineament.cli.main import cli
from lineament.georef import GeoRef

SIZE = 64  # smallest convenient size for the default scales 2, 4, 8 px (needs 2*3*8+3 = 51 pixels)


def dem(height: int = SIZE, width: int = SIZE) -> np.ndarray:
    """A north-south 20 m step on a 400 m plain (float32)."""
    return 400.0 + step_image(height, width, angle_deg=0.0, offset_px=0.8, height_step=20.0, blur_px=1.0)


def good_tif(folder: Path, name: str = "dem.tif") -> Path:
    return write_geotiff(folder / name, dem(), utm_georef(SIZE, SIZE))


def write_without_georeferencing(path: Path, array: np.ndarray) -> Path:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        with rasterio.open(path, "w", driver="GTiff", height=array.shape[0], width=array.shape[1], count=1,
                           dtype=array.dtype) as ds:
            ds.write(array[None])
    return path


def snapshot(folder: Path) -> dict:
    """Every file below ``folder`` with its bytes (folders as None)."""
    out = {}
    for p in sorted(folder.rglob("*")):
        out[str(p.relative_to(folder))] = p.read_bytes() if p.is_file() else None
    return out


# ---------------------------------------------------------------------------- input builders
# Each builder gets tmp_path and returns (arguments, name the message must contain).

def _text_file(d):
    p = d / "notes.tif"
    p.write_text("this is not a raster\n")
    return [p, "-o", d / "out.gpkg"], str(p)


def _empty_file(d):
    p = d / "empty.tif"
    p.write_bytes(b"")
    return [p, "-o", d / "out.gpkg"], str(p)


def _truncated(d):
    full = good_tif(d, "full.tif").read_bytes()
    p = d / "half.tif"
    p.write_bytes(full[: len(full) // 2])
    (d / "full.tif").unlink()
    return [p, "-o", d / "out.gpkg"], str(p)


def _corrupt_header(d):
    blob = bytearray(good_tif(d, "ok.tif").read_bytes())
    blob[0:8] = b"\x00\xffJUNK\x00\x01"
    p = d / "corrupt.tif"
    p.write_bytes(bytes(blob))
    (d / "ok.tif").unlink()
    return [p, "-o", d / "out.gpkg"], str(p)


def _directory(d):
    p = d / "folder.tif"
    p.mkdir()
    return [p, "-o", d / "out.gpkg"], str(p)


def _missing(d):
    p = d / "nowhere.tif"
    return [p, "-o", d / "out.gpkg"], str(p)


def _no_crs(d):
    g = utm_georef(SIZE, SIZE)
    p = write_geotiff(d / "nocrs.tif", dem(), GeoRef(g.transform, None, SIZE, SIZE))
    return [p, "-o", d / "out.gpkg"], str(p)


def _no_geotransform(d):
    p = write_without_georeferencing(d / "nogt.tif", dem())
    return [p, "-o", d / "out.gpkg"], str(p)


def _rotated(d):
    t = Affine.translation(500_000.0, 5_200_000.0) @ Affine.rotation(15.0) @ Affine.scale(10.0, -10.0)
    p = write_geotiff(d / "rot.tif", dem(), GeoRef(t, UTM33, SIZE, SIZE))
    return [p, "-o", d / "out.gpkg"], str(p)


def _sheared(d):
    t = Affine(10.0, 3.0, 500_000.0, 0.0, -10.0, 5_200_000.0)
    p = write_geotiff(d / "shear.tif", dem(), GeoRef(t, UTM33, SIZE, SIZE))
    return [p, "-o", d / "out.gpkg", "--allow-rotation"], str(p)


def _all_nodata(d):
    p = write_geotiff(d / "void.tif", np.full((SIZE, SIZE), -9999, np.int16), utm_georef(SIZE, SIZE),
                      nodata=-9999)
    return [p, "-o", d / "out.gpkg"], str(p)


def _all_nan(d):
    p = write_geotiff(d / "nan.tif", np.full((SIZE, SIZE), np.nan, np.float32), utm_georef(SIZE, SIZE))
    return [p, "-o", d / "out.gpkg"], str(p)


def _too_small(d):
    p = write_geotiff(d / "tiny.tif", dem(12, 12), utm_georef(12, 12))
    return [p, "-o", d / "out.gpkg"], str(p)


def _scale_larger_than_raster(d):
    return [good_tif(d), "-o", d / "out.gpkg", "--scales", "30,5000"], str(d / "dem.tif")


def _band_out_of_range(d):
    return [good_tif(d), "-o", d / "out.gpkg", "--band", "4"], str(d / "dem.tif")


def _float64_huge(d):
    z = np.where(dem() > 410.0, 1e300, -1e300).astype(np.float64)
    p = write_geotiff(d / "huge.tif", z, utm_georef(SIZE, SIZE))
    return [p, "-o", d / "out.gpkg"], str(p)


def _float64_huge_z_factor(d):
    # fits float32 after centring (1e30) but not once multiplied by the z factor (1e30 * 1e10)
    z = np.where(dem() > 410.0, 1e30, -1e30).astype(np.float64)
    p = write_geotiff(d / "big.tif", z, utm_georef(SIZE, SIZE))
    return [p, "-o", d / "out.gpkg", "--z-factor", "1e10"], str(p)


def _gcp_only(d):
    from rasterio.control import GroundControlPoint

    gcps = [GroundControlPoint(0, 0, 500000, 5200000), GroundControlPoint(0, SIZE, 500640, 5200000),
            GroundControlPoint(SIZE, 0, 500000, 5199360)]
    p = d / "gcp.tif"
    with rasterio.open(p, "w", driver="GTiff", height=SIZE, width=SIZE, count=1, dtype="float32",
                       gcps=gcps, crs="EPSG:32633") as ds:
        ds.write(dem()[None])
    return [p, "-o", d / "out.gpkg"], str(p)


def _many_bands(d):
    arr = np.stack([dem()] * 5)
    p = write_geotiff(d / "five.tif", arr, utm_georef(SIZE, SIZE))
    return [p, "-o", d / "out.gpkg"], str(p)


def _complex_values(d):
    p = write_geotiff(d / "cplx.tif", dem().astype(np.complex64), utm_georef(SIZE, SIZE))
    return [p, "-o", d / "out.gpkg"], str(p)


def _opt(*extra):
    def build(d):
        return [good_tif(d), "-o", d / "out.gpkg", *extra], None
    return build


def _config(text: str | bytes | None, name="run.toml"):
    def build(d):
        cfg = d / name
        if isinstance(text, bytes):
            cfg.write_bytes(text)
        elif text is not None:
            cfg.write_text(text, encoding="utf-8")
        return [good_tif(d), "-o", d / "out.gpkg", "--config", cfg], str(cfg)
    return build


def _config_folder(d):
    cfg = d / "settings.toml"
    cfg.mkdir()
    return [good_tif(d), "-o", d / "out.gpkg", "--config", cfg], str(cfg)


def _output_folder_missing(d):
    out = d / "not_there" / "out.gpkg"
    return [good_tif(d), "-o", out], str(out)


def _output_under_a_file(d):
    (d / "plain.txt").write_text("a regular file\n")
    out = d / "plain.txt" / "out.gpkg"
    return [good_tif(d), "-o", out], str(out)


def _output_exists(d):
    out = d / "out.gpkg"
    out.write_bytes(b"precious earlier result")
    return [good_tif(d), "-o", out], str(out)


def _output_shapefile_part_exists(d):
    (d / "out.dbf").write_bytes(b"old table")
    out = d / "out.shp"
    return [good_tif(d), "-o", out], str(out)


def _output_unknown_extension(d):
    out = d / "out.kml"
    return [good_tif(d), "-o", out], str(out)


def _output_no_extension(d):
    out = d / "out"
    return [good_tif(d), "-o", out], str(out)


def _output_is_directory(d):
    out = d / "out.gpkg"
    out.mkdir()
    return [good_tif(d), "-o", out], str(out)


def _geojson_without_crs(d):
    p = write_without_georeferencing(d / "nogt.tif", dem())
    out = d / "out.geojson"
    return [p, "-o", out, "--pixel-coordinates", "--scales", "2px,4px"], str(out)


@dataclass(frozen=True)
class Case:
    id: str
    build: Callable[[Path], tuple[list, str | None]]
    code: int
    problem: str  # regular expression the message must match


CASES = [
    # ---- unusable input: exit 3
    Case("text-file", _text_file, 3, "not a raster"),
    Case("empty-file", _empty_file, 3, "empty"),
    Case("truncated-geotiff", _truncated, 3, "cannot read raster.*truncated"),
    Case("corrupt-header", _corrupt_header, 3, "not a raster"),
    Case("empty-folder", _directory, 3, "folder holds no rasters"),  # a folder is a survey of its rasters
    Case("missing-file", _missing, 3, "no such file"),
    Case("no-crs", _no_crs, 3, "no coordinate reference system.*--assume-crs"),
    Case("no-geotransform", _no_geotransform, 3, "no geotransform.*--pixel-coordinates"),
    Case("rotated", _rotated, 3, "rotated.*--allow-rotation"),
    Case("sheared", _sheared, 3, "sheared"),
    Case("all-nodata", _all_nodata, 3, "no valid cells"),
    Case("all-nan", _all_nan, 3, "no valid cells"),
    Case("smaller-than-kernel", _too_small, 3, "too small for scale"),
    Case("scale-larger-than-raster", _scale_larger_than_raster, 3, "too small for scale 5000m"),
    Case("band-out-of-range", _band_out_of_range, 3, "band 4 asked for"),
    Case("float64-1e300", _float64_huge, 3, "overflow"),
    Case("float64-z-factor-overflow", _float64_huge_z_factor, 3, "overflow"),
    Case("gcp-only", _gcp_only, 3, "ground control points"),
    Case("five-untagged-bands", _many_bands, 3, "--band"),
    Case("complex-values", _complex_values, 3, "not real numbers"),
    # ---- invalid settings: exit 2
    Case("band-0", _opt("--band", "0"), 2, "band numbers start at 1"),
    Case("band-negative", _opt("--band", "-1"), 2, "band numbers start at 1"),
    Case("scale-zero", _opt("--scales", "0"), 2, "scale must be positive"),
    Case("scale-zero-km", _opt("--scales", "0km"), 2, "scale must be a positive number"),
    Case("scale-negative", _opt("--scales", "-30"), 2, "cannot read scale '-30'"),
    Case("scale-non-numeric", _opt("--scales", "wide"), 2, "cannot read scale 'wide'"),
    Case("scale-unknown-unit", _opt("--scales", "30ft"), 2, "unknown unit 'ft' in scale '30ft'"),
    Case("scale-mixed-units", _opt("--scales", "30,2px"), 2, "mix metres and pixels"),
    Case("scale-empty", _opt("--scales", ","), 2, "no scales"),
    Case("scale-twice", _opt("--scales", "30,30m"), 2, "twice"),
    Case("low-above-high", _opt("--low-threshold", "5", "--high-threshold", "1"), 2,
         "low threshold must not exceed high threshold"),
    Case("low-multiple-above-high", _opt("--low-noise-multiple", "5", "--high-noise-multiple", "3"), 2,
         "--low-noise-multiple must not exceed --high-noise-multiple"),
    Case("negative-min-length", _opt("--min-length", "-1"), 2, "--min-length must be a number >= 0"),
    Case("nan-min-length", _opt("--min-length", "nan"), 2, "--min-length must be a number >= 0"),
    Case("negative-simplify", _opt("--simplify", "-0.5"), 2, "--simplify must be a number >= 0"),
    Case("z-factor-zero", _opt("--z-factor", "0"), 2, "--z-factor must be a positive number"),
    Case("z-factor-inf", _opt("--z-factor", "inf"), 2, "--z-factor must be a positive number"),
    Case("assume-crs-unknown", _opt("--assume-crs", "EPSG:99999999"), 2, "--assume-crs 'EPSG:99999999' is not a CRS"),
    Case("config-missing", _config(None, "absent.toml"), 2, "no such config file"),
    Case("config-invalid-toml", _config("scales = [30, 60\nmin-length = \n"), 2, "cannot read config file"),
    Case("config-unknown-key", _config("scales = [30]\nsmoothing = 3\n"), 2, "unknown setting 'smoothing'"),
    Case("config-input-key", _config("input_path = 'other.tif'\n"), 2, "unknown setting 'input_path'"),
    Case("config-not-utf8", _config(b"scales = '\xff\xfe'\n"), 2, "not UTF-8"),
    Case("config-is-folder", _config_folder, 2, "is a folder, not a config file"),
    Case("config-table-value", _config("[extract]\n[extract.scales]\na = 1\n"), 2, "must be a value"),
    # ---- output cannot be written: exit 4
    Case("output-folder-missing", _output_folder_missing, 4, "does not exist"),
    Case("output-folder-not-writable", _output_under_a_file, 4, "is a file, not a folder"),
    Case("output-exists", _output_exists, 4, "output exists; pass --overwrite"),
    Case("output-shapefile-part-exists", _output_shapefile_part_exists, 4, "output exists"),
    Case("output-unknown-extension", _output_unknown_extension, 4, r"unknown output format '\.kml'"),
    Case("output-no-extension", _output_no_extension, 4, "unknown output format"),
    Case("output-is-directory", _output_is_directory, 4, "is a folder"),
    Case("geojson-without-crs", _geojson_without_crs, 4, "GeoJSON is always WGS84"),
]


def test_enough_cases():
    assert len(CASES) >= 30
    assert len({c.id for c in CASES}) == len(CASES)


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_bad_input_gives_one_line_and_exit_code(tmp_path, case):
    args, name = case.build(tmp_path)
    before = snapshot(tmp_path)
    result = CliRunner().invoke(cli, ["extract", *map(str, args)], catch_exceptions=False)
    lines = result.stderr.splitlines()
    assert result.exit_code == case.code, result.stderr
    assert len(lines) == 1, result.stderr
    line = lines[0]
    assert line.startswith("lineament: error: "), line
    if name is not None:
        # the reader and writer give the path as typed; the pipeline names the file by its base name
        assert name in line or f" {Path(name).name}: " in line, line
    assert re.search(case.problem, line), line
    assert "Traceback" not in result.output
    assert result.stdout == ""
    # nothing created, nothing changed (no output, no temporary folder)
    assert snapshot(tmp_path) == before


def test_unwritable_folder_by_permission(tmp_path):
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        pytest.skip("root ignores file permissions (covered by the path-under-a-file case)")
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        result = CliRunner().invoke(cli, ["extract", str(good_tif(tmp_path)), "-o", str(locked / "o.gpkg")])
        assert result.exit_code == 4
        assert result.stderr.splitlines() == [f"lineament: error: {locked / 'o.gpkg'}: folder {locked} is not writable"]
        assert list(locked.iterdir()) == []
    finally:
        locked.chmod(0o700)


@pytest.mark.parametrize("args", [["--operator", "sobel"], ["--band", "two"], ["--min-length", "far"],
                                  ["--no-such-option"]])
def test_click_usage_errors_exit_2_without_traceback(tmp_path, args):
    # click's own usage messages may span several lines; the exit code stays 2
    tif = good_tif(tmp_path)
    before = snapshot(tmp_path)
    result = CliRunner().invoke(cli, ["extract", str(tif), "-o", str(tmp_path / "o.gpkg"), *args],
                                catch_exceptions=False)
    assert result.exit_code == 2
    assert "Traceback" not in result.output
    assert snapshot(tmp_path) == before


def test_missing_output_option_is_a_usage_error(tmp_path):
    result = CliRunner().invoke(cli, ["extract", str(good_tif(tmp_path))], catch_exceptions=False)
    assert result.exit_code == 2
    assert "--output" in result.stderr


# ---------------------------------------------------------------------------- must succeed
def _run_ok(tmp_path, tif, *extra):
    out = tmp_path / "out.gpkg"
    result = CliRunner().invoke(cli, ["extract", str(tif), "-o", str(out), "-q", *extra],
                                catch_exceptions=False)
    assert result.exit_code == 0, result.stderr
    assert result.stderr == ""
    with fiona.open(out) as src:
        return [dict(geometry=np.asarray(f.geometry.coordinates), **f.properties) for f in src]


def test_constant_raster_succeeds_with_zero_lines(tmp_path):
    tif = write_geotiff(tmp_path / "flat.tif", np.full((SIZE, SIZE), 250.0, np.float32), utm_georef(SIZE, SIZE))
    assert _run_ok(tmp_path, tif) == []


def test_nan_and_inf_are_voids_not_failures(tmp_path):
    z = dem()
    z[5:15, 5:15] = np.nan
    z[40, 10] = np.inf
    z[50, 50] = -np.inf
    tif = write_geotiff(tmp_path / "holes.tif", z, utm_georef(SIZE, SIZE))
    lines = _run_ok(tmp_path, tif)
    assert lines
    for f in lines:
        assert np.isfinite(f["geometry"]).all()
        assert np.isfinite(f["strength"])


# the step lies between pixel centres 32 and 33 (values > 410 start at column 33),
# i.e. at x = 500000 + (32.5 + 0.5) * 10 m (pixel-corner transform, OGC GeoTIFF PixelIsArea)
STEP_X = 500_000.0 + 33.0 * 10.0


@pytest.mark.parametrize("dtype", ["int32", "uint32", "int64"])
def test_extreme_integer_ranges_do_not_overflow(tmp_path, dtype):
    info = np.iinfo(dtype)
    z = np.where(dem() > 410.0, info.max, info.min).astype(dtype)
    tif = write_geotiff(tmp_path / f"{dtype}.tif", z, utm_georef(SIZE, SIZE))
    lines = _run_ok(tmp_path, tif)
    assert lines
    strengths = np.array([f["strength"] for f in lines])
    assert np.isfinite(strengths).all()
    strongest = lines[int(np.argmax(strengths))]
    # the strongest line sits on the step, within one pixel
    assert np.abs(strongest["geometry"][:, 0] - STEP_X).max() < 10.0
    # strength is the height of the equivalent ideal step (vectorize.Lineament docs): within 10 %
    step = float(info.max) - float(info.min)
    assert 0.9 * step < strongest["strength"] < 1.1 * step


# ---------------------------------------------------------------------------- --debug
def test_debug_shows_the_traceback(tmp_path):
    result = CliRunner().invoke(cli, ["extract", str(tmp_path / "nowhere.tif"), "-o", str(tmp_path / "o.gpkg"),
                                      "--debug"], catch_exceptions=False)
    assert result.exit_code == 3
    assert "Traceback" in result.stderr
    assert result.stderr.splitlines()[-1].startswith("lineament: error: ")


# ---------------------------------------------------------------------------- real processes
def _subprocess(args, cwd):
    env = {**os.environ, "PYTHONWARNINGS": "default"}
    return subprocess.run([sys.executable, "-m", "lineament.cli.main", "extract", *map(str, args)],
                          capture_output=True, text=True, cwd=cwd, env=env, timeout=120)


@pytest.mark.parametrize("case_id", ["truncated-geotiff", "no-geotransform", "scale-unknown-unit",
                                     "output-exists"])
def test_real_process_has_one_line_and_exit_code(tmp_path, case_id):
    case = next(c for c in CASES if c.id == case_id)
    args, name = case.build(tmp_path)
    before = snapshot(tmp_path)
    proc = _subprocess(args, cwd=ROOT)
    assert proc.returncode == case.code, proc.stderr
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("lineament: error: "), proc.stderr
    assert "Traceback" not in proc.stderr + proc.stdout
    if name is not None:
        assert name in lines[0]
    assert snapshot(tmp_path) == before


def test_real_process_debug_prints_traceback(tmp_path):
    proc = _subprocess([tmp_path / "nowhere.tif", "-o", tmp_path / "o.gpkg", "--debug"], cwd=ROOT)
    assert proc.returncode == 3
    assert "Traceback (most recent call last)" in proc.stderr
