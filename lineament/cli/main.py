"""Entry point of the ``lineament`` command."""

from __future__ import annotations

import click

from .._version import __version__
from .compare import compare
from .density import density
from .extract import extract
from .refine import refine
from .report import report
from .rose import rose


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, "--version", prog_name="lineament")
def cli():
    """Find lineaments in DEMs and aerial rasters and write them as georeferenced lines.

    \b
    Example:
      lineament extract sample_rasters/dem_faulted.tif -o lines.gpkg
    """


cli.add_command(extract)
cli.add_command(refine)
cli.add_command(rose)
cli.add_command(density)
cli.add_command(compare)
cli.add_command(report)


if __name__ == "__main__":  # pragma: no cover
    cli()
