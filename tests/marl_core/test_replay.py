"""The replay buffer: ring wrap-around, episode ends, n-step returns, prioritized sampling, memory, sum-tree."""

import math
from collections import Counter

import numpy as np
import pytest
from gymnasium import spaces

from marl_core.errors import ConfigError
from marl_core.replay import Replay, SumTree
from marl_core.spec import TeamSpec


def filled(values, num_agents, shape, dtype):
    """Observations (B, N, *shape) whose every element of copy b equals values[b]."""
    values = np.asarray(values, dtype=np.float64).reshape(-1, *([1] * (1 + len(shape))))
    return np.broadcast_to(values, (values.shape[0], num_agents, *shape)).astype(dtype)


def value_of(obs):
    """The single value an observation built by filled() carries, checking that it is uniform."""
    flat = obs.reshape(obs.shape[0], -1)
    assert (flat == flat[:, :1]).all()
    return flat[:, 0].astype(np.float64)


def rounded(values):
    return tuple(round(float(v), 4) for v in values)


def rows(batch, num_envs):
    """One hashable row per sampled transition: (copy, obs value, next_obs value, returns, discounts)."""
    copies = batch["indices"] % num_envs
    obs, nxt = value_of(batch["obs"]), value_of(batch["next_obs"])
    return sorted((int(c), float(o), float(x), rounded(g), rounded(d))
                  for c, o, x, g, d in zip(copies, obs, nxt, batch["returns"], batch["discounts"]))


class Single:
    """Drives a one-copy buffer with scalar observations: obs value = whatever the test passes."""

    def __init__(self, num_agents=1, **kw):
        kw.setdefault("capacity", 32)
        self.n = num_agents
        self.buf = Replay(num_envs=1, num_agents=num_agents, obs_shape=(2,), obs_dtype=np.float32,
                          num_actions=4, **kw)

    def obs(self, v):
        return filled([v], self.n, (2,), np.float32)

    def start(self, v):
        self.buf.start(self.obs(v))

    def step(self, next_v, rewards, end=False, terminated=False, reset_v=None):
        rewards = np.broadcast_to(np.asarray(rewards, dtype=np.float32), (1, self.n))
        term = np.broadcast_to(np.asarray(terminated, dtype=bool), (1, self.n))
        self.buf.add(np.zeros((1, self.n), dtype=np.int64), rewards, term, np.array([end]), self.obs(next_v),
                     reset_obs=None if reset_v is None else self.obs(reset_v))


# ---------------------------------------------------------------------------------------------- sum-tree
def test_sum_tree_totals_and_find_on_a_hand_made_tree():
    tree = SumTree(5)  # padded to 8 leaves
    tree.update(np.arange(5), [1.0, 2.0, 3.0, 4.0, 0.0])
    assert tree.base == 8 and tree.depth == 3
    assert tree.total == 10.0  # hand-computed: 1 + 2 + 3 + 4
    assert tree.nodes[2] == 10.0 and tree.nodes[3] == 0.0  # hand-computed: leaves 0-3 | leaves 4-7
    assert tree.nodes[4] == 3.0 and tree.nodes[5] == 7.0  # hand-computed: 1 + 2 | 3 + 4
    # hand-computed: cumulative sums 1, 3, 6, 10 bound the leaves' intervals [0,1) [1,3) [3,6) [6,10)
    u = [0.0, 0.5, 1.0, 2.999, 3.0, 5.5, 6.0, 9.999]
    assert tree.find(u).tolist() == [0, 0, 1, 1, 2, 2, 3, 3]
    # at or beyond the total: the last positive leaf, never the zero leaf 4 or the padding (common practice)
    assert tree.find([10.0, 12.0]).tolist() == [3, 3]
    tree.update([1], [0.0])
    assert tree.total == 8.0  # hand-computed: 1 + 3 + 4
    assert tree.find([1.0, 1.5, 3.99, 4.0]).tolist() == [2, 2, 2, 3]  # hand-computed: [0,1) [1,4) [4,8)
    tree.update([4, 4], [5.0, 5.0])  # a repeated leaf
    assert tree.total == 13.0 and tree.get([4]).tolist() == [5.0]  # hand-computed: 8 + 5


