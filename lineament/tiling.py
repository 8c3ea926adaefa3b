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


def tile_grid(shape: tuple[int, int], tile_size: int, halo: tuple[int, int]) -> list[Tile]:
    """Cores of ``tile_size`` pixels covering ``shape``, with windows grown by ``halo``.

    Tiles are numbered row by row from the top-left.
    """
    if tile_size < 1:
        raise ValueError("tile_size must be at least 1")
    h, w = shape
    tiles = []
    k = 0
    for r0 in range(0, h, tile_size):
        for c0 in range(0, w, tile_size):
            r1, c1 = min(r0 + tile_size, h), min(c0 + tile_size, w)
            window = (max(0, r0 - halo[0]), max(0, c0 - halo[1]), min(h, r1 + halo[0]), min(w, c1 + halo[1]))
            tiles.append(Tile(k, Core(r0, c0, r1, c1), window))
            k += 1
    return tiles


def spread_sample(tiles: list[Tile], count: int) -> list[Tile]:
    """Up to ``count`` tiles spread evenly over the list (deterministic)."""
    if len(tiles) <= count:
        return list(tiles)
    idx = np.unique(np.round(np.linspace(0, len(tiles) - 1, count)).astype(int))
    return [tiles[i] for i in idx]


@dataclass(frozen=True)
class ArraySource:
    """An in-memory raster: values, validity and georeferencing."""

    values: np.ndarray
    valid: np.ndarray
    georef: GeoRef
    source: str

    @property
    def reads_in_worker(self) -> bool:
        return False

    def read(self, window: tuple[int, int, int, int]) -> tuple[np.ndarray, np.ndarray]:
        r0, c0, r1, c1 = window
        return self.values[r0:r1, c0:c1], self.valid[r0:r1, c0:c1]

    def overview(self, max_pixels: int) -> tuple[np.ndarray, np.ndarray]:
        """Values and validity on a regular subsample of at most about ``max_pixels`` cells."""
        step = max(1, int(math.ceil(math.sqrt(self.values.size / max_pixels))))
        return self.values[::step, ::step], self.valid[::step, ::step]


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

    def read(self, window: tuple[int, int, int, int]) -> tuple[np.ndarray, np.ndarray]:
        return read_window(self.info, *window)

    def overview(self, max_pixels: int) -> tuple[np.ndarray, np.ndarray]:
        """Values and validity on a regular subsample of at most about ``max_pixels`` cells.

        The whole raster when it is small enough; otherwise every k-th row
        and column, read strip by strip so memory stays bounded.
        """
        g = self.georef
        step = max(1, int(math.ceil(math.sqrt(g.height * g.width / max_pixels))))
        if step == 1:
            return self.read((0, 0, g.height, g.width))
        rows_v, rows_ok = [], []
        strip = max(step, (4096 // step) * step)
        for r0 in range(0, g.height, strip):
            v, ok = self.read((r0, 0, min(g.height, r0 + strip), g.width))
            rows_v.append(v[::step, ::step])
            rows_ok.append(ok[::step, ::step])
        return np.concatenate(rows_v), np.concatenate(rows_ok)
