"""Every registered game passes PettingZoo's checkers and ours (envs.checks)."""

import pytest

import envs
from envs.checks import check_game

# small maps keep the checks quick; the bundled defaults are covered by test_layouts
PARAMS = {
    "harvest_v0": {"layout": "harvest_tiny", "num_agents": 3, "view_radius": 3},
    "cleanup_v0": {"layout": "cleanup_tiny", "num_agents": 3, "view_radius": 3},
    "matrix_v0": {},
}


@pytest.mark.filterwarnings("ignore:Observation numpy array is all zeros")  # matrix_v0: first round
@pytest.mark.parametrize("name", envs.GAMES, ids=envs.GAMES)
def test_every_check_passes(name):
    check_game(name, PARAMS[name])


@pytest.mark.parametrize("name", ["harvest_v0", "cleanup_v0"])
def test_checks_pass_with_full_view_and_no_tagging(name):
    check_game(name, {**PARAMS[name], "full_view": True, "tagging": False, "tag_width": 3}, cycles=100)
