"""Mixed teams in one run: the ``seats`` section (marl_core/seats.py).

The update of each group is held against the same learner, built alone with the same seed, given the group's
columns of the batch by hand: a group learner must see only its own seats. A seated member plays exactly
its scripted team's action for its seat; a fixed policy is never trained.
"""

from __future__ import annotations

import copy
from pathlib import Path

import numpy as np
import pytest
import torch

from envs.scripted import batched_team
from marl_core import train
from marl_core.cli import main
from marl_core.config import load_config, parse_config
from marl_core.errors import CheckpointError, ConfigError
from marl_core.learners import build_learner
from marl_core.policy import load_policy
from marl_core.seats import SeatedTeam
from marl_core.spec import TeamSpec
from marl_core.team_env import make_team_env

ROOT = Path(__file__).resolve().parents[2]
NET = {"hidden": 8, "conv_channels": [4], "batch_size": 8, "replay_size": 200, "warmup_steps": 20}


def _base(seats=None, radius=2, steps=120):
    data = {"env": {"name": "harvest_v0", "num_envs": 2,
                    "params": {"layout": "harvest_tiny", "num_agents": 3, "view_radius": radius, "max_cycles": 30}},
            "learner": dict(NET),
            "train": {"total_steps": steps, "eval_every": 60, "eval_episodes": 2, "checkpoint_every": 60},
            "log": {"tensorboard": False, "gif_every": 0, "progress": False}}
    if seats is not None:
        data["seats"] = seats
    return data


def test_the_bundled_mixed_config_trains(tmp_path):
    cfg = load_config(ROOT / "configs" / "harvest_mixed.yaml", [
        "env.num_envs=2", "env.params.layout=harvest_tiny", "learner.hidden=8", "learner.conv_channels=[4]",
        "learner.batch_size=8", "learner.warmup_steps=20", "train.total_steps=80", "train.eval_every=80",
        "train.eval_episodes=2", "train.checkpoint_every=80", "log.tensorboard=false",
        "seats.agent_0.learner.hidden=8", "seats.agent_0.learner.conv_channels=[4]"])
    summary = train.run(cfg, tmp_path / "run")
    assert summary["groups"]["agent_0"]["seated"] == "learner maddpg"
    assert summary["groups"]["learner"] == {"agents": ["agent_1", "agent_2"], "seated": "learner idqn",
                                            "return_mean": pytest.approx(np.mean([summary["returns"]["agent_1"],
                                                                                   summary["returns"]["agent_2"]]))}
    for a in ("agent_0", "agent_1", "agent_2"):
        assert load_policy(tmp_path / "run" / "policies" / f"{a}.pt").agent == a
    # the final table shows each group's return under the team's (cli.py _table)
    from marl_core.cli import _fmt, _table

    rows = {line.split()[0]: line.split() for line in _table(summary).splitlines()[1:]}
    assert rows["agent_0"][1] == _fmt(summary["returns"]["agent_0"])
    assert rows["learner"][1] == _fmt(summary["groups"]["learner"]["return_mean"])


def _fake_batch(spec: TeamSpec, K: int = 8, gamma: float = 0.99, seed: int = 0) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    N = spec.num_agents
    shape = (K, N, *spec.obs_shape)
    alive = rng.random((K, N)) > 0.2
    return {"obs": rng.integers(0, 2, shape).astype(np.uint8),
            "next_obs": rng.integers(0, 2, shape).astype(np.uint8),
            "actions": rng.integers(0, spec.num_actions, (K, N)),
            "returns": rng.normal(size=(K, N)).astype(np.float32),
            "discounts": (gamma * alive).astype(np.float32),
            "weights": np.ones(K, np.float32), "indices": np.arange(K)}


