"""The ``lineament extract`` command on good input: formats, options, config files, messages."""

from __future__ import annotations

import json

import fiona
import numpy as np
import pytest
from affine import Affine
from click.testing import CliRunner
from pyproj import CRS

from conftest import UTM33, step_image, utm_georef, write_geotiff
from lineament._version import __version__
from lineament.cli.common import CAUTION
from lineament.cli.main import cli
from lineament.errors import EXIT_CODES
from lineament.georef import GeoRef
from lineament.vector_io import read_run_metadata

# scarp_raster (conftest): the edge is at column 128.3 (pixel-centre index), i.e. at
# x = 500000 + (128.3 + 0.5) * 10 m (OGC GeoTIFF PixelIsArea, corner-based transform)
SCARP_X = 500_000.0 + (128.3 + 0.5) * 10.0


def run(*args: str):
    """Invoke the command in-process; unexpected exceptions surface in the test."""
    return CliRunner().invoke(cli, list(map(str, args)), catch_exceptions=False)


def test_extract_writes_lines_at_the_scarp(scarp_raster, tmp_path):
    path, _ = scarp_raster
    out = tmp_path / "lines.gpkg"
    result = run("extract", path, "-o", out)
    assert result.exit_code == 0, result.stderr
    assert result.stdout == ""
    assert "Traceback" not in result.output
    assert f"scarp.tif: {len(list(fiona.open(out)))} lines" in result.stderr
    assert CAUTION in result.stderr
    with fiona.open(out) as src:
        feats = list(src)
        assert CRS.from_wkt(src.crs_wkt).equals(UTM33)
    assert feats
    for f in feats:
        xy = np.asarray(f.geometry.coordinates)
        # one pixel (10 m) of the analytic edge position
        assert np.abs(xy[:, 0] - SCARP_X).max() < 10.0
        assert min(f.properties["azimuth_deg"], 180.0 - f.properties["azimuth_deg"]) < 2.0
        assert f.properties["source"] == "scarp.tif"


@pytest.mark.parametrize("ext", [".gpkg", ".fgb", ".shp", ".geojson", ".json"])
def test_every_format_through_the_command(scarp_raster, tmp_path, ext):
    path, _ = scarp_raster
    out = tmp_path / f"lines{ext}"
    result = run("extract", path, "-o", out, "-q")
    assert result.exit_code == 0, result.stderr
    assert result.stderr == ""
    with fiona.open(out) as src:
        n = len(list(src))
    assert n > 0
    assert read_run_metadata(out)["lines"] == n


def test_overwrite_flag_replaces(scarp_raster, tmp_path):
    path, _ = scarp_raster
    out = tmp_path / "lines.gpkg"
    assert run("extract", path, "-o", out, "-q", "--scales", "2px").exit_code == 0
    result = run("extract", path, "-o", out, "-q", "--scales", "4px,8px", "--overwrite")
    assert result.exit_code == 0, result.stderr
    assert read_run_metadata(out)["settings"]["scales"] == ["4px", "8px"]


def test_config_file_sets_options_and_command_line_wins(scarp_raster, tmp_path):
    path, _ = scarp_raster
    cfg = tmp_path / "run.toml"
    cfg.write_text('scales = ["30", "60"]\nmin-length = 500\nz_factor = 2.0\n', encoding="utf-8")
    out = tmp_path / "a.gpkg"
    result = run("extract", path, "-o", out, "-q", "--config", cfg)
    assert result.exit_code == 0, result.stderr
    s = read_run_metadata(out)["settings"]
    assert s["scales"] == ["30m", "60m"] and s["min_length_m"] == 500.0 and s["z_factor"] == 2.0
    out2 = tmp_path / "b.gpkg"
    result = run("extract", path, "-o", out2, "-q", "--config", cfg, "--min-length", "250")
    assert result.exit_code == 0, result.stderr
    assert read_run_metadata(out2)["settings"]["min_length_m"] == 250.0


def test_config_file_section_named_after_the_command(scarp_raster, tmp_path):
    path, _ = scarp_raster
    cfg = tmp_path / "run.toml"
    cfg.write_text("[extract]\nscales = [40]\noperator = \"dog\"\n", encoding="utf-8")
    out = tmp_path / "a.gpkg"
    result = run("extract", path, "-o", out, "-q", "--config", cfg)
    assert result.exit_code == 0, result.stderr
    s = read_run_metadata(out)["settings"]
    assert s["scales"] == ["40m"] and s["operator"] == "dog"


def test_assume_crs_pixel_coordinates_and_rotation(tmp_path):
    z = 400.0 + step_image(64, 64, angle_deg=0.0, offset_px=0.8, height_step=20.0, blur_px=1.0)
    g = utm_georef(64, 64)
    nocrs = write_geotiff(tmp_path / "nocrs.tif", z, GeoRef(g.transform, None, 64, 64))
    out = tmp_path / "a.gpkg"
    result = run("extract", nocrs, "-o", out, "-q", "--assume-crs", "EPSG:32633")
    assert result.exit_code == 0, result.stderr
    with fiona.open(out) as src:
        assert CRS.from_wkt(src.crs_wkt).equals(UTM33)

    out = tmp_path / "b.gpkg"
    result = run("extract", nocrs, "-o", out, "-q", "--pixel-coordinates", "--scales", "2px,4px")
    assert result.exit_code == 0, result.stderr
    with fiona.open(out) as src:
        assert not src.crs_wkt

    rot = Affine.translation(500_000.0, 5_200_000.0) @ Affine.rotation(20.0) @ Affine.scale(10.0, -10.0)
    rotated = write_geotiff(tmp_path / "rot.tif", z, GeoRef(rot, UTM33, 64, 64))
    out = tmp_path / "c.gpkg"
    result = run("extract", rotated, "-o", out, "-q", "--allow-rotation")
    assert result.exit_code == 0, result.stderr
    assert out.exists()


