"""Agreement between a detected and a reference line layer.

Scores how well detected lineaments reproduce a reference set (mapped
faults, digitised field boundaries, the lines a synthetic test raster was
built from) with a buffer-based, length-weighted measure:

* **recall** -- the share of reference length that lies within ``buffer_m``
  of a detected line of compatible direction;
* **precision** -- the share of detected length that lies within
  ``buffer_m`` of a reference line of compatible direction;
* **F1** -- their harmonic mean (van Rijsbergen 1979, Information
  Retrieval);
* **offsets** -- median and 90th percentile of the distance from matched
  detected length to the nearest compatible reference line.

This is the buffer method of positional line accuracy (Goodchild and Hunter
1997, "A simple positional accuracy measure for linear features", IJGIS
11(3)), used in both directions, with a direction test added.

Method
------
Each line is cut into pieces of about ``piece_length_m`` along its length
(equal pieces per line).  A piece's direction is its chord azimuth (or the
azimuth given for its line).  Pieces are kept as their straight segments,
and for every pair of nearby segments whose pieces are compatible in
direction (axial difference <= ``angle_deg``) the exact part of one segment
within ``buffer_m`` of the other -- the segment's intersection with the
other's round-capped buffer (a capsule) -- is computed in closed form.  The
covered parts of each segment are merged as intervals, so overlapping
buffers are never counted twice.  Candidate pairs come from a
:class:`shapely.STRtree` ``dwithin`` query; all further work is vectorised
numpy.

Geometries must be in a metric frame (a projected CRS in metres); use
:func:`metric_crs_for` and :func:`reproject_lines` for geographic layers, or
:func:`compare_line_files`, which does it all.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import shapely
from pyproj import CRS
from shapely.geometry.base import BaseGeometry

from ..errors import InputError, SettingsError
from .layers import azimuths_deg, metric_crs_for, read_lines, reproject_lines

__all__ = [
    "AgreementResult",
    "compare_lines",
    "compare_line_files",
    "metric_crs_for",
    "axial_difference_deg",
]


# ====================================================================== result
@dataclass(frozen=True)
class AgreementResult:
    """Outcome of :func:`compare_lines`.

    Lengths are in metres of the metric frame.  Ratios are NaN when their
    denominator is zero (no reference or no detected length); offsets are
    NaN when nothing matched.

    Attributes
    ----------
    recall, precision, f1 : float
        In [0, 1].
    reference_length_m, detected_length_m : float
        Total lengths of the two layers.
    matched_reference_length_m, matched_detected_length_m : float
        Lengths within the buffer of a compatible line of the other layer.
    n_reference, n_detected : int
        Number of input lines (one per input geometry).
    n_reference_matched, n_detected_matched : int
        Lines with at least ``line_match_share`` of their length matched.
    offset_median_m, offset_p90_m : float
        Median and 90th percentile (length-weighted, sampled every
        ``sample_spacing_m``) of the distance from matched detected length to
        the nearest compatible reference line.
    buffer_m, angle_deg, piece_length_m, sample_spacing_m, line_match_share
        The settings used (``angle_deg`` None: no direction test).
    reference_matched_share, detected_matched_share : ndarray of float64
        Per input line, the share of its length matched (NaN for zero-length
        lines).  Left out of :meth:`to_dict` unless asked for.
    """

    recall: float
    precision: float
    f1: float
    reference_length_m: float
    detected_length_m: float
    matched_reference_length_m: float
    matched_detected_length_m: float
    n_reference: int
    n_detected: int
    n_reference_matched: int
    n_detected_matched: int
    offset_median_m: float
    offset_p90_m: float
    buffer_m: float
    angle_deg: float | None
    piece_length_m: float
    sample_spacing_m: float
    line_match_share: float
    reference_matched_share: np.ndarray = field(repr=False, compare=False, default_factory=lambda: np.zeros(0))
    detected_matched_share: np.ndarray = field(repr=False, compare=False, default_factory=lambda: np.zeros(0))

    _SCALARS = (
        "recall",
        "precision",
        "f1",
        "reference_length_m",
        "detected_length_m",
        "matched_reference_length_m",
        "matched_detected_length_m",
        "n_reference",
        "n_detected",
        "n_reference_matched",
        "n_detected_matched",
        "offset_median_m",
        "offset_p90_m",
        "buffer_m",
        "angle_deg",
        "piece_length_m",
        "sample_spacing_m",
        "line_match_share",
    )

    def to_dict(self, *, per_line: bool = False) -> dict:
        """JSON-ready dictionary (NaN becomes None).

        Parameters
        ----------
        per_line : bool
            Also include the per-line matched shares as lists.
        """
        out: dict = {}
        for name in self._SCALARS:
            out[name] = _json_value(getattr(self, name))
        if per_line:
            out["reference_matched_share"] = [_json_value(v) for v in self.reference_matched_share.tolist()]
            out["detected_matched_share"] = [_json_value(v) for v in self.detected_matched_share.tolist()]
        return out

    def summary_lines(self) -> list[str]:
        """A small plain-text table, one string per line."""

        def pct(v: float) -> str:
            return "n/a" if not math.isfinite(v) else f"{100.0 * v:.1f} %"

        def metres(v: float) -> str:
            return "n/a" if not math.isfinite(v) else f"{v:,.1f} m"

        angle = "off" if self.angle_deg is None else f"{self.angle_deg:g} deg"
        rows = [
            ("buffer", f"{self.buffer_m:g} m"),
            ("direction tolerance", angle),
            ("reference lines", f"{self.n_reference} ({self.n_reference_matched} matched)"),
            ("detected lines", f"{self.n_detected} ({self.n_detected_matched} matched)"),
            ("reference length", metres(self.reference_length_m)),
            ("detected length", metres(self.detected_length_m)),
            ("recall", pct(self.recall)),
            ("precision", pct(self.precision)),
            ("F1", pct(self.f1)),
            ("offset median", metres(self.offset_median_m)),
            ("offset 90th percentile", metres(self.offset_p90_m)),
        ]
        width = max(len(k) for k, _ in rows)
        return [f"{k:<{width}}  {v}" for k, v in rows]


def _json_value(v):
    if v is None:
        return None
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, np.integer)):
        return int(v)
    f = float(v)
    return f if math.isfinite(f) else None


# ====================================================================== helpers
def axial_difference_deg(a, b) -> np.ndarray:
    """Smallest angle between two axial directions, in [0, 90] degrees."""
    d = np.mod(np.asarray(a, dtype=np.float64) - np.asarray(b, dtype=np.float64), 180.0)
    return np.minimum(d, 180.0 - d)


@dataclass
class _Pieces:
    """Lines cut into pieces, kept as straight segments."""

    x0: np.ndarray  # (M,) segment start / end, metres
    y0: np.ndarray
    x1: np.ndarray
    y1: np.ndarray
    seg_length: np.ndarray  # (M,)
    seg_piece: np.ndarray  # (M,) piece index
    seg_line: np.ndarray  # (M,) input line index
    piece_azimuth: np.ndarray  # (P,) degrees in [0, 180), NaN if unknown
    line_length: np.ndarray  # (N,)


def _line_array(geoms, what: str) -> tuple[np.ndarray, np.ndarray, int]:
    """Explode to single LineStrings; return parts, owner index, input count."""
    if isinstance(geoms, BaseGeometry):
        geoms = [geoms]
    arr = np.asarray(list(geoms), dtype=object).reshape(-1)
    n = arr.size
    if n == 0:
        return arr, np.zeros(0, dtype=np.intp), 0
    types = shapely.get_type_id(arr)
    # 1 LineString, 2 LinearRing, 5 MultiLineString; -1 None
    bad = ~np.isin(types, (1, 2, 5, -1))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(f"compare_lines: {what} geometry {i} is a {arr[i].geom_type}; expected lines")
    parts, owner = shapely.get_parts(arr, return_index=True)
    return parts, owner.astype(np.intp), n


def _cut_pieces(
    geoms, what: str, piece_length_m: float, line_azimuths: np.ndarray | None
) -> _Pieces:
    parts, owner, n_in = _line_array(geoms, what)
    if line_azimuths is not None:
        line_azimuths = np.asarray(line_azimuths, dtype=np.float64).reshape(-1)
        if line_azimuths.size != n_in:
            raise SettingsError(
                f"compare_lines: {line_azimuths.size} {what} azimuths given for {n_in} {what} lines"
            )
    empty = _Pieces(*(np.zeros(0) for _ in range(5)), np.zeros(0, np.intp), np.zeros(0, np.intp),
                    np.zeros(0), np.zeros(n_in))
    if parts.size == 0:
        return empty
    coords, idx = shapely.get_coordinates(parts, return_index=True)
    if len(coords) == 0:
        return empty
    if not np.isfinite(coords).all():
        raise InputError(f"compare_lines: {what} lines have non-finite coordinates")
    # drop repeated vertices
    keep = np.ones(len(coords), dtype=bool)
    keep[1:] = ~((idx[1:] == idx[:-1]) & (coords[1:] == coords[:-1]).all(axis=1))
    coords, idx = coords[keep], idx[keep]
    n_parts = parts.size

    same = idx[1:] == idx[:-1]
    step = np.hypot(np.diff(coords[:, 0]), np.diff(coords[:, 1]))
    step[~same] = 0.0
    cum = np.concatenate(([0.0], np.cumsum(step)))
    first_vertex = np.searchsorted(idx, np.arange(n_parts))
    part_len = np.bincount(idx[1:], weights=step, minlength=n_parts)
    has_vertex = np.bincount(idx, minlength=n_parts) > 0
    d_local = cum - cum[np.minimum(first_vertex, len(cum) - 1)][idx]

    # global, strictly increasing along-line coordinate (gaps between lines)
    gap = max(1.0, piece_length_m)
    offset = np.concatenate(([0.0], np.cumsum(part_len + gap)))[:-1]
    big_d = d_local + offset[idx]

    n_pieces = np.where(part_len > 0, np.ceil(part_len / piece_length_m), 0).astype(np.intp)
    n_pieces[~has_vertex] = 0
    piece_len = np.divide(part_len, np.maximum(n_pieces, 1))
    piece_start = np.concatenate(([0], np.cumsum(n_pieces)))[:-1]
    n_total_pieces = int(n_pieces.sum())

    # interior break points between pieces
    n_breaks = np.maximum(n_pieces - 1, 0)
    b_line = np.repeat(np.arange(n_parts), n_breaks)
    b_k = np.arange(b_line.size) - np.repeat(np.concatenate(([0], np.cumsum(n_breaks)))[:-1], n_breaks) + 1
    b_d = offset[b_line] + b_k * piece_len[b_line]
    bx = np.interp(b_d, big_d, coords[:, 0])
    by = np.interp(b_d, big_d, coords[:, 1])

    all_d = np.concatenate((big_d, b_d))
    all_x = np.concatenate((coords[:, 0], bx))
    all_y = np.concatenate((coords[:, 1], by))
    all_line = np.concatenate((idx, b_line))
    order = np.argsort(all_d, kind="stable")
    all_d, all_x, all_y, all_line = all_d[order], all_x[order], all_y[order], all_line[order]

    seg_ok = (all_line[1:] == all_line[:-1]) & (all_d[1:] > all_d[:-1])
    i0 = np.flatnonzero(seg_ok)
    x0, y0, x1, y1 = all_x[i0], all_y[i0], all_x[i0 + 1], all_y[i0 + 1]
    seg_len = np.hypot(x1 - x0, y1 - y0)
    pos = seg_len > 0
    i0, x0, y0, x1, y1, seg_len = i0[pos], x0[pos], y0[pos], x1[pos], y1[pos], seg_len[pos]
    seg_part = all_line[i0]
    mid = 0.5 * (all_d[i0] + all_d[i0 + 1]) - offset[seg_part]
    k = np.floor(mid / piece_len[seg_part]).astype(np.intp)
    k = np.clip(k, 0, n_pieces[seg_part] - 1)
    seg_piece = piece_start[seg_part] + k

    # piece direction: chord from the first to the last vertex of the piece
    piece_line = np.repeat(owner, n_pieces)
    if line_azimuths is not None:
        piece_az = np.mod(line_azimuths[piece_line], 180.0)
    else:
        piece_az = np.full(n_total_pieces, np.nan)
        if seg_piece.size:
            first = np.ones(seg_piece.size, dtype=bool)
            first[1:] = seg_piece[1:] != seg_piece[:-1]
            last = np.ones(seg_piece.size, dtype=bool)
            last[:-1] = seg_piece[1:] != seg_piece[:-1]
            p_ids = seg_piece[first]
            dx = x1[last] - x0[first]
            dy = y1[last] - y0[first]
            az = np.mod(np.degrees(np.arctan2(dx, dy)), 180.0)
            az[az >= 180.0] = 0.0
            az[(dx == 0) & (dy == 0)] = np.nan
            piece_az[p_ids] = az

    line_length = np.bincount(owner[seg_part], weights=seg_len, minlength=n_in)
    return _Pieces(x0, y0, x1, y1, seg_len, seg_piece, owner[seg_part], piece_az, line_length)


def _linear_band(h0, hu, lo, hi):
    """t-interval where ``lo <= h0 + t*hu <= hi`` (empty: t_lo > t_hi)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        ta = (lo - h0) / hu
        tb = (hi - h0) / hu
    t_lo = np.minimum(ta, tb)
    t_hi = np.maximum(ta, tb)
    flat = hu == 0
    inside = (h0 >= lo) & (h0 <= hi)
    t_lo = np.where(flat, np.where(inside, -np.inf, np.inf), t_lo)
    t_hi = np.where(flat, np.where(inside, np.inf, -np.inf), t_hi)
    return t_lo, t_hi