def test_sum_tree_of_one_leaf_and_bad_values():
    tree = SumTree(1)
    tree.update([0], [2.0])
    assert tree.total == 2.0 and tree.find([0.0, 1.9]).tolist() == [0, 0]  # hand-computed
    with pytest.raises(ValueError, match="non-negative"):
        tree.update([0], [-1.0])
    with pytest.raises(IndexError, match="out of range"):
        tree.update([1], [1.0])
    with pytest.raises(ValueError, match="size = 0"):
        SumTree(0)


# ---------------------------------------------------------------------------------------------- errors
def test_capacity_too_small_names_the_config_key():
    with pytest.raises(ConfigError, match=r"learner\.replay_size = 9 gives 4 slots.*n_step \+ 2 = 5.*>= 10"):
        Replay(9, 2, 1, (2,), np.float32, 4, n_step=3)


def test_sample_before_ready_is_a_clear_error():
    drv = Single(n_step=3)
    with pytest.raises(RuntimeError, match="nothing to sample yet"):
        drv.buf.sample(4)
    drv.start(0)
    drv.step(1, 1.0)
    drv.step(2, 1.0)  # two steps of a 3-step window: nothing is complete
    assert len(drv.buf) == 0
    with pytest.raises(RuntimeError, match="nothing to sample yet"):
        drv.buf.sample(4)
    drv.step(3, 1.0)
    assert len(drv.buf) == 1


def test_add_before_start_and_bad_inputs():
    drv = Single()
    with pytest.raises(RuntimeError, match=r"start\(obs\)"):
        drv.step(1, 0.0)
    drv.start(0)
    with pytest.raises(ValueError, match=r"actions has shape \(2,\)"):
        drv.buf.add(np.zeros(2, int), np.zeros((1, 1)), np.zeros((1, 1), bool), np.zeros(1, bool), drv.obs(1))
    with pytest.raises(ValueError, match=r"actions must lie in \[0, 4\)"):
        drv.buf.add(np.full((1, 1), 4), np.zeros((1, 1)), np.zeros((1, 1), bool), np.zeros(1, bool), drv.obs(1))
    with pytest.raises(ValueError, match="reset_obs is missing"):
        drv.buf.add(np.zeros((1, 1), int), np.zeros((1, 1)), np.zeros((1, 1), bool), np.ones(1, bool), drv.obs(1))
    buf = Replay(8, 1, 1, (2,), np.float32, 4, state_shape=(3,))
    with pytest.raises(ValueError, match="state is missing"):
        buf.start(drv.obs(0))
    buf.start(drv.obs(0), np.zeros((1, 3)))
    with pytest.raises(ValueError, match="next_state is missing"):
        buf.add(np.zeros((1, 1), int), np.zeros((1, 1)), np.zeros((1, 1), bool), np.zeros(1, bool), drv.obs(1))


def test_negative_td_errors_are_rejected():
    drv = Single(prioritized=True)
    drv.start(0)
    drv.step(1, 0.0)
    with pytest.raises(ValueError, match="non-negative"):
        drv.buf.update_priorities([0], [-0.5])
    with pytest.raises(ValueError, match="td_errors has shape"):
        drv.buf.update_priorities([0], [0.5, 0.5])


# ---------------------------------------------------------------------------------------------- n-step
def test_n_step_return_and_discount_on_hand_computed_numbers():
    drv = Single(n_step=3, gamma=0.5)
    drv.start(0)
    for t, r in enumerate([1.0, 2.0, 4.0, 8.0]):
        drv.step(t + 1, r)
    batch = drv.buf.sample(2)
    first = np.flatnonzero(value_of(batch["obs"]) == 0)[0]
    assert batch["returns"][first, 0] == pytest.approx(3.0)  # Sutton & Barto eq. 7.1: 1 + 0.5*2 + 0.25*4
    assert batch["discounts"][first, 0] == pytest.approx(0.125)  # Sutton & Barto eq. 7.1: 0.5^3
    assert value_of(batch["next_obs"])[first] == 3.0  # bootstrap from s_{t+n}
    assert rows(batch, 1) == [(0, 0.0, 3.0, (3.0,), (0.125,)),  # Sutton & Barto eq. 7.1, hand-computed
                              (0, 1.0, 4.0, (2.0 + 0.5 * 4 + 0.25 * 8,), (0.125,))]


