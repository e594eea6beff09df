"""Sweep specs: deterministic expansion into arms and runs, stable run ids, and one-line errors that name
the key, where it appears and the nearest valid keys."""

import copy
import json
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from marl_core.ablation.spec import Arm, RunSpec, Sweep, load_spec, parse_spec, sweep_table
from marl_core.config import config_hash, load_config, parse_config
from marl_core.errors import ConfigError

REPO = Path(__file__).resolve().parents[2]
CONFIGS = REPO / "configs"
HARVEST_IDQN = CONFIGS / "harvest_idqn.yaml"

# A tiny inline base: harvest on the tiny map, so parsing is quick.
BASE = {"env": {"name": "harvest_v0", "params": {"num_agents": 2}}, "learner": {"kind": "idqn"}}


def _spec(**keys):
    return {"base": BASE, "seeds": [0], **keys}


def _write(path: Path, text: str) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(textwrap.dedent(text))
    return path


# ------------------------------------------------------------------------------------------ expansion

def test_product_of_two_axes_over_three_seeds():
    sweep = parse_spec(_spec(seeds=[0, 1, 2], axes={"learner.kind": ["idqn", "maddpg"],
                                                    "learner.share_parameters": [False, True]},
                             baseline="kind=idqn,share_parameters=false"))
    assert isinstance(sweep, Sweep)
    # product in row-major order: the last axis varies fastest
    assert sweep.arm_names == ["kind=idqn,share_parameters=false", "kind=idqn,share_parameters=true",
                               "kind=maddpg,share_parameters=false", "kind=maddpg,share_parameters=true"]
    assert len(sweep.runs) == 12
    assert [(r.arm, r.seed) for r in sweep.runs] == [(a, s) for a in sweep.arm_names for s in (0, 1, 2)]
    for run in sweep.runs:
        arm = sweep.arm(run.arm)
        assert run.config.learner.kind == arm.overrides["learner.kind"]
        assert run.config.learner.share_parameters == arm.overrides["learner.share_parameters"]
        assert run.config.train.seed == run.seed
        assert run.overrides == {**arm.overrides, "train.seed": run.seed}
        assert run.run_id == config_hash(run.config)
    assert sweep.arm("kind=maddpg,share_parameters=true") == Arm(
        "kind=maddpg,share_parameters=true", {"learner.kind": "maddpg", "learner.share_parameters": True})
    assert [len(sweep.runs_of(a)) for a in sweep.arm_names] == [3, 3, 3, 3]


def test_zip_pairs_the_axes():
    sweep = parse_spec(_spec(axes={"learner.lr": [1e-3, 5e-4], "learner.batch_size": [32, 64]},
                             combine="zip", baseline="lr=0.001,batch_size=32"))
    assert sweep.arm_names == ["lr=0.001,batch_size=32", "lr=0.0005,batch_size=64"]
    assert [(r.config.learner.lr, r.config.learner.batch_size) for r in sweep.runs] == [(1e-3, 32), (5e-4, 64)]


def test_zip_needs_equal_lengths():
    with pytest.raises(ConfigError, match=r"zip.*learner\.lr has 2, learner\.batch_size has 1"):
        parse_spec(_spec(axes={"learner.lr": [1e-3, 5e-4], "learner.batch_size": [32]}, combine="zip"))


def test_named_arms_in_the_order_written():
    sweep = parse_spec(_spec(seeds=[3, 1], arms={"wide_view": {"env.params.view_radius": 9},
                                                 "narrow_view": {"env.params.view_radius": 3},
                                                 "control": None},
                             baseline="control"))
    assert sweep.arm_names == ["wide_view", "narrow_view", "control"]
    assert [(r.arm, r.seed) for r in sweep.runs] == [("wide_view", 3), ("wide_view", 1), ("narrow_view", 3),
                                                     ("narrow_view", 1), ("control", 3), ("control", 1)]
    radius = {r.arm: r.config.env.params["view_radius"] for r in sweep.runs}
    assert radius == {"wide_view": 9, "narrow_view": 3, "control": 7}  # harvest's default radius is 7
    assert sweep.baseline == "control"


