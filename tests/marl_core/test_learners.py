"""Learners (``marl_core.learners.idqn``, ``marl_core.learners.maddpg``) built from a TeamSpec and trained by the real trainer.

Every learner x parameter-sharing x critic combination trains a few hundred env steps on harvest and on
cleanup through ``marl_core.train.run``; the run directory is then read back the way a user would: the
checkpoint into a fresh learner, each agent's policy file on its own. Smaller tests hold the learners to
what they promise: parameter sharing shares, the IDQN loss is the (Double) DQN target under the Huber loss,
MADDPG actors act without the critic while the critic sees the joint action, and every rejected input gets
one ``pytest.raises`` test on its message.
"""

import json
import shutil

import numpy as np
import pytest
import torch

import envs.harvest_v0 as harvest
from envs.metrics import METRIC_NAMES
from marl_core.config import config_to_dict, parse_config
from marl_core.errors import CheckpointError, ConfigError
from marl_core.learners import build_learner
from marl_core.learners.maddpg import AUTO_CRITIC_INPUT, critic_input_shape, resolve_critic_input
from marl_core.nets import AgentNet
from marl_core.policy import AgentPolicy
from marl_core.spec import TeamSpec
from marl_core.targets import one_hot
from marl_core.team_env import make_team_env
from marl_core.train import CHECKPOINT_FORMAT, evaluate_run, load_run, run

LAYOUTS = {"harvest_v0": "harvest_tiny", "cleanup_v0": "cleanup_tiny"}
GAMES = list(LAYOUTS)
CARTPOLE = "gymnasium:CartPole-v1"
HIDDEN = 16
NET = {"hidden": HIDDEN, "conv_channels": [4, 8]}


def game_params(game: str, num_agents: int = 2) -> dict:
    return {"layout": LAYOUTS[game], "num_agents": num_agents, "view_radius": 2, "max_cycles": 50}


def run_config(game: str, learner: dict, log: dict | None = None, num_agents: int = 2) -> dict:
    """A run of 300 env steps over 2 copies: an update every 3rd vector step from env step 100, evaluations
    and checkpoints at 150 and 300 (kept small so the whole file stays fast)."""
    return {
        "env": {"name": game, "params": game_params(game, num_agents), "num_envs": 2},
        "learner": {"warmup_steps": 100, "train_every": 3, "batch_size": 16, "replay_size": 2000, **NET,
                    **learner},
        "train": {"total_steps": 300, "eval_every": 150, "eval_episodes": 2,
                  "checkpoint_every": 150, "seed": 0},
        "log": {"tensorboard": False, "gif_every": 0, "progress": False, **(log or {})},
    }


def learner_config(kind: str, **keys):
    """A validated learner config (the ``learner`` section of a RunConfig)."""
    return parse_config({"learner": {"kind": kind, **NET, **keys}}).learner


def game_spec(game: str = "harvest_v0", num_agents: int = 2) -> TeamSpec:
    return make_team_env(game, game_params(game, num_agents), 1, 0).spec


def observations(game: str, params: dict, steps: int = 6, seed: int = 11) -> np.ndarray:
    """A fixed batch of real team observations (K, N, *obs_shape): a few random steps of 4 copies."""
    env = make_team_env(game, params, 4, seed)
    rng = np.random.default_rng(seed)
    obs, _ = env.reset()
    out = [obs]
    for _ in range(steps - 1):
        st = env.step(rng.integers(env.spec.num_actions, size=(4, env.spec.num_agents)))
        out.append(st.next_obs)
    env.close()
    return np.concatenate(out)