def test_each_group_learns_from_its_own_columns_only():
    cfg = parse_config(_base({"agent_1": {"learner": {"kind": "maddpg", "hidden": 8, "conv_channels": [4]}}}))
    env = make_team_env("harvest_v0", cfg.env.params, 2, 0, with_state=False)
    team = SeatedTeam(env.spec, cfg, seed=3, env_name="harvest_v0", run_dir=None)
    # the same learners built alone, with the seeds the team gives them (group order: agent_1, then the rest)
    alone = {"agent_1": build_learner(TeamSpec(("agent_1",), env.spec.obs_space, env.spec.num_actions),
                                      team.groups[0].learner, 3),
             "learner": build_learner(TeamSpec(("agent_0", "agent_2"), env.spec.obs_space, env.spec.num_actions),
                                      cfg.learner, 3 + 7919)}
    for name, lr in alone.items():  # same starting weights (the same seeds)
        for a, b in zip(team.learners[name].agent_policy(0).net.state_dict().values(),
                        lr.agent_policy(0).net.state_dict().values()):
            assert torch.equal(a, b)
    batch = _fake_batch(env.spec, gamma=cfg.learner.gamma)
    team.update(batch)
    cols = {"agent_1": [1], "learner": [0, 2]}
    for name, lr in alone.items():
        sub = {k: (v[:, cols[name]] if k in ("obs", "next_obs", "actions", "returns", "discounts") else v)
               for k, v in batch.items()}
        if name == "agent_1":  # MADDPG's own gamma (0.95) in place of the replay's (0.99), 1-step returns
            sub["discounts"] = (0.95 * (batch["discounts"][:, cols[name]] > 0)).astype(np.float32)
        lr.update(sub)
        # every network of the learner: both members' Q-nets (and targets) of the idqn group; the MADDPG
        # group's actor, critic and their targets
        networks = ("q", "target") if name == "learner" else ("actors", "critic", "target_actors", "target_critic")
        mine, theirs = team.learners[name].state_dict(), lr.state_dict()
        for net in networks:
            assert mine[net].keys() == theirs[net].keys() and mine[net]
            for k in mine[net]:
                torch.testing.assert_close(mine[net][k], theirs[net][k], rtol=1e-5, atol=1e-6, msg=f"{name} {net} {k}")
        for i in range(len(cols[name])):  # and each member's saved policy
            a, b = team.learners[name].agent_policy(i).net.state_dict(), lr.agent_policy(i).net.state_dict()
            for k in a:
                torch.testing.assert_close(a[k], b[k], rtol=1e-5, atol=1e-6)
    # and an update that saw the other seats' columns would differ: the test can fail
    wrong = build_learner(TeamSpec(("agent_1",), env.spec.obs_space, env.spec.num_actions), team.groups[0].learner, 3)
    sub = {k: (v[:, [0]] if k in ("obs", "next_obs", "actions", "returns", "discounts") else v)
           for k, v in batch.items()}
    wrong.update(sub)
    diff = [(a - b).abs().max().item() for a, b in zip(wrong.agent_policy(0).net.state_dict().values(),
                                                       team.learners["agent_1"].agent_policy(0).net.state_dict().values())]
    assert max(diff) > 1e-6
    env.close()


def test_a_seated_member_plays_its_scripted_part():
    cfg = parse_config(_base({"agent_2": {"member": "greedy"}}))
    env = make_team_env("harvest_v0", cfg.env.params, 2, 5, with_state=False)
    twin = make_team_env("harvest_v0", cfg.env.params, 2, 5, with_state=False)
    team = SeatedTeam(env.spec, cfg, seed=0, env_name="harvest_v0", run_dir=None)
    act = team.acting(env)
    greedy = batched_team(twin.game, "greedy")
    obs, _ = env.reset(5)
    twin.reset(5)
    for _ in range(20):
        a = act(obs, explore=True, env_steps=0)
        expected = greedy()
        assert (a[:, 2] == expected[:, 2]).all()
        a_twin = a.copy()
        st = env.step(a)
        twin.step(a_twin)
        obs = np.where(st.end.reshape(-1, 1, 1, 1, 1), st.reset_obs, st.obs) if st.end.any() else st.obs
    env.close()
    twin.close()


def test_a_fixed_policy_is_copied_into_the_run_and_never_trained(tmp_path):
    first = train.run(parse_config(_base()), tmp_path / "first")
    assert first["env_steps"] == 120
    src = tmp_path / "first" / "policies" / "agent_0.pt"
    cfg = parse_config(_base({"agent_0": {"policy": str(src)}, "agent_1": {"member": "random"}}))
    summary = train.run(cfg, tmp_path / "mixed")
    assert summary["groups"]["agent_0"]["seated"].startswith("policy ")
    kept = tmp_path / "mixed" / "seats" / "agent_0.pt"
    assert kept.read_bytes() == src.read_bytes()
    before = load_policy(src).net.state_dict()
    after = load_policy(tmp_path / "mixed" / "policies" / "agent_0.pt").net.state_dict()
    for k in before:
        assert torch.equal(before[k], after[k])
    assert not (tmp_path / "mixed" / "policies" / "agent_1.pt").exists()  # a member has no policy file


