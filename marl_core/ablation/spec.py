"""Sweep specs: one YAML file naming a base config, the arms to compare and the seeds to repeat them over,
expanded deterministically into runs whose ids come from their resolved configs.

A spec (every key but ``base`` and ``seeds`` may be left out)::

    base: ../harvest_idqn.yaml        # a config file, relative to this file's directory, or a mapping
    seeds: [0, 1, 2, 3, 4]            # distinct integers >= 0; each becomes train.seed
    axes:                             # dotted config key -> values
      learner.kind: [idqn, maddpg]
      learner.share_parameters: [false, true]
    combine: product                  # product (every combination, row-major) | zip (equal lengths)
    arms:                             # named arms; with axes, every arm x every axes combination
      narrow_view: {env.params.view_radius: 3}
      wide_view: {env.params.view_radius: 7}
    set: {train.total_steps: 50000}   # applied to every run
    baseline: narrow_view/kind=idqn,share_parameters=false   # required with more than one arm
    smoke_test: false                 # true: runs too short to learn; the sweep checks that the pipeline
                                      # works, and its report says so at the top (default false)
    expect:                           # the study's expected finding: measure -> increases | decreases |
      tags_fired: decreases           # no_change, along the one numeric axis (when the spec has exactly
      peace: increases                # one axis and its values are numbers) or else each arm against the
                                      # baseline; the report says whether the data agree (default none)
    against: restrained               # one arm only: the findings compare it with this non-learning team,
                                      # paired within each run (default: no such comparison)
    over_training: true               # the report adds findings over training: per-seed curves and the
                                      # dip-and-recovery test of docs/studies.md (default false)
    sizes:                            # optional: the study at three sizes (ablate --size, default full);
      quick: {seeds: [0, 1, 2], set: {train.total_steps: 20000}}     # each may replace the seeds and add
      full: {}                                                        # to 'set' (its keys win)
      published: {set: {train.total_steps: 10000000}}

Arms and their names, in the order written:

- axes only: one arm per combination, named ``<short>=<value>`` parts joined by ``,``
  (``kind=maddpg,share_parameters=true``); ``short`` is the last segment of the dotted key unless two axes
  share it, then the whole key. Values are written as in YAML (``true``, ``null``, ``[0.0,0.1]``); a ``/``
  in a value becomes ``_``.
- named arms only: one arm per name.
- named arms and axes: ``<arm>/<axes part>`` for every arm (outer) and combination (inner).
- neither: one arm named ``base``.

Each run's config is built as: base config → ``set`` → the named arm's overrides → the axis values →
``train.seed`` = the seed, and then fully validated with :func:`marl_core.config.parse_config`. Runs are
ordered arm-major, then by seed. A run's id is :func:`marl_core.config.config_hash` of its resolved
config (the seed included), so the same run has the same id in any process or session, whichever spec
it came from.

Switching the learner kind: a base config's learner keys are settings chosen for its own kind (a DQN's
learning rate, batch size and discount are not a centralised critic's). When ``set``, an arm or an axis
sets ``learner.kind`` to another kind, that run takes the new kind's default for every learner key the
spec does not set, and never the base's value, even for keys the kinds share (``lr``, ``gamma``,
``batch_size`` ...). Only the settings that are not learning settings are kept from the base
(:data:`KEPT_ACROSS_KINDS`: ``share_parameters``, ``torch_threads``); where such a key keeps a value
other than the new kind's default, :attr:`Sweep.notices` says so in one line (``ablate`` prints it). A
key written in ``set``, ``arms`` or ``axes`` always applies: one that does not belong to the run's kind is
an error.

Where each value comes from: :attr:`Sweep.sources` maps every arm to the resolved learner, env and
reward keys that are not defaults, each with its source (``set``, ``arms.<name>``, ``axes``, ``base``, or
``inherited`` for a base value kept across a kind switch); the sweep's ledger records it and the report's
table of config differences marks every difference the spec did not ask for.

Checks, all before anything runs (each a one-line :class:`marl_core.errors.ConfigError`):

- unknown spec keys, with the nearest valid ones;
- every key path in ``axes``, ``arms`` and ``set`` against :func:`marl_core.config.valid_keys` (naming
  where it appears, e.g. ``arms.wide_view``, and up to three nearest valid keys); ``env.params.<name>``
  is checked by the game's parameter table when the run's config is parsed; ``train.seed`` belongs in
  ``seeds``;
- a key set by both a named arm and an axis (the axis would silently win);
- every run's config, naming the arm, the key and where the key was set;
- unique arm names (no ``/`` in a named arm), a baseline that is an arm, no two arms with the same
  resolved config.
"""