def fake_batch(spec: TeamSpec, K: int, seed: int, with_state: bool = False) -> dict[str, np.ndarray]:
    """A replay batch in the format of ``Replay.sample`` with random contents."""
    rng = np.random.default_rng(seed)
    N = spec.num_agents

    def obs():
        if spec.obs_dtype == np.uint8:
            return rng.integers(0, 2, size=(K, N, *spec.obs_shape)).astype(np.uint8)
        return rng.normal(size=(K, N, *spec.obs_shape)).astype(spec.obs_dtype)

    batch = {
        "obs": obs(), "next_obs": obs(),
        "actions": rng.integers(spec.num_actions, size=(K, N)).astype(np.int64),
        "returns": rng.normal(size=(K, N)).astype(np.float32),
        "discounts": np.where(rng.random((K, N)) < 0.2, 0.0, 0.99).astype(np.float32),
        "weights": rng.uniform(0.2, 1.0, size=K).astype(np.float32),
        "indices": np.arange(K, dtype=np.int64),
    }
    if with_state:
        shape = spec.state_space.shape
        batch["state"] = rng.integers(0, 2, size=(K, *shape)).astype(spec.state_space.dtype)
        batch["next_state"] = rng.integers(0, 2, size=(K, *shape)).astype(spec.state_space.dtype)
    return batch


def team_nets(learner):
    """The nets that act: IDQN's Q-networks or MADDPG's actors (an ``AgentNets``)."""
    return learner.q if learner.kind == "idqn" else learner.actors


def n_params(module: torch.nn.Module) -> int:
    return sum(p.numel() for p in module.parameters())


# ---------------------------------------------------------------------------------------------- TeamSpec
@pytest.mark.parametrize("game", GAMES)
def test_spec_of_our_games(game):
    spec = game_spec(game, num_agents=3)
    assert spec.agents == ("agent_0", "agent_1", "agent_2")
    # view_radius 2: a (2r + 1) x (2r + 1) = 5 x 5 window (hand-computed from the game's docstring)
    assert spec.obs_shape[1:] == (5, 5) and spec.is_image and spec.obs_dtype == np.uint8
    assert spec.state_space is not None
    for kind, extra in [("idqn", {}), ("maddpg", {"critic_input": "state"})]:
        learner = build_learner(spec, learner_config(kind, **extra), seed=0)
        actions = learner.act(observations(game, game_params(game, 3), steps=1), explore=True)
        assert actions.shape == (4, 3) and actions.dtype == np.int64
        assert ((actions >= 0) & (actions < spec.num_actions)).all()


@pytest.mark.parametrize("kind", ["idqn", "maddpg"])
def test_spec_of_a_gymnasium_env_and_a_vector_learner(kind):
    env = make_team_env(CARTPOLE, {}, 2, 0)
    spec = env.spec
    # gymnasium registry: CartPole has Box(4,) observations and Discrete(2) actions; our one-agent team
    assert spec.agents == ("agent_0",) and spec.obs_shape == (4,) and spec.num_actions == 2
    assert spec.state_space is None and not spec.is_image
    learner = build_learner(spec, learner_config(kind), seed=0)
    obs, _ = env.reset()
    env.close()
    assert learner.act(obs, explore=False).shape == (2, 1)
    stats = learner.update(fake_batch(spec, 8, seed=0))
    assert stats and all(np.isfinite(v) for v in stats.values())
    policy = learner.agent_policy(0)
    assert policy.act(obs[:, 0]).shape == (2,)


# ---------------------------------------------------------------------------------------------- the trainer
IDQN_CASES = [
    pytest.param({"share_parameters": False, "double": False}, id="idqn-indep-dqn"),
    pytest.param({"share_parameters": False, "double": True, "prioritized": True}, id="idqn-indep-double-per"),
    pytest.param({"share_parameters": True, "double": True, "dueling": True, "n_step": 3, "prioritized": True},
                 id="idqn-shared-double-dueling-nstep3-per"),
]
MADDPG_CASES = [
    pytest.param({"share_parameters": share, "critic": critic, "critic_input": source},
                 id=f"maddpg-{'shared' if share else 'indep'}-critic_{critic}-{source}")
    for share in (False, True) for critic in ("one_network", "per_agent") for source in ("observations", "state")
]
# TensorBoard with a GIF at every evaluation in one case; three agents in two of the cases with a shared net
LOGGED = "idqn-shared-double-dueling-nstep3-per-harvest_v0"
THREE_AGENTS = ("idqn-shared-double-dueling-nstep3-per", "maddpg-shared-critic_one_network-observations")


