"""Baseline teams: which apply where, the batched scripted teams against the single-env ones, the landmark
walker on mpe2, and the baselines in summary.json and evaluate."""

import numpy as np
import pytest

import envs
from envs.scripted import batched_team, cleanup_team, greedy_team, restrained_team
from marl_core.baselines import KNOWN, landmark_walk, make_team, strongest, team_names
from marl_core.config import parse_config
from marl_core.errors import ConfigError
from marl_core.files import finite
from marl_core.rollout import evaluate, random_policy
from marl_core.team_env import make_team_env
from marl_core.train import evaluate_run, run

SPREAD = "mpe2.simple_spread_v3:parallel_env"


@pytest.mark.parametrize("env_name, teams", [
    ("harvest_v0", ("random", "stay", "greedy", "restrained")),
    ("cleanup_v0", ("random", "stay", "nobody_cleans", "one_cleaner")),
    ("matrix_v0", ("random",)),  # action 0 cooperates there: it is no no-op
    ("gymnasium:CartPole-v1", ("random",)),  # action 0 pushes left
    (SPREAD, ("random", "stay", "landmark_walk")),
], ids=lambda v: v if isinstance(v, str) else "")
def test_team_names(env_name, teams):
    assert team_names(env_name) == teams
    assert set(teams) <= set(KNOWN)


@pytest.mark.parametrize("game, name, single", [
    ("harvest_v0", "greedy", greedy_team),
    ("harvest_v0", "restrained", restrained_team),
    ("cleanup_v0", "nobody_cleans", lambda env: cleanup_team(env, cleaners=0)),
    ("cleanup_v0", "one_cleaner", lambda env: cleanup_team(env, cleaners=1)),
], ids=lambda v: v if isinstance(v, str) else "")
def test_batched_scripted_team_plays_each_copy_as_the_single_env_team_does(game, name, single):
    # copy b of vector_env(...).reset(seed=s) is parallel_env(...).reset(seed=s + b) (docs/games.md, tested in envs)
    B, seed, steps = 3, 7, 60
    vec = envs.make_vector(game, B, num_agents=3, max_cycles=steps)
    vec.reset(seed=seed)
    team = batched_team(vec, name)
    pars = [envs.make(game, num_agents=3, max_cycles=steps) for _ in range(B)]
    pols = [single(p) for p in pars]
    obs = [p.reset(seed=seed + b)[0] for b, p in enumerate(pars)]
    for _ in range(steps):
        actions = team()
        for b, (p, pol) in enumerate(zip(pars, pols)):
            want = pol(obs[b])
            assert [want[a] for a in p.possible_agents] == actions[b].tolist()
            obs[b] = p.step(want)[0]
        vec.step(actions)


def test_unknown_scripted_team_is_refused():
    vec = envs.make_vector("harvest_v0", 1)
    with pytest.raises(ValueError, match="scripted team = 'lazy' is not allowed; expected one of greedy"):
        batched_team(vec, "lazy")


def test_landmark_walk_moves_along_the_longer_axis_and_rests_when_close():
    # mpe2 simple_spread observation: [vel(2), pos(2), landmark offsets(2 per landmark), ...]; actions
    # 1/2 push -x/+x, 3/4 push -y/+y (mpe2._mpe_utils.simple_env, read in the installed sources)
    obs = np.zeros((1, 2, 12), np.float32)
    obs[0, 0, 4:6] = [1.0, 0.2]    # agent 0's landmark (landmark 0) lies to the right
    obs[0, 1, 6:8] = [0.0, -0.01]  # agent 1's landmark (landmark 1) is already under it
    assert landmark_walk(2)(obs).tolist() == [[2, 0]]
    obs[0, 0, 4:6] = [0.1, -0.6]
    obs[0, 1, 6:8] = [-0.5, 0.0]
    assert landmark_walk(2)(obs).tolist() == [[3, 1]]
    obs[0, 0, 0:2] = [0.0, -4.0]   # moving fast towards it: offset - 0.3 * velocity = (0.1, 0.6), brake (+y)
    assert landmark_walk(2)(obs)[0, 0] == 4


