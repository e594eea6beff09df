"""The run config: one YAML file with the sections ``env``, ``learner``, ``train`` and ``log``.

One pydantic schema (:class:`RunConfig`) defines every key with its type, default, bounds and one-line
meaning; :func:`schema_table` lists them for the docs and for the ablation harness, which validates its
dotted key paths against :func:`valid_keys`. Every key may be left out; a missing key takes its default
and the resolved config (:func:`config_to_dict`, :func:`dump_config`) writes every value out, game
parameters included, so a run directory records exactly what ran.

Layout, with every default of the ``idqn`` learner on ``harvest_v0``::

    env:
      name: harvest_v0          # a game in envs.GAMES, 'module:callable' or 'gymnasium:ID'
      params:                   # keyword arguments of the env; checked against the game's table
        num_agents: 5
        regrow_table: [0.0, 0.01, 0.01, 0.05, 0.05, 0.1]
      num_envs: 8
    learner:
      kind: idqn                # idqn | maddpg | lola | ppo; each kind has its own keys and defaults
      share_parameters: false
      gamma: 0.99
      lr: 5.0e-4
      batch_size: 64
      replay_size: 100000
      pack_replay: true
      warmup_steps: 2000
      train_every: 1
      updates_per_round: 1
      replay_ratio: null
      lr_end: null
      lr_decay_steps: 100000
      grad_clip: 10.0
      hidden: 128
      conv_channels: [16, 32]
      conv_strides: [2, 2]      # idqn, left out: 2 per layer; null: 1 then 2 (the first release's, maddpg's)
      torch_threads: 1
      double: true
      dueling: false
      n_step: 1
      prioritized: false
      priority_alpha: 0.6
      priority_beta_start: 0.4
      priority_eps: 1.0e-6
      target_update_every: 500
      eps_start: 1.0
      eps_end: 0.05
      eps_decay_steps: 50000
      eval_eps: 0.0
    train:
      total_steps: 100000
      seed: 0
      eval_every: 10000
      eval_episodes: 20
      checkpoint_every: 20000
      baselines: auto
    log:
      tensorboard: true
      gif_every: 5
      progress: true
      log_every: 1000

With ``kind: maddpg`` the idqn-only keys (``double`` ... ``eval_eps``) give way to ``critic``,
``critic_input``, ``actor_lr``, ``tau``, ``gumbel_temperature``, ``actor_reg`` and
``explore_eps_start`` / ``explore_eps_end`` / ``explore_eps_decay_steps``; ``gamma``, ``lr`` and
``batch_size`` then default to 0.95, 1e-3 and 256. An empty file, or an empty section, means all defaults.
Numbers written ``1e-3`` are read as numbers (YAML 1.1 would read them as text), and a key written twice
in one mapping is an error.

Overrides: ``load_config(path, ["learner.lr=1e-3", "env.params.num_agents=3"])`` (the command line's
``--set``) sets one dotted key each, in order, before validation. The value is parsed as YAML, so
``learner.double=false``, ``env.params.regrow_table=[0,0.1]`` and ``learner.grad_clip=null`` work. A key
path that is not in the schema is an error; under ``env.params`` any name may be set (a game checks it).

Errors: every problem raises :class:`marl_core.errors.ConfigError` with one line naming the dotted key,
the value and what is allowed::

    learner.lr = -1.0 is not allowed: expected a number > 0
    unknown key 'learner.gama'; did you mean 'learner.gamma'?
    learner.tau is a maddpg key; learner.kind is 'idqn'
    env.params.num_agents = 0 is not allowed: expected an integer in [1, 10]
"""

from __future__ import annotations

import copy
import hashlib
import json
import keyword
import os
import re
import types
import typing
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Annotated, Any, Literal

import yaml
from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)
from pydantic_core import PydanticCustomError

import envs
from envs.errors import ParamError
from envs.params import nearest, resolve
from marl_core.errors import ConfigError
from marl_core.files import atomic_write

__all__ = ["RunConfig", "EnvConfig", "IDQNConfig", "MADDPGConfig", "PPOConfig", "TrainConfig", "LogConfig",
           "RewardConfig", "InequityAversion", "load_config", "load_stored_config", "parse_config",
           "apply_overrides", "config_to_dict", "dump_config", "schema_table", "valid_keys", "config_hash"]


# ---------------------------------------------------------------------------------------------- types

def _integral(value: Any) -> Any:
    """Let ``1e5`` or ``3.0`` stand for an integer; anything else goes on to strict validation."""
    if isinstance(value, float) and value.is_integer():
        return int(value)
    return value


_Int = Annotated[int, BeforeValidator(_integral)]
_PositiveInt = Annotated[int, BeforeValidator(_integral), Field(ge=1)]

_STRICT = ConfigDict(extra="forbid", strict=True, allow_inf_nan=False)

# The one error type raised by our own validators: its context carries the finished one-line message.
_OWN_ERROR = "marl_config"


def _own_error(line: str) -> PydanticCustomError:
    return PydanticCustomError(_OWN_ERROR, "{line}", {"line": line})


def _show(value: Any) -> str:
    """A value as it appears in a message: its repr, on one line and cut to a readable length."""
    text = repr(value).replace("\n", " ")
    return text if len(text) <= 80 else text[:77] + "..."


def _not_allowed(key: str, value: Any, allowed: str) -> str:
    return f"{key} = {_show(value)} is not allowed: expected {allowed}"


# Values that an earlier version accepted under another name (key -> {old: new}): the old spelling is
# refused in one line naming the new one. "shared" meant three things; each now has a word of its own.
RENAMED_VALUES: dict[str, dict[str, str]] = {"learner.critic": {"shared": "one_network"}}


def _renamed_value(key: str, value: Any) -> str | None:
    """The one-line refusal of a value that was renamed, or None."""
    new = RENAMED_VALUES.get(key, {}).get(value) if isinstance(value, str) else None
    return None if new is None else f"{key} = {_show(value)} was renamed: use {new!r}"


# Keys that an earlier version accepted under another name: the old name is refused with the new one.
RENAMED: dict[str, str] = {"learner.priority_beta0": "learner.priority_beta_start",
                           "learner.learning_starts": "learner.warmup_steps",
                           "learner.buffer_size": "learner.replay_size"}


def _unknown(key: str, prefix: str, candidates: Iterable[str]) -> str:
    """``unknown key 'a.b'; did you mean 'a.c'?`` (or the valid keys when none is close)."""
    if key in RENAMED:
        return f"key '{key}' was renamed: use '{RENAMED[key]}'"
    candidates = list(candidates)
    name = key[len(prefix):] if prefix and key.startswith(prefix) else key
    close = nearest(name, candidates)
    if close:
        return f"unknown key '{key}'; did you mean {' or '.join(repr(prefix + c) for c in close)}?"
    where = f" in '{prefix[:-1]}'" if prefix else ""
    return f"unknown key '{key}' (valid keys{where}: {', '.join(candidates)})"


# -------------------------------------------------------------------------------------------- env

_NAME_ALLOWED = (f"one of our games ({', '.join(envs.GAMES)}), 'module:callable' for a PettingZoo "
                 "ParallelEnv factory, or 'gymnasium:ID' for a single-agent gymnasium env")
_GYM_PREFIX = "gymnasium:"
_GYM_ID = re.compile(r"[A-Za-z0-9_][A-Za-z0-9_.\-/]*")


def _dotted_identifier(text: str) -> bool:
    return bool(text) and all(p.isidentifier() and not keyword.iskeyword(p) for p in text.split("."))


def _env_name_problem(name: str) -> str | None:
    """``None`` for a well-formed env name, else what is wrong with it. Imports nothing."""
    if name in envs.GAMES:
        return None
    if name.startswith(_GYM_PREFIX):
        env_id = name[len(_GYM_PREFIX):]
        if _GYM_ID.fullmatch(env_id):
            return None
        return "'gymnasium:' followed by a registered id such as CartPole-v1"
    if ":" not in name:
        close = nearest(name, envs.GAMES)
        hint = f" (did you mean {' or '.join(repr(c) for c in close)}?)" if close else ""
        return _NAME_ALLOWED + hint
    module, _, factory = name.partition(":")
    if ":" in factory or not _dotted_identifier(module) or not _dotted_identifier(factory):
        return "'module:callable' with exactly one colon between dotted Python identifiers"
    return None