def _disk_band(px, py, ux, uy, cx, cy, r):
    """t-interval where ``|P + t*u - C| <= r`` (empty: t_lo > t_hi)."""
    wx, wy = px - cx, py - cy
    a = ux * ux + uy * uy
    b = 2.0 * (ux * wx + uy * wy)
    c = wx * wx + wy * wy - r * r
    disc = b * b - 4.0 * a * c
    root = np.sqrt(np.maximum(disc, 0.0))
    t_lo = (-b - root) / (2.0 * a)
    t_hi = (-b + root) / (2.0 * a)
    miss = disc < 0
    return np.where(miss, np.inf, t_lo), np.where(miss, -np.inf, t_hi)


def _capsule_interval(px0, py0, px1, py1, qx0, qy0, qx1, qy1, r):
    """Part of segment P within distance ``r`` of segment Q, as t in [0, 1].

    The set of points within ``r`` of a segment is a capsule (a rectangle
    with two half-disc caps), which is convex, so its intersection with the
    line through P is one interval: the hull of the intervals cut by the
    rectangle and by the two end discs.  When both ends of P lie in the
    capsule, convexity gives the whole of P without further work.  Returns
    ``(t_lo, t_hi)``; a pair is empty where ``t_lo >= t_hi``.
    """
    lo = np.zeros(px0.shape)
    hi = np.ones(px0.shape)
    r2 = r * r
    full = _point_segment_distance2(px0, py0, qx0, qy0, qx1, qy1) <= r2
    full &= _point_segment_distance2(px1, py1, qx0, qy0, qx1, qy1) <= r2
    part = np.flatnonzero(~full)
    if part.size:
        px0, py0, px1, py1 = px0[part], py0[part], px1[part], py1[part]
        qx0, qy0, qx1, qy1 = qx0[part], qy0[part], qx1[part], qy1[part]
        ux, uy = px1 - px0, py1 - py0
        ex, ey = qx1 - qx0, qy1 - qy0
        lq = np.hypot(ex, ey)
        ex, ey = ex / lq, ey / lq
        wx, wy = px0 - qx0, py0 - qy0
        # rectangle in Q's frame: along in [0, lq], across in [-r, r]
        s_lo, s_hi = _linear_band(wx * ex + wy * ey, ux * ex + uy * ey, 0.0, lq)
        h_lo, h_hi = _linear_band(-wx * ey + wy * ex, -ux * ey + uy * ex, -r, r)
        p_lo, p_hi = np.maximum(s_lo, h_lo), np.minimum(s_hi, h_hi)
        empty = p_lo > p_hi
        p_lo[empty], p_hi[empty] = np.inf, -np.inf
        for cx, cy in ((qx0, qy0), (qx1, qy1)):
            d_lo, d_hi = _disk_band(px0, py0, ux, uy, cx, cy, r)
            np.minimum(p_lo, d_lo, out=p_lo)  # an empty disc band is (inf, -inf)
            np.maximum(p_hi, d_hi, out=p_hi)
        lo[part] = np.clip(p_lo, 0.0, 1.0)
        hi[part] = np.clip(p_hi, 0.0, 1.0)
    return lo, hi