@pytest.mark.parametrize("game", GAMES)
@pytest.mark.parametrize("learner", [*IDQN_CASES, *MADDPG_CASES])
def test_trains_through_the_trainer_and_reloads(game, learner, tmp_path, request):
    kind = "maddpg" if "critic" in learner else "idqn"
    case = request.node.callspec.id
    logged = case == LOGGED
    num_agents = 3 if case.startswith(THREE_AGENTS) else 2
    log = {"tensorboard": True, "gif_every": 1} if logged else None
    cfg = parse_config(run_config(game, {"kind": kind, **learner}, log, num_agents))
    out = tmp_path / "run"
    summary = run(cfg, out)

    # the run directory (marl_core.train docstring)
    for name in ("config.yaml", "metrics.jsonl", "summary.json", "checkpoints/last.pt"):
        assert (out / name).is_file(), name
    spec = game_spec(game, num_agents)
    assert spec.num_agents == num_agents
    for agent in spec.agents:
        assert (out / "policies" / f"{agent}.pt").is_file()
    assert config_to_dict(load_run(out)) == config_to_dict(cfg)  # config.yaml reads back as the same config
    if logged:
        from tensorboard.backend.event_processing.event_accumulator import EventAccumulator

        events = EventAccumulator(str(out), size_guidance={"images": 0})
        events.Reload()
        assert "eval/episode" in events.Tags()["images"]  # the GIF of an evaluation episode
        assert "eval/efficiency" in events.Tags()["scalars"]
    else:
        assert not list(out.glob("events.out.tfevents.*"))

    # summary.json contract (marl_core.train docstring)
    on_disk = json.loads((out / "summary.json").read_text())
    for data in (summary, on_disk):
        for key in ("env_steps", "episodes", "returns", *METRIC_NAMES, "random"):
            assert key in data, key
        assert data["env_steps"] == 300
        assert data["episodes"] == 300 // 50  # 2 copies x 150 steps, episodes of max_cycles = 50 steps
        assert set(data["returns"]) == set(spec.agents)
        for key in ("returns", *METRIC_NAMES):
            assert key in data["random"], key
    rows = [json.loads(line) for line in (out / "metrics.jsonl").read_text().splitlines()]
    assert [r["env_steps"] for r in rows] == [150, 300]
    # evaluate_run replays the last evaluation: greedy actors, the same evaluation seeds (marl_core.train)
    again = evaluate_run(out)
    assert again["env_steps"] == 300
    for key in ("returns", *METRIC_NAMES):
        assert again[key] == pytest.approx(summary[key], nan_ok=True), key

    # the checkpoint, loaded into a fresh learner built from the same spec and config
    ckpt = torch.load(out / "checkpoints" / "last.pt", weights_only=True)
    assert ckpt["counters"]["env_steps"] == 300
    assert ckpt["learner"]["updates"] > 0
    untrained = build_learner(spec, cfg.learner, seed=cfg.train.seed)  # the trained one's initial weights
    fresh = build_learner(spec, cfg.learner, seed=cfg.train.seed + 1)
    fresh.load_state_dict(ckpt["learner"])
    obs = observations(game, cfg.env.params)
    K, N = obs.shape[:2]
    with torch.no_grad():
        scores = team_nets(fresh)(torch.as_tensor(obs))
        assert not torch.allclose(scores, team_nets(untrained)(torch.as_tensor(obs)))  # it has learnt
    greedy = fresh.act(obs, explore=False)
    assert greedy.shape == (K, N)

    # each agent's policy file alone, from its own local observations (K, *obs_shape)
    for i, agent in enumerate(spec.agents):
        policy = AgentPolicy.load(out / "policies" / f"{agent}.pt")
        assert policy.agent == agent and policy.kind == ("q" if kind == "idqn" else "actor")
        torch.testing.assert_close(policy.scores(obs[:, i]), scores[:, i], rtol=1e-5, atol=1e-5)
        actions = policy.act(obs[:, i])
        assert actions.shape == (K,)
        np.testing.assert_array_equal(actions, greedy[:, i])


