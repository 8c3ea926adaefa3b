"""Orientation statistics of lineaments: axial means, rose diagrams, sets.

Lineament azimuths are *axial* data: a line at 30 deg is the same line at
210 deg.  Axial samples are analysed by doubling the angles, which turns
them into ordinary circular data, computing the circular statistic, and
halving the resulting direction (Mardia and Jupp 2000, Directional
Statistics; Fisher 1993, Statistical Analysis of Circular Data).

All azimuths are in degrees clockwise from north and are folded into
[0, 180).  Statistics are length-weighted when lengths are passed as weights
(the usual choice for lineament maps, so that many short fragments do not
outweigh one long line) and count-based when ``weights`` is None.
"""

from __future__ import annotations

import csv
import json
import math
import os
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..atomic import replaced_atomically
from ..errors import OutputError, SettingsError
from .layers import azimuths_deg, ground_lengths_m

__all__ = [
    "axial_mean",
    "axial_spread_deg",
    "RoseTable",
    "rose_bins",
    "rose_for_lines",
    "OrientationSet",
    "orientation_sets",
    "plot_rose",
    "write_rose_table",
]


# ====================================================================== basics
def _clean(azimuths_deg, weights) -> tuple[np.ndarray, np.ndarray]:
    """Folded azimuths and weights, dropping non-finite azimuths."""
    az = np.asarray(azimuths_deg, dtype=np.float64).reshape(-1)
    if weights is None:
        w = np.ones_like(az)
    else:
        w = np.asarray(weights, dtype=np.float64).reshape(-1)
        if w.shape != az.shape:
            raise SettingsError(f"orientation: {w.size} weights given for {az.size} azimuths")
        if np.any(w[np.isfinite(w)] < 0) or not np.all(np.isfinite(w)):
            raise SettingsError("orientation: weights must be finite and not negative")
    ok = np.isfinite(az)
    az, w = np.mod(az[ok], 180.0), w[ok]
    az[az >= 180.0] = 0.0
    return az, w


def _resultant(az: np.ndarray, w: np.ndarray) -> tuple[float, float]:
    """Mean direction (deg in [0, 180)) and mean resultant length of axial data."""
    total = float(w.sum())
    if az.size == 0 or total <= 0:
        return math.nan, math.nan
    two = np.radians(2.0 * az)
    c = float(np.dot(w, np.cos(two))) / total
    s = float(np.dot(w, np.sin(two))) / total
    r = min(1.0, math.hypot(c, s))
    if r < 1e-12:
        return math.nan, r
    mean = math.degrees(math.atan2(s, c)) / 2.0 % 180.0
    return (0.0 if mean >= 180.0 else mean), r


def axial_mean(azimuths_deg, weights=None) -> tuple[float, float]:
    """Mean axial direction and mean resultant length.

    Angles are doubled, averaged as unit vectors (weighted), and the mean
    direction halved (Mardia and Jupp 2000).

    Parameters
    ----------
    azimuths_deg : array_like, shape (N,)
        Axial directions in degrees (any range; folded into [0, 180)).
        Non-finite values are ignored.
    weights : array_like, shape (N,), optional
        Non-negative weights, e.g. line lengths; None counts every line once.

    Returns
    -------
    mean_direction_deg : float
        In [0, 180); NaN when undefined (no data, or a resultant of zero
        length, as for perfectly crossed sets).
    mean_resultant_length : float
        In [0, 1] for the doubled angles: 1 when all lines are parallel, near
        0 when directions are spread evenly; NaN without data.
    """
    az, w = _clean(azimuths_deg, weights)
    return _resultant(az, w)


def axial_spread_deg(mean_resultant_length: float) -> float:
    """Angular spread of axial data from its mean resultant length.

    The circular standard deviation ``sqrt(-2 ln R)`` of the doubled angles
    (Mardia and Jupp 2000), halved back to line directions, in
    degrees.  0 for parallel lines, growing without bound as R tends to 0.
    """
    r = float(mean_resultant_length)
    if not math.isfinite(r):
        return math.nan
    if r <= 0:
        return math.inf
    return math.degrees(math.sqrt(max(0.0, -2.0 * math.log(min(r, 1.0))))) / 2.0