@pytest.mark.parametrize("terminated, discounts", [
    ((False, False), (0.25, 0.25)),  # truncation: bootstrap from the final obs with gamma^m, m = 2
    ((True, True), (0.0, 0.0)),  # termination masks the bootstrap
    ((True, False), (0.0, 0.25)),  # per agent: only the terminated agent's bootstrap is masked
], ids=["truncated", "terminated", "agent0_terminated"])
def test_window_is_cut_at_an_episode_end(terminated, discounts):
    drv = Single(num_agents=2, n_step=3, gamma=0.5)
    drv.start(0)
    drv.step(1, [1.0, 10.0])
    drv.step(2, [2.0, 20.0], end=True, terminated=terminated, reset_v=100)
    assert len(drv.buf) == 2
    last = tuple(0.0 if t else 0.5 for t in terminated)
    # Sutton & Barto eq. 7.1 with the window cut at the end (m = 2, then m = 1), hand-computed:
    # agent 0: 1 + 0.5*2 = 2, agent 1: 10 + 0.5*20 = 20; from obs 1: 2 and 20
    assert rows(drv.buf.sample(2), 1) == [(0, 0.0, 2.0, (2.0, 20.0), discounts),
                                          (0, 1.0, 2.0, (2.0, 20.0), last)]
    drv.step(101, [5.0, 5.0])
    drv.step(102, [5.0, 5.0])
    drv.step(103, [5.0, 5.0])
    new = [r for r in rows(drv.buf.sample(3), 1) if r[1] >= 100]
    # the reset obs starts the next episode; hand-computed 5 + 2.5 + 1.25 = 8.75, 0.5^3
    assert new == [(0, 100.0, 103.0, (8.75, 8.75), (0.125, 0.125))]


def test_agent_terminated_inside_the_window_collects_nothing_after():
    drv = Single(num_agents=2, n_step=3, gamma=0.5)
    drv.start(0)
    drv.step(1, [1.0, 1.0])
    drv.step(2, [2.0, 2.0], terminated=[True, False])  # agent 0 leaves, the episode goes on
    drv.step(3, [4.0, 4.0])
    # our choice (module docstring), hand-computed: agent 0 gets 1 + 0.5*2 and no bootstrap; agent 1 eq. 7.1
    assert rows(drv.buf.sample(1), 1) == [(0, 0.0, 3.0, (2.0, 3.0), (0.0, 0.125))]


def test_second_start_truncates_the_running_episode():
    drv = Single(n_step=3, gamma=0.5)
    drv.start(0)
    for v, r in zip((1, 2, 3, 4), (1.0, 2.0, 4.0, 8.0)):
        drv.step(v, r)
    assert len(drv.buf) == 2
    drv.start(10)  # env reset without an episode end: obs 4 becomes the final observation
    assert len(drv.buf) == 4
    # hand-computed (Sutton & Barto eq. 7.1, cut at the truncation for the last two):
    # 1 + .5*2 + .25*4 = 3; 2 + .5*4 + .25*8 = 6; 4 + .5*8 = 8 (m = 2); 8 (m = 1)
    assert rows(drv.buf.sample(4), 1) == [(0, 0.0, 3.0, (3.0,), (0.125,)), (0, 1.0, 4.0, (6.0,), (0.125,)),
                                          (0, 2.0, 4.0, (8.0,), (0.25,)), (0, 3.0, 4.0, (8.0,), (0.5,))]
    for v in (11, 12, 13):
        drv.step(v, 1.0)
    assert len(drv.buf) == 5
    assert (0, 10.0, 13.0, (1.75,), (0.125,)) in rows(drv.buf.sample(5), 1)  # hand-computed: 1 + .5 + .25