from __future__ import annotations

import copy
import hashlib
import itertools
import json
import os
import re
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any

import envs
from envs.metrics import BEHAVIOUR_NAMES, METRIC_NAMES
from envs.params import nearest
from marl_core.config import (
    RENAMED,
    RunConfig,
    config_hash,
    parse_config,
    read_yaml_mapping,
    schema_table,
    set_dotted,
    valid_keys,
)
from marl_core.errors import ConfigError

__all__ = ["Arm", "RunSpec", "Sweep", "SPEC_KEYS", "SIZES", "KEPT_ACROSS_KINDS", "load_spec", "parse_spec", "apply_size",
           "sweep_table", "flat_config"]

#: The keys a spec may have.
SPEC_KEYS: tuple[str, ...] = ("base", "seeds", "axes", "combine", "arms", "set", "baseline", "smoke_test",
                              "expect", "against", "over_training", "sizes")
#: the sizes a spec may define under ``sizes`` (``ablate --size``); ``full`` is the default
SIZES: tuple[str, ...] = ("quick", "full", "published")
DEFAULT_SIZE = "full"
_SIZE_KEYS = ("seeds", "set")
#: ``expect`` values: the direction a study expects a measure to move (marl_core.ablation.report findings)
EXPECT_DIRECTIONS: tuple[str, ...] = ("increases", "decreases", "no_change")
#: what ``expect`` may name: the report's metrics and behaviour measures
EXPECT_MEASURES: tuple[str, ...] = ("return_mean", *METRIC_NAMES, *BEHAVIOUR_NAMES)
_COMBINE = ("product", "zip")
_SECTIONS = ("env", "learner", "train", "log")
_PARAMS = "env.params."
_SEED_KEY = "train.seed"
_ONLY_ARM = "base"
#: learner keys a run keeps from the base config when an arm switches ``learner.kind``: they choose how
#: the team is built and run, not how it learns; every other learner key takes the new kind's default.
KEPT_ACROSS_KINDS: tuple[str, ...] = ("share_parameters", "torch_threads")
#: the source of a base value kept across a kind switch (see :attr:`Sweep.sources`)
INHERITED = "inherited"


@dataclass(frozen=True)
class Arm:
    """One condition of the comparison: a name and the dotted overrides (named arm, then axis values)
    that distinguish it; ``set`` and the seed are not included."""

    name: str
    overrides: dict[str, Any]


@dataclass(frozen=True)
class RunSpec:
    """One run: an arm at one seed.

    Attributes:
        run_id: :func:`~marl_core.config.config_hash` of ``config``.
        arm: the arm's name.
        seed: the seed (also ``config.train.seed``).
        overrides: every dotted override applied on top of the base config, in order: ``set``, the arm's
            overrides, then ``train.seed``.
        config: the validated, resolved config.
    """

    run_id: str
    arm: str
    seed: int
    overrides: dict[str, Any]
    config: RunConfig = field(repr=False)