def _covered_fraction(group, lo, hi, n_groups):
    """Length of the union of intervals [lo, hi] (within [0, 1]) per group."""
    full = (lo <= 0.0) & (hi >= 1.0)
    whole = np.zeros(n_groups, dtype=bool)
    whole[group[full]] = True
    ok = (hi > lo) & ~whole[group]
    group, lo, hi = group[ok], lo[ok], hi[ok]
    out = np.zeros(n_groups)
    if group.size:
        order = np.lexsort((lo, group))
        g = group[order].astype(np.float64) * 2.0  # groups 2 apart: no interval crosses
        lo_o, hi_o = lo[order] + g, hi[order] + g
        prev = np.concatenate(([-np.inf], np.maximum.accumulate(hi_o)[:-1]))
        gain = np.maximum(0.0, hi_o - np.maximum(lo_o, prev))
        out = np.bincount(group[order], weights=gain, minlength=n_groups)
    out[whole] = 1.0
    return out


def _point_segment_distance2(px, py, qx0, qy0, qx1, qy1):
    """Squared distance from points P to segments Q (arrays of equal shape)."""
    ex = qx1 - qx0
    ey = qy1 - qy0
    wx = px - qx0
    wy = py - qy0
    t = wx * ex
    t += wy * ey
    t /= ex * ex + ey * ey
    np.clip(t, 0.0, 1.0, out=t)
    wx -= t * ex
    wy -= t * ey
    wx *= wx
    wy *= wy
    wx += wy
    return wx


