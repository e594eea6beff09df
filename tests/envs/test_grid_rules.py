"""Mechanics of the grid engine (envs.grid) on small hand-made layouts.

Every expected value here comes from a rule in the module docstring of envs/grid.py (the step order and the
channel table), the game docstrings of envs/harvest_v0.py and envs/cleanup_v0.py, or the legend in
envs/layouts.py; each assertion says which. Layouts are written into pytest's ``tmp_path`` and passed to the
games by path; agents are then put where a test needs them through the engine's padded cell indices.
"""

from __future__ import annotations

import textwrap

import numpy as np
import pytest
from scipy.stats import binomtest

import envs.cleanup_v0 as cleanup
import envs.harvest_v0 as harvest
from envs.errors import ActionError, LayoutError, ParamError
from envs.grid import ANONYMOUS_STATE_CHANNELS, CHANNELS, state_channels

CH = {c: i for i, c in enumerate(CHANNELS)}
SCH = {c: i for i, c in enumerate(ANONYMOUS_STATE_CHANNELS)}  # state_layout="anonymous"

# actions: envs/harvest_v0.py and envs/cleanup_v0.py docstrings (0 stay, 1 up, 2 down, 3 left, 4 right,
# 5 tag, 6 clean; without tagging clean is 5)
STAY, UP, DOWN, LEFT, RIGHT, TAG, CLEAN = range(7)
STEP = {UP: (-1, 0), DOWN: (1, 0), LEFT: (0, -1), RIGHT: (0, 1)}
# engine encoding of game.facing: an index into the (up, down, left, right) table of envs/grid.py, i.e. the
# move action minus one; test_facing_encoding_matches_ahead_channel checks this against the observation
FACE = {"up": 0, "down": 1, "left": 2, "right": 3}
FACE_STEP = {"up": (-1, 0), "down": (1, 0), "left": (0, -1), "right": (0, 1)}

# Monte-Carlo bounds: exact (Clopper-Pearson) binomial interval from scipy.stats.binomtest at this level
CONFIDENCE = 1 - 1e-6

# an open room: interior rows 1..5, columns 1..7; one empty orchard cell with no resource near it, which
# therefore never regrows under the default table (entry 0 is 0.0) -- harvest needs an orchard to accept it
OPEN = """
#########
#s.....s#
#.......#
#.......#
#.......#
#s..-..s#
#########
"""


def write_layout(tmp_path, text: str, name: str = "layout.txt") -> str:
    path = tmp_path / name
    path.write_text(textwrap.dedent(text).strip("\n") + "\n")
    return str(path)


def new_game(tmp_path, text: str, module=harvest, copies: int = 1, seed: int = 0, **params):
    params.setdefault("view_radius", 2)
    game = module.vector_env(copies, layout=write_layout(tmp_path, text), **params)
    game.reset(seed=seed)
    return game


def place(game, agent: int, y: int, x: int, facing: str | None = None) -> None:
    """Put ``agent`` at row ``y``, column ``x`` in every copy (and turn it, if ``facing`` is given)."""
    game.cell[:, agent] = (y + game.P) * game.Wp + (x + game.P)
    if facing is not None:
        game.facing[:, agent] = FACE[facing]
    game._place_agents()


def act(game, *actions: int):
    """Step every copy with the same joint action."""
    return game.step(np.tile(np.array(actions, np.int64), (game.num_envs, 1)))


def pos(game, agent: int, copy: int = 0) -> tuple[int, int]:
    y, x = game.agent_positions(copy)[agent]
    return int(y), int(x)


def ahead_offset(obs_agent: np.ndarray) -> tuple[int, int]:
    """(dy, dx) of the single ``ahead`` cell from the window centre."""
    cells = np.argwhere(obs_agent[CH["ahead"]])
    assert len(cells) == 1, cells
    r = obs_agent.shape[-1] // 2
    return int(cells[0][0] - r), int(cells[0][1] - r)


def assert_in_ci(successes: int, trials: int, p: float) -> None:
    ci = binomtest(successes, trials, p).proportion_ci(confidence_level=CONFIDENCE, method="exact")
    assert ci.low <= p <= ci.high, (successes, trials, p, ci)


# --- moves and facing -------------------------------------------------------------------------------------

@pytest.mark.parametrize("action", [UP, DOWN, LEFT, RIGHT], ids=["up", "down", "left", "right"])
def test_absolute_move_and_facing(tmp_path, action):
    game = new_game(tmp_path, OPEN, num_agents=1)
    place(game, 0, 3, 4, facing="down" if action == UP else "up")
    obs, *_ = act(game, action)
    dy, dx = STEP[action]
    # rule stated in envs/grid.py docstring (step 2) and harvest_v0 actions: absolute moves, the agent faces
    # the way it moved
    assert pos(game, 0) == (3 + dy, 4 + dx)
    assert ahead_offset(obs[0, 0]) == (dy, dx)


def test_stay_keeps_position_and_facing(tmp_path):
    game = new_game(tmp_path, OPEN, num_agents=1)
    place(game, 0, 3, 4, facing="left")
    obs, *_ = act(game, STAY)
    assert pos(game, 0) == (3, 4)  # rule stated in envs/grid.py docstring: only an agent that moves turns
    assert ahead_offset(obs[0, 0]) == FACE_STEP["left"]


def test_facing_encoding_matches_ahead_channel(tmp_path):
    game = new_game(tmp_path, OPEN, num_agents=1)
    for name, step in FACE_STEP.items():
        place(game, 0, 3, 4, facing=name)
        obs, *_ = act(game, STAY)
        assert ahead_offset(obs[0, 0]) == step  # the helper FACE agrees with the 'ahead' channel


@pytest.mark.parametrize(("cell", "action"), [((1, 4), UP), ((5, 3), DOWN), ((3, 1), LEFT), ((3, 7), RIGHT)],
                         ids=["up", "down", "left", "right"])