def test_named_arms_on_top_of_axes():
    sweep = parse_spec(_spec(arms={"cheap_tag": {"env.params.tag_cost": 0.0},
                                   "dear_tag": {"env.params.tag_cost": 1.0}},
                             axes={"learner.share_parameters": [False, True]},
                             baseline="cheap_tag/share_parameters=false"))
    assert sweep.arm_names == ["cheap_tag/share_parameters=false", "cheap_tag/share_parameters=true",
                               "dear_tag/share_parameters=false", "dear_tag/share_parameters=true"]
    assert sweep.arm("dear_tag/share_parameters=true").overrides == {
        "env.params.tag_cost": 1.0, "learner.share_parameters": True}
    run = sweep.runs_of("dear_tag/share_parameters=true")[0]
    assert run.config.env.params["tag_cost"] == 1.0 and run.config.learner.share_parameters is True


def test_set_applies_to_every_run_and_arms_override_it():
    sweep = parse_spec(_spec(seeds=[0, 1], set={"train.total_steps": 5000, "learner.lr": 1e-3},
                             arms={"slow": {"learner.lr": 1e-4}, "default": {}}, baseline="default"))
    assert all(r.config.train.total_steps == 5000 for r in sweep.runs)
    assert {r.arm: r.config.learner.lr for r in sweep.runs} == {"slow": 1e-4, "default": 1e-3}
    assert sweep.runs[0].overrides == {"train.total_steps": 5000, "learner.lr": 1e-4, "train.seed": 0}
    assert sweep.shared == {"train.total_steps": 5000, "learner.lr": 1e-3}


def test_seeds_set_train_seed_over_the_base():
    sweep = parse_spec({"base": str(HARVEST_IDQN), "seeds": [4, 9]})  # the file says train.seed: 0
    assert [(r.seed, r.config.train.seed) for r in sweep.runs] == [(4, 4), (9, 9)]
    assert sweep.arm_names == ["base"] and sweep.baseline == "base"


def test_lists_and_null_are_written_as_in_yaml_in_names():
    sweep = parse_spec(_spec(axes={"env.params.regrow_table": [[0.0, 0.1], [0.0, 0.2]],
                                   "learner.grad_clip": [None]},
                             baseline="regrow_table=[0.0,0.1],grad_clip=null"))
    assert sweep.arm_names == ["regrow_table=[0.0,0.1],grad_clip=null", "regrow_table=[0.0,0.2],grad_clip=null"]


def test_an_ambiguous_short_name_uses_the_whole_key():
    base = {"env": {"name": "some_package.games:parallel_env"}}  # an external env: any params; never imported
    sweep = parse_spec({"base": base, "seeds": [0],
                        "axes": {"env.params.lr": [1], "learner.lr": [1e-3], "train.total_steps": [10]}})
    assert sweep.arm_names == ["env.params.lr=1,learner.lr=0.001,total_steps=10"]


def test_sweep_table_lists_every_run():
    sweep = parse_spec(_spec(seeds=[0, 1], axes={"learner.dueling": [False, True]}, baseline="dueling=false"))
    table = sweep_table(sweep)
    assert [(row["arm"], row["seed"]) for row in table] == [("dueling=false", 0), ("dueling=false", 1),
                                                            ("dueling=true", 0), ("dueling=true", 1)]
    assert [row["run_id"] for row in table] == [r.run_id for r in sweep.runs]
    assert table[2]["overrides"] == {"learner.dueling": True}


# ------------------------------------------------------------------------------------------ baseline

def test_more_than_one_arm_needs_a_baseline():
    with pytest.raises(ConfigError, match=r"2 arms but no 'baseline'.*arms: dueling=false, dueling=true"):
        parse_spec(_spec(axes={"learner.dueling": [False, True]}))


def test_an_unknown_baseline_names_the_nearest_arm():
    with pytest.raises(ConfigError, match=r"baseline 'dueling=flase' is not an arm; did you mean 'dueling=false'"):
        parse_spec(_spec(axes={"learner.dueling": [False, True]}, baseline="dueling=flase"))


# ---------------------------------------------------------------------------------------- stable ids

_SPEC_TEXT = """\
base: {base}
seeds: [0, 1]
axes:
  learner.dueling: [false, true]
baseline: dueling=false
"""


