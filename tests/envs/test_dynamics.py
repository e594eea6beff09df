"""Monte-Carlo checks that resources and waste appear as often as the configured tables say.

Each test builds a layout in which the quantity the rule depends on is known and cannot change during the
measured step (agents stand still, far away), runs many copies of ``vector_env`` for one step from reset,
and counts events. Copies are independent (each draws its own key at reset, envs/grid.py docstring), so the
count is binomial; it must fall inside the exact (Clopper-Pearson) interval from ``scipy.stats.binomtest``
at confidence 1 - 1e-6, with fixed seeds. Probabilities that the rule makes exactly 0 or 1 are checked
exactly.
"""

from __future__ import annotations

import textwrap

import numpy as np
import pytest
from scipy.stats import binomtest

import envs.cleanup_v0 as cleanup
import envs.harvest_v0 as harvest
from envs.errors import ParamError

CONFIDENCE = 1 - 1e-6


def write_layout(tmp_path, rows: list[str] | str, name: str = "layout.txt") -> str:
    text = "\n".join(rows) if isinstance(rows, list) else textwrap.dedent(rows).strip("\n")
    path = tmp_path / name
    path.write_text(text + "\n")
    return str(path)


def boxed(rows: list[str]) -> list[str]:
    """Surround ``rows`` (equal length) with walls."""
    width = len(rows[0]) + 2
    return ["#" * width, *[f"#{r}#" for r in rows], "#" * width]


def assert_rate(successes: int, trials: int, p: float) -> None:
    """``successes`` out of ``trials`` is consistent with probability ``p`` (exact when p is 0 or 1)."""
    if p == 0.0:
        assert successes == 0, (successes, trials)
        return
    if p == 1.0:
        assert successes == trials, (successes, trials)
        return
    ci = binomtest(successes, trials, p).proportion_ci(confidence_level=CONFIDENCE, method="exact")
    assert ci.low <= p <= ci.high, (successes, trials, p, (ci.low, ci.high))


def stay(game):
    return game.step(np.zeros((game.num_envs, game.num_agents), np.int64))


# --- harvest regrowth -------------------------------------------------------------------------------------

UP, LEFT, RIGHT, DOWN = (0, 1), (1, 0), (1, 2), (2, 1)  # (row, column) of a neighbour in a 3 x 3 block


def regrowth_layout(counts: list[int]) -> tuple[list[str], list[tuple[int, int, int]]]:
    """One 3 x 3 block per entry of ``counts``: an empty orchard cell in the centre with that many resources
    among its four orthogonal neighbours; blocks are two columns apart, so with ``regrow_radius`` 1 no
    resource of one block is near the centre of another. Returns the rows and (row, column, count) of every
    centre."""
    blocks = []
    for k in counts:
        b = [["."] * 3 for _ in range(3)]
        b[1][1] = "-"
        for y, x in (UP, LEFT, RIGHT, DOWN)[:k]:
            b[y][x] = "+"
        blocks.append(b)
    body = [".".join("".join(b[r]) for b in blocks) for r in range(3)]
    width = len(body[0])
    rows = boxed(["s" + "." * (width - 1), *body, "." * (width - 1) + "s"])
    centres = [(3, 2 + 4 * j, k) for j, k in enumerate(counts)]  # +1 wall row, +1 spawn row; +1 wall col
    return rows, centres


# harvest_v0 docstring (regrowth): p = regrow_table[min(n, len - 1)]; a sharp custom table
TABLE = [0.0, 0.3, 0.6, 0.9]


