"""Replay buffer for a batch of env copies: one preallocated ring per copy, n-step returns, a sum-tree.

The training loop steps ``B`` copies of an env with ``N`` agents each and records every joint step with
:meth:`Replay.add`; learners draw batches with :meth:`Replay.sample`. This module uses numpy only (no torch).

Shape:
    start:  obs (B, N, *obs_shape), state (B, *state_shape)
    add:    actions (B, N) int, rewards (B, N) float, terminated (B, N) bool, end (B,) bool,
            next_obs / reset_obs (B, N, *obs_shape), next_state / reset_state (B, *state_shape)
    sample: obs / next_obs (K, N, *obs_shape), actions (K, N) int64, returns (K, N) float32,
            discounts (K, N) float32, state / next_state (K, *state_shape), weights (K,) float32,
            indices (K,) int64

Storage. ``capacity`` counts joint transitions over all copies; each copy owns ``C = capacity // num_envs``
slots (the remainder is unused) and its own write pointer, because copies end episodes at different times.
Slot ``s`` of copy ``b`` holds an observation and, once an action has been taken from it (``start_ok``), that
step's action, rewards and per-agent termination flags, and ``end`` (the copy's episode ended with this step,
by termination or truncation). The next observation of slot ``s`` is never stored twice: it is slot ``s + 1``.
When an episode ends, the final observation (needed to bootstrap after a truncation) takes the next slot,
from which no action is ever taken, and the first observation of the next episode the slot after it; so
every episode end costs one slot of the ring. ``stamp`` holds each slot's write count within its copy, so
``sample`` can check that a window is made of consecutive writes. Arrays are allocated once with
``numpy.zeros``; the operating system commits their pages as the ring fills.

Readiness. A transition (a slot with an action) becomes ready, that is sampleable, once its whole n-step
window is written: ``n`` further steps, or an episode end within the window. Writing into a slot overwrites
the oldest observation of that copy; the transition that started there is invalidated (not ready, priority
0). Later slots of its window are newer, so no other ready transition can lose part of its window; this needs
``C >= n_step + 2`` (one slot for the final observation, one for the reset observation).

Returns (Sutton & Barto 2nd ed., eq. 7.1), computed at sampling time. For a transition at slot ``s``:
``G = sum_{k<m} gamma^k r_{s+k}`` and the bootstrap observation is at slot ``s + m``, where ``m = n`` unless
the episode ends with the step from ``s + k`` (``k < n``), in which case ``m = k + 1`` (the bootstrap is then
the final observation). ``discounts = gamma^m`` per agent, set to 0 for an agent terminated at any step of the
window. Choice: an agent terminated inside the window while its copy's episode goes on (possible in a
PettingZoo env) collects no reward after its termination step, and its bootstrap is masked.

Sampling always goes through a :class:`SumTree` over the ``C * B`` leaves (leaf = ``slot * num_envs +
copy``). Uniform replay stores priority 1 for every ready transition; prioritized replay (Schaul et al. 2016,
proportional variant, from memory) stores ``p^alpha`` with ``p = |delta| + eps``, so that
``P(i) = p_i^alpha / sum_k p_k^alpha``. Sampling is stratified: the total is split into ``K`` equal
segments and one uniform draw falls in each. Choices:

* new transitions enter at the largest priority ``p`` ever given to :meth:`Replay.update_priorities`
  (1 before the first update), a running maximum that never decreases (common practice, no source);
* importance weights ``w_i = (M P(i))^(-beta)`` with ``M`` the number of ready transitions are divided by
  their maximum over the *batch* (common practice; the paper divides by the maximum weight, a buffer-wide
  maximum would need a min-tree); uniform replay returns weights of one;
* :meth:`Replay.update_priorities` expects one non-negative magnitude per joint transition (the learner
  reduces its per-agent TD errors, e.g. the mean of ``|delta_i|``); it adds ``eps`` and raises on negative or
  non-finite values. Leaves that are no longer ready (overwritten since the batch was drawn) are skipped.

Bit packing. With ``pack_bits`` (the training loop turns it on when the observation space is uint8 with
bounds 0 and 1, as on our grid games), each agent's observation, and the state, is stored flattened and
packed eight cells to a byte with ``numpy.packbits`` and unpacked with ``numpy.unpackbits`` for each sampled
batch, so batches are bit for bit those of the plain store at about an eighth of its observation bytes.
Writing a value other than 0 or 1 into a packed store raises ``ValueError``. Observations that are not
0/1 (float vectors, counts) keep the plain store.

A second call of :meth:`Replay.start` (the env was reset without an episode end being reported) truncates
every copy's episode at its last step: the current observation becomes that episode's final observation.

The buffer owns a ``numpy.random.Generator`` built from ``seed``; :meth:`Replay.rng_state` and
:meth:`Replay.set_rng_state` move its state in and out of checkpoints as a plain dict.
"""