class EnvConfig(BaseModel):
    """Which env to train on and how many copies to step together."""

    model_config = _STRICT

    name: str = Field("harvest_v0", description="env: a game in envs.GAMES, 'module:callable' (a PettingZoo "
                      "ParallelEnv factory) or 'gymnasium:ID' (a single-agent gymnasium env)",
                      json_schema_extra={"allowed": _NAME_ALLOWED})
    params: dict[str, Any] = Field(default_factory=dict, description="keyword arguments of the env; for "
                                   "our games checked against the game's parameter table, defaults filled in")
    num_envs: _PositiveInt = Field(8, description="copies of the env stepped together (a batched game or a "
                                  "vector of adapters)")

    @model_validator(mode="before")
    @classmethod
    def _empty_params(cls, data: Any) -> Any:
        if isinstance(data, dict) and "params" in data and data["params"] is None:
            data = {**data, "params": {}}
        return data

    @field_validator("name", mode="before")
    @classmethod
    def _check_name(cls, value: Any) -> Any:
        if not isinstance(value, str):
            raise _own_error(_not_allowed("env.name", value, _NAME_ALLOWED))
        problem = _env_name_problem(value)
        if problem is not None:
            raise _own_error(_not_allowed("env.name", value, problem))
        return value

    @model_validator(mode="after")
    def _check_params(self) -> EnvConfig:
        if self.name in envs.GAMES:
            self.params = _resolve_game_params(self.name, self.params)
        return self

    @property
    def is_game(self) -> bool:
        """True when ``name`` is one of our games (as opposed to an adapted external env)."""
        return self.name in envs.GAMES


def _resolve_game_params(game: str, given: dict[str, Any]) -> dict[str, Any]:
    """Check ``given`` against the game's table (dotted ``env.params.<name>`` errors); defaults filled in by
    the game's own ``resolve_params`` where it has one (matrix_v0: ``payoffs`` without ``game`` is custom)."""
    module = envs.game_module(game)
    table = module.PARAMS
    by_name = {p.name: p for p in table}
    given = dict(given)
    for key, value in list(given.items()):
        param = by_name.get(key)
        problem = _param_name_problem(module, key)
        if problem is not None:
            raise _own_error(problem)
        if value is None and param.default is None:
            del given[key]  # null for a parameter whose default is null: the resolved dump writes it so
            continue
        try:
            param.validate(value, game)
        except ParamError as err:
            text = str(err)
            if " was renamed: " in text:  # an earlier spelling of the value (envs.params.Param.renamed)
                raise _own_error(f"env.params.{key} = {_show(value)} was renamed: "
                                 f"{text.split(' was renamed: ', 1)[1]}") from None
            allowed = text.split("; expected ", 1)[1] if "; expected " in text else param.allowed()
            raise _own_error(_not_allowed(f"env.params.{key}", value, allowed)) from None
    resolver = getattr(module, "resolve_params", None)
    try:
        return resolver(given) if resolver is not None else resolve(game, table, given)
    except ParamError as err:  # a rule between parameters (matrix_v0: a bundled game with payoffs)
        raise _own_error(f"env.params: {err}") from None


def _param_name_problem(module: Any, key: str) -> str | None:
    """``None`` when ``key`` is a parameter of the game ``module``, else the one-line error (the nearest
    valid names; a game that renamed parameters adds its note)."""
    names = [p.name for p in module.PARAMS]
    if key not in names:
        note = getattr(module, "RENAMED_NOTE", None)
        return _unknown(f"env.params.{key}", "env.params.", names) + (f" ({note})" if note else "")
    return None


# ---------------------------------------------------------------------------------------- learners

def _gamma(default: Any) -> Any:
    return Field(default, ge=0.0, le=1.0, description="discount factor per env step")


def _lr(default: Any, what: str) -> Any:
    return Field(default, gt=0.0, description=f"Adam learning rate of the {what}")


def _batch_size(default: Any) -> Any:
    return Field(default, ge=1, description="transitions sampled from replay per update")


def _hidden() -> Any:
    return Field(128, description="width of the MLP layers")


def _conv_channels(what: str) -> Any:
    return Field(default_factory=lambda: [16, 32], min_length=1,
                 description=f"output channels of each conv layer of the {what}")


def _end_not_above_start(cfg: BaseModel, schedule: str) -> None:
    """A decaying schedule ends at or below where it starts (``<schedule>_end <= <schedule>_start``)."""
    start, end = getattr(cfg, f"{schedule}_start"), getattr(cfg, f"{schedule}_end")
    if end > start:
        raise _own_error(_not_allowed(f"learner.{schedule}_end", end,
                                      f"a number <= learner.{schedule}_start ({start!r})"))


# the stride of every conv layer when learner.conv_strides is left out, per learner kind (None: the first
# release's 1 then 2), chosen by learning curves (scripts/compare_encoders.py; docs/learners.md, "The grid
# encoder")
DEFAULT_STRIDE: dict[str, int | None] = {"idqn": 2, "maddpg": None, "ppo": 2}


class _LearnerBase(BaseModel):
    """Keys every learner has. The three without a default here get one per kind."""

    model_config = _STRICT

    kind: Literal["idqn", "maddpg"] = Field(description="learning algorithm: independent DQN or a "
                                            "MADDPG-style centralised critic")
    share_parameters: bool = Field(False, description="one network for all agents with an agent-id one-hot "
                                   "input (false: one network per agent)")
    gamma: float = _gamma(...)
    lr: float = _lr(..., "networks")
    batch_size: _Int = _batch_size(...)
    replay_size: _PositiveInt = Field(100_000, description="joint env steps kept in replay (oldest dropped "
                                     "first)")
    pack_replay: bool = Field(True, description="keep observations (and states) of 0s and 1s bit-packed in "
                              "replay, 8 cells a byte, unpacked per sampled batch; other observations are "
                              "stored as they are (false: plain uint8 store)")
    warmup_steps: _Int = Field(2000, ge=0, description="env steps collected before the first update")
    train_every: _PositiveInt = Field(1, description="vector-env steps between update rounds (left at 1 "
                                      "when replay_ratio is set)")
    updates_per_round: _PositiveInt = Field(1, description="gradient updates per update round (left at 1 "
                                            "when replay_ratio is set)")
    replay_ratio: float | None = Field(None, gt=0.0, description="samples drawn per env step collected "
                                       "(batch_size * updates / env steps, the same per agent): updates run "
                                       "whenever the samples owed reach a batch, so it holds for any "
                                       "env.num_envs (null: batch_size * updates_per_round / (num_envs * "
                                       "train_every))")
    lr_end: float | None = Field(None, gt=0.0, description="learning rate reached at the end of a linear "
                                 "decay over lr_decay_steps env steps; every optimiser's rate is scaled by "
                                 "the same factor (null: constant learning rates)")
    lr_decay_steps: _PositiveInt = Field(100_000, description="env steps of the linear learning-rate decay "
                                         "(used only with lr_end)")
    grad_clip: float | None = Field(10.0, gt=0.0, description="largest gradient norm per update of each "
                                    "agent's network (of the shared network under parameter sharing) and of "
                                    "each critic network; clipped one network at a time, so independent "
                                    "learners stay independent (null: no clipping)")
    hidden: _PositiveInt = _hidden()
    conv_channels: list[_PositiveInt] = _conv_channels("grid-window encoder")
    conv_strides: list[_PositiveInt] | None = Field(None, min_length=1, description="stride of each conv "
                                                    "layer of the grid-window encoder, one per entry of "
                                                    "conv_channels; left out: idqn 2 for every layer, maddpg "
                                                    "as null (chosen by scripts/compare_encoders.py); null: 1 "
                                                    "for the first layer, 2 for the others (the first "
                                                    "release's encoder)")
    torch_threads: _PositiveInt = Field(1, description="torch intra-op threads per process; one leaves a "
                                       "core to each other sweep worker. Measured on an idle 2-core machine "
                                       "(scripts/bench_train.py --torch-threads): two threads run one job "
                                       "1.4x (idqn) to 1.7x (maddpg) faster, at lower work per CPU second")

    @model_validator(mode="before")
    @classmethod
    def _default_strides(cls, data: Any) -> Any:
        """``conv_strides`` left out: :data:`DEFAULT_STRIDE` of the kind for each conv layer (idqn: 2;
        maddpg: null, the first release's 1 then 2)."""
        stride = DEFAULT_STRIDE.get(cls.model_fields["kind"].default)
        if isinstance(data, dict) and "conv_strides" not in data and stride is not None:
            channels = data.get("conv_channels", [16, 32])
            if isinstance(channels, list) and channels:
                data = {**data, "conv_strides": [stride] * len(channels)}
        return data

    @model_validator(mode="after")
    def _one_stride_per_conv_layer(self) -> _LearnerBase:
        if self.conv_strides is not None and len(self.conv_strides) != len(self.conv_channels):
            raise _own_error(_not_allowed("learner.conv_strides", self.conv_strides,
                                          f"one stride per conv layer: {len(self.conv_channels)} "
                                          f"(learner.conv_channels = {self.conv_channels})"))
        return self

    @model_validator(mode="after")
    def _one_way_to_pace_updates(self) -> _LearnerBase:
        if self.replay_ratio is not None:
            for name in ("train_every", "updates_per_round"):
                if getattr(self, name) != 1:
                    raise _own_error(f"learner.{name} = {getattr(self, name)} is not allowed together with "
                                     f"learner.replay_ratio: the ratio paces the updates; leave {name} at 1")
        return self


