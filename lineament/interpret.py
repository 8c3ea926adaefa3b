"""From traced lines to interpreted lineaments: straight pieces, linked gaps, persistence over scales.

Three steps an interpreter does by eye, as pure functions on shapely lines
in a metric frame (coordinates in metres), plus :func:`refine_lines`, which
chains them on a layer in any CRS, and :func:`write_line_layer`, which
writes the result like :func:`lineament.vector_io.write_lines` does.

1. **Straight pieces** (:func:`split_at_bends`).  A line is split at the
   vertex farthest from its chord when that vertex lies more than
   ``max_deviation_m`` off the chord, or when the chords on either side of
   it differ in direction by more than ``max_bend_deg``; the halves are
   treated the same way until every piece passes.  This is the recursive
   farthest-point split of Douglas and Peucker (1973), used here to cut
   rather than to simplify.
2. **Linking** (:func:`link_collinear`).  Ends of different lines that face
   each other across a gap of at most ``max_gap_m``, whose directions differ
   by at most ``max_angle_deg`` and whose lateral offset (distance of each
   end from the other line's chord, extended) is at most ``max_offset_m``,
   are joined, best pairs (smallest gap plus offset) first, each end at most
   once and never into a loop.  Lines crossing at a large angle fail the
   direction test and stay apart.
3. **Persistence over scales** (:func:`group_across_scales`).  Lines found
   at different scales (``scale_m``) that run along each other -- directions
   within ``max_angle_deg`` and at least ``min_overlap`` of the shorter one
   within ``max_distance_m`` of the longer -- are one feature.  Groups are
   the connected components of that relation.  A feature that persists
   over a range of scales is more likely a real structure than one found at
   a single scale (Lindeberg 1998, "Edge detection and ridge detection with
   automatic scale selection", IJCV 30(2), 117-156).

Attributes added to the written lines:

* ``straightness`` -- chord length / path length, in (0, 1].
* ``n_parts`` -- number of traced pieces joined into the line (1 if none).
* ``feature_id`` -- identifier of the multi-scale feature.
* ``scales_found`` -- number of distinct scales at which the feature was found.
* ``scale_min_m``, ``scale_max_m`` -- smallest and largest such sigma, metres
  (two numbers rather than one text field, so they can be filtered on).

Douglas, D. H. and Peucker, T. K. (1973). Algorithms for the reduction of the
number of points required to represent a digitized line or its caricature.
Cartographica 10(2), 112-122.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import shapely
from affine import Affine
from pyproj import CRS
from shapely.geometry import LineString

from ._version import __version__
from .analysis.layers import metric_crs_for, read_lines, reproject_lines
from .errors import InputError, OutputError, SettingsError
from .geodesy import line_measures
from .georef import GeoRef
from .vector_io import SHAPEFILE_FIELD_NAMES, _atomic_write, check_output, read_run_metadata
from .vectorize import ATTRIBUTE_TYPES

__all__ = [
    "INTERPRETED_ATTRIBUTE_TYPES",
    "RefineSettings",
    "group_across_scales",
    "link_collinear",
    "read_line_layer",
    "refine_file",
    "refine_lines",
    "split_at_bends",
    "straightness",
    "write_line_layer",
]

#: Attributes added by :func:`refine_lines` after those of the extraction (fiona schema types).
INTERPRETED_ATTRIBUTE_TYPES: dict[str, str] = {
    "straightness": "float",
    "n_parts": "int",
    "feature_id": "int",
    "scales_found": "int",
    "scale_min_m": "float",
    "scale_max_m": "float",
}

#: Shapefile (dBASE, 10 characters) names of the added attributes.
SHAPEFILE_EXTRA_NAMES = {"straightness": "straightns", "scales_found": "scales_fnd",
                         "scale_min_m": "scl_min_m", "scale_max_m": "scl_max_m"}

_ALL_SHAPEFILE_NAMES = {**SHAPEFILE_FIELD_NAMES, **SHAPEFILE_EXTRA_NAMES}


# ====================================================================== measures
def straightness(geom: LineString) -> float:
    """Chord length over path length of a line, in (0, 1]; NaN for a zero-length line.

    1 for a straight line; ``2 sqrt(2) / pi`` = 0.900 for a quarter circle
    (chord ``r sqrt(2)``, arc ``pi r / 2``).
    """
    coords = np.asarray(geom.coords)
    path = float(np.hypot(*np.diff(coords[:, :2], axis=0).T).sum()) if len(coords) > 1 else 0.0
    if path <= 0:
        return math.nan
    chord = float(np.hypot(*(coords[-1, :2] - coords[0, :2])))
    return min(1.0, chord / path)


def _angle_between_deg(u: np.ndarray, v: np.ndarray) -> float:
    """Directed angle between two vectors, degrees in [0, 180] (0 if either is zero)."""
    nu, nv = math.hypot(*u), math.hypot(*v)
    if nu == 0 or nv == 0:
        return 0.0
    c = float(np.dot(u, v)) / (nu * nv)
    return math.degrees(math.acos(max(-1.0, min(1.0, c))))


def _axial_difference_deg(a, b):
    d = np.mod(np.asarray(a, dtype=np.float64) - np.asarray(b, dtype=np.float64), 180.0)
    return np.minimum(d, 180.0 - d)


def _chord_azimuth_deg(geoms) -> np.ndarray:
    """Axial chord direction of each line in the plane, clockwise from the +y axis, [0, 180)."""
    arr = np.asarray(list(geoms), dtype=object)
    if arr.size == 0:
        return np.zeros(0)
    first = shapely.get_coordinates(shapely.get_point(arr, 0))
    last = shapely.get_coordinates(shapely.get_point(arr, -1))
    return np.mod(np.degrees(np.arctan2(last[:, 0] - first[:, 0], last[:, 1] - first[:, 1])), 180.0)


# ====================================================================== 1. split
def _split_ranges(p: np.ndarray, max_bend_deg: float | None, max_deviation_m: float | None):
    """Vertex index ranges ``(i0, i1)`` of the near-straight pieces of one polyline."""
    out = []
    stack = [(0, len(p) - 1)]
    while stack:
        i0, i1 = stack.pop()
        if i1 - i0 < 2:
            out.append((i0, i1))
            continue
        a, b = p[i0], p[i1]
        chord = b - a
        length = math.hypot(*chord)
        inner = p[i0 + 1:i1] - a
        if length > 0:
            dev = np.abs(chord[0] * inner[:, 1] - chord[1] * inner[:, 0]) / length
        else:
            dev = np.hypot(inner[:, 0], inner[:, 1])
        k = int(np.argmax(dev)) + i0 + 1
        split = max_deviation_m is not None and float(dev.max()) > max_deviation_m
        if not split and max_bend_deg is not None:
            split = _angle_between_deg(p[k] - a, b - p[k]) > max_bend_deg
        if split:
            stack.append((k, i1))
            stack.append((i0, k))
        else:
            out.append((i0, i1))
    return out


def split_at_bends(
    geoms: Sequence[LineString],
    *,
    max_bend_deg: float | None = 20.0,
    max_deviation_m: float | None = None,
    min_length_m: float = 0.0,
) -> tuple[list[LineString], np.ndarray]:
    """Cut lines where they bend, so that every piece is nearly straight.

    Parameters
    ----------
    geoms : sequence of LineString, length N
        Lines in a metric frame (coordinates in metres).
    max_bend_deg : float or None
        Largest change of direction, degrees, between the chords on either
        side of a piece's farthest-from-chord vertex (keyword).  A sharp
        corner of angle ``a`` is cut when ``a > max_bend_deg``; a smooth arc
        is cut into pieces each turning by at most about ``2 * max_bend_deg``
        (the half-chords of an arc turning by ``t`` differ by ``t / 2``).
        None: no bend test.
    max_deviation_m : float or None
        Largest distance, metres, of any vertex from its piece's chord.
        None: no deviation test.
    min_length_m : float
        Pieces shorter than this (metres) are dropped.

    Returns
    -------
    pieces : list of LineString
        In input order, and along each line from its first vertex.
    source_index : ndarray of intp, shape (len(pieces),)
        Index of the input line each piece comes from.

    Raises
    ------
    SettingsError
        Neither test given, or a negative or non-finite limit.
    """
    if max_bend_deg is None and max_deviation_m is None:
        raise SettingsError("split at bends: give a maximum bend angle, a maximum deviation, or both")
    if max_bend_deg is not None:
        max_bend_deg = _number(max_bend_deg, "max_bend_deg", low=0.0, high=180.0)
    if max_deviation_m is not None:
        max_deviation_m = _number(max_deviation_m, "max_deviation_m", low=0.0)
    min_length_m = _number(min_length_m, "min_length_m", low=0.0)
    pieces: list[LineString] = []
    source: list[int] = []
    for i, g in enumerate(geoms):
        p = np.asarray(g.coords, dtype=np.float64)[:, :2]
        if len(p) < 2:
            continue
        for i0, i1 in _split_ranges(p, max_bend_deg, max_deviation_m):
            piece = LineString(p[i0:i1 + 1])
            if piece.length > 0 and piece.length >= min_length_m:
                pieces.append(piece)
                source.append(i)
    return pieces, np.asarray(source, dtype=np.intp)


# ====================================================================== 2. link
class _UnionFind:
    def __init__(self, n: int):
        self.parent = np.arange(n)

    def find(self, i: int) -> int:
        root = i
        while self.parent[root] != root:
            root = self.parent[root]
        while self.parent[i] != root:
            self.parent[i], i = root, self.parent[i]
        return int(root)

    def union(self, i: int, j: int) -> bool:
        a, b = self.find(i), self.find(j)
        if a == b:
            return False
        self.parent[max(a, b)] = min(a, b)
        return True

    def labels(self) -> np.ndarray:
        """Component labels 0..K-1 in order of first appearance."""
        roots = np.array([self.find(i) for i in range(self.parent.size)], dtype=np.intp)
        _, first, inverse = np.unique(roots, return_index=True, return_inverse=True)
        rank = np.argsort(np.argsort(first))
        return rank[inverse].astype(np.intp)


def link_collinear(
    geoms: Sequence[LineString],
    *,
    max_gap_m: float,
    max_angle_deg: float = 10.0,
    max_offset_m: float | None = None,
    groups: Sequence | None = None,
) -> tuple[list[LineString], list[list[int]]]:
    """Join collinear lines separated by short gaps into single lines.

    Parameters
    ----------
    geoms : sequence of LineString, length N
        Lines in a metric frame (metres).
    max_gap_m : float
        Largest distance between the two ends joined, metres (keyword).
    max_angle_deg : float
        Largest difference of direction between the two lines, degrees.
        Each line's direction is its chord, taken pointing out of the end
        being joined; the two must point at each other within this angle.
    max_offset_m : float, optional
        Largest lateral offset, metres: the distance of each end from the
        other line's chord extended.  Default a quarter of ``max_gap_m``.
    groups : sequence, length N, optional
        Only lines with equal group values are joined (e.g. ``scale_m``).

    Returns
    -------
    lines : list of LineString
        Joined lines (the gap bridged by a straight segment) and the lines
        that were not joined, in order of their first member.
    members : list of list of int
        Input indices of each output line, in order along it.

    Notes
    -----
    Two ends are joinable only when each lies ahead of the other's line: the
    along-line distance from an end to the other end must not be more
    negative than ``-max_offset_m``, so parallel lines side by side are
    never joined.  Joins are accepted greedily by increasing
    ``gap + offset``; every end is joined at most once and no loop is made.
    A long chain of slightly turning joins can curve; run
    :func:`split_at_bends` afterwards to cut it again if needed.
    """
    max_gap_m = _number(max_gap_m, "max_gap_m", low=0.0)
    max_angle_deg = _number(max_angle_deg, "max_angle_deg", low=0.0, high=90.0)
    max_offset_m = max_gap_m / 4.0 if max_offset_m is None else _number(max_offset_m, "max_offset_m", low=0.0)
    geoms = list(geoms)
    n = len(geoms)
    if groups is not None and len(groups) != n:
        raise SettingsError(f"link: {len(groups)} group values for {n} lines")
    if n == 0:
        return [], []
    coords = [np.asarray(g.coords, dtype=np.float64)[:, :2] for g in geoms]
    ends = np.array([[c[0], c[-1]] for c in coords])  # (N, 2 ends, 2)
    chord = ends[:, 1] - ends[:, 0]
    norm = np.hypot(chord[:, 0], chord[:, 1])
    unit = np.divide(chord, norm[:, None], out=np.zeros_like(chord), where=norm[:, None] > 0)
    outward = np.stack((-unit, unit), axis=1)  # (N, 2, 2): direction out of each end
    pts = ends.reshape(-1, 2)
    tree = shapely.STRtree(shapely.points(pts))
    ea, eb = tree.query(shapely.points(pts), predicate="dwithin", distance=max_gap_m)
    keep = (ea // 2) < (eb // 2)
    if groups is not None:
        gv = np.asarray([str(v) for v in groups])
        keep &= gv[ea // 2] == gv[eb // 2]
    ea, eb = ea[keep], eb[keep]
    li, si = ea // 2, ea % 2
    lj, sj = eb // 2, eb % 2
    oi, oj = outward[li, si], outward[lj, sj]
    valid = (norm[li] > 0) & (norm[lj] > 0)
    delta = pts[eb] - pts[ea]  # from end a to end b
    gap = np.hypot(delta[:, 0], delta[:, 1])
    ahead_i = np.einsum("ij,ij->i", oi, delta)  # b ahead of line i's end
    ahead_j = -np.einsum("ij,ij->i", oj, delta)  # a ahead of line j's end
    lateral_i = np.abs(oi[:, 0] * delta[:, 1] - oi[:, 1] * delta[:, 0])
    lateral_j = np.abs(oj[:, 0] * delta[:, 1] - oj[:, 1] * delta[:, 0])
    facing = -np.einsum("ij,ij->i", oi, oj)  # cos of the angle between the directions
    ok = (valid & (gap <= max_gap_m) & (ahead_i >= -max_offset_m) & (ahead_j >= -max_offset_m)
          & (np.maximum(lateral_i, lateral_j) <= max_offset_m)
          & (facing >= math.cos(math.radians(max_angle_deg)) - 1e-12))
    score = gap + np.maximum(lateral_i, lateral_j)
    order = np.flatnonzero(ok)[np.argsort(score[ok], kind="stable")]
    partner = np.full(2 * n, -1, dtype=np.intp)
    uf = _UnionFind(n)
    for k in order:
        a, b = int(ea[k]), int(eb[k])
        if partner[a] >= 0 or partner[b] >= 0:
            continue
        if not uf.union(a // 2, b // 2):
            continue
        partner[a], partner[b] = b, a
    # walk each chain from a free end
    done = np.zeros(n, dtype=bool)
    lines: list[LineString] = []
    members: list[list[int]] = []
    starts = []
    for i in range(n):
        if done[i]:
            continue
        # find a free end of i's chain by walking towards end 0 of i
        line, side = i, 0
        while partner[2 * line + side] >= 0:
            nxt = partner[2 * line + side]
            line, side = nxt // 2, 1 - nxt % 2
        chain_coords, chain = [], []
        entry = side  # entering the line at this end
        while True:
            c = coords[line] if entry == 0 else coords[line][::-1]
            chain_coords.append(c)
            chain.append(int(line))
            done[line] = True
            exit_end = 2 * line + (1 - entry)
            nxt = partner[exit_end]
            if nxt < 0:
                break
            line, entry = nxt // 2, nxt % 2
        starts.append(min(chain))
        merged = np.concatenate(chain_coords)
        keep_v = np.ones(len(merged), dtype=bool)
        keep_v[1:] = np.any(np.diff(merged, axis=0) != 0, axis=1)  # drop repeated join vertices
        lines.append(LineString(merged[keep_v]) if keep_v.sum() >= 2 else LineString(merged[:2]))
        members.append(chain)
    order_out = np.argsort(starts, kind="stable")
    return [lines[k] for k in order_out], [members[k] for k in order_out]


# ====================================================================== 3. persistence
def group_across_scales(
    geoms: Sequence[LineString],
    scales_m: Sequence[float],
    *,
    max_angle_deg: float = 15.0,
    max_distance_m: float | None = None,
    distance_sigmas: float = 1.0,
    min_overlap: float = 0.5,
) -> np.ndarray:
    """Feature identifier of each line: lines of different scales along one feature share it.

    Parameters
    ----------
    geoms : sequence of LineString, length N
        Lines in a metric frame (metres).
    scales_m : sequence of float, length N
        Sigma of the scale each line was found at, metres (``scale_m``).
    max_angle_deg : float
        Largest axial difference of chord directions, degrees (keyword).
    max_distance_m : float, optional
        Match distance, metres.  Default ``distance_sigmas`` times the larger
        of the two lines' sigmas, since zero crossings of a feature that is
        not an ideal step move by up to about a sigma between scales.
    distance_sigmas : float
        See ``max_distance_m``.
    min_overlap : float
        Share of the shorter line that must lie within the match distance of
        the longer, in (0, 1].

    Returns
    -------
    ndarray of intp, shape (N,)
        Feature identifiers 0..F-1, numbered in order of first appearance.
        Lines of one scale are linked only through lines of other scales.
    """
    geoms = list(geoms)
    n = len(geoms)
    s = np.asarray(scales_m, dtype=np.float64).reshape(-1)
    if s.size != n:
        raise SettingsError(f"scale grouping: {s.size} scales for {n} lines")
    max_angle_deg = _number(max_angle_deg, "max_angle_deg", low=0.0, high=90.0)
    min_overlap = _number(min_overlap, "min_overlap", low=0.0, high=1.0)
    if min_overlap <= 0:
        raise SettingsError("scale grouping: min_overlap must be more than 0")
    distance_sigmas = _number(distance_sigmas, "distance_sigmas", low=0.0)
    if max_distance_m is not None:
        max_distance_m = _number(max_distance_m, "max_distance_m", low=0.0)
    uf = _UnionFind(n)
    if n < 2:
        return uf.labels()
    arr = np.asarray(geoms, dtype=object)
    finite = np.isfinite(s)
    reach = max_distance_m if max_distance_m is not None else distance_sigmas * float(np.max(s[finite], initial=0))
    tree = shapely.STRtree(arr)
    i, j = tree.query(arr, predicate="dwithin", distance=max(reach, 0.0))
    keep = (i < j) & finite[i] & finite[j] & ~np.isclose(s[i], s[j], rtol=1e-6, atol=1e-6)
    i, j = i[keep], j[keep]
    if i.size:
        az = _chord_azimuth_deg(arr)
        keep = _axial_difference_deg(az[i], az[j]) <= max_angle_deg + 1e-9
        i, j = i[keep], j[keep]
    if i.size:
        dist = (np.full(i.size, max_distance_m) if max_distance_m is not None
                else distance_sigmas * np.maximum(s[i], s[j]))
        length = shapely.length(arr)
        short = np.where(length[i] <= length[j], i, j)
        long_ = np.where(length[i] <= length[j], j, i)
        near = shapely.length(shapely.intersection(arr[short], shapely.buffer(arr[long_], dist)))
        with np.errstate(divide="ignore", invalid="ignore"):
            share = np.where(length[short] > 0, near / length[short], 0.0)
        for a, b in zip(i[share >= min_overlap - 1e-9], j[share >= min_overlap - 1e-9]):
            uf.union(int(a), int(b))
    return uf.labels()


# ====================================================================== whole layers
@dataclass(frozen=True)
class RefineSettings:
    """Settings of :func:`refine_lines`; each step can be switched off.

    Parameters
    ----------
    split : bool
        Cut lines at bends (:func:`split_at_bends`).
    max_bend_deg, max_deviation_m : float or None
        Limits of the split step.
    link : bool
        Join collinear pieces (:func:`link_collinear`), within each scale.
    max_gap_m, link_angle_deg, max_offset_m
        Limits of the link step (``max_offset_m`` None: a quarter of the gap).
    merge_scales : bool
        Group lines across scales (:func:`group_across_scales`).
    scale_angle_deg, match_distance_m, min_overlap
        Limits of the grouping (``match_distance_m`` None: the larger sigma).
    min_scales : int
        Keep only features found at this many scales or more.
    all_lines : bool
        Keep every line with its ``feature_id`` instead of one per feature.
    min_length_m : float or None
        Drop output lines shorter than this (metres).  None (default): four
        times the line's ``scale_m`` (cutting at bends leaves short end
        pieces; the extraction's own default minimum is eight sigmas), or no
        limit for lines without ``scale_m``.
    """

    split: bool = True
    max_bend_deg: float | None = 20.0
    max_deviation_m: float | None = None
    link: bool = True
    max_gap_m: float = 100.0
    link_angle_deg: float = 10.0
    max_offset_m: float | None = None
    merge_scales: bool = True
    scale_angle_deg: float = 15.0
    match_distance_m: float | None = None
    min_overlap: float = 0.5
    min_scales: int = 1
    all_lines: bool = False
    min_length_m: float | None = None

    def __post_init__(self) -> None:
        if isinstance(self.min_scales, bool) or not isinstance(self.min_scales, (int, np.integer)) \
                or self.min_scales < 1:
            raise SettingsError(f"min_scales must be a whole number of at least 1, got {self.min_scales!r}")
        if self.min_length_m is not None:
            _number(self.min_length_m, "min_length_m", low=0.0)

    def to_dict(self) -> dict:
        return asdict(self)


def _number(value, name: str, *, low: float | None = None, high: float | None = None) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise SettingsError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(v) or (low is not None and v < low) or (high is not None and v > high):
        span = f"within {low:g}-{high:g}" if high is not None else f"at least {low:g}"
        raise SettingsError(f"{name} must be {span}, got {value!r}")
    return v


def _measure(geoms: list[LineString], crs: CRS | None) -> dict[str, np.ndarray]:
    """Geodesic length and true/grid azimuths, as the extraction measures them."""
    probe = GeoRef(Affine.identity(), crs, 1, 1)
    return line_measures([np.asarray(g.coords)[:, 0] for g in geoms],
                         [np.asarray(g.coords)[:, 1] for g in geoms], probe)


def _float(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def _merge_props(props: list[dict], lengths: np.ndarray) -> dict:
    """Attributes of a line made of several: those of the longest, strengths combined."""
    k = int(np.argmax(lengths))
    out = dict(props[k])
    st = np.array([_float(p.get("strength")) for p in props])
    ok = np.isfinite(st) & (lengths > 0)
    if ok.any():
        out["strength"] = float(np.average(st[ok], weights=lengths[ok]))
    stm = np.array([_float(p.get("strength_max")) for p in props])
    if np.isfinite(stm).any():
        out["strength_max"] = float(np.nanmax(stm))
    out["n_parts"] = int(sum(int(p.get("n_parts") or 1) for p in props))
    return out


def refine_lines(
    geoms: Sequence[LineString],
    props: Sequence[dict],
    crs: CRS | None,
    settings: RefineSettings | None = None,
) -> tuple[list[LineString], list[dict]]:
    """Straighten, link and group a line layer, in the layer's CRS.

    The steps run in the order split, link (within each scale), group across
    scales, in a metric frame (:func:`lineament.analysis.metric_crs_for`);
    results are brought back to ``crs``.

    Parameters
    ----------
    geoms : sequence of LineString, length N
    props : sequence of dict, length N
        Attributes; ``scale_m`` is needed for the grouping step (lines
        without it are grouped as if of one unknown scale: never merged).
    crs : pyproj.CRS or None
        None: coordinates are taken as metres.
    settings : RefineSettings, optional

    Returns
    -------
    geoms : list of LineString
        In ``crs``.
    props : list of dict
        Input attributes (those of the longest member for joined lines) with
        ``length_m``, ``azimuth_deg``, ``azimuth_grid_deg`` measured again and
        the attributes of :data:`INTERPRETED_ATTRIBUTE_TYPES`.
    """
    settings = settings or RefineSettings()
    geoms = list(geoms)
    props = [dict(p) for p in props]
    if len(props) != len(geoms):
        raise SettingsError(f"refine: {len(props)} attribute rows for {len(geoms)} lines")
    frame = metric_crs_for(geoms, crs)
    work = reproject_lines(geoms, crs, frame) if crs is not None and frame is not None else list(geoms)
    # 1. split
    if settings.split:
        work, src = split_at_bends(work, max_bend_deg=settings.max_bend_deg,
                                   max_deviation_m=settings.max_deviation_m)
        props = [dict(props[i]) for i in src]
    # 2. link, within each scale
    if settings.link and work:
        groups = [repr(round(_float(p.get("scale_m")), 3)) for p in props]
        piece_len = shapely.length(np.asarray(work, dtype=object))
        work, members = link_collinear(work, max_gap_m=settings.max_gap_m, max_angle_deg=settings.link_angle_deg,
                                       max_offset_m=settings.max_offset_m, groups=groups)
        new_props = []
        for m in members:
            if len(m) == 1:
                p = dict(props[m[0]])
                p["n_parts"] = int(p.get("n_parts") or 1)
                new_props.append(p)
            else:
                new_props.append(_merge_props([props[k] for k in m], piece_len[m]))
        props = new_props
        # a chain of slightly turning joins may bend: cut it again where it does
        if settings.split and work:
            work, src = split_at_bends(work, max_bend_deg=settings.max_bend_deg,
                                       max_deviation_m=settings.max_deviation_m)
            props = [dict(props[i]) for i in src]
    # 3. persistence over scales
    scales = np.array([_float(p.get("scale_m")) for p in props])
    if settings.merge_scales and work:
        fid = group_across_scales(work, scales, max_angle_deg=settings.scale_angle_deg,
                                  max_distance_m=settings.match_distance_m, min_overlap=settings.min_overlap)
    else:
        fid = np.arange(len(work), dtype=np.intp)
    n_feat = int(fid.max()) + 1 if fid.size else 0
    lengths = shapely.length(np.asarray(work, dtype=object)) if work else np.zeros(0)
    feat_scales: list[set] = [set() for _ in range(n_feat)]
    for f, sc in zip(fid, scales):
        if math.isfinite(sc):
            feat_scales[f].add(round(float(sc), 3))
    keep_idx = []
    for f in range(n_feat):
        idx = np.flatnonzero(fid == f)
        if max(len(feat_scales[f]), 1) < settings.min_scales:
            continue
        if settings.all_lines:
            keep_idx.extend(idx.tolist())
        else:
            # the longest member stands for the feature (ties: the finer scale)
            best = min(idx, key=lambda k: (-round(lengths[k], 6), scales[k] if math.isfinite(scales[k]) else 0))
            keep_idx.append(int(best))
    keep_idx.sort()
    out_work = [work[k] for k in keep_idx]
    out_props = []
    for k in keep_idx:
        p = dict(props[k])
        sc = feat_scales[fid[k]]
        p["feature_id"] = int(fid[k])
        p["scales_found"] = len(sc)
        p["scale_min_m"] = min(sc) if sc else None
        p["scale_max_m"] = max(sc) if sc else None
        p["n_parts"] = int(p.get("n_parts") or 1)
        p["straightness"] = straightness(work[k])
        out_props.append(p)
    # back to the layer's CRS, measured as the extraction measures
    out = reproject_lines(out_work, frame, crs) if crs is not None and frame is not None else out_work
    meas = _measure(out, crs)
    final_g, final_p = [], []
    for j, (g, p) in enumerate(zip(out, out_props)):
        p["length_m"] = float(meas["length_m"][j])
        p["azimuth_deg"] = float(meas["azimuth_deg"][j])
        p["azimuth_grid_deg"] = float(meas["azimuth_grid_deg"][j])
        floor = settings.min_length_m
        if floor is None:
            sc = _float(p.get("scale_m"))
            floor = 4.0 * sc if math.isfinite(sc) else 0.0
        if p["length_m"] < floor or p["length_m"] <= 0:
            continue
        final_g.append(g)
        final_p.append(p)
    return final_g, final_p


# ====================================================================== files
def read_line_layer(path: str | os.PathLike) -> tuple[list[LineString], list[dict], CRS | None]:
    """Read a line layer like :func:`lineament.analysis.read_lines`, with Shapefile names undone.

    Attributes written under their 10-character Shapefile names
    (``strengthmx``, ``azim_deg`` ...) come back under their full names.
    """
    geoms, props, crs = read_lines(path)
    back = {short: full for full, short in _ALL_SHAPEFILE_NAMES.items()}
    props = [{back.get(k, k): v for k, v in p.items()} for p in props]
    return geoms, props, crs


def _clean_value(v, kind: str):
    if v is None:
        return None
    if kind == "float":
        f = _float(v)
        return None if not math.isfinite(f) else round(f, 6)
    if kind == "int":
        f = _float(v)
        return None if not math.isfinite(f) else int(f)
    return str(v)[:254]


def write_line_layer(
    geoms: Sequence[LineString],
    props: Sequence[dict],
    crs: CRS | None,
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    metadata: dict | None = None,
) -> Path:
    """Write lines with the extraction's attributes plus the interpreted ones.

    Same formats, layer name, atomic replacement and run metadata (GeoPackage
    tags or ``.run.json`` sidecar) as :func:`lineament.vector_io.write_lines`.
    GeoJSON is written in WGS84 longitude/latitude (RFC 7946).

    Raises
    ------
    OutputError
        See :func:`lineament.vector_io.check_output`; also GeoJSON asked for
        lines without a CRS, or a failed write (nothing is left behind).
    """
    driver = check_output(path, overwrite=overwrite)
    out_path = Path(path)
    types = {**ATTRIBUTE_TYPES, **INTERPRETED_ATTRIBUTE_TYPES}
    rename = _ALL_SHAPEFILE_NAMES if driver == "ESRI Shapefile" else {}
    schema = {"geometry": "LineString", "properties": {rename.get(k, k): v for k, v in types.items()}}
    geoms = list(geoms)
    dst_crs = crs
    if driver == "GeoJSON":
        if crs is None:
            raise OutputError(f"{path}: the lines have no CRS, so they cannot be written as GeoJSON, "
                              "which is always WGS84; write a GeoPackage instead")
        dst_crs = CRS.from_epsg(4326)
        if not CRS(crs).equals(dst_crs):
            geoms = reproject_lines(geoms, crs, dst_crs, source=str(path))
    kinds = {k: v.split(":")[0] for k, v in types.items()}

    def records():
        for g, p in zip(geoms, props):
            yield {"geometry": {"type": "LineString",
                                "coordinates": [tuple(map(float, c[:2])) for c in g.coords]},
                   "properties": {rename.get(k, k): _clean_value(p.get(k), kinds[k]) for k in types}}

    meta = dict(metadata or {"software": "lineament", "version": __version__})
    meta["output_crs"] = None if dst_crs is None else CRS(dst_crs).to_wkt()
    meta["lines"] = len(geoms)
    _atomic_write(out_path, driver, schema, None if dst_crs is None else CRS(dst_crs), records(), meta)
    return out_path


def refine_file(
    input_path: str | os.PathLike,
    output_path: str | os.PathLike,
    settings: RefineSettings | None = None,
    *,
    overwrite: bool = False,
) -> tuple[list[LineString], list[dict]]:
    """Read a line layer, refine it (:func:`refine_lines`) and write the result.

    The run metadata of the input (if any) is kept under ``input_run`` and
    the refine settings under ``refine``.

    Returns
    -------
    geoms, props
        What was written, in the input's CRS.
    """
    settings = settings or RefineSettings()
    check_output(output_path, overwrite=overwrite)
    geoms, props, crs = read_line_layer(input_path)
    if not geoms:
        raise InputError(f"{os.fspath(input_path)}: no lines to refine")
    try:
        input_run = read_run_metadata(input_path)
    except Exception:  # a layer written by another program: no run metadata
        input_run = None
    out_g, out_p = refine_lines(geoms, props, crs, settings)
    metadata = {"software": "lineament", "version": __version__,
                "refine": {"input": os.path.basename(os.fspath(input_path)), "settings": settings.to_dict()},
                "input_run": input_run}
    write_line_layer(out_g, out_p, crs, output_path, overwrite=overwrite, metadata=metadata)
    return out_g, out_p