@dataclass(frozen=True)
class Sweep:
    """An expanded spec.

    Attributes:
        arms: the arms, in spec order.
        runs: every run, arm-major, then by seed.
        baseline: the name of the arm the others are compared with.
        seeds: the seeds, as written.
        axes: dotted key -> values, as written.
        spec_hash: 12 hex digits over the arms (names and overrides), the baseline and every run's
            (arm, seed, id); it changes when any resolved config changes, e.g. an edited base file.
        source: the spec as given (a deep copy of the mapping).
        combine: ``product`` or ``zip``.
        shared: the ``set`` overrides.
        base: the base config mapping as written (before any override).
        base_path: the base config file, or ``None`` for an inline base.
        smoke_test: the spec's ``smoke_test``: the runs are too short to learn, so the sweep tests the
            pipeline, not the arms (the report says so at the top). Not part of ``spec_hash``.
        expect: the spec's ``expect``, measure -> ``increases`` / ``decreases`` / ``no_change`` (empty
            without one). Not part of ``spec_hash``.
        against: the spec's ``against``: the non-learning team a one-arm study is compared with, or None.
        sources: arm -> dotted key -> where its value comes from (``set``, ``arms.<name>``, ``axes``,
            ``base``, or ``inherited``: a base learner key kept across a switch of ``learner.kind``), for
            every key the spec or the base wrote (``train.seed`` aside); a key that is absent took its
            default (a learner key: its kind's default).
        size: the size expanded (``quick`` / ``full`` / ``published``), or None for a spec without sizes.
        over_training: the spec's ``over_training``: the report adds findings over training. Not part of
            ``spec_hash``.
        notices: one line per arm that keeps a base learner value across a kind switch (see the module
            docstring); empty when there is none.
    """

    arms: list[Arm]
    runs: list[RunSpec]
    baseline: str
    seeds: list[int]
    axes: dict[str, list[Any]]
    spec_hash: str
    source: dict[str, Any] = field(repr=False)
    combine: str = "product"
    shared: dict[str, Any] = field(default_factory=dict)
    base: dict[str, Any] = field(default_factory=dict, repr=False)
    base_path: str | None = None
    smoke_test: bool = False
    expect: dict[str, str] = field(default_factory=dict)
    against: str | None = None
    sources: dict[str, dict[str, str]] = field(default_factory=dict)
    notices: list[str] = field(default_factory=list)
    over_training: bool = False
    size: str | None = None

    @property
    def arm_names(self) -> list[str]:
        return [a.name for a in self.arms]

    def arm(self, name: str) -> Arm:
        """The arm called ``name``; ``KeyError`` if there is none."""
        for a in self.arms:
            if a.name == name:
                return a
        raise KeyError(name)

    def runs_of(self, arm: str) -> list[RunSpec]:
        """The runs of one arm, in seed order."""
        return [r for r in self.runs if r.arm == arm]


# ------------------------------------------------------------------------------------------ helpers

def _show(value: Any) -> str:
    text = repr(value).replace("\n", " ")
    return text if len(text) <= 80 else text[:77] + "..."


def _did_you_mean(close: list[str]) -> str:
    return " or ".join(repr(c) for c in close)


def _canonical(value: Any) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), default=str)


def _label(value: Any) -> str:
    """A value as it appears in an arm name: YAML spelling, compact, no ``/``."""
    if isinstance(value, bool):
        text = "true" if value else "false"
    elif value is None:
        text = "null"
    elif isinstance(value, float):
        text = repr(value)
    elif isinstance(value, (list, tuple)):
        text = "[" + ",".join(_label(v) for v in value) + "]"
    elif isinstance(value, dict):
        text = "{" + ",".join(f"{k}:{_label(v)}" for k, v in value.items()) + "}"
    else:
        text = str(value)
    return text.replace("/", "_")


@lru_cache(maxsize=1)
def _learner_keys() -> dict[str, frozenset[str]]:
    """Learner kind -> the names of its keys (``kind`` included)."""
    rows = [r for r in schema_table() if r["key"].startswith("learner.")]
    kinds = sorted({r["kind"] for r in rows if r["kind"] is not None})
    return {k: frozenset(r["key"].split(".", 1)[1] for r in rows if r["kind"] in (None, k)) for k in kinds}


@lru_cache(maxsize=1)
def _keys() -> frozenset[str]:
    return frozenset(valid_keys())


def _game_param_keys(base: dict[str, Any]) -> list[str]:
    """``env.params.<name>`` of the base's game (for suggestions only; the game checks them at parse)."""
    env = base.get("env") if isinstance(base.get("env"), dict) else {}
    name = env.get("name", "harvest_v0")
    if not isinstance(name, str) or name not in envs.GAMES:
        return []
    return [_PARAMS + p.name for p in envs.game_module(name).PARAMS]


