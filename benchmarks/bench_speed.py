"""Speed benchmark: filter stage, tracing and the whole run against reference implementations.

Writes its own test raster (seeded fractal terrain with planted scarps, our
own generator), then measures in this one process:

* a plain memory copy (upper bound on any pass over the raster);
* ``scipy.ndimage.gaussian_laplace`` at each scale and OpenCV's
  ``sepFilter2D`` with 1-D Gaussian second-derivative kernels (when
  ``opencv-python-headless`` is installed), the references for the filter stage;
* our filter stage (``log_response`` + ``strength_map``) at the four scales, at full
  resolution and as the pipeline runs it (coarse scales on decimated grids);
* ``skimage.measure.find_contours`` over a whole response, against our
  ``trace_level_set`` (compiled) and ``trace_level_set_reference`` (find_contours + Python);
* the naive pipeline (scipy LoG at each scale + find_contours over each whole response);
* end to end, GeoTIFF in, GeoPackage out, edges only: as a user runs it (no tile size, so the
  raster is one window), then in 2048 px tiles with 1 and 2 worker processes (best of three,
  after one untimed run), and with ``--full-resolution``; for reference, also with the DEM
  default of edges, valleys and ridges.

Compiled code (numba) is compiled or loaded from its cache before anything
is timed, so the table shows steady-state speed; the one-time load costs
about half a second per process, the first compile after installing about
20 seconds.

Usage::

    python benchmarks/bench_speed.py [--size 2048] [--scales 2,4,8,16] [--workdir DIR]

Prints a table: stage, Mpx/s, ratio to the references, peak RSS of this
process (and of its worker processes) after the stage.  Peak RSS is a high
water mark, so it only ever grows down the table.
"""

from __future__ import annotations

import argparse
import platform
import resource
import tempfile
import time
from pathlib import Path

import numpy as np
import rasterio
import scipy
import skimage
from scipy import ndimage
from skimage.measure import find_contours

from lineament import ExtractionSettings, extract_file, write_lines
from lineament._kernels import kernel_threads
from lineament.crossings import MAD_TO_SIGMA, strength_map, trace_level_set, trace_level_set_reference
from lineament.pyramid import LEVEL_BLUR_PX, MIN_EDGE_SIGMA_CELLS, Pyramid, decimation_factor
from lineament.scalespace import gaussian_kernel1d, log_response
from lineament.synthetic import fractal_terrain, north_up_transform, plant_scarp

try:  # optional reference
    import cv2
except ImportError:  # pragma: no cover
    cv2 = None


def _rss_mb() -> tuple[float, float]:
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    kids = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
    return own, kids


