"""TeamEnv: one batched interface over our games, PettingZoo ParallelEnvs and gymnasium envs.

Each adapter is held against the raw env driven directly with the same seeds and actions, so the adapter
adds nothing to the dynamics; every rejected env gets one ``pytest.raises`` test on its message.
"""

import re

import gymnasium
import numpy as np
import pytest
from gymnasium import spaces
from pettingzoo.utils.env import ParallelEnv

import envs
from marl_core.errors import EnvAdapterError
from marl_core.hints import command
from marl_core.spec import TeamSpec
from marl_core.team_env import (
    GameTeamEnv,
    ParallelTeamEnv,
    Step,
    TeamEnv,
    make_team_env,
    random_actions,
)

SPREAD = "mpe2.simple_spread_v3:parallel_env"
TINY = dict(layout="harvest_tiny", num_agents=3, max_cycles=5, freeze_steps=2, tag_width=3, tag_length=4)


# ---------------------------------------------------------------------------------------------- our games
def test_game_shapes_lockstep_reset_and_frozen():
    B, T = 4, TINY["max_cycles"]
    env = make_team_env("harvest_v0", TINY, num_envs=B, seed=7)
    ref = envs.make_vector("harvest_v0", B, **TINY)  # the raw engine, driven the same way
    assert isinstance(env, GameTeamEnv) and isinstance(env, TeamEnv)
    assert env.spec.agents == ("agent_0", "agent_1", "agent_2")
    assert env.spec.obs_space is env.game.observation_space
    assert env.spec.obs_space == ref.observation_space
    assert env.spec.num_actions == ref.action_space.n == 6  # harvest_v0 docstring: 5 moves + tag

    obs, state = env.reset()  # first reset: the factory's seed
    ref_obs, _ = ref.reset(seed=7)
    assert obs.shape == (B, 3, *ref.observation_space.shape) and obs.dtype == np.uint8
    assert state.shape == (B, *ref.state_space.shape)
    np.testing.assert_array_equal(obs, ref_obs)
    np.testing.assert_array_equal(state, ref.state())

    rng = np.random.default_rng(0)
    any_frozen = False
    for _episode in range(3):
        for t in range(1, T + 1):
            actions = random_actions(env.spec, B, rng)
            actions[:, 0] = 5  # agent_0 keeps tagging, so somebody gets frozen
            step = env.step(actions)
            r_obs, r_rew, r_term, r_trunc, r_info = ref.step(actions)
            assert isinstance(step, Step)
            assert step.rewards.shape == (B, 3) and step.rewards.dtype == np.float32
            np.testing.assert_array_equal(step.obs, r_obs)  # the final obs where the episode ended
            np.testing.assert_array_equal(step.rewards, r_rew)
            np.testing.assert_array_equal(step.state, ref.state())
            np.testing.assert_array_equal(step.frozen, r_info["frozen"] > 0)
            assert set(step.infos) == set(ref.info_keys)
            assert not step.terminated.any()  # harvest_v0 docstring: no termination
            any_frozen |= bool(step.frozen.any())
            # end: every copy at once, exactly at max_cycles (harvest_v0 docstring: truncation)
            assert step.end.shape == (B,)
            assert step.end.all() == (t == T) and step.end.any() == (t == T)
            np.testing.assert_array_equal(step.truncated, r_trunc)
            if t < T:
                assert step.reset_obs is None and step.reset_state is None
            else:
                fresh, _ = ref.reset()  # unseeded: each copy's generator continues (envs/grid.py reset)
                np.testing.assert_array_equal(step.reset_obs, fresh)
                np.testing.assert_array_equal(step.reset_state, ref.state())
                np.testing.assert_array_equal(step.next_obs, fresh)
    assert any_frozen


def test_game_renders_any_copy():
    env = make_team_env("harvest_v0", TINY, num_envs=2, seed=0)
    env.reset()
    frame = env.render(1)
    assert frame.ndim == 3 and frame.shape[2] == 3 and frame.dtype == np.uint8
    with pytest.raises(IndexError, match="render index = 2"):
        env.render(2)


def test_parallel_adapter_over_our_facade_equals_the_fast_path():
    # Our own PettingZoo facade through the generic adapter must reproduce the batched engine, episodes and
    # auto-resets included (envs/core.py: copy b of a batch == a single env reset with seed + b).
    B = 2
    fast = make_team_env("harvest_v0", TINY, B, seed=3)
    slow = make_team_env("envs.harvest_v0:parallel_env", TINY, B, seed=3)
    assert isinstance(slow, ParallelTeamEnv)
    assert slow.spec.obs_shape == fast.spec.obs_shape and slow.spec.num_actions == fast.spec.num_actions
    assert slow.spec.state_space.shape == fast.spec.state_space.shape
    for a, b in zip(fast.reset(), slow.reset()):
        np.testing.assert_array_equal(a, b)
    rng = np.random.default_rng(1)
    for _ in range(2 * TINY["max_cycles"]):
        actions = random_actions(fast.spec, B, rng)
        f, s = fast.step(actions), slow.step(actions)
        for key in ("obs", "state", "rewards", "terminated", "end", "reset_obs", "reset_state"):
            np.testing.assert_array_equal(getattr(f, key), getattr(s, key), err_msg=key)
        assert s.infos == {} and not s.frozen.any()