def _check_key(key: Any, where: str, base: dict[str, Any]) -> str:
    """``key`` if it is a dotted config key a spec may set, else a ConfigError naming it and ``where``."""
    example = "a dotted config key such as 'learner.lr'"
    if not isinstance(key, str) or not key:
        raise ConfigError(f"{where}: key {_show(key)} is not allowed: expected {example}")
    if key in _SECTIONS:
        raise ConfigError(f"{where}: '{key}' is a whole config section; give dotted keys such as "
                          f"'{key}.<name>'")
    if key == _SEED_KEY:
        raise ConfigError(f"{where}: {_SEED_KEY} is set from 'seeds'; list the seeds there instead")
    if key in _keys():
        return key
    if key in RENAMED:
        raise ConfigError(f"{where}: key '{key}' was renamed: use '{RENAMED[key]}'")
    if key.startswith(_PARAMS) and all(key[len(_PARAMS):].split(".")):
        return key  # the game's table checks the name when the run's config is parsed
    candidates = [*valid_keys(), *_game_param_keys(base)]
    section, _, rest = key.partition(".")
    close: list[str] = []
    if section in _SECTIONS:  # a typo after a good section: compare within the section first
        prefix = _PARAMS if key.startswith("env.param") else section + "."
        inside = [k for k in candidates if k.startswith(prefix) and k != "env.params"]
        tail = key.split(".", 2)[-1] if prefix == _PARAMS else rest
        names = [k[len(prefix):] for k in inside]
        close = [prefix + n for n in nearest(tail, names)]
    if not close:
        close = nearest(key, candidates)
    if close:
        raise ConfigError(f"{where}: unknown key '{key}'; did you mean {_did_you_mean(close)}?")
    if section in _SECTIONS:
        names = ", ".join(k for k in candidates if k.startswith(section + "."))
        raise ConfigError(f"{where}: unknown key '{key}' (valid keys: {names})")
    raise ConfigError(f"{where}: unknown key '{key}' (a key starts with one of the sections "
                      f"{', '.join(_SECTIONS)})")


def _overrides(value: Any, where: str, base: dict[str, Any]) -> dict[str, Any]:
    """A mapping of dotted overrides (``None`` = empty), every key checked."""
    if value is None:
        return {}
    if not isinstance(value, dict):
        raise ConfigError(f"{where} = {_show(value)} is not allowed: expected a mapping of dotted config "
                          "keys to values")
    return {_check_key(k, where, base): copy.deepcopy(v) for k, v in value.items()}


def _kind_of(base: dict[str, Any]) -> Any:
    learner = base.get("learner")
    return learner.get("kind", "idqn") if isinstance(learner, dict) else "idqn"


def _build(base: dict[str, Any], steps: list[dict[str, Any]]) -> tuple[dict[str, Any], dict[str, Any]]:
    """The config mapping of one run, and the base's learner values kept across a kind switch.

    ``base`` with each step's overrides applied in order; when the steps switch ``learner.kind``, the
    base's learner keys are dropped (the new kind's defaults apply) except :data:`KEPT_ACROSS_KINDS`,
    which are returned as ``{key: value}``."""
    data = copy.deepcopy(base)
    kind = _kind_of(base)
    for overrides in steps:
        kind = overrides.get("learner.kind", kind)
    learner = data.get("learner")
    kept: dict[str, Any] = {}
    if kind != _kind_of(base) and isinstance(learner, dict):
        allowed = _learner_keys().get(kind) if isinstance(kind, str) else None
        kept = {k: v for k, v in learner.items()
                if k in KEPT_ACROSS_KINDS and (allowed is None or k in allowed)}
        data["learner"] = dict(kept)
    for overrides in steps:
        for key, value in overrides.items():
            set_dotted(data, key, copy.deepcopy(value))
    set_here = {k for overrides in steps for k in overrides}
    return data, {f"learner.{k}": v for k, v in kept.items() if f"learner.{k}" not in set_here}


def flat_config(data: Any, prefix: str = "") -> dict[str, Any]:
    """A nested config mapping as ``{dotted key: value}`` (lists and scalars are leaves)."""
    if not isinstance(data, dict):
        return {prefix[:-1]: data} if prefix else {}
    out: dict[str, Any] = {}
    for key, value in data.items():
        if isinstance(value, dict) and value:
            out.update(flat_config(value, f"{prefix}{key}."))
        else:
            out[f"{prefix}{key}"] = value
    return out


