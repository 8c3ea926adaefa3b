"""Peak memory of tile-by-tile extraction for growing rasters.

Writes synthetic float32 GeoTIFF DEMs of the requested sizes block by block
(so the writer's memory stays small too), runs ``lineament extract`` on each
in a child process, and prints seconds, throughput and the child's peak
resident memory.  Peak memory should depend on the tile size and scales,
not on the raster size.

Usage::

    python benchmarks/memory_tiles.py                # 16, 64 and 256 Mpx
    python benchmarks/memory_tiles.py --sizes 16,64  # quicker
"""

from __future__ import annotations

import argparse
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import rasterio
from affine import Affine
from rasterio.windows import Window


def write_dem(path: Path, side: int, block: int = 1024, seed: int = 1) -> None:
    """A side x side DEM: broad sine relief, planted scarps, white noise; written block by block."""
    profile = dict(driver="GTiff", width=side, height=side, count=1, dtype="float32", crs="EPSG:32633",
                   transform=Affine(10, 0, 400000, 0, -10, 6000000), tiled=True, blockxsize=512,
                   blockysize=512, nodata=-9999.0, BIGTIFF="IF_SAFER")
    with rasterio.open(path, "w", **profile) as dst:
        for r0 in range(0, side, block):
            for c0 in range(0, side, block):
                h, w = min(block, side - r0), min(block, side - c0)
                rows, cols = np.mgrid[r0:r0 + h, c0:c0 + w].astype(np.float32)
                z = 40 * np.sin(rows / 700.0) * np.cos(cols / 900.0) + 15 * np.sin((rows + 2 * cols) / 230.0)
                z += 20.0 * ((rows + 0.3 * cols) % 2000 > 1000)  # scarps every 2000 px
                rng = np.random.default_rng([seed, r0, c0])
                z += rng.normal(0, 0.5, (h, w)).astype(np.float32)
                dst.write(z.astype(np.float32) + 500.0, 1, window=Window(c0, r0, w, h))


def run(path: Path, out: Path, args) -> tuple[float, float]:
    cmd = [sys.executable, "-m", "lineament.cli.main", "extract", str(path), "-o", str(out), "-q", "--overwrite",
           "--scales", args.scales, "--features", args.features, "--tile-size", str(args.tile_size),
           "--workers", str(args.workers)]
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd)
    _, status, usage = os.wait4(proc.pid, 0)  # resource usage of this child (and its own children)
    proc.returncode = os.waitstatus_to_exitcode(status)
    seconds = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"extract failed with exit code {proc.returncode}")
    return seconds, usage.ru_maxrss / 1024.0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="16,64,256", help="raster sizes in Mpx, comma-separated")
    ap.add_argument("--scales", default="2px,4px")
    ap.add_argument("--features", default="edges")
    ap.add_argument("--tile-size", type=int, default=1024)
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--keep", action="store_true", help="keep the written rasters")
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    print(f"machine: {platform.node()} {platform.machine()}, {os.cpu_count()} cores, python {platform.python_version()}")
    print(f"settings: scales {args.scales}, features {args.features}, tile size {args.tile_size}, "
          f"workers {args.workers}")
    print(f"{'Mpx':>6} {'write s':>8} {'extract s':>10} {'Mpx/s':>7} {'peak RSS MB':>12}")
    with tempfile.TemporaryDirectory() as tmp:
        for mpx in sorted(sizes):
            side = int(round((mpx * 1e6) ** 0.5))
            path = Path(tmp) / f"dem_{mpx}.tif"
            t0 = time.perf_counter()
            write_dem(path, side)
            written = time.perf_counter() - t0
            seconds, peak = run(path, Path(tmp) / f"lines_{mpx}.gpkg", args)
            print(f"{side * side / 1e6:6.1f} {written:8.1f} {seconds:10.1f} {side * side / 1e6 / seconds:7.2f} "
                  f"{peak:12.0f}", flush=True)
            if not args.keep:
                path.unlink()


if __name__ == "__main__":
    main()