# ====================================================================== rose
@dataclass(frozen=True)
class RoseTable:
    """Binned orientations over 0-180 deg.

    Attributes
    ----------
    bin_start_deg, bin_end_deg, bin_centre_deg : ndarray, shape (K,)
        Bin limits and centres in degrees; a bin covers
        ``[start, end)``.  With a ``start_deg`` offset the first bin wraps
        through north (e.g. -5 to 5 deg), and its limits are reported as
        given (negative start).
    frequency : ndarray, shape (K,)
        Total weight per bin: metres of line when ``weighting`` is
        ``"length_m"``, number of lines when ``"count"``.
    share : ndarray, shape (K,)
        ``frequency / total`` (zeros when the total is zero).
    weighting : str
        ``"length_m"`` or ``"count"``.
    total : float
        Sum of the frequencies.
    n_lines : int
        Number of lines with a defined azimuth.
    mean_direction_deg, mean_resultant_length : float
        Axial mean of all lines (see :func:`axial_mean`).
    """

    bin_start_deg: np.ndarray
    bin_end_deg: np.ndarray
    bin_centre_deg: np.ndarray
    frequency: np.ndarray
    share: np.ndarray
    weighting: str
    total: float
    n_lines: int
    mean_direction_deg: float
    mean_resultant_length: float

    @property
    def bin_width_deg(self) -> float:
        return float(self.bin_end_deg[0] - self.bin_start_deg[0])

    def rows(self) -> list[dict]:
        """One dict per bin; the frequency column is named by ``weighting``."""
        return [
            {
                "bin_start_deg": float(a),
                "bin_end_deg": float(b),
                "bin_centre_deg": float(c),
                self.weighting: float(f) if self.weighting == "length_m" else int(round(f)),
                "share": float(s),
            }
            for a, b, c, f, s in zip(
                self.bin_start_deg, self.bin_end_deg, self.bin_centre_deg, self.frequency, self.share
            )
        ]

    def to_dict(self) -> dict:
        """JSON-ready dictionary (NaN becomes None)."""

        def num(v):
            v = float(v)
            return v if math.isfinite(v) else None

        return {
            "weighting": self.weighting,
            "bin_width_deg": self.bin_width_deg,
            "total": num(self.total),
            "n_lines": int(self.n_lines),
            "mean_direction_deg": num(self.mean_direction_deg),
            "mean_resultant_length": num(self.mean_resultant_length),
            "bins": self.rows(),
        }


def rose_bins(
    azimuths_deg,
    weights=None,
    bin_width_deg: float = 10.0,
    *,
    start_deg: float = 0.0,
    weighting: str | None = None,
) -> RoseTable:
    """Histogram of axial directions over 0-180 deg.

    Parameters
    ----------
    azimuths_deg : array_like, shape (N,)
        Axial directions in degrees; non-finite values are ignored.
    weights : array_like, shape (N,), optional
        Line lengths in metres for a length-weighted rose, or None to count
        lines.
    bin_width_deg : float
        Bin width; must divide 180 into a whole number of bins.
    start_deg : float
        Start of the first bin (keyword).  ``-bin_width_deg / 2`` centres a
        bin on north.
    weighting : str, optional
        Label of the frequency: ``"length_m"`` or ``"count"``; defaults to
        ``"count"`` without weights and ``"length_m"`` with them.

    Returns
    -------
    RoseTable
    """
    width = float(bin_width_deg)
    if not (math.isfinite(width) and width > 0):
        raise SettingsError(f"rose: bin_width_deg must be positive, got {bin_width_deg!r}")
    n_bins = 180.0 / width
    if abs(n_bins - round(n_bins)) > 1e-9:
        raise SettingsError(f"rose: bin_width_deg {width:g} does not divide 180 deg into whole bins")
    n_bins = int(round(n_bins))
    start = float(start_deg)
    if not math.isfinite(start):
        raise SettingsError(f"rose: start_deg must be finite, got {start_deg!r}")
    if weighting is None:
        weighting = "count" if weights is None else "length_m"
    if weighting not in ("count", "length_m"):
        raise SettingsError(f"rose: weighting must be 'count' or 'length_m', got {weighting!r}")
    az, w = _clean(azimuths_deg, weights)
    rel = np.mod(az - start, 180.0)
    k = np.floor(rel / width + 1e-9).astype(np.intp)  # tolerate round-off on a bin edge
    k = np.clip(k, 0, n_bins - 1)
    freq = np.bincount(k, weights=w, minlength=n_bins).astype(np.float64)
    total = float(freq.sum())
    share = freq / total if total > 0 else np.zeros_like(freq)
    lo = start + width * np.arange(n_bins)
    mean, r = _resultant(az, w)
    return RoseTable(
        bin_start_deg=lo,
        bin_end_deg=lo + width,
        bin_centre_deg=lo + width / 2.0,
        frequency=freq,
        share=share,
        weighting=weighting,
        total=total,
        n_lines=int(az.size),
        mean_direction_deg=mean,
        mean_resultant_length=r,
    )