def test_trainer_on_a_gymnasium_env(tmp_path):
    data = run_config("harvest_v0", {"kind": "idqn", "eps_decay_steps": 200})
    data["env"] = {"name": CARTPOLE, "num_envs": 2}
    summary = run(parse_config(data), tmp_path / "run")
    assert summary["env_steps"] == 300 and set(summary["returns"]) == {"agent_0"}
    policy = AgentPolicy.load(tmp_path / "run" / "policies" / "agent_0.pt")
    assert policy.act(np.zeros((3, 4), np.float32)).shape == (3,)


# ---------------------------------------------------------------------------------------------- sharing
@pytest.mark.parametrize("kind", ["idqn", "maddpg"])
def test_parameter_sharing_is_one_net_with_an_id_input(kind):
    N = 3
    spec = game_spec("harvest_v0", N)
    shared = team_nets(build_learner(spec, learner_config(kind, share_parameters=True), seed=0))
    separate = team_nets(build_learner(spec, learner_config(kind, share_parameters=False), seed=0))
    assert len(shared.nets) == 1 and len(separate.nets) == N
    # hand-computed from marl_core/nets.py: the shared net is one agent's net whose trunk takes N more inputs
    # (the id one-hot), i.e. N * hidden more weights
    assert n_params(shared) == n_params(separate) // N + N * HIDDEN

    obs = observations("harvest_v0", game_params("harvest_v0", N), steps=2)
    same = np.repeat(obs[:, :1], N, axis=1)  # every agent sees agent 0's observation
    with torch.no_grad():
        out = shared(torch.as_tensor(same))
    for i in range(1, N):  # the id one-hot changes the output: same observation, different agents
        assert not torch.allclose(out[:, 0], out[:, i])


@pytest.mark.parametrize("share", [False, True], ids=["indep", "shared"])
@pytest.mark.parametrize("kind", ["idqn", "maddpg"])
def test_each_agent_acts_from_its_own_observation(kind, share):
    spec = game_spec("harvest_v0", 3)
    learner = build_learner(spec, learner_config(kind, share_parameters=share), seed=0)
    obs = observations("harvest_v0", game_params("harvest_v0", 3), steps=2)
    changed = obs.copy()
    changed[:, 1:] = 1 - changed[:, 1:]  # every other agent's observation changes
    with torch.no_grad():
        a = team_nets(learner)(torch.as_tensor(obs))
        b = team_nets(learner)(torch.as_tensor(changed))
    torch.testing.assert_close(a[:, 0], b[:, 0])  # agent 0's output depends on o_0 alone
    assert not torch.allclose(a[:, 1], b[:, 1])


# ---------------------------------------------------------------------------------------------- IDQN loss
def _huber(x: torch.Tensor) -> torch.Tensor:
    # Huber with delta 1 (Mnih et al. 2015 TD clipping; docs/sources.md, "DQN"), written out here rather than
    # imported
    return torch.where(x.abs() <= 1, 0.5 * x ** 2, x.abs() - 0.5)


@pytest.mark.parametrize("double", [False, True], ids=["dqn", "double"])
def test_idqn_loss_is_the_huber_loss_of_the_dqn_target(double):
    spec = game_spec("harvest_v0", 2)
    learner = build_learner(spec, learner_config("idqn", double=double, grad_clip=None), seed=0)
    with torch.no_grad():  # a target net different from the online one, so DQN and Double DQN targets differ
        gen = torch.Generator().manual_seed(1)
        for p in learner.target.parameters():
            p.add_(torch.randn(p.shape, generator=gen) * 0.5)
    batch = fake_batch(spec, 32, seed=2)
    t = {k: torch.as_tensor(v) for k, v in batch.items()}
    with torch.no_grad():
        q_next_target = learner.target(t["next_obs"])
        q_next_online = learner.q(t["next_obs"])
        q = learner.q(t["obs"]).gather(-1, t["actions"].unsqueeze(-1)).squeeze(-1)
    assert (q_next_online.argmax(-1) != q_next_target.argmax(-1)).any()
    # DQN (Mnih et al. 2015): y = G + d max_a Q_target(s', a)
    y_dqn = t["returns"] + t["discounts"] * q_next_target.max(-1).values
    # Double DQN (van Hasselt et al. 2016): y = G + d Q_target(s', argmax_a Q_online(s', a))
    best = q_next_target.gather(-1, q_next_online.argmax(-1, keepdim=True)).squeeze(-1)
    y_double = t["returns"] + t["discounts"] * best
    y = y_double if double else y_dqn
    # loss: importance-weighted mean over transitions of the mean Huber loss over agents (Schaul et al. 2016)
    expected = (_huber(q - y).mean(dim=1) * t["weights"]).mean()
    other = (_huber(q - (y_dqn if double else y_double)).mean(dim=1) * t["weights"]).mean()
    assert abs(float(expected) - float(other)) > 1e-4  # the batch tells the two targets apart

    stats = learner.update(batch)
    assert stats["loss"] == pytest.approx(float(expected), rel=1e-5)
    # priorities: mean |TD error| over agents per transition (marl_core.targets.td_priorities)
    np.testing.assert_allclose(learner.priorities, (q - y).abs().mean(dim=1).numpy(), rtol=1e-5, atol=1e-6)


