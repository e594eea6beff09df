"""Pictures of the grid games (envs/render.py): the palette, agents drawn as triangles that show their facing,
waste that stands out on the river under colour-vision deficiencies and by its specks, beams that leave the
cells they cover visible, and the marker a frozen agent leaves."""

from __future__ import annotations

import colorsys

import numpy as np
import pytest

import envs.cleanup_v0 as cleanup
import envs.harvest_v0 as harvest
from envs.render import AGENT_COLOURS, CELL, PALETTE, _dim, grid_frame

OPEN = "#####\n#s..#\n#.s.#\n#..-#\n#####\n"


def _game(tmp_path, num_agents: int = 1):
    path = tmp_path / "open.txt"
    path.write_text(OPEN)
    game = harvest.vector_env(1, layout=str(path), num_agents=num_agents, view_radius=1, regrow_table=[0.0])
    game.reset(seed=0)
    return game


@pytest.mark.parametrize(("facing", "front"), [(0, "top"), (1, "bottom"), (2, "left"), (3, "right")])
def test_an_agent_is_a_triangle_pointing_the_way_it_faces(tmp_path, facing, front):
    game = _game(tmp_path)
    game.facing[0, 0] = facing
    y, x = game.agent_positions(0)[0]
    tile = grid_frame(game, 0)[y * CELL:(y + 1) * CELL, x * CELL:(x + 1) * CELL]
    body = (tile == AGENT_COLOURS[0]).all(axis=-1)
    half = CELL // 2
    halves = {"top": body[:half], "bottom": body[half:], "left": body[:, :half], "right": body[:, half:]}
    back = {"top": "bottom", "bottom": "top", "left": "right", "right": "left"}[front]
    # envs/render.py docstring: the apex points the way the agent faces, so the front half holds fewer
    # of the triangle's pixels than the back half
    assert body.any() and halves[front].sum() < halves[back].sum() / 2


def test_agents_have_distinct_colours_unused_by_the_map():
    assert len(set(AGENT_COLOURS)) == len(AGENT_COLOURS)
    # none of the agents' colours is one the map uses (common practice, no source)
    assert not set(AGENT_COLOURS) & set(PALETTE.values())


def _hue(rgb: tuple[int, int, int]) -> float:
    return colorsys.rgb_to_hsv(*(c / 255 for c in rgb))[0] * 360


def test_the_map_is_dark_and_the_beams_are_not_yellow():
    # envs/render.py docstring (palette): a dark ground; tag and clean beams away from yellow (hue ~60)
    assert max(PALETTE["ground"]) < 64
    for beam in ("tag", "clean"):
        assert abs(_hue(PALETTE[beam]) - 60) > 60
    # the pollutant is off the river's hue
    assert abs(_hue(PALETTE["waste"]) - _hue(PALETTE["river"])) > 90


def test_a_resource_is_a_disc_inside_its_cell(tmp_path):
    game = _game(tmp_path)
    game.resource[:] = False
    y, x = 3, 3
    game.resource[0, y + game.P, x + game.P] = True
    tile = grid_frame(game, 0)[y * CELL:(y + 1) * CELL, x * CELL:(x + 1) * CELL]
    gold = (tile == PALETTE["resource"]).all(axis=-1)
    # envs/render.py docstring: a disc in the middle of its orchard cell, orchard colour around it
    assert gold[CELL // 2, CELL // 2] and not gold[0, 0]
    assert (tile[0, 0] == PALETTE["orchard"]).all()
    assert np.array_equal(gold, gold[::-1]) and np.array_equal(gold, gold[:, ::-1])


# --- waste against the river under colour-vision deficiencies ------------------------------------------------

# Machado, Oliveira & Fernandes 2009, "A physiologically-based model for simulation of color vision
# deficiency", IEEE TVCG 15(6): the severity-1.0 dichromacy matrices, acting on linear RGB. Values from memory
# (not checked against the paper here; docs/sources.md, "Colour palette").
_SIMULATION = {
    "normal": np.eye(3),
    "protanopia": np.array([[0.152286, 1.052583, -0.204868],
                            [0.114503, 0.786281, 0.099216],
                            [-0.003882, -0.048116, 1.051998]]),
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968],
                              [0.280085, 0.672501, 0.047413],
                              [-0.011820, 0.042940, 0.968881]]),
    "tritanopia": np.array([[1.255528, -0.076749, -0.178779],
                            [-0.078411, 0.930809, 0.147602],
                            [0.004733, 0.691367, 0.303900]]),
}