# ---------------------------------------------------------------------------------------------- boundaries
def test_episode_boundaries_with_different_lengths_per_copy():
    """Copy 0: episodes of 3 steps, truncated; copy 1: an episode of 5 steps, terminated. Observation value
    = 10 * episode + t, reward of step t = t + 1, n = 2, gamma = 0.5."""
    buf = Replay(64, 2, 1, (3, 2), np.uint8, 5, n_step=2, gamma=0.5)
    lengths, term = (3, 5), (False, True)
    episode, t = [0, 0], [0, 0]

    def enc():
        return filled([10 * e + s for e, s in zip(episode, t)], 1, (3, 2), np.uint8)

    buf.start(enc())
    for _ in range(8):
        rewards = np.array([[t[0] + 1.0], [t[1] + 1.0]], dtype=np.float32)
        t = [s + 1 for s in t]
        end = np.array([t[b] == lengths[b] for b in range(2)])
        terminated = np.array([[end[b] and term[b]] for b in range(2)])
        final = enc()
        for b in np.flatnonzero(end):
            episode[b], t[b] = episode[b] + 1, 0
        buf.add(np.ones((2, 1), int), rewards, terminated, end, final, reset_obs=enc())
    assert len(buf) == 14  # hand-computed: copy 0: 3 + 3 + 1, copy 1: 5 + 2
    # hand-computed with Sutton & Barto eq. 7.1 (r_t = t + 1, gamma = 0.5, n = 2):
    expected = sorted([
        (0, 0.0, 2.0, (2.0,), (0.25,)), (0, 1.0, 3.0, (3.5,), (0.25,)), (0, 2.0, 3.0, (3.0,), (0.5,)),
        (0, 10.0, 12.0, (2.0,), (0.25,)), (0, 11.0, 13.0, (3.5,), (0.25,)), (0, 12.0, 13.0, (3.0,), (0.5,)),
        (0, 20.0, 22.0, (2.0,), (0.25,)),
        (1, 0.0, 2.0, (2.0,), (0.25,)), (1, 1.0, 3.0, (3.5,), (0.25,)), (1, 2.0, 4.0, (5.0,), (0.25,)),
        (1, 3.0, 5.0, (6.5,), (0.0,)), (1, 4.0, 5.0, (5.0,), (0.0,)),
        (1, 10.0, 12.0, (2.0,), (0.25,)), (1, 11.0, 13.0, (3.5,), (0.25,)),
    ])
    # uniform priorities and K = len: the stratified draw takes every ready transition exactly once
    assert rows(buf.sample(14), 2) == expected
    # truncation (copy 0) bootstraps from the final obs 3 / 13; no action is ever taken from a final obs
    assert not {(0, 3.0), (0, 13.0), (1, 5.0)} & {r[:2] for r in expected}


# ---------------------------------------------------------------------------------------------- wrap-around
@pytest.mark.parametrize("dtype", [np.uint8, np.float32], ids=["uint8", "float32"])
def test_wrap_around_keeps_only_the_newest_and_consistent(dtype):
    """Copy b's observation at step j carries (j + 50 b) mod 256 (uint8) or j + 1000 b (float32);
    agent i's reward is j + 1000 b + 100 i. Capacity 12 over 2 copies = 6 slots each; n = 2."""
    B, N, C, n, gamma = 2, 2, 6, 2, 0.5
    buf = Replay(B * C, B, N, (3, 2), dtype, 5, n_step=n, gamma=gamma, seed=3)
    offset = 50 if dtype == np.uint8 else 1000

    def enc(j):
        return [(j + offset * b) % 256 if dtype == np.uint8 else j + offset * b for b in range(B)]

    def reward(j, b):
        return np.array([j + 1000 * b + 100 * i for i in range(N)], dtype=np.float64)

    buf.start(filled(enc(0), N, (3, 2), dtype))
    for j in range(300):  # > 256 steps, so uint8 values wrap too
        rewards = np.stack([reward(j, b) for b in range(B)])
        buf.add(np.zeros((B, N), int), rewards, np.zeros((B, N), bool), np.zeros(B, bool),
                filled(enc(j + 1), N, (3, 2), dtype))
        g = j + 1  # index of the newest observation
        starts = range(max(0, g - C + 1), g - n + 1)  # hand-computed: the ring keeps the last C observations
        assert len(buf) == B * len(starts)
        if not len(buf):
            continue
        expected = sorted((b, float(enc(t)[b]), float(enc(t + n)[b]),
                           rounded(reward(t, b) + gamma * reward(t + 1, b)),  # S&B eq. 7.1
                           (gamma ** n,) * N) for b in range(B) for t in starts)
        assert rows(buf.sample(len(buf)), B) == expected  # stratified, K = len: each exactly once
        assert set(rows(buf.sample(64), B)) <= set(expected)  # nothing overwritten is ever sampled


