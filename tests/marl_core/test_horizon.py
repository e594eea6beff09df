"""The episode end of our games (``horizon``) reaches the learner, and ``payoffs`` makes a matrix game custom.

Training runs go through the real trainer (``marl_core.train.run``) on matrix_v0 with tiny nets, many copies
and a few thousand env steps each (about a second per run). Q values are read from the policies the run
writes (``policies/<agent>.pt``: each agent's Q-network as the learner left it), on chosen observations.

Every expected value names its source: a paper, a textbook fact, "derived by hand in this test", or "ours
(no source)" for tolerances and budgets.
"""

from __future__ import annotations

import numpy as np
import pytest
import yaml

from envs.matrix_v0 import TABLES
from marl_core import train
from marl_core.ablation.spec import parse_spec
from marl_core.config import config_hash, dump_config, load_config, parse_config
from marl_core.errors import ConfigError
from marl_core.policy import AgentPolicy
from marl_core.team_env import make_team_env

AGENTS = ("agent_0", "agent_1")
COOPERATE, DEFECT = 0, 1

# The prisoner's dilemma with T, R, P, S = 5, 3, 1, 0 (Axelrod 1984, "The Evolution of Cooperation") in the
# custom layout of envs/matrix_v0.py: [r0(C,C), r1(C,C), r0(C,D), r1(C,D), r0(D,C), r1(D,C), r0(D,D), r1(D,D)]
PD_PAYOFFS = [3, 3, 0, 5, 5, 0, 1, 1]
PAYOFF_LOW, PAYOFF_HIGH = 0.0, 5.0          # S and T: Axelrod 1984
Q_TOL_PD = 0.5                              # ours (no source)

# Each agent's payoff depends on its own action only: action 0 pays 1, action 1 pays 0, whatever the other
# agent does (ours, chosen so the values do not depend on the other agent's learning).
OWN_ACTION_PAYOFFS = [1, 1,   # (0, 0): both took action 0
                      1, 0,   # (0, 1)
                      0, 1,   # (1, 0)
                      0, 0]   # (1, 1)
GAMMA = 0.9                                  # ours (no source)
Q_TOL_REPEATED = 0.1                         # ours (no source)


# ---------------------------------------------------------------------- helpers
def _matrix_config(params: dict, seed: int, total_steps: int, **learner) -> dict:
    """A small idqn run on matrix_v0: 32 copies, nets of width 16-32, one evaluation at the end (ours)."""
    return {
        "env": {"name": "matrix_v0", "num_envs": 32, "params": params},
        "learner": {"kind": "idqn", "hidden": 16, "batch_size": 64, "lr": 5e-3, "warmup_steps": 256,
                    "replay_size": 4096, "train_every": 1, "updates_per_round": 2, "target_update_every": 50,
                    "eps_start": 1.0, "eps_end": 0.1, "eps_decay_steps": 2048, **learner},
        "train": {"total_steps": total_steps, "seed": seed, "eval_every": total_steps, "eval_episodes": 2,
                  "checkpoint_every": total_steps},
        "log": {"tensorboard": False, "gif_every": 0, "progress": False},
    }


def _q_values(run_dir, obs: np.ndarray) -> dict[str, np.ndarray]:
    """Each agent's Q values (K, A) on the observations ``obs`` (K, 4), from the run's saved Q-networks."""
    return {a: AgentPolicy.load(run_dir / "policies" / f"{a}.pt").scores(obs).numpy() for a in AGENTS}


def _one_hot(a0: int, a1: int) -> np.ndarray:
    """matrix_v0's observation after the joint action (a0, a1): entry i * A + a_i is 1 (module docstring)."""
    out = np.zeros(4, np.uint8)
    out[[a0, 2 + a1]] = 1
    return out


FIRST_ROUND = np.zeros((1, 4), np.uint8)    # module docstring: all zeros before the first round
JOINTS = [(0, 0), (0, 1), (1, 0), (1, 1)]
SECOND_ROUND = np.stack([_one_hot(*j) for j in JOINTS])  # never all zeros: one 1 per agent


# ---------------------------------------------------------------------- how the end reaches the trainer
@pytest.mark.parametrize(("horizon", "terminated"), [("terminal", True), ("time_limit", False)])
def test_team_env_passes_the_horizon_to_the_trainer(horizon, terminated):
    env = make_team_env("matrix_v0", {"max_cycles": 2, "horizon": horizon}, num_envs=3, seed=0)
    env.reset()
    first = env.step(np.zeros((3, 2), np.int64))
    assert not first.end.any() and not first.terminated.any()
    last = env.step(np.zeros((3, 2), np.int64))
    assert last.end.all()
    # marl_core/team_env.py, Step: terminated masks the bootstrap; truncated = end and not terminated
    np.testing.assert_array_equal(last.terminated, np.full((3, 2), terminated))
    np.testing.assert_array_equal(last.truncated, np.full((3, 2), not terminated))