def _weighted_quantile(values, weights, q):
    """Inverted-CDF weighted quantile (Hyndman and Fan 1996, definition 1)."""
    if values.size == 0 or weights.sum() <= 0:
        return math.nan
    order = np.argsort(values)
    v, w = values[order], weights[order]
    cw = np.cumsum(w)
    i = int(np.searchsorted(cw, q * cw[-1], side="left"))
    return float(v[min(i, v.size - 1)])


def _segment_boxes(p: _Pieces, pad: float, sel: slice) -> np.ndarray:
    x0, y0, x1, y1 = p.x0[sel], p.y0[sel], p.x1[sel], p.y1[sel]
    return shapely.box(
        np.minimum(x0, x1) - pad, np.minimum(y0, y1) - pad, np.maximum(x0, x1) + pad, np.maximum(y0, y1) + pad
    )


def _segments_as_lines(p: _Pieces) -> np.ndarray:
    xy = np.stack((np.column_stack((p.x0, p.y0)), np.column_stack((p.x1, p.y1))), axis=1)
    return shapely.linestrings(xy)


#: Reference segments handled per STRtree query, to bound memory use.
_CHUNK_SEGMENTS = 25_000


def _match_segments(det: _Pieces, ref: _Pieces, buffer_m: float, angle_deg: float | None):
    """Covered length of every segment, both ways, and the near pairs.

    Returns
    -------
    ref_cov : ndarray (M_ref,)
        Length of each reference segment within ``buffer_m`` of a compatible
        detected segment.
    det_cov : ndarray (M_det,)
        The same for detected segments against reference segments.
    near_d, near_r : ndarray of intp
        Detected / reference segment indices of compatible pairs closer than
        ``buffer_m``.
    """
    n_det, n_ref = det.seg_length.size, ref.seg_length.size
    ref_cov = np.zeros(n_ref)
    empty = np.zeros(0, dtype=np.intp)
    if n_det == 0 or n_ref == 0:
        return ref_cov, np.zeros(n_det), empty, empty
    tree = shapely.STRtree(_segments_as_lines(det))
    keep_d, keep_r, keep_lo, keep_hi = [], [], [], []
    for start in range(0, n_ref, _CHUNK_SEGMENTS):
        stop = min(start + _CHUNK_SEGMENTS, n_ref)
        # bounding-box candidates; the capsule test below is the exact one
        q_r, d_i = tree.query(_segment_boxes(ref, buffer_m, slice(start, stop)))
        r_i = q_r + start
        if angle_deg is not None:
            diff = axial_difference_deg(ref.piece_azimuth[ref.seg_piece[r_i]], det.piece_azimuth[det.seg_piece[d_i]])
            keep = diff <= angle_deg + 1e-9  # NaN directions never match
            q_r, r_i, d_i = q_r[keep], r_i[keep], d_i[keep]
        # recall side: parts of reference segments near detected segments
        lo, hi = _capsule_interval(
            ref.x0[r_i], ref.y0[r_i], ref.x1[r_i], ref.y1[r_i],
            det.x0[d_i], det.y0[d_i], det.x1[d_i], det.y1[d_i], buffer_m,
        )
        ref_cov[start:stop] = _covered_fraction(q_r, lo, hi, stop - start)
        near = hi > lo
        r_i, d_i = r_i[near], d_i[near]
        # precision side: parts of detected segments near reference segments
        lo, hi = _capsule_interval(
            det.x0[d_i], det.y0[d_i], det.x1[d_i], det.y1[d_i],
            ref.x0[r_i], ref.y0[r_i], ref.x1[r_i], ref.y1[r_i], buffer_m,
        )
        near = hi > lo
        keep_d.append(d_i[near])
        keep_r.append(r_i[near])
        keep_lo.append(lo[near])
        keep_hi.append(hi[near])
    near_d = np.concatenate(keep_d)
    near_r = np.concatenate(keep_r)
    det_cov = _covered_fraction(near_d, np.concatenate(keep_lo), np.concatenate(keep_hi), n_det)
    return ref_cov * ref.seg_length, det_cov * det.seg_length, near_d, near_r


