"""Data safety (issue 8, "never a lost line"): interrupted runs and untrusted inputs.

* A run killed at seeded moments (SIGKILL, SIGINT) never leaves a partial
  layer at the output path and never damages an existing one: the old file
  is byte-identical, or the new one is complete.  ``--resume`` then finishes
  with the same lines as an uninterrupted run.  SIGINT ends with exit code
  130 and one line on stderr (README "Exit codes").
* Untrusted inputs: the resume cache is read without unpickling, a
  ``--config`` file is data only, and a folder input does not follow a link
  that leads outside the folder.
"""

from __future__ import annotations

import pickle
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import fiona
import numpy as np
import pytest
from click.testing import CliRunner

from conftest import ROOT, step_image, utm_georef, write_geotiff
from lineament.cli.main import cli
from lineament.resume import resume_folder
from lineament.synthetic import fractal_terrain

BIG = 1500
#: Options of every interrupted run: one fine scale, edges only, 144 tiles of 128 px in one process,
#: about two seconds of tile work after the first tile on the development machine (the SIGINT test
#: interrupts up to 0.4 s after the first tile is kept, which must still be inside the run).
RUN_OPTIONS = ["--scales", "20", "--features", "edges", "--tile-size", "128", "--workers", "1", "-q"]


def command(tif: Path, out: Path, *extra: str) -> list[str]:
    return [sys.executable, "-m", "lineament.cli.main", "extract", str(tif), "-o", str(out), *RUN_OPTIONS, *extra]


def layer(path: Path) -> list[tuple]:
    """Features as (WKT with coordinates rounded to 1e-6, sorted attributes), sorted."""
    import shapely

    out = []
    with fiona.open(path) as src:
        for f in src:
            geom = shapely.geometry.shape(f.geometry)
            wkt = shapely.set_precision(geom, 1e-6).wkt
            out.append((wkt, tuple(sorted(f.properties.items()))))
    return sorted(out)


