"""Every rejected input raises an error that names the field, is an ``envs.errors.EnvError`` and fits on one line.

Source of the expectations: envs/errors.py (one hierarchy; messages name the field, the value and what is
allowed, so a CLI can print one line), STYLE.md items 8 and 14, envs/layouts.py (line and column of a bad
layout), and the parameter tables of envs/grid.py, envs/harvest_v0.py and envs/cleanup_v0.py.
"""

from __future__ import annotations

import numpy as np
import pytest

import envs
import envs.cleanup_v0 as cleanup
import envs.harvest_v0 as harvest
from envs.errors import ActionError, EnvError, LayoutError, ParamError


def layout_file(tmp_path, text: str) -> str:
    path = tmp_path / "bad.txt"
    path.write_text(text)
    return str(path)


def one_agent():
    game = harvest.vector_env(1, layout="harvest_tiny", num_agents=1, view_radius=2)
    game.reset(seed=0)
    return game


def parallel(**params):
    env = harvest.parallel_env(layout="harvest_tiny", num_agents=2, view_radius=2, **params)
    env.reset(seed=0)
    return env


def step_after_end():
    env = parallel(max_cycles=1)
    env.step({"agent_0": 0, "agent_1": 0})
    env.step({"agent_0": 0, "agent_1": 0})


def tiny(module=harvest, **params):
    layout = "harvest_tiny" if module is harvest else "cleanup_tiny"
    return module.vector_env(1, **{"layout": layout, "num_agents": 1, "view_radius": 2, **params})


def step_once(game, action: int):
    game.reset(seed=0)
    return game.step(np.full((1, game.num_agents), action))


# a comment line first, so the reported line numbers must count file lines, not map rows
RAGGED_SHORT = "; a comment\n#####\n#s.#\n#####\n"       # line 3 has 4 cells: first missing one is column 5
RAGGED_LONG = "; a comment\n#####\n#s.-.#\n#####\n"      # line 3 has 6 cells: first extra one is column 6
UNKNOWN_CELL = "; a comment\n#####\n#s.x#\n#####\n"      # 'x' at line 3, column 4
NO_SPAWN = "; a comment\n#####\n#.-.#\n#####\n"          # reported at the first map line (2), column 1
NO_RIVER = "#######\n#s..-+#\n#######\n"                 # orchard but no river: fine for harvest only
NO_ORCHARD = "#######\n#s..~~#\n#######\n"               # river but no orchard

