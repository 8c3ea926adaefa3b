"""Entry point of the ``lineament`` command."""

from __future__ import annotations

import os
import signal
import sys
import threading


def _interrupted_while_starting(signum, frame):  # pragma: no cover - timing dependent
    """Ctrl-C before a command runs: nothing has been written, so say so and leave at once."""
    sys.stderr.write("lineament: interrupted; no output was written\n")
    sys.stderr.flush()
    os._exit(130)


# Installed before the heavy imports below (numpy, GDAL, ...), which can take a second or two;
# each command restores Python's own handler when it starts (cli.common.handle_errors).
if signal.getsignal(signal.SIGINT) is signal.default_int_handler:
    signal.signal(signal.SIGINT, _interrupted_while_starting)

import click  # noqa: E402

from .._version import __version__  # noqa: E402
from .compare import compare  # noqa: E402
from .density import density  # noqa: E402
from .extract import extract  # noqa: E402
from .refine import refine  # noqa: E402
from .report import report  # noqa: E402
from .rose import rose  # noqa: E402


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


def main() -> None:
    """Run the command line; once a command has finished, Ctrl-C no longer interrupts.

    The output is complete by then, and an interrupt during interpreter
    shutdown would otherwise end the process by the signal, with no message.
    """
    try:
        cli()
    finally:
        if threading.current_thread() is threading.main_thread():
            signal.signal(signal.SIGINT, signal.SIG_IGN)


if __name__ == "__main__":  # pragma: no cover
    main()