def test_an_interrupted_mixed_run_resumes_every_seat(tmp_path):
    seats = {"agent_0": {"learner": {"kind": "maddpg", "hidden": 8, "conv_channels": [4]}},
             "agent_1": {"member": "greedy"}}
    cfg = parse_config(_base(seats, steps=240))

    def stop(step, total, last):
        if step >= 120:
            raise KeyboardInterrupt

    with pytest.raises(train.TrainingInterrupted):
        train.run(cfg, tmp_path / "run", progress=stop)
    r = train._Run(cfg, tmp_path / "run", None)
    r.load_checkpoint()
    saved = copy.deepcopy(r.learner.state_dict())
    assert set(saved["learners"]) == {"agent_0", "learner"} and set(saved["rngs"]) == {"agent_1"}
    r.env.close()
    r.eval_env.close()
    summary = train.resume(tmp_path / "run")
    assert summary["env_steps"] == 240 and set(summary["groups"]) == {"agent_0", "agent_1", "learner"}


@pytest.mark.parametrize("seats, message", [
    ({"agent_7": {"member": "random"}}, r"^seats\.agent_7: 'agent_7' is not an agent of harvest_v0; expected one of "
                                        r"agent_0, agent_1, agent_2"),
    ({"agent_0": {"member": "random"}, "agent_0,agent_1": {"member": "stay"}},
     r"^seats\.agent_0,agent_1: agent_0 is already seated by seats\.agent_0"),
    ({"agent_0": {"member": "shepherd"}}, r"^seats\.agent_0\.member = 'shepherd' is not allowed for harvest_v0"),
    ({"agent_0,agent_1,agent_2": {"member": "random"}}, r"^seats: every agent is a fixed policy or a member"),
    ({"agent_0": {"policy": "/nowhere/agent_0.pt"}}, r"^seats\.agent_0\.policy: '/nowhere/agent_0\.pt' not found$"),
])
def test_bad_seats_are_one_line_before_any_file(seats, message, tmp_path):
    cfg = parse_config(_base(seats))
    with pytest.raises((ConfigError, CheckpointError), match=message):
        train.run(cfg, tmp_path / "run")
    assert not (tmp_path / "run").exists()


@pytest.mark.parametrize("seats, message", [
    ({"agent_0": {"member": "random", "policy": "x.pt"}},
     r"a seat takes exactly one of learner, policy or member; got policy, member"),
    ({"agent_0": {"learner": {"kind": "maddpg", "batch_size": 256}}},
     r"^seats\.agent_0\.learner\.batch_size = 256 is not allowed: the seats share one replay"),
    ({"agent_0": {"learner": {"kind": "idqn", "n_step": 3}}},
     r"^seats\.agent_0\.learner\.n_step = 3 is not allowed: the seats share one replay of 1-step transitions"),
    ({"agent_0": {"learner": {"kind": "idqn", "prioritized": True}}},
     r"^seats\.agent_0\.learner\.prioritized = True is not allowed: the seats share one replay of 1-step "
     r"transitions drawn uniformly"),
])
def test_bad_seat_sections_are_config_errors(seats, message):
    with pytest.raises(ConfigError, match=message) as info:
        parse_config(_base(seats))
    assert "\n" not in str(info.value)


def test_a_fixed_policy_of_another_shape_is_refused(tmp_path):
    train.run(parse_config(_base(radius=3)), tmp_path / "wide")
    cfg = parse_config(_base({"agent_0": {"policy": str(tmp_path / "wide" / "policies" / "agent_0.pt")}}))
    with pytest.raises(CheckpointError, match=r"^seats\.agent_0\.policy: '.*' expects observations of shape"):
        train.run(cfg, tmp_path / "run")
    assert main(["train", "--out", str(tmp_path / "cli"), "--quiet", str(_write(tmp_path, cfg))]) == 2


def _write(tmp: Path, cfg) -> Path:
    from marl_core.config import dump_config

    path = tmp / "mixed.yaml"
    dump_config(cfg, path)
    return path