def rose_for_lines(
    geoms: Sequence,
    crs,
    *,
    by: str = "length",
    bin_width_deg: float = 10.0,
    start_deg: float = 0.0,
) -> RoseTable:
    """Rose table of a line layer (length-weighted by default).

    Azimuths and ground lengths come from :func:`~lineament.analysis.layers.azimuths_deg`
    and :func:`~lineament.analysis.layers.ground_lengths_m`.

    Parameters
    ----------
    geoms : sequence of LineString
    crs : pyproj.CRS or None
    by : {"length", "count"}
    bin_width_deg, start_deg
        As in :func:`rose_bins`.
    """
    if by not in ("length", "count"):
        raise SettingsError(f"rose: weighting must be 'length' or 'count', got {by!r}")
    az = azimuths_deg(geoms, crs)
    weights = ground_lengths_m(geoms, crs) if by == "length" else None
    return rose_bins(az, weights, bin_width_deg, start_deg=start_deg)


# ====================================================================== sets
@dataclass(frozen=True)
class OrientationSet:
    """One dominant orientation set.

    Attributes
    ----------
    mean_direction_deg : float
        Axial mean of the set's members, in [0, 180).
    peak_deg : float
        Direction of the density peak, in [0, 180).
    lower_deg, upper_deg : float
        Limits of the set's sector (density minima on either side), in
        [0, 180); the sector runs clockwise from ``lower_deg`` to
        ``upper_deg`` and may wrap through north.
    share : float
        Share of the total weight (length or count) in the set.
    spread_deg : float
        Axial circular standard deviation of the members (see
        :func:`axial_spread_deg`).
    mean_resultant_length : float
        Of the members' doubled angles.
    n_lines : int
        Number of member lines.
    """

    mean_direction_deg: float
    peak_deg: float
    lower_deg: float
    upper_deg: float
    share: float
    spread_deg: float
    mean_resultant_length: float
    n_lines: int

    def to_dict(self) -> dict:
        return {k: (float(v) if isinstance(v, float) else v) for k, v in self.__dict__.items()}


def axial_density(azimuths_deg, weights=None, *, bandwidth_deg: float = 7.5, step_deg: float = 0.5):
    """Axial kernel density of directions on a regular grid over [0, 180).

    A von Mises kernel on the doubled angles, ``exp(kappa cos(2 (theta -
    theta_i)))``, with ``kappa = 1 / (2 h)^2`` for a bandwidth ``h`` in
    radians, so that the kernel's spread on line directions is about ``h``
    (kernel density on the circle: Mardia and Jupp 2000).

    Returns
    -------
    grid_deg : ndarray, shape (G,)
    density : ndarray, shape (G,)
        Per degree; integrates to 1 over [0, 180) (zeros without data).
    """
    h = float(bandwidth_deg)
    if not (math.isfinite(h) and 0 < h <= 90):
        raise SettingsError(f"orientation sets: bandwidth_deg must be within (0, 90], got {bandwidth_deg!r}")
    az, w = _clean(azimuths_deg, weights)
    n_grid = int(round(180.0 / step_deg))
    grid = np.arange(n_grid) * (180.0 / n_grid)
    total = float(w.sum())
    if az.size == 0 or total <= 0:
        return grid, np.zeros(n_grid)
    kappa = 1.0 / (2.0 * math.radians(h)) ** 2
    # bin the data on the grid first: exact enough at step << bandwidth, and
    # O(G log G) instead of O(N G)
    k = np.rint(az / (180.0 / n_grid)).astype(np.intp) % n_grid
    hist = np.bincount(k, weights=w, minlength=n_grid) / total
    lag = np.radians(2.0 * grid)
    kernel = np.exp(kappa * (np.cos(lag) - 1.0))
    kernel /= kernel.sum() * (180.0 / n_grid)
    density = np.real(np.fft.ifft(np.fft.fft(hist) * np.fft.fft(kernel)))
    return grid, np.maximum(density, 0.0)


