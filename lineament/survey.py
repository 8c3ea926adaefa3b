"""Many inputs as one survey: expand paths, group into mosaics, extract each group."""

from __future__ import annotations

import dataclasses
import glob
import os
from pathlib import Path
from typing import Callable

from .errors import InputError
from .pipeline import ExtractionResult, make_executor, run_extraction
from .raster_io import open_raster
from .resume import TileCache, input_identity, resume_folder
from .settings import ExtractionSettings
from .tiling import MosaicSource, group_inputs

#: File extensions taken from a folder given as input.
RASTER_EXTENSIONS = (".tif", ".tiff", ".vrt", ".img", ".jp2")


def expand_inputs(items: list[str]) -> tuple[list[str], list[str]]:
    """Turn files, folders and glob patterns into a sorted list of raster paths.

    A folder contributes the rasters directly inside it (not sub-folders);
    links that lead outside the folder are skipped and reported.  A pattern
    that matches nothing is an error.

    Returns
    -------
    paths : list of str
    notes : list of str
        Messages about what was skipped.
    """
    paths: list[str] = []
    notes: list[str] = []
    for item in items:
        if os.path.isdir(item):
            root = Path(item).resolve()
            found = []
            for entry in sorted(Path(item).iterdir()):
                if entry.suffix.lower() not in RASTER_EXTENSIONS or not entry.is_file():
                    continue
                if entry.is_symlink() and root not in entry.resolve().parents:
                    notes.append(f"{entry}: skipped, it links outside {item}")
                    continue
                found.append(str(entry))
            if not found:
                raise InputError(f"{item}: folder holds no rasters ({', '.join(RASTER_EXTENSIONS)})")
            paths.extend(found)
        elif any(ch in item for ch in "*?[") and not os.path.exists(item):
            found = sorted(glob.glob(item))
            if not found:
                raise InputError(f"{item}: pattern matches no file")
            paths.extend(found)
        else:
            paths.append(item)
    seen = set()
    unique = []
    for p in sorted(paths):
        key = os.path.abspath(p)
        if key not in seen:
            seen.add(key)
            unique.append(p)
    return unique, notes


def extract_survey(inputs: list[str], settings: ExtractionSettings | None = None, *,
                   tile_size: int | None = None, workers: int = 1, cluster: str | None = None,
                   progress: Callable[[int, int], None] | None = None, resume_output: str | None = None,
                   resume: bool = False) -> list[ExtractionResult]:
    """Extract lineaments from one or many rasters.

    Inputs sharing a CRS and pixel grid are processed as one mosaic, so a
    line crossing from one raster into the next comes out whole; each line's
    ``source`` is the raster holding its middle vertex.  Inputs on other
    grids or CRSs are processed separately.

    Parameters
    ----------
    inputs : list of str
        Files, folders or glob patterns.
    settings : ExtractionSettings, optional
    tile_size, workers, cluster, progress
        As :func:`~lineament.pipeline.extract_file`.
    resume_output : str, optional
        Output path whose resume folder keeps finished tiles.
    resume : bool
        Reuse finished tiles from an earlier, interrupted run.

    Returns
    -------
    list of ExtractionResult
        One per group, in sorted path order.
    """
    settings = settings or ExtractionSettings()
    paths, _ = expand_inputs(list(inputs))
    if not paths:
        raise InputError("no input rasters given")
    infos = [open_raster(p, settings) for p in paths]
    sources = group_inputs(infos)
    executor = make_executor(workers, cluster)
    results = []
    for k, source in enumerate(sources):
        cache = None
        if resume_output is not None:
            members = source.infos if isinstance(source, MosaicSource) else (source.info,)
            key = {"inputs": input_identity([m.path for m in members]), "settings": settings.to_dict(),
                   "tile_size": tile_size}
            cache = TileCache(resume_folder(resume_output) / f"group{k}", key, resume=resume)
        result = run_extraction(source, settings, tile_size=tile_size, executor=executor, progress=progress,
                                cache=cache)
        if isinstance(source, MosaicSource):
            lines = []
            for line in result.lines:
                coords = line.geometry.coords
                mid = coords[len(coords) // 2]
                row, col = source.georef.map_to_pixel(mid[0], mid[1])
                lines.append(dataclasses.replace(line, source=source.source_at(float(row), float(col))))
            result.lines = lines
        results.append(result)
    return results
