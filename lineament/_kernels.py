"""Compiled 1-D correlation passes over the rows or columns of a float32 image.

The same operation as ``scipy.ndimage.correlate1d`` with ``mode="reflect"``
or ``mode="nearest"`` (the reference in tests), compiled by numba with
float32 products and sums.  Bands of rows run on a small pool of threads (the
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

Why float32 sums: SIMD lanes hold twice as many float32 as float64 values
and each pass moves half the bytes; the LoG sweeps ran 1.5 (sigma 2 px) to
1.8 (sigma 4 px) times faster than with float64 sums.  A float32 sum of ``n``
products is within ``gamma_n * sum |k v|`` of the exact sum, ``gamma_n =
n u / (1 - n u)`` with ``u = 2**-24`` (Higham 2002): about 2e-6 of the
values under a 33-tap kernel, the order of the rounding the float32 input
values already carry (the noise floor of :mod:`lineament.detectors` allows
for it); on planes and paraboloids spanning 1300 m the noise level of the
LoG strength moved by under 1 % between float64 and float32 sums (our
measurement).  Tests check every pass against scipy within that bound.

References
----------
Higham, N. J. (2002). Accuracy and Stability of Numerical Algorithms, 2nd
ed. SIAM, chapter 3. doi:10.1137/1.9780898718027
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


@numba.njit(cache=True, inline="always")
def _fill_line(image, i, r, mode, line):
    """Row ``i`` of ``image`` into ``line`` with ``r`` extended cells on each side (border ``mode``)."""
    w = image.shape[1]
    for j in range(w):
        line[j + r] = image[i, j]
    for j in range(r):
        line[j] = image[i, _source_index(j - r, w, mode)]
        line[w + r + j] = image[i, _source_index(w + j, w, mode)]


@numba.njit(cache=True, nogil=True)
def _along_rows(image, kernel, out, mode, step, row0, row1):  # pragma: no cover - compiled
    h, w = image.shape
    taps = kernel.size
    r = taps // 2
    wo = out.shape[1]
    half = (w + taps) // 2
    for i in range(row0, row1):
        # fresh buffers per row: the compiler then knows they do not overlap, and vectorises
        line = np.empty(w + taps - 1, np.float32)
        acc = np.empty(wo, np.float32)
        _fill_line(image, i, r, mode, line)
        # plain taps: folding symmetric taps here measured twice as slow (not vectorised)
        for j in range(wo):
            acc[j] = 0.0
        if step == 1:
            for t in range(taps):
                kt = kernel[t]
                for j in range(wo):
                    acc[j] += kt * line[j + t]
        else:
            # every second output: the line split into its even and odd cells, so that each tap
            # reads one of them contiguously (line[2 j + t] is even[j + t // 2] or odd[j + t // 2])
            even = np.zeros(half, np.float32)
            odd = np.zeros(half, np.float32)
            for m in range((w + taps - 1) // 2):
                even[m] = line[2 * m]
                odd[m] = line[2 * m + 1]
            if (w + taps - 1) % 2:
                even[(w + taps - 1) // 2] = line[w + taps - 2]
            for t in range(taps):  # taps in order, so each sum is the one of the full pass
                kt = kernel[t]
                o = t // 2
                if t % 2 == 0:
                    for j in range(wo):
                        acc[j] += kt * even[j + o]
                else:
                    for j in range(wo):
                        acc[j] += kt * odd[j + o]
        for j in range(wo):
            out[i, j] = acc[j]


@numba.njit(cache=True, nogil=True)
def _along_columns(image, kernel, out, mode, symmetry, step, row0, row1):  # pragma: no cover - compiled
    h, w = image.shape
    taps = kernel.size
    r = taps // 2
    for o in range(row0, row1):
        i = o * step  # output row o is the pass at input row o * step
        acc = np.empty(w, np.float32)
        if symmetry == 0:
            for j in range(w):
                acc[j] = 0.0
            for t in range(taps):
                kt = kernel[t]
                src = _source_index(i + t - r, h, mode)
                for j in range(w):
                    acc[j] += kt * image[src, j]
        else:
            kc = kernel[r]
            for j in range(w):
                acc[j] = kc * image[i, j]
            for t in range(1, r + 1):
                kt = kernel[r + t]
                hi = _source_index(i + t, h, mode)
                lo = _source_index(i - t, h, mode)
                if symmetry > 0:
                    for j in range(w):
                        acc[j] += kt * (image[hi, j] + image[lo, j])
                else:
                    for j in range(w):
                        acc[j] += kt * (image[hi, j] - image[lo, j])
        for j in range(w):
            out[o, j] = acc[j]


def kernel_symmetry(kernel: np.ndarray) -> int:
    """1 for a kernel symmetric about its centre, -1 for antisymmetric (zero centre), 0 otherwise."""
    if np.array_equal(kernel, kernel[::-1]):
        return 1
    if np.array_equal(kernel, -kernel[::-1]):
        return -1
    return 0


#: Images smaller than this run on the calling thread.
_MIN_PARALLEL_CELLS = 1 << 18
_pool_lock = threading.Lock()
_pools: dict[str, tuple[int, ThreadPoolExecutor]] = {}


def available_cores() -> int:
    """Cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