# (id, make the call given tmp_path, error class, regex the message must match)
CASES = [
    # actions -- envs/core.py check_actions / GameParallelEnv.step
    ("action-too-large", lambda t: one_agent().step([[6]]), ActionError,
     r"action 6 for agent_0 \(copy 0\) is not allowed; expected an integer in \[0, 5\]"),
    ("action-negative", lambda t: one_agent().step([[-1]]), ActionError, r"action -1 for agent_0"),
    ("action-untagged-tag", lambda t: step_once(tiny(tagging=False), 5), ActionError, r"action 5 for agent_0 .*\[0, 4\]"),
    ("action-float", lambda t: one_agent().step([[1.5]]), ActionError, r"actions must be integers.*float64"),
    ("action-string", lambda t: one_agent().step([["up"]]), ActionError, r"actions must be integers"),
    ("action-shape-flat", lambda t: one_agent().step([1]), ActionError,
     r"actions have shape \(1,\); expected \(1, 1\) \(copies, agents\)"),
    ("action-shape-agents", lambda t: one_agent().step([[1, 1]]), ActionError,
     r"actions have shape \(1, 2\); expected \(1, 1\)"),
    ("parallel-action-range", lambda t: parallel().step({"agent_0": 9, "agent_1": 0}), ActionError,
     r"action 9 for agent_0"),
    ("parallel-action-type", lambda t: parallel().step({"agent_0": "up", "agent_1": 0}), ActionError,
     r"action 'up' for agent_0 is not allowed; expected an integer"),
    ("parallel-action-bool", lambda t: parallel().step({"agent_0": True, "agent_1": 0}), ActionError,
     r"action True for agent_0"),
    ("parallel-action-missing", lambda t: parallel().step({"agent_0": 0}), ActionError,
     r"no action given for agent_1"),
    ("parallel-action-unknown-agent", lambda t: parallel().step({"agent_0": 0, "agent_1": 0, "agent_9": 0}),
     ActionError, r"unknown agent\(s\) \['agent_9'\]"),
    ("step-after-end", lambda t: step_after_end(), ActionError, r"step\(\) called after the episode ended"),
    # unknown parameters, with the nearest valid name suggested -- envs/params.py resolve
    ("unknown-param", lambda t: tiny(regrow_tabel=[0.1]), ParamError,
     r"unknown parameter 'regrow_tabel'; did you mean 'regrow_table'"),
    ("unknown-param-cleanup", lambda t: tiny(cleanup, pollution_rat=0.1), ParamError,
     r"unknown parameter 'pollution_rat'; did you mean 'pollution_rate'"),
    ("unknown-param-no-hint", lambda t: tiny(zzz=1), ParamError, r"unknown parameter 'zzz' \(valid: "),
    # layouts -- envs/layouts.py: a bad layout names the line and column
    ("layout-ragged-short", lambda t: tiny(layout=layout_file(t, RAGGED_SHORT)), LayoutError,
     r"line 3, column 5: row has 4 cells; expected 5"),
    ("layout-ragged-long", lambda t: tiny(layout=layout_file(t, RAGGED_LONG)), LayoutError,
     r"line 3, column 6: row has 6 cells; expected 5"),
    ("layout-unknown-cell", lambda t: tiny(layout=layout_file(t, UNKNOWN_CELL)), LayoutError,
     r"line 3, column 4: unknown cell 'x'"),
    ("layout-no-spawn", lambda t: tiny(layout=layout_file(t, NO_SPAWN)), LayoutError,
     r"line 2, column 1: no spawn point 's'"),
    ("layout-empty", lambda t: tiny(layout=layout_file(t, "; only a comment\n\n")), LayoutError,
     r"layout .*: empty"),
    ("layout-missing", lambda t: tiny(layout="no_such_layout"), ParamError,
     r"parameter 'layout' = 'no_such_layout' is not allowed; expected a bundled layout"),
    ("cleanup-layout-without-river", lambda t: tiny(cleanup, layout=layout_file(t, NO_RIVER)), LayoutError,
     r"cleanup needs river cells"),
    ("harvest-layout-without-orchard", lambda t: tiny(layout=layout_file(t, NO_ORCHARD)), LayoutError,
     r"harvest needs orchard cells"),
    # agents
    ("too-many-agents", lambda t: tiny(num_agents=5), ParamError,
     r"parameter 'num_agents' = 5 is not allowed; layout 'harvest_tiny' has 4 spawn points, so expected 1\.\.4"),
    ("zero-agents", lambda t: tiny(num_agents=0), ParamError, r"parameter 'num_agents' = 0"),
    ("agents-as-string", lambda t: tiny(num_agents="2"), ParamError, r"parameter 'num_agents' = '2'"),
    # probabilities
    ("regrow-table-negative", lambda t: tiny(regrow_table=[0.0, -0.1]), ParamError,
     r"parameter 'regrow_table' = \[0\.0, -0\.1\] is not allowed; expected a list of numbers in \[0\.0, 1\.0\]"),
    ("regrow-table-above-one", lambda t: tiny(regrow_table=[0.0, 1.5]), ParamError,
     r"parameter 'regrow_table'"),
    ("regrow-table-empty", lambda t: tiny(regrow_table=[]), ParamError, r"parameter 'regrow_table' = \[\]"),
    ("pollution-rate-negative", lambda t: tiny(cleanup, pollution_rate=-0.01), ParamError,
     r"parameter 'pollution_rate' = -0\.01 is not allowed; expected a number in \[0\.0, 1\.0\]"),
    ("growth-rate-above-one", lambda t: tiny(cleanup, growth_rate=1.5), ParamError,
     r"parameter 'growth_rate' = 1\.5 is not allowed"),
    ("growth-rate-nan", lambda t: tiny(cleanup, growth_rate=float("nan")), ParamError,
     r"parameter 'growth_rate' = nan"),
    # view radius
    ("view-radius-zero", lambda t: tiny(view_radius=0), ParamError,
     r"parameter 'view_radius' = 0 is not allowed; expected an integer >= 1"),
    ("view-radius-beyond-map", lambda t: tiny(view_radius=10), ParamError,
     r"parameter 'view_radius' = 10 is not allowed; expected 1\.\.9"),
    # beams
    ("tag-width-even", lambda t: tiny(tag_width=2), ParamError,
     r"parameter 'tag_width' = 2 is not allowed; expected an odd integer"),
    ("clean-width-even", lambda t: tiny(cleanup, clean_width=4), ParamError,
     r"parameter 'clean_width' = 4 is not allowed; expected an odd integer"),
    ("tag-cost-negative", lambda t: tiny(tag_cost=-1.0), ParamError, r"parameter 'tag_cost' = -1\.0"),
    ("freeze-steps-negative", lambda t: tiny(freeze_steps=-1), ParamError, r"parameter 'freeze_steps' = -1"),
    ("tagging-not-bool", lambda t: tiny(tagging=1), ParamError,
     r"parameter 'tagging' = 1 is not allowed; expected true or false"),
    # the pollution cap
    ("pollution-cap-zero", lambda t: tiny(cleanup, pollution_cap=0.0), ParamError,
     r"parameter 'pollution_cap' = 0\.0 is not allowed; expected a number in \(0\.0, 1\.0\]"),
    # registry, batching, rendering
    ("unknown-game", lambda t: envs.make("harvest_v1"), ParamError,
     r"unknown game 'harvest_v1'; did you mean 'harvest_v0'"),
    ("unknown-game-vector", lambda t: envs.make_vector("tetris", 2), ParamError,
     r"unknown game 'tetris' \(registered: harvest_v0, cleanup_v0, matrix_v0\)"),
    ("num-envs-zero", lambda t: harvest.vector_env(0, layout="harvest_tiny", num_agents=1, view_radius=2),
     ParamError, r"num_envs = 0 is not allowed; expected an integer >= 1"),
    ("render-mode", lambda t: harvest.parallel_env(render_mode="human", layout="harvest_tiny", num_agents=1),
     ParamError, r"parameter 'render_mode' = 'human' is not allowed"),
    # seeds -- envs/core.py copy_rngs
    ("seed-negative", lambda t: tiny().reset(seed=-1), ParamError,
     r"reset: seed = -1 is not allowed; expected a non-negative integer or None"),
    ("seed-float", lambda t: tiny().reset(seed=1.5), ParamError, r"seed = 1\.5"),
    ("seed-string", lambda t: tiny().reset(seed="0"), ParamError, r"seed = '0'"),
    ("seed-bool", lambda t: tiny().reset(seed=True), ParamError, r"seed = True"),
    ("parallel-seed-negative", lambda t: parallel().reset(seed=-3), ParamError, r"seed = -3"),
]


