"""Exceptions raised by :mod:`lineament`.

One root, :class:`LineamentError`, and a few narrow subclasses.  Each
subclass also inherits the built-in exception a caller would expect, so
``except ValueError`` or ``except OSError`` keeps working.  The command line
turns each into a one-line message and an exit code (see :data:`EXIT_CODES`).
"""

from __future__ import annotations


class LineamentError(Exception):
    """Root of every error :mod:`lineament` raises on purpose."""

    exit_code = 1


class SettingsError(LineamentError, ValueError):
    """A setting (scale, threshold, option) is invalid."""

    exit_code = 2


class InputError(LineamentError, ValueError):
    """An input raster or vector layer cannot be used as it is."""

    exit_code = 3


class RasterReadError(LineamentError, OSError):
    """An input file cannot be opened or read."""

    exit_code = 3


class OutputError(LineamentError, OSError):
    """An output cannot be written (exists, bad directory, unknown format)."""

    exit_code = 4


#: Exit codes of the ``lineament`` command, documented in the README.
EXIT_CODES = {
    0: "success",
    1: "unexpected internal error (run again with --debug and report it)",
    2: "invalid option or setting",
    3: "unusable input file",
    4: "output cannot be written",
    130: "interrupted (Ctrl-C)",
}