def test_wall_blocks_but_agent_still_turns(tmp_path, cell, action):
    game = new_game(tmp_path, OPEN, num_agents=1)
    opposite = {UP: "down", DOWN: "up", LEFT: "right", RIGHT: "left"}[action]
    place(game, 0, *cell, facing=opposite)
    obs, *_ = act(game, action)
    assert pos(game, 0) == cell  # rule stated in envs/grid.py docstring: a wall cell cannot be entered
    # rule stated in envs/grid.py docstring: the agent faces the chosen way even though the move is blocked
    assert ahead_offset(obs[0, 0]) == STEP[action]
    assert game.facing[0, 0] == action - 1


def test_interior_wall_blocks(tmp_path):
    layout = """
    #########
    #s.....s#
    #.......#
    #...#...#
    #.......#
    #s..-..s#
    #########
    """
    game = new_game(tmp_path, layout, num_agents=1)
    assert game.layout.wall[3, 4]
    place(game, 0, 3, 3)
    act(game, RIGHT)
    assert pos(game, 0) == (3, 3)  # rule stated in envs/grid.py docstring: no agent enters a wall


@pytest.mark.parametrize(("cell", "action"), [((0, 2), UP), ((4, 2), DOWN), ((2, 0), LEFT), ((2, 4), RIGHT)],
                         ids=["up", "down", "left", "right"])
def test_outside_the_map_blocks_like_a_wall(tmp_path, cell, action):
    borderless = """
    s....
    .....
    ..-..
    .....
    ....s
    """
    game = new_game(tmp_path, borderless, num_agents=1)
    place(game, 0, *cell)
    act(game, action)
    assert pos(game, 0) == cell  # legend in envs/layouts.py: cells outside the map count as walls


def test_two_agents_wanting_one_cell(tmp_path):
    copies = 400
    game = new_game(tmp_path, OPEN, copies=copies, num_agents=2)
    place(game, 0, 3, 3)
    place(game, 1, 3, 5)
    act(game, RIGHT, LEFT)
    at = np.stack([game.agent_positions(b) for b in range(copies)])  # (copies, 2 agents, 2)
    won0 = (at[:, 0] == (3, 4)).all(axis=1)
    won1 = (at[:, 1] == (3, 4)).all(axis=1)
    # rule stated in envs/grid.py docstring: exactly one of them gets the cell, the other stays
    assert np.all(won0 ^ won1)
    assert np.all((at[~won0, 0] == (3, 3)).all(axis=1)) and np.all((at[~won1, 1] == (3, 5)).all(axis=1))
    # rule stated in envs/grid.py docstring: the winner is chosen at random, so each wins sometimes
    assert 0 < won0.sum() < copies
    # our reading of "chosen at random": every claimant equally likely (common practice, no source);
    # exact binomial interval at 1 - 1e-6
    assert_in_ci(int(won0.sum()), copies, 0.5)


def test_three_agents_wanting_one_cell(tmp_path):
    copies = 600
    game = new_game(tmp_path, OPEN, copies=copies, num_agents=3)
    place(game, 0, 3, 3)
    place(game, 1, 3, 5)
    place(game, 2, 2, 4)
    act(game, RIGHT, LEFT, DOWN)
    at = np.stack([game.agent_positions(b) for b in range(copies)])
    won = (at == (3, 4)).all(axis=2)  # (copies, 3)
    assert np.all(won.sum(axis=1) == 1)  # rule stated in envs/grid.py docstring: two agents never share a cell
    for i in range(3):
        assert won[:, i].any()  # rule stated in envs/grid.py docstring: the winner is chosen at random
        assert_in_ci(int(won[:, i].sum()), copies, 1 / 3)  # uniform reading (common practice, no source)


def test_contest_winner_differs_between_seeds(tmp_path):
    game = new_game(tmp_path, OPEN, num_agents=2)

    def winner(seed: int) -> int:
        game.reset(seed=seed)
        place(game, 0, 3, 3)
        place(game, 1, 3, 5)
        act(game, RIGHT, LEFT)
        return 0 if pos(game, 0) == (3, 4) else 1

    first = [winner(seed) for seed in range(40)]
    # rule stated in envs/grid.py docstring: the choice comes from the env's own seeded generator, so it
    # varies with the seed and repeats with it
    assert set(first) == {0, 1}
    assert [winner(seed) for seed in range(40)] == first


def test_no_swaps(tmp_path):
    game = new_game(tmp_path, OPEN, num_agents=2)
    place(game, 0, 3, 3)
    place(game, 1, 3, 4)
    obs, *_ = act(game, RIGHT, LEFT)
    # rule stated in envs/grid.py docstring: the target must be empty at the start of the step
    assert pos(game, 0) == (3, 3) and pos(game, 1) == (3, 4)
    assert ahead_offset(obs[0, 0]) == (0, 1) and ahead_offset(obs[0, 1]) == (0, -1)  # both still turned


def test_no_following(tmp_path):
    game = new_game(tmp_path, OPEN, num_agents=2)
    place(game, 0, 3, 3)
    place(game, 1, 3, 4)
    act(game, RIGHT, RIGHT)
    # rule stated in envs/grid.py docstring: an agent cannot follow another into the cell it is leaving
    assert pos(game, 1) == (3, 5)
    assert pos(game, 0) == (3, 3)


def test_no_rotation_of_a_square(tmp_path):
    game = new_game(tmp_path, OPEN, num_agents=4)
    square = [(2, 3), (2, 4), (3, 4), (3, 3)]
    for i, cell in enumerate(square):
        place(game, i, *cell)
    act(game, RIGHT, DOWN, LEFT, UP)  # each wants the cell of the next one
    # rule stated in envs/grid.py docstring: every target is occupied at the start of the step
    assert [pos(game, i) for i in range(4)] == square


def test_moving_into_a_cell_an_agent_stays_in(tmp_path):
    game = new_game(tmp_path, OPEN, num_agents=2)
    place(game, 0, 3, 3)
    place(game, 1, 3, 4)
    act(game, RIGHT, STAY)
    assert pos(game, 0) == (3, 3)  # rule stated in envs/grid.py docstring: occupied cells cannot be entered


# --- resources --------------------------------------------------------------------------------------------

ONE_RESOURCE = """
#########
#s.....s#
#.......#
#....+..#
#.......#
#s..-..s#
#########
"""


