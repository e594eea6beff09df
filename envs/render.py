"""Pictures of the grid games: ``rgb_array`` frames in our own palette, ``ansi`` text, and GIF files.

``grid_frame(game, index)`` draws copy ``index`` of a :class:`envs.grid.GridGame`; ``grid_text`` writes it as
text; ``write_gif(frames, path, fps)`` encodes frames with Pillow (``envs.episode.play_episode`` collects
them). GIFs rather than TensorBoard videos: ``SummaryWriter.add_video`` needs an old moviepy and otherwise
writes nothing.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["PALETTE", "AGENT_COLOURS", "grid_frame", "grid_text", "write_gif"]

CELL = 12  # pixels per map cell

PALETTE: dict[str, tuple[int, int, int]] = {
    "ground": (231, 224, 205),
    "wall": (84, 78, 92),
    "orchard": (206, 222, 168),
    "resource": (196, 62, 58),
    "river": (118, 170, 214),
    "waste": (122, 104, 56),
    "tag": (255, 214, 90),
    "clean": (236, 248, 255),
}
AGENT_COLOURS: tuple[tuple[int, int, int], ...] = (
    (40, 92, 200), (232, 128, 24), (150, 60, 170), (20, 150, 140), (210, 60, 140),
    (110, 110, 20), (30, 30, 30), (240, 240, 240), (100, 60, 30), (80, 200, 80),
)
_TEXT = {"wall": "#", "ground": ".", "orchard": "-", "resource": "+", "river": "~", "waste": "w"}


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
    """(H * 12, W * 12, 3) uint8 picture of copy ``index``: cells, beams of the last step, agents."""
    H, W = game.layout.shape
    layers = _cell_layers(game, index)
    img = np.empty((H, W, 3), np.uint8)
    img[:] = PALETTE["ground"]
    for name in ("orchard", "river", "wall", "waste"):
        img[layers[name]] = PALETTE[name]
    for kind, copy, cells, reach in game.last_beams:
        mine = copy == index
        y, x = np.divmod(cells[mine][reach[mine]], game.Wp)
        y, x = y - game.P, x - game.P
        inside = (y >= 0) & (y < H) & (x >= 0) & (x < W)
        img[y[inside], x[inside]] = PALETTE[kind]
    big = np.repeat(np.repeat(img, CELL, axis=0), CELL, axis=1)
    q = CELL // 4
    ry, rx = np.nonzero(layers["resource"])
    for y, x in zip(ry, rx):
        big[y * CELL + q:(y + 1) * CELL - q, x * CELL + q:(x + 1) * CELL - q] = PALETTE["resource"]
    pos = game.agent_positions(index)
    for i, (y, x) in enumerate(pos):
        if game.out[index, i]:
            continue
        colour = AGENT_COLOURS[i % len(AGENT_COLOURS)]
        big[y * CELL + 1:(y + 1) * CELL - 1, x * CELL + 1:(x + 1) * CELL - 1] = colour
        dy, dx = ((-1, 0), (1, 0), (0, -1), (0, 1))[int(game.facing[index, i])]
        cy, cx = y * CELL + CELL // 2 + dy * (CELL // 3), x * CELL + CELL // 2 + dx * (CELL // 3)
        big[cy - 1:cy + 2, cx - 1:cx + 2] = (255, 255, 255)
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