def test_regrowth_follows_the_table(tmp_path):
    counts = [0, 1, 2, 3, 4] * 3
    rows, centres = regrowth_layout(counts)
    copies = 3000
    game = harvest.vector_env(copies, layout=write_layout(tmp_path, rows), num_agents=1, view_radius=1,
                              regrow_radius=1, regrow_table=TABLE)
    game.reset(seed=123)
    for y, x, k in centres:
        assert game.layout.orchard[y, x] and not game.layout.resource[y, x]
        assert int(game.layout.resource[y - 1:y + 2, x - 1:x + 2].sum()) == k  # the layout is what we think
    stay(game)
    res = game.interior(game.resource)
    for k in range(5):
        grown = sum(int(res[:, y, x].sum()) for y, x, kk in centres if kk == k)
        trials = copies * counts.count(k)
        # harvest_v0 docstring (regrowth): regrow_table[min(n, len(regrow_table) - 1)] -- n = 4 uses the
        # last entry ("that many or more"); expected values are the custom TABLE above
        assert_rate(grown, trials, TABLE[min(k, len(TABLE) - 1)])
    # the resources that stood there are untouched (nobody moved)
    assert np.array_equal(res & game.layout.resource, np.broadcast_to(game.layout.resource, res.shape))


@pytest.mark.parametrize("scale", [0.5, 2.0])
def test_regrow_scale_multiplies_the_table_and_clips_at_one(tmp_path, scale):
    counts = [0, 1, 2, 3] * 3
    rows, centres = regrowth_layout(counts)
    copies = 3000
    game = harvest.vector_env(copies, layout=write_layout(tmp_path, rows), num_agents=1, view_radius=1,
                              regrow_radius=1, regrow_table=TABLE, regrow_scale=scale)
    game.reset(seed=321)
    stay(game)
    res = game.interior(game.resource)
    for k in range(4):
        grown = sum(int(res[:, y, x].sum()) for y, x, kk in centres if kk == k)
        # harvest_v0 docstring (regrow_scale): min(1, scale * regrow_table[n]); with scale 2 the table
        # [0, 0.3, 0.6, 0.9] becomes [0, 0.6, 1, 1] (the last two clipped), with 0.5 [0, 0.15, 0.3, 0.45]
        expected = min(1.0, scale * TABLE[k])
        if expected in (0.0, 1.0):
            assert grown == (copies * counts.count(k) if expected else 0)
        else:
            assert_rate(grown, copies * counts.count(k), expected)


def test_regrow_scale_only_multiplies_the_table():
    # a scaled table plays bit for bit like the product table at scale 1 (harvest_v0 docstring): the knob
    # changes the probabilities, not the random draws
    table = [0.0, 0.1, 0.2, 0.25]
    a = harvest.vector_env(4, num_agents=3, regrow_table=table, regrow_scale=3.0)
    b = harvest.vector_env(4, num_agents=3, regrow_table=[3.0 * p for p in table])
    rng = np.random.default_rng(0)
    oa, _ = a.reset(seed=5)
    ob, _ = b.reset(seed=5)
    for _ in range(80):
        act = rng.integers(0, 5, size=(4, 3))
        oa, ra, *_ = a.step(act)
        ob, rb, *_ = b.step(act)
        assert np.array_equal(oa, ob) and np.array_equal(ra, rb)


@pytest.mark.parametrize(("radius", "offset", "counted"), [
    (2, (1, 0), True),    # distance 1
    (2, (1, 1), True),    # distance sqrt 2
    (2, (0, 2), True),    # distance 2: on the radius
    (2, (2, 1), False),   # distance sqrt 5
    (2, (2, 2), False),   # distance sqrt 8: inside the square, outside the disc
    (3, (2, 2), True),    # sqrt 8 <= 3 (a Manhattan radius of 3 would miss it)
    (3, (1, 3), False),   # sqrt 10 > 3 (a square neighbourhood would count it)
    (3, (3, 0), True),    # distance 3: on the radius
], ids=["r2-1", "r2-sqrt2", "r2-2", "r2-sqrt5", "r2-sqrt8", "r3-sqrt8", "r3-sqrt10", "r3-3"])
def test_regrowth_neighbourhood_is_a_euclidean_disc(tmp_path, radius, offset, counted):
    size = 2 * radius + 3
    grid = [["."] * size for _ in range(size)]
    cy = cx = size // 2
    grid[cy][cx] = "-"
    grid[cy + offset[0]][cx + offset[1]] = "+"
    grid[0][0] = "s"
    rows = boxed(["".join(r) for r in grid])
    game = harvest.vector_env(20, layout=write_layout(tmp_path, rows), num_agents=1, view_radius=1,
                              regrow_radius=radius, regrow_table=[0.0, 1.0])
    game.reset(seed=0)
    stay(game)
    grown = int(game.interior(game.resource)[:, cy + 1, cx + 1].sum())
    # harvest_v0 docstring (regrowth): n counts resources within Euclidean distance regrow_radius; with the
    # table [0, 1] the centre grows surely when the one resource is counted and never otherwise
    assert grown == (20 if counted else 0)


