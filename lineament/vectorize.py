"""From traced pixel-space pieces to georeferenced, simplified line records.

Simplification is Douglas-Peucker (Douglas and Peucker 1973) through
shapely, with the tolerance in ground metres.

Douglas, D. H. and Peucker, T. K. (1973). Algorithms for the reduction of the
number of points required to represent a digitized line or its caricature.
Cartographica 10(2), 112-122. doi:10.3138/FM57-6770-U75U-7727
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable

import numpy as np
import shapely
from shapely.geometry import LineString

from .crossings import CrossingPiece
from .geodesy import line_measures
from .georef import GeoRef

#: Attribute names and types of every written line, in order (fiona schema types).
ATTRIBUTE_TYPES: dict[str, str] = {
    "kind": "str:8",
    "operator": "str:8",
    "scale_m": "float",
    "scale_px": "float",
    "strength": "float",
    "strength_max": "float",
    "length_m": "float",
    "azimuth_deg": "float",
    "azimuth_grid_deg": "float",
    "best_scale_m": "float",
    "source": "str:254",
}


#: Decimals kept when attributes are written (millimetres, thousandths of a degree).
_DECIMALS = {"scale_m": 3, "length_m": 3, "azimuth_deg": 3, "azimuth_grid_deg": 3, "best_scale_m": 2}


@dataclass(frozen=True)
class Lineament:
    """One extracted line with its attributes.

    Attributes
    ----------
    geometry : shapely.LineString
        Map coordinates in the raster's CRS.
    kind : str
        ``"edge"`` for zero crossings of the LoG/DoG.
    operator : str
        ``"log"`` or ``"dog"``.
    scale_m, scale_px : float
        Sigma of the scale that found the line, metres and pixels.
    strength, strength_max : float
        Mean and maximum vertex strength: the height of the ideal step that
        would give the same response (raster units, metres for a DEM).
    length_m : float
        Geodesic length on the CRS's ellipsoid, metres.
    azimuth_deg : float
        Overall direction, clockwise from true north, in [0, 180).
    azimuth_grid_deg : float
        Overall direction clockwise from grid north (NaN for geographic CRSs).
    source : str
        Input file name.
    best_scale_m : float
        Scale at which the line's scale-normalised strength peaks (NaN when
        not selected, or when the peak lies outside the searched range).
    """

    geometry: LineString
    kind: str
    operator: str
    scale_m: float
    scale_px: float
    strength: float
    strength_max: float
    length_m: float
    azimuth_deg: float
    azimuth_grid_deg: float
    source: str
    best_scale_m: float = float("nan")

    def properties(self) -> dict:
        """Attributes as a plain dict (keys of :data:`ATTRIBUTE_TYPES`)."""
        out = {}
        for k, decimals in _ROUNDING:
            v = getattr(self, k)
            if isinstance(v, float):
                v = None if v != v else round(v, decimals)  # NaN -> None
            out[k] = v
        return out


#: (attribute, decimals) in the order of :data:`ATTRIBUTE_TYPES`.
_ROUNDING = tuple((k, _DECIMALS.get(k, 4)) for k in ATTRIBUTE_TYPES)


def pieces_to_lines(pieces: Iterable[CrossingPiece], georef: GeoRef, *, tolerance_m: float,
                    min_length_m: float, attributes: dict, best_scales=None) -> list[Lineament]:
    """Georeference, simplify and measure traced pieces.

    Parameters
    ----------
    pieces : iterable of CrossingPiece or (rows, cols, strength) tuples
        Pixel-centre fractional indices and vertex strengths.
    georef : GeoRef
    tolerance_m : float
        Douglas-Peucker tolerance in ground metres (converted to CRS units).
    min_length_m : float
        Lines shorter than this (geodesic metres) are dropped.
    attributes : dict
        ``scale_m``, ``scale_px``, ``operator``, ``kind``, ``source``.
    best_scales : sequence of float, optional
        ``best_scale_m`` of each piece.

    Returns
    -------
    list of Lineament
        In the order of the pieces.
    """
    pieces = list(pieces)
    if not pieces:
        return []
    rows, cols, strengths = [], [], []
    for p in pieces:
        r, c, strength = (p.rows, p.cols, p.strength) if isinstance(p, CrossingPiece) else p
        rows.append(np.asarray(r, dtype=np.float64))
        cols.append(np.asarray(c, dtype=np.float64))
        strengths.append(strength)
    # one conversion and one geometry array for all pieces (element-wise: the same numbers as per piece)
    x, y = georef.pixel_to_map(np.concatenate(rows), np.concatenate(cols))
    # tolerance in CRS units: metres / (metres per unit); for degrees use the pixel ratio
    px_units = min(georef.pixel_size)
    px_m = min(georef.pixel_size_m())
    tol_units = tolerance_m * px_units / px_m if px_m > 0 else 0.0
    counts = [r.size for r in rows]
    geoms = shapely.linestrings(x, y, indices=np.repeat(np.arange(len(rows)), counts))
    if tol_units > 0:
        geoms = shapely.simplify(geoms, tol_units, preserve_topology=False)
    flat, owner = shapely.get_coordinates(geoms, return_index=True)
    coords = np.split(flat, np.cumsum(np.bincount(owner, minlength=len(geoms)))[:-1])
    keep = [i for i, c in enumerate(coords) if len(c) >= 2]
    measures = line_measures([coords[i][:, 0] for i in keep], [coords[i][:, 1] for i in keep], georef)
    out = []
    for j, i in enumerate(keep):
        length = float(measures["length_m"][j])
        if length < min_length_m or length <= 0:
            continue
        s = strengths[i]
        out.append(Lineament(
            geometry=geoms[i],
            kind=attributes["kind"],
            operator=attributes["operator"],
            scale_m=float(attributes["scale_m"]),
            scale_px=float(attributes["scale_px"]),
            strength=float(np.mean(s)),
            strength_max=float(np.max(s)),
            length_m=length,
            azimuth_deg=float(measures["azimuth_deg"][j]),
            azimuth_grid_deg=float(measures["azimuth_grid_deg"][j]),
            source=str(attributes["source"]),
            best_scale_m=float("nan") if best_scales is None else float(best_scales[i]),
        ))
    return out