def test_random_episode_ends_across_the_wrap_match_the_definition():
    """Random episode ends and terminations over a tiny ring (7 slots per copy, 3 copies, n = 3): after every
    step the ready set and every sampled return, discount and bootstrap obs match a brute-force evaluation of
    Sutton & Barto eq. 7.1 over the recorded history (a transition survives while its start slot is among the
    copy's last C writes)."""
    B, N, C, n, gamma = 3, 2, 7, 3, 0.9
    rng = np.random.default_rng(7)
    buf = Replay(B * C, B, N, (2,), np.float32, 3, n_step=n, gamma=gamma, seed=1)
    next_id = [0]
    history = [[] for _ in range(B)]  # per copy, per write: [obs id, step info or None]

    def fresh():
        next_id[0] += 1
        return next_id[0]

    def write(b, ident):
        history[b].append([ident, None])

    first = [fresh() for _ in range(B)]
    for b in range(B):
        write(b, first[b])
    buf.start(filled(first, N, (2,), np.float32))
    for _ in range(250):
        rewards = rng.integers(0, 5, size=(B, N)).astype(np.float32)
        end = rng.random(B) < 0.25
        terminated = end[:, None] & (rng.random((B, N)) < 0.5)
        nxt, reset = [fresh() for _ in range(B)], [fresh() for _ in range(B)]
        for b in range(B):
            history[b][-1][1] = (rewards[b].astype(np.float64), terminated[b], bool(end[b]))
            write(b, nxt[b])
            if end[b]:
                write(b, reset[b])
        buf.add(rng.integers(0, 3, size=(B, N)), rewards, terminated, end,
                filled(nxt, N, (2,), np.float32), reset_obs=filled(reset, N, (2,), np.float32))
        expected = []
        for b in range(B):
            h = history[b]
            for w in range(max(0, len(h) - C), len(h)):
                if h[w][1] is None:
                    continue
                g, alive, m = np.zeros(N), np.ones(N, bool), None
                for k in range(n):
                    if w + k >= len(h) or h[w + k][1] is None:
                        break
                    r, term, ended = h[w + k][1]
                    g += np.where(alive, gamma ** k * r, 0.0)
                    alive &= ~term
                    if ended or k == n - 1:
                        m = k + 1
                        break
                if m is not None and w + m < len(h):
                    expected.append((b, float(h[w][0]), float(h[w + m][0]), rounded(g),
                                     rounded(gamma ** m * alive)))
        assert len(buf) == len(expected)
        if expected:
            assert rows(buf.sample(len(buf)), B) == sorted(expected)


# ---------------------------------------------------------------------------------------------- prioritized
def four_ready(alpha, **kw):
    drv = Single(n_step=1, prioritized=True, alpha=alpha, eps=1e-6, **kw)
    drv.start(0)
    for v in range(1, 5):
        drv.step(v, 0.0)
    assert len(drv.buf) == 4  # one copy: leaf index = slot = step
    return drv