def test_horizon_defaults_resolve_per_game():
    # envs/matrix_v0.py docstring: "terminal" by default; envs/grid.py docstring: "time_limit" by default
    assert parse_config({"env": {"name": "matrix_v0"}}).env.params["horizon"] == "terminal"
    assert parse_config({"env": {"name": "harvest_v0"}}).env.params["horizon"] == "time_limit"
    assert parse_config({"env": {"name": "cleanup_v0"}}).env.params["horizon"] == "time_limit"


def test_bad_horizon_in_a_config_is_one_line_naming_key_value_and_choices():
    with pytest.raises(ConfigError) as err:
        parse_config({"env": {"name": "matrix_v0"}}, ["env.params.horizon=episodic"])
    # marl_core/config.py docstring: one line naming the dotted key, the value and what is allowed
    assert str(err.value) == ("env.params.horizon = 'episodic' is not allowed: expected one of 'terminal', "
                              "'time_limit'")


# ---------------------------------------------------------------------- the one-shot prisoner's dilemma
@pytest.mark.parametrize("seed", range(5))
def test_one_shot_prisoners_dilemma_learns_to_defect_with_q_in_the_payoff_range(tmp_path, seed):
    cfg = parse_config(_matrix_config({"max_cycles": 1}, seed, total_steps=4096))
    assert cfg.env.params["horizon"] == "terminal"          # envs/matrix_v0.py docstring: the default
    summary = train.run(cfg, tmp_path / "run")
    q = _q_values(tmp_path / "run", FIRST_ROUND)             # the only observation of a one-shot game
    # Derived by hand in this test: against a partner who cooperates with probability p, cooperating earns
    # 3p (R = 3, S = 0) and defecting 1 + 4p (T = 5, P = 1; Axelrod 1984); so Q(C) lies in [0, 3], Q(D) in
    # [1, 5], and Q(D) - Q(C) = 1 + p >= 1 whatever p is: defection is dominant (textbook fact, Axelrod 1984).
    for agent in AGENTS:
        qc, qd = q[agent][0]
        assert qd > qc, f"seed {seed}: {agent}'s greedy action is cooperate (Q = {q[agent][0]})"
        assert PAYOFF_LOW - Q_TOL_PD <= qc <= 3.0 + Q_TOL_PD, (seed, agent, q[agent][0])
        assert 1.0 - Q_TOL_PD <= qd <= PAYOFF_HIGH + Q_TOL_PD, (seed, agent, q[agent][0])
        assert qd - qc >= 1.0 - Q_TOL_PD, (seed, agent, q[agent][0])
    # greedy evaluation (learner.eval_eps = 0): mutual defection pays P = 1 each (Axelrod 1984)
    assert summary["returns"] == {agent: pytest.approx(1.0) for agent in AGENTS}


# ---------------------------------------------------------------------- a tiny finite repeated game
def _repeated_run(tmp_path, horizon: str, seed: int):
    """Two rounds of OWN_ACTION_PAYOFFS, gamma 0.9. The values do not depend on the behaviour policy, so
    exploration stays high (eps_end 0.5, ours) to visit every second-round observation often."""
    params = {"payoffs": OWN_ACTION_PAYOFFS, "max_cycles": 2, "horizon": horizon}
    cfg = parse_config(_matrix_config(params, seed, total_steps=6144, gamma=GAMMA, hidden=32, eps_end=0.5))
    assert cfg.env.params["game"] == "custom"               # envs/matrix_v0.py: payoffs without game
    out = tmp_path / f"run_{horizon}"
    train.run(cfg, out)
    return _q_values(out, np.concatenate([FIRST_ROUND, SECOND_ROUND]))


@pytest.mark.parametrize("seed", [0, 1])
def test_two_round_game_learns_the_hand_computed_q_values(tmp_path, seed):
    # Derived by hand in this test (terminal horizon: the episode ends after round 2, no bootstrap past it):
    #   round 2, any observation:  Q(a0) = 1,                  Q(a1) = 0
    #   round 1 (all zeros):       Q(a0) = 1 + 0.9 * 1 = 1.9,  Q(a1) = 0 + 0.9 * 1 = 0.9
    # (round 1's next state is a round-2 observation, worth max(1, 0) = 1 whatever the other agent did; the
    # first-round observation is all zeros and a second-round one never is, so the net can tell them apart).
    hand = np.array([[1.9, 0.9]] + [[1.0, 0.0]] * len(JOINTS))
    terminal = _repeated_run(tmp_path, "terminal", seed)
    for agent in AGENTS:
        err = np.abs(terminal[agent] - hand)
        assert err.max() <= Q_TOL_REPEATED, f"seed {seed}, {agent}: learned {terminal[agent].round(3).tolist()}"

    # With horizon "time_limit" the learner bootstraps from the final observation (a round-2-like one-hot), as
    # if the game went on: derived by hand in this test, the fixed point is Q(a0) = 1 / (1 - 0.9) = 10 and
    # Q(a1) = 0.9 * 10 = 9 on every observation. A short run is on its way there: visibly above 1.9.
    time_limit = _repeated_run(tmp_path, "time_limit", seed)
    for agent in AGENTS:
        q1 = time_limit[agent][0]
        assert q1[0] >= hand[0, 0] + 1.0, f"seed {seed}, {agent}: {q1.round(3).tolist()}"   # margin: ours
        assert q1[0] <= 10.0 + Q_TOL_PD, f"seed {seed}, {agent}: {q1.round(3).tolist()}"    # the fixed point
        assert (time_limit[agent] > terminal[agent] + 1.0).all()   # every value larger (margin: ours)