# ---------------------------------------------------------------------------------------------- mpe2
def test_mpe2_spread_spec_from_raw_env():
    from mpe2 import simple_spread_v3

    raw = simple_spread_v3.parallel_env(max_cycles=25)
    env = make_team_env(SPREAD, {"max_cycles": 25}, num_envs=2, seed=0)
    assert env.spec.agents == tuple(raw.possible_agents) == ("agent_0", "agent_1", "agent_2")
    # mpe2 registry/spaces: simple_spread's discrete actions are Discrete(5) (no-op, left, right, down, up)
    assert raw.action_space("agent_0") == spaces.Discrete(5)
    assert env.spec.num_actions == 5
    # mpe2 registry/spaces: with N=3 an observation is 18 floats (own vel 2, pos 2, landmarks 3x2,
    # other agents 2x2, communication 2x2)
    assert raw.observation_space("agent_0").shape == (18,)
    assert env.spec.obs_shape == (18,) and env.spec.obs_dtype == np.float32
    assert env.spec.state_space.shape == raw.state_space.shape == (54,)  # mpe2 registry/spaces: 3 x 18
    env.close()


def test_mpe2_spread_equals_raw_env_and_ends_at_max_cycles():
    from mpe2 import simple_spread_v3

    B, T, seed = 2, 25, 5  # T: the max_cycles parameter
    env = make_team_env(SPREAD, {"max_cycles": T}, num_envs=B, seed=seed)
    raws = [simple_spread_v3.parallel_env(max_cycles=T) for _ in range(B)]
    agents = raws[0].possible_agents

    def stack(d):
        return np.stack([d[a] for a in agents])

    obs, state = env.reset()
    for b, raw in enumerate(raws):
        r_obs, _ = raw.reset(seed=seed + b)
        np.testing.assert_array_equal(obs[b], stack(r_obs))
        np.testing.assert_array_equal(state[b], raw.state())
    assert obs.shape == (B, 3, 18) and state.shape == (B, *env.spec.state_space.shape)

    rng = np.random.default_rng(2)
    for _episode in range(2):
        for t in range(1, T + 1):
            actions = random_actions(env.spec, B, rng)
            step = env.step(actions)
            assert step.end.all() == (t == T) and step.end.any() == (t == T)
            for b, raw in enumerate(raws):
                r_obs, r_rew, r_term, r_trunc, _ = raw.step({a: int(actions[b, i]) for i, a in enumerate(agents)})
                np.testing.assert_array_equal(step.obs[b], stack(r_obs))
                np.testing.assert_array_equal(step.rewards[b], np.float32([r_rew[a] for a in agents]))
                np.testing.assert_array_equal(step.terminated[b], [r_term[a] for a in agents])
                np.testing.assert_array_equal(step.state[b], raw.state())
                assert not raw.agents == (t < T)  # the raw env ends with the same step
                if t == T:
                    assert all(r_trunc.values()) and step.truncated[b].all()
                    fresh, _ = raw.reset()  # unseeded: the copy's generator continues
                    np.testing.assert_array_equal(step.reset_obs[b], stack(fresh))
                    np.testing.assert_array_equal(step.reset_state[b], raw.state())
            if t < T:
                assert step.reset_obs is None
    env.close()


def test_mpe2_first_copy_renders():
    env = make_team_env(SPREAD, {"max_cycles": 25}, num_envs=2, seed=0, render=True)
    env.reset()
    frame = env.render(0)
    assert frame.ndim == 3 and frame.shape[2] == 3
    assert env.render(1) is None  # only the first copy is made with render_mode="rgb_array"
    env.close()