def _sources(base: dict[str, Any], shared: dict[str, Any], origin: dict[str, str],
             kept: dict[str, Any], switched: bool) -> dict[str, str]:
    """Dotted key -> where one arm's value comes from (see :attr:`Sweep.sources`); ``switched``: the arm
    runs another learner kind than the base's."""
    out: dict[str, str] = {}
    for key in flat_config(base):
        if key.startswith("learner.") and switched and key not in kept:
            continue  # dropped: the run's kind takes its own default
        out[key] = INHERITED if key in kept else "base"
    out.update(dict.fromkeys(shared, "set"))
    out.update(origin)
    out.pop(_SEED_KEY, None)
    return out


def _kept_default(kind: Any, key: str) -> Any:
    """The default of learner ``key`` under learner ``kind`` (None when unknown)."""
    for row in schema_table():
        if row["key"] == key and row["kind"] in (None, kind):
            return row["default"]
    return None


def _mentioned(message: str, keys: list[str]) -> str | None:
    """The longest of ``keys`` that ``message`` names (as a whole dotted key), or ``None``."""
    found = [k for k in keys if re.search(rf"(?<![\w.]){re.escape(k)}(?![\w.])", message)]
    return max(found, key=len) if found else None


# ------------------------------------------------------------------------------------------ parsing

def _read_base(value: Any, base_dir: Path) -> tuple[dict[str, Any], str | None]:
    if isinstance(value, dict):
        return copy.deepcopy(value), None
    if not isinstance(value, (str, os.PathLike)) or not str(value):
        raise ConfigError(f"base = {_show(value)} is not allowed: expected a config file path (relative to "
                          "the spec's directory) or an inline config mapping")
    path = Path(value)
    if not path.is_absolute():
        path = base_dir / path
    data, path = read_yaml_mapping(path, "base config", "a mapping of sections")
    return data or {}, str(path)


def _read_seeds(value: Any) -> list[int]:
    allowed = "a non-empty list of distinct integers >= 0"
    if value is None:
        raise ConfigError(f"the spec has no 'seeds': expected {allowed}")
    if not isinstance(value, list) or not value:
        raise ConfigError(f"seeds = {_show(value)} is not allowed: expected {allowed}")
    for s in value:
        if isinstance(s, bool) or not isinstance(s, int) or s < 0:
            raise ConfigError(f"seeds: {_show(s)} is not allowed: expected {allowed}")
    repeated = sorted({s for s in value if value.count(s) > 1})
    if repeated:
        raise ConfigError(f"seeds: {', '.join(map(str, repeated))} listed more than once: expected {allowed}")
    return list(value)


def _read_axes(value: Any, combine: str, base: dict[str, Any]) -> dict[str, list[Any]]:
    if value is None:
        return {}
    if not isinstance(value, dict):
        raise ConfigError(f"axes = {_show(value)} is not allowed: expected a mapping of dotted config keys "
                          "to lists of values")
    axes: dict[str, list[Any]] = {}
    for key, values in value.items():
        key = _check_key(key, "axes", base)
        if not isinstance(values, list) or not values:
            raise ConfigError(f"axes.{key} = {_show(values)} is not allowed: expected a non-empty list of "
                              "values")
        seen: set[str] = set()
        for v in values:
            if _canonical(v) in seen:
                raise ConfigError(f"axes.{key}: {_show(v)} is listed more than once")
            seen.add(_canonical(v))
        axes[key] = copy.deepcopy(values)
    lengths = {k: len(v) for k, v in axes.items()}
    if combine == "zip" and len(set(lengths.values())) > 1:
        shown = ", ".join(f"{k} has {n}" for k, n in lengths.items())
        raise ConfigError(f"axes: combine 'zip' needs lists of equal length; {shown}")
    return axes


def _check_arm_name(name: Any) -> str:
    allowed = "a non-empty printable name without '/' or surrounding spaces"
    if (not isinstance(name, str) or not name or name != name.strip() or "/" in name
            or not name.isprintable()):
        raise ConfigError(f"arms: arm name {_show(name)} is not allowed: expected {allowed}")
    return name


def _axes_arms(axes: dict[str, list[Any]], combine: str) -> list[tuple[str, dict[str, Any]]]:
    """(name, overrides) of every axes combination, in order; ``[("", {})]`` without axes."""
    if not axes:
        return [("", {})]
    keys = list(axes)
    lasts = [k.rsplit(".", 1)[-1] for k in keys]
    short = {k: (last if lasts.count(last) == 1 else k) for k, last in zip(keys, lasts)}
    rows = zip(*axes.values()) if combine == "zip" else itertools.product(*axes.values())
    out = []
    for row in rows:
        name = ",".join(f"{short[k]}={_label(v)}" for k, v in zip(keys, row))
        out.append((name, {k: copy.deepcopy(v) for k, v in zip(keys, row)}))
    return out


