"""A one-page, self-contained HTML report of a lineament layer.

The page holds a map of the lines over a hillshade of the DEM (or over the
image they came from), the rose diagram, the length histogram, summary
statistics, the run parameters stored with the layer and the screening
caution.  Pictures are embedded as base64 PNG, so the page needs no network
and no side files.

Hillshade: Horn's (1981) 3 x 3 gradient and Lambertian shading of the
surface normal by a sun at a given azimuth and altitude.  One sun direction
hides lineaments parallel to it, so the default averages four suns at 225,
270, 315 and 360 deg (a multi-directional hillshade after Mark 1992, here
with equal weights); the direction(s) used are printed under the map.

Horn, B. K. P. (1981). Hill shading and the reflectance map. Proc. IEEE
69(1), 14-47.
Mark, R. K. (1992). Multidirectional, oblique-weighted, shaded-relief image
of the Island of Hawaii. USGS Open-File Report 92-422 (from memory).

Matplotlib (the ``plot`` extra) is imported only inside the drawing functions.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import io
import math
import os
import tempfile
from collections.abc import Sequence
from pathlib import Path

import numpy as np
from pyproj import CRS, Geod
from scipy import ndimage

from ._version import __version__
from .analysis.layers import reproject_lines
from .analysis.orientation import orientation_sets, plot_rose, rose_bins
from .atomic import replaced_atomically
from .errors import InputError, OutputError, RasterReadError, SettingsError
from .geodesy import line_measures
from .georef import GeoRef

__all__ = [
    "MULTI_SUN_AZIMUTHS_DEG",
    "build_report_html",
    "check_file_output",
    "hillshade",
    "line_measures_of_layer",
    "render_length_histogram_png",
    "render_map_png",
    "require_matplotlib",
    "write_report",
]

#: Sun azimuths (deg clockwise from north) averaged by the multi-directional hillshade.
MULTI_SUN_AZIMUTHS_DEG = (225.0, 270.0, 315.0, 360.0)

#: Line colours of the map, fine to coarse scale (our own ramp; reads on grey relief).
LINE_COLOURS = ("#ffd000", "#ff8c00", "#e8401c", "#b0103a", "#6b0f5c", "#2b0a3d")

PLOT_EXTRA_HINT = "pip install lineament[plot]"


# ====================================================================== helpers
def require_matplotlib(what: str) -> None:
    """Raise a one-line :class:`OutputError` when matplotlib is not installed."""
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        raise OutputError(f"{what} needs matplotlib; install it with: {PLOT_EXTRA_HINT}") from None


def check_file_output(path: str | os.PathLike, extensions: Sequence[str], *, overwrite: bool = False,
                      what: str = "output") -> str:
    """Check a plain output file before any work; return its lower-case extension.

    Raises
    ------
    OutputError
        Unknown extension, a folder, missing folder, or an existing file
        without ``overwrite`` (the message names ``--overwrite``).
    """
    p = Path(path)
    ext = p.suffix.lower()
    if p.is_dir():
        raise OutputError(f"{path}: is a folder; give a file name")
    if ext not in extensions:
        raise OutputError(f"{path}: unknown {what} format {ext or '(no extension)'!r}; use one of "
                          f"{', '.join(extensions)}")
    folder = p.parent
    if not folder.is_dir():
        raise OutputError(f"{path}: folder {folder} does not exist")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(f"{path}: folder {folder} is not writable")
    if p.exists() and not overwrite:
        raise OutputError(f"{path}: output exists; pass --overwrite to replace it")
    return ext


def _atomic_write_bytes(path: Path, data: bytes) -> None:
    with replaced_atomically(path) as tmp, open(tmp, "wb") as fh:
        fh.write(data)


def line_measures_of_layer(geoms, crs: CRS | None) -> dict[str, np.ndarray]:
    """Geodesic ``length_m`` and true-north ``azimuth_deg`` of lines, as the extraction measures them.

    See :func:`lineament.geodesy.line_measures` (Karney 2013 through pyproj.Geod).
    """
    from affine import Affine

    probe = GeoRef(Affine.identity(), crs, 1, 1)
    return line_measures([np.asarray(g.coords)[:, 0] for g in geoms],
                         [np.asarray(g.coords)[:, 1] for g in geoms], probe)


# ====================================================================== hillshade
def hillshade(
    z: np.ndarray,
    pixel_size_m: tuple[float, float],
    *,
    sun_azimuth_deg: float | Sequence[float] | None = None,
    sun_altitude_deg: float = 45.0,
    z_factor: float = 1.0,
) -> np.ndarray:
    """Shaded relief of a north-up DEM, values in [0, 1].

    Parameters
    ----------
    z : ndarray, shape (H, W)
        Elevations; row 0 is the northern edge.  NaN cells give NaN.
    pixel_size_m : (float, float)
        Ground size of a pixel, metres, ``(along columns (east), along rows (south))``.
    sun_azimuth_deg : float or sequence of float, optional
        Sun azimuth(s), degrees clockwise from north (keyword).  Several
        values are averaged; None uses :data:`MULTI_SUN_AZIMUTHS_DEG`.
    sun_altitude_deg : float
        Sun elevation above the horizon, degrees, in (0, 90].
    z_factor : float
        Multiplier turning elevation units into metres.

    Returns
    -------
    ndarray of float32, shape (H, W)
        ``max(0, n . s)`` for the unit surface normal ``n`` (Horn 1981
        gradient) and unit sun vector ``s``, averaged over the suns.
    """
    arr = np.asarray(z, dtype=np.float64) * float(z_factor)
    if arr.ndim != 2:
        raise InputError(f"hillshade: expected a 2-D array, got shape {arr.shape}")
    alt = float(sun_altitude_deg)
    if not (0 < alt <= 90):
        raise SettingsError(f"sun altitude must be within (0, 90] degrees, got {sun_altitude_deg!r}")
    suns = MULTI_SUN_AZIMUTHS_DEG if sun_azimuth_deg is None else np.atleast_1d(sun_azimuth_deg)
    dx, dy = float(pixel_size_m[0]), float(pixel_size_m[1])
    nan = ~np.isfinite(arr)
    filled = np.where(nan, np.nanmean(arr) if (~nan).any() else 0.0, arr)
    # Horn (1981): Sobel-weighted differences over 8 pixel spacings
    dz_east = ndimage.sobel(filled, axis=1, mode="nearest") / (8.0 * dx)
    dz_north = -ndimage.sobel(filled, axis=0, mode="nearest") / (8.0 * dy)
    norm = np.sqrt(1.0 + dz_east**2 + dz_north**2)
    h = math.radians(alt)
    out = np.zeros_like(filled)
    for a in suns:
        a = math.radians(float(a))
        s_e, s_n, s_up = math.sin(a) * math.cos(h), math.cos(a) * math.cos(h), math.sin(h)
        out += np.maximum(0.0, (-dz_east * s_e - dz_north * s_n + s_up) / norm)
    out /= len(suns)
    out[nan] = np.nan
    return out.astype(np.float32)


# ====================================================================== pictures
def _figure(width_in: float, height_in: float):
    require_matplotlib("drawing the report")
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in))
    FigureCanvasAgg(fig)
    return fig


def _png_bytes(fig, dpi: int = 110) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return buf.getvalue()


def _nice_length(target: float) -> float:
    """A round length (1, 2 or 5 times a power of ten) not above ``target``."""
    if target <= 0 or not math.isfinite(target):
        return 1.0
    p = 10 ** math.floor(math.log10(target))
    for m in (5, 2, 1):
        if m * p <= target:
            return m * p
    return p


def _metres_per_x_unit(crs: CRS | None, extent) -> float:
    if crs is None:
        return 1.0
    if crs.is_geographic:
        lat = (extent[2] + extent[3]) / 2.0
        lon = (extent[0] + extent[1]) / 2.0
        _, _, d = (crs.get_geod() or Geod(ellps="WGS84")).inv(lon, lat, lon + 0.01, lat)
        return float(d) / 0.01
    try:
        return float(crs.axis_info[0].unit_conversion_factor or 1.0)
    except (IndexError, AttributeError):
        return 1.0


def render_map_png(
    geoms: Sequence,
    categories: Sequence,
    crs: CRS | None,
    *,
    background: np.ndarray | None = None,
    background_extent: tuple[float, float, float, float] | None = None,
    category_label: str = "scale",
    caption: str = "",
    width_in: float = 8.0,
) -> bytes:
    """Map of lines over an optional grey or RGB background, with scale bar and north arrow.

    Parameters
    ----------
    geoms : sequence of LineString, in ``crs``
    categories : sequence, same length
        Colour key of each line (e.g. ``scale_m`` or ``kind``); sorted
        values get the colours of :data:`LINE_COLOURS` in turn.
    crs : pyproj.CRS or None
    background : ndarray, shape (H, W) in [0, 1] or (H, W, 3) in [0, 1], optional
    background_extent : (xmin, xmax, ymin, ymax), optional
        Map extent of the background (matplotlib ``imshow`` order).
    category_label : str
        Legend title.
    caption : str
        Small text under the map (e.g. the hillshade's sun directions).

    Returns
    -------
    bytes
        A PNG image.
    """
    from matplotlib.collections import LineCollection

    import shapely

    arr = np.asarray(list(geoms), dtype=object)
    if background_extent is not None:
        extent = background_extent
    elif arr.size:
        b = shapely.total_bounds(arr)
        pad = 0.03 * max(b[2] - b[0], b[3] - b[1], 1e-9)
        extent = (b[0] - pad, b[2] + pad, b[1] - pad, b[3] + pad)
    else:
        extent = (0.0, 1.0, 0.0, 1.0)
    xspan, yspan = extent[1] - extent[0], extent[3] - extent[2]
    aspect = yspan / xspan if xspan > 0 else 1.0
    if crs is not None and crs.is_geographic:
        aspect /= max(0.1, math.cos(math.radians((extent[2] + extent[3]) / 2.0)))
    height_in = min(max(width_in * aspect, 3.0), 12.0) + 0.6
    fig = _figure(width_in, height_in)
    ax = fig.add_axes((0.02, 0.6 / height_in + 0.02, 0.96, 1 - 0.6 / height_in - 0.04))
    if background is not None:
        if background.ndim == 2:
            ax.imshow(np.ma.masked_invalid(background), cmap="gray", vmin=0, vmax=1, extent=extent,
                      interpolation="bilinear", origin="upper")
        else:
            ax.imshow(np.clip(np.nan_to_num(background), 0, 1), extent=extent, interpolation="bilinear",
                      origin="upper")
    else:
        ax.set_facecolor("white")
    keys = list(categories)
    distinct = sorted({k for k in keys}, key=lambda v: (isinstance(v, str), v if v is not None else -1))
    handles = []
    from matplotlib.lines import Line2D

    for n, key in enumerate(distinct):
        colour = LINE_COLOURS[n % len(LINE_COLOURS)]
        segs = [np.asarray(g.coords)[:, :2] for g, k in zip(arr, keys) if k == key]
        ax.add_collection(LineCollection(segs, colors="black", linewidths=2.6, zorder=2))
        ax.add_collection(LineCollection(segs, colors=colour, linewidths=1.5, zorder=3))
        label = f"{key:g} m" if isinstance(key, float) and category_label == "scale" else str(key)
        handles.append(Line2D([0], [0], color=colour, lw=2.5, label=f"{label} ({len(segs)})"))
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    ax.set_aspect(1.0 / math.cos(math.radians((extent[2] + extent[3]) / 2.0))
                  if crs is not None and crs.is_geographic else "equal")
    ax.set_xticks([])
    ax.set_yticks([])
    if handles:
        leg = ax.legend(handles=handles, title=category_label, loc="upper right", fontsize=8, title_fontsize=8,
                        framealpha=0.9, edgecolor="0.4")
        leg.get_frame().set_linewidth(0.6)
    # scale bar, lower left
    m_per_unit = _metres_per_x_unit(crs, extent)
    bar_m = _nice_length(0.25 * xspan * m_per_unit)
    bar_units = bar_m / m_per_unit
    x0 = extent[0] + 0.04 * xspan
    y0 = extent[2] + 0.05 * yspan
    h = 0.012 * yspan
    unit_word = "units" if crs is None else None
    from matplotlib.patches import Rectangle

    for k in range(4):
        ax.add_patch(Rectangle((x0 + k * bar_units / 4, y0), bar_units / 4, h, facecolor="black" if k % 2 == 0
                               else "white", edgecolor="black", linewidth=0.8, zorder=5))
    text = (f"{bar_m:g} {unit_word}" if unit_word else
            (f"{bar_m / 1000:g} km" if bar_m >= 1000 else f"{bar_m:g} m"))
    ax.text(x0 + bar_units / 2, y0 + 2.2 * h, text, ha="center", va="bottom", fontsize=8, zorder=5,
            bbox=dict(facecolor="white", edgecolor="none", alpha=0.8, pad=1.5))
    # north arrow, lower right
    ax.annotate("", xy=(0.94, 0.15), xytext=(0.94, 0.05), xycoords="axes fraction", zorder=6,
                arrowprops=dict(arrowstyle="-|>", color="black", lw=1.6, mutation_scale=14))
    ax.text(0.94, 0.165, "N", transform=ax.transAxes, ha="center", va="bottom", fontsize=10,
            fontweight="bold", zorder=6, bbox=dict(facecolor="white", edgecolor="none", alpha=0.8, pad=1.0))
    north = ("north arrow: grid north of the map CRS" if crs is not None and not crs.is_geographic
             else "north arrow: true north" if crs is not None else "no CRS: up is the layer's +y axis")
    fig.text(0.02, 0.3 / height_in, f"{caption}\n{north}".strip(), fontsize=7.5, color="0.25", va="center",
             linespacing=1.5)
    return _png_bytes(fig)


def render_length_histogram_png(lengths_m: np.ndarray, *, width_in: float = 5.0) -> bytes:
    """Histogram of line lengths (logarithmic bins, since lengths are skewed), as PNG bytes."""
    fig = _figure(width_in, 3.4)
    ax = fig.add_axes((0.13, 0.17, 0.83, 0.76))
    v = np.asarray(lengths_m, dtype=np.float64)
    v = v[np.isfinite(v) & (v > 0)]
    if v.size:
        lo, hi = v.min(), v.max()
        if hi / lo < 10:
            bins = np.linspace(lo, hi if hi > lo else lo + 1, 15)
        else:
            bins = np.geomspace(lo, hi, 20)
            ax.set_xscale("log")
        ax.hist(v, bins=bins, color="0.6", edgecolor="0.15", linewidth=0.6)
    ax.set_xlabel("length (m)", fontsize=9)
    ax.set_ylabel("number of lines", fontsize=9)
    ax.tick_params(labelsize=8)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    return _png_bytes(fig)


def _rose_png(table, sets) -> bytes:
    with tempfile.TemporaryDirectory(prefix="lineament-report-") as tmp:
        path = os.path.join(tmp, "rose.png")
        plot_rose(table, path, sets=sets, size_in=4.6, dpi=110)
        with open(path, "rb") as fh:
            return fh.read()


# ====================================================================== backgrounds
def _read_background(path: str, *, as_image: bool, max_pixels: int, sun_azimuth_deg, sun_altitude_deg: float,
                     z_factor: float):
    """Decimated background array, its extent, CRS and a caption."""
    import rasterio
    from rasterio.enums import Resampling
    from rasterio.errors import RasterioError

    if not os.path.exists(path):
        raise RasterReadError(f"{path}: no such file")
    try:
        with rasterio.open(path) as ds:
            if ds.transform.is_identity:
                raise InputError(f"{path}: raster has no geotransform, so lines cannot be placed on it")
            if ds.transform.b != 0 or ds.transform.d != 0:
                raise InputError(f"{path}: rotated rasters cannot be drawn as a map background")
            factor = max(1, math.ceil(max(ds.width, ds.height) / max_pixels))
            h, w = max(1, ds.height // factor), max(1, ds.width // factor)
            bands = [1] if not as_image or ds.count < 3 else [1, 2, 3]
            data = ds.read(bands, out_shape=(len(bands), h, w), masked=True,
                           resampling=Resampling.average).astype(np.float64)
            transform = ds.transform @ ds.transform.scale(ds.width / w, ds.height / h)
            crs = None if ds.crs is None else CRS.from_user_input(ds.crs.to_wkt())
            bounds = ds.bounds
    except (InputError, RasterReadError):
        raise
    except (RasterioError, OSError) as exc:
        first = " ".join(str(exc).split()) or type(exc).__name__
        raise RasterReadError(f"{path}: cannot read raster ({first})") from None
    extent = (bounds.left, bounds.right, bounds.bottom, bounds.top)
    if transform.e > 0:  # south-up storage: flip so row 0 is north
        data = data[:, ::-1]
    vals = np.ma.filled(data, np.nan)
    if as_image:
        out = np.empty_like(vals)
        for k in range(vals.shape[0]):
            lo, hi = np.nanpercentile(vals[k], [2, 98]) if np.isfinite(vals[k]).any() else (0, 1)
            out[k] = (vals[k] - lo) / (hi - lo if hi > lo else 1.0)
        img = np.clip(out, 0, 1)
        img = img[0] if img.shape[0] == 1 else np.moveaxis(img, 0, -1)
        return img, extent, crs, f"background: {os.path.basename(path)} (image, 2-98 % stretch)"
    georef = GeoRef.from_rasterio(transform, None if crs is None else crs.to_wkt(), h, w)
    px = georef.pixel_size_m()
    shade = hillshade(vals[0], px, sun_azimuth_deg=sun_azimuth_deg, sun_altitude_deg=sun_altitude_deg,
                      z_factor=z_factor)
    if sun_azimuth_deg is None:
        suns = ", ".join(f"{a:g}" for a in MULTI_SUN_AZIMUTHS_DEG)
        how = f"multi-directional hillshade (suns at {suns} deg averaged, altitude {sun_altitude_deg:g} deg)"
    else:
        how = f"hillshade, sun azimuth {float(sun_azimuth_deg):g} deg, altitude {sun_altitude_deg:g} deg"
    # stretch to the 1-99 % range, then keep it light so the coloured lines stay readable
    finite = np.isfinite(shade)
    if finite.any():
        lo, hi = np.percentile(shade[finite], [1, 99])
        shade = np.clip((shade - lo) / (hi - lo if hi > lo else 1.0), 0, 1)
    shade = 0.25 + 0.7 * shade
    return shade, extent, crs, f"background: {how} of {os.path.basename(path)}"


# ====================================================================== html
_STYLE = """
body{font-family:Helvetica,Arial,sans-serif;max-width:980px;margin:24px auto;padding:0 16px;color:#222;
line-height:1.4}
h1{font-size:1.5em;margin-bottom:0.1em}h2{font-size:1.15em;border-bottom:1px solid #bbb;margin-top:1.6em}
.sub{color:#555;font-size:0.9em}table{border-collapse:collapse;font-size:0.9em;margin:0.5em 0}
td,th{border-bottom:1px solid #ddd;padding:3px 10px 3px 0;text-align:left;vertical-align:top}
th{font-weight:600}td.n{text-align:right;font-variant-numeric:tabular-nums}
.row{display:flex;flex-wrap:wrap;gap:24px;align-items:flex-start}img{max-width:100%}
.caution{border-left:4px solid #b0103a;background:#f6f0f0;padding:8px 12px;margin:1.5em 0}
code,pre{font-family:Menlo,Consolas,monospace;font-size:0.85em}pre{white-space:pre-wrap;background:#f5f5f5;
padding:8px}
"""


def _img(png: bytes, alt: str) -> str:
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{base64.b64encode(png).decode("ascii")}">'


def _table(header: Sequence[str], rows: Sequence[Sequence], numeric_from: int = 1) -> str:
    out = ["<table><tr>" + "".join(f"<th>{html.escape(str(h))}</th>" for h in header) + "</tr>"]
    for r in rows:
        cells = []
        for i, v in enumerate(r):
            cls = ' class="n"' if i >= numeric_from else ""
            cells.append(f"<td{cls}>{html.escape(str(v))}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _fmt(v, digits: int = 1) -> str:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return "n/a"
    return "n/a" if not math.isfinite(f) else f"{f:,.{digits}f}"


def _crs_name(wkt_or_crs) -> str:
    if not wkt_or_crs:
        return "none"
    try:
        c = CRS.from_user_input(wkt_or_crs)
    except Exception:
        return "unrecognised"
    epsg = c.to_epsg()
    return f"{c.name}" + (f" (EPSG:{epsg})" if epsg else "")


def _run_rows(meta: dict | None) -> list[tuple[str, str]]:
    """Flat (name, value) rows of run metadata; WKT shown as CRS names."""
    if not meta:
        return []
    rows: list[tuple[str, str]] = []

    def add(prefix: str, d: dict):
        for k, v in d.items():
            name = f"{prefix}{k}"
            if k in ("crs", "output_crs"):
                rows.append((name, _crs_name(v)))
            elif k == "scales" and isinstance(v, list) and v and isinstance(v[0], dict):
                continue  # shown as its own table
            elif isinstance(v, dict):
                add(f"{name}.", v)
            elif isinstance(v, list):
                rows.append((name, ", ".join(map(str, v))))
            else:
                rows.append((name, "" if v is None else str(v)))

    add("", meta)
    return rows


def _scale_reports(meta: dict | None) -> list[dict]:
    if not meta:
        return []
    for candidate in (meta, meta.get("input_run") or {}):
        s = candidate.get("scales") if isinstance(candidate, dict) else None
        if isinstance(s, list) and s and isinstance(s[0], dict):
            return s
    return []


def build_report_html(
    geoms: Sequence,
    props: Sequence[dict],
    crs: CRS | None,
    *,
    source_name: str,
    run_metadata: dict | None = None,
    raster: str | os.PathLike | None = None,
    image: str | os.PathLike | None = None,
    colour_by: str = "scale",
    sun_azimuth_deg: float | None = None,
    sun_altitude_deg: float = 45.0,
    z_factor: float = 1.0,
    bin_width_deg: float = 10.0,
    weight: str = "length",
    title: str | None = None,
    caution: str = "",
    max_pixels: int = 1600,
) -> str:
    """The report page as one HTML string (pictures inline as base64 PNG).

    Parameters
    ----------
    geoms, props, crs
        The lines, as from :func:`lineament.interpret.read_line_layer`.
    source_name : str
        Name of the line layer, shown in the title.
    run_metadata : dict, optional
        From :func:`lineament.vector_io.read_run_metadata`.
    raster : path, optional
        DEM drawn as a hillshade under the lines.
    image : path, optional
        Image drawn as it is under the lines (instead of ``raster``).
    colour_by : {"scale", "kind"}
        Attribute that colours the lines.
    sun_azimuth_deg : float, optional
        One sun azimuth for the hillshade; None: multi-directional.
    sun_altitude_deg, z_factor
        Hillshade settings.
    bin_width_deg, weight
        Rose diagram settings (``weight`` "length" or "count").
    title : str, optional
    caution : str
        Screening caution printed on the page.
    max_pixels : int
        The background is averaged down to at most this many pixels across.
    """
    if colour_by not in ("scale", "kind"):
        raise SettingsError(f"colour by must be 'scale' or 'kind', got {colour_by!r}")
    if weight not in ("length", "count"):
        raise SettingsError(f"weight must be 'length' or 'count', got {weight!r}")
    if raster is not None and image is not None:
        raise SettingsError("give a DEM (--raster) or an image (--image), not both")
    require_matplotlib("the report")
    geoms = list(geoms)
    meas = line_measures_of_layer(geoms, crs)
    lengths, az = meas["length_m"], meas["azimuth_deg"]
    table = rose_bins(az, lengths if weight == "length" else None, bin_width_deg,
                      weighting="length_m" if weight == "length" else "count")
    sets = orientation_sets(az, lengths if weight == "length" else None)

    # map
    background = extent = None
    caption = ""
    draw_geoms, draw_crs = geoms, crs
    bg_path = raster if raster is not None else image
    if bg_path is not None:
        background, extent, bg_crs, caption = _read_background(
            os.fspath(bg_path), as_image=image is not None, max_pixels=max_pixels,
            sun_azimuth_deg=sun_azimuth_deg, sun_altitude_deg=sun_altitude_deg, z_factor=z_factor)
        if crs is not None and bg_crs is not None and not crs.equals(bg_crs):
            draw_geoms = reproject_lines(geoms, crs, bg_crs, source=source_name)
            draw_crs = bg_crs
        elif (crs is None) != (bg_crs is None):
            raise InputError(f"{os.fspath(bg_path)}: one of the raster and the line layer has a CRS and the "
                             "other has not, so the lines cannot be placed on the raster")
    if colour_by == "scale":
        keys = [_scale_key(p.get("scale_m")) for p in props]
    else:
        keys = [str(p.get("kind") or "unknown") for p in props]
    map_png = render_map_png(draw_geoms, keys, draw_crs, background=background, background_extent=extent,
                             category_label=colour_by, caption=caption)
    rose_png = _rose_png(table, sets)
    hist_png = render_length_histogram_png(lengths)

    # statistics
    n = len(geoms)
    stats = [
        ("lines", f"{n:d}"),
        ("total length", f"{_fmt(lengths.sum() / 1000, 2)} km"),
        ("mean length", f"{_fmt(lengths.mean() if n else math.nan)} m"),
        ("median length", f"{_fmt(np.median(lengths) if n else math.nan)} m"),
        ("longest", f"{_fmt(lengths.max() if n else math.nan)} m"),
        ("mean axial direction", f"{_fmt(table.mean_direction_deg)} deg from true north"),
        ("mean resultant length", _fmt(table.mean_resultant_length, 3)),
        ("CRS", _crs_name(crs)),
    ]
    set_rows = [(f"{i + 1}", _fmt(s.mean_direction_deg), f"{_fmt(s.lower_deg, 0)}-{_fmt(s.upper_deg, 0)}",
                 f"{100 * s.share:.1f} %", _fmt(s.spread_deg), s.n_lines) for i, s in enumerate(sets)]
    by_scale: dict = {}
    for p, L in zip(props, lengths):
        k = _scale_key(p.get("scale_m"))
        c, t = by_scale.get(k, (0, 0.0))
        by_scale[k] = (c + 1, t + float(L))
    scale_rows = [(("n/a" if k is None else f"{k:g}"), c, _fmt(t / 1000, 2))
                  for k, (c, t) in sorted(by_scale.items(), key=lambda kv: (kv[0] is None, kv[0] or 0))]

    title = title or f"Lineaments of {source_name}"
    now = _dt.datetime.now().strftime("%Y-%m-%d %H:%M")
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{html.escape(title)}</title><style>{_STYLE}</style></head><body>",
        f"<h1>{html.escape(title)}</h1>",
        f'<p class="sub">Layer {html.escape(source_name)}; report written {now} by lineament {__version__}.</p>',
        f'<div class="caution">{html.escape(caution)}</div>' if caution else "",
        "<h2>Map</h2>", _img(map_png, "map of the lineaments"),
        "<h2>Orientation and length</h2>", '<div class="row">',
        "<div>" + _img(rose_png, "rose diagram") + f'<p class="sub">Rose diagram, axial, '
        f'{"length-weighted" if weight == "length" else "by count"}, {bin_width_deg:g} deg bins; petal radius '
        "proportional to the square root of frequency (petal area to frequency). Dashed: mean directions of "
        "the orientation sets.</p></div>",
        "<div>" + _img(hist_png, "histogram of line lengths") + "</div>", "</div>",
        "<h2>Summary</h2>", _table(["measure", "value"], stats),
        "<h3>Orientation sets</h3>",
        (_table(["set", "mean deg", "sector deg", "share", "spread deg", "lines"], set_rows) if set_rows
         else "<p>No dominant orientation set.</p>"),
        "<h3>Lines per scale</h3>", _table(["sigma m", "lines", "km"], scale_rows),
        "<h3>Rose table</h3>",
        _table(["bin deg", table.weighting, "share"],
               [(f"{a:g}-{b:g}", _fmt(f, 1 if table.weighting == "length_m" else 0), f"{100 * s:.1f} %")
                for a, b, f, s in zip(table.bin_start_deg, table.bin_end_deg, table.frequency, table.share)]),
        "<h2>Run parameters</h2>",
    ]
    run_rows = _run_rows(run_metadata)
    if run_rows:
        parts.append(_table(["parameter", "value"], run_rows))
        sr = _scale_reports(run_metadata)
        if sr:
            cols = [k for k in ("scale_m", "scale_px", "noise", "high_threshold", "low_threshold", "lines",
                                "length_m") if k in sr[0]]
            parts.append("<h3>Per-scale thresholds</h3>")
            parts.append(_table(cols, [[_fmt(s.get(c), 3) if c != "lines" else s.get(c) for c in cols]
                                       for s in sr], numeric_from=0))
    else:
        parts.append("<p>No run metadata is stored with this layer.</p>")
    parts.append("</body></html>")
    return "\n".join(p for p in parts if p)


def _scale_key(v):
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return round(f, 3) if math.isfinite(f) else None


def write_report(
    lines_path: str | os.PathLike,
    output: str | os.PathLike,
    *,
    overwrite: bool = False,
    caution: str = "",
    **options,
) -> Path:
    """Read a line layer, build the report (:func:`build_report_html`) and write it atomically.

    Parameters
    ----------
    lines_path : path
        Line layer (GeoPackage, FlatGeobuf, Shapefile, GeoJSON).
    output : path
        ``.html`` file.
    overwrite : bool
    caution : str
    **options
        Passed to :func:`build_report_html` (``raster``, ``image``,
        ``colour_by``, ``sun_azimuth_deg`` ...).

    Returns
    -------
    pathlib.Path
    """
    from .interpret import read_line_layer
    from .vector_io import read_run_metadata

    check_file_output(output, (".html", ".htm"), overwrite=overwrite, what="report")
    geoms, props, crs = read_line_layer(lines_path)
    if not geoms:
        raise InputError(f"{os.fspath(lines_path)}: no lines to report on")
    try:
        meta = read_run_metadata(lines_path)
    except Exception:
        meta = None
    page = build_report_html(geoms, props, crs, source_name=os.path.basename(os.fspath(lines_path)),
                             run_metadata=meta, caution=caution, **options)
    out = Path(output)
    _atomic_write_bytes(out, page.encode("utf-8"))
    return out