# ====================================================================== main
def compare_lines(
    detected: Sequence[BaseGeometry],
    reference: Sequence[BaseGeometry],
    *,
    buffer_m: float,
    angle_deg: float | None = None,
    detected_azimuths: Sequence[float] | np.ndarray | None = None,
    reference_azimuths: Sequence[float] | np.ndarray | None = None,
    piece_length_m: float | None = None,
    sample_spacing_m: float | None = None,
    line_match_share: float = 0.5,
) -> AgreementResult:
    """Buffer-based, length-weighted agreement of detected and reference lines.

    Parameters
    ----------
    detected, reference : sequence of LineString or MultiLineString
        Lines in the same metric frame (coordinates in metres).
    buffer_m : float
        Match distance in metres, > 0.
    angle_deg : float, optional
        Direction tolerance in degrees, in [0, 90].  A piece only matches
        pieces of the other layer whose axial direction differs by at most
        this much.  None (default): direction is not tested.
    detected_azimuths, reference_azimuths : array_like, optional
        One azimuth (degrees clockwise from north, axial) per input line, for
        instance the ``azimuth_deg`` attribute; used for every piece of that
        line instead of the piece's own chord direction.
    piece_length_m : float, optional
        Length of the pieces lines are cut into for the direction test
        (default ``buffer_m``).  Each line is cut into equal pieces no longer
        than this.
    sample_spacing_m : float, optional
        Spacing of the points sampled along detected lines for the offset
        statistics (default ``buffer_m / 5``).
    line_match_share : float
        A line counts as matched when at least this share of its length is
        matched (default 0.5).

    Returns
    -------
    AgreementResult

    Raises
    ------
    SettingsError
        For an invalid buffer, angle, piece length, spacing or azimuth array.
    InputError
        For non-line geometries or non-finite coordinates.

    Notes
    -----
    Covered lengths are exact for the straight segments of the input lines
    against the true round-capped buffers (no polygon approximation); only
    the offset statistics are sampled.  Work is O(S log S) in the number of
    segments S plus the number of nearby segment pairs.
    """
    buffer_m = _positive(buffer_m, "buffer_m")
    if angle_deg is not None:
        angle_deg = float(angle_deg)
        if not (0.0 <= angle_deg <= 90.0):
            raise SettingsError(f"compare_lines: angle_deg must be within 0-90, got {angle_deg:g}")
    piece_length_m = buffer_m if piece_length_m is None else _positive(piece_length_m, "piece_length_m")
    sample_spacing_m = buffer_m / 5.0 if sample_spacing_m is None else _positive(sample_spacing_m, "sample_spacing_m")
    line_match_share = float(line_match_share)
    if not (0.0 < line_match_share <= 1.0):
        raise SettingsError(f"compare_lines: line_match_share must be in (0, 1], got {line_match_share:g}")

    det = _cut_pieces(detected, "detected", piece_length_m, detected_azimuths)
    ref = _cut_pieces(reference, "reference", piece_length_m, reference_azimuths)

    ref_cov, det_cov, near_d, near_r = _match_segments(det, ref, buffer_m, angle_deg)

    ref_len = float(ref.line_length.sum())
    det_len = float(det.line_length.sum())
    ref_match = float(ref_cov.sum())
    det_match = float(det_cov.sum())
    recall = min(1.0, ref_match / ref_len) if ref_len > 0 else math.nan
    precision = min(1.0, det_match / det_len) if det_len > 0 else math.nan
    if math.isnan(recall) or math.isnan(precision):
        f1 = math.nan
    elif recall + precision > 0:
        f1 = 2.0 * recall * precision / (recall + precision)
    else:
        f1 = 0.0

    ref_line_cov = np.bincount(ref.seg_line, weights=ref_cov, minlength=ref.line_length.size)
    det_line_cov = np.bincount(det.seg_line, weights=det_cov, minlength=det.line_length.size)
    with np.errstate(divide="ignore", invalid="ignore"):
        ref_share = np.where(ref.line_length > 0, np.minimum(1.0, ref_line_cov / ref.line_length), np.nan)
        det_share = np.where(det.line_length > 0, np.minimum(1.0, det_line_cov / det.line_length), np.nan)
    tol = 1e-9
    n_ref_matched = int(np.count_nonzero(ref_share >= line_match_share - tol))
    n_det_matched = int(np.count_nonzero(det_share >= line_match_share - tol))

    off_median, off_p90 = _offsets(det, ref, near_d, near_r, buffer_m, sample_spacing_m)

    return AgreementResult(
        recall=recall,
        precision=precision,
        f1=f1,
        reference_length_m=ref_len,
        detected_length_m=det_len,
        matched_reference_length_m=ref_match,
        matched_detected_length_m=det_match,
        n_reference=int(ref.line_length.size),
        n_detected=int(det.line_length.size),
        n_reference_matched=n_ref_matched,
        n_detected_matched=n_det_matched,
        offset_median_m=off_median,
        offset_p90_m=off_p90,
        buffer_m=buffer_m,
        angle_deg=angle_deg,
        piece_length_m=piece_length_m,
        sample_spacing_m=sample_spacing_m,
        line_match_share=line_match_share,
        reference_matched_share=ref_share,
        detected_matched_share=det_share,
    )