def test_importance_weights_on_a_hand_computed_example():
    drv = four_ready(alpha=0.5)
    buf = drv.buf
    assert buf.tree.get(np.arange(4)).tolist() == [1.0] * 4  # new transitions at max priority 1 (our choice)
    buf.update_priorities(np.arange(4), np.array([1.0, 4.0, 9.0, 16.0]) - 1e-6)  # p = |delta| + eps
    # Schaul et al. 2016 eq. 1: p^alpha = sqrt(p) = 1, 2, 3, 4; P = 0.1, 0.2, 0.3, 0.4
    np.testing.assert_allclose(buf.tree.get(np.arange(4)), [1.0, 2.0, 3.0, 4.0])
    batch = buf.sample(10, beta=0.5)
    # stratified draw over segments of width 1 of the cumulative sums 1, 3, 6, 10 (hand-computed)
    order = np.argsort(batch["indices"], kind="stable")
    assert batch["indices"][order].tolist() == [0, 1, 1, 2, 2, 2, 3, 3, 3, 3]
    # Schaul et al. 2016: w = (M P)^-beta / max w, M = 4, beta = 0.5 -> sqrt(P_min / P), hand-computed
    weight = dict(zip(batch["indices"].tolist(), batch["weights"].tolist()))
    np.testing.assert_allclose([weight[i] for i in range(4)], [1.0, 1 / math.sqrt(2), 1 / math.sqrt(3), 0.5],
                               rtol=1e-5)
    # beta = 1: w proportional to 1 / P(i) (Schaul et al. 2016), normalised by the batch max: P_min / P
    batch = buf.sample(10, beta=1.0)
    weight = dict(zip(batch["indices"].tolist(), batch["weights"].tolist()))
    np.testing.assert_allclose([weight[i] for i in range(4)], [1.0, 0.5, 1 / 3, 0.25], rtol=1e-5)
    assert batch["weights"].dtype == np.float32


def test_priorities_update_and_new_transitions_enter_at_the_max():
    drv = four_ready(alpha=0.5)
    buf = drv.buf
    buf.update_priorities([0, 1, 2, 3], np.array([1.0, 4.0, 16.0, 9.0]) - 1e-6)
    drv.step(5, 0.0)  # transition 4 becomes ready
    # Schaul et al. 2016 (new transitions at maximal priority): running max p = 16 -> 16^0.5 = 4
    assert buf.tree.get([4])[0] == pytest.approx(4.0)
    assert buf.tree.total == pytest.approx(1 + 2 + 4 + 3 + 4)  # hand-computed
    buf.update_priorities([3], [0.0])  # p = eps -> eps^0.5 = 1e-3 (Schaul et al. 2016 eq. 1)
    assert buf.tree.get([3])[0] == pytest.approx(1e-3)
    buf.update_priorities([7], [5.0])  # slot 7 holds no ready transition: ignored (our choice)
    assert buf.tree.get([7])[0] == 0.0


def test_sampling_frequencies_follow_the_priorities():
    alpha = 0.6
    buf = Replay(64, 2, 1, (2,), np.float32, 3, prioritized=True, alpha=alpha, eps=1e-6, seed=11)
    buf.start(filled([0, 0], 1, (2,), np.float32))
    for _ in range(4):
        buf.add(np.zeros((2, 1), int), np.zeros((2, 1)), np.zeros((2, 1), bool), np.zeros(2, bool),
                filled([0, 0], 1, (2,), np.float32))
    assert len(buf) == 8
    leaves = np.arange(8)  # slots 0-3 of copies 0 and 1
    td = np.array([0.5, 1.0, 2.0, 3.0, 5.0, 8.0, 0.1, 4.0])
    buf.update_priorities(leaves, td)
    p = (td + 1e-6) ** alpha
    prob = p / p.sum()  # Schaul et al. 2016 eq. 1: P(i) = p_i^alpha / sum_k p_k^alpha
    draws, counts = 0, Counter()
    for _ in range(40):
        idx = buf.sample(500)["indices"]
        counts.update(idx.tolist())
        draws += idx.size
    assert set(counts) <= set(leaves.tolist())
    for i in leaves:
        sd = math.sqrt(draws * prob[i] * (1 - prob[i]))  # binomial sd; stratified sampling varies less
        assert abs(counts[i] - draws * prob[i]) <= 4 * sd, (i, counts[i], draws * prob[i])


def test_uniform_replay_weights_are_one_and_ignore_priority_updates():
    drv = Single()
    drv.start(0)
    for v in range(1, 4):
        drv.step(v, 0.0)
    batch = drv.buf.sample(5)
    assert batch["weights"].tolist() == [1.0] * 5  # uniform replay: no correction (Schaul et al. 2016, beta=0)
    drv.buf.update_priorities(batch["indices"], np.full(5, 9.0))
    assert drv.buf.tree.get(np.arange(3)).tolist() == [1.0] * 3