class IDQNConfig(_LearnerBase):
    """Independent DQN: one Q-network per agent (or one shared), with its own replay and target network."""

    kind: Literal["idqn"] = Field("idqn", description="learning algorithm: independent DQN")
    # gamma 0.99: DQN, Mnih et al. 2015 (docs/sources.md, "DQN")
    gamma: float = _gamma(0.99)
    lr: float = _lr(5e-4, "Q-networks")
    batch_size: _Int = _batch_size(64)
    double: bool = Field(True, description="double DQN target: the online net picks the next action, the "
                         "target net values it")
    dueling: bool = Field(False, description="dueling head: Q = V + A - mean(A)")
    n_step: _PositiveInt = Field(1, description="steps of reward summed in the return before bootstrapping")
    prioritized: bool = Field(False, description="prioritized replay (proportional, with importance weights)")
    # alpha 0.6, beta 0.4 at the start: Schaul et al. 2016, proportional variant, from memory
    # (docs/sources.md, "Prioritized replay")
    priority_alpha: float = Field(0.6, ge=0.0, le=1.0, description="prioritized replay: exponent on "
                                  "priorities (0 = uniform)")
    priority_beta_start: float = Field(0.4, ge=0.0, le=1.0, description="prioritized replay: initial "
                                  "importance-weight exponent, annealed to 1 over training")
    priority_eps: float = Field(1e-6, gt=0.0, description="prioritized replay: added to |TD error| so no "
                                "priority is zero")
    target_update_every: _PositiveInt = Field(500, description="updates between copies of the online net "
                                             "into the target net")
    eps_start: float = Field(1.0, ge=0.0, le=1.0, description="epsilon-greedy: exploration rate at the "
                             "start")
    eps_end: float = Field(0.05, ge=0.0, le=1.0, description="epsilon-greedy: exploration rate after the "
                           "decay (at most eps_start)")
    eps_decay_steps: _PositiveInt = Field(50_000, description="env steps of the linear decay from eps_start "
                                         "to eps_end")
    eval_eps: float = Field(0.0, ge=0.0, le=1.0, description="exploration rate at evaluation; 0 = greedy "
                            "(DQN used 0.05 on Atari, Mnih et al. 2015)")

    @model_validator(mode="after")
    def _check_schedule(self) -> IDQNConfig:
        _end_not_above_start(self, "eps")
        return self


class MADDPGConfig(_LearnerBase):
    """MADDPG-style centralised critic over decentralised actors (Lowe et al. 2017)."""

    kind: Literal["maddpg"] = Field("maddpg", description="learning algorithm: MADDPG-style centralised "
                                    "critic")
    # gamma 0.95, tau 0.01: Lowe et al. 2017, from memory (docs/sources.md, "MADDPG")
    gamma: float = _gamma(0.95)
    lr: float = _lr(1e-3, "critic")
    batch_size: _Int = _batch_size(256)
    critic: Literal["one_network", "per_agent"] = Field("one_network", description="one critic network "
                                                        "for the team (one_network) or one per agent")
    critic_input: Literal["auto", "state", "observations"] = Field("auto", description="what the critic "
                                                                   "sees besides the actions: observations "
                                                                   "= every agent's observation stacked "
                                                                   "(Lowe et al. 2017); state = the env's "
                                                                   "state() (our grid games: a plane per "
                                                                   "agent, env.params.state_layout); auto "
                                                                   "= observations, measured: ahead on "
                                                                   "harvest and on cleanup at 100k steps, "
                                                                   "and faster "
                                                                   "(scripts/compare_critic_inputs.py)")
    actor_lr: float = Field(1e-3, gt=0.0, description="Adam learning rate of the actors")

    @field_validator("critic", mode="before")
    @classmethod
    def _critic_renamed(cls, value: Any) -> Any:
        line = _renamed_value("learner.critic", value)
        if line:
            raise _own_error(line)
        return value
    tau: float = Field(0.01, gt=0.0, le=1.0, description="Polyak step of the target networks per update")
    gumbel_temperature: float = Field(1.0, gt=0.0, description="temperature of the straight-through "
                                      "Gumbel-softmax")
    actor_reg: float = Field(1e-3, ge=0.0, description="penalty on the actors' squared logits")
    actor_every: _PositiveInt = Field(1, description="one actor step (and target-actor update) every k "
                                      "critic steps; 1 = both every update")
    explore_eps_start: float = Field(0.3, ge=0.0, le=1.0, description="share of uniform random actions "
                                     "mixed into actor sampling at the start")
    explore_eps_end: float = Field(0.02, ge=0.0, le=1.0, description="share of uniform random actions after "
                                   "the decay (at most explore_eps_start)")
    explore_eps_decay_steps: _PositiveInt = Field(50_000, description="env steps of the linear decay from "
                                                 "explore_eps_start to explore_eps_end")

    @model_validator(mode="after")
    def _check_schedule(self) -> MADDPGConfig:
        _end_not_above_start(self, "explore_eps")
        return self


