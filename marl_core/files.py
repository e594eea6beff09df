"""Atomic file writes: nothing is ever half-written.

``atomic_write(path, write)`` calls ``write(file)`` on a temporary file in the target's directory, flushes and
fsyncs it, then renames it over ``path`` (``os.replace`` is atomic on POSIX). A crash leaves either the old
file or the new one, never a mix; the temporary file is removed if ``write`` fails. Every file written so
gets the usual mode of a new file (``0o666`` less the umask, e.g. ``0644``), like any other file of a run.
"""

from __future__ import annotations

import json
import math
import os
import secrets
from collections.abc import Callable
from pathlib import Path
from typing import IO, Any

__all__ = ["atomic_write", "write_json", "finite"]


def atomic_write(path: str | Path, write: Callable[[IO], None], binary: bool = False,
                 newline: str | None = None) -> Path:
    """Write ``path`` atomically through ``write(file)``; returns the path.

    The file gets the mode any new file gets (``0o666`` less the umask, e.g. ``0644``): the temporary file
    is created with ``os.open(..., 0o666)`` so the system applies the umask, as ``open(path, "w")`` would
    (``tempfile.mkstemp`` would make it ``0600``). ``newline`` is passed to the text file (``""``: no
    translation, as the csv module wants).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = _create_temp(path)
    try:
        text = {} if binary else {"encoding": "utf-8", "newline": newline}
        with os.fdopen(fd, "wb" if binary else "w", **text) as f:
            write(f)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def _create_temp(path: Path) -> tuple[int, str]:
    """A new, empty temporary file beside ``path`` (open for writing) and its name; mode 0o666 & ~umask."""
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0) | getattr(os, "O_CLOEXEC", 0)
    for _ in range(100):
        tmp = str(path.parent / f".{path.name}.{secrets.token_hex(4)}.tmp")
        try:
            return os.open(tmp, flags, 0o666), tmp
        except FileExistsError:
            continue
    raise FileExistsError(f"no free temporary file name beside '{path}'")  # pragma: no cover


def finite(x: Any) -> Any:
    """``x`` with every non-finite float (NaN, ±inf) replaced by None, so strict JSON readers accept it."""
    if isinstance(x, dict):
        return {k: finite(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [finite(v) for v in x]
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


def write_json(path: str | Path, data: Any) -> Path:
    """Write ``data`` as indented, key-sorted JSON, atomically; non-finite floats become null."""
    text = json.dumps(finite(data), indent=2, sort_keys=True) + "\n"
    return atomic_write(path, lambda f: f.write(text))
