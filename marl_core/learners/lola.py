"""Opponent shaping (LOLA) and naive learners on two-player iterated matrix games, exact gradients.

Foerster et al. 2018, "Learning with Opponent-Learning Awareness" (docs/sources.md, "LOLA"). Each of two
players holds a memory-one policy over two actions: five logits, one for the first round and one for each
previous joint action. ``sigmoid(theta[k])`` is the probability of action 0 (cooperate, heads, ...):

    k = 0                     the first round (no previous joint action)
    k = 1 + 2 * a0 + a1       after the joint action (agent_0 played a0, agent_1 played a1)

The states are indexed the same way for both players (agent_0's action first), as ``matrix_v0``'s
observation lists them: entry ``i * 2 + a`` of its one-hot vector is 1 when agent i played a.

The discounted value of the infinitely repeated game has a closed form. With ``p0`` the distribution of the
first joint action, ``P`` the 4 x 4 transition matrix between joint actions and ``r_i`` player i's payoff
per joint action, ``V_i = p0^T (I - gamma P)^{-1} r_i``: the sum over rounds t >= 0 of ``gamma^t`` times
the expected payoff of round t (Foerster et al. 2018, Section 4.2, from memory). It is differentiated with
torch autograd.

Updates, both players at once from the same parameters (from memory of the paper's Section 3):

    naive learner (NL)  theta_1 += delta * grad_1 V_1
    LOLA                theta_1 += delta * grad_1 V_1
                                   + delta * eta * (grad_2 V_1)^T (grad_1 grad_2 V_2)

``grad_2 V_1`` is held fixed in the second-order term: it is the first-order Taylor expansion of
``V_1(theta_1, theta_2 + eta * grad_2 V_2)`` with only the opponent's step differentiated through. The
mirror image holds for player 2.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import torch

from marl_core.policy import state_index

__all__ = ["NUM_STATES", "values", "values_from_probs", "shaped_step", "exact_step", "dice_values", "play",
           "play_episodes", "sample", "train_exact", "ExactResult", "joint_payoffs", "state_index"]

NUM_STATES = 5  # first round + four previous joint actions


def joint_payoffs(table: np.ndarray) -> torch.Tensor:
    """``(2, 2, 2)`` table ``[a0, a1, player]`` (``matrix_v0``'s ``payoff_table``) -> ``(4, 2)`` float64,
    row ``2 * a0 + a1``."""
    table = np.asarray(table, dtype=np.float64)
    if table.shape != (2, 2, 2):
        raise ValueError(f"payoff table has shape {table.shape}; exact LOLA needs two players with two "
                         f"actions each, shape (2, 2, 2)")
    return torch.as_tensor(table.reshape(4, 2))


def values_from_probs(p0: torch.Tensor, p1: torch.Tensor, payoffs: torch.Tensor,
                      gamma: float) -> torch.Tensor:
    """The two players' discounted values ``(2,)`` for memory-one policies given as probabilities.

    Args:
        p0, p1: ``(5,)`` probability of action 0 for each player: first round, then after joint actions
            (0,0), (0,1), (1,0), (1,1) (agent_0's action first).
        payoffs: ``(4, 2)`` payoff of each player per joint action (:func:`joint_payoffs`).
        gamma: discount in [0, 1).
    """
    def joint(q0: torch.Tensor, q1: torch.Tensor) -> torch.Tensor:
        # (..., 4): probability of each joint action (a0, a1) when the players act 0 with q0 and q1
        a = torch.stack([q0, 1 - q0], dim=-1)
        b = torch.stack([q1, 1 - q1], dim=-1)
        return (a.unsqueeze(-1) * b.unsqueeze(-2)).flatten(-2)

    start = joint(p0[0], p1[0])                    # (4,)
    trans = joint(p0[1:], p1[1:])                  # (4, 4): row = previous joint action
    eye = torch.eye(4, dtype=trans.dtype)
    # p0^T (I - gamma P)^{-1} = x^T with (I - gamma P)^T x = p0
    visits = torch.linalg.solve((eye - gamma * trans).T, start)
    return visits @ payoffs.to(visits.dtype)


def values(theta0: torch.Tensor, theta1: torch.Tensor, payoffs: torch.Tensor, gamma: float) -> torch.Tensor:
    """:func:`values_from_probs` for logits: ``sigmoid(theta)`` is the probability of action 0."""
    return values_from_probs(torch.sigmoid(theta0), torch.sigmoid(theta1), payoffs, gamma)


def shaped_step(value_fn, theta0: torch.Tensor, theta1: torch.Tensor, lr: float, lookahead: float,
                shaping: tuple[bool, bool]) -> tuple[torch.Tensor, torch.Tensor]:
    """One simultaneous update of both players (module docstring); ``shaping[i]`` makes player i LOLA
    (else naive). ``value_fn(theta0, theta1) -> (2,)`` is the closed form (:func:`values`) or a Monte-Carlo
    surrogate whose derivatives estimate it (:func:`dice_values`). Returns the new ``(theta0, theta1)``,
    detached."""
    t0 = theta0.detach().clone().requires_grad_(True)
    t1 = theta1.detach().clone().requires_grad_(True)
    v = value_fn(t0, t1)
    # grads[i][j] = d V_i / d theta_j, kept differentiable for the second-order terms
    grads = [torch.autograd.grad(v[i], (t0, t1), create_graph=True) for i in range(2)]
    thetas = (t0, t1)
    new = []
    for i in range(2):
        j = 1 - i
        step = grads[i][i].detach()
        if shaping[i]:
            # (grad_j V_i)^T (grad_i grad_j V_j): the gradient w.r.t. theta_i of grad_j V_j . c,
            # with c = grad_j V_i held fixed
            inner = (grads[j][j] * grads[i][j].detach()).sum()
            step = step + lookahead * torch.autograd.grad(inner, thetas[i], retain_graph=True)[0]
        new.append((thetas[i] + lr * step).detach())
    return new[0], new[1]


def exact_step(theta0: torch.Tensor, theta1: torch.Tensor, payoffs: torch.Tensor, gamma: float,
               lr: float, lookahead: float, shaping: tuple[bool, bool]) -> tuple[torch.Tensor, torch.Tensor]:
    """:func:`shaped_step` on the closed-form values."""
    return shaped_step(lambda a, b: values(a, b, payoffs, gamma), theta0, theta1, lr, lookahead, shaping)


def _magic_box(x: torch.Tensor) -> torch.Tensor:
    """DiCE's operator: 1 in value, and d/dtheta of it is itself times dx/dtheta, to any order."""
    return torch.exp(x - x.detach())


def dice_values(theta0: torch.Tensor, theta1: torch.Tensor, states: np.ndarray, actions: np.ndarray,
                rewards: np.ndarray, gamma: float) -> torch.Tensor:
    """The DiCE surrogate of both players' discounted values from sampled episodes (Foerster et al. 2018,
    "DiCE: The Infinitely Differentiable Monte-Carlo Estimator", from memory: docs/sources.md, "DiCE").

    Its value is the mean discounted return of the episodes; its derivatives of every order with respect to
    the logits are Monte-Carlo estimates of the value's derivatives. Each round's reward is weighted by the
    magic box of the log-probabilities of every action (both players') up to that round. A baseline, as
    the DiCE paper's variance reduction (from memory), adds ``(1 - box(logp of round t's actions)) * b_t``
    terms, 0 in value; ``b_t`` is the batch's mean discounted reward-to-go from round t.

    Args:
        theta0, theta1: ``(5,)`` logits.
        states: ``(B, T)`` the state index of each round (the same for both players).
        actions: ``(B, T, 2)`` the actions (0 or 1).
        rewards: ``(B, T, 2)`` the payoffs.
    Returns: ``(2,)`` the surrogate per player.
    """
    s = torch.as_tensor(states, dtype=torch.long)
    a = torch.as_tensor(actions, dtype=torch.float64)
    r = torch.as_tensor(rewards, dtype=torch.float64)
    T = s.shape[1]
    disc = gamma ** torch.arange(T, dtype=torch.float64)                     # (T,)
    logits = torch.stack([theta0, theta1])                                    # (2, 5)
    z = logits[:, s].permute(1, 2, 0)                                          # (B, T, 2)
    # log pi(a | s) with pi(0) = sigmoid(z): log sigmoid(z) for a = 0, log sigmoid(-z) for a = 1
    logp = torch.nn.functional.logsigmoid(torch.where(a == 0, z, -z)).sum(-1)  # (B, T), both players
    cum = torch.cumsum(logp, dim=1)
    weighted = (_magic_box(cum).unsqueeze(-1) * r * disc[None, :, None]).sum(1).mean(0)  # (2,)
    # baseline b_t: the batch's mean discounted reward-to-go from round t (what the gradient of round t's
    # log-probability multiplies)
    togo = torch.flip(torch.cumsum(torch.flip(r * disc[None, :, None], [1]), dim=1), [1])
    base = togo.mean(0)                                                       # (T, 2)
    correction = ((1 - _magic_box(logp)).unsqueeze(-1) * base.unsqueeze(0)).sum(1).mean(0)
    return weighted + correction


def sample(probs: np.ndarray, obs: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Both players' actions ``(B, 2)`` from memory-one policies ``probs`` ``(2, 5)`` (probability of
    action 0 per state) on ``matrix_v0`` observations ``(B, 2, 4)``."""
    coop = probs[np.arange(2)[None, :], state_index(obs)]         # (B, 2)
    return (rng.random(coop.shape) >= coop).astype(np.int64)     # 0 with probability coop


def play_episodes(act, step, obs: np.ndarray, rounds: int):
    """``rounds`` rounds on every copy from ``obs`` ``(B, 2, 4)``: ``act(obs) -> (B, 2)`` actions,
    ``step(actions) -> (obs, rewards)``. Returns ``states (B, T)`` (the same for both players),
    ``actions (B, T, 2)`` and ``rewards (B, T, 2)``."""
    B = len(obs)
    states = np.zeros((B, rounds), np.int64)
    actions = np.zeros((B, rounds, 2), np.int64)
    rewards = np.zeros((B, rounds, 2), np.float64)
    for t in range(rounds):
        states[:, t] = state_index(obs)[:, 0]
        actions[:, t] = act(obs)
        obs, rewards[:, t] = step(actions[:, t])
    return states, actions, rewards


def play(probs: np.ndarray, game, rounds: int, rng: np.random.Generator, seed: int):
    """:func:`play_episodes` on ``game`` (``matrix_v0``'s batched engine, two players, two actions) reset
    with ``seed``, the players sampling from memory-one policies ``probs`` ``(2, 5)``."""
    obs, _ = game.reset(seed=seed)
    return play_episodes(lambda o: sample(probs, o, rng), lambda a: game.step(a)[:2], obs, rounds)


@dataclass
class ExactResult:
    """What :func:`train_exact` returns.

    Attributes:
        theta: ``(2, 5)`` final logits.
        probs: ``(2, 5)`` final probabilities of action 0.
        values: ``(2,)`` final discounted values.
        reward_per_round: ``(2,)`` ``(1 - gamma) * values``: the discount-weighted mean payoff per round.
        history: ``(updates + 1, 2)`` reward per round of each player before each update and at the end.
    """

    theta: np.ndarray
    probs: np.ndarray
    values: np.ndarray
    reward_per_round: np.ndarray
    history: np.ndarray


def _initial_logits(seed: int, init_std: float) -> torch.Tensor:
    gen = torch.Generator().manual_seed(seed)
    return torch.randn(2, NUM_STATES, generator=gen, dtype=torch.float64) * init_std


def _train(table: np.ndarray, updates: int, seed: int, gamma: float, init_std: float, step) -> ExactResult:
    """``updates`` calls of ``step(k, theta0, theta1) -> (theta0, theta1)`` from seeded logits; the closed
    form's reward per round is recorded before each and at the end."""
    payoffs = joint_payoffs(table)
    theta = _initial_logits(seed, init_std)
    t0, t1 = theta[0], theta[1]
    history = []
    for k in range(updates):
        with torch.no_grad():
            history.append(((1 - gamma) * values(t0, t1, payoffs, gamma)).numpy())
        t0, t1 = step(k, t0, t1)
    with torch.no_grad():
        v = values(t0, t1, payoffs, gamma)
    history.append(((1 - gamma) * v).numpy())
    theta = torch.stack([t0, t1])
    return ExactResult(theta=theta.numpy(), probs=torch.sigmoid(theta).numpy(), values=v.numpy(),
                       reward_per_round=((1 - gamma) * v).numpy(), history=np.stack(history))


def train_exact(table: np.ndarray, shaping: tuple[bool, bool], updates: int, seed: int, gamma: float = 0.96,
                lr: float = 1.0, lookahead: float = 1.0, init_std: float = 1.0) -> ExactResult:
    """Train two memory-one players with exact gradients.

    Args:
        table: ``(2, 2, 2)`` payoff table (``matrix_v0``'s ``payoff_table``).
        shaping: per player, True for LOLA, False for a naive learner.
        updates: simultaneous updates.
        seed: seeds the initial logits, drawn from N(0, init_std^2).
    """
    payoffs = joint_payoffs(table)
    return _train(table, updates, seed, gamma, init_std,
                  lambda k, t0, t1: exact_step(t0, t1, payoffs, gamma, lr, lookahead, shaping))


def train_sampled(table: np.ndarray, shaping: tuple[bool, bool], updates: int, seed: int, copies: int = 1024,
                  rounds: int = 150, gamma: float = 0.96, lr: float = 0.3, lookahead: float = 0.3,
                  init_std: float = 1.0) -> ExactResult:
    """:func:`train_exact` with the values' derivatives estimated by DiCE from ``copies`` episodes of
    ``rounds`` rounds per update, played through ``matrix_v0``'s batched engine. The result's values and
    history are the closed form's at each update's logits (for reading the result, not for learning)."""
    from envs.matrix_v0 import MatrixGame

    flat = np.asarray(table, dtype=np.float64).reshape(-1).tolist()
    game = MatrixGame(copies, payoffs=flat, max_cycles=rounds, horizon="time_limit")
    rng = np.random.default_rng(seed)

    def step(k: int, t0: torch.Tensor, t1: torch.Tensor):
        probs = torch.sigmoid(torch.stack([t0, t1])).numpy()
        batch = play(probs, game, rounds, rng, seed=seed * 1_000_003 + k)
        return shaped_step(lambda a, b: dice_values(a, b, *batch, gamma), t0, t1, lr, lookahead, shaping)

    return _train(table, updates, seed, gamma, init_std, step)


# --------------------------------------------------------------------------- the learner of a run

class LOLA:
    """Two memory-one players updated together, by LOLA or as naive learners (``learner.kind: lola``).

    ``update(batch)`` makes one simultaneous update: from the closed form (``gradient: exact``; ``batch``
    is None) or from DiCE on a batch of whole episodes (``gradient: sampled``; ``batch`` is
    ``(states (B, T), actions (B, T, 2), rewards (B, T, 2))``, see :func:`play`). ``act`` samples both
    players' actions from their policies: a memory-one policy is stochastic, with or without ``explore``.
    """

    uses_state = False

    def __init__(self, spec, cfg, seed: int, table: np.ndarray):
        if spec.num_agents != 2 or spec.num_actions != 2 or tuple(spec.obs_space.shape) != (4,):
            raise ValueError(f"learner.kind = 'lola' needs two players with two actions each; the env has "
                             f"{spec.num_agents} agents and {spec.num_actions} actions")
        self.spec, self.cfg = spec, cfg
        self.payoffs = joint_payoffs(table)
        self.theta = _initial_logits(seed, cfg.init_std)
        self._rng = np.random.default_rng(seed)
        shaping = cfg.opponent_shaping
        self.shaping = tuple(shaping) if isinstance(shaping, list) else (shaping, shaping)

    def probs(self) -> np.ndarray:
        return torch.sigmoid(self.theta).numpy()

    def act(self, obs: np.ndarray, explore: bool = True, env_steps: int | None = None) -> np.ndarray:
        return sample(self.probs(), np.asarray(obs), self._rng)

    def closed_form(self) -> dict[str, list[float]]:
        """The current policies' discounted values and ``(1 - gamma) * values`` per player."""
        with torch.no_grad():
            v = values(self.theta[0], self.theta[1], self.payoffs, self.cfg.gamma)
        return {"values": v.tolist(), "reward_per_round": ((1 - self.cfg.gamma) * v).tolist()}

    def update(self, batch=None) -> dict[str, float]:
        L = self.cfg
        if L.gradient == "exact":
            def fn(a, b):
                return values(a, b, self.payoffs, L.gamma)
        else:
            def fn(a, b):
                return dice_values(a, b, *batch, L.gamma)
        t0, t1 = shaped_step(fn, self.theta[0], self.theta[1], L.lr, L.lookahead_lr, self.shaping)
        self.theta = torch.stack([t0, t1])
        cf = self.closed_form()
        return {f"reward_per_round/{a}": r for a, r in zip(self.spec.agents, cf["reward_per_round"])}

    def epsilon(self, env_steps: int) -> float:
        return 0.0

    def schedule(self, env_steps: int) -> None:
        pass

    def state_dict(self) -> dict:
        return {"theta": self.theta.clone(), "rng": self._rng.bit_generator.state}

    def load_state_dict(self, state: dict) -> None:
        self.theta = state["theta"].clone().to(torch.float64)
        self._rng.bit_generator.state = state["rng"]

    def agent_policy(self, i: int):
        from marl_core.policy import MemoryOnePolicy

        return MemoryOnePolicy(self.theta[i].numpy().copy(), self.spec.agents[i], i)