IDS = [c[0] for c in CASES]


@pytest.mark.parametrize(("make", "error", "match"), [c[1:] for c in CASES], ids=IDS)
def test_rejected_input_names_the_field(tmp_path, make, error, match):
    # source: envs/errors.py -- the message names the field, the value given and what is allowed
    with pytest.raises(error, match=match):
        make(tmp_path)


@pytest.mark.parametrize("make", [c[1] for c in CASES], ids=IDS)
def test_rejected_input_is_a_one_line_env_error(tmp_path, make):
    # source: envs/errors.py -- every user error is an EnvError so a CLI can print it as one line
    with pytest.raises(EnvError) as info:
        make(tmp_path)
    message = str(info.value)
    assert message and "\n" not in message
    assert isinstance(info.value, ValueError)  # envs/errors.py: EnvError derives from ValueError


def test_error_classes_form_one_hierarchy():
    # envs/errors.py: ParamError, LayoutError and ActionError are all EnvError
    for cls in (ParamError, LayoutError, ActionError):
        assert issubclass(cls, EnvError)
    assert envs.EnvError is EnvError  # re-exported by the package (envs/__init__.py __all__)


def test_valid_edges_are_accepted(tmp_path):
    # the bounds just inside each rejected case above are allowed (parameter tables)
    tiny(view_radius=9)  # max(H, W) of harvest_tiny
    tiny(num_agents=4)   # four spawn points
    tiny(tag_width=3, tag_cost=0.0, tagged_penalty=0.0, freeze_steps=0)
    tiny(regrow_table=[0.0, 1.0])
    tiny(cleanup, pollution_rate=0.0, growth_rate=1.0, pollution_cap=1.0)
    tiny(cleanup, pollution_cap=1e-6)
    tiny().reset(seed=0)
    tiny().reset(seed=np.int64(3))