def test_taking_a_resource(tmp_path):
    layout = ONE_RESOURCE
    game = new_game(tmp_path, layout, num_agents=1, regrow_table=[0.0])
    assert game.interior(game.resource)[0, 3, 5]
    place(game, 0, 3, 4)
    obs, rew, _, _, infos = act(game, RIGHT)
    assert rew[0, 0] == 1.0  # harvest_v0 docstring (rewards): +1 per resource taken
    assert infos["resources_taken"][0, 0] == 1  # harvest_v0 docstring (infos)
    assert not game.interior(game.resource)[0, 3, 5]  # rule stated in envs/grid.py docstring (step 3)
    assert obs[0, 0, CH["resource"]].sum() == 0  # the window no longer shows it
    _, rew, _, _, infos = act(game, STAY)
    assert rew[0, 0] == 0.0 and infos["resources_taken"][0, 0] == 0  # taken once only


def test_blocked_agent_does_not_take_the_resource(tmp_path):
    layout = ONE_RESOURCE
    game = new_game(tmp_path, layout, copies=50, num_agents=2, regrow_table=[0.0])
    place(game, 0, 3, 4)
    place(game, 1, 3, 6)
    _, rew, *_ = act(game, RIGHT, LEFT)
    # rule stated in envs/grid.py docstring: one claimant enters and takes it; the other gets nothing
    assert np.all(rew.sum(axis=1) == 1.0)
    assert not game.interior(game.resource)[:, 3, 5].any()


# --- tag beam ---------------------------------------------------------------------------------------------

CORRIDOR = """
############
#s........s#
#..........#
#s........s#
#-.........#
############
"""


def tag_once(tmp_path, layout, tagger, facing, victims, **params):
    """Agent 0 at ``tagger`` facing ``facing`` fires once; the others stand at ``victims``."""
    game = new_game(tmp_path, layout, num_agents=1 + len(victims), **params)
    place(game, 0, *tagger, facing=facing)
    for i, cell in enumerate(victims, start=1):
        place(game, i, *cell)
    out = act(game, TAG, *[STAY] * len(victims))
    return game, out


@pytest.mark.parametrize(("distance", "hit"), [(1, True), (2, True), (3, True), (4, False), (6, False)])
def test_tag_beam_length(tmp_path, distance, hit):
    game, (_, _, _, _, infos) = tag_once(tmp_path, CORRIDOR, (2, 1), "right", [(2, 1 + distance)],
                                         tag_length=3)
    # rule stated in envs/grid.py docstring (step 4): the beam reaches tag_length cells ahead, no further
    assert bool(game.out[0, 1]) is hit
    assert infos["times_tagged"][0, 1] == int(hit)
    assert infos["tags_fired"][0, 0] == 1


@pytest.mark.parametrize("facing", list(FACE))
def test_tag_beam_follows_facing(tmp_path, facing):
    dy, dx = FACE_STEP[facing]
    ahead, behind = (3 + 2 * dy, 4 + 2 * dx), (3 - 2 * dy, 4 - 2 * dx)
    game, _ = tag_once(tmp_path, OPEN, (3, 4), facing, [ahead, behind], tag_length=2)
    # rule stated in envs/grid.py docstring (step 4): the beam goes the way the agent faces, not behind it
    assert game.out[0].tolist() == [False, True, False]


def test_tag_beam_stops_at_a_wall(tmp_path):
    walled = CORRIDOR.replace("#..........#", "#..#.......#")
    game, _ = tag_once(tmp_path, walled, (2, 1), "right", [(2, 4), (2, 2)], tag_length=5)
    # rule stated in envs/grid.py docstring (step 4): each lane is stopped by the first wall
    assert game.out[0].tolist() == [False, False, True]


def test_tag_beam_passes_through_agents(tmp_path):
    game, (_, _, _, _, infos) = tag_once(tmp_path, CORRIDOR, (2, 1), "right", [(2, 2), (2, 3), (2, 5)],
                                         tag_length=4)
    # rule stated in envs/grid.py docstring (step 4): beams pass through agents and freeze every agent hit
    assert game.out[0].tolist() == [False, True, True, True]
    assert infos["times_tagged"][0].tolist() == [0, 1, 1, 1]
    assert infos["tags_fired"][0].tolist() == [1, 0, 0, 0]


@pytest.mark.parametrize(("width", "victim", "hit"), [
    (1, (2, 3), False),   # side lane, one-lane beam
    (3, (2, 3), True),    # side lane inside a three-lane beam
    (3, (4, 3), True),    # the other side lane
    (3, (2, 1), False),   # directly beside the tagger: beams start at the cell ahead
    (3, (1, 3), False),   # two lanes off a three-lane beam
    (5, (1, 3), True),    # two lanes off a five-lane beam
    (3, (2, 6), False),   # side lane, beyond tag_length
], ids=["w1-side", "w3-side", "w3-other-side", "w3-beside", "w3-two-off", "w5-two-off", "w3-too-far"])
def test_tag_beam_width(tmp_path, width, victim, hit):
    room = """
    ##########
    #s......s#
    #........#
    #........#
    #........#
    #s......-#
    ##########
    """
    game, _ = tag_once(tmp_path, room, (3, 1), "right", [victim], tag_length=4, tag_width=width)
    # rule stated in envs/grid.py docstring (step 4): width lanes centred on the agent's line, length cells
    # ahead (the cell ahead is where beams start, CHANNELS table)
    assert bool(game.out[0, 1]) is hit


def test_tag_side_lane_stopped_by_its_own_wall(tmp_path):
    room = """
    ##########
    #s......s#
    #.#......#
    #........#
    #........#
    #s......-#
    ##########
    """
    game, _ = tag_once(tmp_path, room, (3, 1), "right", [(2, 4), (3, 4)], tag_length=4, tag_width=3)
    # rule stated in envs/grid.py docstring (step 4): each lane is stopped by the first wall *in that lane*;
    # the wall at (2, 2) shields (2, 4) but not the centre lane
    assert game.out[0].tolist() == [False, False, True]