def test_idqn_target_net_is_copied_every_target_update_every_updates():
    spec = game_spec("harvest_v0", 2)
    learner = build_learner(spec, learner_config("idqn", target_update_every=3), seed=0)
    start = {k: v.clone() for k, v in learner.target.state_dict().items()}
    for u in range(3):
        learner.update(fake_batch(spec, 8, seed=u))
        target = learner.target.state_dict()
        if u < 2:  # unchanged until the third update (Mnih et al. 2015: a periodically copied target)
            assert all(torch.equal(target[k], start[k]) for k in start)
    online = learner.q.state_dict()
    assert all(torch.equal(learner.target.state_dict()[k], online[k]) for k in online)


# ---------------------------------------------------------------------------------------------- MADDPG
@pytest.mark.parametrize("share", [False, True], ids=["indep", "shared"])
def test_maddpg_actors_act_without_the_critic(share, tmp_path):
    spec = game_spec("cleanup_v0", 2)
    learner = build_learner(spec, learner_config("maddpg", share_parameters=share), seed=0)
    for u in range(3):
        learner.update(fake_batch(spec, 16, seed=u))
    obs = observations("cleanup_v0", game_params("cleanup_v0", 2), steps=3)
    before = learner.act(obs, explore=False)
    learner.critic = learner.target_critic = None  # evaluation needs the actors only
    np.testing.assert_array_equal(learner.act(obs, explore=False), before)

    for i, agent in enumerate(spec.agents):
        path = learner.agent_policy(i).save(tmp_path / "saved" / f"{agent}.pt")
        alone = tmp_path / f"alone_{i}"  # the policy file by itself: no critic, no checkpoint, no config
        alone.mkdir()
        shutil.copy(path, alone / "policy.pt")
        data = torch.load(alone / "policy.pt", weights_only=True)
        assert data["kind"] == "actor"
        net_keys = set(AgentNet(spec.obs_shape, spec.num_actions, HIDDEN, (4, 8),
                                spec.num_agents if share else 0).state_dict())
        assert set(data["weights"]) == net_keys  # an actor's weights and nothing of the critic
        policy = AgentPolicy.load(alone / "policy.pt")
        np.testing.assert_array_equal(policy.act(obs[:, i]), before[:, i])


@pytest.mark.parametrize("critic", ["one_network", "per_agent"])
def test_maddpg_critic_sees_the_joint_action(critic):
    spec = game_spec("harvest_v0", 2)
    learner = build_learner(spec, learner_config("maddpg", critic=critic, critic_input="observations"), seed=0)
    for u in range(5):
        learner.update(fake_batch(spec, 16, seed=u))
    batch = fake_batch(spec, 16, seed=99)
    obs = torch.as_tensor(batch["obs"])
    K, N, A = obs.shape[0], spec.num_agents, spec.num_actions
    x = obs.reshape(K, *critic_input_shape(spec, "observations"))
    actions = torch.as_tensor(batch["actions"])
    other = actions.clone()
    other[:, 1] = (other[:, 1] + 1) % A  # only agent 1's action changes
    with torch.no_grad():
        q = learner.critic(x, one_hot(actions, A).reshape(K, N * A))
        q_other = learner.critic(x, one_hot(other, A).reshape(K, N * A))
    assert q.shape == (K, N)
    # Lowe et al. 2017: Q_i(x, a_1, ..., a_N) is a function of every agent's action
    assert (q[:, 0] - q_other[:, 0]).abs().max() > 1e-6