def test_ids_are_stable_across_parses_and_processes(tmp_path):
    path = _write(tmp_path / "spec.yaml", _SPEC_TEXT.format(base=HARVEST_IDQN))
    first, second = load_spec(path), load_spec(path)
    ids = [r.run_id for r in first.runs]
    assert ids == [r.run_id for r in second.runs]
    assert first.spec_hash == second.spec_hash
    assert len(set(ids)) == len(ids)
    code = ("import json, sys; from marl_core.ablation.spec import load_spec; "
            "s = load_spec(sys.argv[1]); print(json.dumps([[r.run_id for r in s.runs], s.spec_hash]))")
    out = subprocess.run([sys.executable, "-c", code, str(path)], cwd=REPO, capture_output=True, text=True,
                         check=True, timeout=60)
    assert json.loads(out.stdout) == [ids, first.spec_hash]


def test_the_id_depends_on_the_seed_and_the_config_not_the_arm_name():
    a = parse_spec(_spec(seeds=[0, 1], arms={"x": {"learner.dueling": True}}))
    b = parse_spec(_spec(seeds=[1], arms={"renamed": {"learner.dueling": True}}))
    assert a.runs[0].run_id != a.runs[1].run_id
    assert b.runs[0].run_id == a.runs[1].run_id  # same resolved config: a rerun finds it


def test_the_spec_hash_follows_the_base_file(tmp_path):
    base = _write(tmp_path / "base.yaml", "learner: {kind: idqn}\n")
    spec = {"base": "base.yaml", "seeds": [0]}
    before = parse_spec(spec, tmp_path)
    base.write_text("learner: {kind: idqn, lr: 0.01}\n")
    after = parse_spec(spec, tmp_path)
    assert before.runs[0].run_id != after.runs[0].run_id
    assert before.spec_hash != after.spec_hash


def test_two_arms_with_the_same_resolved_config_are_rejected():
    with pytest.raises(ConfigError, match=r"arms 'a' and 'b' resolve to the same config"):
        parse_spec(_spec(arms={"a": {"learner.lr": 0.001}, "b": {"learner.lr": 1e-3}}, baseline="a"))


# ------------------------------------------------------------------------------------------ the base

def test_a_file_base_is_read_relative_to_the_spec(tmp_path):
    _write(tmp_path / "configs" / "base.yaml", """\
        env:
          name: harvest_v0
          params: {num_agents: 2}
        learner: {kind: idqn}
        """)
    path = _write(tmp_path / "sweeps" / "spec.yaml", "base: ../configs/base.yaml\nseeds: [0]\n")
    sweep = load_spec(path)
    assert Path(sweep.base_path) == tmp_path / "sweeps" / ".." / "configs" / "base.yaml"
    inline = parse_spec({"base": BASE, "seeds": [0]})
    assert inline.base_path is None
    assert [r.run_id for r in sweep.runs] == [r.run_id for r in inline.runs]  # same config, same id
    assert sweep.source == {"base": "../configs/base.yaml", "seeds": [0]}


def test_a_missing_base_file_is_named(tmp_path):
    with pytest.raises(ConfigError, match=r"base config '.*nothere\.yaml' not found"):
        parse_spec({"base": "nothere.yaml", "seeds": [0]}, tmp_path)


def test_a_bad_base_is_rejected_before_the_arms():
    with pytest.raises(ConfigError, match=r"base config \(inline\): learner\.lr = 0 is not allowed"):
        parse_spec({"base": {"learner": {"lr": 0}}, "seeds": [0]})


def test_load_spec_reports_yaml_errors_with_the_line(tmp_path):
    path = _write(tmp_path / "spec.yaml", "base: {}\nseeds: [0\n")
    with pytest.raises(ConfigError, match=r"invalid YAML in sweep spec '.*spec\.yaml' at line 3"):
        load_spec(path)


def test_load_spec_prefixes_errors_with_the_path(tmp_path):
    path = _write(tmp_path / "spec.yaml", "base: {}\nseeds: [0]\naxis: {}\n")
    with pytest.raises(ConfigError, match=r"spec\.yaml: unknown spec key 'axis'; did you mean 'axes'"):
        load_spec(path)


def test_load_spec_needs_a_file(tmp_path):
    with pytest.raises(ConfigError, match=r"sweep spec '.*none\.yaml' not found"):
        load_spec(tmp_path / "none.yaml")


# -------------------------------------------------------------------------------------- key paths