def test_tag_hits_the_position_after_moves(tmp_path):
    game = new_game(tmp_path, CORRIDOR, num_agents=3, tag_length=5)
    place(game, 0, 2, 1, facing="right")
    place(game, 1, 1, 3)  # steps into the beam's line
    place(game, 2, 2, 4)  # steps out of it
    act(game, TAG, DOWN, UP)
    # rule stated in envs/grid.py docstring: moves (step 2) happen before beams fire (step 4)
    assert game.out[0].tolist() == [False, True, False]


def test_tagged_agent_leaves_the_map(tmp_path):
    env = harvest.parallel_env(layout=write_layout(tmp_path, CORRIDOR), num_agents=2, view_radius=3,
                               freeze_steps=5, state_layout="anonymous")
    env.reset(seed=0)
    game = env.game
    place(game, 0, 2, 1, facing="right")
    place(game, 1, 2, 3)
    before = env.step({"agent_0": STAY, "agent_1": STAY})[0]
    assert before["agent_0"][CH["others"]].sum() == 1  # agent_1 in view before the tag
    obs, *_ = env.step({"agent_0": TAG, "agent_1": STAY})
    assert game.out[0, 1]
    # rule stated in envs/grid.py docstring (step 4): a tagged agent leaves the map, so others do not see it
    assert obs["agent_0"][CH["others"]].sum() == 0
    # anonymous state(): every agent on the map -- only agent_0 now
    assert env.state()[SCH["agents"]].sum() == 1
    # CHANNELS table: 'frozen' is the whole window while the observer is frozen
    assert np.all(obs["agent_1"][CH["frozen"]] == 1)
    assert obs["agent_1"][CH["self"]].sum() == 0
    assert np.all(obs["agent_0"][CH["frozen"]] == 0)


@pytest.mark.parametrize("freeze_steps", [1, 3])
def test_freeze_lasts_exactly_freeze_steps(tmp_path, freeze_steps):
    env = harvest.parallel_env(layout=write_layout(tmp_path, CORRIDOR), num_agents=2, view_radius=3,
                               freeze_steps=freeze_steps, tag_cost=1.0)
    env.reset(seed=0)
    game = env.game
    place(game, 0, 2, 1, facing="right")
    place(game, 1, 2, 3, facing="up")
    spawn = {tuple(s) for s in game.layout.spawn.tolist()}
    _, _, _, _, infos = env.step({"agent_0": TAG, "agent_1": STAY})
    assert infos["agent_1"]["frozen"] == 0  # it was on the map for the step in which it was hit
    assert infos["agent_1"]["times_tagged"] == 1
    for _ in range(freeze_steps):
        # rule stated in envs/grid.py docstring: the victim sits out the next freeze_steps steps (step 1:
        # its actions are ignored) -- a tag would cost it tag_cost and a move would change where it left
        obs, rew, _, _, infos = env.step({"agent_0": STAY, "agent_1": TAG})
        assert infos["agent_1"]["frozen"] == 1  # harvest_v0 docstring (infos): 1 if it sat out this step
        assert infos["agent_1"]["tags_fired"] == 0 and rew["agent_1"] == 0.0
        assert infos["agent_0"]["frozen"] == 0
    # rule stated in envs/grid.py docstring (step 5): time up, it returns at a (free) spawn point
    assert not game.out[0, 1]
    assert pos(game, 1) in spawn
    assert obs["agent_1"][CH["frozen"]].sum() == 0 and obs["agent_1"][CH["self"]].sum() == 1
    _, _, _, _, infos = env.step({"agent_0": STAY, "agent_1": TAG})
    assert infos["agent_1"]["frozen"] == 0 and infos["agent_1"]["tags_fired"] == 1  # acting again


def test_frozen_agent_moves_are_ignored(tmp_path):
    game = new_game(tmp_path, CORRIDOR, num_agents=2, freeze_steps=3)
    place(game, 0, 2, 1, facing="right")
    place(game, 1, 2, 3, facing="up")
    act(game, TAG, STAY)
    for _ in range(2):
        act(game, STAY, DOWN)
        # rule stated in envs/grid.py docstring (step 1): frozen agents' actions are ignored; the engine
        # keeps where it left the map (agent_positions docstring) and its facing
        assert pos(game, 1) == (2, 3) and game.facing[0, 1] == FACE["up"] and game.out[0, 1]


def test_freeze_steps_zero_returns_at_once(tmp_path):
    game = new_game(tmp_path, CORRIDOR, num_agents=2, freeze_steps=0)
    place(game, 0, 2, 1, facing="right")
    place(game, 1, 2, 3)
    _, _, _, _, infos = act(game, TAG, STAY)
    # rule stated in envs/grid.py docstring: sits out the next 0 steps, returns at a spawn point (step 5)
    assert infos["times_tagged"][0, 1] == 1
    assert not game.out[0, 1]
    assert pos(game, 1) in {tuple(s) for s in game.layout.spawn.tolist()}
    _, _, _, _, infos = act(game, STAY, STAY)
    assert infos["frozen"][0, 1] == 0


def test_return_spawn_is_random_and_free(tmp_path):
    copies = 400
    game = new_game(tmp_path, CORRIDOR, copies=copies, num_agents=3, freeze_steps=1)
    place(game, 0, 2, 1, facing="right")
    place(game, 1, 2, 3)
    place(game, 2, 1, 1)  # stands on the spawn point (1, 1)
    act(game, TAG, STAY, STAY)
    act(game, STAY, STAY, STAY)
    assert not game.out[:, 1].any()
    back = [pos(game, 1, b) for b in range(copies)]
    # rule stated in envs/grid.py docstring (step 5): a random *free* spawn point
    assert (1, 1) not in back
    assert set(back) == {(1, 10), (3, 1), (3, 10)}  # every free one is used sometimes


def test_returning_agents_never_wait_while_a_spawn_point_is_free(tmp_path):
    copies = 200
    game = new_game(tmp_path, CORRIDOR, copies=copies, num_agents=3, freeze_steps=1, tag_length=5)
    place(game, 0, 2, 1, facing="right")
    place(game, 1, 2, 3)
    place(game, 2, 2, 5)
    act(game, TAG, STAY, STAY)  # one beam freezes both
    _, _, _, _, infos = act(game, STAY, STAY, STAY)
    # rule stated in envs/grid.py docstring (step 5): agents whose time is up return at a random free spawn
    # point and wait only "if none is free"; four spawn points are free here
    assert not game.out.any()
    _, _, _, _, infos = act(game, STAY, STAY, STAY)
    assert not infos["frozen"].any()  # and so infos['frozen'] is 1 for exactly freeze_steps steps


