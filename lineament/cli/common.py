"""Shared pieces of the commands: error handling, config files, messages."""

from __future__ import annotations

import contextlib
import functools
import logging
import signal
import sys
import threading
import time
import tomllib
import traceback
import warnings
from pathlib import Path

import click

from ..errors import LineamentError

CAUTION = ("Caution: lineaments are screening aids, not survey-grade boundaries; for hazard decisions "
           "(faults, slopes, foundations) defer to local codes and licensed professionals.")

#: Loggers of the libraries that relay GDAL messages; their records are shown as one-line warnings.
_LIBRARY_LOGGERS = ("rasterio", "fiona")


def one_line(text: str) -> str:
    """``text`` with every run of whitespace, line breaks included, made a single space."""
    return " ".join(str(text).split())


def fail(message: str, code: int) -> None:
    """Print one error line on stderr and exit with ``code``."""
    click.echo(f"lineament: error: {one_line(message)}", err=True)
    sys.exit(code)


def warn(message: str) -> None:
    """Print one warning line on stderr."""
    click.echo(f"lineament: warning: {one_line(message)}", err=True)


class _OneLineHandler(logging.Handler):
    """Shows library log records of level WARNING and above as one ``lineament: warning:`` line."""

    def emit(self, record: logging.LogRecord) -> None:
        try:
            warn(record.getMessage())
        except Exception:  # pragma: no cover - never let a message break a run
            pass


@contextlib.contextmanager
def _quiet_libraries(debug: bool):
    """Route Python warnings and GDAL log records to one-line messages for the duration of a command.

    Without this, a warning prints two lines (file:line, source) and a GDAL
    message relayed through :mod:`logging` reaches stderr through Python's
    last-resort handler.  With ``debug`` the usual Python formats are kept.
    """
    if debug:
        yield
        return
    handler = _OneLineHandler(level=logging.WARNING)
    saved = []
    for name in _LIBRARY_LOGGERS:
        lg = logging.getLogger(name)
        saved.append((lg, lg.propagate))
        lg.addHandler(handler)
        lg.propagate = False
    old_showwarning = warnings.showwarning

    def showwarning(message, category, filename, lineno, file=None, line=None):
        warn(f"{message} ({category.__name__})")

    warnings.showwarning = showwarning
    try:
        yield
    finally:
        warnings.showwarning = old_showwarning
        for lg, propagate in saved:
            lg.removeHandler(handler)
            lg.propagate = propagate


def handle_errors(func):
    """Turn known errors into one line on stderr and an exit code; ``--debug`` shows the traceback.

    Exit codes are those of :data:`lineament.errors.EXIT_CODES`.
    """

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        debug = kwargs.get("debug", False)
        if threading.current_thread() is threading.main_thread():
            signal.signal(signal.SIGINT, signal.default_int_handler)  # Ctrl-C now cleans up and says so
        try:
            with _quiet_libraries(debug):
                return func(*args, **kwargs)
        except LineamentError as exc:
            if debug:
                traceback.print_exc()
            fail(str(exc), exc.exit_code)
        except KeyboardInterrupt:
            click.echo("lineament: interrupted; no output was written", err=True)
            sys.exit(130)
        except MemoryError:
            if debug:
                traceback.print_exc()
            fail("out of memory; use smaller scales or a smaller raster", 1)
        except (click.exceptions.Exit, click.exceptions.Abort, click.ClickException, SystemExit):
            raise
        except Exception as exc:  # last resort, keeps the promise of no traceback
            if debug:
                traceback.print_exc()
            first = one_line(exc)
            fail(f"unexpected {type(exc).__name__}: {first} (run again with --debug and report it)", 1)

    return wrapper


def load_config(ctx: click.Context, param: click.Parameter, value: str | None):
    """Eager callback of ``--config``: TOML keys become option defaults.

    Keys are the long option names, with dashes or underscores
    (``min-length = 500``, ``scales = [30, 60, 120]``), at the top level or
    in a table named after the command (``[extract]``).  Options given on
    the command line win over the file.  Every problem exits with code 2.
    """
    if not value:
        return value
    path = Path(value)
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        fail(f"{value}: no such config file", 2)
    except IsADirectoryError:
        fail(f"{value}: is a folder, not a config file", 2)
    except UnicodeDecodeError:
        fail(f"{value}: cannot read config file (not UTF-8 text)", 2)
    except (OSError, tomllib.TOMLDecodeError) as exc:
        fail(f"{value}: cannot read config file ({exc})", 2)
    section = data[ctx.info_name] if isinstance(data.get(ctx.info_name), dict) else data
    # only options can be set from a file; the input and --config itself cannot
    known = {p.name: p for p in ctx.command.params
             if isinstance(p, click.Option) and p.name not in ("config",) and p.expose_value}
    defaults = {}
    for key, val in section.items():
        name = key.replace("-", "_")
        if name not in known:
            fail(f"{value}: unknown setting {key!r}", 2)
        if isinstance(val, dict):
            fail(f"{value}: setting {key!r} must be a value, not a table", 2)
        if isinstance(val, list):
            val = ",".join(str(v) for v in val)
        try:  # check the type here, so a bad value is one line naming the file
            known[name].type_cast_value(ctx, val)
        except click.BadParameter as exc:
            fail(f"{value}: setting {key!r}: {exc.message}", 2)
        defaults[name] = val
    ctx.default_map = {**(ctx.default_map or {}), **defaults}
    return value


class Progress:
    """Tiles done, rate and time left on one line of stderr; silent when stderr is not a terminal."""

    def __init__(self, stream=None) -> None:
        self.stream = stream or sys.stderr
        self.active = bool(getattr(self.stream, "isatty", lambda: False)())
        self.t0 = time.perf_counter()
        self.start_done: int | None = None
        self.shown = False

    def __call__(self, done: int, total: int) -> None:
        if not self.active or total <= 1:
            return
        now = time.perf_counter()
        if self.start_done is None:
            self.start_done, self.t0 = done, now
            return
        rate = (done - self.start_done) / max(now - self.t0, 1e-9)
        left = (total - done) / rate if rate > 0 else float("nan")
        left_text = f"{int(left // 60)}:{int(left % 60):02d} left" if left == left else ""
        self.stream.write(f"\rtiles {done}/{total}  {rate:.2f} tiles/s  {left_text}   ")
        self.stream.flush()
        self.shown = True

    def close(self) -> None:
        if self.shown:
            self.stream.write("\n")
            self.stream.flush()


def run_options(overwrite_help: str = "Replace an existing output."):
    """The options every command shares: --overwrite, --config, -q/--quiet, --debug."""

    def decorate(func):
        for option in reversed((
            click.option("--overwrite", is_flag=True, help=overwrite_help),
            click.option("--config", type=click.Path(), callback=load_config, is_eager=True, expose_value=False,
                         help="Read options from a TOML file (command-line options win)."),
            click.option("-q", "--quiet", is_flag=True, help="Print only errors."),
            click.option("--debug", is_flag=True, help="Show the full traceback on errors."),
        )):
            func = option(func)
        return func

    return decorate