def apply_size(data: Any, size: str | None) -> tuple[Any, str | None]:
    """The spec at one of its sizes: ``sizes[size]``'s ``seeds`` replace the spec's and its ``set`` is
    added to the spec's (its keys win); ``sizes`` itself is dropped. A spec without ``sizes`` is returned as
    it is (size None), and then asking for a size is an error. ``size`` None means :data:`DEFAULT_SIZE`."""
    if not isinstance(data, dict) or "sizes" not in data:
        if size is not None:
            raise ConfigError(f"--size {size}: this spec has no 'sizes' (it runs at one size); leave --size out")
        return data, None
    sizes = data["sizes"]
    if not isinstance(sizes, dict) or not sizes:
        raise ConfigError(f"sizes = {_show(sizes)} is not allowed: expected a mapping of {', '.join(SIZES)} to "
                          "mappings with 'seeds' and/or 'set'")
    for name, body in sizes.items():
        if name not in SIZES:
            raise ConfigError(f"sizes.{name} is not a size: expected {', '.join(SIZES)}")
        if body is not None and not isinstance(body, dict):
            raise ConfigError(f"sizes.{name} = {_show(body)} is not allowed: expected a mapping with 'seeds' "
                              "and/or 'set'")
        for key in body or {}:
            if key not in _SIZE_KEYS:
                raise ConfigError(f"sizes.{name}.{key} is not allowed: a size sets only {' and '.join(_SIZE_KEYS)}")
    size = DEFAULT_SIZE if size is None else size
    if size not in SIZES:
        raise ConfigError(f"--size = {_show(size)} is not allowed: expected one of {', '.join(SIZES)}")
    if size not in sizes:
        raise ConfigError(f"--size {size}: this spec defines the sizes {', '.join(sizes)}")
    body = sizes[size] or {}
    out = {k: copy.deepcopy(v) for k, v in data.items() if k != "sizes"}
    if "seeds" in body:
        out["seeds"] = copy.deepcopy(body["seeds"])
    if body.get("set") is not None:
        if not isinstance(body["set"], dict):
            raise ConfigError(f"sizes.{size}.set = {_show(body['set'])} is not allowed: expected a mapping of "
                              "dotted config keys to values")
        shared = out.get("set") or {}
        if not isinstance(shared, dict):
            raise ConfigError(f"set = {_show(shared)} is not allowed: expected a mapping of dotted config keys "
                              "to values")
        out["set"] = {**copy.deepcopy(shared), **copy.deepcopy(body["set"])}
    return out, size