@pytest.mark.parametrize(("tag_cost", "tagged_penalty"), [(0.0, 0.0), (0.5, 0.0), (0.0, 2.0), (0.25, 3.0)])
def test_tag_cost_and_tagged_penalty(tmp_path, tag_cost, tagged_penalty):
    game = new_game(tmp_path, CORRIDOR, num_agents=4, tag_cost=tag_cost, tagged_penalty=tagged_penalty)
    place(game, 0, 2, 1, facing="right")
    place(game, 1, 2, 4)
    place(game, 2, 2, 8, facing="left")  # both beams (reach 5) hit agent 1 ...
    place(game, 3, 4, 5, facing="down")   # ... and agent 3 fires into the wall, hitting nobody
    _, rew, _, _, infos = act(game, TAG, STAY, TAG, TAG)
    # rule stated in envs/grid.py docstring (step 4): the tagger pays tag_cost per beam fired (hit or not),
    # the victim tagged_penalty once however many beams hit it
    assert rew[0].tolist() == pytest.approx([-tag_cost, -tagged_penalty, -tag_cost, -tag_cost])
    assert rew.dtype == np.float32  # envs/grid.py GridGame docstring (Shape)
    assert infos["times_tagged"][0].tolist() == [0, 2, 0, 0]
    assert infos["tags_fired"][0].tolist() == [1, 0, 1, 1]


def test_tagging_false_removes_the_tag_action(tmp_path):
    game = new_game(tmp_path, OPEN, num_agents=1, tagging=False)
    # harvest_v0 docstring: Discrete(5) untagged
    assert game.action_space.n == 5
    assert game.action_names == ("stay", "up", "down", "left", "right")
    with pytest.raises(ActionError, match="action 5"):
        act(game, 5)
    tiny_clean = cleanup.vector_env(1, layout="cleanup_tiny", num_agents=1, tagging=False, view_radius=2)
    # cleanup_v0 docstring: Discrete(6) untagged, then clean is 5
    assert tiny_clean.action_space.n == 6 and tiny_clean.action_names[5] == "clean"
    assert "tag" not in tiny_clean.action_names


# --- clean beam -------------------------------------------------------------------------------------------

RIVER = """
###########
#wwwwwww.s#
#wwwwwww.s#
#-~~~~~~.s#
###########
"""


def test_clean_beam_removes_waste_within_reach(tmp_path):
    game = new_game(tmp_path, RIVER, module=cleanup, num_agents=1, clean_length=3, clean_width=1,
                    pollution_rate=0.0)
    place(game, 0, 1, 8, facing="left")
    _, rew, _, _, infos = act(game, CLEAN)
    waste = game.interior(game.waste)[0]
    # rule stated in envs/grid.py docstring (step 4): the clean beam removes the waste it covers, length cells
    assert waste[1].tolist() == [False, True, True, True, True, False, False, False, False, False, False]
    assert waste[2, 1:8].all()  # one lane only
    assert infos["waste_removed"][0, 0] == 3  # cleanup_v0 docstring (infos): waste cells its beam covered
    assert rew[0, 0] == 0.0  # cleanup_v0 docstring (rewards): cleaning earns nothing


def test_clean_beam_width_and_walls(tmp_path):
    layout = """
    ###########
    #wwwwwww.s#
    #ww#wwww.s#
    #-~~~~~~.s#
    ###########
    """
    game = new_game(tmp_path, layout, module=cleanup, num_agents=1, clean_length=6, clean_width=3,
                    pollution_rate=0.0)
    place(game, 0, 2, 8, facing="left")
    _, _, _, _, infos = act(game, CLEAN)
    waste = game.interior(game.waste)[0]
    # rule stated in envs/grid.py docstring (step 4): width lanes, each stopped by its first wall:
    # row 1 is cleared over 6 cells (x = 2..7), row 2 up to the wall at x = 3, row 3 has no waste
    assert waste[1, 1:8].tolist() == [True, False, False, False, False, False, False]
    assert waste[2, 1:8].tolist() == [True, True, False, False, False, False, False]
    assert infos["waste_removed"][0, 0] == 6 + 4


def test_clean_and_tag_beams_do_not_mix(tmp_path):
    game = new_game(tmp_path, RIVER, module=cleanup, num_agents=2, clean_length=5, clean_width=1,
                    pollution_rate=0.0)
    place(game, 0, 1, 8, facing="left")
    place(game, 1, 3, 7)
    act(game, TAG, STAY)
    assert game.interior(game.waste)[0, 1, 1:8].all()  # cleanup_v0 docstring: only the clean beam cleans
    place(game, 1, 1, 6)  # now in the clean beam's path
    act(game, CLEAN, STAY)
    assert not game.out[0, 1]  # rule stated in envs/grid.py docstring: only the tag beam freezes
    assert not game.interior(game.waste)[0, 1, 7]


def test_clean_with_tagging_false_is_action_five(tmp_path):
    game = new_game(tmp_path, RIVER, module=cleanup, num_agents=1, tagging=False, clean_length=2,
                    clean_width=1, pollution_rate=0.0)
    place(game, 0, 1, 8, facing="left")
    _, _, _, _, infos = act(game, 5)
    assert infos["waste_removed"][0, 0] == 2  # cleanup_v0 docstring: without tagging clean is 5


# --- observations and state -------------------------------------------------------------------------------

ROOM = """
#########
#s.....s#
#..+....#
#.......#
#...-...#
#s.....s#
#########
"""


