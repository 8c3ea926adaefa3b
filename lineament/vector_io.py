"""Writing line layers with fiona: format by extension, atomic replace, run metadata.

Formats: GeoPackage (``.gpkg``, default and recommended; OGC 12-128r18),
FlatGeobuf (``.fgb``), ESRI Shapefile (``.shp``) and GeoJSON (``.geojson`` or
``.json``; RFC 7946, so always WGS84 longitude/latitude).

Every write goes to a temporary file in the destination folder and is
renamed into place only when complete, so a failed or interrupted run never
leaves a partial layer and never damages an existing one.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from pathlib import Path
from typing import Iterable

import fiona
import fiona.errors
import numpy as np
from pyproj import CRS, Transformer
from pyproj.exceptions import CRSError

from .errors import OutputError
from .vectorize import ATTRIBUTE_TYPES, Lineament

#: Output extension -> OGR driver name.
DRIVERS = {
    ".gpkg": "GPKG",
    ".fgb": "FlatGeobuf",
    ".shp": "ESRI Shapefile",
    ".geojson": "GeoJSON",
    ".json": "GeoJSON",
}

#: Shapefile field names are limited to 10 characters (dBASE); these are used there instead
#: (every other attribute name is short enough).  Units stay in the names.
SHAPEFILE_FIELD_NAMES = {"best_scale_m": "best_scl_m", "strength_max": "strengthmx", "azimuth_deg": "azim_deg",
                         "azimuth_grid_deg": "azgrid_deg"}

_SHAPEFILE_PARTS = (".shp", ".shx", ".dbf", ".prj", ".cpg")

#: Name of the layer written to GeoPackages.
LAYER_NAME = "lineaments"

#: Metadata namespace used for the run parameters in a GeoPackage.
METADATA_KEY = "lineament_run"


def driver_for(path: str | os.PathLike) -> str:
    """OGR driver for an output path, from its extension."""
    ext = Path(path).suffix.lower()
    try:
        return DRIVERS[ext]
    except KeyError:
        known = ", ".join(sorted(DRIVERS))
        raise OutputError(f"{path}: unknown output format {ext or '(no extension)'!r}; use one of {known}") from None


def sidecar_path(path: str | os.PathLike) -> Path:
    """Path of the JSON sidecar holding run metadata for non-GeoPackage outputs."""
    p = Path(path)
    return p.with_name(p.name + ".run.json")


def _outputs_of(path: Path) -> list[Path]:
    if path.suffix.lower() == ".shp":
        return [path.with_suffix(ext) for ext in _SHAPEFILE_PARTS]
    return [path]


def check_output(path: str | os.PathLike, *, overwrite: bool = False) -> str:
    """Check an output path before any work is done; return its driver.

    Raises
    ------
    OutputError
        Unknown extension, missing or unwritable folder, or an existing
        output when ``overwrite`` is False.
    """
    p = Path(path)
    if p.is_dir():
        raise OutputError(f"{path}: is a folder; give a file name such as lines.gpkg")
    driver = driver_for(p)
    folder = p.parent
    if not folder.exists():
        # a regular file somewhere up the path makes the folder impossible, not just missing
        blocker = next((q for q in folder.parents if q.exists() and not q.is_dir()), None)
        if blocker is not None:
            raise OutputError(f"{path}: {blocker} is a file, not a folder")
        raise OutputError(f"{path}: folder {folder} does not exist")
    if not folder.is_dir():
        raise OutputError(f"{path}: {folder} is a file, not a folder")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(f"{path}: folder {folder} is not writable")
    if not overwrite:
        existing = [q for q in _outputs_of(p) if q.exists()]
        if driver != "GPKG" and sidecar_path(p).exists():
            existing.append(sidecar_path(p))
        if existing:
            raise OutputError(f"{path}: output exists; pass --overwrite to replace it")
    return driver


def _schema(driver: str) -> tuple[dict, dict]:
    rename = SHAPEFILE_FIELD_NAMES if driver == "ESRI Shapefile" else {}
    props = {rename.get(k, k): v for k, v in ATTRIBUTE_TYPES.items()}
    return {"geometry": "LineString", "properties": props}, rename


def write_lines(result, path: str | os.PathLike, *, overwrite: bool = False,
                crs: CRS | str | None = None) -> Path:
    """Write an extraction result (or a list of them) as a line layer.

    Parameters
    ----------
    result : ExtractionResult or list of ExtractionResult
        Lines, georeferencing and run metadata.  Several results are written
        to one layer; they must share a CRS unless ``crs`` is given.
    path : path-like
        Output file; the extension chooses the format (see :data:`DRIVERS`).
    overwrite : bool
        Replace an existing output.
    crs : pyproj.CRS or str, optional
        Reproject lines to this CRS (GeoJSON is always WGS84).

    Returns
    -------
    pathlib.Path
        The written file.

    Raises
    ------
    OutputError
        The output cannot be written (see :func:`check_output`), the lines
        have no CRS but GeoJSON or reprojection was asked for, or GDAL or
        the file system fails while writing.  Nothing is left behind: the
        destination is either the complete new layer or untouched.
    """
    results = list(result) if isinstance(result, (list, tuple)) else [result]
    if not results:
        raise OutputError(f"{path}: nothing to write (no extraction results given)")
    driver = check_output(path, overwrite=overwrite)
    out_path = Path(path)
    crs_list = [r.georef.crs for r in results]
    if any(c is None for c in crs_list) and any(c is not None for c in crs_list):
        raise OutputError(f"{path}: some results have a CRS and some do not; they cannot share one layer")
    src_crs = crs_list[0]
    if crs is not None:
        try:
            dst_crs = CRS.from_user_input(crs)
        except CRSError as exc:
            first = (str(exc).splitlines() or [type(exc).__name__])[0]
            raise OutputError(f"{path}: output CRS {crs!r} is not a CRS ({first})") from None
    else:
        dst_crs = src_crs
    if src_crs is None and (driver == "GeoJSON" or crs is not None):
        raise OutputError(f"{path}: the lines have no CRS (pixel coordinates), so they cannot be "
                          f"{'written as GeoJSON, which is always WGS84' if driver == 'GeoJSON' else 'reprojected'}; "
                          "write a GeoPackage instead")
    if driver == "GeoJSON":
        dst_crs = CRS.from_epsg(4326)
    lines: list[Lineament] = [line for r in results for line in r.lines]
    metadata = results[0].metadata() if len(results) == 1 else {
        "software": "lineament", "runs": [r.metadata() for r in results]}
    metadata["output_crs"] = None if dst_crs is None else dst_crs.to_wkt()
    records = _records(lines, src_crs, dst_crs, driver, [r.georef.crs for r in results for _ in r.lines])
    schema, _ = _schema(driver)
    _atomic_write(out_path, driver, schema, dst_crs, records, metadata)
    return out_path


def _records(lines: list[Lineament], src_crs, dst_crs, driver: str, line_crs: list) -> Iterable[dict]:
    _, rename = _schema(driver)
    # one comparison and transformer per CRS object (every line of a run shares its raster's CRS)
    transformers: dict = {}
    for line, lcrs in zip(lines, line_crs):
        coords = np.asarray(line.geometry.coords, dtype=np.float64)
        if dst_crs is not None and lcrs is not None:
            key = id(lcrs)
            if key not in transformers:
                transformers[key] = (lcrs, None if CRS(lcrs).equals(dst_crs)
                                     else Transformer.from_crs(lcrs, dst_crs, always_xy=True))
            transformer = transformers[key][1]
            if transformer is not None:
                x, y = transformer.transform(coords[:, 0], coords[:, 1])
                coords = np.column_stack((x, y))
        props = {rename.get(k, k): v for k, v in line.properties().items()}
        yield {"geometry": {"type": "LineString", "coordinates": coords.tolist()}, "properties": props}


def _atomic_write(out_path: Path, driver: str, schema: dict, crs, records: Iterable[dict],
                  metadata: dict) -> None:
    """Write into a temporary folder beside ``out_path``, then rename into place.

    Errors of GDAL or of the file system become :class:`OutputError`; any
    other exception (for example from ``records``) propagates unchanged.  In
    every case the temporary folder is removed and ``out_path`` is either
    the complete new layer or untouched.
    """
    folder = out_path.parent
    try:
        tmpdir = Path(tempfile.mkdtemp(prefix=".lineament-", dir=folder))
    except OSError as exc:
        raise OutputError(f"{out_path}: cannot write in folder {folder} ({exc.strerror or exc})") from None
    try:
        tmp = tmpdir / out_path.name
        options = {}
        if driver == "GeoJSON":
            options["RFC7946"] = "YES"
        if driver == "GPKG":
            options["layer"] = LAYER_NAME
        crs_wkt = None if crs is None else crs.to_wkt()
        with fiona.open(tmp, "w", driver=driver, schema=schema, crs_wkt=crs_wkt, **options) as dst:
            dst.writerecords(records)
            if driver == "GPKG":
                dst.update_tags({METADATA_KEY: json.dumps(metadata)})
        if driver != "GPKG":
            with open(tmpdir / (out_path.name + ".run.json"), "w", encoding="utf-8") as fh:
                json.dump(metadata, fh, indent=2)
        # move into place: each part by an atomic rename, the main file last
        parts = sorted(tmpdir.iterdir(), key=lambda q: q.name == out_path.name)
        for part in parts:
            os.replace(part, folder / part.name)
    except (fiona.errors.FionaError, OSError) as exc:
        first = (str(exc).splitlines() or [type(exc).__name__])[0]
        raise OutputError(f"{out_path}: cannot write {driver} layer ({first})") from None
    except Exception as exc:
        # GDAL errors can surface as fiona._err.CPLE_* classes that derive from Exception only
        if type(exc).__module__.startswith("fiona"):
            first = (str(exc).splitlines() or [type(exc).__name__])[0]
            raise OutputError(f"{out_path}: cannot write {driver} layer ({first})") from None
        raise
    finally:
        shutil.rmtree(tmpdir, ignore_errors=True)


def read_run_metadata(path: str | os.PathLike) -> dict | None:
    """Run metadata stored with an output (GeoPackage tags or JSON sidecar)."""
    p = Path(path)
    if driver_for(p) == "GPKG":
        with fiona.open(p, layer=LAYER_NAME) as src:
            raw = src.tags().get(METADATA_KEY)
        return None if raw is None else json.loads(raw)
    side = sidecar_path(p)
    if not side.exists():
        return None
    with open(side, encoding="utf-8") as fh:
        return json.load(fh)
