"""Exceptions for user mistakes in marl_core: the CLI prints any of them as one line and exits with 2.

The games raise :class:`envs.errors.EnvError` subclasses; marl_core raises :class:`MarlError` subclasses. The
CLI catches both.
"""

from __future__ import annotations

__all__ = ["MarlError", "ConfigError", "CheckpointError", "RunDirError", "EnvAdapterError", "MissingExtraError"]


class MarlError(Exception):
    """Base class of every user-facing error raised by :mod:`marl_core`."""


class ConfigError(MarlError):
    """A config key is unknown or a value is of the wrong type or out of range (the message names the
    dotted key, the value and what is allowed)."""


class CheckpointError(MarlError):
    """A checkpoint is missing, not ours, or of a format version this code cannot read."""


class RunDirError(MarlError):
    """A run directory is missing, incomplete, or would be overwritten."""


class EnvAdapterError(MarlError):
    """An env given by name cannot be built or does not fit the trainer (e.g. non-discrete actions)."""


class MissingExtraError(MarlError):
    """An optional dependency is not installed; the message gives the ``pip install`` line."""