class LOLAConfig(BaseModel):
    """Opponent shaping on two-player iterated matrix games: memory-one policies (marl_core/learners/lola.py).

    It learns from the game's table (exact) or from whole episodes played on the env's copies (sampled), so
    it has no replay: a run is ``updates`` simultaneous updates of both players, and ``train.total_steps``,
    ``train.eval_every`` and ``train.checkpoint_every`` (env steps) give way to ``updates``,
    ``eval_every_updates`` and ``checkpoint_every_updates``."""

    model_config = _STRICT

    kind: Literal["lola"] = Field("lola", description="learning algorithm: opponent shaping (LOLA) or, with "
                                  "opponent_shaping false, the naive learner, on two-player matrix games")
    opponent_shaping: bool | list[bool] = Field(True, description="true: LOLA, each player differentiates "
                                                "through the other's next step; false: the naive learner "
                                                "(plain policy gradient); [agent_0, agent_1]: one each, e.g. "
                                                "[true, false] for LOLA against a naive learner")

    @model_validator(mode="after")
    def _two_players(self) -> LOLAConfig:
        if isinstance(self.opponent_shaping, list) and len(self.opponent_shaping) != 2:
            raise _own_error(_not_allowed("learner.opponent_shaping", self.opponent_shaping,
                                          "true, false or a list of two (one per player)"))
        return self
    gradient: Literal["exact", "sampled"] = Field("exact", description="exact: the closed-form value of the "
                                                  "infinitely repeated game; sampled: DiCE estimates from "
                                                  "env.num_envs episodes of env.params.max_cycles rounds "
                                                  "per update")
    # gamma 0.96, delta = eta = 1 (exact case): Foerster et al. 2018, from memory (docs/sources.md, "LOLA")
    gamma: float = Field(0.96, ge=0.0, lt=1.0, description="discount factor per round")
    lr: float = Field(1.0, gt=0.0, description="step size of each player's own update (delta)")
    lookahead_lr: float = Field(1.0, gt=0.0, description="step size assumed for the opponent's update in "
                                "the shaping term (eta)")
    init_std: float = Field(1.0, ge=0.0, description="standard deviation of the initial logits, drawn "
                            "around 0 (probability 0.5)")
    updates: _PositiveInt = Field(200, description="simultaneous updates of both players")
    eval_every_updates: _PositiveInt = Field(50, description="updates between evaluations")
    checkpoint_every_updates: _PositiveInt = Field(50, description="updates between checkpoints")
    torch_threads: _PositiveInt = Field(1, description="torch intra-op threads per process")


class PPOConfig(BaseModel):
    """On-policy actor-critic (PPO's clipped objective with GAE) with a local, central or joint-action critic
    (marl_core/learners/ppo.py). It learns from rollouts, not a replay: each update collects
    ``rollout_steps`` vector steps from ``env.num_envs`` copies, then makes ``epochs`` passes over
    ``minibatches`` minibatches of them."""

    model_config = _STRICT

    kind: Literal["ppo"] = Field("ppo", description="learning algorithm: on-policy actor-critic (clipped "
                                 "surrogate, GAE) with a local, central or joint-action critic")
    critic: Literal["local", "central", "joint_action"] = Field(
        "central", description="what the critic sees: local = each agent's own observation (independent "
        "learners); central = one team network over every observation or the state, a value per agent; "
        "joint_action = central plus the other agents' actions, with a counterfactual advantage per agent")
    critic_input: Literal["auto", "state", "observations"] = Field(
        "auto", description="central and joint_action critics: observations = every agent's observation "
        "stacked; state = the env's state(); auto = observations (as for maddpg)")
    share_parameters: bool = Field(False, description="one actor (and one local critic) for all agents with "
                                   "an agent-id one-hot input (false: one per agent)")
    # gamma 0.99, lambda 0.95, clip 0.2, entropy 0.01: common PPO settings (docs/sources.md, "PPO", "GAE")
    gamma: float = _gamma(0.99)
    gae_lambda: float = Field(0.95, ge=0.0, le=1.0, description="GAE's lambda: 0 = one-step TD advantages, "
                              "1 = Monte-Carlo returns minus the value")
    lr: float = _lr(5e-4, "actors")
    critic_lr: float = _lr(5e-4, "critic")
    lr_end: float | None = Field(None, gt=0.0, description="learning rate reached at the end of a linear "
                                 "decay over lr_decay_steps env steps; both rates are scaled by the same "
                                 "factor (null: constant)")
    lr_decay_steps: _PositiveInt = Field(1_000_000, description="env steps of the linear learning-rate decay "
                                         "(used only with lr_end)")
    rollout_steps: _PositiveInt = Field(32, description="vector steps collected from env.num_envs copies "
                                        "per update")
    epochs: _PositiveInt = Field(2, description="passes over each rollout")
    minibatches: _PositiveInt = Field(2, description="minibatches per pass (each holds rollout_steps * "
                                      "num_envs / minibatches joint steps, every agent's part)")
    clip: float = Field(0.2, gt=0.0, description="clip range of the probability ratio")
    entropy_coef: float = Field(0.01, ge=0.0, description="weight of the entropy bonus in the actor's loss")
    normalize_advantages: bool = Field(True, description="advantages scaled to mean 0, std 1 per minibatch")
    grad_clip: float | None = Field(0.5, gt=0.0, description="largest gradient norm per update of each "
                                    "actor (the shared one under parameter sharing) and each critic network "
                                    "(null: no clipping)")
    hidden: _PositiveInt = _hidden()
    conv_channels: list[_PositiveInt] = _conv_channels("grid-window encoders (actors and critic)")
    conv_strides: list[_PositiveInt] | None = Field(None, min_length=1, description="stride of each conv "
                                                    "layer; left out: 2 for every layer; null: 1 for the "
                                                    "first layer, 2 for the others")
    pack_rollout: bool = Field(True, description="keep observations (and states) of 0s and 1s bit-packed "
                               "in the rollout, unpacked per minibatch")
    eval_policy: Literal["sample", "greedy"] = Field(
        "sample", description="how the actors act at evaluation and in saved policies: sample from the "
        "policy (what was learned) or take its most likely action")
    torch_threads: _PositiveInt = Field(1, description="torch intra-op threads per process")

    @model_validator(mode="before")
    @classmethod
    def _default_strides(cls, data: Any) -> Any:
        if isinstance(data, dict) and "conv_strides" not in data:
            channels = data.get("conv_channels", [16, 32])
            if isinstance(channels, list) and channels:
                data = {**data, "conv_strides": [DEFAULT_STRIDE["ppo"]] * len(channels)}
        return data

    @model_validator(mode="after")
    def _one_stride_per_conv_layer(self) -> PPOConfig:
        if self.conv_strides is not None and len(self.conv_strides) != len(self.conv_channels):
            raise _own_error(_not_allowed("learner.conv_strides", self.conv_strides,
                                          f"one stride per conv layer: {len(self.conv_channels)} "
                                          f"(learner.conv_channels = {self.conv_channels})"))
        if self.lr_end is not None and self.lr_end > self.lr:
            raise _own_error(_not_allowed("learner.lr_end", self.lr_end, f"a number <= learner.lr ({self.lr!r})"))
        return self


LEARNERS: dict[str, type[BaseModel]] = {"idqn": IDQNConfig, "maddpg": MADDPGConfig, "lola": LOLAConfig,
                                        "ppo": PPOConfig}


# ------------------------------------------------------------------------------------- train and log

class TrainConfig(BaseModel):
    """How long to train and how often to evaluate and checkpoint."""

    model_config = _STRICT

    total_steps: _PositiveInt = Field(100_000, description="env steps to train, summed over the copies")
    seed: _Int = Field(0, ge=0, description="seed of the env copies, the networks and exploration")
    eval_every: _PositiveInt = Field(10_000, description="env steps between evaluations")
    eval_episodes: _PositiveInt = Field(20, description="episodes per evaluation (the final metrics and the "
                                        "baselines too), played side by side on up to 64 copies")
    checkpoint_every: _PositiveInt = Field(20_000, description="env steps between checkpoints")
    baselines: Literal["auto"] | list[str] = Field("auto", description="non-learning teams measured beside "
                                                   "the learned one on the same episodes: auto = every team "
                                                   "that applies to the env (marl_core.baselines), or a list "
                                                   "of team names (random is always measured)")

    @model_validator(mode="after")
    def _check_baselines(self) -> TrainConfig:
        if self.baselines != "auto":
            from marl_core.baselines import KNOWN, renamed_team

            for name in self.baselines:
                if renamed_team("train.baselines", name):
                    raise _own_error(renamed_team("train.baselines", name))
                if name not in KNOWN:
                    raise _own_error(_not_allowed("train.baselines", name,
                                                  f"'auto' or a list of: {', '.join(KNOWN)}"))
        return self


