"""Checks every registered game must pass, as library code so tests and users can run them.

``check_game(name)`` runs PettingZoo's own checkers (``parallel_api_test``, ``api_test`` on the AEC form,
``render_test``) and ours, which go further where PettingZoo's stop short: every observation's dtype, shape
and bounds against its space on a long random rollout; a multi-step determinism check (PettingZoo's
``parallel_seed_test`` compares the first step only); the episode end exactly at ``max_cycles``, reported as
the game's ``horizon`` says (terminated for ``"terminal"``, truncated for ``"time_limit"``); and agreement
between copy b of the batched engine and a single env reset with seed + b.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

__all__ = ["check_game", "check_spaces", "check_determinism", "check_episode_end", "check_truncation",
           "check_batched_matches_single", "rollout"]


def rollout(env: Any, seed: int, steps: int, action_seed: int = 0) -> list[tuple]:
    """Reset ``env`` (a ParallelEnv) with ``seed`` and play ``steps`` random joint actions drawn from
    ``action_seed``; return every (obs, rewards, terminations, truncations, infos) tuple, reset first."""
    rng = np.random.default_rng(action_seed)
    obs, infos = env.reset(seed=seed)
    out: list[tuple] = [(obs, {}, {}, {}, infos)]
    for _ in range(steps):
        if not env.agents:
            break
        actions = {a: int(rng.integers(env.action_space(a).n)) for a in env.agents}
        out.append(env.step(actions))
    return out


def _same(a: Any, b: Any) -> bool:
    if isinstance(a, dict):
        return isinstance(b, dict) and a.keys() == b.keys() and all(_same(a[k], b[k]) for k in a)
    if isinstance(a, (tuple, list)):
        return isinstance(b, (tuple, list)) and len(a) == len(b) and all(map(_same, a, b))
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        return np.array_equal(a, b)
    return a == b


def check_spaces(make: Callable[[], Any], steps: int = 300, seed: int = 0) -> None:
    """Every observation and state matches its space exactly: dtype, shape and bounds."""
    env = make()
    for obs, *_ in rollout(env, seed, steps):
        for agent, o in obs.items():
            space = env.observation_space(agent)
            assert isinstance(o, np.ndarray) and o.dtype == space.dtype, (agent, getattr(o, "dtype", None))
            assert space.contains(o), f"observation of {agent} outside {space}"
        st = env.state()
        assert st.dtype == env.state_space.dtype and env.state_space.contains(st), "state outside state_space"


def check_determinism(make: Callable[[], Any], steps: int = 200, seed: int = 7) -> None:
    """Two envs reset with the same seed and fed the same actions agree at every step."""
    a = rollout(make(), seed, steps)
    b = rollout(make(), seed, steps)
    assert len(a) == len(b)
    for t, (x, y) in enumerate(zip(a, b)):
        assert _same(x, y), f"step {t} differs between two runs with seed {seed}"


def check_episode_end(make: Callable[..., Any], max_cycles: int = 17) -> None:
    """Every agent ends exactly at step ``max_cycles``, all at once, by the flag the env's ``horizon`` names:
    terminated (never truncated) for ``"terminal"``, truncated (never terminated) for ``"time_limit"``."""
    env = make(max_cycles=max_cycles)
    horizon = env.params["horizon"]
    ends, never = ("terminated", "truncated") if horizon == "terminal" else ("truncated", "terminated")
    steps = rollout(env, 0, max_cycles + 5)
    assert len(steps) == max_cycles + 1, f"episode lasted {len(steps) - 1} steps, expected {max_cycles}"
    for t, (_, _, term, trunc, _) in enumerate(steps[1:], start=1):
        flags = {"terminated": term, "truncated": trunc}
        assert not any(flags[never].values()), f"{never} at step {t} with horizon {horizon!r}"
        assert set(flags[ends]) == set(env.possible_agents), f"{ends} flags missing agents at step {t}"
        assert all(v == (t == max_cycles) for v in flags[ends].values()), f"{ends} flags wrong at step {t}"
    assert env.agents == []


def check_truncation(make: Callable[..., Any], max_cycles: int = 17) -> None:
    """Every agent is truncated (never terminated) exactly at step ``max_cycles`` (``horizon="time_limit"``)."""
    check_episode_end(lambda **kw: make(**{**kw, "horizon": "time_limit"}), max_cycles)


def check_batched_matches_single(module: Any, params: dict[str, Any], num_envs: int = 3, steps: int = 200,
                                 seed: int = 11) -> None:
    """Copy b of ``module.vector_env`` equals ``module.parallel_env`` reset with ``seed + b``."""
    vec = module.vector_env(num_envs, **params)
    rng = np.random.default_rng(0)
    obs_v, info_v = vec.reset(seed=seed)
    singles = [module.parallel_env(**params) for _ in range(num_envs)]
    firsts = [s.reset(seed=seed + b) for b, s in enumerate(singles)]
    agents = vec.possible_agents
    for b, (o, i) in enumerate(firsts):
        for n, a in enumerate(agents):
            assert np.array_equal(o[a], obs_v[b, n]), f"reset observation differs: copy {b}, {a}"
            assert all(i[a][k] == info_v[k][b, n] for k in info_v)
    for t in range(steps):
        acts = rng.integers(vec.action_space.n, size=(num_envs, len(agents)))
        obs_v, rew_v, term_v, trunc_v, info_v = vec.step(acts)
        for b, s in enumerate(singles):
            o, r, te, tr, inf = s.step({a: int(acts[b, n]) for n, a in enumerate(agents)})
            for n, a in enumerate(agents):
                where = f"step {t + 1}, copy {b}, {a}"
                assert np.array_equal(o[a], obs_v[b, n]), f"observation differs at {where}"
                assert r[a] == rew_v[b, n], f"reward differs at {where}"
                assert te[a] == term_v[b, n] and tr[a] == trunc_v[b, n], f"end flags differ at {where}"
                assert all(inf[a][k] == info_v[k][b, n] for k in info_v), f"infos differ at {where}"
            assert np.array_equal(s.state(), vec.state()[b]), f"state differs at step {t + 1}, copy {b}"
        if (term_v | trunc_v).all():
            break


def check_game(name: str, params: dict[str, Any] | None = None, cycles: int = 300) -> None:
    """Run every check on the registered game ``name`` with ``params``; raises AssertionError on failure."""
    from pettingzoo.test import api_test, parallel_api_test, render_test
    from pettingzoo.utils.conversions import parallel_to_aec

    import envs

    module = envs.game_module(name)
    params = dict(params or {})

    def make(**extra: Any) -> Any:
        return module.parallel_env(**{**params, **extra})

    parallel_api_test(make(), num_cycles=cycles)
    api_test(parallel_to_aec(make()), num_cycles=cycles)
    # render_test first builds the env with render_mode="human", which our games do not offer
    render_test(lambda render_mode=None: module.env(
        render_mode=None if render_mode == "human" else render_mode, **params))
    check_spaces(make, steps=cycles)
    check_determinism(make, steps=cycles)
    check_episode_end(make)
    check_batched_matches_single(module, params, steps=cycles)