def _to_linear(srgb: np.ndarray) -> np.ndarray:
    """sRGB in [0, 1] to linear RGB (the standard sRGB transfer function, IEC 61966-2-1)."""
    return np.where(srgb <= 0.04045, srgb / 12.92, ((srgb + 0.055) / 1.055) ** 2.4)


def _to_srgb(linear: np.ndarray) -> np.ndarray:
    linear = np.clip(linear, 0.0, 1.0)
    return np.where(linear <= 0.0031308, 12.92 * linear, 1.055 * linear ** (1 / 2.4) - 0.055)


def _seen(rgb: tuple[int, int, int], vision: str) -> np.ndarray:
    """``rgb`` (0-255) as simulated for ``vision``, back in sRGB in [0, 1]."""
    return _to_srgb(_SIMULATION[vision] @ _to_linear(np.asarray(rgb, float) / 255))


def _luminance(srgb: np.ndarray) -> float:
    """WCAG 2.x relative luminance of an sRGB colour in [0, 1]."""
    return float(_to_linear(srgb) @ np.array([0.2126, 0.7152, 0.0722]))


def _contrast(a: tuple[int, int, int], b: tuple[int, int, int], vision: str) -> float:
    """WCAG 2.x contrast ratio (L1 + 0.05) / (L2 + 0.05) of ``a`` and ``b`` as seen with ``vision``."""
    la, lb = _luminance(_seen(a, vision)), _luminance(_seen(b, vision))
    return (max(la, lb) + 0.05) / (min(la, lb) + 0.05)


MIN_WASTE_CONTRAST = 2.0  # our bar (no source)
OLD_WASTE = (122, 64, 112)  # the plum used before


@pytest.mark.parametrize("vision", sorted(_SIMULATION))
def test_waste_stands_out_on_the_river_under_colour_vision_deficiencies(vision):
    # measured with the code above: normal 2.57, protanopia 2.92, deuteranopia 2.36, tritanopia 2.69
    # (the old plum: 1.37, 1.62, 1.23, 1.41)
    assert _contrast(PALETTE["waste"], PALETTE["river"], vision) >= MIN_WASTE_CONTRAST
    # the check can fail: the old plum does not reach the bar
    assert _contrast(OLD_WASTE, PALETTE["river"], vision) < MIN_WASTE_CONTRAST


def test_the_simulation_keeps_greys_and_the_contrast_is_symmetric():
    # each row of the matrices sums to 1, so a grey stays the same grey
    for vision in _SIMULATION:
        assert np.allclose(_seen((128, 128, 128), vision), 128 / 255, atol=2e-3)
        assert _contrast(PALETTE["waste"], PALETTE["river"], vision) == \
            _contrast(PALETTE["river"], PALETTE["waste"], vision)
    assert _contrast((255, 255, 255), (0, 0, 0), "normal") == pytest.approx(21.0)


# --- waste pattern, beams, frozen agents ----------------------------------------------------------------------

WASTE_CELL = (3, 5)  # the one polluted cell of the bundled cleanup_tiny layout


def _cleanup(num_agents: int = 1):
    game = cleanup.vector_env(1, layout="cleanup_tiny", num_agents=num_agents, pollution_rate=0.0)
    game.reset(seed=0)
    return game


def _tile(frame: np.ndarray, y: int, x: int) -> np.ndarray:
    return frame[y * CELL:(y + 1) * CELL, x * CELL:(x + 1) * CELL]