# ---------------------------------------------------------------------------------------------- gymnasium
def test_cartpole_team_of_one_equals_raw_env():
    assert gymnasium.spec("CartPole-v1").max_episode_steps == 500  # gymnasium registry
    B, seed, steps = 3, 11, 120
    env = make_team_env("gymnasium:CartPole-v1", {}, num_envs=B, seed=seed)
    assert env.spec.agents == ("agent_0",) and env.spec.state_space is None
    assert env.spec.num_actions == 2 and env.spec.obs_shape == (4,)  # gymnasium CartPole docs: Discrete(2), (4,)
    raws = [gymnasium.make("CartPole-v1") for _ in range(B)]
    obs, state = env.reset()
    assert obs.shape == (B, 1, 4) and obs.dtype == np.float32 and state is None
    for b, raw in enumerate(raws):
        np.testing.assert_array_equal(obs[b, 0], raw.reset(seed=seed + b)[0])

    rng = np.random.default_rng(4)
    ends = [[] for _ in range(B)]
    for t in range(1, steps + 1):
        actions = random_actions(env.spec, B, rng)
        step = env.step(actions)
        assert step.obs.shape == (B, 1, 4) and step.state is None and step.infos == {}
        for b, raw in enumerate(raws):
            r_obs, r_rew, r_term, r_trunc, _ = raw.step(int(actions[b, 0]))
            np.testing.assert_array_equal(step.obs[b, 0], r_obs)
            assert step.rewards[b, 0] == np.float32(r_rew)
            assert step.terminated[b, 0] == r_term
            assert step.end[b] == (r_term or r_trunc)
            if step.end[b]:
                ends[b].append(t)
                np.testing.assert_array_equal(step.reset_obs[b, 0], raw.reset()[0])  # unseeded reset
        if step.end.any():
            kept = ~step.end
            np.testing.assert_array_equal(step.reset_obs[kept], step.obs[kept])
    assert all(len(e) >= 2 for e in ends)  # several episodes per copy under a random policy
    assert len({tuple(e) for e in ends}) == B  # copies end at different times
    env.close()


def test_cartpole_time_limit_is_truncation():
    # 5 steps are too few for a random CartPole to fall (pole limit 12 degrees): every end is truncation
    env = make_team_env("gymnasium:CartPole-v1", {"max_episode_steps": 5}, num_envs=2, seed=0)
    env.reset()
    rng = np.random.default_rng(0)
    for t in range(1, 11):
        step = env.step(random_actions(env.spec, 2, rng))
        assert step.end.all() == (t % 5 == 0) and not step.terminated.any()
        assert step.truncated.all() == (t % 5 == 0)


# ---------------------------------------------------------------------------------------------- errors
@pytest.mark.parametrize("name, params, message", [
    ("no_such_module_xyz:parallel_env", {}, "env.name = 'no_such_module_xyz:parallel_env': cannot import "
                                            "module 'no_such_module_xyz'"),
    ("mpe2.no_such_scenario_v0:parallel_env", {},  # the pip that installs into this env (marl_core/hints.py)
     re.escape(f'{command("pip")} install "marl-core[dev]" or {command("pip")} install mpe2')),
    ("mpe2.simple_spread_v3:no_such_factory", {}, "has no attribute 'no_such_factory'"),
    ("gymnasium:NoSuchEnv-v0", {}, "cannot make gymnasium env 'NoSuchEnv-v0'.*doesn't exist"),
    (SPREAD, {"continuous_actions": True}, r"agent_0 has action space Box.*needs a Discrete action space "
                                           r"\(drop continuous_actions=True\)"),
    ("gymnasium:Pendulum-v1", {}, r"action space Box\(-2.0, 2.0, \(1,\), float32\) is not supported; the "
                                  r"trainer needs a Discrete"),
    ("harvst_v0", {}, "env.name = 'harvst_v0' is not known; did you mean 'harvest_v0'"),
    (SPREAD, {"no_such_param": 1}, "cannot build the env with parameters"),
], ids=["unknown-module", "mpe2-pip-line", "no-callable", "bad-gym-id", "continuous-actions", "gym-box-actions",
        "unknown-name", "bad-factory-param"])
def test_rejected_envs(name, params, message):
    with pytest.raises(EnvAdapterError, match=message):
        make_team_env(name, params, num_envs=1, seed=0)


class _Toy(ParallelEnv):
    """Two agents; agent_1 leaves at step ``leave_at`` (0: never); ``obs_shapes`` per agent."""

    metadata = {"name": "toy_v0"}

    def __init__(self, leave_at=0, obs_shapes=((2,), (2,))):
        self.possible_agents = ["agent_0", "agent_1"]
        self._obs = {a: spaces.Box(0, 1, s, np.float32) for a, s in zip(self.possible_agents, obs_shapes)}
        self._act = spaces.Discrete(3)
        self.leave_at, self.t = leave_at, 0

    def observation_space(self, agent):
        return self._obs[agent]

    def action_space(self, agent):
        return self._act

    def _o(self):
        return {a: np.zeros(self._obs[a].shape, np.float32) for a in self.agents}

    def reset(self, seed=None, options=None):
        self.agents, self.t = list(self.possible_agents), 0
        return self._o(), {a: {} for a in self.agents}

    def step(self, actions):
        self.t += 1
        obs = self._o()
        term = {a: a == "agent_1" and self.t == self.leave_at for a in self.agents}
        self.agents = [a for a in self.agents if not term[a]]
        return obs, dict.fromkeys(term, 0.0), term, dict.fromkeys(term, False), {a: {} for a in term}


