"""``lineament refine``: straight pieces, linked gaps and one line per multi-scale feature."""

from __future__ import annotations

import time

import click

from ..errors import SettingsError
from ..interpret import RefineSettings, refine_file
from .common import CAUTION, handle_errors, run_options

_D = RefineSettings()


@click.command("refine")
@click.argument("lines_path", metavar="LINES", type=click.Path())
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Output layer; the extension chooses the format: .gpkg (recommended), .fgb, .shp, .geojson.")
@click.option("--split/--no-split", default=True, show_default=True, help="Cut lines where they bend.")
@click.option("--max-bend-deg", type=float, default=_D.max_bend_deg, show_default=True,
              help="Cut where the direction changes by more than this, in degrees.")
@click.option("--max-deviation-m", type=float, default=None,
              help="Also cut where a line strays more than this many metres from its chord.")
@click.option("--link/--no-link", default=True, show_default=True,
              help="Join collinear pieces across short gaps (within each scale).")
@click.option("--max-gap-m", type=float, default=_D.max_gap_m, show_default=True,
              help="Largest gap bridged, in metres.")
@click.option("--max-angle-deg", type=float, default=_D.link_angle_deg, show_default=True,
              help="Largest direction difference of joined pieces, in degrees.")
@click.option("--max-offset-m", type=float, default=None,
              help="Largest sideways offset of joined pieces, in metres. Default: a quarter of --max-gap-m.")
@click.option("--merge-scales/--no-merge-scales", default=True, show_default=True,
              help="Treat lines found at several scales along one feature as one lineament.")
@click.option("--match-distance-m", type=float, default=None,
              help="Lines of different scales closer than this (metres) may be one feature. "
                   "Default: the larger of their sigmas.")
@click.option("--scale-angle-deg", type=float, default=_D.scale_angle_deg, show_default=True,
              help="Largest direction difference of lines of one feature, in degrees.")
@click.option("--min-scales", type=int, default=1, show_default=True,
              help="Keep only features found at this many scales or more.")
@click.option("--all-lines", is_flag=True,
              help="Write every line with its feature_id instead of one line per feature.")
@click.option("--min-length-m", type=float, default=None,
              help="Drop output lines shorter than this, in metres. Default: 4 times each line's sigma.")
@run_options()
@handle_errors
def refine(lines_path, output, split, max_bend_deg, max_deviation_m, link, max_gap_m, max_angle_deg,
           max_offset_m, merge_scales, match_distance_m, scale_angle_deg, min_scales, all_lines,
           min_length_m, overwrite, quiet, debug):
    """Turn traced lines into interpreted lineaments.

    \b
    Example:
      lineament refine lines.gpkg -o lineaments.gpkg --max-bend-deg 20 --max-gap-m 150 --min-scales 2

    Steps, in order: cut at bends; join collinear pieces across gaps; group
    lines found at several scales into one feature and keep its longest
    line.  Adds straightness, n_parts, feature_id, scales_found,
    scale_min_m and scale_max_m.
    """
    t0 = time.perf_counter()
    try:
        settings = RefineSettings(
            split=split, max_bend_deg=max_bend_deg, max_deviation_m=max_deviation_m, link=link,
            max_gap_m=max_gap_m, link_angle_deg=max_angle_deg, max_offset_m=max_offset_m,
            merge_scales=merge_scales, scale_angle_deg=scale_angle_deg, match_distance_m=match_distance_m,
            min_scales=min_scales, all_lines=all_lines, min_length_m=min_length_m)
    except (TypeError, ValueError) as exc:
        raise SettingsError(str(exc).replace("min_scales", "--min-scales")
                            .replace("min_length_m", "--min-length-m")) from None
    _check_numbers(max_bend_deg=max_bend_deg, max_deviation_m=max_deviation_m, max_gap_m=max_gap_m,
                   max_angle_deg=max_angle_deg, max_offset_m=max_offset_m, match_distance_m=match_distance_m,
                   scale_angle_deg=scale_angle_deg)
    geoms, props = refine_file(lines_path, output, settings, overwrite=overwrite)
    if not quiet:
        multi = sum(1 for p in props if (p.get("scales_found") or 0) > 1)
        click.echo(f"{lines_path}: {len(geoms)} lineaments ({multi} found at more than one scale), "
                   f"written to {output} in {time.perf_counter() - t0:.1f} s", err=True)
        click.echo(CAUTION, err=True)


def _check_numbers(**values) -> None:
    """Refuse negative or out-of-range limits before any work, naming the option."""
    import math

    for name, v in values.items():
        if v is None:
            continue
        high = 180.0 if name == "max_bend_deg" else 90.0 if name.endswith("_deg") else math.inf
        if not (math.isfinite(v) and 0 <= v <= high):
            span = f"within 0-{high:g}" if math.isfinite(high) else "a number of at least 0"
            raise SettingsError(f"--{name.replace('_', '-')} must be {span}, got {v:g}")