def _is(tile: np.ndarray, rgb) -> np.ndarray:
    return (tile == np.asarray(rgb, np.uint8)).all(axis=-1)


def test_waste_has_a_pattern_as_well_as_a_colour():
    game = _cleanup()
    y, x = WASTE_CELL
    assert game.interior(game.waste)[0, y, x]
    tile = _tile(grid_frame(game, 0), y, x)
    specks, fill = _is(tile, PALETTE["waste_speck"]), _is(tile, PALETTE["waste"])
    # envs/render.py docstring: waste cells are filled with the waste colour and carry light specks
    assert (specks | fill).all()
    assert 8 <= specks.sum() <= CELL * CELL // 4
    # a clean river cell has no specks
    river = _tile(grid_frame(game, 0), 1, 5)
    assert _is(river, PALETTE["river"]).all()


@pytest.mark.parametrize("kind", ["clean", "tag"])
def test_a_beam_leaves_the_cells_it_covers_visible(kind):
    game = _cleanup()
    y, x = WASTE_CELL
    before = _tile(grid_frame(game, 0), y, x).copy()
    flat = (y + game.P) * game.Wp + (x + game.P)
    game.last_beams = [(kind, np.array([0]), np.array([[[flat]]]), np.array([[[True]]]))]
    tile = _tile(grid_frame(game, 0), y, x)
    border = np.zeros((CELL, CELL), bool)
    border[[0, -1], :] = border[:, [0, -1]] = True
    # envs/render.py docstring: a beam colours the border of each covered cell; inside, the waste and its
    # specks are untouched
    assert _is(tile, PALETTE[kind])[border].all()
    assert np.array_equal(tile[~border], before[~border])
    assert _is(tile, PALETTE["waste_speck"]).any() and _is(tile, PALETTE["waste"]).sum() > CELL * CELL // 3


def test_a_frozen_agent_leaves_a_faint_marker_where_it_was_tagged(tmp_path):
    path = tmp_path / "open.txt"
    path.write_text(OPEN)
    game = harvest.vector_env(1, layout=str(path), num_agents=2, view_radius=1, regrow_table=[0.0],
                              freeze_steps=2)
    game.reset(seed=0)
    marks = [_dim(c) for c in AGENT_COLOURS[:2]]
    assert not set(marks) & (set(PALETTE.values()) | set(AGENT_COLOURS))
    frame = grid_frame(game, 0)
    assert not any(_is(frame, m).any() for m in marks)  # nobody frozen: no marker
    # agent 0 walks next to agent 1 and faces it, then tags it
    assert [tuple(p) for p in game.agent_positions(0)] == [(1, 1), (2, 2)]
    stay, down, right, tag = 0, 2, 4, game.tag_action
    for a0 in (right, down, tag):
        game.step(np.array([[a0, stay]]))
    assert game.out[0].tolist() == [False, True]
    left = tuple(game.agent_positions(0)[1])
    assert left == (2, 2)
    frames_frozen = 0
    while game.out[0, 1]:  # for as long as it is frozen
        frame = grid_frame(game, 0)
        tile = _tile(frame, *left)
        marker = _is(tile, marks[1])
        # a small hollow square in the middle of the cell, at half the agent's brightness
        assert marker.sum() >= 12 and not marker[0].any() and not marker[CELL // 2, CELL // 2]
        assert marker.sum() == _is(frame, marks[1]).sum()  # on that cell only
        assert not _is(frame, AGENT_COLOURS[1]).any()  # the frozen agent itself is not drawn
        assert not _is(frame, marks[0]).any()  # agent 0 is not frozen: no marker for it
        assert _is(frame, AGENT_COLOURS[0]).any()
        frames_frozen += 1
        game.step(np.array([[stay, stay]]))
    assert frames_frozen >= 2
    # back on the map: the marker is gone
    frame = grid_frame(game, 0)
    assert not any(_is(frame, m).any() for m in marks)