@pytest.mark.parametrize("spec, where", [
    (_spec(axes={"learner.gama": [0.9, 0.99]}), "axes"),
    (_spec(arms={"wide_view": {"learner.gama": 0.9}}), "arms.wide_view"),
    (_spec(set={"learner.gama": 0.9}), "set"),
], ids=["axes", "arms", "set"])
def test_an_unknown_key_names_where_it_is_and_the_nearest_keys(spec, where):
    with pytest.raises(ConfigError) as info:
        parse_spec(spec)
    assert str(info.value) == f"{where}: unknown key 'learner.gama'; did you mean 'learner.gamma'?"


@pytest.mark.parametrize(("old", "new"), [("learner.buffer_size", "learner.replay_size"),
                                          ("learner.learning_starts", "learner.warmup_steps"),
                                          ("learner.priority_beta0", "learner.priority_beta_start")])
def test_a_renamed_key_names_its_new_name(old, new):
    # marl_core/config.py RENAMED: keys an earlier version took are refused with the name that replaced them
    with pytest.raises(ConfigError) as info:
        parse_spec(_spec(axes={old: [1, 2]}))
    assert str(info.value) == f"axes: key '{old}' was renamed: use '{new}'"


def test_an_unknown_section_is_compared_with_every_key():
    with pytest.raises(ConfigError, match=r"set: unknown key 'lerner\.lr'; did you mean 'learner\.lr'"):
        parse_spec(_spec(set={"lerner.lr": 1e-3}))


def test_an_unknown_game_parameter_names_the_arm_and_the_table_name():
    with pytest.raises(ConfigError) as info:
        parse_spec(_spec(axes={"env.params.regrow_tabel": [[0.0, 0.1]]}))
    message = str(info.value)
    assert message.startswith("arm 'regrow_tabel=[0.0,0.1]': unknown key 'env.params.regrow_tabel'")
    assert "did you mean 'env.params.regrow_table'" in message
    assert message.endswith("(from axes)")


@pytest.mark.parametrize("key, message", [
    ("learner", r"set: 'learner' is a whole config section; give dotted keys such as 'learner\.<name>'"),
    ("train.seed", r"set: train\.seed is set from 'seeds'"),
    ("log.xyz", r"set: unknown key 'log\.xyz' \(valid keys: log\.tensorboard, "),
    ("nothing.here", r"set: unknown key 'nothing\.here' \(a key starts with one of the sections"),
], ids=["section", "seed", "no-near-key", "no-section"])
def test_keys_a_spec_may_not_set(key, message):
    with pytest.raises(ConfigError, match=message):
        parse_spec(_spec(set={key: 1}))


def test_a_bad_value_names_the_arm_and_the_key():
    with pytest.raises(ConfigError) as info:
        parse_spec(_spec(arms={"ok": {}, "huge_lr": {"learner.lr": -1.0}}, baseline="ok"))
    assert str(info.value) == ("arm 'huge_lr': learner.lr = -1.0 is not allowed: expected a number > 0 "
                               "(from arms.huge_lr)")


def test_a_key_in_both_a_named_arm_and_an_axis_is_rejected():
    with pytest.raises(ConfigError, match=r"arms\.a and axes both set learner\.lr"):
        parse_spec(_spec(arms={"a": {"learner.lr": 1e-3}}, axes={"learner.lr": [1e-4, 1e-3]}))


# ---------------------------------------------------------------------------------- learner kinds

def test_switching_kind_takes_the_new_kinds_defaults_not_the_bases_values():
    # harvest_idqn.yaml sets the DQN's lr, n_step, train_every ...: settings chosen for idqn. The maddpg arm
    # takes maddpg's default for every learner key, even those both kinds have (lr, gamma, batch_size)
    sweep = parse_spec({"base": "harvest_idqn.yaml", "seeds": [0], "axes": {"learner.kind": ["idqn", "maddpg"]},
                        "baseline": "kind=idqn"}, CONFIGS)
    idqn, maddpg = (r.config for r in sweep.runs)
    base = load_config(HARVEST_IDQN)
    assert idqn.learner == base.learner
    assert maddpg.learner == parse_config({"learner": {"kind": "maddpg"}}).learner
    assert base.learner.train_every == 2 and maddpg.learner.train_every == 1  # maddpg's default, not idqn's
    assert sweep.notices == []  # share_parameters and torch_threads are the defaults: nothing to say
    assert sweep.sources["kind=maddpg"]["learner.kind"] == "axes"
    assert "learner.lr" not in sweep.sources["kind=maddpg"]  # absent: the kind's default
    assert sweep.sources["kind=idqn"]["learner.lr"] == "base"


