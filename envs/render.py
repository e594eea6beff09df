"""Pictures of the grid games: ``rgb_array`` frames in our own palette, ``ansi`` text, and GIF files.

``grid_frame(game, index)`` draws copy ``index`` of a :class:`envs.grid.GridGame`; ``grid_text`` writes it as
text; ``write_gif(frames, path, fps)`` encodes frames with Pillow (``envs.episode.play_episode`` collects
them). GIFs rather than TensorBoard videos: ``SummaryWriter.add_video`` needs an old moviepy and otherwise
writes nothing.

**Palette** (``PALETTE``; the one place it is described). A dark map, so that the few things that matter
stand out:

================  ===============  ==================================================================
key               RGB              marks
================  ===============  ==================================================================
``ground``        (24, 26, 32)     open ground and spawn points
``wall``          (92, 96, 110)    walls
``orchard``       (38, 52, 40)     orchard cells (a resource may grow here)
``resource``      (214, 178, 56)   a resource: a gold disc in the middle of its orchard cell
``river``         (28, 116, 124)   clean river cells
``waste``         (62, 38, 22)     polluted river cells: a dark sludge brown ...
``waste_speck``   (128, 92, 56)    ... with five light 2x2 specks in each cell (``_SPECKS``)
``tag``           (236, 96, 176)   the 1-pixel border of each cell a tag beam covered this step
``clean``         (176, 238, 226)  the 1-pixel border of each cell a clean beam covered this step
================  ===============  ==================================================================

Waste vs river keeps a WCAG contrast ratio of at least 2 under normal vision and under simulated
protanopia, deuteranopia and tritanopia (tests/envs/test_render.py; docs/sources.md, "Colour palette"), and
the specks mark waste by texture as well as colour. Beams colour only each covered cell's border, so the
waste, river or resource underneath stays visible.

**Agents** are triangles that point the way the agent faces, coloured by index from ``AGENT_COLOURS``: the
seven colours of Okabe & Ito's colour-universal-design palette other than black (chosen to stay apart under
the common colour-vision deficiencies; see docs/sources.md, "Colour palette"), then white. Agents 8 and 9
reuse the first two colours as hollow triangles. A frozen agent is off the map; while it is frozen, a faint
marker in its colour at half brightness (``_dim``) sits on the cell it left when it was tagged (the engine
keeps that cell in ``game.cell``; ``agent_positions`` reads it): a 6x6 hollow square for agents 0-7, a 2x2
dot in the middle for agents 8 and 9. Live agents are drawn over markers.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["PALETTE", "AGENT_COLOURS", "grid_frame", "grid_text", "write_gif"]

CELL = 12  # pixels per map cell

PALETTE: dict[str, tuple[int, int, int]] = {
    "ground": (24, 26, 32),
    "wall": (92, 96, 110),
    "orchard": (38, 52, 40),
    "resource": (214, 178, 56),
    "river": (28, 116, 124),
    "waste": (62, 38, 22),
    "waste_speck": (128, 92, 56),
    "tag": (236, 96, 176),
    "clean": (176, 238, 226),
}
# Okabe & Ito's palette without black (docs/sources.md, "Colour palette"), ordered so the first colours
# are the ones furthest from the gold of a resource, then white
AGENT_COLOURS: tuple[tuple[int, int, int], ...] = (
    (86, 180, 233),   # sky blue
    (213, 94, 0),     # vermillion
    (0, 158, 115),    # bluish green
    (204, 121, 167),  # reddish purple
    (255, 255, 255),  # white (ours, in place of the palette's black, which a dark map would hide)
    (0, 114, 178),    # blue
    (230, 159, 0),    # orange
    (240, 228, 66),   # yellow
)
_TEXT = {"wall": "#", "ground": ".", "orchard": "-", "resource": "+", "river": "~", "waste": "w"}


def _triangle() -> np.ndarray:
    """(CELL, CELL) bool mask of a triangle pointing up: apex at the top centre, base one pixel above the
    bottom edge."""
    r, c = np.mgrid[0:CELL, 0:CELL]
    half = (r - 1) * (CELL / 2 - 1) / (CELL - 3)
    return (r >= 1) & (r <= CELL - 2) & (np.abs(c - (CELL - 1) / 2) <= half + 0.5)


def _outline(mask: np.ndarray) -> np.ndarray:
    """The pixels of ``mask`` with a 4-neighbour outside it."""
    inner = mask.copy()
    inner[1:-1, 1:-1] = mask[1:-1, 1:-1] & mask[:-2, 1:-1] & mask[2:, 1:-1] & mask[1:-1, :-2] & mask[1:-1, 2:]
    inner[[0, -1], :] = False
    inner[:, [0, -1]] = False
    return mask & ~inner


_UP = _triangle()
# facing 0 up, 1 down, 2 left, 3 right (envs.grid); np.rot90 turns counter-clockwise
_FACING = (_UP, np.rot90(_UP, 2), np.rot90(_UP, 1), np.rot90(_UP, -1))
_HOLLOW = tuple(_outline(m) for m in _FACING)
_r, _c = np.mgrid[0:CELL, 0:CELL]
_DISC = (_r - (CELL - 1) / 2) ** 2 + (_c - (CELL - 1) / 2) ** 2 <= (CELL / 4) ** 2
_BORDER = (_r == 0) | (_r == CELL - 1) | (_c == 0) | (_c == CELL - 1)  # a beam's mark on a cell
# five 2x2 specks on a waste cell (four near the corners, one in the middle)
_SPECKS = np.zeros((CELL, CELL), bool)
for _y, _x in ((2, 2), (2, 8), (5, 5), (8, 2), (8, 8)):
    _SPECKS[_y:_y + 2, _x:_x + 2] = True
# a frozen agent's marker: a 6x6 hollow square (agents 0-7) or a 2x2 dot (agents 8 and 9), centred
_MARK_SQUARE = _outline((_r >= 3) & (_r <= 8) & (_c >= 3) & (_c <= 8))
_MARK_DOT = (_r >= 5) & (_r <= 6) & (_c >= 5) & (_c <= 6)


def _dim(rgb: tuple[int, int, int]) -> tuple[int, int, int]:
    """``rgb`` at half brightness: the colour of a frozen agent's marker."""
    return tuple(int(v) // 2 for v in rgb)


def _cells_to_pixels(mask: np.ndarray, tile: np.ndarray) -> np.ndarray:
    """(H * CELL, W * CELL) bool: ``tile`` ((CELL, CELL) bool) in every cell where ``mask`` ((H, W)) holds."""
    H, W = mask.shape
    return np.repeat(np.repeat(mask, CELL, axis=0), CELL, axis=1) & np.tile(tile, (H, W))


def _cell_layers(game: Any, index: int) -> dict[str, np.ndarray]:
    lay = game.layout
    return {
        "wall": lay.wall,
        "orchard": lay.orchard,
        "river": lay.river,
        "waste": game.interior(game.waste)[index],
        "resource": game.interior(game.resource)[index],
    }


def grid_frame(game: Any, index: int = 0) -> np.ndarray:
    """(H * 12, W * 12, 3) uint8 picture of copy ``index``: cells, beams of the last step (cell borders),
    markers of frozen agents, agents."""
    H, W = game.layout.shape
    layers = _cell_layers(game, index)
    img = np.empty((H, W, 3), np.uint8)
    img[:] = PALETTE["ground"]
    for name in ("orchard", "river", "wall", "waste"):
        img[layers[name]] = PALETTE[name]
    big = np.repeat(np.repeat(img, CELL, axis=0), CELL, axis=1)
    big[_cells_to_pixels(layers["waste"], _SPECKS)] = PALETTE["waste_speck"]
    big[_cells_to_pixels(layers["resource"], _DISC)] = PALETTE["resource"]
    for kind, copy, cells, reach in game.last_beams:
        mine = copy == index
        y, x = np.divmod(cells[mine][reach[mine]], game.Wp)
        y, x = y - game.P, x - game.P
        inside = (y >= 0) & (y < H) & (x >= 0) & (x < W)
        covered = np.zeros((H, W), bool)
        covered[y[inside], x[inside]] = True
        big[_cells_to_pixels(covered, _BORDER)] = PALETTE[kind]
    pos = game.agent_positions(index)
    n = len(AGENT_COLOURS)
    for i, (y, x) in enumerate(pos):
        if game.out[index, i]:
            mark = _MARK_SQUARE if i < n else _MARK_DOT
            big[y * CELL:(y + 1) * CELL, x * CELL:(x + 1) * CELL][mark] = _dim(AGENT_COLOURS[i % n])
    for i, (y, x) in enumerate(pos):
        if game.out[index, i]:
            continue
        shapes = _FACING if i < n else _HOLLOW
        big[y * CELL:(y + 1) * CELL, x * CELL:(x + 1) * CELL][shapes[int(game.facing[index, i])]] = \
            AGENT_COLOURS[i % n]
    return big


def grid_text(game: Any, index: int = 0) -> str:
    """Copy ``index`` as text: the layout legend for cells, digits for agents on the map."""
    layers = _cell_layers(game, index)
    H, W = game.layout.shape
    chars = np.full((H, W), _TEXT["ground"])
    for name in ("orchard", "river", "wall", "waste", "resource"):
        chars[layers[name]] = _TEXT[name]
    pos = game.agent_positions(index)
    for i, (y, x) in enumerate(pos):
        if not game.out[index, i]:
            chars[y, x] = str(i % 10)
    frozen = [game.possible_agents[i] for i in np.nonzero(game.out[index])[0]]
    lines = ["".join(row) for row in chars]
    lines.append(f"step {game.t}/{game.max_cycles}" + (f"  frozen: {', '.join(frozen)}" if frozen else ""))
    return "\n".join(lines)


def write_gif(frames: Sequence[np.ndarray], path: str | Path, fps: int = 8) -> Path:
    """Encode ``frames`` ((H, W, 3) uint8 each) as a looping GIF at ``path`` (written atomically)."""
    from PIL import Image

    if len(frames) == 0:
        raise ValueError("write_gif: no frames to write")
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    images = [Image.fromarray(np.asarray(f, np.uint8)) for f in frames]
    tmp = path.with_name(path.name + ".tmp")
    images[0].save(tmp, format="GIF", save_all=True, append_images=images[1:],
                   duration=max(1, round(1000 / fps)), loop=0)
    tmp.replace(path)
    return path