def orientation_sets(
    azimuths_deg,
    weights=None,
    *,
    bandwidth_deg: float = 7.5,
    min_share: float = 0.1,
    max_sets: int | None = None,
) -> list[OrientationSet]:
    """Dominant orientation sets as peaks of an axial kernel density.

    The density (:func:`axial_density`) is split at its minima into sectors,
    one per peak.  Sectors holding less than ``min_share`` of the total
    weight are merged, smallest first, into the neighbour across the higher
    (shallower) of their two bounding minima, until every set holds at least
    ``min_share`` (and at most ``max_sets`` remain).  Each set is then
    described by the axial mean and spread of its members.

    Parameters
    ----------
    azimuths_deg : array_like, shape (N,)
    weights : array_like, shape (N,), optional
        Lengths for length-weighted sets, None to count lines.
    bandwidth_deg : float
        Kernel bandwidth in degrees (keyword); larger merges nearby sets.
    min_share : float
        Smallest share of the total a set may hold, in [0, 1).
    max_sets : int, optional
        Keep at most this many sets.

    Returns
    -------
    list of OrientationSet
        Ordered by decreasing share.  Empty without data or when the density
        is flat (no preferred direction at all).
    """
    min_share = float(min_share)
    if not (0.0 <= min_share < 1.0):
        raise SettingsError(f"orientation sets: min_share must be within [0, 1), got {min_share:g}")
    if max_sets is not None and int(max_sets) < 1:
        raise SettingsError(f"orientation sets: max_sets must be at least 1, got {max_sets!r}")
    az, w = _clean(azimuths_deg, weights)
    total = float(w.sum())
    if az.size == 0 or total <= 0:
        return []
    grid, dens = axial_density(az, w, bandwidth_deg=bandwidth_deg)
    n = dens.size
    step = 180.0 / n
    if dens.max() - dens.min() <= 1e-9 * max(dens.max(), 1e-300):
        return []
    dens = np.where(dens < 1e-9 * dens.max(), 0.0, dens)  # FFT round-off in empty arcs
    prev, nxt = np.roll(dens, 1), np.roll(dens, -1)
    peaks = np.flatnonzero((dens > prev) & (dens >= nxt))
    if peaks.size == 0:  # pragma: no cover - a non-flat periodic function has a maximum
        peaks = np.array([int(np.argmax(dens))])
    # valley (minimum) between consecutive peaks, going clockwise
    valleys = []
    for i, p in enumerate(peaks):
        q = peaks[(i + 1) % peaks.size]
        span = (q - p) % n or n
        arc = (p + np.arange(1, span)) % n
        valleys.append(int(arc[np.argmin(dens[arc])]) if arc.size else int(p))
    # sectors: sector i runs from valley[i-1] to valley[i] and holds peak i
    sectors = [[valleys[i - 1], valleys[i], int(peaks[i])] for i in range(peaks.size)]
    if peaks.size == 1:
        sectors = [[valleys[0], valleys[0], int(peaks[0])]]

    member_bin = np.rint(az / step).astype(np.intp) % n
    bin_weight = np.bincount(member_bin, weights=w, minlength=n)
    all_bins = np.arange(n)

    def weight_of(sec) -> float:
        return float(bin_weight[_in_sector(all_bins, sec[0], sec[1], n)].sum())

    limit = max_sets if max_sets is not None else len(sectors)
    while len(sectors) > 1:
        shares = [weight_of(s) / total for s in sectors]
        i = int(np.argmin(shares))
        if shares[i] >= min_share and len(sectors) <= limit:
            break
        left, right = (i - 1) % len(sectors), (i + 1) % len(sectors)
        lo_v, hi_v = sectors[i][0], sectors[i][1]
        if dens[lo_v] >= dens[hi_v]:  # shallower valley on the counter-clockwise side
            j = left
            sectors[j] = [sectors[j][0], sectors[i][1], _higher(dens, sectors[j][2], sectors[i][2])]
        else:
            j = right
            sectors[j] = [sectors[i][0], sectors[j][1], _higher(dens, sectors[j][2], sectors[i][2])]
        del sectors[i]
        if len(sectors) == 1:
            sectors = [[sectors[0][0], sectors[0][0], sectors[0][2]]]

    out = []
    for lo_v, hi_v, pk in sectors:
        inside = _in_sector(member_bin, lo_v, hi_v, n)
        share = float(w[inside].sum()) / total
        mean, r = _resultant(az[inside], w[inside])
        out.append(
            OrientationSet(
                mean_direction_deg=mean,
                peak_deg=float(grid[pk]),
                lower_deg=float(grid[lo_v]),
                upper_deg=float(grid[hi_v]),
                share=share,
                spread_deg=axial_spread_deg(r),
                mean_resultant_length=r,
                n_lines=int(inside.sum()),
            )
        )
    out.sort(key=lambda s: -s.share)
    return out


