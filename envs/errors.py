"""Exceptions raised by the games for user mistakes.

Every error a user can cause (a bad parameter, a bad layout, a bad action) is an :class:`EnvError`, so a
command-line front end can catch one type and print a one-line message. The messages name the field, the
value given and what is allowed.
"""

from __future__ import annotations

__all__ = ["EnvError", "ParamError", "LayoutError", "ActionError"]


class EnvError(ValueError):
    """Base class of every user-facing error raised by :mod:`envs`."""


class ParamError(EnvError):
    """A game parameter is unknown, of the wrong type or out of range."""


class LayoutError(EnvError):
    """A map layout cannot be parsed; the message gives the line and column."""


class ActionError(EnvError):
    """An action passed to ``step`` is not in the action space."""