def test_landmark_walk_beats_random_and_stay_teams_on_mpe2_spread():
    env = make_team_env(SPREAD, {"N": 3, "max_cycles": 25, "continuous_actions": False}, 8, 0)
    walk = evaluate(env, landmark_walk(3), 40, 100)["return_mean"]
    stay = evaluate(env, make_team("stay", env, 0), 40, 100)["return_mean"]
    rand = evaluate(env, random_policy(5, 0), 40, 100)["return_mean"]
    env.close()
    # measured here over 100 episodes: walk -10.3, stay -23.5, random -26.0; margin 5 is ours (no source)
    assert walk > stay + 5.0 and walk > rand + 5.0, (walk, stay, rand)


def test_make_team_refuses_a_team_of_another_game():
    env = make_team_env("matrix_v0", {}, 2, 0)
    with pytest.raises(ConfigError, match="baseline team = 'greedy' is not allowed for env 'matrix_v0'"):
        make_team("greedy", env, 0)


def test_strongest_skips_missing_values():
    teams = {"random": {"efficiency": 0.1}, "stay": {"efficiency": float("nan")}, "greedy": {"efficiency": 0.4}}
    assert strongest(teams, "efficiency") == ("greedy", 0.4)
    assert strongest({"random": {"efficiency": None}}, "efficiency") is None


def _tiny(**train):
    return parse_config({
        "env": {"name": "harvest_v0", "num_envs": 2,
                "params": {"layout": "harvest_tiny", "num_agents": 2, "view_radius": 2, "max_cycles": 30}},
        "learner": {"kind": "idqn", "hidden": 16, "conv_channels": [4], "batch_size": 8, "warmup_steps": 20,
                    "replay_size": 500},
        "train": {"total_steps": 120, "eval_every": 120, "checkpoint_every": 120, "eval_episodes": 3, **train},
        "log": {"tensorboard": False, "gif_every": 0, "progress": False}})


def test_summary_and_evaluate_carry_every_baseline_on_the_same_episodes(tmp_path):
    summary = run(_tiny(), tmp_path / "r")
    keys = {"eval_episodes", "returns", "return_mean", "episode_length", "efficiency", "equality",
            "sustainability", "peace"}
    assert set(summary["baselines"]) == {"random", "stay", "greedy", "restrained"}
    for team, res in summary["baselines"].items():
        assert keys <= set(res), team
        assert res["eval_episodes"] == summary["eval_episodes"] == 3
    assert summary["random"] == summary["baselines"]["random"]
    assert summary["baselines"]["stay"]["return_mean"] == 0.0  # nobody moves, nobody picks
    ev = evaluate_run(tmp_path / "r", episodes=5)
    assert ev["eval_episodes"] == 5
    assert all(res["eval_episodes"] == 5 for res in ev["baselines"].values())
    # the baselines replay the summary's episodes exactly: same copies, same seeds, same episode count
    again = evaluate_run(tmp_path / "r", episodes=3)
    assert finite(again["baselines"]) == finite(summary["baselines"])  # NaN (nobody scores) -> None


def test_a_list_of_baselines_keeps_random_and_an_unknown_name_is_refused(tmp_path):
    summary = run(_tiny(baselines=["greedy"]), tmp_path / "r")
    assert list(summary["baselines"]) == ["random", "greedy"]
    with pytest.raises(ConfigError, match=r"train.baselines = 'lazy' is not allowed: expected 'auto' or a list"):
        _tiny(baselines=["lazy"])


def test_cli_table_shows_every_baseline_team_random_first():
    from marl_core.cli import _table

    row = {"return_mean": 1.0, "efficiency": 0.5, "equality": 1.0, "sustainability": None, "peace": 2.0}
    summary = {**row, "baselines": {"greedy": dict(row, efficiency=0.25, sustainability=float("nan")),
                                    "random": dict(row, efficiency=0.125)}}
    lines = _table(summary).splitlines()
    assert lines[0].split() == ["learned", "random", "greedy"]
    assert lines[2].split() == ["efficiency", "0.500", "0.125", "0.250"]
    assert lines[4].split() == ["sustainability", "n/a", "n/a", "n/a"]
    old = _table({**row, "random": dict(row, efficiency=0.125)})  # a summary from before baselines
    assert old.splitlines()[0].split() == ["learned", "random"]