# ---------------------------------------------------------------------- payoffs make the game custom
def _matrix_file(tmp_path, params: dict | None = None):
    path = tmp_path / "matrix.yaml"
    data = {"env": {"name": "matrix_v0", "params": params or {"max_cycles": 1}}, "learner": {"kind": "idqn"}}
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def test_payoffs_override_makes_the_game_custom(tmp_path):
    cfg = load_config(_matrix_file(tmp_path), ["env.params.payoffs=[3,3,0,5,5,0,1,1]"])
    # envs/matrix_v0.py docstring: game is "custom" when payoffs is given and game is not
    assert cfg.env.params["game"] == "custom"
    assert cfg.env.params["payoffs"] == [float(v) for v in PD_PAYOFFS]
    env = make_team_env(cfg.env.name, cfg.env.params, num_envs=1, seed=0)
    # envs/matrix_v0.py docstring: [3, 3, 0, 5, 5, 0, 1, 1] is the prisoner's dilemma (Axelrod 1984 values)
    np.testing.assert_array_equal(env.game.payoff_table, np.asarray(TABLES["prisoners_dilemma"][1], np.float32))


def test_payoffs_written_in_the_file_make_the_game_custom(tmp_path):
    cfg = load_config(_matrix_file(tmp_path, {"payoffs": PD_PAYOFFS}))
    assert cfg.env.params["game"] == "custom"                # envs/matrix_v0.py docstring


@pytest.mark.parametrize("where", ["file", "override"])
def test_a_bundled_game_with_payoffs_stays_an_error(tmp_path, where):
    if where == "file":
        path, overrides = _matrix_file(tmp_path, {"game": "stag_hunt", "payoffs": PD_PAYOFFS}), []
    else:
        path = _matrix_file(tmp_path)
        overrides = ["env.params.game=stag_hunt", "env.params.payoffs=[3,3,0,5,5,0,1,1]"]
    with pytest.raises(ConfigError) as err:
        load_config(path, overrides)
    # marl_core/config.py docstring: one line naming the key, the value and what is allowed
    assert str(err.value) == ("env.params: matrix_v0: parameter 'game' = 'stag_hunt' is not allowed together "
                              "with 'payoffs'; expected 'custom' or leave 'game' out")


def test_a_custom_run_config_round_trips_and_resumes(tmp_path):
    """A run made with the payoffs override writes game: custom to config.yaml; that file loads back to the same
    config (same hash) and the finished run resumes (returns its summary)."""
    base = _matrix_config({"max_cycles": 1}, seed=0, total_steps=256, warmup_steps=64)
    path = tmp_path / "base.yaml"
    path.write_text(yaml.safe_dump(base, sort_keys=False))
    cfg = load_config(path, ["env.params.payoffs=[3,3,0,5,5,0,1,1]"])
    out = tmp_path / "run"
    summary = train.run(cfg, out)
    written = yaml.safe_load((out / "config.yaml").read_text())["env"]["params"]
    assert written["game"] == "custom" and written["payoffs"] == [float(v) for v in PD_PAYOFFS]
    again = train.load_run(out)
    assert again == cfg and config_hash(again) == config_hash(cfg)
    assert train.resume(out) == summary


def test_a_resolved_default_config_needs_game_custom_with_new_payoffs(tmp_path):
    """Our choice (no source): a resolved config.yaml names its game (prisoners_dilemma by default), and the
    file cannot tell a written-out default from a user's choice, so new payoffs on top of it also need
    ``env.params.game=custom``; the error says so."""
    path = tmp_path / "config.yaml"
    dump_config(parse_config({"env": {"name": "matrix_v0"}}), path)
    with pytest.raises(ConfigError, match=r"'game' = 'prisoners_dilemma' is not allowed together with "
                                          r"'payoffs'; expected 'custom' or leave 'game' out$"):
        load_config(path, ["env.params.payoffs=[3,3,0,5,5,0,1,1]"])
    cfg = load_config(path, ["env.params.game=custom", "env.params.payoffs=[3,3,0,5,5,0,1,1]"])
    assert cfg.env.params["game"] == "custom"


def test_a_sweep_arm_with_payoffs_makes_the_game_custom():
    base = {"env": {"name": "matrix_v0", "params": {"max_cycles": 1}}, "learner": {"kind": "idqn"}}
    sweep = parse_spec({"base": base, "seeds": [0], "arms": {"pd": {}, "own": {
        "env.params.payoffs": OWN_ACTION_PAYOFFS}}, "baseline": "pd"})
    games = {run.arm: run.config.env.params["game"] for run in sweep.runs}
    # envs/matrix_v0.py docstring: the default game, and "custom" when payoffs is given without game
    assert games == {"pd": "prisoners_dilemma", "own": "custom"}