def test_observation_channels(tmp_path):
    game = new_game(tmp_path, ROOM, num_agents=2, view_radius=2, regrow_table=[0.0])
    place(game, 0, 2, 2, facing="right")
    place(game, 1, 3, 4)
    obs, *_ = act(game, STAY, STAY)
    o = obs[0, 0]
    assert o.shape == (9, 5, 5) and o.dtype == np.uint8  # harvest_v0 docstring: (9, 2r+1, 2r+1) uint8
    # the window covers rows 0..4 and columns 0..4 of the map, window (i, j) = map (i, j)
    wall = np.zeros((5, 5), np.uint8)
    wall[0, :] = 1
    wall[:, 0] = 1
    assert np.array_equal(o[CH["wall"]], wall)  # CHANNELS table: wall
    one = np.zeros((5, 5), np.uint8)
    expected = {
        "resource": [(2, 3)],   # CHANNELS table: a resource stands
        "orchard": [(2, 3), (4, 4)],  # CHANNELS table: the '+' and '-' cells (legend in envs/layouts.py)
        "others": [(3, 4)],     # CHANNELS table: another agent (not the observer)
        "self": [(2, 2)],       # CHANNELS table: the observer's own cell, the window centre
        "ahead": [(2, 3)],      # CHANNELS table: the cell the observer faces
        "waste": [], "river": [], "frozen": [],  # harvest_v0 docstring: waste and river always 0 here
    }
    for name, cells in expected.items():
        want = one.copy()
        for c in cells:
            want[c] = 1
        assert np.array_equal(o[CH[name]], want), name


def test_observation_outside_the_map_reads_as_wall(tmp_path):
    borderless = """
    s....
    .....
    ..-..
    .....
    ....s
    """
    game = new_game(tmp_path, borderless, num_agents=1, view_radius=2)
    place(game, 0, 0, 0, facing="down")
    obs, *_ = act(game, STAY)
    ii, jj = np.indices((5, 5))
    # harvest_v0 docstring (observation): cells outside the map read as walls
    assert np.array_equal(obs[0, 0, CH["wall"]], ((ii < 2) | (jj < 2)).astype(np.uint8))
    assert obs[0, 0, CH["orchard"], 4, 4] == 1  # the '-' at map (2, 2)
    assert obs[0, 0, CH["self"], 2, 2] == 1


def test_river_and_waste_channels_in_cleanup(tmp_path):
    game = new_game(tmp_path, RIVER, module=cleanup, num_agents=1, view_radius=1, pollution_rate=0.0)
    place(game, 0, 2, 8, facing="left")
    obs, *_ = act(game, STAY)
    o = obs[0, 0]  # window = map rows 1..3, columns 7..9
    # CHANNELS table: river cells ('~' and 'w'), waste where it lies (legend in envs/layouts.py)
    assert o[CH["river"]].tolist() == [[1, 0, 0], [1, 0, 0], [1, 0, 0]]
    assert o[CH["waste"]].tolist() == [[1, 0, 0], [1, 0, 0], [0, 0, 0]]
    assert o[CH["ahead"]].tolist() == [[0, 0, 0], [1, 0, 0], [0, 0, 0]]


def test_harvest_rejects_a_layout_with_a_river():
    # rule stated in the harvest_v0 docstring: the river channel is always 0, so a river map is refused
    with pytest.raises(LayoutError, match="harvest has no river.*row 2, column 6"):
        harvest.vector_env(1, layout="cleanup_tiny", num_agents=1)


def _tagged_room_state(tmp_path, **params):
    """ROOM with 3 agents: agent_0 at (3, 1) facing right tags agent_2 at (3, 3), which leaves the map;
    agent_1 stands at (1, 4) facing down. Returns the engine and ``state()`` after that step."""
    env = harvest.parallel_env(layout=write_layout(tmp_path, ROOM), num_agents=3, view_radius=2,
                               regrow_table=[0.0], **params)
    env.reset(seed=0)
    game = env.game
    place(game, 0, 3, 1, facing="right")
    place(game, 1, 1, 4, facing="down")
    place(game, 2, 3, 3)
    env.step({"agent_0": TAG, "agent_1": STAY, "agent_2": STAY})  # agent_2 is tagged and leaves (3, 3)
    return game, env.state()


def test_anonymous_state_channels(tmp_path):
    game, st = _tagged_room_state(tmp_path, state_layout="anonymous")
    layout = game.layout
    # harvest_v0 docstring: (9, H, W) uint8 with state_layout="anonymous"
    assert st.shape == (9, 7, 9) and st.dtype == np.uint8
    # envs/grid.py docstring (CHANNELS table, "anonymous state" variants)
    assert np.array_equal(st[SCH["wall"]], layout.wall)
    assert np.array_equal(st[SCH["resource"]], layout.resource)
    assert np.array_equal(st[SCH["orchard"]], layout.orchard)
    assert st[SCH["waste"]].sum() == 0 and st[SCH["river"]].sum() == 0
    assert sorted(map(tuple, np.argwhere(st[SCH["agents"]]).tolist())) == [(1, 4), (3, 1)]  # on the map
    assert st[SCH["self"]].sum() == 0  # state(): all zero
    assert sorted(map(tuple, np.argwhere(st[SCH["ahead"]]).tolist())) == [(2, 4), (3, 2)]
    assert np.argwhere(st[SCH["frozen"]]).tolist() == [[3, 3]]  # the cell the frozen agent left


# per-agent state (envs/grid.py docstring, "State channels"): the five map channels, then for agent i the planes
# position, ahead, frozen at channels 5 + 3 i + (0, 1, 2)
MAP = 5
PLANE = {"position": 0, "ahead": 1, "frozen": 2}


def agent_plane(st: np.ndarray, agent: int, plane: str) -> np.ndarray:
    return st[MAP + 3 * agent + PLANE[plane]]


def cells_of(plane: np.ndarray) -> list[tuple[int, int]]:
    return sorted(map(tuple, np.argwhere(plane).tolist()))


def legend_layer(text: str, chars: str) -> np.ndarray:
    """(H, W) uint8 of the cells of a layout text written with one of ``chars`` (legend in envs/layouts.py)."""
    rows = textwrap.dedent(text).strip("\n").splitlines()
    return np.array([[c in chars for c in row] for row in rows], np.uint8)


