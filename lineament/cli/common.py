"""Shared pieces of the commands: error handling, config files, messages."""

from __future__ import annotations

import functools
import sys
import tomllib
import traceback
from pathlib import Path

import click

from ..errors import LineamentError

CAUTION = ("Caution: lineaments are screening aids, not survey-grade boundaries; for hazard decisions "
           "(faults, slopes, foundations) defer to local codes and licensed professionals.")


def fail(message: str, code: int) -> None:
    """Print one error line on stderr and exit with ``code``."""
    click.echo(f"lineament: error: {message}", err=True)
    sys.exit(code)


def handle_errors(func):
    """Turn known errors into one line on stderr and an exit code; ``--debug`` shows the traceback."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        debug = kwargs.get("debug", False)
        try:
            return func(*args, **kwargs)
        except LineamentError as exc:
            if debug:
                traceback.print_exc()
            fail(str(exc), exc.exit_code)
        except KeyboardInterrupt:
            click.echo("lineament: interrupted; no output was written", err=True)
            sys.exit(130)
        except MemoryError:
            fail("out of memory; use smaller scales or a smaller raster", 1)
        except (click.exceptions.Exit, click.exceptions.Abort, click.ClickException, SystemExit):
            raise
        except Exception as exc:  # pragma: no cover - last resort, keeps the promise of no traceback
            if debug:
                traceback.print_exc()
            first = str(exc).splitlines()[0] if str(exc) else ""
            fail(f"unexpected {type(exc).__name__}: {first} (run again with --debug and report it)", 1)

    return wrapper


def load_config(ctx: click.Context, param: click.Parameter, value: str | None):
    """Eager callback of ``--config``: TOML keys become option defaults.

    Keys are the long option names, with dashes or underscores
    (``min-length = 500``, ``scales = [30, 60, 120]``).  Options given on
    the command line win over the file.
    """
    if not value:
        return value
    path = Path(value)
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        fail(f"{value}: no such config file", 2)
    except (OSError, tomllib.TOMLDecodeError) as exc:
        fail(f"{value}: cannot read config file ({exc})", 2)
    section = data.get(ctx.info_name, data) if isinstance(data.get(ctx.info_name), dict) else data
    known = {p.name for p in ctx.command.params}
    defaults = {}
    for key, val in section.items():
        name = key.replace("-", "_")
        if name not in known or name in ("config", "inputs"):
            fail(f"{value}: unknown setting {key!r}", 2)
        if isinstance(val, list):
            val = ",".join(str(v) for v in val)
        defaults[name] = val
    ctx.default_map = {**(ctx.default_map or {}), **defaults}
    return value
