"""How a printed hint names a command of this install, so that it can be pasted into the same shell.

The console scripts (``marl-core``, ``tensorboard``, ``pip``) live in the virtual environment's ``bin/``,
which is on ``PATH`` only while the venv is active. :func:`command` returns the bare name when ``PATH``
finds this install's script under it (venv active, or installed system-wide), and otherwise the script's
path, relative to the working directory when it is below it (``.venv/bin/marl-core``). So every hint the
CLI prints ("resume with: ...", "report: ...", "TensorBoard: ...") works whether or not the venv is active.
"""

from __future__ import annotations

import os
import shutil
import sys
from pathlib import Path

__all__ = ["command"]


def command(name: str = "marl-core") -> str:
    """``name`` as this shell should type it: the bare name if ``PATH`` finds this install's script, else
    the script's path (relative to the working directory when below it); the bare name if this install has
    no such script."""
    bindir = Path(sys.prefix) / ("Scripts" if os.name == "nt" else "bin")
    script = bindir / name
    if not script.is_file():
        return name
    found = shutil.which(name)
    if found is not None and _same(Path(found), script):
        return name
    try:
        return str(script.relative_to(Path.cwd()))
    except ValueError:
        return str(script)


def _same(a: Path, b: Path) -> bool:
    try:
        return a.samefile(b)
    except OSError:
        return False