# ---------------------------------------------------------------------------------------------- critic input
def _world(num_agents: int, state_layout: str, steps: int = 7, seed: int = 3):
    """Four copies of harvest_tiny after a few random steps (tagging on, so some agents may be frozen)."""
    game = harvest.vector_env(4, **game_params("harvest_v0", num_agents), state_layout=state_layout)
    game.reset(seed=seed)
    rng = np.random.default_rng(seed)
    for _ in range(steps):
        game.step(rng.integers(game.action_space.n, size=(4, num_agents)))
    return game


def _swap_agents(game, i: int, j: int) -> None:
    """The same world with agents i and j trading places, facings and freezes."""
    for name in ("cell", "facing", "out", "frozen_left"):
        a = getattr(game, name)
        a[:, [i, j]] = a[:, [j, i]]
    game._place_agents()


def _state_critic_values(layout: str, state: np.ndarray, actions: np.ndarray) -> torch.Tensor:
    N = actions.shape[1]
    spec = make_team_env("harvest_v0", {**game_params("harvest_v0", N), "state_layout": layout}, 1, 0).spec
    learner = build_learner(spec, learner_config("maddpg", critic_input="state"), seed=0)
    assert learner.critic_source == "state"
    x = learner._x({"state": state, "next_state": state}, "obs")
    with torch.no_grad():
        return learner.critic(x, one_hot(torch.as_tensor(actions), spec.num_actions).reshape(len(x), -1))


def test_maddpg_state_critic_tells_agents_apart():
    N = 3
    spec = game_spec("harvest_v0", N)
    # envs/grid.py docstring (state channels, per_agent): 5 map channels + 3 planes per agent over the map;
    # harvest_tiny is 9 x 9 (docs/games.md, "Maps")
    assert critic_input_shape(spec, "state") == (5 + 3 * N, 9, 9)
    game = _world(N, "per_agent")
    state = game.state()
    actions = np.random.default_rng(0).integers(spec.num_actions, size=(4, N))
    # swapping agents 0 and 1 in the world swaps their planes (channels 5..7 and 8..10), nothing else
    swapped = state.copy()
    swapped[:, 5:8], swapped[:, 8:11] = state[:, 8:11], state[:, 5:8]
    _swap_agents(game, 0, 1)
    assert np.array_equal(game.state(), swapped)
    assert (swapped != state).any(axis=(1, 2, 3)).all()  # in every copy the two agents differ somewhere
    q = _state_critic_values("per_agent", state, actions)
    q_swapped = _state_critic_values("per_agent", swapped, actions)
    assert q.shape == (4, N)
    # Q_i depends on where agent i is, not only on where some agent is (ours, no source: the reason for the
    # per-agent layout); every copy's Q_0 and Q_1 move
    assert ((q[:, :2] - q_swapped[:, :2]).abs() > 1e-6).all()


def test_anonymous_state_critic_cannot_tell_agents_apart():
    N = 3
    game = _world(N, "anonymous")
    state = game.state()
    assert state.shape[1:] == (9, 9, 9)  # envs/grid.py docstring (anonymous): 9 channels
    _swap_agents(game, 0, 1)
    # agents are anonymous in this layout: the swapped world has the same state, byte for byte
    assert np.array_equal(game.state(), state)
    actions = np.random.default_rng(0).integers(game.action_space.n, size=(4, N))
    q = _state_critic_values("anonymous", state, actions)
    assert torch.equal(q, _state_critic_values("anonymous", game.state(), actions))  # so Q_i cannot move