def test_state_channel_names():
    # envs/grid.py docstring ("State channels"): map channels, then position/ahead/frozen per agent, in order;
    # the names written out by hand here
    assert state_channels(2) == ("wall", "resource", "waste", "river", "orchard",
                                 "agent_0.position", "agent_0.ahead", "agent_0.frozen",
                                 "agent_1.position", "agent_1.ahead", "agent_1.frozen")
    # anonymous: the observation channels, with every agent in 'agents' in place of 'others'
    assert state_channels(3, "anonymous") == ("wall", "resource", "waste", "river", "orchard", "agents", "self",
                                              "ahead", "frozen")


@pytest.mark.parametrize("module", [harvest, cleanup], ids=["harvest_v0", "cleanup_v0"])
def test_the_old_state_layout_spelling_is_refused_naming_the_new_one(module):
    with pytest.raises(ParamError, match=r"^\S+: parameter 'state_layout' = 'shared' was renamed: use 'anonymous'$"):
        module.parallel_env(layout={harvest: "harvest_tiny", cleanup: "cleanup_tiny"}[module], state_layout="shared")


@pytest.mark.parametrize("num_agents", [1, 2, 4])
@pytest.mark.parametrize("module", [harvest, cleanup], ids=["harvest_v0", "cleanup_v0"])
def test_per_agent_state_space_is_exact(module, num_agents):
    layout = {harvest: "harvest_tiny", cleanup: "cleanup_tiny"}[module]
    par = module.parallel_env(layout=layout, num_agents=num_agents, view_radius=2)
    par.reset(seed=0)
    H, W = par.game.layout.shape
    # envs/grid.py docstring: (5 + 3N, H, W) uint8 0/1, built once; the facade's state() is the engine's
    assert par.state_space.shape == (5 + 3 * num_agents, H, W) and par.state_space.dtype == np.uint8
    assert par.state_space == par.game.state_space
    assert len(par.game.state_channels) == par.state_space.shape[0]
    st = par.state()
    assert st.shape == par.state_space.shape and st.dtype == np.uint8 and par.state_space.contains(st)
    assert np.array_equal(st, par.game.state()[0])


def test_per_agent_state_cell_by_cell(tmp_path):
    game, st = _tagged_room_state(tmp_path)
    assert game.out[0].tolist() == [False, False, True]
    # the whole expected state, derived by hand in this test from the ROOM text and the placements above
    want = np.zeros((5 + 3 * 3, 7, 9), np.uint8)
    want[0] = legend_layer(ROOM, "#")                      # wall
    want[1] = legend_layer(ROOM, "+")                      # resource: the '+' cell, (2, 3); none regrows
    want[4] = legend_layer(ROOM, "+-")                     # orchard: '+' and '-'; waste, river stay 0
    want[5 + 0, 3, 1] = 1                                  # agent_0.position
    want[5 + 1, 3, 2] = 1                                  # agent_0.ahead: facing right
    want[8 + 0, 1, 4] = 1                                  # agent_1.position
    want[8 + 1, 2, 4] = 1                                  # agent_1.ahead: facing down
    want[11 + 2, 3, 3] = 1                                 # agent_2.frozen: the cell it left; no position/ahead
    for c, name in enumerate(state_channels(3)):
        assert np.array_equal(st[c], want[c]), name


@pytest.mark.parametrize("facing", list(FACE))
def test_per_agent_ahead_follows_facing(tmp_path, facing):
    game = new_game(tmp_path, OPEN, num_agents=2)
    place(game, 0, 3, 4, facing=facing)
    place(game, 1, 1, 1, facing="down")
    act(game, STAY, STAY)
    st = game.state()[0]
    dy, dx = FACE_STEP[facing]
    # envs/grid.py docstring: agent_<i>.ahead is the cell agent i faces (one step its way, derived by hand)
    assert cells_of(agent_plane(st, 0, "ahead")) == [(3 + dy, 4 + dx)]
    assert cells_of(agent_plane(st, 0, "position")) == [(3, 4)]
    assert cells_of(agent_plane(st, 1, "ahead")) == [(2, 1)]  # agent_1's planes are its own
    assert cells_of(agent_plane(st, 1, "position")) == [(1, 1)]
    assert agent_plane(st, 0, "frozen").sum() == 0 and agent_plane(st, 1, "frozen").sum() == 0


@pytest.mark.parametrize(("cell", "action"), [((0, 2), UP), ((4, 2), DOWN), ((2, 0), LEFT), ((2, 4), RIGHT)],
                         ids=["up", "down", "left", "right"])
def test_per_agent_ahead_outside_the_map_is_not_marked(tmp_path, cell, action):
    game = new_game(tmp_path, BORDERLESS, num_agents=1)
    place(game, 0, *cell)
    act(game, action)  # blocked by the edge, turns outward
    st = game.state()[0]
    # envs/grid.py docstring: agent_<i>.ahead is zero when the cell it faces is outside the map
    assert agent_plane(st, 0, "ahead").sum() == 0
    assert cells_of(agent_plane(st, 0, "position")) == [cell]


def test_per_agent_planes_through_a_freeze(tmp_path):
    env = harvest.parallel_env(layout=write_layout(tmp_path, CORRIDOR), num_agents=2, view_radius=3,
                               freeze_steps=2)
    env.reset(seed=0)
    game = env.game
    place(game, 0, 2, 1, facing="right")
    place(game, 1, 2, 3, facing="up")
    st = env.state()
    # before the tag (placed by hand): agent_1 on (2, 3), facing up to (1, 3), not frozen
    assert cells_of(agent_plane(st, 1, "position")) == [(2, 3)]
    assert cells_of(agent_plane(st, 1, "ahead")) == [(1, 3)]
    assert agent_plane(st, 1, "frozen").sum() == 0
    env.step({"agent_0": TAG, "agent_1": STAY})
    for t in range(2):  # after the tag step and after the first of the 2 steps it sits out (the second ends
        # with its return, grid.py step 5)
        st = env.state()
        assert game.out[0, 1], t
        # envs/grid.py docstring: off the map while frozen -- no position, no ahead; frozen marks the cell left
        assert agent_plane(st, 1, "position").sum() == 0, t
        assert agent_plane(st, 1, "ahead").sum() == 0, t
        assert cells_of(agent_plane(st, 1, "frozen")) == [(2, 3)], t
        assert cells_of(agent_plane(st, 0, "position")) == [(2, 1)], t  # the tagger is untouched
        assert agent_plane(st, 0, "frozen").sum() == 0, t
        env.step({"agent_0": STAY, "agent_1": STAY})
    # back on the map (grid.py step 5: at a spawn point): position there, frozen plane cleared
    assert not game.out[0, 1]
    st = env.state()
    assert cells_of(agent_plane(st, 1, "position")) == [pos(game, 1)]
    assert pos(game, 1) in {tuple(s) for s in game.layout.spawn.tolist()}
    assert agent_plane(st, 1, "frozen").sum() == 0 and agent_plane(st, 1, "ahead").sum() == 1


