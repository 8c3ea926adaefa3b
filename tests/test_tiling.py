"""Tile-by-tile extraction: same lines whatever the tiling, worker count or executor."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from affine import Affine

from conftest import step_image, utm_georef, write_geotiff
from lineament import ExtractionSettings, extract_array, extract_file
from lineament.pipeline import serial_executor
from lineament.resume import TileCache
from lineament.survey import extract_survey
from lineament.synthetic import fractal_terrain
from lineament.tiling import ArraySource, tile_grid


def _scene(n=320, seed=3):
    """Terrain with scarps through tile corners and edges, plus a void."""
    z = fractal_terrain((n, n), pixel_size_m=10.0, relief_m=15.0, seed=seed)
    z = z + step_image(n, n, angle_deg=45.0, offset_px=0.0, height_step=25.0, blur_px=1.0)  # through (160, 160)
    z = z + step_image(n, n, angle_deg=0.0, offset_px=-32.5, height_step=20.0, blur_px=1.0)  # along col 127
    z = z + step_image(n, n, angle_deg=90.0, offset_px=0.0, height_step=-18.0, blur_px=1.0)
    valid = np.ones((n, n), bool)
    valid[40:70, 220:260] = False
    return z.astype(np.float32), valid, utm_georef(n, n)


def _coords(result):
    return [np.asarray(ln.geometry.coords) for ln in result.lines]


def _assert_same_lines(a, b, atol_px=1e-6, pixel=10.0):
    ca, cb = _coords(a), _coords(b)
    assert len(ca) == len(cb)
    for x, y in zip(ca, cb):
        assert x.shape == y.shape
        np.testing.assert_allclose(x, y, rtol=0, atol=atol_px * pixel)
    strip = lambda ln: {k: v for k, v in ln.properties().items() if k != "source"}  # noqa: E731
    assert [strip(ln) for ln in a.lines] == [strip(ln) for ln in b.lines]


@pytest.fixture(scope="module")
def scene():
    return _scene()


@pytest.fixture(scope="module")
def whole(scene):
    z, valid, g = scene
    return extract_array(z, g, ExtractionSettings(scales="20,40"), valid=valid, tile_size=4096)


def test_tile_grid_covers_every_pixel_once():
    tiles = tile_grid((300, 250), 64, (10, 12))
    cover = np.zeros((300, 250), int)
    for t in tiles:
        cover[t.core.row0:t.core.row1, t.core.col0:t.core.col1] += 1
        r0, c0, r1, c1 = t.window
        assert r0 == max(0, t.core.row0 - 10) and c1 == min(250, t.core.col1 + 12)
    assert (cover == 1).all()


@pytest.mark.parametrize("tile_size", [64, 100, 160])
def test_lines_do_not_depend_on_tile_size(scene, whole, tile_size):
    # Issue requirement: same count, vertices within 1e-6 px, whether whole or tiled.
    z, valid, g = scene
    tiled = extract_array(z, g, ExtractionSettings(scales="20,40"), valid=valid, tile_size=tile_size)
    assert tiled.tiles > 1 and whole.tiles == 1
    assert len(whole.lines) >= 3
    _assert_same_lines(whole, tiled)


@pytest.mark.parametrize("tile_size", [64, 96, 200])
@pytest.mark.parametrize("features", ["edges", "edges,valleys,ridges"])
def test_decimated_scales_do_not_depend_on_tile_size(scene, tile_size, features):
    # 60 and 120 m (6 and 12 px) are filtered on grids decimated by 2 and 4 (lineament.pyramid); each
    # scale is filtered on its own halo around the core, the 20 m scale on a much smaller window
    # than the 120 m one.  Tile sizes are rounded up to multiples of 4, so 96 stays and 200 stays.
    # Noise thresholds (measured on fixed blocks) and, so that the 120 m scale has lines on this
    # small scene, absolute ones.
    z, valid, g = scene
    for s, coarsest_with_lines in ((ExtractionSettings(scales="20,60,120", features=features), 60.0),
                                   (ExtractionSettings(scales="20,60,120", features=features, high_threshold=6.0,
                                                       low_threshold=2.0), 120.0)):
        whole = extract_array(z, g, s, valid=valid, tile_size=4096)
        tiled = extract_array(z, g, s, valid=valid, tile_size=tile_size)
        assert tiled.tiles > 1 and whole.tiles == 1
        assert any(ln.scale_m == coarsest_with_lines for ln in whole.lines)
        _assert_same_lines(whole, tiled)


def test_lines_cross_tile_seams_whole():
    # a diagonal scarp through the corner shared by four 160-px tiles comes out as one line
    n = 320
    g = utm_georef(n, n)
    z = fractal_terrain((n, n), pixel_size_m=10.0, relief_m=2.0, seed=4)
    z = (z + step_image(n, n, angle_deg=45.0, offset_px=0.0, height_step=25.0, blur_px=1.0)).astype(np.float32)
    tiled = extract_array(z, g, ExtractionSettings(scales="20"), tile_size=160)
    assert tiled.tiles == 4
    x, y = g.pixel_to_map(np.array([40.0, 280.0]), np.array([40.0, 280.0]))
    diagonal = shapely.LineString(np.column_stack((x, y)))
    through = [ln for ln in tiled.lines if ln.geometry.intersection(diagonal.buffer(10)).length > 2000]
    assert len(through) == 1


def test_worker_count_does_not_change_output(scene, whole):
    z, valid, g = scene
    parallel = extract_array(z, g, ExtractionSettings(scales="20,40"), valid=valid, tile_size=100, workers=2)
    _assert_same_lines(whole, parallel)


def test_file_tiles_equal_array(tmp_path, scene, whole):
    z, valid, g = scene
    tif = write_geotiff(tmp_path / "scene.tif", np.where(valid, z, -9999).astype(np.float32), g, nodata=-9999)
    from_file = extract_file(tif, ExtractionSettings(scales="20,40"), tile_size=128)
    _assert_same_lines(whole, from_file)
    assert {ln.source for ln in from_file.lines} == {"scene.tif"}


def test_dask_local_cluster_equals_local_run(tmp_path, scene, whole):
    distributed = pytest.importorskip("dask.distributed")
    z, valid, g = scene
    tif = write_geotiff(tmp_path / "scene.tif", np.where(valid, z, -9999).astype(np.float32), g, nodata=-9999)
    local = extract_file(tif, ExtractionSettings(scales="20,40"), tile_size=128)
    # loopback only, two single-threaded worker processes
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        remote = extract_file(tif, ExtractionSettings(scales="20,40"), tile_size=128, cluster=cluster.scheduler_address)
    _assert_same_lines(local, remote)


def test_two_tile_mosaic_gives_one_line_across_the_seam(tmp_path):
    # a scarp planted across the seam of two rasters on one grid comes out as one line
    n = 160
    g = utm_georef(n, 2 * n)
    z = 100 + step_image(n, 2 * n, angle_deg=80.0, offset_px=0.3, height_step=20.0, blur_px=1.0)
    z = z + fractal_terrain((n, 2 * n), pixel_size_m=10.0, relief_m=3.0, seed=9)
    left = write_geotiff(tmp_path / "a_left.tif", z[:, :n], g.window(0, 0, n, n))
    right = write_geotiff(tmp_path / "b_right.tif", z[:, n:], g.window(0, n, n, n))
    results = extract_survey([str(right), str(left)], ExtractionSettings(scales="20"))
    assert len(results) == 1 and results[0].georef.shape == (n, 2 * n)
    crossing = [ln for ln in results[0].lines if ln.length_m > 1500]
    assert len(crossing) == 1
    xs = np.asarray(crossing[0].geometry.coords)[:, 0]
    seam_x = g.transform.c + n * 10.0
    assert xs.min() < seam_x - 300 and xs.max() > seam_x + 300
    assert {ln.source for ln in results[0].lines} <= {"a_left.tif", "b_right.tif"}
    whole = extract_array(z.astype(np.float32), g, ExtractionSettings(scales="20"))
    assert [np.asarray(a.geometry.coords).round(6).tolist() for a in whole.lines] == \
        [np.asarray(b.geometry.coords).round(6).tolist() for b in results[0].lines]


def test_resumed_run_equals_uninterrupted(tmp_path, scene, whole):
    z, valid, g = scene
    source = ArraySource(z, valid, g, "array")
    from lineament.pipeline import run_extraction

    class Interrupt(Exception):
        pass

    def dying_executor(tasks, on_done=None):
        # finishes three tiles, then the run is "killed"
        out = []
        for k, t in enumerate(tasks):
            if on_done is not None and k == 3:
                raise Interrupt
            out.append(serial_executor([t])[0])
            if on_done:
                on_done(k, out[-1])
        return out

    key = {"test": 1}
    with pytest.raises(Interrupt):
        run_extraction(source, ExtractionSettings(scales="20,40"), tile_size=100, executor=dying_executor,
                       cache=TileCache(tmp_path / "cache", key, resume=False))
    cache = TileCache(tmp_path / "cache", key, resume=True)
    resumed = run_extraction(source, ExtractionSettings(scales="20,40"), tile_size=100, cache=cache)
    assert cache.reused == 3
    _assert_same_lines(whole, resumed)
    # a different key starts afresh
    fresh = TileCache(tmp_path / "cache", {"test": 2}, resume=True)
    assert not list((tmp_path / "cache").glob("tile_*.npz")) and fresh.reused == 0


def test_survey_of_inputs_in_two_crss_is_written_in_the_first_ones(tmp_path):
    # Two scarps: one raster in UTM 33N, one in UTM 34N (EPSG:32634).  They are processed
    # separately and written to one layer in the first input's CRS (sorted paths), each line with
    # its own source; the command says what it did.  Reference: pyproj for the reprojection.
    from click.testing import CliRunner
    from pyproj import CRS, Transformer

    import fiona
    from lineament.cli.main import cli

    n = 160
    g33 = utm_georef(n, n)
    z = (100 + step_image(n, n, angle_deg=20.0, offset_px=0.3, height_step=20.0, blur_px=1.0)).astype(np.float32)
    a = write_geotiff(tmp_path / "a_utm33.tif", z, g33)
    g34 = type(g33)(Affine(10, 0, 300000, 0, -10, 5200000), CRS.from_epsg(32634), n, n)
    b = write_geotiff(tmp_path / "b_utm34.tif", z, g34)
    out = tmp_path / "survey.gpkg"
    result = CliRunner().invoke(cli, ["extract", str(b), str(a), "-o", str(out), "--features", "edges",
                                      "--scales", "20"])
    assert result.exit_code == 0, result.stderr
    assert "2 CRSs" in result.stderr
    with fiona.open(out) as src:
        assert CRS.from_wkt(src.crs_wkt).equals(CRS.from_epsg(32633))
        feats = list(src)
    sources = {f["properties"]["source"] for f in feats}
    assert sources == {"a_utm33.tif", "b_utm34.tif"}
    # the UTM 34N raster's lines land where pyproj puts that raster's footprint in UTM 33N
    tr = Transformer.from_crs(32634, 32633, always_xy=True)
    fx, fy = tr.transform([300000, 301600], [5200000, 5198400])
    for f in feats:
        if f["properties"]["source"] == "b_utm34.tif":
            xs, ys = np.asarray(f["geometry"]["coordinates"]).T
            assert min(fx) - 50 < xs.min() and xs.max() < max(fx) + 50
            assert min(fy) - 50 < ys.min() and ys.max() < max(fy) + 50


def test_rasters_far_apart_on_one_grid_are_not_one_mosaic(tmp_path):
    # Same CRS and pixel grid, but 2 km apart: two separate runs, not one mosaic full of voids;
    # the two touching ones form a mosaic.
    from lineament.raster_io import open_raster
    from lineament.tiling import FileSource, MosaicSource, group_inputs

    z = np.zeros((100, 100), np.float32)
    g = utm_georef(100, 100)
    a = write_geotiff(tmp_path / "a.tif", z, g)
    b = write_geotiff(tmp_path / "b.tif", z, g.window(0, 100, 100, 100))  # touches a on its east edge
    c = write_geotiff(tmp_path / "c.tif", z, g.window(0, 300, 100, 100))  # 2 km further east
    sources = group_inputs([open_raster(str(p)) for p in (c, b, a)])
    assert [type(s) for s in sources] == [MosaicSource, FileSource]
    assert [i.source for i in sources[0].infos] == ["a.tif", "b.tif"]
    assert sources[1].source == "c.tif"


def test_spread_sample_covers_rows_and_columns():
    # Eight of an 8 x 8 grid: one per row and one per column (the golden-ratio Kronecker sequence
    # visits every eighth of [0, 1) in its first eight terms; Niederreiter 1992, chapter 5),
    # where every eighth tile in row-major order would all lie in one column.
    from lineament.tiling import spread_sample

    tiles = tile_grid((4096, 4096), 512, (100, 100))
    chosen = spread_sample(tiles, 8)
    assert len(chosen) == 8
    assert len({t.core.row0 for t in chosen}) == 8 and len({t.core.col0 for t in chosen}) == 8
    assert chosen == spread_sample(tiles, 8)  # deterministic
    assert spread_sample(tiles[:5], 8) == tiles[:5]


def test_serial_executor_overlaps_tiles_but_reports_in_order(scene, whole):
    # The serial executor filters a tile while the traces of the one before finish; results and
    # on_done calls come in task order and equal each task run alone (lineament.pipeline).
    from lineament.pipeline import run_extraction, run_tile_task

    z, valid, g = scene
    source = ArraySource(z, valid, g, "array")
    seen = []

    def checking_executor(tasks, on_done=None):
        alone = [run_tile_task(t) for t in tasks] if tasks[0][0] == "trace" else None

        def done(k, res):
            seen.append(k)
            if alone is not None:
                assert [p[:2] for p in res.pieces] == [p[:2] for p in alone[k].pieces]
                for a, b in zip(res.pieces, alone[k].pieces):
                    assert np.array_equal(a[2], b[2]) and np.array_equal(a[3], b[3])
                assert len(res.fragments) == len(alone[k].fragments)
            if on_done:
                on_done(k, res)

        return serial_executor(tasks, done)

    out = run_extraction(source, ExtractionSettings(scales="20,40"), tile_size=100, executor=checking_executor)
    n_tiles = out.tiles
    assert n_tiles > 3 and seen[-n_tiles:] == list(range(n_tiles))
    _assert_same_lines(whole, out)


def test_serial_executor_error_waits_for_traces_handed_over(scene, monkeypatch):
    # An error while a tile is filtered propagates once the traces of the tile before are done,
    # so no tracing thread is left working for a run that has ended.
    import lineament.pipeline as pipeline

    z, valid, g = scene
    source = ArraySource(z, valid, g, "array")
    traced, calls = [], []
    real_trace, real_levels = pipeline._trace_one, pipeline._window_level_sets

    def slow_trace(plan, item):
        import time

        time.sleep(0.05)
        res = real_trace(plan, item)
        traced.append(item[0])
        return res

    def failing_levels(plan, tile, values, valid, noise=True):
        if not noise:
            calls.append(tile.index)
            if len(calls) == 2:
                raise RuntimeError("disk gone")
        return real_levels(plan, tile, values, valid, noise=noise)

    monkeypatch.setattr(pipeline, "_trace_one", slow_trace)
    monkeypatch.setattr(pipeline, "_window_level_sets", failing_levels)
    with pytest.raises(RuntimeError, match="disk gone"):
        pipeline.run_extraction(source, ExtractionSettings(scales="20,40", features="edges"), tile_size=100)
    # both scales of the first tile were traced before the error surfaced (in either order: two
    # tracing threads)
    assert sorted(traced) == [0, 1]
    assert pipeline._tracer_threads().submit(lambda: 1).result(timeout=5) == 1


def test_noise_blocks_run_in_lanes_but_report_in_order(scene, monkeypatch):
    # Noise blocks run NOISE_LANES at a time on threads; the samples come back in block order and
    # equal each block run alone, and an error in one block propagates after the running ones end.
    import lineament.pipeline as pipeline

    z, valid, g = scene
    source = ArraySource(z, valid, g, "array")
    monkeypatch.setattr(pipeline, "NOISE_BLOCK", 64)  # several blocks on this small raster
    seen = {}

    def checking_executor(tasks, on_done=None):
        if tasks[0][0] == "noise":
            alone = [pipeline.run_tile_task(t) for t in tasks]
            order = []
            got = serial_executor(tasks, lambda k, res: order.append(k))
            assert order == list(range(len(tasks)))
            for a, b in zip(alone, got):
                assert a.keys() == b.keys()
                for key in a:
                    assert np.array_equal(a[key][0], b[key][0])
            seen["blocks"] = len(tasks)
            return got
        return serial_executor(tasks, on_done)

    out = pipeline.run_extraction(source, ExtractionSettings(scales="20,40"), tile_size=100,
                                  executor=checking_executor)
    assert seen["blocks"] >= 2 and out.lines

    real = pipeline._noise_samples
    calls = []

    def failing(plan, tile, values, valid, per_block):
        calls.append(tile.index)
        if len(calls) == 3:
            raise RuntimeError("bad block")
        return real(plan, tile, values, valid, per_block)

    monkeypatch.setattr(pipeline, "_noise_samples", failing)
    with pytest.raises(RuntimeError, match="bad block"):
        pipeline.run_extraction(source, ExtractionSettings(scales="20,40"), tile_size=100)


@pytest.mark.parametrize("features", ["edges", "edges,valleys,ridges"])
def test_void_free_windows_are_cut_to_what_their_core_needs(features, monkeypatch):
    # A window without voids is filtered on its core plus the kernels' reach only
    # (pipeline._void_free_window); the lines must be exactly those of the uncut windows.
    from lineament import pipeline

    z, valid, g = _scene(n=480, seed=5)  # the void at rows 40-70, columns 220-260
    seen = []
    real = pipeline._void_free_window

    def spy(plan, tile, values, window_valid):
        out = real(plan, tile, values, window_valid)
        seen.append((tile.window, out[0].window, bool(window_valid.all()), out[3]))
        return out

    monkeypatch.setattr(pipeline, "_void_free_window", spy)
    s = ExtractionSettings(scales="20,40,80", features=features)
    cut = extract_array(z, g, s, valid=valid, tile_size=96)
    # every window with a void kept whole; void-free windows cut smaller where the halo allowed
    assert all(old == new and voids for old, new, all_valid, voids in seen if not all_valid)
    assert any(old != new and not voids for old, new, all_valid, voids in seen if all_valid)
    for old, new, _, _ in seen:
        assert old[0] <= new[0] and old[1] <= new[1] and new[2] <= old[2] and new[3] <= old[3]
    monkeypatch.setattr(pipeline, "_void_free_window", lambda plan, tile, v, ok: (tile, v, ok, True))
    uncut = extract_array(z, g, s, valid=valid, tile_size=96)
    assert len(cut.lines) >= 3
    _assert_same_lines(uncut, cut, atol_px=0.0)


@pytest.mark.parametrize("threads", [1, 2, 3])
def test_strided_overview_reads_strips_in_threads_in_order(tmp_path, monkeypatch, threads):
    # The overview is every k-th row and column of the raster as rasterio reads it whole, whether
    # its strips are read one at a time or several at once on threads.
    import rasterio

    import lineament.tiling as tiling
    from lineament.raster_io import open_raster

    rng = np.random.default_rng(4)
    z = rng.normal(100.0, 5.0, (301, 207)).astype(np.float32)
    z[17:40, 50:90] = -9999.0
    path = write_geotiff(tmp_path / "ov.tif", z, utm_georef(301, 207), nodata=-9999.0)
    monkeypatch.setattr(tiling, "STRIP_PIXELS", 207 * 24)  # a dozen strips, the last one short
    source = tiling.FileSource(open_raster(path))
    values, valid = tiling.strided_overview(source.read, source.georef, 301 * 207 // 9, threads=threads)
    with rasterio.open(path) as ds:
        ref = ds.read(1, masked=True)
    np.testing.assert_array_equal(valid, ~np.ma.getmaskarray(ref)[::3, ::3])
    np.testing.assert_array_equal(values[valid], ref.data[::3, ::3][valid])
    # a raster processed as one window takes its overview from its whole read: the same cells
    whole_values, whole_valid = tiling.strided_subsample(*source.read((0, 0, 301, 207)), 301 * 207 // 9)
    np.testing.assert_array_equal(whole_valid, valid)
    np.testing.assert_array_equal(whole_values[valid], values[valid])
    array = tiling.ArraySource(ref.data, ~np.ma.getmaskarray(ref), source.georef, "array")
    for n in (301 * 207, 301 * 207 // 9, 1000):
        a_values, a_valid = array.overview(n)
        f_values, f_valid = tiling.strided_overview(source.read, source.georef, n, threads=threads)
        np.testing.assert_array_equal(a_valid, f_valid)
        np.testing.assert_array_equal(a_values[a_valid], f_values[f_valid])


def test_small_rasters_finding_edges_run_as_one_window(monkeypatch):
    # Without a tile size, a run finding edges only processes a raster of at most
    # detectors.WHOLE_RASTER_PIXELS as one window (noise from its own cells, finest level sets traced
    # in bands of rows on the tracing threads); a run with valleys and ridges keeps tiles.  Either
    # way the lines are those of an explicitly tiled run.
    from lineament import pipeline

    monkeypatch.setattr(pipeline, "DEFAULT_TILE_SIZE", 128)
    z, valid, g = _scene(n=480, seed=8)
    edges = ExtractionSettings(scales="20,40,80", features="edges")
    whole = extract_array(z, g, edges, valid=valid)
    tiled = extract_array(z, g, edges, valid=valid, tile_size=128)
    assert whole.tiles == 1 and tiled.tiles > 1
    assert len(whole.lines) >= 3
    _assert_same_lines(tiled, whole, atol_px=0.0)
    dem = ExtractionSettings(scales="20,40", features="edges,valleys")
    assert extract_array(z, g, dem, valid=valid).tiles > 1


@pytest.mark.parametrize("parts", [2, 3, 7])
def test_row_bands_cover_the_core_once_with_views(parts):
    # pipeline._row_bands: the bands' cores tile the level set's core rows without gaps or overlap,
    # each window is the band's rows plus BAND_MARGIN rows (clipped to the level set) and views it.
    from lineament.crossings import Core
    from lineament.detectors import LevelSet
    from lineament.pipeline import BAND_MARGIN, _row_bands
    from lineament.tiling import Tile

    factor = 2
    field = np.arange(300 * 50, dtype=np.float32).reshape(300, 50)
    ls = LevelSet(field, field * 2, None, (field,), 1.0, 0.0)
    usable = np.ones(field.shape, bool)
    # window rows 100..700 of the raster (coarse 50..350), core rows 140..660 (coarse 70..330)
    tile = Tile(3, Core(140, 0, 660, 100), (100, 0, 700, 100))
    bands = _row_bands((0, 0, ls, usable, None, factor, tile), parts)
    assert len(bands) == parts
    covered = []
    for si, di, band_ls, band_usable, filled, f, band_tile in bands:
        c, w = band_tile.core, band_tile.window
        covered.extend(range(c.row0 // f, c.row1 // f))
        assert w[0] == max(100, c.row0 - BAND_MARGIN * f) and w[2] == min(700, c.row1 + BAND_MARGIN * f)
        rows = slice(w[0] // f - 50, w[2] // f - 50)
        assert np.shares_memory(band_ls.field, field) and np.array_equal(band_ls.field, field[rows])
        assert np.array_equal(band_ls.strength, ls.strength[rows]) and band_usable.shape == band_ls.field.shape
    assert covered == list(range(70, 330))