def test_regrowth_skips_a_cell_under_an_agent(tmp_path):
    rows = boxed(["s.....", ".-.-+.", "......"])
    game = harvest.vector_env(10, layout=write_layout(tmp_path, rows), num_agents=1, view_radius=1,
                              regrow_radius=1, regrow_table=[1.0])
    game.reset(seed=0)
    game.cell[:, 0] = (2 + game.P) * game.Wp + (2 + game.P)  # stand on the '-' at map (2, 2)
    game._place_agents()
    stay(game)
    res = game.interior(game.resource)
    # harvest_v0 docstring (regrowth): an empty orchard cell *with no agent on it* regrows; table [1.0]
    assert not res[:, 2, 2].any()
    assert res[:, 2, 4].all()


# --- cleanup ----------------------------------------------------------------------------------------------

def cleanup_layout(river: str, orchard_rows: int = 2) -> list[str]:
    """A river row (``~`` / ``w`` characters), a walkway, then ``orchard_rows`` rows of empty orchard."""
    n = len(river)
    return boxed([river, "s" + "." * (n - 1), *(["-" * n] * orchard_rows)])


@pytest.mark.parametrize("prob", [0.05, 0.3])
def test_waste_spawns_per_clean_river_cell(tmp_path, prob):
    river = "~~~~~ww~~~~~~www~~~~"
    copies = 1500
    game = cleanup.vector_env(copies, layout=write_layout(tmp_path, cleanup_layout(river)), num_agents=1,
                              view_radius=1, pollution_rate=prob)
    game.reset(seed=7)
    stay(game)
    row = game.interior(game.waste)[:, 1, 1:1 + len(river)]  # (copies, cells of the river row)
    clean = np.array([c == "~" for c in river])
    assert row[:, ~clean].all()  # legend in envs/layouts.py: 'w' starts polluted; waste only goes by cleaning
    # cleanup_v0 docstring (dynamics 1): every clean river cell becomes polluted with prob pollution_rate
    assert_rate(int(row[:, clean].sum()), copies * int(clean.sum()), prob)


@pytest.mark.parametrize(("polluted", "expected"), [
    (0, 0.8),   # w = 0.0, a clean river: the full rate growth_rate
    (2, 0.6),   # w = 0.2: 0.8 * (1 - 0.2 / 0.8)
    (4, 0.4),   # w = 0.4: 0.8 * (1 - 0.4 / 0.8)
    (6, 0.2),   # w = 0.6: 0.8 * (1 - 0.6 / 0.8)
    (8, 0.0),   # w = 0.8, at the cap: nothing grows
    (9, 0.0),   # w = 0.9, above it: nothing grows
])
def test_orchard_growth_follows_the_linear_rule(tmp_path, polluted, expected):
    river = "w" * polluted + "~" * (10 - polluted)  # river_cells = 10
    copies = 1000
    game = cleanup.vector_env(copies, layout=write_layout(tmp_path, cleanup_layout(river)), num_agents=1,
                              view_radius=1, pollution_rate=0.0, growth_rate=0.8, pollution_cap=0.8)
    game.reset(seed=11)
    stay(game)
    orchard = game.interior(game.resource)[:, 3:5, 1:11]  # the two orchard rows, all empty at the start
    # cleanup_v0 docstring (dynamics 2): growth_rate * max(0, 1 - w / pollution_cap); the expected values
    # beside each case are that formula worked by hand
    assert_rate(int(orchard.sum()), orchard.size, expected)


def test_orchard_uses_the_fraction_after_this_steps_waste(tmp_path):
    game = cleanup.vector_env(50, layout=write_layout(tmp_path, cleanup_layout("~" * 10)), num_agents=1,
                              view_radius=1, pollution_rate=1.0, growth_rate=1.0, pollution_cap=0.4)
    game.reset(seed=0)
    stay(game)
    # cleanup_v0 docstring (dynamics, "in this order"): waste first (the whole river, prob 1), then the
    # orchard sees w = 1 >= the cap and grows nothing, although the river was clean at the step's start
    assert game.waste_fraction().tolist() == [1.0] * 50
    assert not game.interior(game.resource).any()