def _offsets(det: _Pieces, ref: _Pieces, d_i, r_i, buffer_m, spacing):
    """Weighted median and 90th percentile of matched detected offsets."""
    if d_i.size == 0:
        return math.nan, math.nan
    n_pts = np.maximum(1, np.ceil(det.seg_length / spacing)).astype(np.intp)
    pt_start = np.concatenate(([0], np.cumsum(n_pts)))[:-1]
    n_points = int(n_pts.sum())
    best = np.full(n_points, np.inf)
    # expand every (detected segment, reference segment) pair over the
    # points sampled on the detected segment, a block of pairs at a time
    block = 500_000
    for start in range(0, d_i.size, block):
        db, rb = d_i[start : start + block], r_i[start : start + block]
        reps = n_pts[db]
        pair = np.repeat(np.arange(db.size), reps)
        j = np.arange(pair.size) - np.repeat(np.concatenate(([0], np.cumsum(reps)))[:-1], reps)
        ds, rs = db[pair], rb[pair]
        t = (j + 0.5) / n_pts[ds]
        px = det.x0[ds] + t * (det.x1[ds] - det.x0[ds])
        py = det.y0[ds] + t * (det.y1[ds] - det.y0[ds])
        dist2 = _point_segment_distance2(px, py, ref.x0[rs], ref.y0[rs], ref.x1[rs], ref.y1[rs])
        np.minimum.at(best, pt_start[ds] + j, dist2)
    best = np.sqrt(best)
    weight = np.repeat(det.seg_length / n_pts, n_pts)
    matched = best <= buffer_m * (1.0 + 1e-12)
    vals, w = best[matched], weight[matched]
    return _weighted_quantile(vals, w, 0.5), _weighted_quantile(vals, w, 0.9)