def kernel_threads() -> int:
    """Threads used for one pass: ``LINEAMENT_THREADS`` if set, else the cores this process may use."""
    env = os.environ.get("LINEAMENT_THREADS", "").strip()
    if env.isdigit() and int(env) > 0:
        return int(env)
    return available_cores()


def thread_pool(name: str, workers: int) -> ThreadPoolExecutor:
    """This process's pool of threads called ``name`` (made again in a forked child, whose copy has no threads)."""
    with _pool_lock:
        pid, pool = _pools.get(name, (None, None))
        if pool is None or pid != os.getpid():
            pool = ThreadPoolExecutor(max_workers=workers, thread_name_prefix=name)
            _pools[name] = (os.getpid(), pool)
        return pool


def _executor() -> ThreadPoolExecutor:
    return thread_pool("lineament-kernel", kernel_threads())


def _bands(fn, h: int, size: int, *args) -> None:
    """Run ``fn(*args, row0, row1)`` over bands of the ``h`` rows, one per thread (inline when small)."""
    threads = kernel_threads()
    if threads == 1 or size < _MIN_PARALLEL_CELLS or h < 2 * threads:
        fn(*args, 0, h)
        return
    edges = np.linspace(0, h, threads + 1).astype(int)
    futures = [_executor().submit(fn, *args, int(a), int(b)) for a, b in zip(edges[:-1], edges[1:])]
    for fut in futures:
        fut.result()