def test_orchard_skips_a_cell_under_an_agent(tmp_path):
    game = cleanup.vector_env(10, layout=write_layout(tmp_path, cleanup_layout("~" * 6)), num_agents=1,
                              view_radius=1, pollution_rate=0.0, growth_rate=1.0)
    game.reset(seed=0)
    game.cell[:, 0] = (3 + game.P) * game.Wp + (2 + game.P)  # stand on the orchard cell at map (3, 2)
    game._place_agents()
    stay(game)
    res = game.interior(game.resource)[:, 3:5, 1:7]
    # cleanup_v0 docstring (dynamics 2): every empty orchard cell *with no agent on it*; rate 1 here
    assert not res[:, 0, 1].any()
    assert res.sum() == 10 * (12 - 1)


def test_polluted_river_stops_the_orchard(tmp_path):
    # 5 of 10 river cells polluted: w = 0.5 > the cap 0.4, and waste only grows while nobody cleans
    rows = cleanup_layout("wwwww~~~~~")
    game = cleanup.vector_env(20, layout=write_layout(tmp_path, rows), num_agents=1, view_radius=1,
                              pollution_rate=0.01, growth_rate=0.5, pollution_cap=0.4)
    game.reset(seed=3)
    for _ in range(300):
        stay(game)
        # cleanup_v0 docstring (dynamics 2): zero growth above the cap
        assert not game.interior(game.resource).any()
    assert np.all(game.waste_fraction() >= 0.5)
    # the same map with a clean river and no waste does grow (the check above is not vacuous)
    clean = cleanup.vector_env(20, layout=write_layout(tmp_path, cleanup_layout("~" * 10), "clean.txt"),
                               num_agents=1, view_radius=1, pollution_rate=0.0, growth_rate=0.5,
                               pollution_cap=0.4)
    clean.reset(seed=3)
    stay(clean)
    assert clean.interior(clean.resource).any()


# --- defaults ---------------------------------------------------------------------------------------------

def test_harvest_defaults_follow_the_references():
    p = harvest.vector_env(1).params
    # docs/sources.md, "Harvest regrowth" (Perolat et al. 2017, from memory): 0 with no resource within
    # radius 2, 0.01 with 1-2, 0.05 with 3-4, 0.1 with 5 or more
    assert p["regrow_radius"] == 2
    assert p["regrow_table"] == [0.0, 0.01, 0.01, 0.05, 0.05, 0.1]
    # docs/sources.md, "Harvest regrowth" (Perolat et al. 2017, from memory): a tagged agent is removed for
    # 25 steps; 1000 steps
    assert p["freeze_steps"] == 25
    assert p["max_cycles"] == 1000


def test_cleanup_growth_defaults_are_the_documented_ones():
    p = cleanup.vector_env(1).params
    # our own defaults, no source: the cleanup_v0 docstring (arguments) and docs/sources.md, "Cleanup" say so
    assert (p["pollution_rate"], p["growth_rate"], p["pollution_cap"]) == (0.004, 0.04, 0.5)


def test_cleanup_says_its_parameters_were_renamed_beside_an_unknown_one():
    # an old name is refused as any unknown parameter is, with a generic note (no list of the old names)
    with pytest.raises(ParamError, match=r"^cleanup_v0: unknown parameter 'river_speed'.*; some cleanup_v0 "
                                         r"parameters were renamed during v0; `marl-core envs` lists the current"):
        cleanup.vector_env(1, river_speed=0.1)


# --- episode end (horizon) --------------------------------------------------------------------------------

def _end_flags_by_step(game, steps: int) -> list[tuple[bool, bool, bool, bool]]:
    """(all terminated, any terminated, all truncated, any truncated) after each of ``steps`` steps."""
    game.reset(seed=0)
    out = []
    for _ in range(steps):
        _, _, term, trunc, _ = stay(game)
        out.append((bool(term.all()), bool(term.any()), bool(trunc.all()), bool(trunc.any())))
    return out


