"""Pictures of the grid games (envs/render.py): the palette, agents drawn as triangles that show their facing."""

from __future__ import annotations

import colorsys

import numpy as np
import pytest

import envs.harvest_v0 as harvest
from envs.render import AGENT_COLOURS, CELL, PALETTE, grid_frame

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