# ---------------------------------------------------------------------------------------------- batch, rng, memory
def test_batch_shapes_dtypes_and_states_line_up():
    B, N = 2, 3
    buf = Replay(40, B, N, (2, 3, 3), np.uint8, 300, state_shape=(4,), state_dtype=np.float32, n_step=2)
    assert buf._action.dtype == np.int16  # 300 actions do not fit uint8

    def state(j):
        return np.full((B, 4), j, dtype=np.float32) + np.arange(B)[:, None] * 100

    buf.start(filled([0, 100], N, (2, 3, 3), np.uint8), state(0))
    for j in range(5):
        buf.add(np.full((B, N), 299), np.ones((B, N)), np.zeros((B, N), bool), np.zeros(B, bool),
                filled([j + 1, j + 101], N, (2, 3, 3), np.uint8), next_state=state(j + 1))
    batch = buf.sample(7)
    shapes = {k: (v.shape, v.dtype) for k, v in batch.items()}
    assert shapes == {"obs": ((7, N, 2, 3, 3), np.uint8), "next_obs": ((7, N, 2, 3, 3), np.uint8),
                      "actions": ((7, N), np.int64), "returns": ((7, N), np.float32),
                      "discounts": ((7, N), np.float32), "weights": ((7,), np.float32),
                      "indices": ((7,), np.int64), "state": ((7, 4), np.float32),
                      "next_state": ((7, 4), np.float32)}
    assert (batch["actions"] == 299).all()
    np.testing.assert_array_equal(batch["state"][:, 0], value_of(batch["obs"]))  # state and obs of one slot
    np.testing.assert_array_equal(batch["next_state"][:, 0], value_of(batch["obs"]) + 2)  # n = 2 steps on


def test_from_team_and_rng_state_round_trip():
    team = TeamSpec(("a", "b"), spaces.Box(0, 255, (3, 5, 5), np.uint8), 8,
                    spaces.Box(0, 255, (3, 7, 7), np.uint8))
    bufs = [Replay.from_team(team, 64, 2, seed=5) for _ in range(2)]
    for buf in bufs:
        assert buf.state_shape == (3, 7, 7) and buf.obs_dtype == np.uint8
        buf.start(np.zeros((2, 2, 3, 5, 5), np.uint8), np.zeros((2, 3, 7, 7), np.uint8))
        for _ in range(10):
            buf.add(np.zeros((2, 2), int), np.zeros((2, 2)), np.zeros((2, 2), bool), np.zeros(2, bool),
                    np.zeros((2, 2, 3, 5, 5), np.uint8), np.zeros((2, 3, 7, 7), np.uint8))
    a, b = bufs
    assert a.sample(8)["indices"].tolist() == b.sample(8)["indices"].tolist()  # same seed, same draws
    saved = a.rng_state()
    assert isinstance(saved, dict)
    first = a.sample(8)["indices"].tolist()
    a.set_rng_state(saved)
    assert a.sample(8)["indices"].tolist() == first
    with pytest.raises(ValueError, match="generator state"):
        a.set_rng_state({"bit_generator": "MT19937"})


def test_memory_per_transition_is_close_to_the_raw_observation_bytes():
    # the harvest-sized case: 5 agents, (9,15,15) uint8 windows, a (9,15,22) uint8 state, 64 copies
    buf = Replay(100_000, 64, 5, (9, 15, 15), np.uint8, 8, state_shape=(9, 15, 22), state_dtype=np.uint8)
    assert buf.slots == 1562
    assert buf.raw_bytes_per_transition == 5 * 9 * 15 * 15 + 9 * 15 * 22  # hand-computed: 13095
    assert buf.bytes_per_transition == buf.nbytes / (1562 * 64)
    assert buf.nbytes > buf.slots * 64 * buf.raw_bytes_per_transition + buf.tree.nbytes
    assert buf.bytes_per_transition / buf.raw_bytes_per_transition <= 1.1  # design target