@pytest.mark.parametrize("module", [harvest, cleanup], ids=["harvest_v0", "cleanup_v0"])
def test_grid_default_horizon_truncates_at_max_cycles(module):
    layout = "harvest_tiny" if module is harvest else "cleanup_tiny"
    game = module.vector_env(3, layout=layout, num_agents=2, view_radius=2, max_cycles=4)
    # envs/grid.py docstring, step 7: the default "time_limit" truncates every agent at max_cycles
    assert game.params["horizon"] == "time_limit"
    assert _end_flags_by_step(game, 4) == [(False, False, False, False)] * 3 + [(False, False, True, True)]


@pytest.mark.parametrize("module", [harvest, cleanup], ids=["harvest_v0", "cleanup_v0"])
def test_grid_terminal_horizon_terminates_at_max_cycles(module):
    layout = "harvest_tiny" if module is harvest else "cleanup_tiny"
    game = module.vector_env(3, layout=layout, num_agents=2, view_radius=2, max_cycles=4, horizon="terminal")
    # envs/grid.py docstring, step 7: "terminal" terminates every agent at max_cycles and never truncates
    assert _end_flags_by_step(game, 4) == [(False, False, False, False)] * 3 + [(True, True, False, False)]


@pytest.mark.parametrize(("horizon", "terminated"), [("terminal", True), ("time_limit", False)])
def test_grid_facade_ends_the_episode_for_both_horizons(horizon, terminated):
    par = harvest.parallel_env(layout="harvest_tiny", num_agents=2, view_radius=2, max_cycles=2, horizon=horizon)
    par.reset(seed=0)
    _, _, term, trunc, _ = par.step(dict.fromkeys(par.agents, 0))
    assert not any(term.values()) and not any(trunc.values())          # step 1 of 2: the episode goes on
    _, _, term, trunc, _ = par.step(dict.fromkeys(par.agents, 0))
    # envs/grid.py docstring, step 7: one flag for every agent at max_cycles, the one the horizon names
    assert term == dict.fromkeys(par.possible_agents, terminated)
    assert trunc == dict.fromkeys(par.possible_agents, not terminated)
    assert par.agents == []                                             # PettingZoo: ended agents leave


@pytest.mark.parametrize("horizon", ["terminal", "time_limit"])
def test_grid_project_checks_pass_for_both_horizons(horizon):
    from envs.checks import check_game

    check_game("harvest_v0", {"layout": "harvest_tiny", "num_agents": 2, "view_radius": 2, "horizon": horizon},
               cycles=40)


def test_grid_rejects_unknown_horizon_on_one_line():
    with pytest.raises(ParamError) as err:
        cleanup.vector_env(1, horizon="episodic")
    # envs/errors.py: the message names the parameter, the value and what is allowed, on one line
    assert str(err.value) == ("cleanup_v0: parameter 'horizon' = 'episodic' is not allowed; expected one of "
                              "'terminal', 'time_limit'")


@pytest.mark.parametrize("state_layout", ["per_agent", "anonymous"])
@pytest.mark.parametrize("game", ["harvest_v0", "cleanup_v0"])
def test_grid_project_checks_pass_for_both_state_layouts(game, state_layout):
    from envs.checks import check_game

    # envs/checks.py: state() inside state_space, determinism, batched copy b == single env with seed + b
    layout = {"harvest_v0": "harvest_tiny", "cleanup_v0": "cleanup_tiny"}[game]
    check_game(game, {"layout": layout, "num_agents": 3, "view_radius": 2, "freeze_steps": 3,
                      "state_layout": state_layout}, cycles=60)


def test_grid_rejects_unknown_state_layout_on_one_line():
    with pytest.raises(ParamError) as err:
        harvest.vector_env(1, state_layout="per-agent")
    # envs/errors.py: the message names the parameter, the value and what is allowed, on one line
    assert str(err.value) == ("harvest_v0: parameter 'state_layout' = 'per-agent' is not allowed; expected one "
                              "of 'per_agent', 'anonymous'")
