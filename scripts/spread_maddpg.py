"""Train MADDPG on mpe2's cooperative navigation (simple_spread_v3) and print figures beside published ones.

Usage: ``python scripts/spread_maddpg.py [--steps N] [--episodes N] [--out DIR] [--json]``

Trains ``configs/spread_maddpg.yaml`` (``--steps`` overrides ``train.total_steps``), then plays the saved
per-agent policies alone (decentralised execution) on the raw mpe2 env and measures, per episode of 25
steps: the team's mean return per agent, the mean over steps of the summed distance from each landmark to
its nearest agent, and the number of agent-agent collisions (pairs in contact, counted per step). A uniformly
random team, the no-op team (action 0: no action) and the ``landmark_walk`` heuristic (agent i walks to
landmark i, ``marl_core.baselines``) are measured the same way. Lowe et al. 2017 report (appendix, from
memory, low confidence, docs/sources.md, "MADDPG"; their definitions may differ from ours) an average distance of 1.767 for MADDPG against 1.858 for DDPG, and
0.209 against 0.375 collisions: read them as orders of magnitude, not as a pass mark. This is a script,
not a test; the CI test trains a shorter budget over 3 seeds and checks that MADDPG beats the no-op team.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
PUBLISHED = {"source": "Lowe et al. 2017, appendix (from memory, low confidence)",
             "maddpg": {"average_distance": 1.767, "collisions": 0.209},
             "ddpg": {"average_distance": 1.858, "collisions": 0.375}}


def measure(policy, episodes: int, seed: int, n_agents: int = 3, max_cycles: int = 25) -> dict:
    from mpe2 import simple_spread_v3

    env = simple_spread_v3.parallel_env(N=n_agents, max_cycles=max_cycles)
    rows = []
    for ep in range(episodes):
        obs, _ = env.reset(seed=seed + ep)
        world = env.unwrapped.world
        ret, dist, coll, steps = 0.0, 0.0, 0, 0
        while env.agents:
            obs, rew, *_ = env.step(policy(obs))
            ret += float(np.mean(list(rew.values())))
            dist += sum(min(float(np.linalg.norm(a.state.p_pos - lm.state.p_pos)) for a in world.agents)
                        for lm in world.landmarks)
            ag = world.agents
            coll += sum(int(np.linalg.norm(ag[i].state.p_pos - ag[j].state.p_pos) < ag[i].size + ag[j].size)
                        for i in range(len(ag)) for j in range(i + 1, len(ag)))
            steps += 1
        rows.append((ret, dist / steps, coll))
    env.close()
    r = np.array(rows)
    return {"episodes": episodes, "return_mean": float(r[:, 0].mean()), "average_distance": float(r[:, 1].mean()),
            "collisions": float(r[:, 2].mean())}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--steps", type=int, default=None, help="train.total_steps (default: the config's)")
    p.add_argument("--episodes", type=int, default=200, help="evaluation episodes (default 200)")
    p.add_argument("--out", default=None, help="run directory (default: a temporary one)")
    p.add_argument("--json", action="store_true")
    args = p.parse_args(argv)

    from marl_core.baselines import landmark_walk
    from marl_core.config import load_config
    from marl_core.policy import AgentPolicy
    from marl_core.train import run

    overrides = ["log.tensorboard=false"] + ([f"train.total_steps={args.steps}"] if args.steps else [])
    cfg = load_config(ROOT / "configs" / "spread_maddpg.yaml", overrides)
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(args.out) if args.out else Path(tmp) / "run"
        summary = run(cfg, out)
        agents = list(summary["returns"])
        pols = {a: AgentPolicy.load(out / "policies" / f"{a}.pt") for a in agents}

        def learned(obs):
            return {a: int(pols[a].act(np.asarray(obs[a], np.float32)[None])[0]) for a in obs}

        rng = np.random.default_rng(0)
        walk = landmark_walk(len(agents))

        def walker(obs):
            acts = walk(np.stack([np.asarray(obs[a], np.float32) for a in agents])[None])[0]
            return {a: int(acts[i]) for i, a in enumerate(agents) if a in obs}

        result = {
            "env_steps": summary["env_steps"],
            "maddpg": measure(learned, args.episodes, seed=10_000),
            "random": measure(lambda obs: {a: int(rng.integers(5)) for a in obs}, args.episodes, seed=10_000),
            "stay": measure(lambda obs: dict.fromkeys(obs, 0), args.episodes, seed=10_000),
            "landmark_walk": measure(walker, args.episodes, seed=10_000),
            "published": PUBLISHED,
        }
    if args.json:
        print(json.dumps(result, indent=2))
    else:
        print(f"simple_spread_v3, 3 agents, {result['env_steps']} env steps of MADDPG training")
        print(f"{'':<14}{'return':>10}{'distance':>10}{'collisions':>12}")
        for k in ("maddpg", "random", "stay", "landmark_walk"):
            m = result[k]
            print(f"{k:<14}{m['return_mean']:>10.2f}{m['average_distance']:>10.3f}{m['collisions']:>12.3f}")
        for k in ("maddpg", "ddpg"):
            m = PUBLISHED[k]
            print(f"{'Lowe ' + k:<14}{'':>10}{m['average_distance']:>10.3f}{m['collisions']:>12.3f}")
        print(PUBLISHED["source"])
    return 0


if __name__ == "__main__":
    sys.exit(main())