def parse_spec(data: Any, base_dir: str | os.PathLike | None = None, size: str | None = None) -> Sweep:
    """Check a spec given as a mapping and expand it into arms and runs.

    Args:
        data: the spec (e.g. parsed YAML).
        base_dir: the directory a relative ``base`` path is read from (default: the working directory).
        size: with a spec that has ``sizes``, the size to expand (default ``full``); see :func:`apply_size`.

    Raises:
        ConfigError: one line naming what is wrong (see the module docstring for every check).
    """
    if not isinstance(data, dict):
        raise ConfigError(f"a sweep spec must be a mapping with the keys {', '.join(SPEC_KEYS)}; got "
                          f"{_show(data)}")
    for key in data:
        if key not in SPEC_KEYS:
            close = nearest(str(key), SPEC_KEYS)
            hint = (f"; did you mean {_did_you_mean(close)}?" if close
                    else f" (valid keys: {', '.join(SPEC_KEYS)})")
            raise ConfigError(f"unknown spec key {_show(key)}{hint}")
    data, size = apply_size(data, size)
    source = copy.deepcopy(data)
    if size is not None:
        source["size"] = size
    base_dir = Path(base_dir) if base_dir is not None else Path.cwd()

    if "base" not in data:
        raise ConfigError("the spec has no 'base': expected a config file path (relative to the spec's "
                          "directory) or an inline config mapping")
    base, base_path = _read_base(data["base"], base_dir)
    try:
        parse_config(base)
    except ConfigError as err:
        raise ConfigError(f"base config {base_path or '(inline)'}: {err}") from None

    seeds = _read_seeds(data.get("seeds"))
    smoke_test = data.get("smoke_test", False)
    if not isinstance(smoke_test, bool):
        raise ConfigError(f"smoke_test = {_show(smoke_test)} is not allowed: expected true or false")
    expect = _read_expect(data.get("expect"))
    over_training = data.get("over_training", False)
    if not isinstance(over_training, bool):
        raise ConfigError(f"over_training = {_show(over_training)} is not allowed: expected true or false")
    against = data.get("against")
    if against is not None and (not isinstance(against, str) or not against):
        raise ConfigError(f"against = {_show(against)} is not allowed: expected the name of a non-learning "
                          "team (e.g. restrained)")
    combine = data.get("combine", "product")
    if combine not in _COMBINE:
        raise ConfigError(f"combine = {_show(combine)} is not allowed: expected one of "
                          f"{', '.join(repr(c) for c in _COMBINE)}")
    axes = _read_axes(data.get("axes"), combine, base)

    named = data.get("arms")
    if named is not None and (not isinstance(named, dict) or not named):
        raise ConfigError(f"arms = {_show(named)} is not allowed: expected a non-empty mapping of arm names "
                          "to mappings of dotted config keys to values")
    named_arms = {_check_arm_name(n): _overrides(o, f"arms.{n}", base) for n, o in (named or {}).items()}
    shared = _overrides(data.get("set"), "set", base)

    for name, overrides in named_arms.items():
        both = [k for k in overrides if k in axes]
        if both:
            raise ConfigError(f"arms.{name} and axes both set {both[0]}; the axis would override the arm "
                              "(set it in one place)")

    # ---- arms, in spec order
    combos = _axes_arms(axes, combine)
    arms: list[Arm] = []
    origin: dict[str, dict[str, str]] = {}  # arm -> dotted key -> where it was set
    if named_arms:
        for arm_name, arm_overrides in named_arms.items():
            for combo_name, combo in combos:
                name = f"{arm_name}/{combo_name}" if combo_name else arm_name
                arms.append(Arm(name, {**copy.deepcopy(arm_overrides), **combo}))
                origin[name] = {**dict.fromkeys(arm_overrides, f"arms.{arm_name}"),
                                **dict.fromkeys(combo, "axes")}
    elif axes:
        for combo_name, combo in combos:
            arms.append(Arm(combo_name, combo))
            origin[combo_name] = dict.fromkeys(combo, "axes")
    else:
        arms.append(Arm(_ONLY_ARM, {}))
        origin[_ONLY_ARM] = {}
    names = [a.name for a in arms]
    twice = [n for n in dict.fromkeys(names) if names.count(n) > 1]
    if twice:
        raise ConfigError(f"two arms are named {twice[0]!r}; make the values of the axes differ in how they "
                          "are written")

    # ---- baseline
    baseline = data.get("baseline")
    if baseline is None:
        if len(arms) > 1:
            raise ConfigError(f"the spec has {len(arms)} arms but no 'baseline': name the arm to compare the "
                              f"others with (arms: {', '.join(names)})")
        baseline = names[0]
    elif baseline not in names:
        close = nearest(str(baseline), names)
        hint = f"did you mean {_did_you_mean(close)}?" if close else f"arms: {', '.join(names)}"
        raise ConfigError(f"baseline {_show(baseline)} is not an arm; {hint}")

    # ---- runs, arm-major then seed; every config validated
    runs: list[RunSpec] = []
    first_arm_of: dict[str, str] = {}
    sources: dict[str, dict[str, str]] = {}
    notices: list[str] = []
    for arm in arms:
        kept: dict[str, Any] = {}
        for seed in seeds:
            where_of = {**dict.fromkeys(shared, "set"), **origin[arm.name]}
            try:
                data, kept = _build(base, [shared, arm.overrides, {_SEED_KEY: seed}])
                cfg = parse_config(data)
            except ConfigError as err:
                key = _mentioned(str(err), list(where_of))
                hint = f" (from {where_of[key]})" if key else ""
                raise ConfigError(f"arm {arm.name!r}: {err}{hint}") from None
            run_id = config_hash(cfg)
            if run_id in first_arm_of:
                raise ConfigError(f"arms {first_arm_of[run_id]!r} and {arm.name!r} resolve to the same "
                                  f"config (run id {run_id}); make them differ or drop one")
            first_arm_of[run_id] = arm.name
            overrides = {**copy.deepcopy(shared), **copy.deepcopy(arm.overrides), _SEED_KEY: seed}
            runs.append(RunSpec(run_id, arm.name, seed, overrides, cfg))
        kind = {**shared, **arm.overrides}.get("learner.kind", _kind_of(base))
        kept = {k: v for k, v in kept.items() if v != _kept_default(kind, k)}  # the rest is the default
        sources[arm.name] = _sources(base, shared, origin[arm.name], kept, kind != _kind_of(base))
        for key, value in kept.items():
            notices.append(f"arm {arm.name!r}: {key} = {_show(value)} is kept from the base config "
                           f"(learner.kind {_kind_of(base)}), not the {kind} default; set it in the arm to "
                           "choose")

    if against is not None:
        if len(arms) > 1:
            raise ConfigError(f"against = {_show(against)} compares one arm with a non-learning team; this "
                              f"spec has {len(arms)} arms (compare arms with 'baseline' instead)")
        from marl_core.baselines import measured_teams, renamed_team

        if renamed_team("against", against):
            raise ConfigError(renamed_team("against", against))
        measured = measured_teams(runs[0].config)
        if against not in measured:
            raise ConfigError(f"against = {_show(against)} is not a team these runs measure; expected one of "
                              f"{', '.join(measured)} (train.baselines)")

    digest = _canonical({"arms": [[a.name, a.overrides] for a in arms], "baseline": baseline,
                         "runs": [[r.arm, r.seed, r.run_id] for r in runs]})
    spec_hash = hashlib.sha256(digest.encode("utf-8")).hexdigest()[:12]
    return Sweep(arms=arms, runs=runs, baseline=baseline, seeds=seeds, axes=axes, spec_hash=spec_hash,
                 source=source, combine=combine, shared=shared, base=base, base_path=base_path,
                 smoke_test=smoke_test, expect=expect, against=against, sources=sources, notices=notices,
                 over_training=over_training, size=size)