def test_per_agent_state_of_cleanup_shows_river_and_waste(tmp_path):
    game = new_game(tmp_path, RIVER, module=cleanup, num_agents=1, pollution_rate=0.0, growth_rate=0.0)
    place(game, 0, 2, 8, facing="left")
    act(game, STAY)
    st = game.state()[0]
    # derived by hand from the RIVER text (legend in envs/layouts.py): river '~' and 'w', waste 'w'
    assert np.array_equal(st[3], legend_layer(RIVER, "~w"))
    assert np.array_equal(st[2], legend_layer(RIVER, "w"))
    assert np.array_equal(st[4], legend_layer(RIVER, "-"))
    assert cells_of(agent_plane(st, 0, "ahead")) == [(2, 7)]


@pytest.mark.parametrize("module", [harvest, cleanup], ids=["harvest_v0", "cleanup_v0"])
def test_both_state_layouts_describe_one_world(module):
    # envs/grid.py docstring: the anonymous channels are the per-agent planes merged (agents anonymous) and the
    # map channels are the same; held on a random rollout with tagging, so agents freeze and return
    layout = {harvest: "harvest_tiny", cleanup: "cleanup_tiny"}[module]
    kw = {"layout": layout, "num_agents": 3, "view_radius": 2, "freeze_steps": 3}
    per, shared = module.vector_env(2, **kw), module.vector_env(2, state_layout="anonymous", **kw)
    per.reset(seed=5)
    shared.reset(seed=5)
    rng = np.random.default_rng(0)
    frozen_seen = 0
    for _ in range(150):
        a = rng.integers(per.action_space.n, size=(2, 3))
        per.step(a)
        shared.step(a)
        p, s = per.state(), shared.state()
        assert np.array_equal(p[:, :5], s[:, :5])
        for plane, channel in (("position", "agents"), ("ahead", "ahead"), ("frozen", "frozen")):
            merged = np.bitwise_or.reduce(p[:, [MAP + 3 * i + PLANE[plane] for i in range(3)]], axis=1)
            assert np.array_equal(merged, s[:, SCH[channel]]), plane
        # one plane per agent: exactly one position cell while on the map, one frozen cell while off it
        on = p[:, MAP::3].sum(axis=(2, 3))
        off = p[:, MAP + 2::3].sum(axis=(2, 3))
        assert np.array_equal(on, (~per.out).astype(on.dtype)) and np.array_equal(off, per.out.astype(off.dtype))
        frozen_seen += int(per.out.sum())
    assert frozen_seen > 0  # the rollout did freeze agents (ours, no source: a check on the test itself)


@pytest.mark.parametrize("radius", [1, 2, 4])
def test_view_radius_sets_the_window(tmp_path, radius):
    game = new_game(tmp_path, OPEN, num_agents=2, view_radius=radius)
    obs, *_ = act(game, STAY, STAY)
    k = 2 * radius + 1
    # harvest_v0 docstring: Box(0, 1, (9, 2r+1, 2r+1), uint8)
    assert game.observation_space.shape == (9, k, k)
    assert obs.shape == (1, 2, 9, k, k)
    assert np.all(obs[0, :, CH["self"], radius, radius] == 1)  # CHANNELS table: centre is the observer
    assert np.all(obs[0, :, CH["self"]].sum(axis=(1, 2)) == 1)


def test_full_view_is_the_whole_map(tmp_path):
    env = harvest.parallel_env(layout=write_layout(tmp_path, ROOM), num_agents=2, full_view=True)
    obs, _ = env.reset(seed=0)
    game = env.game
    place(game, 0, 3, 1, facing="right")
    place(game, 1, 1, 4, facing="down")
    obs, *_ = env.step({"agent_0": STAY, "agent_1": STAY})
    # harvest_v0 docstring: with full_view the observation is the whole (9, H, W) map
    assert env.observation_space("agent_0").shape == (9, 7, 9)
    o = obs["agent_0"]
    assert o.shape == (9, 7, 9)
    assert np.array_equal(o[CH["wall"]], game.layout.wall)
    assert np.argwhere(o[CH["self"]]).tolist() == [[3, 1]]
    assert np.argwhere(o[CH["others"]]).tolist() == [[1, 4]]  # the other agent only
    assert np.argwhere(o[CH["ahead"]]).tolist() == [[3, 2]]
    assert np.argwhere(obs["agent_1"][CH["self"]]).tolist() == [[1, 4]]


BORDERLESS = """
s....
.....
..-..
.....
....s
"""


@pytest.mark.parametrize(("cell", "action"), [((0, 2), UP), ((4, 2), DOWN), ((2, 0), LEFT), ((2, 4), RIGHT)],
                         ids=["up", "down", "left", "right"])
def test_full_view_ahead_outside_the_map_is_not_marked(tmp_path, cell, action):
    game = new_game(tmp_path, BORDERLESS, num_agents=1, full_view=True, state_layout="anonymous")
    place(game, 0, *cell)
    obs, *_ = act(game, action)  # blocked by the edge (cells outside count as walls), turns outward
    # CHANNELS table: 'ahead' is the cell the observer faces; that cell is outside the (H, W) view, so no
    # cell of the map is marked -- as the shared state() already does for the same case
    assert obs[0, 0, CH["ahead"]].sum() == 0
    assert game.state()[0, CH["ahead"]].sum() == 0