IA_SMOOTHING = 0.965  # 0.99 * 0.975 (gamma * lambda); from memory of Hughes et al. 2018's settings
_IA_KEYS = {"alpha": "disadvantageous-inequity weight (others ahead), a number >= 0",
            "beta": "advantageous-inequity weight (ahead of others), a number >= 0",
            "smoothing": f"decay of the smoothed reward e_i, a number in [0, 1) (default {IA_SMOOTHING})"}


class InequityAversion(BaseModel):
    """``reward.inequity_aversion``: Hughes et al. 2018's inequity-averse reward (marl_core.rewards)."""

    model_config = _STRICT

    alpha: float = Field(ge=0.0, description=_IA_KEYS["alpha"])
    beta: float = Field(ge=0.0, description=_IA_KEYS["beta"])
    smoothing: float = Field(IA_SMOOTHING, ge=0.0, lt=1.0, description=_IA_KEYS["smoothing"])


def _number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and value == value \
        and abs(value) != float("inf")


class RewardConfig(BaseModel):
    """What each agent learns from, computed from the env's rewards (``marl_core.rewards``); the metrics
    always use the env's own rewards."""

    model_config = _STRICT

    prosocial: float = Field(0.0, ge=0.0, le=1.0, description="weight w of the team's mean reward: each "
                             "agent learns from (1 - w) * its reward + w * the mean over agents (0: selfish, "
                             "1: team reward)")
    inequity_aversion: InequityAversion | None = Field(
        None, description="null (off) or a mapping {alpha, beta, smoothing}: each agent's reward minus "
        "alpha / (N-1) * how far others are ahead and beta / (N-1) * how far it is ahead, on rewards "
        "smoothed as e = smoothing * e + r",
        json_schema_extra={"allowed": "null or a mapping with alpha (>= 0), beta (>= 0) and smoothing "
                                      "(in [0, 1), optional)", "type": "mapping | null"})

    @field_validator("inequity_aversion", mode="before")
    @classmethod
    def _check_inequity_aversion(cls, value: Any) -> Any:
        key = "reward.inequity_aversion"
        if value is None:
            return None
        if not isinstance(value, dict):
            raise _own_error(_not_allowed(key, value, "null or a mapping with alpha, beta and smoothing"))
        for name in value:
            if name not in _IA_KEYS:
                raise _own_error(_unknown(f"{key}.{name}", f"{key}.", _IA_KEYS))
        for name in ("alpha", "beta"):
            if name not in value:
                raise _own_error(f"{key}.{name} is missing: expected {_IA_KEYS[name]}")
        out = {}
        for name, v in value.items():
            low_ok = _number(v) and v >= 0
            if not low_ok or (name == "smoothing" and v >= 1):
                raise _own_error(_not_allowed(f"{key}.{name}", v, _IA_KEYS[name].split(", ", 1)[1]
                                              .split(" (default")[0]))
            out[name] = float(v)
        return out


class LogConfig(BaseModel):
    """What a run writes besides metrics.jsonl and summary.json."""

    model_config = _STRICT

    tensorboard: bool = Field(True, description="write TensorBoard event files")
    gif_every: _Int = Field(5, ge=0, description="evaluations between GIFs of an episode (0 = never)")
    progress: bool = Field(True, description="show a progress bar (false: quiet, plain log lines)")
    log_every: _PositiveInt = Field(1000, description="env steps between logs of the training scalars")


# ---------------------------------------------------------------------------------------------- run

# learner keys that describe the one replay every seat group shares: a seat's learner takes them from the
# top-level learner section (marl_core/seats.py)
SHARED_REPLAY_KEYS = ("batch_size", "replay_size", "pack_replay", "warmup_steps", "train_every",
                      "updates_per_round", "replay_ratio")


class SeatConfig(BaseModel):
    """What sits in one seat or group of seats (marl_core/seats.py): exactly one of ``learner``,
    ``policy`` or ``member``."""

    model_config = _STRICT

    learner: IDQNConfig | MADDPGConfig | PPOConfig | None = Field(
        None, discriminator="kind", description="a learner of its own for these seats (a learner section; "
        "an idqn or maddpg seat takes its replay keys from the top-level learner, a ppo seat learns from "
        "rollouts of its own seats)")
    policy: str | None = Field(None, description="a saved policy, kept fixed: a policy file for one seat, or a "
                               "run's policies/ directory (one <agent>.pt per seat)")
    member: str | None = Field(None, description="a non-learning member: random, stay or one of the game's "
                               "scripted teams (each seat plays its part of the team's rule)")

    @model_validator(mode="before")
    @classmethod
    def _learner_kind_default(cls, data: Any) -> Any:
        if isinstance(data, dict) and isinstance(data.get("learner"), dict) and "kind" not in data["learner"]:
            data = {**data, "learner": {"kind": "idqn", **data["learner"]}}
        return data

    @model_validator(mode="after")
    def _exactly_one(self) -> SeatConfig:
        given = [k for k in ("learner", "policy", "member") if getattr(self, k) is not None]
        if len(given) != 1:
            raise _own_error(f"a seat takes exactly one of learner, policy or member; got "
                             f"{', '.join(given) if given else 'none'}")
        return self


class RunConfig(BaseModel):
    """A whole run: env, learner, training schedule and logging."""

    model_config = _STRICT

    env: EnvConfig = Field(default_factory=EnvConfig, description="the env")
    learner: IDQNConfig | MADDPGConfig | LOLAConfig | PPOConfig = Field(default_factory=IDQNConfig,
                                                                        discriminator="kind",
                                                            description="the learner; 'kind' picks its keys")
    train: TrainConfig = Field(default_factory=TrainConfig, description="the training schedule")
    log: LogConfig = Field(default_factory=LogConfig, description="what the run writes")
    reward: RewardConfig = Field(default_factory=RewardConfig, description="what each agent learns from")
    seats: dict[str, SeatConfig] | None = Field(None, description="mixed teams: agent id (or ids joined by "
                                                "commas, a group) -> what sits there; agents not named "
                                                "learn with the top-level learner (null: every agent does)")

    @model_validator(mode="before")
    @classmethod
    def _fill_sections(cls, data: Any) -> Any:
        """An empty section (``train:`` with nothing under it) means defaults; ``learner.kind`` defaults to
        idqn."""
        if not isinstance(data, dict):
            return data
        data = {k: ({} if v is None and k in SECTIONS else v) for k, v in data.items()}
        learner = data.get("learner")
        if isinstance(learner, dict) and "kind" not in learner:
            data["learner"] = {"kind": "idqn", **learner}
        seats = data.get("seats")
        if isinstance(seats, dict):
            data["seats"] = _fill_seat_replay_keys(seats, data.get("learner") or {"kind": "idqn"})
        return data


    @model_validator(mode="after")
    def _ppo_fits(self) -> RunConfig:
        """With seats, the top-level learner owns the shared replay; a ppo learner sits in a seat."""
        if self.learner.kind == "ppo" and self.seats:
            raise _own_error("learner.kind = 'ppo' is not allowed with seats: the top-level learner owns the "
                             "seats' shared replay (idqn or maddpg); seat the ppo agents instead, e.g. "
                             "seats.agent_0.learner.kind = 'ppo'")
        return self

    @model_validator(mode="after")
    def _lola_fits(self) -> RunConfig:
        """LOLA plays two-player matrix games and learns from the game's own payoffs."""
        if self.learner.kind != "lola":
            return self
        if self.env.name != "matrix_v0":
            raise _own_error(_not_allowed("env.name", self.env.name, "'matrix_v0' with learner.kind = 'lola' "
                                          "(two players, two actions)"))
        if self.reward != RewardConfig():
            raise _own_error("the reward section is not allowed with learner.kind = 'lola': it learns from "
                             "the game's payoffs; leave reward out")
        if self.seats:
            raise _own_error("the seats section is not allowed with learner.kind = 'lola': it trains both "
                             "players together; leave seats out")
        return self