# ---------------------------------------------------------------------------------------------- bit packing
def _twin_buffers(n_step: int = 3, state: bool = True, prioritized: bool = False):
    """A plain and a bit-packed buffer fed the same random 0/1 stream, with episode ends, from one seed."""
    B, N, obs_shape, state_shape = 3, 2, (3, 5, 5), (4, 5, 7)  # 75 and 140 cells: not multiples of 8
    kw = dict(n_step=n_step, gamma=0.9, prioritized=prioritized, seed=7,
              state_shape=state_shape if state else None, state_dtype=np.uint8 if state else None)
    bufs = [Replay(60, B, N, obs_shape, np.uint8, 7, pack_bits=p, **kw) for p in (False, True)]
    rng = np.random.default_rng(0)

    def obs():
        return rng.integers(0, 2, (B, N, *obs_shape), dtype=np.uint8)

    def st():
        return rng.integers(0, 2, (B, *state_shape), dtype=np.uint8) if state else None

    o, s = obs(), st()
    for buf in bufs:
        buf.start(o, s)
    for _ in range(50):  # more steps than slots: the rings wrap
        args = (rng.integers(0, 7, (B, N)), rng.normal(size=(B, N)), rng.random((B, N)) < 0.05,
                rng.random(B) < 0.15, obs(), st(), obs(), st())
        for buf in bufs:
            buf.add(*args)
    return bufs


@pytest.mark.parametrize("state, prioritized", [(True, False), (False, True)])
def test_packed_batches_are_bit_for_bit_those_of_the_plain_store(state, prioritized):
    plain, packed = _twin_buffers(state=state, prioritized=prioritized)
    assert packed.pack_bits and not plain.pack_bits
    for _ in range(5):
        a, b = plain.sample(32), packed.sample(32)
        assert a.keys() == b.keys()
        for k in a:
            assert a[k].dtype == b[k].dtype and a[k].shape == b[k].shape, k
            np.testing.assert_array_equal(a[k], b[k], err_msg=k)
        if prioritized:
            td = np.abs(a["returns"]).mean(axis=1)
            plain.update_priorities(a["indices"], td)
            packed.update_priorities(b["indices"], td)


def test_packed_store_is_an_eighth_of_the_observation_bytes():
    # the harvest-sized case of the test above: 5 agents, (9,15,15) windows, 8 copies
    plain = Replay(100_000, 8, 5, (9, 15, 15), np.uint8, 8)
    packed = Replay(100_000, 8, 5, (9, 15, 15), np.uint8, 8, pack_bits=True)
    assert packed._obs.shape[-1] == 254  # ceil(2025 / 8), hand-computed
    assert plain.nbytes / (plain.slots * 8 * plain.raw_bytes_per_transition) > 1.0
    assert packed.nbytes / (packed.slots * 8 * packed.raw_bytes_per_transition) <= 0.15  # issue goal


def test_packed_store_refuses_values_other_than_0_and_1():
    buf = Replay(20, 1, 1, (2, 2), np.uint8, 3, pack_bits=True)
    with pytest.raises(ValueError, match="holds the value 2; a bit-packed store keeps 0s and 1s only"):
        buf.start(np.full((1, 1, 2, 2), 2, np.uint8))
    with pytest.raises(ValueError, match="pack_bits needs uint8 observations"):
        Replay(20, 1, 1, (2,), np.float32, 3, pack_bits=True)


def test_training_packs_grid_observations_and_not_vectors(tmp_path):
    from marl_core.config import parse_config
    from marl_core.train import _Run

    grid = {"env": {"name": "harvest_v0", "num_envs": 2,
                    "params": {"layout": "harvest_tiny", "num_agents": 2, "view_radius": 2}},
            "learner": {"replay_size": 1000}, "log": {"tensorboard": False, "gif_every": 0}}
    assert _Run(parse_config(grid), tmp_path / "a", None).replay.pack_bits
    off = parse_config(grid, ["learner.pack_replay=false"])
    assert not _Run(off, tmp_path / "b", None).replay.pack_bits
    vector = {"env": {"name": "gymnasium:CartPole-v1", "num_envs": 2}, "learner": {"replay_size": 1000},
              "log": {"tensorboard": False, "gif_every": 0}}
    assert not _Run(parse_config(vector), tmp_path / "c", None).replay.pack_bits