from __future__ import annotations

import copy
import numbers
from typing import TYPE_CHECKING, Any

import numpy as np

from marl_core.errors import ConfigError

if TYPE_CHECKING:
    from marl_core.spec import TeamSpec

__all__ = ["Replay", "SumTree"]


class SumTree:
    """A binary tree whose every node holds the sum of its two children; the leaves hold priorities.

    ``size`` leaves are padded with zeros up to a power of two ``P``; node 1 is the root and leaf ``i`` is node
    ``P + i``. Both operations are vectorised over their batch and loop over the tree's depth only.

    Shape:
        update: leaves (K,) int, values (K,) float >= 0
        find:   prefix_sums (K,) float -> leaves (K,) int64
    """

    def __init__(self, size: int) -> None:
        if int(size) < 1:
            raise ValueError(f"SumTree: size = {size}; expected at least 1 leaf")
        self.size = int(size)
        self.depth = max(0, int(self.size - 1).bit_length())
        self.base = 1 << self.depth
        self.nodes = np.zeros(2 * self.base, dtype=np.float64)

    @property
    def total(self) -> float:
        return float(self.nodes[1])

    @property
    def nbytes(self) -> int:
        return int(self.nodes.nbytes)

    def get(self, leaves: np.ndarray) -> np.ndarray:
        """The values stored at ``leaves`` (float64)."""
        return self.nodes[np.asarray(leaves, dtype=np.int64) + self.base]

    def update(self, leaves: np.ndarray, values: np.ndarray) -> None:
        """Set ``values`` at ``leaves`` and recompute their ancestors (if a leaf repeats, one value is kept)."""
        leaves = np.asarray(leaves, dtype=np.int64).reshape(-1)
        values = np.broadcast_to(np.asarray(values, dtype=np.float64), leaves.shape)
        if leaves.size == 0:
            return
        if leaves.min() < 0 or leaves.max() >= self.size:
            raise IndexError(f"SumTree: leaf index out of range [0, {self.size})")
        if not np.all(np.isfinite(values)) or values.min() < 0:
            raise ValueError("SumTree: values must be finite and non-negative")
        node = leaves + self.base
        self.nodes[node] = values
        for _ in range(self.depth):
            node >>= 1
            # recomputed from the children (not incremented), so sums never drift; repeated parents are harmless
            self.nodes[node] = self.nodes[2 * node] + self.nodes[2 * node + 1]

    def find(self, prefix_sums: np.ndarray) -> np.ndarray:
        """For each value ``u`` in ``[0, total)``, the leaf ``i`` with ``sum_{j<i} v_j <= u < sum_{j<=i} v_j``.

        The descent never enters a subtree whose sum is zero, so rounding (or ``u >= total``) still yields a
        leaf of positive value, as long as the total is positive.
        """
        u = np.array(prefix_sums, dtype=np.float64, copy=True).reshape(-1)
        node = np.ones(u.shape, dtype=np.int64)
        for _ in range(self.depth):
            left = 2 * node
            left_sum = self.nodes[left]
            right = (u >= left_sum) & (self.nodes[left + 1] > 0)
            u = np.where(right, u - left_sum, u)
            node = np.where(right, left + 1, left)
        return node - self.base

    def __repr__(self) -> str:
        return f"SumTree(size={self.size}, total={self.total:g})"