def _higher(dens, a: int, b: int) -> int:
    return a if dens[a] >= dens[b] else b


def _in_sector(bins: np.ndarray, lo: int, hi: int, n: int) -> np.ndarray:
    """Members of the clockwise sector (lo, hi]; the whole circle when lo == hi."""
    if lo == hi:
        return np.ones(bins.shape, dtype=bool)
    return ((bins - lo) % n > 0) & ((bins - lo) % n <= (hi - lo) % n)


# ====================================================================== output
def _check_target(path: str, allowed: tuple[str, ...], overwrite: bool, what: str) -> str:
    ext = os.path.splitext(path)[1].lower()
    if ext not in allowed:
        raise OutputError(f"{path}: unknown {what} format '{ext or '(none)'}'; use {', '.join(allowed)}")
    if os.path.exists(path) and not overwrite:
        raise OutputError(f"{path}: file exists (pass overwrite=True to replace it)")
    parent = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(parent):
        raise OutputError(f"{path}: directory {parent} does not exist")
    return ext


def _atomic_write(path: str, writer, *, binary: bool) -> None:
    """Write through a temporary file in the same directory, then rename."""
    with replaced_atomically(path) as tmp:
        with open(tmp, "wb" if binary else "w", **({} if binary else {"newline": "", "encoding": "utf-8"})) as fh:
            writer(fh)


def write_rose_table(table: RoseTable, path: str | os.PathLike, *, overwrite: bool = False) -> None:
    """Write a rose table as CSV (``.csv``) or JSON (``.json``).

    CSV columns: ``bin_start_deg, bin_end_deg, bin_centre_deg, <weighting>,
    share`` where ``<weighting>`` is ``length_m`` or ``count``.  JSON holds
    :meth:`RoseTable.to_dict`.

    Raises
    ------
    OutputError
        Unknown extension, existing file without ``overwrite``, missing
        directory or a failed write.
    """
    path = os.fspath(path)
    ext = _check_target(path, (".csv", ".json"), overwrite, "table")
    if ext == ".json":

        def writer(fh):
            json.dump(table.to_dict(), fh, indent=2)
            fh.write("\n")

    else:

        def writer(fh):
            cols = ["bin_start_deg", "bin_end_deg", "bin_centre_deg", table.weighting, "share"]
            out = csv.DictWriter(fh, fieldnames=cols, lineterminator="\n")
            out.writeheader()
            for row in table.rows():
                out.writerow({k: (repr(v) if isinstance(v, float) else v) for k, v in row.items()})

    _atomic_write(path, writer, binary=False)