def test_maddpg_auto_critic_input():
    # auto = AUTO_CRITIC_INPUT where the env has a state (measured by scripts/compare_critic_inputs.py; the
    # figures are in the marl_core/learners/maddpg.py docstring), observations where it has none (CartPole)
    assert AUTO_CRITIC_INPUT == "observations"
    learner = build_learner(game_spec("harvest_v0", 2), learner_config("maddpg"), seed=0)
    assert learner.critic_source == AUTO_CRITIC_INPUT
    cartpole = make_team_env(CARTPOLE, {}, 1, 0).spec
    assert build_learner(cartpole, learner_config("maddpg"), seed=0).critic_source == "observations"
    assert resolve_critic_input("observations", True) == "observations"
    assert resolve_critic_input("state", True) == "state"


# ---------------------------------------------------------------------------------------------- rejected input
def test_state_critic_on_an_env_without_state_is_refused(tmp_path):
    data = run_config("harvest_v0", {"kind": "maddpg", "critic_input": "state"})
    data["env"] = {"name": CARTPOLE, "num_envs": 1}
    out = tmp_path / "run"
    with pytest.raises(ConfigError, match=r"learner\.critic_input = 'state' is not allowed: this env has no "
                                          r"state\(\)"):
        run(parse_config(data), out)
    assert not out.exists()  # refused before the run directory is made


def test_unknown_critic_input_is_refused_on_one_line():
    with pytest.raises(ConfigError) as err:
        resolve_critic_input("world", True)
    assert str(err.value) == ("learner.critic_input = 'world' is not allowed; expected one of 'auto', 'state', "
                              "'observations'")


def _policy_file(tmp_path) -> tuple:
    spec = game_spec("harvest_v0", 2)
    policy = build_learner(spec, learner_config("idqn"), seed=0).agent_policy(0)
    return policy, policy.save(tmp_path / "agent_0.pt")


def _foreign_dict(tmp_path):
    torch.save({"x": 1}, tmp_path / "p.pt")
    return tmp_path / "p.pt"


def _not_torch(tmp_path):
    (tmp_path / "p.pt").write_text("this is not a torch file\n")
    return tmp_path / "p.pt"


def _future_format(tmp_path):
    _, path = _policy_file(tmp_path)
    data = torch.load(path, weights_only=True)
    torch.save({**data, "format": 99}, path)
    return path


def _training_checkpoint(tmp_path):
    spec = game_spec("harvest_v0", 2)
    learner = build_learner(spec, learner_config("idqn"), seed=0)
    path = tmp_path / "last.pt"  # what checkpoints/last.pt holds (marl_core.train._Run.save_checkpoint)
    torch.save({"format": CHECKPOINT_FORMAT, "counters": {"env_steps": 0}, "learner": learner.state_dict()},
               path)
    return path


@pytest.mark.parametrize(("make", "message"), [
    pytest.param(_foreign_dict, r"is not a marl-core file \(no format version\)", id="foreign-dict"),
    pytest.param(_not_torch, r"is not a marl-core file", id="not-torch"),
    pytest.param(lambda p: p / "missing.pt", r"not found", id="missing"),
    pytest.param(_future_format, r"has format 99; this version reads format 1", id="future-format"),
    pytest.param(_training_checkpoint, r"policy .*last\.pt' is not an agent policy file", id="training-checkpoint"),
])
def test_loading_a_file_that_is_not_a_policy_is_refused(make, message, tmp_path):
    path = make(tmp_path)
    with pytest.raises(CheckpointError, match=message):
        AgentPolicy.load(path)


@pytest.mark.parametrize("bad", [
    pytest.param(lambda o: o[:, 0][0], id="no-batch-axis"),
    pytest.param(lambda o: o[:, 0][:, :, 1:], id="cropped-window"),
    pytest.param(lambda o: o, id="team-observations"),
])
def test_policy_refuses_observations_of_the_wrong_shape(bad, tmp_path):
    policy, path = _policy_file(tmp_path)
    obs = observations("harvest_v0", game_params("harvest_v0", 2), steps=1)
    expect = tuple(policy.obs_space["shape"])
    for p in (policy, AgentPolicy.load(path)):
        with pytest.raises(ValueError, match=rf"policy of agent_0: observations have shape .*; expected "
                                             rf"\({expect[0]}, {expect[1]}, {expect[2]}\)"):
            p.act(bad(obs))