def correlate1d(image: np.ndarray, kernel: np.ndarray, axis: int, *, mode: str = "reflect",
                step: int = 1) -> np.ndarray:
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
    step : {1, 2}
        Keep every ``step``-th cell along ``axis`` (the cells of the full
        result sliced with ``::step``, computed without the others).

    Returns
    -------
    ndarray, float32
        Shape ``(rows, cols)``, or ``ceil(n / step)`` cells along ``axis``.
        Products and sums in float32 (within ``gamma_taps * sum |k v|`` of the
        exact sum, see the module notes).
    """
    img = np.ascontiguousarray(image, dtype=np.float32)
    k = np.ascontiguousarray(kernel, dtype=np.float32)
    if k.ndim != 1 or k.size % 2 == 0:
        raise ValueError("kernel must be 1-D with an odd number of taps")
    if img.ndim != 2:
        raise ValueError("image must be 2-D")
    if axis not in (0, 1):
        raise ValueError(f"axis must be 0 or 1, got {axis}")
    if step not in (1, 2):
        raise ValueError(f"step must be 1 or 2, got {step}")
    shape = list(img.shape)
    shape[axis] = -(-shape[axis] // step)
    out = np.empty(tuple(shape), np.float32)
    if img.size == 0:
        return out
    if axis == 1:
        _bands(_along_rows, out.shape[0], img.size, img, k, out, _MODES[mode], step)
    else:
        _bands(_along_columns, out.shape[0], img.size, img, k, out, _MODES[mode], kernel_symmetry(k), step)
    return out


@numba.njit(cache=True, inline="always")
def _gradient_row(rows, ring, h, o, stencil, scale_x, scale_y, factor, with_components, gx, gy, mag):
    """Gradient and magnitude of row ``o`` of an image of ``h`` rows (border cells repeated).

    ``rows`` holds the image's rows: all of them (``ring`` 0) or a rolling
    buffer where row ``i`` is at ``i % ring``.
    """
    w = rows.shape[1]
    taps = stencil.size
    r = taps // 2
    line = np.empty(w + taps - 1, np.float32)
    acc_x = np.zeros(w, np.float32)
    acc_y = np.zeros(w, np.float32)
    mid = o % ring if ring > 0 else o
    for j in range(w):
        line[j + r] = rows[mid, j]
    for j in range(r):  # nearest: border cells repeated
        line[j] = rows[mid, 0]
        line[w + r + j] = rows[mid, w - 1]
    for t in range(taps):
        st = stencil[t]
        src = min(max(o + t - r, 0), h - 1)
        if ring > 0:
            src = src % ring
        for j in range(w):
            acc_x[j] += st * line[j + t]
            acc_y[j] += st * rows[src, j]
    for j in range(w):
        x = np.float32(np.float32(acc_x[j]) * scale_x)
        y = np.float32(np.float32(acc_y[j]) * scale_y)
        if with_components:  # loop-invariant: compiled as two loops
            gx[o, j] = x
            gy[o, j] = y
        xd = np.float64(x)
        yd = np.float64(y)
        mag[o, j] = np.float32(np.float32(np.sqrt(xd * xd + yd * yd)) * factor)


@numba.njit(cache=True, nogil=True)
def _gradient_passes(response, stencil, scale_x, scale_y, factor, with_components, gx, gy, mag,
                     row0, row1):  # pragma: no cover
    h = response.shape[0]
    for i in range(row0, row1):
        _gradient_row(response, 0, h, i, stencil, scale_x, scale_y, factor, with_components, gx, gy, mag)


def gradient_and_magnitude(response: np.ndarray, stencil: np.ndarray, scale_x: float, scale_y: float,
                           factor: float, *, components: bool = True) -> tuple:
    """Finite-difference gradient of an image and its scaled magnitude, in one pass.

    Parameters
    ----------
    response : ndarray, shape (rows, cols), float32
    stencil : ndarray, shape (taps,)
        Odd-length difference stencil for correlation, applied along rows
        (x, ``axis=1``) and columns (y, ``axis=0``) with ``mode="nearest"``.
    scale_x, scale_y : float
        Multipliers of the two differences (one over the pixel size).
    factor : float
        Multiplier of the magnitude.
    components : bool
        False: only the magnitude is written (``gx`` and ``gy`` come back as
        None), about 30 % less time.

    Returns
    -------
    magnitude, gx, gy : ndarray, float32
        ``gx = float32(correlate1d(response, stencil, 1)) * scale_x`` (float32
        product), ``gy`` likewise along columns, and
        ``magnitude = hypot(gx, gy) * factor`` (the root taken in float64, where
        the squares of float32 values cannot overflow).
    """
    img = np.ascontiguousarray(response, dtype=np.float32)
    st = np.ascontiguousarray(stencil, dtype=np.float32)
    shape = img.shape if components else (0, 0)
    gx = np.empty(shape, np.float32)
    gy = np.empty(shape, np.float32)
    mag = np.empty(img.shape, np.float32)
    if img.size > 0:
        sx, sy, fac = np.float32(scale_x), np.float32(scale_y), np.float32(factor)
        _bands(_gradient_passes, img.shape[0], img.size, img, st, sx, sy, fac, bool(components), gx, gy, mag)
    return (mag, gx, gy) if components else (mag, None, None)


@numba.njit(cache=True, nogil=True)
def _log_rows(image, kr_s, kr_d, kc_s, kc_d, scale_x, scale_y, with_gradient, stencil, gsx, gsy, factor,
              with_components, out, gx, gy, mag, row0, row1):  # pragma: no cover - compiled
    """LoG rows ``row0:row1`` (and their gradient and magnitude) over rolling buffers of rows.

    Row passes fill a ring of ``2 r + 1`` rows (``r`` the column kernels'
    half-width), each source row once; each LoG row is summed down the
    columns from the ring, and with ``with_gradient`` kept in a ring of five
    rows from which the 5-point gradient and its magnitude are taken.  Every
    cell gets the sums, in the order and with the roundings, of
    :func:`_along_rows`, :func:`_along_columns` and :func:`_gradient_passes`
    on whole images, while the intermediate images never leave the cache.
    """
    h, w = image.shape
    tr = kr_s.size
    rr = tr // 2
    rc = kc_s.size // 2
    n1 = 2 * rc + 1
    ring_s = np.empty((n1, w), np.float32)
    ring_d = np.empty((n1, w), np.float32)
    ring_l = np.empty((5, w), np.float32)
    ts = stencil.size
    rs = ts // 2 if with_gradient else 0
    l_first = max(0, row0 - rs)
    l_last = min(h, row1 + rs)  # exclusive
    next_src = max(0, l_first - rc)
    for l in range(l_first, l_last):
        # row passes (both row kernels on one read of the row) for every source row LoG row l reads
        top = min(h - 1, l + rc)
        while next_src <= top:
            line = np.empty(w + tr - 1, np.float32)
            acc_a = np.zeros(w, np.float32)
            acc_b = np.zeros(w, np.float32)
            _fill_line(image, next_src, rr, 0, line)
            for t in range(tr):
                ka = kr_s[t]
                kb = kr_d[t]
                for j in range(w):
                    v = line[j + t]
                    acc_a[j] += ka * v
                    acc_b[j] += kb * v
            slot = next_src % n1
            for j in range(w):
                ring_s[slot, j] = acc_a[j]
                ring_d[slot, j] = acc_b[j]
            next_src += 1
        # LoG row l: Lyy (second derivative down the smoothed rows) and Lxx (smoothing down the
        # second-derivative rows), folded symmetric column taps
        acc_a = np.empty(w, np.float32)
        acc_b = np.empty(w, np.float32)
        c = l % n1
        ka = kc_d[rc]
        kb = kc_s[rc]
        for j in range(w):
            acc_a[j] = ka * ring_s[c, j]
            acc_b[j] = kb * ring_d[c, j]
        for t in range(1, rc + 1):
            ka = kc_d[rc + t]
            kb = kc_s[rc + t]
            hi = _source_index(l + t, h, 0) % n1
            lo = _source_index(l - t, h, 0) % n1
            for j in range(w):
                acc_a[j] += ka * (ring_s[hi, j] + ring_s[lo, j])
                acc_b[j] += kb * (ring_d[hi, j] + ring_d[lo, j])
        cl = l % 5
        for j in range(w):
            ring_l[cl, j] = np.float32(np.float32(acc_b[j]) * scale_x) + np.float32(np.float32(acc_a[j]) * scale_y)
        if row0 <= l < row1:
            for j in range(w):
                out[l, j] = ring_l[cl, j]
        if not with_gradient:
            continue
        # gradient and magnitude of the rows whose five LoG rows (border rows repeated) are in
        o = max(l - rs, row0)
        o_end = min(row1, h) if l == h - 1 else l - rs + 1
        while o < o_end:
            _gradient_row(ring_l, 5, h, o, stencil, gsx, gsy, factor, with_components, gx, gy, mag)
            o += 1


@numba.njit(cache=True, nogil=True)
def _derivative_rows(image, kx, ky, sym_y, pair_x, pair_y, scales, out, row0, row1):  # pragma: no cover
    """Rows ``row0:row1`` of separable derivatives of one image, over rolling buffers of row passes.

    Row ``x`` kernels ``kx[k]`` fill one ring of ``2 r + 1`` rows each; output ``p`` is column
    kernel ``ky[pair_y[p]]`` over ring ``pair_x[p]``, times ``scales[p]``: the sums, in order and
    rounding, of :func:`_along_rows` then :func:`_along_columns` (folded taps where ``sym_y`` is
    1 or -1), borders reflected.
    """
    h, w = image.shape
    nx = kx.shape[0]
    tr = kx.shape[1]
    rr = tr // 2
    tc = ky.shape[1]
    rc = tc // 2
    n1 = 2 * rc + 1
    rings = np.empty((nx, n1, w), np.float32)
    next_src = max(0, row0 - rc)
    acc = np.empty(w, np.float32)
    for l in range(row0, row1):
        top = min(h - 1, l + rc)
        while next_src <= top:
            line = np.empty(w + tr - 1, np.float32)
            _fill_line(image, next_src, rr, 0, line)
            slot = next_src % n1
            for k in range(nx):
                row = np.zeros(w, np.float32)
                for t in range(tr):
                    kt = kx[k, t]
                    for j in range(w):
                        row[j] += kt * line[j + t]
                for j in range(w):
                    rings[k, slot, j] = row[j]
            next_src += 1
        for p in range(pair_x.size):
            ring = rings[pair_x[p]]
            kern = ky[pair_y[p]]
            sym = sym_y[pair_y[p]]
            if sym == 0:
                for j in range(w):
                    acc[j] = 0.0
                for t in range(tc):
                    kt = kern[t]
                    src = _source_index(l + t - rc, h, 0) % n1
                    for j in range(w):
                        acc[j] += kt * ring[src, j]
            else:
                c = l % n1
                kt = kern[rc]
                for j in range(w):
                    acc[j] = kt * ring[c, j]
                for t in range(1, rc + 1):
                    kt = kern[rc + t]
                    hi = _source_index(l + t, h, 0) % n1
                    lo = _source_index(l - t, h, 0) % n1
                    if sym > 0:
                        for j in range(w):
                            acc[j] += kt * (ring[hi, j] + ring[lo, j])
                    else:
                        for j in range(w):
                            acc[j] += kt * (ring[hi, j] - ring[lo, j])
            sc = scales[p]
            for j in range(w):
                out[p, l, j] = acc[j] * sc


def derivative_sweep(image: np.ndarray, x_kernels: list, y_kernels: list, pairs: list, scales: list) -> np.ndarray:
    """Several separable derivatives of one image in one sweep.

    Output ``p`` is ``correlate1d(correlate1d(image, x_kernels[i], 1), y_kernels[k], 0) * scales[p]``
    for ``(i, k) = pairs[p]``, bit for bit (``mode="reflect"``, float32); the row passes are kept
    in rolling buffers instead of whole images.  All x kernels must have one length, all y
    kernels another.

    Returns
    -------
    ndarray, shape (len(pairs), rows, cols), float32
    """
    img = np.ascontiguousarray(image, dtype=np.float32)
    kx = np.ascontiguousarray(np.stack([np.asarray(k, np.float32) for k in x_kernels]))
    ky = np.ascontiguousarray(np.stack([np.asarray(k, np.float32) for k in y_kernels]))
    if kx.shape[1] % 2 == 0 or ky.shape[1] % 2 == 0 or img.ndim != 2:
        raise ValueError("kernels must have an odd number of taps, the image two dimensions")
    sym_y = np.array([kernel_symmetry(k) for k in ky], np.int64)
    pair_x = np.array([p[0] for p in pairs], np.int64)
    pair_y = np.array([p[1] for p in pairs], np.int64)
    sc = np.array([np.float32(v) for v in scales], np.float32)
    out = np.empty((len(pairs),) + img.shape, np.float32)
    if img.size:
        _bands(_derivative_rows, img.shape[0], img.size, img, kx, ky, sym_y, pair_x, pair_y, sc, out)
    return out


def _log_kernels(row_smooth, row_second, col_smooth, col_second) -> tuple:
    kr_s, kr_d = (np.ascontiguousarray(k, dtype=np.float32) for k in (row_smooth, row_second))
    kc_s, kc_d = (np.ascontiguousarray(k, dtype=np.float32) for k in (col_smooth, col_second))
    if kr_s.size != kr_d.size or kc_s.size != kc_d.size or kr_s.size % 2 == 0 or kc_s.size % 2 == 0:
        raise ValueError("kernel pairs must have the same odd length")
    if kernel_symmetry(kc_s) != 1 or kernel_symmetry(kc_d) != 1:
        raise ValueError("column kernels must be symmetric")
    return kr_s, kr_d, kc_s, kc_d


def laplacian_passes(image: np.ndarray, row_smooth: np.ndarray, row_second: np.ndarray,
                     col_smooth: np.ndarray, col_second: np.ndarray, scale_x: float, scale_y: float) -> np.ndarray:
    """``scale_x * Lxx + scale_y * Lyy`` from separable kernels, in one sweep instead of four passes.

    ``Lxx`` is ``row_second`` along rows then ``col_smooth`` down columns,
    ``Lyy`` is ``row_smooth`` along rows then ``col_second`` down columns
    (``mode="reflect"``).  The sums, their order and the float32 roundings
    are those of four :func:`correlate1d` passes followed by
    ``lxx * float32(scale_x) + lyy * float32(scale_y)`` in float32, so the
    result is bit for bit the same; each row is read once for both row
    kernels, and the row passes live in a rolling buffer of rows
    (:func:`_log_rows`), not in whole intermediate images.

    Parameters
    ----------
    image : ndarray, shape (rows, cols), float32
    row_smooth, row_second : ndarray
        Kernels along rows (x, ``axis=1``), same length, odd.
    col_smooth, col_second : ndarray
        Kernels down columns (y, ``axis=0``), same length, odd, symmetric.
    scale_x, scale_y : float
        Rounded to float32 before use.

    Returns
    -------
    ndarray, shape (rows, cols), float32
    """
    out, _, _, _ = _log_sweep(image, row_smooth, row_second, col_smooth, col_second, scale_x, scale_y, None)
    return out


def log_and_gradient(image: np.ndarray, row_smooth: np.ndarray, row_second: np.ndarray,
                     col_smooth: np.ndarray, col_second: np.ndarray, scale_x: float, scale_y: float,
                     stencil: np.ndarray, gradient_x: float, gradient_y: float, factor: float, *,
                     components: bool = True) -> tuple:
    """:func:`laplacian_passes` and :func:`gradient_and_magnitude` of its result, in one sweep.

    The same numbers, bit for bit, as the two calls one after the other;
    the LoG rows are differenced while they are still in the cache.

    Returns
    -------
    response, magnitude : ndarray, float32
    gx, gy : ndarray, float32, or None when ``components`` is False
    """
    return _log_sweep(image, row_smooth, row_second, col_smooth, col_second, scale_x, scale_y,
                      (stencil, gradient_x, gradient_y, factor, components))


def _log_sweep(image, row_smooth, row_second, col_smooth, col_second, scale_x, scale_y, gradient) -> tuple:
    img = np.ascontiguousarray(image, dtype=np.float32)
    kr_s, kr_d, kc_s, kc_d = _log_kernels(row_smooth, row_second, col_smooth, col_second)
    out = np.empty(img.shape, np.float32)
    with_gradient = gradient is not None
    if with_gradient:
        stencil, gradient_x, gradient_y, factor, components = gradient
        st = np.ascontiguousarray(stencil, dtype=np.float32)
        mag = np.empty(img.shape, np.float32)
        shape = img.shape if components else (0, 0)
    else:
        st, gradient_x, gradient_y, factor, components = np.zeros(1, np.float32), 0.0, 0.0, 0.0, False
        mag = np.empty((0, 0), np.float32)
        shape = (0, 0)
    gx = np.empty(shape, np.float32)
    gy = np.empty(shape, np.float32)
    if img.size > 0:
        _bands(_log_rows, img.shape[0], img.size, img, kr_s, kr_d, kc_s, kc_d, np.float32(scale_x),
               np.float32(scale_y), with_gradient, st, np.float32(gradient_x), np.float32(gradient_y),
               np.float32(factor), bool(components), out, gx, gy, mag)
    if not with_gradient:
        return out, None, None, None
    return (out, mag, gx, gy) if components else (out, mag, None, None)