def test_a_kept_base_key_across_a_kind_switch_is_said_in_one_line():
    base = {**BASE, "learner": {"kind": "idqn", "share_parameters": True, "lr": 1e-4}}
    sweep = parse_spec({"base": base, "seeds": [0], "arms": {"q": {}, "m": {"learner.kind": "maddpg"},
                                                             "p": {"learner.kind": "ppo",
                                                                   "learner.share_parameters": False}},
                        "baseline": "q"})
    q, m, p = (r.config.learner for r in sweep.runs)
    assert m.share_parameters is True and m.lr == 1e-3  # kept / maddpg's default
    assert p.share_parameters is False
    assert sweep.notices == ["arm 'm': learner.share_parameters = True is kept from the base config "
                             "(learner.kind idqn), not the maddpg default; set it in the arm to choose"]
    assert sweep.sources["m"]["learner.share_parameters"] == "inherited"
    assert sweep.sources["p"]["learner.share_parameters"] == "arms.p"


def test_switching_kind_back_drops_the_maddpg_keys():
    sweep = parse_spec({"base": "harvest_maddpg.yaml", "seeds": [0], "set": {"learner.kind": "idqn"}}, CONFIGS)
    assert sweep.runs[0].config.learner.kind == "idqn"


def test_an_explicit_key_of_the_wrong_kind_is_an_error():
    with pytest.raises(ConfigError) as info:
        parse_spec({"base": "harvest_idqn.yaml", "seeds": [0], "set": {"learner.double": False},
                    "axes": {"learner.kind": ["idqn", "maddpg"]}, "baseline": "kind=idqn"}, CONFIGS)
    assert str(info.value) == ("arm 'kind=maddpg': learner.double is an idqn key; learner.kind is 'maddpg' "
                               "(from set)")


# ---------------------------------------------------------------------------------- spec structure

@pytest.mark.parametrize("spec, message", [
    ([1, 2], r"a sweep spec must be a mapping"),
    ({"base": {}, "seeds": [0], "seed": [1]}, r"unknown spec key 'seed'; did you mean 'seeds'"),
    ({"seeds": [0]}, r"the spec has no 'base'"),
    ({"base": 3, "seeds": [0]}, r"base = 3 is not allowed"),
    ({"base": {}}, r"the spec has no 'seeds'"),
    ({"base": {}, "seeds": []}, r"seeds = \[\] is not allowed: expected a non-empty list"),
    ({"base": {}, "seeds": 3}, r"seeds = 3 is not allowed"),
    ({"base": {}, "seeds": [0, -1]}, r"seeds: -1 is not allowed"),
    ({"base": {}, "seeds": [0, True]}, r"seeds: True is not allowed"),
    ({"base": {}, "seeds": [1.5]}, r"seeds: 1\.5 is not allowed"),
    ({"base": {}, "seeds": [2, 0, 2]}, r"seeds: 2 listed more than once"),
    ({"base": {}, "seeds": [0], "combine": "cross"}, r"combine = 'cross' is not allowed: expected one of 'product', 'zip'"),
    ({"base": {}, "seeds": [0], "axes": [1]}, r"axes = \[1\] is not allowed"),
    ({"base": {}, "seeds": [0], "axes": {"learner.lr": []}}, r"axes\.learner\.lr = \[\] is not allowed"),
    ({"base": {}, "seeds": [0], "axes": {"learner.lr": 0.1}}, r"axes\.learner\.lr = 0\.1 is not allowed"),
    ({"base": {}, "seeds": [0], "axes": {"learner.lr": [0.1, 0.1]}}, r"axes\.learner\.lr: 0\.1 is listed more than once"),
    ({"base": {}, "seeds": [0], "arms": {}}, r"arms = \{\} is not allowed"),
    ({"base": {}, "seeds": [0], "arms": {"a/b": {}}}, r"arm name 'a/b' is not allowed: expected .*without '/'"),
    ({"base": {}, "seeds": [0], "arms": {" a": {}}}, r"arm name ' a' is not allowed"),
    ({"base": {}, "seeds": [0], "arms": {"a": [1]}}, r"arms\.a = \[1\] is not allowed: expected a mapping"),
    ({"base": {}, "seeds": [0], "set": {"learner.lr": 1e-3, 3: 1}}, r"set: key 3 is not allowed"),
])
def test_a_malformed_spec_is_rejected(spec, message):
    with pytest.raises(ConfigError, match=message):
        parse_spec(spec)