def _fill_seat_replay_keys(seats: dict[str, Any], top: Any) -> dict[str, Any]:
    """Each seat learner's :data:`SHARED_REPLAY_KEYS` from the top-level learner (an error when a seat sets
    one to another value)."""
    kind = top.get("kind", "idqn") if isinstance(top, dict) else None
    if kind not in ("idqn", "maddpg"):
        return seats
    try:
        resolved = LEARNERS[kind].model_validate(top).model_dump(mode="python")
    except ValidationError:
        return seats  # the learner section's own error is reported
    out = {}
    for name, seat in seats.items():
        if isinstance(seat, dict) and isinstance(seat.get("learner"), dict) and \
                seat["learner"].get("kind") != "ppo":  # a ppo seat learns from its own rollouts, no replay
            own = dict(seat["learner"])
            for key, plain in (("n_step", 1), ("prioritized", False)):
                if key in own and own[key] != plain:
                    raise _own_error(f"seats.{name}.learner.{key} = {own[key]!r} is not allowed: the seats share "
                                     f"one replay of 1-step transitions drawn uniformly, so a seat learner "
                                     f"cannot use it; leave it out (allowed: {plain!r})")
            for key in SHARED_REPLAY_KEYS:
                if key in own and own[key] != resolved[key]:
                    raise _own_error(f"seats.{name}.learner.{key} = {own[key]!r} is not allowed: the seats share "
                                     f"one replay; set it in the learner section (learner.{key} = "
                                     f"{resolved[key]!r})")
                own[key] = resolved[key]
            seat = {**seat, "learner": own}
        out[name] = seat
    return out


SECTIONS: dict[str, Any] = {"env": EnvConfig, "learner": LEARNERS, "train": TrainConfig, "log": LogConfig,
                            "reward": RewardConfig}


# ----------------------------------------------------------------------------------- schema listing

def _metadata_bounds(metadata: Iterable[Any]) -> str:
    """``> 0``, ``>= 1``, ``in [0, 1]``, ``in (0, 1]`` or ``''`` from annotated-types constraints."""
    low = high = None
    low_open = high_open = False
    for m in metadata:
        if getattr(m, "gt", None) is not None:
            low, low_open = m.gt, True
        if getattr(m, "ge", None) is not None:
            low, low_open = m.ge, False
        if getattr(m, "lt", None) is not None:
            high, high_open = m.lt, True
        if getattr(m, "le", None) is not None:
            high, high_open = m.le, False
    if low is not None and high is not None:
        return f"in {'(' if low_open else '['}{low:g}, {high:g}{')' if high_open else ']'}"
    if low is not None:
        return f"{'>' if low_open else '>='} {low:g}"
    if high is not None:
        return f"{'<' if high_open else '<='} {high:g}"
    return ""


def _unwrap(annotation: Any) -> tuple[Any, list[Any]]:
    """Strip ``Annotated``; return the bare type and its constraint objects (FieldInfo flattened)."""
    metadata: list[Any] = []
    while typing.get_origin(annotation) is Annotated:
        annotation, *extra = typing.get_args(annotation)
        for m in extra:
            metadata.extend(getattr(m, "metadata", None) or [m])
    return annotation, metadata


_WORDS = {bool: ("bool", "true or false", "true or false"), int: ("int", "an integer", "integers"),
          float: ("float", "a number", "numbers"), str: ("str", "a string", "strings")}


def _describe(annotation: Any, metadata: Iterable[Any]) -> tuple[str, str, str]:
    """(type name, what is allowed as a phrase, bounds) of one schema field."""
    annotation, inner = _unwrap(annotation)
    metadata = [*inner, *metadata]
    origin, args = typing.get_origin(annotation), typing.get_args(annotation)
    bounds = _metadata_bounds(metadata)
    if origin is Literal:
        choices = ", ".join(repr(a) for a in args)
        return "str", f"one of {choices}", f"one of {choices}"
    if origin in (typing.Union, types.UnionType) and type(None) in args:
        (inner_type,) = [a for a in args if a is not type(None)]
        name, phrase, _ = _describe(inner_type, metadata)
        return f"{name} | null", f"{phrase} or null", f"{bounds} or null" if bounds else "or null"
    if origin is list:
        item, item_meta = _unwrap(args[0])
        name, _, _ = _describe(item, item_meta)
        item_bounds = _metadata_bounds(item_meta)
        plural = _WORDS[item][2] if item in _WORDS else "values"
        phrase = f"a non-empty list of {plural}" + (f" {item_bounds}" if item_bounds else "")
        return f"list[{name}]", phrase, f"non-empty, each {item_bounds}" if item_bounds else "non-empty"
    if origin is dict or annotation is dict:
        return "mapping", "a mapping of keys to values", ""
    if annotation in _WORDS:
        name, phrase, _ = _WORDS[annotation]
        return name, f"{phrase} {bounds}" if bounds else phrase, bounds
    return getattr(annotation, "__name__", str(annotation)), str(annotation), bounds  # pragma: no cover


def _field_spec(model: type[BaseModel], name: str) -> tuple[str, str, str]:
    info = model.model_fields[name]
    extra = info.json_schema_extra if isinstance(info.json_schema_extra, dict) else {}
    type_name, phrase, bounds = _describe(info.annotation, info.metadata)
    if "allowed" in extra:
        phrase = bounds = str(extra["allowed"])
    return extra.get("type", type_name), phrase, bounds


def _default(model: type[BaseModel], name: str) -> Any:
    info = model.model_fields[name]
    if info.is_required():
        return None  # e.g. reward.inequity_aversion.alpha: required once the mapping is given
    stride = DEFAULT_STRIDE.get(model.model_fields["kind"].default) if "kind" in model.model_fields else None
    if name == "conv_strides" and stride is not None:  # filled when left out
        return [stride] * len(_default(model, "conv_channels"))
    return info.default_factory() if info.default_factory is not None else info.default


def _row(section: str, model: type[BaseModel], name: str, kind: str | None) -> dict[str, Any]:
    type_name, _, bounds = _field_spec(model, name)
    return {"key": f"{section}.{name}", "type": type_name, "default": copy.deepcopy(_default(model, name)),
            "bounds": bounds, "meaning": model.model_fields[name].description, "kind": kind}


def schema_table() -> list[dict[str, Any]]:
    """Every config key: ``key`` (dotted), ``type``, ``default``, ``bounds``, ``meaning`` and ``kind``.

    ``kind`` is ``None`` for a key of every learner (and for the other sections), else the learner kind
    the row belongs to; a learner key whose default differs by kind has one row per kind. The keys under
    ``env.params`` are the env's own: for our games see ``envs.list_envs()``.
    """
    rows: list[dict[str, Any]] = []
    rows_end = [{"key": "seats", "type": "mapping | null", "default": None, "bounds": "",
                 "meaning": RunConfig.model_fields["seats"].description, "kind": None}]
    for section, model in SECTIONS.items():
        if section != "learner":
            rows.extend(_row(section, model, name, None) for name in model.model_fields)
            if section == "reward":  # the keys of the inequity_aversion mapping, settable one by one
                rows.extend(_row("reward.inequity_aversion", InequityAversion, name, None)
                            for name in InequityAversion.model_fields)
            continue
        kinds = list(LEARNERS)
        rows.append({"key": "learner.kind", "type": "str", "default": "idqn",
                     "bounds": "one of " + ", ".join(repr(k) for k in kinds),
                     "meaning": "learning algorithm: independent DQN (idqn), a MADDPG-style centralised "
                                "critic (maddpg), opponent shaping on matrix games (lola) or an on-policy "
                                "actor-critic with a local, central or joint-action critic (ppo)",
                     "kind": None})
        names = [n for n in _LearnerBase.model_fields if n != "kind"]
        names += [n for cls in LEARNERS.values() for n in cls.model_fields if n not in names and n != "kind"]
        for name in names:
            owners = [k for k, cls in LEARNERS.items() if name in cls.model_fields]
            defaults = [_default(LEARNERS[k], name) for k in owners]
            if len(owners) == len(kinds) and all(d == defaults[0] for d in defaults):
                rows.append(_row(section, LEARNERS[owners[0]], name, None))
            else:
                rows.extend(_row(section, LEARNERS[k], name, k) for k in owners)
    return rows + rows_end


