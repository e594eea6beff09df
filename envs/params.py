"""Declared game parameters: one table per game gives each parameter's type, default, bounds and meaning.

A game lists its parameters as :class:`Param` entries; :func:`resolve` checks a user's keyword arguments
against that list (unknown names, types, bounds) and fills in defaults. The same table feeds
``envs.list_envs()``, docs/games.md and the command line, so a parameter is documented exactly once.

A game whose parameters depend on one another also offers ``resolve_params(given)`` in its module (matrix_v0:
``payoffs`` without ``game`` makes the game ``"custom"``); the game and the run config both resolve through
it, so a config resolves to exactly the parameters the game will use.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from envs.errors import ParamError

__all__ = ["Param", "resolve", "nearest", "similarity", "ALIASES"]


@dataclass(frozen=True)
class Param:
    """One game parameter.

    Args:
        name: keyword name.
        kind: ``int``, ``float``, ``bool``, ``str`` or ``list`` (a list of floats).
        default: value used when the parameter is not given.
        doc: one-line meaning, shown by ``envs.list_envs()``.
        low, high: inclusive numeric bounds (for ``list``: bounds of every element), ``None`` for open.
        choices: allowed values for a ``str`` parameter.
        check: extra validation; returns an error text (what is allowed) or ``None``.
        renamed: earlier spellings of ``str`` values, old -> new; an old one is refused naming the new one.
    """

    name: str
    kind: type
    default: Any
    doc: str
    low: float | None = None
    high: float | None = None
    choices: tuple[str, ...] | None = None
    check: Callable[[Any], str | None] | None = None
    renamed: dict[str, str] | None = None

    def allowed(self) -> str:
        """Human-readable description of the allowed values."""
        if self.choices is not None:
            return "one of " + ", ".join(repr(c) for c in self.choices)
        what = {int: "an integer", float: "a number", bool: "true or false", str: "a string",
                list: "a list of numbers"}[self.kind]
        if self.low is not None and self.high is not None:
            return f"{what} in [{self.low}, {self.high}]"
        if self.low is not None:
            return f"{what} >= {self.low}"
        if self.high is not None:
            return f"{what} <= {self.high}"
        return what

    def validate(self, value: Any, game: str) -> Any:
        """Return ``value`` converted to the declared kind, or raise :class:`ParamError`."""

        def fail(why: str | None = None) -> ParamError:
            return ParamError(f"{game}: parameter '{self.name}' = {value!r} is not allowed; "
                              f"expected {why or self.allowed()}")

        if self.kind is bool:
            if not isinstance(value, bool):
                raise fail()
            out: Any = value
        elif self.kind is int:
            if isinstance(value, bool) or not _is_integral(value):
                raise fail()
            out = int(value)
        elif self.kind is float:
            if isinstance(value, bool) or not isinstance(value, (int, float)) or value != value:
                raise fail()
            out = float(value)
        elif self.kind is str:
            if self.renamed and isinstance(value, str) and value in self.renamed:
                raise ParamError(f"{game}: parameter '{self.name}' = {value!r} was renamed: use "
                                 f"{self.renamed[value]!r}")
            if not isinstance(value, str) or (self.choices is not None and value not in self.choices):
                raise fail()
            out = value
        elif self.kind is list:
            if isinstance(value, (str, bytes)) or not isinstance(value, Sequence) or len(value) == 0:
                raise fail()
            if any(isinstance(v, bool) or not isinstance(v, (int, float)) or v != v for v in value):
                raise fail()
            out = [float(v) for v in value]
        else:  # pragma: no cover - a programming error in a game's table
            raise TypeError(f"unsupported parameter kind {self.kind}")
        numbers = out if isinstance(out, list) else [out] if self.kind in (int, float) else []
        for v in numbers:
            if (self.low is not None and v < self.low) or (self.high is not None and v > self.high):
                raise fail()
        if self.check is not None:
            why = self.check(out)
            if why is not None:
                raise fail(why)
        return out


def _is_integral(value: Any) -> bool:
    if isinstance(value, int):
        return True
    return isinstance(value, float) and value.is_integer()


# Common synonyms of our names, as other RL libraries and papers spell them (one word part each; a name
# is also matched part by part, so ``learner.learning_rate`` finds ``learner.lr``). A synonym is offered
# only when its target is among the valid names.
ALIASES: dict[str, tuple[str, ...]] = {
    "learning_rate": ("lr",), "learningrate": ("lr",), "critic_lr": ("lr",),
    "actor_learning_rate": ("actor_lr",), "policy_lr": ("actor_lr",),
    "discount": ("gamma",), "discount_factor": ("gamma",),
    "num_agent": ("num_agents",), "n_agents": ("num_agents",), "agents": ("num_agents",),
    "players": ("num_agents",), "num_players": ("num_agents",), "n_players": ("num_agents",),
    "num_env": ("num_envs",), "n_envs": ("num_envs",), "envs": ("num_envs",),
    "timesteps": ("total_steps",), "total_timesteps": ("total_steps",), "steps": ("total_steps",),
    "max_steps": ("max_cycles",), "episode_length": ("max_cycles",), "max_episode_steps": ("max_cycles",),
    "horizon_steps": ("max_cycles",),
    "epsilon": ("eps_start", "eps_end"), "epsilon_start": ("eps_start",), "epsilon_end": ("eps_end",),
    "epsilon_decay": ("eps_decay_steps",), "eps_decay": ("eps_decay_steps",),
    "buffer": ("replay_size",), "buffer_capacity": ("replay_size",), "memory_size": ("replay_size",),
    "warmup": ("warmup_steps",), "learning_start": ("warmup_steps",),
    "batch": ("batch_size",), "minibatch_size": ("batch_size",),
    "target_update": ("target_update_every",), "target_update_interval": ("target_update_every",),
    "target_update_freq": ("target_update_every",), "polyak": ("tau",),
    "max_grad_norm": ("grad_clip",), "clip_grad": ("grad_clip",), "gradient_clip": ("grad_clip",),
    "hidden_size": ("hidden",), "hidden_dim": ("hidden",), "hidden_units": ("hidden",),
    "threads": ("torch_threads",), "num_threads": ("torch_threads",),
    "double_dqn": ("double",), "dueling_dqn": ("dueling",), "n_steps": ("n_step",),
    "per": ("prioritized",), "prioritized_replay": ("prioritized",),
    "temperature": ("gumbel_temperature",), "map": ("layout",), "radius": ("view_radius",),
}

_CUTOFF = 0.6    # a suggestion scores at least this (1 = the same name)
_MARGIN = 0.1    # and is within this of the best suggestion, so a clear winner is named alone


def nearest(name: str, names: Sequence[str], n: int = 3) -> list[str]:
    """Up to ``n`` valid names closest to ``name`` (for "did you mean" messages), best first.

    Closeness (:func:`similarity`) knows synonyms (:data:`ALIASES`: ``learning_rate`` -> ``lr``), prefixes
    (``num_agent`` -> ``num_agents``) and word parts split on ``_`` and ``.`` (each part must be close:
    ``regrow_tabel`` -> ``regrow_table`` but not ``learning_rate`` -> ``learning_starts``). Only names
    scoring at least 0.6 and within 0.1 of the best are returned, so a clear winner is named alone.
    """
    names = list(dict.fromkeys(names))
    scored = [(similarity(name, c), i, c) for i, c in enumerate(names) if c != name]
    scored = [t for t in scored if t[0] >= _CUTOFF]
    if not scored:
        return []
    best = max(s for s, _, _ in scored)
    return [c for s, _, c in sorted(scored, key=lambda t: (-t[0], t[1])) if s >= best - _MARGIN][:n]


def similarity(typed: str, valid: str) -> float:
    """How close the name ``typed`` is to the valid name ``valid``, in [0, 1] (1: the same name or a
    synonym of it). The best of: edit similarity (1 - Damerau-Levenshtein distance / longer length), capped
    by the worst word part when both have the same number of parts; a prefix of at least 3 characters on
    either side (0.8 + up to 0.1 for the share covered); the initials of ``typed``'s words (``lr`` for
    ``learning_rate``)."""
    a, b = str(typed).lower(), str(valid).lower()
    if a == b or _alias(a, b):
        return 1.0
    longer = max(len(a), len(b))
    score = 1.0 - _distance(a, b) / longer if longer else 0.0
    wa, wb = _words(a), _words(b)
    if len(wa) == len(wb) > 1:
        score = min(score, min(_word_similarity(x, y) for x, y in zip(wa, wb)))
    short, long_ = sorted((a, b), key=len)
    if len(short) >= 3 and long_.startswith(short):
        score = max(score, 0.8 + 0.1 * len(short) / len(long_))
    if len(wa) > 1 and "".join(w[0] for w in wa if w) == b:
        score = max(score, 0.9)
    return score


def _words(name: str) -> list[str]:
    return re.split(r"[_.]", name)


def _word_similarity(x: str, y: str) -> float:
    """Edit similarity of two word parts; a part shorter than 4 characters counts as 4 long, so one
    wrong character in ``v1`` (for ``v0``) is a typo, not a different word."""
    return 1.0 - _distance(x, y) / max(len(x), len(y), 4)


def _alias(a: str, b: str) -> bool:
    """``b`` is a synonym of ``a``, as a whole or dotted part by dotted part (``learner.learning_rate``)."""
    if b in ALIASES.get(a, ()):
        return True
    pa, pb = a.split("."), b.split(".")
    return (len(pa) == len(pb) > 1 and any(x != y for x, y in zip(pa, pb))
            and all(x == y or y in ALIASES.get(x, ()) for x, y in zip(pa, pb)))


def _distance(a: str, b: str) -> int:
    """Damerau-Levenshtein distance (optimal string alignment: insert, delete, substitute, swap two
    neighbours; each costs 1)."""
    prev2: list[int] = []
    prev = list(range(len(b) + 1))
    for i in range(1, len(a) + 1):
        cur = [i] + [0] * len(b)
        for j in range(1, len(b) + 1):
            cost = a[i - 1] != b[j - 1]
            cur[j] = min(prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + cost)
            if i > 1 and j > 1 and a[i - 1] == b[j - 2] and a[i - 2] == b[j - 1]:
                cur[j] = min(cur[j], prev2[j - 2] + 1)
        prev2, prev = prev, cur
    return prev[len(b)]


def resolve(game: str, table: Sequence[Param], given: dict[str, Any]) -> dict[str, Any]:
    """Check ``given`` against ``table`` and return every parameter's value (defaults filled in).

    Raises:
        ParamError: for an unknown name (naming the nearest valid ones) or a bad value.
    """
    by_name = {p.name: p for p in table}
    for key in given:
        if key not in by_name:
            close = nearest(key, list(by_name))
            hint = f"; did you mean {', '.join(repr(c) for c in close)}?" if close else ""
            raise ParamError(f"{game}: unknown parameter '{key}'{hint} "
                             f"(valid: {', '.join(sorted(by_name))})")
    out = {}
    for p in table:
        out[p.name] = p.validate(given[p.name], game) if p.name in given else p.default
    return out