def plot_rose(
    table: RoseTable,
    path: str | os.PathLike,
    *,
    title: str | None = None,
    sets: Sequence[OrientationSet] | None = None,
    overwrite: bool = False,
    size_in: float = 5.0,
    dpi: int = 150,
) -> None:
    """Draw a rose diagram to PNG or SVG (by extension).

    Petals are mirrored into 180-360 deg because lineament directions are
    axial.  North is at the top and azimuths run clockwise.  Petal radius is
    proportional to the square root of the frequency, so that petal *area*
    is proportional to frequency (common practice; equal-area rose).  Rings
    are labelled with the share of the total they stand for.

    Parameters
    ----------
    table : RoseTable
    path : str or path-like
        ``.png`` or ``.svg``.
    title : str, optional
    sets : sequence of OrientationSet, optional
        Mean directions to mark as thin lines across the diagram.
    overwrite : bool
        Replace an existing file.
    size_in, dpi
        Figure size in inches and PNG resolution.

    Raises
    ------
    OutputError
        Unknown extension, existing file, or matplotlib not installed.
    """
    path = os.fspath(path)
    ext = _check_target(path, (".png", ".svg"), overwrite, "plot")
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError as exc:
        raise OutputError(f"{path}: rose plots need matplotlib (install the 'plot' extra)") from exc

    fig = Figure(figsize=(size_in, size_in))
    FigureCanvasAgg(fig)
    ax = fig.add_subplot(projection="polar")
    ax.set_theta_zero_location("N")
    ax.set_theta_direction(-1)
    width = math.radians(table.bin_width_deg)
    share = np.asarray(table.share, dtype=np.float64)
    top = float(share.max()) if share.size and share.max() > 0 else 1.0
    radius = np.sqrt(share / top)
    centres = np.radians(np.asarray(table.bin_centre_deg, dtype=np.float64))
    for offset in (0.0, math.pi):
        ax.bar(
            centres + offset,
            radius,
            width=width,
            bottom=0.0,
            align="center",
            color="0.72",
            edgecolor="0.15",
            linewidth=0.6,
        )
    for s in sets or ():
        if math.isfinite(s.mean_direction_deg):
            th = math.radians(s.mean_direction_deg)
            ax.plot([th, th], [0, 1.05], color="0.1", linewidth=0.9, linestyle="--")
            ax.plot([th + math.pi, th + math.pi], [0, 1.05], color="0.1", linewidth=0.9, linestyle="--")
    ring_shares = _nice_rings(top)
    ax.set_rlim(0, 1.05)
    ax.set_yticks([math.sqrt(v / top) for v in ring_shares])
    ax.set_yticklabels([f"{100 * v:g} %" for v in ring_shares], fontsize=7, color="0.3")
    ax.set_rlabel_position(100)
    ax.set_xticks(np.radians(np.arange(0, 360, 30)))
    ax.set_xticklabels([f"{a}\N{DEGREE SIGN}" for a in range(0, 360, 30)], fontsize=8)
    ax.grid(color="0.8", linewidth=0.5)
    label = "length" if table.weighting == "length_m" else "count"
    note = f"n = {table.n_lines}, {table.bin_width_deg:g}\N{DEGREE SIGN} bins, by {label}"
    fig.text(0.5, 0.02, note, ha="center", fontsize=8, color="0.25")
    if title:
        ax.set_title(title, fontsize=10, pad=14)

    def writer(fh):
        fig.savefig(fh, format=ext[1:], dpi=dpi)

    _atomic_write(path, writer, binary=True)


def _nice_rings(top: float) -> list[float]:
    """Two to four round share values not above ``top`` for ring labels."""
    for step in (0.01, 0.02, 0.025, 0.05, 0.1, 0.2, 0.25):
        n = int(top / step + 1e-9)
        if 1 <= n <= 4:
            return [step * k for k in range(1, n + 1)]
    if top < 0.01:
        return [top]
    return [0.25 * k for k in range(1, int(top / 0.25 + 1e-9) + 1)]
