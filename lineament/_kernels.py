"""Compiled 1-D correlation passes over the rows or columns of a float32 image.

The same operation as ``scipy.ndimage.correlate1d`` with ``mode="reflect"``
or ``mode="nearest"`` (the reference in tests), compiled by numba with
float64 accumulation.  Bands of rows run on a small pool of threads (the
compiled code releases the interpreter lock); no OpenMP runtime is involved,
so worker processes can still be forked.  Each output cell is the sum of the
same products in the same order wherever it lies, so a window of a raster
gives, to the last bit, the cells a whole-raster pass gives (away from the
window's borders), whatever the number of threads.

Why not scipy: its pass along the first axis walks the image column by
column (about three times slower than along rows here), and it holds the
interpreter lock, so it cannot use a second core.  Measured on this
project's 2-core machine (benchmarks/README.md): a 17-tap pass over a
2048 x 2048 image.
"""

from __future__ import annotations

import os
import threading
from concurrent.futures import ThreadPoolExecutor

import numba
import numpy as np

_MODES = {"reflect": 0, "nearest": 1}


@numba.njit(cache=True, inline="always")
def _source_index(i: int, n: int, mode: int) -> int:
    """Index of the input cell that position ``i`` (possibly outside 0..n-1) reads."""
    if 0 <= i < n:
        return i
    if mode == 1:  # nearest
        return 0 if i < 0 else n - 1
    # reflect about the outer cell edges (d c b a | a b c d | d c b a), any distance
    period = 2 * n
    i = i % period
    if i < 0:
        i += period
    return i if i < n else period - 1 - i


@numba.njit(cache=True, nogil=True)
def _along_rows(image, kernel, out, mode, row0, row1):  # pragma: no cover - compiled
    h, w = image.shape
    taps = kernel.size
    r = taps // 2
    for i in range(row0, row1):
        line = np.empty(w + taps - 1, np.float64)
        for j in range(w + taps - 1):
            line[j] = image[i, _source_index(j - r, w, mode)]
        acc = np.zeros(w, np.float64)
        for t in range(taps):
            kt = kernel[t]
            for j in range(w):
                acc[j] += kt * line[j + t]
        for j in range(w):
            out[i, j] = acc[j]


@numba.njit(cache=True, nogil=True)
def _along_columns(image, kernel, out, mode, row0, row1):  # pragma: no cover - compiled
    h, w = image.shape
    taps = kernel.size
    r = taps // 2
    for i in range(row0, row1):
        acc = np.zeros(w, np.float64)
        for t in range(taps):
            kt = kernel[t]
            src = _source_index(i + t - r, h, mode)
            for j in range(w):
                acc[j] += kt * image[src, j]
        for j in range(w):
            out[i, j] = acc[j]


#: Images smaller than this run on the calling thread.
_MIN_PARALLEL_CELLS = 1 << 18
_pool_lock = threading.Lock()
_pool: tuple[int, ThreadPoolExecutor] | None = None


def kernel_threads() -> int:
    """Threads used for one pass: ``LINEAMENT_THREADS`` if set, else the cores this process may use."""
    env = os.environ.get("LINEAMENT_THREADS", "").strip()
    if env.isdigit() and int(env) > 0:
        return int(env)
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


def _executor() -> ThreadPoolExecutor:
    """The process's thread pool (made again in a forked child, whose copy has no threads)."""
    global _pool
    with _pool_lock:
        if _pool is None or _pool[0] != os.getpid():
            _pool = (os.getpid(), ThreadPoolExecutor(max_workers=kernel_threads(),
                                                     thread_name_prefix="lineament-kernel"))
        return _pool[1]


def _run_bands(fn, img, k, out, mode) -> None:
    h = img.shape[0]
    threads = kernel_threads()
    if threads == 1 or img.size < _MIN_PARALLEL_CELLS or h < 2 * threads:
        fn(img, k, out, mode, 0, h)
        return
    edges = np.linspace(0, h, threads + 1).astype(int)
    futures = [_executor().submit(fn, img, k, out, mode, int(a), int(b)) for a, b in zip(edges[:-1], edges[1:])]
    for fut in futures:
        fut.result()


def correlate1d(image: np.ndarray, kernel: np.ndarray, axis: int, *, mode: str = "reflect") -> np.ndarray:
    """Correlate every row (``axis=1``) or column (``axis=0``) of an image with a 1-D kernel.

    Parameters
    ----------
    image : ndarray, shape (rows, cols)
        Converted to float32 if needed.
    kernel : ndarray, shape (taps,)
        Odd length; tap ``t`` weighs the cell at offset ``t - taps // 2``
        (correlation, as ``scipy.ndimage.correlate1d``).
    axis : {0, 1}
    mode : {"reflect", "nearest"}
        Border extension, with scipy.ndimage's meaning.

    Returns
    -------
    ndarray, shape (rows, cols), float32
        Sums accumulated in float64, rounded once to float32.
    """
    img = np.ascontiguousarray(image, dtype=np.float32)
    k = np.ascontiguousarray(kernel, dtype=np.float64)
    if k.ndim != 1 or k.size % 2 == 0:
        raise ValueError("kernel must be 1-D with an odd number of taps")
    if img.ndim != 2:
        raise ValueError("image must be 2-D")
    out = np.empty(img.shape, np.float32)
    if img.size == 0:
        return out
    if axis == 1:
        _run_bands(_along_rows, img, k, out, _MODES[mode])
    elif axis == 0:
        _run_bands(_along_columns, img, k, out, _MODES[mode])
    else:
        raise ValueError(f"axis must be 0 or 1, got {axis}")
    return out