def test_band_option_is_recorded(tmp_path):
    z = step_image(64, 64, angle_deg=0.0, offset_px=0.8, height_step=200.0, blur_px=1.0)
    rgb = np.stack([z, z[::-1], z.T]).astype(np.uint8)
    path = write_geotiff(tmp_path / "rgb.tif", rgb, utm_georef(64, 64), photometric="RGB")
    out = tmp_path / "a.gpkg"
    result = run("extract", path, "-o", out, "-q", "--band", "3")
    assert result.exit_code == 0, result.stderr
    assert read_run_metadata(out)["settings"]["band"] == 3


def test_version_and_help():
    result = run("--version")
    assert result.exit_code == 0 and __version__ in result.stdout
    result = run("extract", "--help")
    assert result.exit_code == 0
    for option in ("--scales", "--overwrite", "--assume-crs", "--pixel-coordinates", "--allow-rotation"):
        assert option in result.stdout


def test_exit_codes_are_documented():
    # the codes the command uses (errors.py) all have a description
    from lineament.errors import InputError, LineamentError, OutputError, RasterReadError, SettingsError

    for cls in (LineamentError, SettingsError, InputError, RasterReadError, OutputError):
        assert cls.exit_code in EXIT_CODES
    assert {0, 1, 2, 3, 4} <= set(EXIT_CODES)


def test_sidecar_metadata_after_command(scarp_raster, tmp_path):
    path, _ = scarp_raster
    out = tmp_path / "lines.fgb"
    result = run("extract", path, "-o", out)
    assert result.exit_code == 0
    meta = json.loads((tmp_path / "lines.fgb.run.json").read_text(encoding="utf-8"))
    assert meta["source"] == "scarp.tif"
    assert len([s for s in meta["scales"] if s["kind"] == "edge"]) == 3


def test_library_warnings_become_single_lines():
    # a command that triggers a Python warning and a GDAL message relayed through logging
    import logging
    import warnings

    import click

    from lineament.cli.common import handle_errors

    @click.command()
    @click.option("--debug", is_flag=True)
    @handle_errors
    def noisy(debug):
        warnings.warn("first line\nsecond line", UserWarning)
        logging.getLogger("rasterio._env").warning("CPLE_AppDefined in a GDAL\nmessage")
        logging.getLogger("fiona._env").info("below warning level: not shown")

    with warnings.catch_warnings():
        warnings.simplefilter("always")  # pytest turns warnings into errors; here they must be shown
        result = CliRunner().invoke(noisy, [], catch_exceptions=False)
    assert result.exit_code == 0
    assert result.stderr.splitlines() == [
        "lineament: warning: first line second line (UserWarning)",
        "lineament: warning: CPLE_AppDefined in a GDAL message",
    ]
    # the handlers are removed afterwards
    assert not any(type(h).__name__ == "_OneLineHandler" for h in logging.getLogger("rasterio").handlers)


def test_unexpected_errors_are_one_line_with_exit_code_1():
    import click

    from lineament.cli.common import handle_errors

    @click.command()
    @click.option("--debug", is_flag=True)
    @handle_errors
    def broken(debug):
        raise ZeroDivisionError("division by zero\nin a place")

    result = CliRunner().invoke(broken, [], catch_exceptions=False)
    assert result.exit_code == 1
    assert result.stderr.splitlines() == [
        "lineament: error: unexpected ZeroDivisionError: division by zero in a place "
        "(run again with --debug and report it)"]
    result = CliRunner().invoke(broken, ["--debug"], catch_exceptions=False)
    assert result.exit_code == 1
    assert "Traceback" in result.stderr


def test_output_crs_reprojects_the_written_lines(scarp_raster, tmp_path):
    # Reference: pyproj Transformer from the raster's CRS (UTM 33N) to ETRS89 / LAEA Europe (EPSG:3035).
    from pyproj import Transformer

    path, _ = scarp_raster
    native, laea = tmp_path / "native.gpkg", tmp_path / "laea.gpkg"
    for out, extra in ((native, []), (laea, ["--output-crs", "EPSG:3035"])):
        result = CliRunner().invoke(cli, ["extract", str(path), "-o", str(out), "-q", "--features", "edges", *extra])
        assert result.exit_code == 0, result.stderr
    with fiona.open(native) as a, fiona.open(laea) as b:
        assert CRS.from_wkt(b.crs_wkt).equals(CRS.from_epsg(3035))
        fa, fb = list(a), list(b)
    assert len(fa) == len(fb) > 0
    tr = Transformer.from_crs(32633, 3035, always_xy=True)
    for x, y in zip(fa, fb):
        ax, ay = np.asarray(x["geometry"]["coordinates"]).T
        np.testing.assert_allclose(np.column_stack(tr.transform(ax, ay)), np.asarray(y["geometry"]["coordinates"]),
                                   atol=1e-6)
        assert x["properties"]["length_m"] == y["properties"]["length_m"]  # ground length does not change
