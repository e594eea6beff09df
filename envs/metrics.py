"""Social outcome metrics of an episode: efficiency, equality, sustainability and peace.

The four measures of Perolat et al. 2017 ("A multi-agent reinforcement learning model of common-pool resource
appropriation", NeurIPS 2017; docs/sources.md, "Social outcome metrics"), written as pure numpy functions over
what any env and any learner can record: per-step rewards ``rewards: (T, N)`` and per-step tagged-out flags
``tagged_out: (T, N)`` (T time steps, N agents). ``social_outcomes_batch`` takes ``(T, B, N)`` arrays from a
batched env and returns one value per copy; the single-episode functions run the same code with B = 1.

With the per-agent return R_i = sum_t r_t^i:

* efficiency     U = sum_i R_i / T
* equality       E = 1 - sum_i sum_j |R_i - R_j| / (2 N sum_i R_i)   (= 1 - Gini of the returns)
* sustainability S = mean over agents of t_i, the mean time step at which agent i received a positive reward
* peace          P = (N T - sum_i sum_t tagged_out_t^i) / T, in [0, N]

Conventions for the edge cases (each is tested):

* Time steps are 1-based: the first step of an episode is t = 1, so t_i lies in [1, T].
* A step counts for sustainability when the reward is strictly positive; each such step counts once, whatever
  its size (t_i is not weighted by the reward).
* An agent that never receives a positive reward has no t_i and is left out of the sustainability mean; when
  no agent receives one, sustainability is NaN.
* Equality (and :func:`gini`) is 1 (Gini 0) whenever every return is equal, including when all are 0 -- the
  numerator is 0, so there is nothing unequal to measure. "Equal" allows float rounding: the spread
  max - min is at most 1e-12 times max(1, largest magnitude). Otherwise it uses the formula on the returns as
  given when their sum is positive; negative returns (tag costs) are allowed there, so E can fall below 0.
  When the returns differ and their sum is <= 0 the formula has no meaning and the result is NaN. No shift
  is applied to make returns non-negative: a shift would change the value with an arbitrary constant.
* Inputs must have at least one time step and one agent and finite rewards; ``tagged_out`` holds booleans or
  the numbers 0 and 1. Anything else raises :class:`MetricError` naming the argument.

Shape:
    rewards: (T, N) float, tagged_out: (T, N) bool  ->  python floats
    rewards: (T, B, N) float, tagged_out: (T, B, N) bool  ->  (B,) float64 arrays (``social_outcomes_batch``)
"""

from __future__ import annotations

from typing import Any

import numpy as np

from envs.errors import EnvError

__all__ = [
    "MetricError",
    "efficiency",
    "equality",
    "sustainability",
    "peace",
    "gini",
    "social_outcomes",
    "social_outcomes_batch",
    "METRIC_NAMES",
    "BEHAVIOUR_NAMES",
]

METRIC_NAMES: tuple[str, ...] = ("efficiency", "equality", "sustainability", "peace")
# Behaviour measures beside the metrics: per-agent event counts our grid games report in their infos, summed
# over an episode (marl_core.rollout.evaluate averages them over episodes and agents)
BEHAVIOUR_NAMES: tuple[str, ...] = ("resources_taken", "tags_fired", "times_tagged", "waste_removed")


class MetricError(EnvError):
    """An input of a social outcome metric has the wrong shape, type or values."""


# ---------------------------------------------------------------------------------------------------------
# input checks


def _numeric(x: Any, name: str) -> np.ndarray:
    try:
        a = np.asarray(x)
    except ValueError as err:                  # ragged nested lists
        raise MetricError(f"{name}: cannot be read as an array ({err})") from None
    if a.dtype == bool:
        return a.astype(np.float64)
    if not (np.issubdtype(a.dtype, np.integer) or np.issubdtype(a.dtype, np.floating)):
        raise MetricError(f"{name}: expected an array of real numbers, got dtype {a.dtype}")
    return a.astype(np.float64, copy=False)


def _steps(x: Any, name: str, dims: str) -> np.ndarray:
    """``x`` as a float64 array with axes named by ``dims`` ("TN" or "TBN"), or :class:`MetricError`."""
    a = _numeric(x, name)
    words = {"T": "time steps", "B": "copies", "N": "agents"}
    layout = f"({', '.join(dims)}) ({', '.join(words[d] for d in dims)})"
    if a.ndim != len(dims):
        raise MetricError(f"{name}: expected an array of shape {layout}, got shape {a.shape}")
    for size, d in zip(a.shape, dims, strict=True):
        if size == 0:
            raise MetricError(f"{name}: has shape {a.shape} with no {words[d]}; expected an array of shape "
                              f"{layout} with at least one entry on every axis")
    return a


def _rewards(x: Any, dims: str) -> np.ndarray:
    a = _steps(x, "rewards", dims)
    if not np.all(np.isfinite(a)):
        raise MetricError("rewards: contains NaN or infinite values; expected finite numbers")
    return a


def _flags(x: Any, dims: str) -> np.ndarray:
    a = _steps(x, "tagged_out", dims)
    if not np.all((a == 0) | (a == 1)):
        bad = a[(a != 0) & (a != 1)].flat[0]
        raise MetricError(f"tagged_out: contains the value {float(bad):g}; expected booleans or the numbers "
                          f"0 and 1")
    return a


def _same_shape(rewards: np.ndarray, tagged_out: np.ndarray) -> None:
    if rewards.shape != tagged_out.shape:
        raise MetricError(f"tagged_out: has shape {tagged_out.shape}; expected the shape of rewards "
                          f"{rewards.shape}")