def _positive(value, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise SettingsError(f"compare_lines: {name} must be a number, got {value!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise SettingsError(f"compare_lines: {name} must be a positive number, got {v:g}")
    return v


# ====================================================================== files
def compare_line_files(
    detected_path: str | os.PathLike,
    reference_path: str | os.PathLike,
    *,
    buffer_m: float,
    angle_deg: float | None = None,
    use_azimuth_attribute: bool = False,
    piece_length_m: float | None = None,
    line_match_share: float = 0.5,
) -> AgreementResult:
    """Read two line layers, bring them into one metric frame and compare.

    The frame is the detected layer's CRS when it is projected in metres,
    else the reference layer's when that is, else a local azimuthal
    equidistant CRS centred on the detected lines (:func:`metric_crs_for`).
    Layers without a CRS are compared as they are (coordinates taken as
    metres) only when both lack one.

    Parameters
    ----------
    detected_path, reference_path : str or path-like
    buffer_m, angle_deg, piece_length_m, line_match_share
        As in :func:`compare_lines`.
    use_azimuth_attribute : bool
        Use each detected line's ``azimuth_deg`` attribute as its direction
        (lines lacking it get their chord azimuth).

    Raises
    ------
    InputError
        Unreadable layers, or one layer with a CRS and the other without.
    """
    det_name, ref_name = os.fspath(detected_path), os.fspath(reference_path)
    det_geoms, det_props, det_crs = read_lines(det_name)
    ref_geoms, _, ref_crs = read_lines(ref_name)
    if (det_crs is None) != (ref_crs is None):
        missing = det_name if det_crs is None else ref_name
        raise InputError(f"{missing}: layer has no CRS, so it cannot be matched with the other layer")
    det_az = None
    if use_azimuth_attribute:
        det_az = azimuths_deg(det_geoms, det_crs)
        attr = np.array([_float_or_nan(p.get("azimuth_deg")) for p in det_props], dtype=np.float64)
        det_az = np.where(np.isfinite(attr), np.mod(attr, 180.0), det_az)
    if det_crs is not None:
        frame = _pick_metric_frame(det_geoms, det_crs, ref_crs)
        det_geoms = reproject_lines(det_geoms, det_crs, frame, source=det_name)
        ref_geoms = reproject_lines(ref_geoms, ref_crs, frame, source=ref_name)
    return compare_lines(
        det_geoms,
        ref_geoms,
        buffer_m=buffer_m,
        angle_deg=angle_deg,
        detected_azimuths=det_az,
        piece_length_m=piece_length_m,
        line_match_share=line_match_share,
    )


def _pick_metric_frame(det_geoms, det_crs: CRS, ref_crs: CRS) -> CRS:
    for crs in (det_crs, ref_crs):
        m = metric_crs_for([], crs)
        if m is crs:
            return crs
    return metric_crs_for(det_geoms, det_crs)


def _float_or_nan(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan
