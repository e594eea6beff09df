"""The on-policy learner (marl_core/learners/ppo.py), its arithmetic (marl_core/targets.py), its rollout
buffer (marl_core/buffer.py) and its loop (marl_core/onpolicy.py), checked against hand-computed examples."""

from __future__ import annotations

import copy
import json
import math

import numpy as np
import pytest
import torch
from gymnasium import spaces

from marl_core.buffer import RolloutBuffer
from marl_core.config import parse_config
from marl_core.errors import ConfigError
from marl_core.learners import build_learner
from marl_core.learners.ppo import PPO, JointActionCritic
from marl_core.policy import AgentPolicy
from marl_core.spec import TeamSpec
from marl_core.targets import clipped_surrogate, counterfactual_baseline, explained_variance, gae
from marl_core.train import TrainingInterrupted, resume, run


# ---------------------------------------------------------------------------------------------- GAE
def test_gae_worked_example_without_ends():
    # docs/sources.md, "GAE": worked example computed from Schulman et al. 2016's formula
    # (gamma 0.9, lambda 0.8, no ends): A = (1.03638272, 0.244976, 0.5208, 0.89)
    r = torch.tensor([1.0, 0.0, 0.0, 1.0], dtype=torch.float64)
    v = torch.tensor([0.5, 0.4, 0.3, 0.2], dtype=torch.float64)
    nv = torch.tensor([0.4, 0.3, 0.2, 0.1], dtype=torch.float64)
    no = torch.zeros(4, dtype=torch.bool)
    adv, ret = gae(r, v, nv, no, no, 0.9, 0.8)
    assert adv.tolist() == pytest.approx([1.03638272, 0.244976, 0.5208, 0.89], abs=1e-12)
    assert ret.tolist() == pytest.approx((adv + v).tolist())


def test_gae_termination_and_time_limit_by_hand():
    # Hand-computed from the GAE formula (docs/sources.md, "GAE"), gamma 0.9, lambda 0.8:
    # step 1 terminates (no bootstrap: its next value 0.7 is ignored), step 3 is cut by a time limit
    # (bootstrap from the final observation's value 0.6); either end stops the carry.
    # delta = (1 + .9*.4 - .5, 0 - .4, 0 + .9*.2 - .3, 1 + .9*.6 - .2) = (0.86, -0.4, -0.12, 1.34)
    # A3 = 1.34; A2 = -0.12 + 0.72 * 1.34 = 0.8448; A1 = -0.4; A0 = 0.86 + 0.72 * -0.4 = 0.572
    r = torch.tensor([1.0, 0.0, 0.0, 1.0], dtype=torch.float64)
    v = torch.tensor([0.5, 0.4, 0.3, 0.2], dtype=torch.float64)
    nv = torch.tensor([0.4, 0.7, 0.2, 0.6], dtype=torch.float64)
    term = torch.tensor([False, True, False, False])
    end = torch.tensor([False, True, False, True])
    adv, ret = gae(r, v, nv, term, end, 0.9, 0.8)
    assert adv.tolist() == pytest.approx([0.572, -0.4, 0.8448, 1.34], abs=1e-12)
    assert ret.tolist() == pytest.approx([1.072, 0.0, 1.1448, 1.54], abs=1e-12)


# ---------------------------------------------------------------------------------- the PPO loss
def test_clipped_surrogate_by_hand():
    # Schulman et al. 2017, eq. 7 (docs/sources.md, "PPO"), clip 0.2, worked by hand:
    # ratios (1.5, 0.5, 0.5, 1.1), advantages (1, 1, -1, -2)
    # min terms: 1.2, 0.5, -0.8, -2.2 -> loss = -mean = 0.325; clipped: 3 of 4 (|r - 1| > 0.2)
    # approx KL = mean((r - 1) - log r) = (0.0945349 + 2 * 0.1931472 + 0.0046898) / 4 = 0.1213798
    ratio = torch.tensor([1.5, 0.5, 0.5, 1.1], dtype=torch.float64)
    adv = torch.tensor([1.0, 1.0, -1.0, -2.0], dtype=torch.float64)
    old = torch.full((4,), -1.0, dtype=torch.float64)
    loss, kl, clipped = clipped_surrogate(old + ratio.log(), old, adv, 0.2)
    assert float(loss) == pytest.approx(0.325, abs=1e-12)
    assert float(clipped) == pytest.approx(0.75)
    assert float(kl) == pytest.approx(0.1213798, abs=1e-6)


def test_clipped_surrogate_gradient_stops_outside_the_clip_range():
    # common practice (no source): a sample whose ratio left the range on the side its advantage pushes
    # towards gives no gradient; inside the range the gradient of -rho * A is -rho * A (d logp)
    logp = torch.tensor([math.log(1.5), math.log(1.1)], requires_grad=True)
    loss, _, _ = clipped_surrogate(logp, torch.zeros(2), torch.tensor([1.0, 1.0]), 0.2)
    loss.backward()
    assert logp.grad.tolist() == pytest.approx([0.0, -1.1 / 2])


# --------------------------------------------------------------------------- counterfactual baseline
def test_counterfactual_baseline_two_agents_by_hand():
    # Foerster et al. 2018, eq. 4 (docs/sources.md, "COMA"), worked by hand for two agents, two actions:
    # agent 0: pi = (0.25, 0.75), Q_0(s, (u_1, a)) = (4, 8) -> b = 1 + 6 = 7; took a = 0 -> A = 4 - 7 = -3
    # agent 1: pi = (0.6, 0.4),  Q_1(s, (u_0, a)) = (2, -1) -> b = 1.2 - 0.4 = 0.8; took 1 -> A = -1.8
    q = torch.tensor([[[4.0, 8.0], [2.0, -1.0]]])
    pi = torch.tensor([[[0.25, 0.75], [0.6, 0.4]]])
    b = counterfactual_baseline(q, pi)
    assert b[0].tolist() == pytest.approx([7.0, 0.8])
    taken = q.gather(-1, torch.tensor([[[0], [1]]])).squeeze(-1)
    assert (taken - b)[0].tolist() == pytest.approx([-3.0, -1.8])


def test_joint_action_critic_row_ignores_the_agents_own_action():
    # Foerster et al. 2018: Q_i takes u_-i as input and gives a value per own action (docs/sources.md, "COMA")
    torch.manual_seed(0)
    critic = JointActionCritic((12,), num_agents=3, num_actions=4, hidden=16, conv_channels=[8], conv_strides=[1])
    x = torch.rand(5, 12)
    u = torch.randint(4, (5, 3))
    q = critic(x, u)
    assert q.shape == (5, 3, 4)
    for i in range(3):
        v = u.clone()
        v[:, i] = (v[:, i] + 1) % 4  # change agent i's own action only
        q2 = critic(x, v)
        assert torch.equal(q2[:, i], q[:, i])
        others = [j for j in range(3) if j != i]
        assert not torch.equal(q2[:, others], q[:, others])


def test_explained_variance():
    # 1 - Var(y - p) / Var(y), common practice (no source): y = (1, 2, 3, 4) has variance 1.25
    y = torch.tensor([1.0, 2.0, 3.0, 4.0])
    assert explained_variance(y, y) == pytest.approx(1.0)
    assert explained_variance(torch.full((4,), 2.5), y) == pytest.approx(0.0)
    assert explained_variance(y + torch.tensor([1.0, -1.0, 1.0, -1.0]), y) == pytest.approx(1 - 1.0 / 1.25)
    assert math.isnan(explained_variance(y, torch.ones(4)))