# ---------------------------------------------------------------------------------------------------------
# the formulas: time on axis 0, agents on the last axis, any axes between (copies)


_EQUAL_TOL = 1e-12


def _gini(x: np.ndarray) -> np.ndarray:
    """Gini over the last axis, sorted form G = sum_i (2i - n - 1) x_(i) / (n sum x), i from 1."""
    n = x.shape[-1]
    xs = np.sort(x, axis=-1)
    weights = 2.0 * np.arange(1, n + 1) - n - 1
    total = x.sum(axis=-1)
    # equal up to float rounding of the sums that made them (relative 1e-12)
    spread = x.max(axis=-1) - x.min(axis=-1)
    equal = spread <= _EQUAL_TOL * np.maximum(1.0, np.abs(x).max(axis=-1))
    with np.errstate(divide="ignore", invalid="ignore"):
        g = (xs * weights).sum(axis=-1) / (n * total)
    return np.where(equal, 0.0, np.where(total > 0, g, np.nan))


def _efficiency(r: np.ndarray) -> np.ndarray:
    return r.sum(axis=(0, -1)) / r.shape[0]


def _equality(r: np.ndarray) -> np.ndarray:
    return 1.0 - _gini(r.sum(axis=0))


def _sustainability(r: np.ndarray) -> np.ndarray:
    t = np.arange(1, r.shape[0] + 1, dtype=np.float64).reshape((-1,) + (1,) * (r.ndim - 1))
    positive = r > 0
    count = positive.sum(axis=0)                       # (..., N) steps with a positive reward
    mean_t = (positive * t).sum(axis=0) / np.maximum(count, 1)
    rewarded = count > 0
    agents = rewarded.sum(axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = (mean_t * rewarded).sum(axis=-1) / agents
    return np.where(agents > 0, s, np.nan)


def _peace(f: np.ndarray) -> np.ndarray:
    steps, agents = f.shape[0], f.shape[-1]
    return (agents * steps - f.sum(axis=(0, -1))) / steps


def _outcomes(r: np.ndarray, f: np.ndarray) -> dict[str, np.ndarray]:
    return {"efficiency": _efficiency(r), "equality": _equality(r),
            "sustainability": _sustainability(r), "peace": _peace(f)}


# ---------------------------------------------------------------------------------------------------------
# public functions


def efficiency(rewards: Any) -> float:
    """Utilitarian efficiency U = sum of every agent's return / T.

    Args:
        rewards: ``(T, N)`` per-step rewards.
    """
    return float(_efficiency(_rewards(rewards, "TN")))


def equality(rewards: Any) -> float:
    """Equality E = 1 - Gini of the per-agent returns (edge cases in the module docstring).

    Args:
        rewards: ``(T, N)`` per-step rewards.
    """
    return float(_equality(_rewards(rewards, "TN")))


def sustainability(rewards: Any) -> float:
    """Sustainability S: mean over agents of the mean 1-based time step of their positive rewards.

    Agents that never receive a positive reward are left out; NaN when no agent receives one.

    Args:
        rewards: ``(T, N)`` per-step rewards.
    """
    return float(_sustainability(_rewards(rewards, "TN")))


def peace(tagged_out: Any) -> float:
    """Peace P = (N T - number of agent-steps spent tagged out) / T, in [0, N].

    Args:
        tagged_out: ``(T, N)`` booleans (or 0/1): agent i was tagged out (frozen) at step t.
    """
    return float(_peace(_flags(tagged_out, "TN")))


def gini(values: Any) -> float | np.ndarray:
    """Gini coefficient G = sum_i sum_j |x_i - x_j| / (2 n^2 mean) over the last axis.

    The formula and its sorted form are MathWorld's (docs/sources.md, "Gini coefficient").

    0 when every value is equal; NaN when the values differ and their sum is <= 0. Negative values are used
    as given (G can then exceed 1).

    Args:
        values: ``(n,)`` numbers, or ``(..., n)`` for one coefficient per leading index.

    Returns:
        a float for 1-D input, else an array of the leading shape.
    """
    x = _numeric(values, "values")
    if x.ndim == 0 or x.shape[-1] == 0:
        raise MetricError(f"values: has shape {x.shape}; expected at least one number on the last axis")
    if not np.all(np.isfinite(x)):
        raise MetricError("values: contains NaN or infinite values; expected finite numbers")
    g = _gini(x)
    return float(g) if x.ndim == 1 else g


def social_outcomes(rewards: Any, tagged_out: Any) -> dict[str, float]:
    """The four social outcome metrics of one episode.

    Args:
        rewards: ``(T, N)`` per-step rewards.
        tagged_out: ``(T, N)`` booleans (or 0/1), same shape.

    Returns:
        ``{"efficiency", "equality", "sustainability", "peace"}`` as python floats.
    """
    r = _rewards(rewards, "TN")
    f = _flags(tagged_out, "TN")
    _same_shape(r, f)
    out = social_outcomes_batch(r[:, None, :], f[:, None, :])
    return {k: float(v[0]) for k, v in out.items()}


def social_outcomes_batch(rewards: Any, tagged_out: Any) -> dict[str, np.ndarray]:
    """The four social outcome metrics of each copy of a batched episode, computed together.

    Args:
        rewards: ``(T, B, N)`` per-step rewards of B copies.
        tagged_out: ``(T, B, N)`` booleans (or 0/1), same shape.

    Returns:
        ``{"efficiency", "equality", "sustainability", "peace"}``, each a ``(B,)`` float64 array.
    """
    r = _rewards(rewards, "TBN")
    f = _flags(tagged_out, "TBN")
    _same_shape(r, f)
    return _outcomes(r, f)
