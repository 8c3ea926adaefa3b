"""Tiles with overlap, and the raster sources tiles are read from.

A raster is cut into square *cores* that cover it without overlap; each core
is read with a *halo* of extra cells on every side, wide enough that every
filter, fill and margin test at a core cell sees exactly what it would see in
the whole raster.  Results inside a core are then identical, to the last
bit, to a whole-raster run.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .crossings import Core
from .georef import GeoRef
from .raster_io import RasterInfo, read_window

#: Default core size in pixels (about 16 Mpx of halo-padded float32 arrays per scale and tile).
DEFAULT_TILE_SIZE = 2048


@dataclass(frozen=True)
class Tile:
    """One core and the window read for it (global pixel indices, half-open)."""

    index: int
    core: Core
    window: tuple[int, int, int, int]  # row0, col0, row1, col1

    @property
    def offset(self) -> tuple[int, int]:
        return (self.window[0], self.window[1])

    def edges(self, shape: tuple[int, int]) -> tuple[bool, bool, bool, bool]:
        """Which window sides are raster edges: (top, bottom, left, right)."""
        r0, c0, r1, c1 = self.window
        return (r0 == 0, r1 == shape[0], c0 == 0, c1 == shape[1])


def tile_grid(shape: tuple[int, int], tile_size: int, halo: tuple[int, int], *,
              rows: tuple[int, int] | None = None, first_index: int = 0) -> list[Tile]:
    """Cores of ``tile_size`` pixels covering ``shape``, with windows grown by ``halo``.

    Parameters
    ----------
    shape : (int, int)
        Raster shape; windows are clipped to it.
    tile_size : int
        Core size in pixels.
    halo : (int, int)
        Extra rows and columns read around each core.
    rows : (int, int), optional
        Only cover these rows (a latitude band); the cores start at its first row.
    first_index : int
        Number of the first tile.  Tiles are numbered row by row from the top-left.
    """
    if tile_size < 1:
        raise ValueError("tile_size must be at least 1")
    h, w = shape
    row_start, row_stop = rows if rows is not None else (0, h)
    tiles = []
    k = first_index
    for r0 in range(row_start, row_stop, tile_size):
        for c0 in range(0, w, tile_size):
            r1, c1 = min(r0 + tile_size, row_stop), min(c0 + tile_size, w)
            window = (max(0, r0 - halo[0]), max(0, c0 - halo[1]), min(h, r1 + halo[0]), min(w, c1 + halo[1]))
            tiles.append(Tile(k, Core(r0, c0, r1, c1), window))
            k += 1
    return tiles


#: Fractional part of the golden ratio: a Kronecker sequence with this step fills the unit
#: interval most evenly (Niederreiter 1992, chapter 5; Weyl 1916).
_GOLDEN_FRACTION = (math.sqrt(5.0) - 1.0) / 2.0


def spread_sample(tiles: list[Tile], count: int) -> list[Tile]:
    """Up to ``count`` tiles of a grid, spread evenly over it in both directions (deterministic).

    Tile ``i`` of ``count`` is taken from grid row ``floor((i + 0.5) rows / count)`` and column
    ``floor(frac((i + 0.5) g) cols)``, ``g`` the golden-ratio fraction: rows are visited in order
    and columns by a Kronecker sequence, so the chosen tiles do not line up in one column (which
    taking every k-th tile in row-major order does when k divides the row length).  Returned in
    row-major order; a grid place chosen twice is taken once.

    References
    ----------
    Niederreiter, H. (1992). Random Number Generation and Quasi-Monte Carlo Methods. SIAM.
    doi:10.1137/1.9781611970081
    """
    if len(tiles) <= count:
        return list(tiles)
    row_starts = sorted({t.core.row0 for t in tiles})
    col_starts = sorted({t.core.col0 for t in tiles})
    at = {(t.core.row0, t.core.col0): t for t in tiles}
    chosen = set()
    for i in range(count):
        r = row_starts[min(len(row_starts) - 1, int((i + 0.5) * len(row_starts) / count))]
        c = col_starts[min(len(col_starts) - 1, int(math.modf((i + 0.5) * _GOLDEN_FRACTION)[0] * len(col_starts)))]
        if (r, c) in at:
            chosen.add((r, c))
    return [t for t in tiles if (t.core.row0, t.core.col0) in chosen]


#: Cells read at once by :func:`strided_overview`.
STRIP_PIXELS = 4_000_000
#: Strips read at the same time by :func:`strided_overview`, each on its own thread (reading
#: releases the interpreter lock).  The overview is the first thing a run reads, with nothing
#: else to do meanwhile; on our 2-core benchmark raster (4096 x 4096 float32, five strips) two
#: threads read it in about half the time.
OVERVIEW_THREADS = 2


def overview_step(height: int, width: int, max_pixels: int) -> int:
    """Row and column step of an overview of at most about ``max_pixels`` cells."""
    return max(1, int(math.ceil(math.sqrt(height * width / max_pixels))))


def strided_subsample(values: np.ndarray, valid: np.ndarray, max_pixels: int) -> tuple[np.ndarray, np.ndarray]:
    """The overview of a raster already read whole: the cells :func:`strided_overview` reads."""
    step = overview_step(values.shape[0], values.shape[1], max_pixels)
    return values[::step, ::step], valid[::step, ::step]


def strided_overview(read, georef: GeoRef, max_pixels: int, *,
                     threads: int = OVERVIEW_THREADS) -> tuple[np.ndarray, np.ndarray]:
    """Every k-th row and column of a raster (at most about ``max_pixels`` cells).

    Read in strips of about :data:`STRIP_PIXELS` cells, ``threads`` strips
    at a time, so memory stays bounded whatever the raster size.  ``read``
    must be safe to call from several threads at once (each call opening
    its own dataset, as :func:`~lineament.raster_io.read_window` does).
    """
    step = overview_step(georef.height, georef.width, max_pixels)
    strip = max(step, (STRIP_PIXELS // max(1, georef.width) // step) * step)

    def one(r0: int) -> tuple[np.ndarray, np.ndarray]:
        v, ok = read((r0, 0, min(georef.height, r0 + strip), georef.width))
        # copies: a view would keep the whole strip alive
        return v[::step, ::step].copy(), ok[::step, ::step].copy()

    starts = range(0, georef.height, strip)
    if threads > 1 and len(starts) > 1:
        from ._kernels import thread_pool

        parts = list(thread_pool("lineament-overview", threads).map(one, starts))  # in order
    else:
        parts = [one(r0) for r0 in starts]
    return np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts])


@dataclass(frozen=True)
class ArraySource:
    """An in-memory raster: values, validity and georeferencing."""

    values: np.ndarray
    valid: np.ndarray
    georef: GeoRef
    source: str
    is_image: bool = False

    @property
    def reads_in_worker(self) -> bool:
        return False

    def read(self, window: tuple[int, int, int, int]) -> tuple[np.ndarray, np.ndarray]:
        r0, c0, r1, c1 = window
        return self.values[r0:r1, c0:c1], self.valid[r0:r1, c0:c1]

    def overview(self, max_pixels: int) -> tuple[np.ndarray, np.ndarray]:
        """Values and validity on a regular subsample of at most about ``max_pixels`` cells."""
        return strided_subsample(self.values, self.valid, max_pixels)


@dataclass(frozen=True)
class FileSource:
    """A raster file read window by window (in the worker that needs it)."""

    info: RasterInfo

    @property
    def georef(self) -> GeoRef:
        return self.info.georef

    @property
    def source(self) -> str:
        return self.info.source

    @property
    def reads_in_worker(self) -> bool:
        return True

    @property
    def is_image(self) -> bool:
        """RGB luminance or 8-bit data is an image; anything else is taken as a DEM."""
        return len(self.info.bands) == 3 or self.info.dtype == "uint8"

    def read(self, window: tuple[int, int, int, int]) -> tuple[np.ndarray, np.ndarray]:
        return read_window(self.info, *window)

    def overview(self, max_pixels: int) -> tuple[np.ndarray, np.ndarray]:
        """Values and validity on a regular subsample (see :func:`strided_overview`)."""
        return strided_overview(self.read, self.georef, max_pixels)


@dataclass(frozen=True)
class MosaicSource:
    """Several rasters on one pixel grid, read as one raster (a virtual mosaic).

    Cells covered by no input are voids.  Where inputs overlap, the later
    one in sorted path order wins (they are expected to agree).
    """

    infos: tuple
    placements: tuple  # (row offset, col offset) of each input in the mosaic grid
    georef: GeoRef
    source: str

    @property
    def reads_in_worker(self) -> bool:
        return True

    @property
    def is_image(self) -> bool:
        return any(len(i.bands) == 3 or i.dtype == "uint8" for i in self.infos)

    def read(self, window: tuple[int, int, int, int]) -> tuple[np.ndarray, np.ndarray]:
        r0, c0, r1, c1 = window
        wide = any(np.dtype(i.dtype).itemsize > 2 and i.dtype != "float32" for i in self.infos)
        values = np.zeros((r1 - r0, c1 - c0), np.float64 if wide else np.float32)
        valid = np.zeros((r1 - r0, c1 - c0), bool)
        for info, (ro, co) in zip(self.infos, self.placements):
            g = info.georef
            a0, b0 = max(r0, ro), max(c0, co)
            a1, b1 = min(r1, ro + g.height), min(c1, co + g.width)
            if a0 >= a1 or b0 >= b1:
                continue
            v, ok = read_window(info, a0 - ro, b0 - co, a1 - ro, b1 - co)
            dst = (slice(a0 - r0, a1 - r0), slice(b0 - c0, b1 - c0))
            values[dst] = np.where(ok, v, values[dst])
            valid[dst] |= ok
        return values, valid

    def overview(self, max_pixels: int) -> tuple[np.ndarray, np.ndarray]:
        return strided_overview(self.read, self.georef, max_pixels)

    def source_at(self, row: float, col: float) -> str:
        """File name of the input covering a mosaic cell (the last one, as in :meth:`read`)."""
        name = self.infos[0].source
        for info, (ro, co) in zip(self.infos, self.placements):
            if ro - 0.5 <= row < ro + info.georef.height - 0.5 and co - 0.5 <= col < co + info.georef.width - 0.5:
                name = info.source
        return name


def _grid_key(g: GeoRef) -> tuple:
    """Inputs with equal keys share a pixel grid and can be mosaicked."""
    t = g.transform
    crs = None if g.crs is None else g.crs.to_wkt()
    phase_x = round((t.c / t.a) % 1.0, 6) % 1.0
    phase_y = round((t.f / t.e) % 1.0, 6) % 1.0
    return (crs, round(t.a, 9), round(t.e, 9), phase_x, phase_y)


def group_inputs(infos: list) -> list:
    """Group checked inputs into mosaics of a shared CRS and pixel grid.

    Returns a list of sources: a :class:`FileSource` for a lone raster, a
    :class:`MosaicSource` for several on one grid.  Rotated grids are never
    mosaicked.  Groups and their members are in sorted path order, so the
    result does not depend on the order inputs were given in.
    """
    infos = sorted(infos, key=lambda i: i.path)
    grids: dict = {}
    for info in infos:
        key = _grid_key(info.georef) if info.georef.is_rectilinear else ("single", info.path)
        grids.setdefault(key, []).append(info)
    out = []
    for on_grid in grids.values():
        for members in _touching(on_grid):
            if len(members) == 1:
                out.append(FileSource(members[0]))
                continue
            out.append(_mosaic(members))
    return out


def _touching(infos: list) -> list[list]:
    """Split rasters on one grid into groups that touch or overlap (connected, in path order).

    Rasters far apart on the same grid are processed separately rather than
    as one mosaic full of empty space; a line can only cross between rasters
    that touch.
    """
    n = len(infos)
    parent = list(range(n))

    def find(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    boxes = []
    for info in infos:
        t, g = info.georef.transform, info.georef
        x0, x1 = sorted((t.c, t.c + t.a * g.width))
        y0, y1 = sorted((t.f, t.f + t.e * g.height))
        tol = 0.5 * min(g.pixel_size)  # edges that meet count as touching
        boxes.append((x0 - tol, x1 + tol, y0 - tol, y1 + tol))
    for i in range(n):
        for j in range(i + 1, n):
            a, b = boxes[i], boxes[j]
            if a[0] <= b[1] and b[0] <= a[1] and a[2] <= b[3] and b[2] <= a[3]:
                parent[find(j)] = find(i)
    groups: dict = {}  # insertion order: by each group's first member in path order
    for i in range(n):
        groups.setdefault(find(i), []).append(infos[i])
    return list(groups.values())


def _mosaic(members: list) -> "MosaicSource":
    """A virtual mosaic of rasters on one north-up pixel grid."""
    from affine import Affine

    t0 = members[0].georef.transform
    a, e = t0.a, t0.e
    cols0 = [round((m.georef.transform.c - t0.c) / a) for m in members]
    rows0 = [round((m.georef.transform.f - t0.f) / e) for m in members]
    cmin, rmin = min(cols0), min(rows0)
    width = max(c - cmin + m.georef.width for c, m in zip(cols0, members))
    height = max(r - rmin + m.georef.height for r, m in zip(rows0, members))
    transform = Affine(a, 0.0, t0.c + cmin * a, 0.0, e, t0.f + rmin * e)
    g = GeoRef(transform, members[0].georef.crs, height, width)
    placements = tuple((r - rmin, c - cmin) for r, c in zip(rows0, cols0))
    return MosaicSource(tuple(members), placements, g, f"mosaic of {len(members)} rasters")
