"""Map layouts: text files with a legend of our own, parsed into boolean layers.

Legend (one character per cell; every line of a layout has the same length):

======  ==========================================================================
``#``   wall (blocks movement and beams)
``.``   open ground
``s``   spawn point: open ground where agents start and return after being frozen
``+``   orchard cell holding a resource at the start
``-``   orchard cell, empty at the start (resources can grow here)
``~``   river cell, clean (cleanup: waste appears here; agents may walk on it)
``w``   river cell holding waste at the start
======  ==========================================================================

Blank lines at the start and end are ignored; lines starting with ``;`` are comments. Cells outside the map
count as walls. A bad layout raises :class:`envs.errors.LayoutError` naming the line and column.

Bundled layouts (``bundled_layouts()``), each drawn for this project:

====================  =========  ======  =================================================================
name                  size       spawns  what it holds
====================  =========  ======  =================================================================
``harvest_tiny``      9 x 9      4       one lopsided patch of 12 cells (tests)
``harvest_small``     15 x 22    6       a large blob (25 cells) beside a thick ring (32), a double band
                                         (18) and two small clumps (4, 3): 82 cells
``harvest_standard``  20 x 36    10      two large patches (26, 31), two rings, a wide block, bands and
                                         clumps of 6 to 18 cells: 146 cells
``cleanup_tiny``      6 x 11     4       a stream down the middle, a plot of 4 cells on each bank (tests)
``cleanup_small``     11 x 22    5       a river of 35 cells winding down the middle, an orchard of 27
                                         cells on each bank
``cleanup_standard``  14 x 32    10      a wider river (78 cells) winding between two orchards of 36
====================  =========  ======  =================================================================

On the harvest maps, cells of different patches are more than ``regrow_radius`` (2) apart, so no patch
reseeds another: one stripped bare stays bare. A game's ``layout`` parameter takes one of those names or a
path to a ``.txt`` file.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from envs.errors import LayoutError

__all__ = ["LEGEND", "Layout", "parse_layout", "load_layout", "bundled_layouts", "layout_problem"]

LEGEND: dict[str, str] = {
    "#": "wall",
    ".": "open ground",
    "s": "spawn point",
    "+": "orchard cell with a resource at the start",
    "-": "orchard cell, empty at the start",
    "~": "river cell, clean",
    "w": "river cell with waste at the start",
}

_DIR = Path(__file__).parent / "layouts"


@dataclass(frozen=True, eq=False)
class Layout:
    """A parsed map. All layers are ``(H, W)`` bool arrays; ``spawn`` is ``(S, 2)`` (row, column)."""

    name: str
    wall: np.ndarray
    orchard: np.ndarray
    river: np.ndarray
    resource: np.ndarray
    waste: np.ndarray
    spawn: np.ndarray

    @property
    def shape(self) -> tuple[int, int]:
        return self.wall.shape

    def patches(self) -> np.ndarray:
        """``(H, W)`` int32 labels of the 4-connected orchard patches (0, 1, ...), ``-1`` off the orchard."""
        labels = np.full(self.shape, -1, dtype=np.int32)
        h, w = self.shape
        count = 0
        for y0, x0 in zip(*np.nonzero(self.orchard)):
            if labels[y0, x0] >= 0:
                continue
            stack = [(y0, x0)]
            labels[y0, x0] = count
            while stack:
                y, x = stack.pop()
                for ny, nx in ((y - 1, x), (y + 1, x), (y, x - 1), (y, x + 1)):
                    if 0 <= ny < h and 0 <= nx < w and self.orchard[ny, nx] and labels[ny, nx] < 0:
                        labels[ny, nx] = count
                        stack.append((ny, nx))
            count += 1
        return labels


def parse_layout(text: str, name: str = "<string>") -> Layout:
    """Parse layout text (see the module docstring for the legend)."""
    raw = text.splitlines()
    numbered = [(i + 1, line.rstrip("\r\n")) for i, line in enumerate(raw)
                if not line.startswith(";")]
    while numbered and not numbered[0][1].strip():
        numbered.pop(0)
    while numbered and not numbered[-1][1].strip():
        numbered.pop()
    if not numbered:
        raise LayoutError(f"layout {name}: empty; expected rows of cells using {''.join(LEGEND)}")
    width = len(numbered[0][1])
    for lineno, line in numbered:
        if len(line) != width:
            col = min(len(line), width) + 1
            raise LayoutError(f"layout {name}, line {lineno}, column {col}: row has {len(line)} cells; "
                              f"expected {width} like the first row")
        for col, ch in enumerate(line, start=1):
            if ch not in LEGEND:
                raise LayoutError(f"layout {name}, line {lineno}, column {col}: unknown cell {ch!r}; "
                                  f"allowed: {' '.join(repr(c) for c in LEGEND)}")
    grid = np.array([list(line) for _, line in numbered])
    spawn = np.argwhere(grid == "s").astype(np.int64)
    if len(spawn) == 0:
        lineno = numbered[0][0]
        raise LayoutError(f"layout {name}, line {lineno}, column 1: no spawn point 's' in the layout; "
                          f"expected at least one")
    return Layout(
        name=name,
        wall=grid == "#",
        orchard=np.isin(grid, ["+", "-"]),
        river=np.isin(grid, ["~", "w"]),
        resource=grid == "+",
        waste=grid == "w",
        spawn=spawn,
    )


def bundled_layouts() -> list[str]:
    """Names of the layouts shipped with the package."""
    return sorted(p.stem for p in _DIR.glob("*.txt"))


def layout_problem(value: str) -> str | None:
    """``None`` if ``value`` names a bundled layout or an existing file, else what is allowed."""
    if value in bundled_layouts() or Path(value).is_file():
        return None
    return f"a bundled layout ({', '.join(bundled_layouts())}) or the path of a layout file"


def load_layout(name_or_path: str) -> Layout:
    """A bundled layout by name, or a layout file by path."""
    path = _DIR / f"{name_or_path}.txt"
    if not path.is_file():
        path = Path(name_or_path)
    if not path.is_file():
        raise LayoutError(f"layout '{name_or_path}' not found; expected {layout_problem(name_or_path)}")
    return parse_layout(path.read_text(), name=str(name_or_path))