def test_agent_leaving_early_is_rejected():
    env = ParallelTeamEnv("toy", _Toy, {"leave_at": 2}, num_envs=2, seed=0)
    assert env.spec.state_space is None  # no state_space attribute
    env.reset()
    env.step(np.zeros((2, 2), int))
    with pytest.raises(EnvAdapterError, match="agent_1 left the episode at step 2 .*the trainer needs every "
                                              "agent to stay until the episode ends"):
        env.step(np.zeros((2, 2), int))


def test_different_observation_shapes_are_rejected():
    with pytest.raises(EnvAdapterError, match=r"observation spaces differ: agent_0 has shape \(2,\) float32, "
                                              r"agent_1 has shape \(3,\) float32"):
        ParallelTeamEnv("toy", _Toy, {"obs_shapes": ((2,), (3,))}, num_envs=1, seed=0)


def test_random_actions_cover_the_action_space():
    spec = TeamSpec(("a", "b"), spaces.Box(0, 1, (2,), np.float32), num_actions=4)
    a = random_actions(spec, 64, np.random.default_rng(0))
    assert a.shape == (64, 2) and a.dtype == np.int64
    assert set(np.unique(a)) == {0, 1, 2, 3}


# --------------------------------------------------------------- Discrete observations and AEC games
RPS = "pettingzoo.classic.rps_v2:parallel_env"  # PettingZoo's own rock-paper-scissors, Discrete(4) observations


def test_discrete_observations_are_one_hot_encoded():
    from pettingzoo.classic import rps_v2

    env = make_team_env(RPS, {}, 2, 0, with_state=False)
    try:
        assert env.spec.obs_shape == (4,) and env.spec.obs_dtype == np.uint8
        obs = env.reset()[0]
        raw = rps_v2.parallel_env().reset(seed=0)[0]  # the game's own first observation: 3 for every player
        assert obs.shape == (2, 2, 4) and (obs.sum(-1) == 1).all()
        assert (obs.argmax(-1) == np.array([[int(raw[a]) for a in ("player_0", "player_1")]] * 2)).all()
    finally:
        env.close()


def test_a_team_trains_on_rock_paper_scissors(tmp_path):
    from marl_core import train
    from marl_core.config import parse_config

    cfg = parse_config({"env": {"name": RPS, "num_envs": 2, "params": {"max_cycles": 20}},
                        "learner": {"kind": "idqn", "hidden": 16, "batch_size": 8, "warmup_steps": 20,
                                    "replay_size": 500},
                        "train": {"total_steps": 80, "eval_every": 80, "eval_episodes": 2, "checkpoint_every": 80},
                        "log": {"tensorboard": False, "gif_every": 0, "progress": False}})
    summary = train.run(cfg, tmp_path / "rps")
    assert summary["env_steps"] == 80 and summary["metrics"] == []  # a game we did not write: returns only


@pytest.mark.parametrize("name, message", [
    ("pettingzoo.classic.rps_v2:env", r"the factory returned an AEC env; this game also has a ParallelEnv "
                                      r"factory: use 'pettingzoo\.classic\.rps_v2:parallel_env'$"),
    ("pettingzoo.classic.tictactoe_v3:env", r"a turn-based \(AEC\) game with no ParallelEnv factory; the trainer "
                                            r"steps every agent at once"),
])
def test_turn_based_games_are_refused_in_one_line_with_what_works(name, message):
    with pytest.raises(EnvAdapterError, match=message) as info:
        make_team_env(name, {}, 1, 0, with_state=False)
    assert "\n" not in str(info.value)


class _Coded(_Toy):
    """_Toy with MultiDiscrete([3, 2]) observations: agent i sees [i + 1, 1]."""

    def __init__(self):
        super().__init__()
        self._obs = {a: spaces.MultiDiscrete([3, 2]) for a in self.possible_agents}

    def _o(self):
        return {a: np.array([i + 1, 1]) for i, a in enumerate(self.agents)}


def test_multidiscrete_observations_are_one_hot_blocks():
    env = ParallelTeamEnv("coded", _Coded, {}, num_envs=1, seed=0)
    assert env.spec.obs_shape == (5,)  # 3 + 2
    obs = env.reset()[0][0]
    # agent_0: [1, 1] -> block one [0, 1, 0], block two [0, 1]; agent_1: [2, 1] -> [0, 0, 1], [0, 1]
    assert obs.tolist() == [[0, 1, 0, 0, 1], [0, 0, 1, 0, 1]]