def _best(fn, repeat: int = 2) -> float:
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def make_raster(path: Path, n: int) -> np.ndarray:
    pixel = 10.0
    transform = north_up_transform((500_000.0, 5_200_000.0 + pixel * n), pixel)
    z = fractal_terrain((n, n), pixel_size_m=pixel, relief_m=40.0, spectral_exponent=3.3, seed=7)
    rng = np.random.default_rng(1)
    for _ in range(max(4, n // 256)):
        x0, y0 = rng.uniform(0, pixel * n, 2)
        a, length = rng.uniform(0, np.pi), rng.uniform(0.2, 0.8) * pixel * n
        z = plant_scarp(z, transform, (500_000 + x0, 5_200_000 + y0),
                        (500_000 + x0 + length * np.cos(a), 5_200_000 + y0 + length * np.sin(a)),
                        offset_m=rng.uniform(10, 30), width_m=15.0)
    z = z.astype(np.float32)
    with rasterio.open(path, "w", driver="GTiff", height=n, width=n, count=1, dtype="float32",
                       crs="EPSG:32633", transform=transform, tiled=True, blockxsize=256, blockysize=256) as dst:
        dst.write(z, 1)
    return z


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--size", type=int, default=2048, help="raster side in pixels")
    ap.add_argument("--scales", default="2,4,8,16", help="sigmas in pixels")
    ap.add_argument("--workdir", default=None)
    args = ap.parse_args()
    sigmas = [float(s) for s in args.scales.split(",")]
    n = args.size
    mpx = n * n / 1e6
    work = Path(args.workdir or tempfile.mkdtemp(prefix="lineament_bench_"))
    work.mkdir(parents=True, exist_ok=True)
    tif = work / f"bench_{n}.tif"
    z = make_raster(tif, n)
    z -= np.float32(np.median(z))
    rows: list[tuple[str, float, str]] = []

    def record(stage: str, seconds: float, note: str = "") -> float:
        rate = mpx / seconds
        own, kids = _rss_mb()
        rows.append((stage, rate, note, own, kids))
        return rate

    buf = np.empty_like(z)
    memcpy = record("memory copy", _best(lambda: np.copyto(buf, z), 3))

    # ---- filter references, per scale and for the four scales
    scipy_total = 0.0
    cv_total = 0.0
    for s in sigmas:
        t = _best(lambda: ndimage.gaussian_laplace(z, s, output=np.float32), 1)
        scipy_total += t
        record(f"scipy gaussian_laplace sigma {s:g}", t)
        if cv2 is not None:
            k0 = gaussian_kernel1d(s, 0).astype(np.float32)
            k2 = gaussian_kernel1d(s, 2).astype(np.float32)

            def cv_log():
                a = cv2.sepFilter2D(z, cv2.CV_32F, k2, k0, borderType=cv2.BORDER_REFLECT)
                a += cv2.sepFilter2D(z, cv2.CV_32F, k0, k2, borderType=cv2.BORDER_REFLECT)
                return a
            t = _best(cv_log, 2)
            cv_total += t
            record(f"opencv sepFilter2D LoG sigma {s:g}", t)
    scipy4 = record("scipy gaussian_laplace, all scales", scipy_total)
    cv4 = record("opencv sepFilter2D LoG, all scales", cv_total) if cv2 is not None else float("nan")

    def ours_filter_full():
        for s in sigmas:
            r = log_response(z, s, (1.0, 1.0))
            strength_map(r, s, (1.0, 1.0))

    def ours_filter():
        # what the pipeline does for edges: scales of 4 px and more on decimated grids, 2 cells per
        # sigma (lineament.pyramid)
        pyr = Pyramid(z, np.ones(z.shape, bool))
        for s in sigmas:
            f = decimation_factor(s, min_cells=MIN_EDGE_SIGMA_CELLS)
            level, _ = pyr.level(f)
            r = log_response(level, s, (float(f), float(f)), prior_blur_px=LEVEL_BLUR_PX if f > 1 else 0.0)
            strength_map(r, s, (float(f), float(f)))
    _best(ours_filter, 1)  # compile or load the compiled kernels first
    record("lineament log_response+strength_map, all scales, full resolution", _best(ours_filter_full, 2))
    ours4 = record("lineament filter stage (decimated coarse scales), all scales", _best(ours_filter, 2))

    # ---- tracing at the finest scale
    s0 = sigmas[0]
    resp = log_response(z, s0, (1.0, 1.0))
    st, gx, gy = strength_map(resp, s0, (1.0, 1.0))
    comps = np.concatenate([gx.ravel()[::7], gy.ravel()[::7]]).astype(np.float64)
    noise = MAD_TO_SIGMA * np.median(np.abs(comps - np.median(comps))) * np.sqrt(2 * np.pi) * s0
    usable = np.zeros(z.shape, bool)
    m = int(3 * s0) + 1
    usable[m:-m, m:-m] = True
    kw = dict(high=4 * noise, low=2 * noise, sustained=3 * noise, sustained_length_px=8 * s0)
    fc = record(f"skimage find_contours whole response sigma {s0:g}", _best(lambda: find_contours(resp, 0.0), 1))
    t0 = time.perf_counter()
    ref = trace_level_set_reference(resp, st, usable, **kw)
    record(f"trace_level_set_reference sigma {s0:g}", time.perf_counter() - t0)
    fast = trace_level_set(resp, st, usable, **kw)  # the first call may compile (cached afterwards)
    tr = record(f"trace_level_set (compiled) sigma {s0:g}", _best(lambda: trace_level_set(resp, st, usable, **kw), 3))
    same = (len(ref[0]) == len(fast[0]) and len(ref[1]) == len(fast[1])
            and all(np.array_equal(a[0], b[0]) and np.array_equal(a[1], b[1])
                    for a, b in zip(sorted(ref[0], key=lambda p: (p[0][0], p[1][0])),
                                    sorted(fast[0], key=lambda p: (p[0][0], p[1][0])))))

    # ---- naive pipeline
    def naive():
        for s in sigmas:
            r = ndimage.gaussian_laplace(z, s, output=np.float32)
            find_contours(r, 0.0)
    t_naive = _best(naive, 1)
    naive_rate = record("naive: scipy LoG + find_contours per scale", t_naive)

    # ---- end to end
    settings = ExtractionSettings(scales=",".join(f"{s:g}px" for s in sigmas), features=("edges",))
    e2e = {}
    def end_to_end(run_settings, workers, out, tile_size=None):
        result = extract_file(tif, run_settings, workers=workers, tile_size=tile_size)
        write_lines(result, out, overwrite=True)
        return len(result.lines)

    # as a user runs it (no tile size: a raster of up to 2**24 pixels is one window when only edges
    # are found), then in 2048 px tiles, as larger rasters are run, with 1 and 2 worker processes
    for label, workers, tile_size in (("default", 1, None), ("2048 px tiles", 1, 2048), ("2048 px tiles", 2, 2048)):
        out = work / f"lines_{workers}_{tile_size}.gpkg"
        count = end_to_end(settings, workers, out, tile_size)
        e2e[(label, workers)] = record(f"end to end GeoTIFF->GeoPackage, {label}, {workers} worker(s), {count} lines",
                                       _best(lambda: end_to_end(settings, workers, out, tile_size), 3))
    full = ExtractionSettings(scales=settings.scales, features=("edges",), full_resolution=True)
    count = end_to_end(full, 1, work / "lines_full.gpkg")
    record(f"end to end, --full-resolution, 1 worker, {count} lines",
           _best(lambda: end_to_end(full, 1, work / "lines_full.gpkg"), 1))
    # what a DEM gets without --features: edges, valleys and ridges (not part of the targets)
    dem = ExtractionSettings(scales=settings.scales)
    count = end_to_end(dem, 1, work / "lines_dem.gpkg")
    record(f"end to end, all DEM families, 1 worker, {count} lines",
           _best(lambda: end_to_end(dem, 1, work / "lines_dem.gpkg"), 2))

    print(f"# raster {n} x {n} float32 ({mpx:.2f} Mpx), scales {args.scales} px; "
          f"python {platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}, "
          f"scikit-image {skimage.__version__}, opencv {cv2.__version__ if cv2 is not None else 'absent'}")
    print(f"{'stage':<76} {'Mpx/s':>9} {'peak RSS MB (self/workers)':>27}")
    for stage, rate, note, own, kids in rows:
        print(f"{stage:<76} {rate:9.2f} {own:13.0f} / {kids:<11.0f}")
    print()
    print("threads per kernel pass:", kernel_threads())
    print(f"filter stage, four scales: {ours4:.2f} Mpx/s = {ours4 / scipy4:.2f} x scipy, "
          f"{ours4 / cv4:.2f} x opencv (target >= 1 x opencv)")
    print(f"tracing sigma {s0:g}: compiled {tr:.2f} Mpx/s = {tr / fc:.1f} x find_contours over the whole response; "
          f"identical pieces to the full trace: {same}")
    for (label, w), rate in e2e.items():
        print(f"end to end, {label}, {w} worker(s): {rate:.2f} Mpx/s = {rate / naive_rate:.1f} x naive pipeline "
              f"(targets >= 20 Mpx/s on 2 cores, >= 40 x naive); memory copy {memcpy:.0f} Mpx/s")


if __name__ == "__main__":
    main()