def _check(name: str, value: Any, ok: bool, allowed: str) -> None:
    if not ok:
        raise ConfigError(f"{name} = {value!r}; expected {allowed}")


class Replay:
    """Ring buffer of joint transitions of ``num_envs`` env copies with ``num_agents`` agents each.

    Args:
        capacity: joint transitions in total over all copies (config key ``learner.replay_size``).
        num_envs: number of env copies ``B`` stepped together.
        num_agents: agents per copy ``N``.
        obs_shape, obs_dtype: one agent's observation (uint8 for the grid games, float32 for vector envs).
        num_actions: size of every agent's discrete action space (actions are stored as uint8 up to 256).
        state_shape, state_dtype: the env's global state, or ``None`` when it has none (dtype defaults to
            ``obs_dtype``).
        n_step: length of the return window.
        gamma: discount factor.
        prioritized: proportional prioritized replay instead of uniform.
        alpha: priority exponent (prioritized only).
        eps: added to every priority magnitude (prioritized only).
        seed: seed of the buffer's own generator.
        pack_bits: store observations (and the state) bit-packed; needs uint8 values that are 0 or 1.
    """

    def __init__(self, capacity: int, num_envs: int, num_agents: int, obs_shape: tuple[int, ...],
                 obs_dtype: Any, num_actions: int, state_shape: tuple[int, ...] | None = None,
                 state_dtype: Any = None, n_step: int = 1, gamma: float = 0.99, prioritized: bool = False,
                 alpha: float = 0.6, eps: float = 1e-6, seed: int = 0, pack_bits: bool = False) -> None:
        _check("replay num_envs", num_envs, isinstance(num_envs, (int, np.integer)) and num_envs >= 1,
               "an integer >= 1")
        _check("replay num_agents", num_agents, isinstance(num_agents, (int, np.integer)) and num_agents >= 1,
               "an integer >= 1")
        _check("replay num_actions", num_actions,
               isinstance(num_actions, (int, np.integer)) and 1 <= num_actions <= 2**31, "an integer >= 1")
        _check("learner.n_step", n_step, isinstance(n_step, (int, np.integer)) and n_step >= 1,
               "an integer >= 1")
        _check("learner.gamma", gamma, isinstance(gamma, numbers.Real) and 0.0 <= gamma <= 1.0,
               "a number in [0, 1]")
        _check("replay alpha", alpha, isinstance(alpha, numbers.Real) and alpha >= 0.0, "a number >= 0")
        _check("replay eps", eps, isinstance(eps, numbers.Real) and eps > 0.0, "a number > 0")
        _check("learner.replay_size", capacity, isinstance(capacity, (int, np.integer)) and capacity >= 1,
               "an integer >= 1")
        slots = int(capacity) // int(num_envs)
        if slots < n_step + 2:
            raise ConfigError(
                f"learner.replay_size = {capacity} gives {slots} slots per env copy with num_envs = {num_envs};"
                f" expected at least n_step + 2 = {n_step + 2} per copy (learner.replay_size >= "
                f"{(n_step + 2) * num_envs})")
        self.capacity = int(capacity)
        self.num_envs = B = int(num_envs)
        self.num_agents = N = int(num_agents)
        self.slots = C = slots
        self.obs_shape = tuple(int(d) for d in obs_shape)
        self.obs_dtype = np.dtype(obs_dtype)
        self.num_actions = int(num_actions)
        self.state_shape = None if state_shape is None else tuple(int(d) for d in state_shape)
        self.state_dtype = None if state_shape is None else np.dtype(
            obs_dtype if state_dtype is None else state_dtype)
        self.n_step = int(n_step)
        self.gamma = float(gamma)
        self.prioritized = bool(prioritized)
        self.alpha = float(alpha)
        self.eps = float(eps)

        if self.num_actions <= 256:
            action_dtype = np.uint8
        elif self.num_actions <= 2**15:
            action_dtype = np.int16
        else:
            action_dtype = np.int32
        self.pack_bits = bool(pack_bits)
        if self.pack_bits:
            for what, dtype in (("observations", self.obs_dtype), ("states", self.state_dtype)):
                if dtype is not None and dtype != np.uint8:
                    raise ValueError(f"replay: pack_bits needs uint8 {what} of 0s and 1s; got dtype {dtype}")
        self._obs = np.zeros((C, B, N, *self._stored(self.obs_shape)), dtype=self.obs_dtype)
        self._state = (None if self.state_shape is None
                       else np.zeros((C, B, *self._stored(self.state_shape)), dtype=self.state_dtype))
        self._action = np.zeros((C, B, N), dtype=action_dtype)
        self._reward = np.zeros((C, B, N), dtype=np.float32)
        self._terminated = np.zeros((C, B, N), dtype=bool)
        self._end = np.zeros((C, B), dtype=bool)
        self._start_ok = np.zeros((C, B), dtype=bool)
        self._ready = np.zeros((C, B), dtype=bool)
        self._stamp = np.full((C, B), -1, dtype=np.int64)
        self._ptr = np.zeros(B, dtype=np.int64)  # slot of each copy's current observation
        self._writes = np.zeros(B, dtype=np.int64)  # observations written so far, per copy
        self._copies = np.arange(B, dtype=np.int64)
        self._discount_pow = self.gamma ** np.arange(self.n_step + 1, dtype=np.float64)
        self.tree = SumTree(C * B)
        self._num_ready = 0
        self._max_priority = 1.0
        self._started = False
        self._rng = np.random.default_rng(seed)

    @classmethod
    def from_team(cls, team: TeamSpec, capacity: int, num_envs: int, **options: Any) -> Replay:
        """A buffer shaped for ``team`` (a :class:`marl_core.spec.TeamSpec`); ``options`` as in the constructor."""
        state = team.state_space
        return cls(capacity, num_envs, team.num_agents, team.obs_shape, team.obs_dtype, team.num_actions,
                   state_shape=None if state is None else tuple(state.shape),
                   state_dtype=None if state is None else state.dtype, **options)

    # ------------------------------------------------------------------ bit packing
    def _stored(self, shape: tuple[int, ...]) -> tuple[int, ...]:
        """The stored shape of one observation (or state) of ``shape``: packed to bytes of 8 cells, or as is."""
        return ((int(np.prod(shape, dtype=np.int64)) + 7) // 8,) if self.pack_bits else shape

    def _pack(self, name: str, x: np.ndarray, lead: int) -> np.ndarray:
        """``x`` with its first ``lead`` axes kept and the rest packed (a no-op for the plain store)."""
        if not self.pack_bits:
            return x
        if x.size and x.max() > 1:  # uint8: nothing below 0
            raise ValueError(f"replay: {name} holds the value {int(x.max())}; a bit-packed store keeps 0s and "
                             f"1s only")
        return np.packbits(x.reshape(*x.shape[:lead], -1), axis=-1)

    def _unpack(self, x: np.ndarray, shape: tuple[int, ...]) -> np.ndarray:
        if not self.pack_bits:
            return x
        cells = int(np.prod(shape, dtype=np.int64))
        return np.unpackbits(x, axis=-1, count=cells).reshape(*x.shape[:-1], *shape)

    # ------------------------------------------------------------------ sizes
    def __len__(self) -> int:
        """Number of ready (sampleable) transitions."""
        return self._num_ready

    def _arrays(self) -> list[np.ndarray]:
        arrays = [self._obs, self._action, self._reward, self._terminated, self._end, self._start_ok,
                  self._ready, self._stamp, self._ptr, self._writes, self._copies, self._discount_pow,
                  self.tree.nodes]
        return arrays if self._state is None else [*arrays, self._state]

    @property
    def nbytes(self) -> int:
        """Bytes of every preallocated array, the sum-tree included."""
        return int(sum(a.nbytes for a in self._arrays()))

    @property
    def bytes_per_transition(self) -> float:
        return self.nbytes / (self.slots * self.num_envs)

    @property
    def raw_bytes_per_transition(self) -> int:
        """Bytes of one joint observation (and state), stored once: the floor for any buffer."""
        raw = self.num_agents * int(np.prod(self.obs_shape, dtype=np.int64)) * self.obs_dtype.itemsize
        if self.state_shape is not None:
            raw += int(np.prod(self.state_shape, dtype=np.int64)) * self.state_dtype.itemsize
        return raw

    def __repr__(self) -> str:
        state = "" if self.state_shape is None else f", state_shape={self.state_shape}"
        return (f"Replay(capacity={self.capacity}, num_envs={self.num_envs}, num_agents={self.num_agents}, "
                f"obs_shape={self.obs_shape}, obs_dtype={self.obs_dtype}{state}, pack_bits={self.pack_bits}, "
                f"n_step={self.n_step}, "
                f"gamma={self.gamma}, prioritized={self.prioritized}, alpha={self.alpha}, ready={len(self)})")

    # ------------------------------------------------------------------ writing
    def _shape(self, name: str, value: Any, shape: tuple[int, ...], dtype: Any = None) -> np.ndarray:
        arr = np.asarray(value, dtype=dtype)
        if arr.shape != shape:
            raise ValueError(f"replay: {name} has shape {arr.shape}; expected {shape}")
        return arr

    def _obs_args(self, name: str, obs: Any, state_name: str, state: Any) -> tuple[np.ndarray, Any]:
        obs = self._shape(name, obs, (self.num_envs, self.num_agents, *self.obs_shape))
        if self.state_shape is None:
            return obs, None
        if state is None:
            raise ValueError(f"replay: this buffer stores states; {state_name} is missing")
        return obs, self._shape(state_name, state, (self.num_envs, *self.state_shape))

    def _write(self, slot: np.ndarray, copies: np.ndarray, obs: np.ndarray, state: np.ndarray | None,
               dead: list[np.ndarray]) -> None:
        """Write observations into ``slot`` of ``copies``, invalidating what started there."""
        old = self._ready[slot, copies]
        if old.any():
            self._num_ready -= int(old.sum())
            dead.append(slot[old] * self.num_envs + copies[old])
        self._ready[slot, copies] = False
        self._start_ok[slot, copies] = False
        self._end[slot, copies] = False
        self._terminated[slot, copies] = False
        self._obs[slot, copies] = self._pack("an observation", obs, 2)
        if state is not None:
            self._state[slot, copies] = self._pack("a state", state, 1)
        self._stamp[slot, copies] = self._writes[copies]
        self._writes[copies] += 1

    def _mark_ready(self, last: np.ndarray, ended: np.ndarray, born: list[np.ndarray]) -> None:
        """The step from slot ``last`` has just been recorded (``ended``: it ended its copy's episode).

        Transition ``t = last - k`` (``k < n``) becomes ready when it lies in the same episode as ``last`` and
        its window is now complete: ``k = n - 1``, or the episode ended.
        """
        C, bi = self.slots, self._copies
        same = self._start_ok[last, bi].copy()
        for k in range(self.n_step):
            t = (last - k) % C
            if k > 0:
                same &= self._start_ok[t, bi] & ~self._end[t, bi]  # (a final obs slot has no start_ok)
            new = same & ~self._ready[t, bi]
            if k < self.n_step - 1:
                new &= ended
            if new.any():
                self._ready[t[new], bi[new]] = True
                self._num_ready += int(new.sum())
                born.append(t[new] * self.num_envs + bi[new])

    def _commit(self, born: list[np.ndarray], dead: list[np.ndarray]) -> None:
        leaves, values = [], []
        if born:
            leaves.extend(born)
            priority = self._max_priority ** self.alpha if self.prioritized else 1.0
            values.extend(np.full(len(x), priority) for x in born)
        if dead:
            leaves.extend(dead)
            values.extend(np.zeros(len(x)) for x in dead)
        if leaves:
            self.tree.update(np.concatenate(leaves), np.concatenate(values))

    def start(self, obs: np.ndarray, state: np.ndarray | None = None) -> None:
        """Record the first observation of every copy, right after the env's reset.

        Called again later, it truncates every copy's running episode at its last step (the current
        observation becomes the final one) and starts the new episodes with ``obs``.
        """
        obs, state = self._obs_args("obs", obs, "state", state)
        born: list[np.ndarray] = []
        dead: list[np.ndarray] = []
        bi = self._copies
        if self._started:
            last = (self._ptr - 1) % self.slots
            cut = self._start_ok[last, bi].copy()  # false right after an episode end or a start()
            self._end[last[cut], bi[cut]] = True
            self._mark_ready(last, cut, born)
            self._ptr = (self._ptr + 1) % self.slots
        self._write(self._ptr.copy(), bi, obs, state, dead)
        self._started = True
        self._commit(born, dead)

    def add(self, actions: np.ndarray, rewards: np.ndarray, terminated: np.ndarray, end: np.ndarray,
            next_obs: np.ndarray, next_state: np.ndarray | None = None, reset_obs: np.ndarray | None = None,
            reset_state: np.ndarray | None = None) -> None:
        """Record one env step of every copy.

        ``end[b]``: copy ``b``'s episode ended with this step (terminated or truncated); then ``next_obs[b]``
        is the episode's final observation and ``reset_obs[b]`` the first observation of the next one (rows
        of copies that did not end are ignored). ``terminated`` is per agent; ``end`` without any terminated
        agent is a truncation and the final observation is bootstrapped from.
        """
        if not self._started:
            raise RuntimeError("replay: call start(obs) with the env's first observations before add()")
        B, N = self.num_envs, self.num_agents
        actions = self._shape("actions", actions, (B, N))
        if actions.size and (actions.min() < 0 or actions.max() >= self.num_actions):
            raise ValueError(f"replay: actions must lie in [0, {self.num_actions}); got "
                             f"[{actions.min()}, {actions.max()}]")
        rewards = self._shape("rewards", rewards, (B, N), np.float32)
        terminated = self._shape("terminated", terminated, (B, N), bool)
        end = self._shape("end", end, (B,), bool)
        next_obs, next_state = self._obs_args("next_obs", next_obs, "next_state", next_state)
        ended = np.flatnonzero(end)
        if ended.size:
            if reset_obs is None:
                raise ValueError("replay: some copies ended their episode; reset_obs is missing")
            reset_obs, reset_state = self._obs_args("reset_obs", reset_obs, "reset_state", reset_state)

        born: list[np.ndarray] = []
        dead: list[np.ndarray] = []
        C, bi, p = self.slots, self._copies, self._ptr
        self._action[p, bi] = actions
        self._reward[p, bi] = rewards
        self._terminated[p, bi] = terminated
        self._end[p, bi] = end
        self._start_ok[p, bi] = True
        self._mark_ready(p, end, born)
        q = (p + 1) % C
        self._write(q, bi, next_obs, next_state, dead)
        if ended.size:
            r = (q[ended] + 1) % C
            self._write(r, ended, reset_obs[ended], None if reset_state is None else reset_state[ended], dead)
            q[ended] = r
        self._ptr = q
        self._commit(born, dead)

    # ------------------------------------------------------------------ reading
    def sample(self, batch_size: int, beta: float = 0.4) -> dict[str, np.ndarray]:
        """Draw ``batch_size`` transitions through the sum-tree (stratified); see the module docstring."""
        if not isinstance(batch_size, (int, np.integer)) or batch_size < 1:
            raise ValueError(f"replay: batch_size = {batch_size!r}; expected an integer >= 1")
        if not beta >= 0:
            raise ValueError(f"replay: beta = {beta!r}; expected a number >= 0")
        if self._num_ready == 0:
            raise RuntimeError(
                f"replay: nothing to sample yet (len(replay) == 0); a transition becomes ready after "
                f"n_step = {self.n_step} further steps or an episode end, so start learning only after that")
        K, C, B = int(batch_size), self.slots, self.num_envs
        total = self.tree.total
        u = (np.arange(K) + self._rng.random(K)) * (total / K)
        leaves = self.tree.find(u)
        s, b = leaves // B, leaves % B

        returns = np.zeros((K, self.num_agents), dtype=np.float64)
        alive = np.ones((K, self.num_agents), dtype=bool)  # agent not terminated so far in the window
        open_ = np.ones(K, dtype=bool)  # the episode has not ended before step k
        m = np.zeros(K, dtype=np.int64)
        for k in range(self.n_step):
            sl = (s + k) % C
            step = alive & open_[:, None]
            returns += np.where(step, self._discount_pow[k] * self._reward[sl, b], 0.0)
            alive &= ~(step & self._terminated[sl, b])
            m += open_
            open_ &= ~self._end[sl, b]
        boot = (s + m) % C
        if not np.array_equal(self._stamp[boot, b], self._stamp[s, b] + m):
            raise RuntimeError("replay: internal error, a sampled window is not made of consecutive writes")
        discounts = self._discount_pow[m][:, None] * alive

        if self.prioritized:
            prob = self.tree.get(leaves) / total
            weights = (self._num_ready * prob) ** (-float(beta))
            weights /= weights.max()
        else:
            weights = np.ones(K)
        batch = {
            "obs": self._unpack(self._obs[s, b], self.obs_shape),
            "actions": self._action[s, b].astype(np.int64),
            "returns": returns.astype(np.float32),
            "discounts": discounts.astype(np.float32),
            "next_obs": self._unpack(self._obs[boot, b], self.obs_shape),
            "weights": weights.astype(np.float32),
            "indices": leaves.astype(np.int64),
        }
        if self._state is not None:
            batch["state"] = self._unpack(self._state[s, b], self.state_shape)
            batch["next_state"] = self._unpack(self._state[boot, b], self.state_shape)
        return batch

    def update_priorities(self, indices: np.ndarray, td_errors: np.ndarray) -> None:
        """Set the priority of sampled transitions from one non-negative TD magnitude each.

        ``indices`` as returned by :meth:`sample`; ``td_errors`` ``(K,)`` (the learner reduces per-agent errors
        to one number per joint transition). No-op for uniform replay. Leaves no longer ready are skipped.
        """
        indices = np.asarray(indices, dtype=np.int64).reshape(-1)
        td = np.asarray(td_errors, dtype=np.float64).reshape(-1)
        if td.shape != indices.shape:
            raise ValueError(f"replay: td_errors has shape {td.shape}; expected {indices.shape} like indices")
        if indices.size == 0 or not self.prioritized:
            return
        if not np.all(np.isfinite(td)) or td.min() < 0:
            raise ValueError("replay: td_errors must be finite, non-negative magnitudes (e.g. |TD error|)")
        if indices.min() < 0 or indices.max() >= self.slots * self.num_envs:
            raise IndexError(f"replay: indices must lie in [0, {self.slots * self.num_envs})")
        live = self._ready.reshape(-1)[indices]
        priority = td[live] + self.eps
        if priority.size:
            self._max_priority = max(self._max_priority, float(priority.max()))
            self.tree.update(indices[live], priority ** self.alpha)

    # ------------------------------------------------------------------ checkpoints
    def rng_state(self) -> dict:
        """The generator's state as a plain dict (for checkpoints)."""
        return copy.deepcopy(self._rng.bit_generator.state)

    def set_rng_state(self, state: dict) -> None:
        name = type(self._rng.bit_generator).__name__
        if not isinstance(state, dict) or state.get("bit_generator") != name:
            raise ValueError(f"replay: expected a {name} generator state dict, got {state!r:.80}")
        self._rng.bit_generator.state = copy.deepcopy(state)