def valid_keys() -> list[str]:
    """Every dotted config key (for any learner kind), in schema order."""
    return list(dict.fromkeys(row["key"] for row in schema_table()))


# ------------------------------------------------------------------------------------- error mapping

def _lookup(data: Any, path: Sequence[Any]) -> Any:
    for part in path:
        if isinstance(data, dict) and part in data:
            data = data[part]
        elif isinstance(data, list) and isinstance(part, int) and part < len(data):
            data = data[part]
        else:
            return None
    return data


def _learner_kind(data: Any) -> str:
    kind = _lookup(data, ["learner", "kind"])
    return kind if kind in LEARNERS else "idqn"


def _explain(error: dict[str, Any], data: Any) -> str:
    """One line for the first pydantic error: dotted key, value, what is allowed."""
    etype = error["type"]
    if etype == _OWN_ERROR:
        return str(error["ctx"]["line"])
    loc = list(error["loc"])
    if len(loc) >= 2 and loc[0] == "learner" and loc[1] in LEARNERS:
        kind = loc.pop(1)  # pydantic puts the discriminator's tag into the location
    else:
        kind = _learner_kind(data)
    key = ".".join(str(p) for p in loc[:2])
    if etype.startswith("union_tag"):
        kinds = ", ".join(repr(k) for k in LEARNERS)
        return _not_allowed("learner.kind", _lookup(data, ["learner", "kind"]), f"one of {kinds}")
    if etype == "invalid_key":  # a YAML key such as 1 or true, which is not a name
        where = ".".join(str(p) for p in loc[:-1])
        return f"key {_show(error['input'])}{f' in {where}' if where else ''} is not allowed: expected a name"
    if not loc:
        return f"the config must be a mapping of sections ({', '.join(SECTIONS)}); got {_show(data)}"
    section = str(loc[0])
    model = LEARNERS[kind] if section == "learner" else SECTIONS.get(section)
    if etype == "extra_forbidden":
        if len(loc) == 1:
            return _unknown(section, "", SECTIONS)
        name = str(loc[1])
        others = [k for k, cls in LEARNERS.items() if k != kind and name in cls.model_fields]
        if section == "learner" and others:
            return f"learner.{name} is {_a(others[0])} key; learner.kind is {kind!r}"
        return _unknown(key, f"{section}.", model.model_fields)
    if len(loc) == 1:
        return _not_allowed(section, _lookup(data, [section]), "a mapping of keys (a config section)")
    name = str(loc[1])
    if model is None or name not in model.model_fields:  # pragma: no cover - pydantic names only our keys
        return f"{'.'.join(str(p) for p in loc)}: {error['msg']}"
    _, phrase, _ = _field_spec(model, name)
    return _not_allowed(key, _lookup(data, [section, name]), phrase)


def _a(word: str) -> str:
    return ("an " if word[:1] in "aeiou" else "a ") + word


def _validate(data: Any) -> RunConfig:
    try:
        return RunConfig.model_validate(data)
    except ValidationError as err:
        raise ConfigError(_explain(err.errors()[0], data)) from None


# ------------------------------------------------------------------------------------- YAML reading

class _Loader(yaml.SafeLoader):
    """PyYAML's safe loader with two changes: ``1e-3`` is a number, as in YAML 1.2 (YAML 1.1 wants a dot),
    and a key given twice in one mapping is an error instead of the last one silently winning."""

    def construct_mapping(self, node: yaml.MappingNode, deep: bool = False) -> dict:
        seen: dict[Any, int] = {}
        for key_node, _ in node.value:
            if key_node.tag == "tag:yaml.org,2002:merge":
                continue
            key = self.construct_object(key_node, deep=True)
            try:
                first = seen.get(key)
            except TypeError:  # an unhashable key: the base class reports it
                continue
            if first is not None:
                raise yaml.constructor.ConstructorError(
                    None, None, f"key {key!r} appears twice (first on line {first + 1})", key_node.start_mark)
            seen[key] = key_node.start_mark.line
        return super().construct_mapping(node, deep=deep)


_Loader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(r"^[-+]?(?:[0-9][0-9_]*(?:\.[0-9_]*)?|\.[0-9_]+)[eE][-+]?[0-9]+$"),
    list("-+0123456789."))


def _yaml_problem(err: yaml.YAMLError) -> str:
    mark = getattr(err, "problem_mark", None)
    problem = getattr(err, "problem", None) or str(err)
    where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark is not None else ""
    return f"{where}: {' '.join(str(problem).split())}"


class _Dumper(yaml.SafeDumper):
    """PyYAML's safe dumper with lists of scalars on one line (``[16, 32]``) and mappings as blocks."""


def _represent_list(dumper: yaml.SafeDumper, data: list) -> yaml.Node:
    flat = all(not isinstance(v, (dict, list)) for v in data)
    return dumper.represent_sequence("tag:yaml.org,2002:seq", data, flow_style=flat)


_Dumper.add_representer(list, _represent_list)


def _read_yaml(text: str) -> Any:
    return yaml.load(text, Loader=_Loader)  # _Loader is a yaml.SafeLoader


# ----------------------------------------------------------------------------------------- overrides

def _override_paths() -> set[str]:
    return set(valid_keys()) | set(SECTIONS)


def _split_override(item: Any) -> tuple[list[str], Any]:
    usage = "key.path=value, e.g. learner.lr=1e-3"
    if not isinstance(item, str) or "=" not in item:
        raise ConfigError(f"--set {_show(item)} is not allowed: expected {usage}")
    key, _, text = item.partition("=")
    key = key.strip()
    parts = key.split(".")
    if not key or any(not p or p != p.strip() or " " in p for p in parts):
        raise ConfigError(f"--set {_show(item)} is not allowed: expected {usage}")
    try:
        value = _read_yaml(text)
    except yaml.YAMLError as err:
        raise ConfigError(f"--set {_show(item)}: the value is not valid YAML{_yaml_problem(err)}") from None
    return parts, value


def apply_overrides(data: dict[str, Any], overrides: Sequence[str] = ()) -> dict[str, Any]:
    """A copy of ``data`` with each ``"key.path=value"`` set in order (the value parsed as YAML).

    Raises:
        ConfigError: for an item without ``=``, a key path the schema does not have (under
            ``env.params`` and ``seats`` any name is accepted here; the game and the seats section check
            it at validation), or a path
            through a value that is not a mapping.
    """
    if isinstance(overrides, str):
        overrides = [overrides]
    if not isinstance(data, dict):
        raise ConfigError(f"the config must be a mapping of sections ({', '.join(SECTIONS)}); "
                          f"got {_show(data)}")
    out = copy.deepcopy(data)
    known = _override_paths()
    params: list[tuple[str, str]] = []  # (item, game parameter name) of every override under env.params
    for item in overrides:
        parts, value = _split_override(item)
        path = ".".join(parts)
        under_params = parts[:2] == ["env", "params"] and len(parts) > 2
        if under_params:
            params.append((item, parts[2]))
        under_seats = parts[0] == "seats" and len(parts) > 1  # seat names are the env's agent ids
        if path not in known and not under_params and not under_seats:
            if parts[0] in SECTIONS and len(parts) > 1:
                section = parts[0] + "."
                names = [k[len(section):] for k in valid_keys() if k.startswith(section)]
            else:  # an unknown section: compare the whole path with every key, else list the sections
                section, names = "", [*SECTIONS, *valid_keys()]
                names = names if nearest(path, names) else list(SECTIONS)
            raise ConfigError(f"--set {item}: {_unknown(path, section, names)}")
        try:
            set_dotted(out, path, value)
        except ConfigError as err:
            raise ConfigError(f"--set {item}: {err}") from None
    _check_param_names(out, params)
    return out


