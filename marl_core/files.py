"""Atomic file writes: nothing is ever half-written.

``atomic_write(path, write)`` calls ``write(file)`` on a temporary file in the target's directory, flushes and
fsyncs it, then renames it over ``path`` (``os.replace`` is atomic on POSIX). A crash leaves either the old
file or the new one, never a mix; the temporary file is removed if ``write`` fails.
"""

from __future__ import annotations

import json
import math
import os
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import IO, Any

__all__ = ["atomic_write", "write_json", "finite"]


def atomic_write(path: str | Path, write: Callable[[IO], None], binary: bool = False) -> Path:
    """Write ``path`` atomically through ``write(file)``; returns the path."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual permissions of a new file
        with os.fdopen(fd, "wb" if binary else "w", **({} if binary else {"encoding": "utf-8"})) as f:
            write(f)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


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