# ----------------------------------------------------------------------------------- the buffer
@pytest.mark.parametrize("pack", [False, True], ids=["plain", "packed"])
def test_rollout_buffer_keeps_steps_finals_and_the_bootstrap(pack):
    rng = np.random.default_rng(0)
    T, B, N, shape = 3, 2, 2, (3, 5, 5)
    buf = RolloutBuffer(T, B, N, shape, np.uint8, state_shape=(4, 2), state_dtype=np.uint8, pack=pack)
    obs = [rng.integers(0, 2, (B, N, *shape), dtype=np.uint8) for _ in range(T + 1)]
    states = [rng.integers(0, 2, (B, 4, 2), dtype=np.uint8) for _ in range(T + 1)]
    final = rng.integers(0, 2, (B, N, *shape), dtype=np.uint8)
    buf.start(obs[0], states[0])
    for t in range(T):
        end = np.array([t == 1, False])
        buf.add(np.full((B, N), t), np.full((B, N), t / 2), np.zeros((B, N), bool), end,
                final if t == 1 else obs[t + 1], obs[t + 1], states[t + 1], states[t + 1])
    assert buf.full and len(buf) == T * B
    got = buf.get(np.arange(T * B))
    assert np.array_equal(got["obs"], np.stack(obs[:T]).reshape(T * B, N, *shape))
    assert np.array_equal(got["state"], np.stack(states[:T]).reshape(T * B, 4, 2))
    assert got["actions"].tolist() == [[t, t] for t in range(T) for _ in range(B)]
    last, last_state = buf.bootstrap()
    assert np.array_equal(last, obs[T]) and np.array_equal(last_state, states[T])
    (t, copies, fo, _), = buf.finals()
    assert t == 1 and copies.tolist() == [0] and np.array_equal(fo, final[[0]])
    values = np.arange(T * B * N, dtype=np.float32).reshape(T, B, N)
    nxt = RolloutBuffer.next_values_from(values, np.full((B, N), -1.0), {1: (copies, np.full((1, N), -9.0))})
    assert nxt[0].tolist() == values[1].tolist()
    assert nxt[1, 0].tolist() == [-9.0, -9.0] and nxt[1, 1].tolist() == values[2, 1].tolist()
    assert nxt[2].tolist() == [[-1.0, -1.0]] * B


def test_packed_buffer_is_smaller():
    plain = RolloutBuffer(8, 4, 3, (9, 11, 11), np.uint8, pack=False)
    packed = RolloutBuffer(8, 4, 3, (9, 11, 11), np.uint8, pack=True)
    assert packed.obs.data.nbytes * 7 < plain.obs.data.nbytes


# ------------------------------------------------------------------------------------ the learner
def _spec(n=2, obs=(3, 5, 5), actions=4, state=True):
    box = spaces.Box(0, 1, obs, np.uint8)
    st = spaces.Box(0, 1, (2 + n, 6, 7), np.uint8) if state else None
    return TeamSpec(tuple(f"agent_{i}" for i in range(n)), box, actions, st)


def _cfg(**learner):
    return parse_config({"learner": {"kind": "ppo", "hidden": 16, "conv_channels": [4], **learner}}).learner


def test_update_advantages_match_gae_by_hand(monkeypatch):
    """The update's wiring: values of the steps, of an episode's final observation and of the bootstrap
    reach GAE in the right places (values from a stub critic: each observation's first cell + 10 t)."""
    spec = _spec(n=1, obs=(1, 1, 1), actions=2, state=False)
    learner = PPO(spec, _cfg(critic="local", gamma=0.9, gae_lambda=0.8, epochs=1, minibatches=1,
                             normalize_advantages=False), seed=0)
    buf = RolloutBuffer(3, 1, 1, (1, 1, 1), np.float32)
    o = [np.full((1, 1, 1, 1, 1), v, np.float32) for v in (0.5, 0.4, 0.3, 0.2)]
    final = np.full((1, 1, 1, 1, 1), 0.6, np.float32)
    buf.start(o[0])
    # step 0: reward 1; step 1: time limit (final obs value 0.6, next episode starts at o[2]); step 2: reward 1
    buf.add(np.zeros((1, 1)), np.ones((1, 1)), np.zeros((1, 1), bool), np.array([False]), o[1], o[1])
    buf.add(np.zeros((1, 1)), np.zeros((1, 1)), np.zeros((1, 1), bool), np.array([True]), final, o[2])
    buf.add(np.zeros((1, 1)), np.ones((1, 1)), np.zeros((1, 1), bool), np.array([False]), o[3], o[3])

    def values(obs, state, actions):
        v = torch.as_tensor(obs).reshape(len(obs), 1).double()
        out = {"value": v}
        if actions is not None:
            out["logp"] = torch.zeros(len(obs), 1, dtype=torch.float64)
        return out

    seen = {}

    def step(d, old_logp, adv, returns):
        order = np.argsort(-np.asarray(d["obs"]).reshape(-1))  # minibatches are shuffled: back to step order
        seen["adv"], seen["ret"] = adv.reshape(-1)[order].tolist(), returns.reshape(-1)[order].tolist()
        return {}

    monkeypatch.setattr(learner, "_values", values)
    monkeypatch.setattr(learner, "_step", step)
    learner.update(buf)
    # by hand (gamma 0.9, lambda 0.8): delta = (1 + .9*.4 - .5, 0 + .9*.6 - .4, 1 + .9*.2 - .3)
    #   = (0.86, 0.14, 0.88); A2 = 0.88; A1 = 0.14 (time limit: no carry); A0 = 0.86 + 0.72 * 0.14 = 0.9608
    assert seen["adv"] == pytest.approx([0.9608, 0.14, 0.88])
    assert seen["ret"] == pytest.approx([1.4608, 0.54, 1.18])


def _adam_moments(module, opt):
    """Each parameter with its Adam moments: after one step exp_avg = (1 - beta1) g, which pins the gradient
    itself (Kingma & Ba 2015, Algorithm 1; torch.optim.Adam's documented update), not only its sign."""
    return [(p.detach(), opt.state[p]["exp_avg"], opt.state[p]["exp_avg_sq"]) for p in module.parameters()]


def _hand_ppo_step(actors, critic, obs, actions, old_logp, adv, returns, cfg, clipped=True):
    """A PPO minibatch step written out (Schulman et al. 2017, eq. 7 with an entropy bonus; value loss
    (V - R)^2 / 2), on copies of the nets, with one step of a fresh Adam (eps 1e-5) for each."""
    actors, critic = copy.deepcopy(actors), copy.deepcopy(critic)
    logits = actors(obs)
    logp_all = torch.log_softmax(logits, dim=-1)
    logp = logp_all.gather(-1, actions.unsqueeze(-1)).squeeze(-1)
    ratio = torch.exp(logp - old_logp)
    bounded = torch.clamp(ratio, 1 - cfg.clip, 1 + cfg.clip) if clipped else ratio
    surrogate = -torch.min(ratio * adv, bounded * adv).mean()
    entropy = -(logp_all.exp() * logp_all).sum(dim=-1).mean()
    (surrogate - cfg.entropy_coef * entropy).backward()
    a_opt = torch.optim.Adam(actors.parameters(), lr=cfg.lr, eps=1e-5)
    a_opt.step()
    value = critic(obs).squeeze(-1)
    (0.5 * ((value - returns) ** 2).mean()).backward()
    c_opt = torch.optim.Adam(critic.parameters(), lr=cfg.critic_lr, eps=1e-5)
    c_opt.step()
    return _adam_moments(actors, a_opt), _adam_moments(critic, c_opt)


def test_one_minibatch_step_matches_a_hand_written_ppo_step():
    spec = TeamSpec(("agent_0", "agent_1"), spaces.Box(-5, 5, (4,), np.float32), 3, None)
    cfg = _cfg(critic="local", hidden=8, lr=0.01, critic_lr=0.02, clip=0.2, entropy_coef=0.05, grad_clip=None,
               normalize_advantages=False)
    learner = PPO(spec, cfg, seed=0)
    actors0, critic0 = copy.deepcopy(learner.actors), copy.deepcopy(learner.critic)
    gen = torch.Generator().manual_seed(1)
    obs = torch.randn(6, 2, 4, generator=gen)
    actions = torch.randint(3, (6, 2), generator=gen)
    with torch.no_grad():
        now = torch.log_softmax(actors0(obs), dim=-1).gather(-1, actions.unsqueeze(-1)).squeeze(-1)
    # ratios e^0.5 = 1.65 (outside the clip range) on the first half, e^0.05 inside it on the second
    old_logp = now - torch.tensor([0.5] * 3 + [0.05] * 3).unsqueeze(1)
    adv = torch.rand(6, 2, generator=gen) + 0.1  # positive: the clipped half gives no actor gradient
    returns = torch.randn(6, 2, generator=gen)
    learner._step({"obs": obs.numpy(), "actions": actions.numpy(), "state": None}, old_logp, adv, returns)
    hand_a, hand_c = _hand_ppo_step(actors0, critic0, obs, actions, old_logp, adv, returns, cfg)
    for got, want in ((_adam_moments(learner.actors, learner.actor_opt), hand_a),
                      (_adam_moments(learner.critic, learner.critic_opt), hand_c)):
        for g, w in zip(got, want, strict=True):
            for x, y in zip(g, w):
                torch.testing.assert_close(x, y, rtol=1e-5, atol=1e-8)
    # the unclipped objective (a tempting wrong version) does not match: the test can fail
    wrong_a, _ = _hand_ppo_step(actors0, critic0, obs, actions, old_logp, adv, returns, cfg, clipped=False)
    gap = max(float((g[1] - w[1]).abs().max())
              for g, w in zip(_adam_moments(learner.actors, learner.actor_opt), wrong_a))
    assert gap > 1e-4


def test_joint_action_advantage_is_the_counterfactual_one(monkeypatch):
    # Foerster et al. 2018, eq. 4 (docs/sources.md, "COMA"): A_i = Q_i(x, u) - sum_a pi_i(a|o_i) Q_i(x, (u_-i, a)),
    # written out here from the critic and actors as they were before the update
    spec = _spec(n=2, state=False)
    learner = PPO(spec, _cfg(critic="joint_action", epochs=1, minibatches=1, normalize_advantages=False), seed=2)
    rng = np.random.default_rng(3)
    buf = RolloutBuffer(3, 2, 2, spec.obs_shape, np.uint8, pack=True)
    obs = rng.integers(0, 2, (2, 2, *spec.obs_shape), dtype=np.uint8)
    buf.start(obs)
    for _ in range(3):
        nxt = rng.integers(0, 2, obs.shape, dtype=np.uint8)
        buf.add(rng.integers(4, size=(2, 2)), rng.normal(size=(2, 2)), np.zeros((2, 2), bool),
                np.zeros(2, bool), nxt, nxt)
    seen = {}
    monkeypatch.setattr(learner, "_step", lambda d, old_logp, adv, ret: seen.update(d=d, adv=adv) or {})
    learner.update(buf)
    o, u = torch.as_tensor(seen["d"]["obs"]), torch.as_tensor(seen["d"]["actions"])
    with torch.no_grad():
        q = learner.critic(o.reshape(len(o), -1, *spec.obs_shape[1:]), u)  # (K, N, A)
        pi = torch.softmax(learner.actors(o), dim=-1)
    expected = q.gather(-1, u.unsqueeze(-1)).squeeze(-1) - (pi * q).sum(dim=-1)
    torch.testing.assert_close(seen["adv"], expected, rtol=1e-5, atol=1e-6)


@pytest.mark.parametrize("critic", ["local", "central", "joint_action"])
@pytest.mark.parametrize("share", [False, True], ids=["own", "shared"])
def test_every_critic_updates_and_acts_alone(critic, share, tmp_path):
    spec = _spec()
    learner = build_learner(spec, _cfg(critic=critic, share_parameters=share, rollout_steps=4), seed=1)
    rng = np.random.default_rng(0)
    buf = RolloutBuffer(4, 3, 2, spec.obs_shape, np.uint8, pack=True)
    obs = rng.integers(0, 2, (3, 2, *spec.obs_shape), dtype=np.uint8)
    buf.start(obs)
    for t in range(4):
        a = learner.act(obs, explore=True)
        assert a.shape == (3, 2) and a.dtype == np.int64
        nxt = rng.integers(0, 2, obs.shape, dtype=np.uint8)
        buf.add(a, rng.normal(size=(3, 2)), np.zeros((3, 2), bool), np.array([t == 2, False, False]), nxt, nxt)
        obs = nxt
    before = [p.detach().clone() for p in learner.actors.parameters()]
    stats = learner.update(buf)
    for k in ("policy_loss", "value_loss", "entropy", "approx_kl", "clip_fraction", "explained_variance"):
        assert k in stats and np.isfinite(stats[k]) or k == "explained_variance"
    assert any(not torch.equal(a, b) for a, b in zip(before, learner.actors.parameters()))
    # a saved policy is the actor alone, and acts as the actor does (greedy: the same argmax)
    for i in range(2):
        path = learner.agent_policy(i).save(tmp_path / f"p{i}.pt")
        pol = AgentPolicy.load(path)
        assert pol.sample
        with torch.no_grad():
            logits = learner.actors(torch.as_tensor(obs))[:, i]
        assert torch.allclose(pol.scores(obs[:, i]), logits, atol=1e-6)


def test_state_critic_needs_a_state():
    with pytest.raises(ConfigError, match="critic_input = 'state' is not allowed"):
        PPO(_spec(state=False), _cfg(critic="central", critic_input="state"))


def test_learner_state_round_trip():
    spec = _spec()
    a = PPO(spec, _cfg(), seed=3)
    b = PPO(spec, _cfg(), seed=4)
    b.load_state_dict(a.state_dict())
    obs = np.random.default_rng(1).integers(0, 2, (5, 2, *spec.obs_shape), dtype=np.uint8)
    assert np.array_equal(a.act(obs, True), b.act(obs, True))


# -------------------------------------------------------------------------------- runs end to end
def _run_cfg(**over):
    data = {"env": {"name": "harvest_v0", "num_envs": 8,
                    "params": {"layout": "harvest_tiny", "num_agents": 2, "max_cycles": 20}},
            "learner": {"kind": "ppo", "rollout_steps": 8, "hidden": 32, "conv_channels": [8]},
            "train": {"total_steps": 640, "eval_every": 320, "checkpoint_every": 320, "eval_episodes": 2},
            "log": {"gif_every": 0, "progress": False}}
    for k, v in over.items():
        data[k] = {**data.get(k, {}), **v}
    return parse_config(data)


def test_run_writes_the_contract_and_logs_what_practitioners_read(tmp_path):
    summary = run(_run_cfg(reward={"prosocial": 0.5}), tmp_path / "r")
    for k in ("env_steps", "episodes", "returns", "efficiency", "equality", "sustainability", "peace"):
        assert k in summary
    assert summary["env_steps"] == 640 and summary["learner"] == "ppo" and summary["updates"] == 10
    assert (tmp_path / "r" / "policies" / "agent_0.pt").is_file()
    from tensorboard.backend.event_processing.event_accumulator import EventAccumulator

    ea = EventAccumulator(str(tmp_path / "r")).Reload()
    tags = set(ea.Tags()["scalars"])
    for k in ("policy_loss", "value_loss", "entropy", "approx_kl", "clip_fraction", "explained_variance",
              "reward_env", "reward_learned"):
        assert f"train/{k}" in tags
    lines = (tmp_path / "r" / "metrics.jsonl").read_text().splitlines()
    assert [json.loads(x)["env_steps"] for x in lines] == [320, 640]


def test_same_seed_same_numbers_and_resume_continues(tmp_path):
    cfg = _run_cfg()
    a = run(cfg, tmp_path / "a")
    b = run(cfg, tmp_path / "b")
    assert a["returns"] == b["returns"]

    def stop_at_320(steps, total, last):  # Ctrl-C between two steps, after the first checkpoint
        if steps == 328:
            raise KeyboardInterrupt

    with pytest.raises(TrainingInterrupted) as info:
        run(cfg, tmp_path / "c", progress=stop_at_320)
    assert info.value.saved and info.value.checkpoint_steps == 328
    done = resume(tmp_path / "c")
    assert done["env_steps"] == 640 and done["updates"] >= 10
    steps = [json.loads(x)["env_steps"] for x in (tmp_path / "c" / "metrics.jsonl").read_text().splitlines()]
    assert steps == [320, 640]


def test_state_critic_runs_on_a_game(tmp_path):
    summary = run(_run_cfg(learner={"critic": "joint_action", "critic_input": "state"}), tmp_path / "s")
    assert summary["env_steps"] == 640


def test_gymnasium_env_runs(tmp_path):
    cfg = parse_config({"env": {"name": "gymnasium:CartPole-v1", "num_envs": 4},
                        "learner": {"kind": "ppo", "rollout_steps": 16, "hidden": 16},
                        "train": {"total_steps": 256, "eval_every": 256, "checkpoint_every": 256,
                                  "eval_episodes": 2},
                        "log": {"gif_every": 0, "progress": False, "tensorboard": False}})
    summary = run(cfg, tmp_path / "g")
    assert summary["env_steps"] == 256


@pytest.mark.parametrize("critic_input", ["observations", "state"])
def test_pettingzoo_env_runs(critic_input, tmp_path):
    # mpe2's simple_spread_v3 (a PettingZoo ParallelEnv nobody here wrote), with its own state()
    cfg = parse_config({"env": {"name": "mpe2.simple_spread_v3:parallel_env", "num_envs": 2,
                                "params": {"N": 2, "max_cycles": 10, "continuous_actions": False}},
                        "learner": {"kind": "ppo", "critic": "joint_action", "critic_input": critic_input,
                                    "rollout_steps": 10, "hidden": 16},
                        "train": {"total_steps": 60, "eval_every": 60, "checkpoint_every": 60, "eval_episodes": 2},
                        "log": {"gif_every": 0, "progress": False, "tensorboard": False}})
    summary = run(cfg, tmp_path / "pz")
    assert summary["env_steps"] == 60 and set(summary["returns"]) == {"agent_0", "agent_1"}