def _check_param_names(data: dict[str, Any], params: list[tuple[str, str]]) -> None:
    """A game parameter name given with ``--set`` is checked against the game's table once every override
    is applied (an override of ``env.name`` may come after it), so its error carries the ``--set`` item."""
    env = data.get("env")
    name = env.get("name", EnvConfig.model_fields["name"].default) if isinstance(env, dict) else None
    if not params or not isinstance(name, str) or name not in envs.GAMES:
        return  # another env's keyword arguments are its own business; a bad env.name fails at validation
    module = envs.game_module(name)
    for item, key in params:
        problem = _param_name_problem(module, key)
        if problem is not None:
            raise ConfigError(f"--set {item}: {problem}")


def set_dotted(data: dict[str, Any], key: str, value: Any) -> None:
    """Set ``data[a][b][c] = value`` for the dotted ``key`` ``a.b.c``, making missing mappings on the way.

    Raises:
        ConfigError: a prefix of the key holds a value that is not a mapping.
    """
    parts = key.split(".")
    node = data
    for depth, part in enumerate(parts[:-1]):
        child = node.get(part)
        if child is None:
            child = node[part] = {}
        if not isinstance(child, dict):
            where = ".".join(parts[:depth + 1])
            raise ConfigError(f"cannot set '{key}' because {where} = {_show(child)} is not a mapping")
        node = child
    node[parts[-1]] = value


# ------------------------------------------------------------------------------------------ public API

def parse_config(data: dict[str, Any], overrides: Sequence[str] = ()) -> RunConfig:
    """Validate a config given as a mapping (e.g. parsed YAML), after applying ``overrides``.

    Raises:
        ConfigError: one line naming the dotted key, the value and what is allowed.
    """
    if data is None:
        data = {}
    return _validate(apply_overrides(data, overrides))


def read_yaml_mapping(path: str | os.PathLike, what: str,
                      expect: str = "a mapping") -> tuple[dict[str, Any] | None, Path]:
    """Read the YAML file ``path`` (called ``what`` in messages) with the project's loader.

    Returns the parsed data (``None`` for an empty file) and the path. Raises :class:`ConfigError` in one
    line for a missing or unreadable file, invalid YAML (with its line and column), or a top level that is
    not a mapping (``expect`` says what it should be).
    """
    path = Path(path)
    if not path.is_file():
        problem = "is a directory, not a file" if path.is_dir() else "not found"
        raise ConfigError(f"{what} '{path}' {problem}")
    try:
        data = _read_yaml(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as err:
        raise ConfigError(f"cannot read {what} '{path}': {' '.join(str(err).split())}") from None
    except yaml.YAMLError as err:
        raise ConfigError(f"invalid YAML in {what} '{path}'{_yaml_problem(err)}") from None
    if data is not None and not isinstance(data, dict):
        raise ConfigError(f"{what} '{path}': the top level must be {expect}; got {_show(data)}")
    return data, path


def load_stored_config(path: str | os.PathLike) -> RunConfig:
    """The resolved config a run directory stored (``config.yaml``). A learner key added after that run
    was written is absent from its file and takes the value that behaves as the run did
    (``_ADDED_LEARNER_KEYS``), not today's default: an old run resumes with the networks it was built with.
    """
    data, _ = read_yaml_mapping(path, "config file", f"a mapping of sections ({', '.join(SECTIONS)})")
    data = copy.deepcopy(data or {})
    _respell(data, _FIRST_SPELLING_TO_NEW)  # a run written before a value was renamed loads as it ran
    learner = data.get("learner")
    if isinstance(learner, dict):
        kind = LEARNERS.get(learner.get("kind", "idqn"))
        for key, neutral in _ADDED_LEARNER_KEYS.items():
            if kind is not None and key in kind.model_fields and key not in learner:
                learner[key] = neutral
    return parse_config(data)


def load_config(path: str | os.PathLike, overrides: Sequence[str] = ()) -> RunConfig:
    """Read a YAML run config, apply ``overrides`` (``"key.path=value"``) and validate it.

    Raises:
        ConfigError: a missing or unreadable file, invalid YAML (with its line and column), a top level
            that is not a mapping, a bad override, or an invalid key or value.
    """
    data, _ = read_yaml_mapping(path, "config file", f"a mapping of sections ({', '.join(SECTIONS)})")
    return parse_config(data or {}, overrides)


def config_to_dict(cfg: RunConfig) -> dict[str, Any]:
    """The resolved config as plain YAML/JSON-ready data: every default filled in, game params included."""
    return cfg.model_dump(mode="python")


# learner keys added after the first release -> the value that behaves as the first release did
# (a bit-packed replay samples bit for bit what the plain one does)
_ADDED_LEARNER_KEYS: dict[str, Any] = {"pack_replay": True, "replay_ratio": None, "conv_strides": None,
                                        "actor_every": 1}
# game parameters added after the first release -> the value that plays as before
_ADDED_GAME_PARAMS: dict[str, Any] = {"regrow_scale": 1.0}
_NOT_SET = object()


# Values renamed after the first release (RENAMED_VALUES, envs' Param.renamed), where a resolved config holds
# them: (section, key) -> {first spelling: today's}. A stored run config is read with today's words, and
# config_hash hashes the first spelling, so a run keeps its id (and its checkpoints) across a rename.
_FIRST_SPELLING_TO_NEW: dict[tuple[str, str], dict[str, str]] = {
    ("learner", "critic"): {"shared": "one_network"},  # only maddpg's critic took this word
    ("params", "state_layout"): {"shared": "anonymous"},
}
_NEW_TO_FIRST_SPELLING = {where: {new: old for old, new in words.items()}
                          for where, words in _FIRST_SPELLING_TO_NEW.items()}


def _respell(data: dict[str, Any], table: dict[tuple[str, str], dict[str, str]]) -> None:
    """Replace, in place, the words of ``table`` in a config dict: the top-level learner, env.params and
    each seat's learner."""
    learners = [data.get("learner")]
    seats = data.get("seats")
    if isinstance(seats, dict):
        learners += [s.get("learner") for s in seats.values() if isinstance(s, dict)]
    places = [("learner", x) for x in learners] + [("params", (data.get("env") or {}).get("params"))
                                                  if isinstance(data.get("env"), dict) else ("params", None)]
    for section, where in places:
        if not isinstance(where, dict):
            continue
        for (sec, key), words in table.items():
            if sec == section and isinstance(where.get(key), str) and where[key] in words:
                where[key] = words[where[key]]


def config_hash(cfg: RunConfig) -> str:
    """A stable 12-hex-digit digest of the resolved config (same config, same hash, in any process)."""
    data = config_to_dict(cfg)
    _respell(data, _NEW_TO_FIRST_SPELLING)
    # keys added after the first release drop out at the values that behave as before, so the configs of
    # earlier runs keep their hash (run ids in sweep ledgers, checkpoints to resume)
    if data["reward"] == RewardConfig().model_dump(mode="python"):
        del data["reward"]
    if data.get("seats", _NOT_SET) is None:  # added later: no seats is every run before it
        del data["seats"]
    for key, neutral in _ADDED_LEARNER_KEYS.items():
        if key in data["learner"] and data["learner"][key] == neutral:
            del data["learner"][key]
    params = data["env"].get("params")
    for key, neutral in _ADDED_GAME_PARAMS.items():
        if isinstance(params, dict) and params.get(key, _NOT_SET) == neutral:
            del params[key]
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:12]


def dump_config(cfg: RunConfig, path: str | os.PathLike) -> None:
    """Write the resolved config as YAML, atomically (a temp file beside ``path``, then ``os.replace``).

    The parent directory is created if needed. :func:`load_config` of the file gives back an equal config.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    body = yaml.dump(config_to_dict(cfg), Dumper=_Dumper, sort_keys=False, default_flow_style=False,
                     allow_unicode=True, width=100)
    text = f"# resolved marl-core run config; config_hash {config_hash(cfg)}\n{body}"
    atomic_write(path, lambda f: f.write(text))
