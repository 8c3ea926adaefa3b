"""Write a file under a temporary name in its folder, then rename it into place.

A failed or interrupted write never leaves a partial file at the destination
and never damages a file already there.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import Iterator

from .errors import OutputError


@contextlib.contextmanager
def replaced_atomically(path: str | os.PathLike, suffix: str = ".tmp") -> Iterator[str]:
    """Yield a temporary path next to ``path``; rename it onto ``path`` when the block succeeds.

    The temporary file gets the usual permissions (``0o666`` less the umask),
    not the private ones ``mkstemp`` gives.  On any error the temporary file
    is removed; ``OSError`` becomes a one-line :class:`OutputError`.
    """
    dest = Path(path)
    folder = dest.parent if str(dest.parent) else Path(".")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{dest.name}.", suffix=suffix, dir=folder)
        os.close(fd)
    except OSError as exc:
        raise OutputError(f"{path}: cannot write in folder {folder} ({exc.strerror or exc})") from None
    try:
        yield tmp
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, dest)
    except OSError as exc:
        raise OutputError(f"{path}: cannot write ({exc.strerror or exc})") from None
    finally:
        with contextlib.suppress(OSError):
            os.remove(tmp)