def test_arm_names_must_be_unique():
    with pytest.raises(ConfigError, match=r"two arms are named 'layout=a_b'"):
        parse_spec(_spec(axes={"env.params.layout": ["a/b", "a_b"]}))


def test_run_spec_fields():
    run = parse_spec(_spec(seeds=[5])).runs[0]
    assert isinstance(run, RunSpec)
    assert (run.arm, run.seed, run.overrides) == ("base", 5, {"train.seed": 5})
    assert "config" not in repr(run)


def test_a_key_through_a_value_that_is_not_a_mapping_names_the_arm():
    with pytest.raises(ConfigError) as info:
        parse_spec(_spec(set={"env.params": 3}, arms={"a": {"env.params.layout": "harvest_tiny"}}))
    assert str(info.value) == ("arm 'a': cannot set 'env.params.layout' because env.params = 3 is not a mapping "
                               "(from arms.a)")


# ------------------------------------------------------------------------------------ smoke_test
def test_smoke_test_flag_is_read_and_kept_out_of_the_hash():
    plain = parse_spec({"base": copy.deepcopy(BASE), "seeds": [0]})
    smoke = parse_spec({"base": copy.deepcopy(BASE), "seeds": [0], "smoke_test": True})
    assert (plain.smoke_test, smoke.smoke_test) == (False, True)  # default false (spec.py docstring)
    assert smoke.spec_hash == plain.spec_hash  # Sweep docstring: not part of spec_hash
    assert smoke.source["smoke_test"] is True  # the ledger records the source; the report reads it there


def test_smoke_test_must_be_true_or_false():
    with pytest.raises(ConfigError, match=r"^smoke_test = 'yes' is not allowed: expected true or false$"):
        parse_spec({"base": copy.deepcopy(BASE), "seeds": [0], "smoke_test": "yes"})


def test_quick_spec_is_a_smoke_test():
    assert load_spec(Path(__file__).resolve().parents[2] / "configs" / "ablations" / "quick.yaml").smoke_test


# ---------------------------------------------------------------------------------- sizes
SIZED = {"base": BASE, "seeds": [0, 1, 2, 3, 4], "set": {"train.total_steps": 1000, "train.eval_every": 500},
         "sizes": {"quick": {"seeds": [0, 1], "set": {"train.total_steps": 200}}, "full": {},
                   "published": {"set": {"train.total_steps": 10_000_000}}}}


def test_a_spec_runs_at_each_of_its_sizes():
    full = parse_spec(copy.deepcopy(SIZED))  # full is the default
    quick = parse_spec(copy.deepcopy(SIZED), size="quick")
    published = parse_spec(copy.deepcopy(SIZED), size="published")
    assert (full.size, quick.size, published.size) == ("full", "quick", "published")
    assert [r.seed for r in quick.runs] == [0, 1] and len(full.runs) == len(published.runs) == 5
    steps = {s.size: s.runs[0].config.train.total_steps for s in (full, quick, published)}
    assert steps == {"full": 1000, "quick": 200, "published": 10_000_000}
    assert quick.runs[0].config.train.eval_every == 500  # the spec's set still applies; the size's keys win
    assert len({full.spec_hash, quick.spec_hash, published.spec_hash}) == 3  # three sweeps
    assert quick.source["size"] == "quick" and "sizes" not in quick.source


@pytest.mark.parametrize("spec, size, message", [
    ({"base": BASE, "seeds": [0]}, "quick", r"^--size quick: this spec has no 'sizes' \(it runs at one size\)"),
    ({**SIZED, "sizes": {"tiny": {}}}, None, r"^sizes\.tiny is not a size: expected quick, full, published$"),
    ({**SIZED, "sizes": {"quick": {"steps": 3}}}, "quick", r"^sizes\.quick\.steps is not allowed: a size sets only "
                                                          r"seeds and set$"),
    ({**SIZED, "sizes": {"quick": {}}}, None, r"^--size full: this spec defines the sizes quick$"),
    (SIZED, "huge", r"^--size = 'huge' is not allowed: expected one of quick, full, published$"),
])
def test_bad_sizes_are_one_line(spec, size, message):
    with pytest.raises(ConfigError, match=message):
        parse_spec(copy.deepcopy(spec), size=size)