def _read_expect(value: Any) -> dict[str, str]:
    if value is None:
        return {}
    if not isinstance(value, dict) or not value:
        raise ConfigError(f"expect = {_show(value)} is not allowed: expected a mapping of measure -> one of "
                          f"{', '.join(EXPECT_DIRECTIONS)}")
    for measure, direction in value.items():
        if measure not in EXPECT_MEASURES:
            close = nearest(str(measure), EXPECT_MEASURES)
            hint = f"did you mean {_did_you_mean(close)}?" if close else "expected one of " + ", ".join(
                EXPECT_MEASURES)
            raise ConfigError(f"expect.{measure} is not a measure the report knows; {hint}")
        if direction not in EXPECT_DIRECTIONS:
            raise ConfigError(f"expect.{measure} = {_show(direction)} is not allowed: expected one of "
                              f"{', '.join(EXPECT_DIRECTIONS)}")
    return dict(value)


def load_spec(path: str | os.PathLike, size: str | None = None) -> Sweep:
    """Read a YAML sweep spec and expand it (a relative ``base`` is read from the spec's directory) at
    ``size`` (see :func:`apply_size`).

    Raises:
        ConfigError: a missing or unreadable file, invalid YAML, or any problem of :func:`parse_spec`
            (the message starts with the spec's path).
    """
    data, path = read_yaml_mapping(path, "sweep spec", "a mapping of spec keys")
    try:
        return parse_spec(data, path.parent, size)
    except ConfigError as err:
        raise ConfigError(f"{path}: {err}") from None


def sweep_table(sweep: Sweep) -> list[dict[str, Any]]:
    """One row per run for display: ``arm``, ``seed``, ``run_id`` and ``overrides`` (the arm's own
    overrides; ``set`` is common to every run and the seed has its own column)."""
    by_name = {a.name: a for a in sweep.arms}
    return [{"arm": r.arm, "seed": r.seed, "run_id": r.run_id,
             "overrides": copy.deepcopy(by_name[r.arm].overrides)} for r in sweep.runs]