def big_raster(path: Path) -> Path:
    z = fractal_terrain((BIG, BIG), pixel_size_m=10.0, relief_m=15.0, seed=31)
    for angle, offset in ((30.0, 0.0), (100.0, 200.5), (160.0, -310.2)):
        z = z + step_image(BIG, BIG, angle_deg=angle, offset_px=offset, height_step=25.0, blur_px=1.0)
    return write_geotiff(path, (300.0 + z).astype(np.float32), utm_georef(BIG, BIG))


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The big raster, an uninterrupted reference run (and its wall time), and an older valid layer."""
    d = tmp_path_factory.mktemp("safety")
    tif = big_raster(d / "big.tif")
    ref = d / "reference.gpkg"
    t0 = time.perf_counter()
    proc = subprocess.run(command(tif, ref), capture_output=True, text=True, cwd=ROOT, timeout=600)
    seconds = time.perf_counter() - t0
    assert proc.returncode == 0, proc.stderr
    small = write_geotiff(d / "small.tif", (400 + step_image(96, 96, angle_deg=0.0, offset_px=0.3,
                                                                height_step=20.0, blur_px=1.0)),
                          utm_georef(96, 96))
    old = d / "old.gpkg"
    result = CliRunner().invoke(cli, ["extract", str(small), "-o", str(old), "-q", "--scales", "20"])
    assert result.exit_code == 0, result.stderr
    reference = layer(ref)
    assert len(reference) >= 20  # a real layer, so "complete" means something
    assert layer(old) and layer(old) != reference
    return tif, reference, seconds, old


def wait_for_tiles(out: Path, proc: subprocess.Popen, timeout: float = 120.0) -> None:
    """Wait until the run has finished at least one tile (it keeps them in its resume folder)."""
    folder = resume_folder(out)
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout and proc.poll() is None:
        if list(folder.glob("group*/tile_*.npz")):
            return
        time.sleep(0.02)


def check_after_kill(out: Path, old_bytes: bytes | None, reference: list) -> str:
    """The output is absent (no old one), byte-identical to the old one, or the complete new layer."""
    if not out.exists():
        assert old_bytes is None, "the existing output was deleted"
        return "absent"
    data = out.read_bytes()
    if old_bytes is not None and data == old_bytes:
        return "old"
    assert layer(out) == reference, "output is neither the old layer nor the complete new one"
    return "new"


def resume_and_compare(tif: Path, out: Path, reference: list) -> None:
    proc = subprocess.run(command(tif, out, "--resume", "--overwrite"), capture_output=True, text=True,
                          cwd=ROOT, timeout=600)
    assert proc.returncode == 0, proc.stderr
    assert layer(out) == reference
    assert not resume_folder(out).exists()


# seeded moments: fractions of the uninterrupted run's wall time (start-up included), spread over
# loading, tiling and writing
# (one per third of [0.5, 1.05], seeded jitter inside each)
KILL_FRACTIONS = [float(round(0.5 + 0.55 * (k + u) / 3, 3)) for k, u in enumerate(np.random.default_rng(8).uniform(0, 1, 3))]


KILL_CASES = [(f, True) for f in KILL_FRACTIONS] + [(KILL_FRACTIONS[0], False)]


@pytest.mark.parametrize("fraction,existing", KILL_CASES,
                         ids=[f"{f:.2f}-{'over-existing' if e else 'fresh'}" for f, e in KILL_CASES])
def test_sigkill_never_damages_output_and_resume_finishes(tmp_path, runs, fraction, existing):
    tif, reference, seconds, old = runs
    out = tmp_path / "lines.gpkg"
    old_bytes = None
    if existing:
        shutil.copyfile(old, out)
        old_bytes = out.read_bytes()
    proc = subprocess.Popen(command(tif, out, "--overwrite"), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            cwd=ROOT)
    try:
        proc.wait(timeout=fraction * seconds)
    except subprocess.TimeoutExpired:
        proc.send_signal(signal.SIGKILL)
    _, stderr = proc.communicate(timeout=120)
    assert proc.returncode in (0, -signal.SIGKILL), stderr
    check_after_kill(out, old_bytes, reference)
    # nothing but the output, its resume folder and at worst an orphaned temporary folder
    assert {p.name for p in tmp_path.iterdir()} <= {"lines.gpkg", "lines.gpkg.lineament-resume"} | {
        p.name for p in tmp_path.glob(".lineament-*")}
    resume_and_compare(tif, out, reference)


@pytest.mark.parametrize("extra_delay", [0.0, 0.4])
def test_sigint_ends_with_130_one_line_and_old_output(tmp_path, runs, extra_delay):
    tif, reference, seconds, old = runs
    out = tmp_path / "lines.gpkg"
    shutil.copyfile(old, out)
    old_bytes = out.read_bytes()
    proc = subprocess.Popen(command(tif, out, "--overwrite"), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            cwd=ROOT, text=True)
    wait_for_tiles(out, proc)
    time.sleep(extra_delay)
    assert proc.poll() is None, f"the run ended before it could be interrupted: {proc.communicate()}"
    proc.send_signal(signal.SIGINT)
    stdout, stderr = proc.communicate(timeout=120)
    assert proc.returncode == 130, stderr
    assert stderr.splitlines() == ["lineament: interrupted; no output was written"]
    assert stdout == ""
    assert out.read_bytes() == old_bytes
    assert not list(tmp_path.glob(".lineament-*"))
    # finished tiles are kept for --resume (README), and the resumed run gives the reference lines
    assert list(resume_folder(out).glob("group*/tile_*.npz"))
    resume_and_compare(tif, out, reference)


def test_sigint_during_start_up_ends_with_130_and_one_line(tmp_path, runs):
    tif, reference, seconds, old = runs
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-c", "import lineament.cli.main"], check=True, cwd=ROOT, timeout=120)
    import_seconds = time.perf_counter() - t0
    out = tmp_path / "lines.gpkg"
    proc = subprocess.Popen(command(tif, out), stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=ROOT, text=True)
    time.sleep(0.5 * import_seconds)
    proc.send_signal(signal.SIGINT)
    stdout, stderr = proc.communicate(timeout=120)
    assert not out.exists() or proc.returncode == 0
    assert (proc.returncode, stderr.splitlines()) == (130, ["lineament: interrupted; no output was written"])


# ---------------------------------------------------------------------------- untrusted inputs
class _Marker:
    """Unpickling this creates a file: proof that a pickle was loaded."""

    def __init__(self, path: str) -> None:
        self.path = path

    def __reduce__(self):
        return (Path.touch, (Path(self.path),))


def _small_dem(folder: Path) -> Path:
    z = 400.0 + step_image(128, 128, angle_deg=10.0, offset_px=0.3, height_step=20.0, blur_px=1.0)
    return write_geotiff(folder / "dem.tif", z.astype(np.float32), utm_georef(128, 128))


def test_resume_cache_is_never_unpickled(tmp_path):
    # numpy: np.load(..., allow_pickle=False) refuses object arrays instead of unpickling them
    # (numpy.load documentation).  Plant object arrays whose unpickling creates a marker file under
    # every cache file name a resumed run reads, and resume.
    tif = _small_dem(tmp_path)
    out = tmp_path / "lines.gpkg"
    args = ["extract", str(tif), "-o", str(out), "-q", "--scales", "20", "--tile-size", "64", "--workers", "1"]
    # a first run interrupted before writing: it keeps its resume folder (key.json, tiles) as a real one
    import lineament.cli.extract as extract_module

    def interrupt(*a, **k):
        raise KeyboardInterrupt

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(extract_module, "write_lines", interrupt)
        interrupted = CliRunner().invoke(cli, args)
    assert interrupted.exit_code == 130
    group = resume_folder(out) / "group0"
    assert (group / "key.json").exists()
    marker = tmp_path / "unpickled.marker"
    planted = sorted(group.glob("tile_*.npz")) + [group / "noise_0.npz"]
    assert len(planted) > 2
    for k, p in enumerate(planted):
        if k % 2:
            # an .npz holding an object array (numpy stores it as a pickle inside the archive)
            np.savez(p.with_suffix(""), p_n=np.array([_Marker(str(marker))], dtype=object),
                     blocks=np.array([_Marker(str(marker))], dtype=object))  # np.savez appends .npz
        else:
            # a bare pickle stream under the cache's file name
            p.write_bytes(pickle.dumps(_Marker(str(marker))))
    # the plants work: loading them with pickles allowed runs the payload (numpy.load documentation)
    probe = tmp_path / "probe.marker"
    probe_file = tmp_path / "probe.npz"
    probe_file.write_bytes(pickle.dumps(_Marker(str(probe))))
    np.load(probe_file, allow_pickle=True)
    assert probe.exists()
    result = CliRunner().invoke(cli, [*args, "--resume"])
    assert not marker.exists()
    assert result.exit_code == 0, result.stderr
    assert "Traceback" not in result.output
    # the planted tiles were ignored and recomputed: the lines equal a fresh run's
    fresh = tmp_path / "fresh.gpkg"
    assert CliRunner().invoke(cli, [*args[:3], str(fresh), *args[4:]]).exit_code == 0
    assert layer(out) == layer(fresh)


CODE_LIKE = "__import__('os').system('touch {marker}')"


@pytest.mark.parametrize("key", ["scales", "assume-crs", "z-factor", "operator", "band"])
def test_config_values_are_data_not_code(tmp_path, key):
    # TOML 1.0: a quoted value is a string; tomllib parses and never evaluates.  The string then
    # fails validation like any other bad value: exit 2, no traceback, no output, no side effect.
    tif = _small_dem(tmp_path)
    marker = tmp_path / "marker"
    cfg = tmp_path / "run.toml"
    cfg.write_text(f'{key} = "{CODE_LIKE.format(marker=marker)}"\n', encoding="utf-8")
    out = tmp_path / "lines.gpkg"
    result = CliRunner().invoke(cli, ["extract", str(tif), "-o", str(out), "--config", str(cfg)])
    assert result.exit_code == 2, result.stderr
    assert "Traceback" not in result.output
    assert "__import__" in result.stderr  # the value is reported back as the text it is
    assert not marker.exists()
    assert not out.exists() and not resume_folder(out).exists()


@pytest.mark.parametrize("key", ["scales", "assume-crs"])
def test_config_string_options_fail_in_one_line(tmp_path, key):
    tif = _small_dem(tmp_path)
    cfg = tmp_path / "run.toml"
    cfg.write_text(f'{key} = "{CODE_LIKE.format(marker=tmp_path / "marker")}"\n', encoding="utf-8")
    result = CliRunner().invoke(cli, ["extract", str(tif), "-o", str(tmp_path / "o.gpkg"), "--config", str(cfg)])
    lines = result.stderr.splitlines()
    assert result.exit_code == 2 and len(lines) == 1 and lines[0].startswith("lineament: error:"), result.stderr


@pytest.mark.parametrize("key", ["z-factor", "band", "operator"])
def test_config_typed_options_fail_in_one_line_naming_the_file(tmp_path, key):
    # README "Exit codes": errors are one line, lineament: error: FILE: problem
    tif = _small_dem(tmp_path)
    cfg = tmp_path / "run.toml"
    cfg.write_text(f'{key} = "{CODE_LIKE.format(marker=tmp_path / "marker")}"\n', encoding="utf-8")
    result = CliRunner().invoke(cli, ["extract", str(tif), "-o", str(tmp_path / "o.gpkg"), "--config", str(cfg)])
    lines = result.stderr.splitlines()
    assert result.exit_code == 2
    assert len(lines) == 1 and lines[0].startswith("lineament: error:") and str(cfg) in lines[0], result.stderr


def test_folder_input_skips_links_leading_outside(tmp_path):
    inside = tmp_path / "survey"
    inside.mkdir()
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    _small_dem(inside)
    foreign = _small_dem(outside)
    link = inside / "linked.tif"
    try:
        link.symlink_to(foreign)
    except OSError:
        pytest.skip("symbolic links are not available here")
    out = tmp_path / "lines.gpkg"
    result = CliRunner().invoke(cli, ["extract", str(inside), "-o", str(out), "--scales", "20"])
    assert result.exit_code == 0, result.stderr
    notes = [ln for ln in result.stderr.splitlines() if ln.startswith("lineament: note:")]
    assert notes == [f"lineament: note: {link}: skipped, it links outside {inside}"]
    assert "Traceback" not in result.output
    with fiona.open(out) as src:
        assert {f.properties["source"] for f in src} == {"dem.tif"}
    # a link to a raster inside the folder is an ordinary member (not skipped)
    out2 = tmp_path / "lines2.gpkg"
    link.unlink()
    (inside / "again.tif").symlink_to(inside / "dem.tif")
    result = CliRunner().invoke(cli, ["extract", str(inside), "-o", str(out2), "--scales", "20", "-q"])
    assert result.exit_code == 0, result.stderr
    assert "note" not in result.stderr


def test_interrupt_after_the_work_is_done_is_ignored():
    # Once a command has finished (its output complete), the entry point ignores Ctrl-C, so an
    # interrupt during interpreter shutdown cannot end the process by the signal with no message.
    code = ("import signal, sys\n"
            "from lineament.cli.main import main\n"
            "sys.argv = ['lineament', '--version']\n"
            "try:\n    main()\nexcept SystemExit as exc:\n    code = exc.code\n"
            "print(code, signal.getsignal(signal.SIGINT) is signal.SIG_IGN)\n")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip().splitlines()[-1] == "0 True"
