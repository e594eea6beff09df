"""Declared game parameters: one table per game gives each parameter's type, default, bounds and meaning.

A game lists its parameters as :class:`Param` entries; :func:`resolve` checks a user's keyword arguments
against that list (unknown names, types, bounds) and fills in defaults. The same table feeds
``envs.list_envs()``, the README and the command line, so a parameter is documented exactly once.

A game whose parameters depend on one another also offers ``resolve_params(given)`` in its module (matrix_v0:
``payoffs`` without ``game`` makes the game ``"custom"``); the game and the run config both resolve through
it, so a config resolves to exactly the parameters the game will use.
"""

from __future__ import annotations

import difflib
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from envs.errors import ParamError

__all__ = ["Param", "resolve", "nearest"]


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
    """

    name: str
    kind: type
    default: Any
    doc: str
    low: float | None = None
    high: float | None = None
    choices: tuple[str, ...] | None = None
    check: Callable[[Any], str | None] | None = None

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


def nearest(name: str, names: Sequence[str]) -> list[str]:
    """Up to three valid names closest to ``name`` (for "did you mean" messages)."""
    return difflib.get_close_matches(name, list(names), n=3, cutoff=0.5)


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
