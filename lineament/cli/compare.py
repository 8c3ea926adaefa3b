"""``lineament compare``: agreement of a line layer with a reference layer."""

from __future__ import annotations

import json
import os

import click
from pyproj import CRS
from pyproj.exceptions import CRSError

from ..analysis.agreement import compare_lines
from ..analysis.layers import metric_crs_for, reproject_lines
from ..errors import InputError, SettingsError
from ..interpret import read_line_layer
from ..report import _atomic_write_bytes, check_file_output
from .common import handle_errors, run_options


def _metric_frame(det_geoms, det_crs: CRS, ref_crs: CRS) -> CRS:
    """The detected layer's CRS if projected in metres, else the reference's, else a local one."""
    for crs in (det_crs, ref_crs):
        if metric_crs_for([], crs) is crs:
            return crs
    return metric_crs_for(det_geoms, det_crs)


def compare_files(lines_path, reference_path, *, buffer_m: float, angle_deg: float | None,
                  assume_reference_crs: str | None = None):
    """Read both layers, bring them into one metric frame and run :func:`compare_lines`.

    Like :func:`lineament.analysis.compare_line_files`, plus a CRS to assume
    for a reference layer that declares none.

    Raises
    ------
    InputError
        The reference has no CRS (and none is assumed) while the lines have one.
    """
    det, _, det_crs = read_line_layer(lines_path)
    ref, _, ref_crs = read_line_layer(reference_path)
    if ref_crs is None and assume_reference_crs is not None:
        try:
            ref_crs = CRS.from_user_input(assume_reference_crs)
        except CRSError as exc:
            first = (str(exc).splitlines() or ["not recognised"])[0]
            raise SettingsError(f"--assume-reference-crs {assume_reference_crs!r} is not a CRS ({first})") from None
    if ref_crs is None and det_crs is not None:
        raise InputError(f"{reference_path}: reference layer has no CRS; pass --assume-reference-crs "
                         "EPSG:XXXX if you know it")
    if det_crs is None and ref_crs is not None:
        raise InputError(f"{lines_path}: layer has no CRS, so it cannot be matched with the reference")
    if det_crs is not None:
        frame = _metric_frame(det, det_crs, ref_crs)
        det = reproject_lines(det, det_crs, frame, source=str(lines_path))
        ref = reproject_lines(ref, ref_crs, frame, source=str(reference_path))
    return compare_lines(det, ref, buffer_m=buffer_m, angle_deg=angle_deg)


@click.command("compare")
@click.argument("lines_path", metavar="LINES", type=click.Path())
@click.argument("reference_path", metavar="REFERENCE", type=click.Path())
@click.option("--buffer-m", type=float, required=True,
              help="Match distance in metres: line length within this distance of the other layer counts.")
@click.option("--angle-deg", type=float, default=None,
              help="Direction tolerance in degrees (0-90); default: direction not tested.")
@click.option("--json", "json_path", is_flag=False, flag_value="-", default=None, metavar="[PATH]",
              help="Write the results as JSON, to PATH or (without a value, or -) to standard output.")
@click.option("--assume-reference-crs", default=None, metavar="CRS",
              help="CRS of a reference layer that declares none, e.g. EPSG:32633.")
@run_options("Replace an existing JSON file.")
@handle_errors
def compare(lines_path, reference_path, buffer_m, angle_deg, json_path, assume_reference_crs, overwrite,
            quiet, debug):
    """Recall, precision, F1 and offsets of LINES against a REFERENCE layer.

    \b
    Example:
      lineament compare lines.gpkg mapped_faults.gpkg --buffer-m 50 --angle-deg 20 --json scores.json

    Length-weighted buffer matching in both directions; lengths in metres
    of a common metric frame.
    """
    to_file = json_path not in (None, "-")
    if to_file:
        check_file_output(json_path, (".json",), overwrite=overwrite, what="results")
    for p in (lines_path, reference_path):
        if not os.path.exists(p):
            raise InputError(f"{p}: file not found")
    result = compare_files(lines_path, reference_path, buffer_m=buffer_m, angle_deg=angle_deg,
                           assume_reference_crs=assume_reference_crs)
    doc = {"lines": os.path.basename(lines_path), "reference": os.path.basename(reference_path),
           **result.to_dict()}
    text = json.dumps(doc, indent=2)
    if json_path == "-":
        click.echo(text)
    elif to_file:
        from pathlib import Path

        _atomic_write_bytes(Path(json_path), (text + "\n").encode("utf-8"))
    if not quiet:
        for line in result.summary_lines():
            click.echo(line, err=json_path == "-")