def test_seats_with_n_step_returns_are_refused(tmp_path):
    data = _base({"agent_0": {"member": "random"}})
    data["learner"]["n_step"] = 3
    with pytest.raises(ConfigError, match=r"^learner\.n_step > 1 and learner\.prioritized are not allowed with seats"):
        train.run(parse_config(data), tmp_path / "run")


# ------------------------------------------------------------------ an on-policy group among replay learners
PPO_SEAT = {"learner": {"kind": "ppo", "hidden": 8, "conv_channels": [4], "rollout_steps": 5}}


def test_a_ppo_seat_learns_from_rollouts_of_its_own_columns():
    """The ppo group's update is held against the same learner built alone with the team's seed, given a
    rollout of the group's columns of the same steps by hand; the replay group keeps its replay."""
    from marl_core.buffer import RolloutBuffer
    from marl_core.team_env import Step

    cfg = parse_config(_base({"agent_2": PPO_SEAT}))
    env = make_team_env("harvest_v0", cfg.env.params, 2, 0, with_state=False)
    team = SeatedTeam(env.spec, cfg, seed=5, env_name="harvest_v0", run_dir=None)
    group = team.groups[0]
    alone = build_learner(TeamSpec(("agent_2",), env.spec.obs_space, env.spec.num_actions), group.learner, 5)
    buf = RolloutBuffer(5, 2, 1, env.spec.obs_shape, np.uint8, pack=True)
    rng = np.random.default_rng(0)
    shape = (2, 3, *env.spec.obs_shape)
    obs = rng.integers(0, 2, shape, dtype=np.uint8)
    team.rollouts.start(obs)
    buf.start(obs[:, [2]])
    stats = {}
    for t in range(5):
        actions = rng.integers(env.spec.num_actions, size=(2, 3))
        rewards = rng.normal(size=(2, 3)).astype(np.float32)
        nxt = rng.integers(0, 2, shape, dtype=np.uint8)
        end = np.array([t == 3, False])
        st = Step(obs=nxt, state=None, rewards=rewards, terminated=np.zeros((2, 3), bool), end=end,
                  frozen=np.zeros((2, 3), bool))
        stats = team.rollouts.add(actions, rewards, st, nxt, env_steps=2 * (t + 1))
        buf.add(actions[:, [2]], rewards[:, [2]], np.zeros((2, 1), bool), end, nxt[:, [2]], nxt[:, [2]])
        assert (stats != {}) == (t == 4)  # one update, when the group's rollout is full
    assert "agent_2/policy_loss" in stats
    alone.update(buf)
    mine = team.learners["agent_2"].agent_policy(0).net.state_dict()
    theirs = alone.agent_policy(0).net.state_dict()
    for k in mine:
        torch.testing.assert_close(mine[k], theirs[k], rtol=1e-5, atol=1e-6)
    # a replay batch updates the replay group only; the ppo group is left alone
    before = {k: v.clone() for k, v in mine.items()}
    team.update(_fake_batch(env.spec, gamma=cfg.learner.gamma))
    after = team.learners["agent_2"].agent_policy(0).net.state_dict()
    assert all(torch.equal(before[k], after[k]) for k in before)
    env.close()


def test_a_mixed_team_with_a_ppo_seat_trains_and_resumes(tmp_path):
    cfg = parse_config(_base({"agent_0": PPO_SEAT}, steps=120))
    out = tmp_path / "run"

    def stop(steps, total, last):
        if steps == 70:
            raise KeyboardInterrupt

    with pytest.raises(train.TrainingInterrupted):
        train.run(cfg, out, progress=stop)
    summary = train.resume(out)
    assert summary["env_steps"] == 120
    assert summary["groups"]["agent_0"]["seated"] == "learner ppo"
    assert summary["groups"]["learner"]["seated"] == "learner idqn"
    pol = load_policy(out / "policies" / "agent_0.pt")
    assert pol.agent == "agent_0" and pol.sample


def test_ppo_as_the_top_level_learner_of_seats_is_refused():
    with pytest.raises(ConfigError, match=r"^learner\.kind = 'ppo' is not allowed with seats: .*seats\.agent_0"):
        parse_config({**_base({"agent_0": {"member": "random"}}), "learner": {"kind": "ppo"}})
