"""The run config: defaults round-trip, overrides, and one-line errors that name the dotted key."""

import os
import subprocess
import sys
import textwrap

import pytest
import yaml

import envs
import marl_core.config as config_module
from envs.params import resolve
from marl_core.config import (
    IDQNConfig,
    MADDPGConfig,
    RunConfig,
    apply_overrides,
    config_hash,
    config_to_dict,
    dump_config,
    load_config,
    load_stored_config,
    parse_config,
    schema_table,
    valid_keys,
)
from marl_core.errors import ConfigError


def _write(tmp_path, text, name="run.yaml"):
    path = tmp_path / name
    path.write_text(text)
    return path


# ------------------------------------------------------------------------------------------ defaults

@pytest.mark.parametrize("data", [
    {},
    {"learner": {"kind": "maddpg"}},
    {"env": {"name": "cleanup_v0", "params": {"num_agents": 3}}, "learner": {"share_parameters": True}},
    {"env": {"name": "matrix_v0", "params": {"game": "stag_hunt"}}},
    {"env": {"name": "gymnasium:CartPole-v1"}},
    {"env": {"name": "mpe2.simple_spread_v3:parallel_env", "params": {"N": 3, "continuous_actions": False}}},
], ids=["idqn", "maddpg", "cleanup", "matrix", "gymnasium", "pettingzoo"])
def test_dump_then_load_gives_an_equal_config(tmp_path, data):
    cfg = parse_config(data)
    path = tmp_path / "run" / "config.yaml"
    dump_config(cfg, path)
    again = load_config(path)
    assert again == cfg
    assert config_to_dict(again) == config_to_dict(cfg)
    assert config_hash(again) == config_hash(cfg)
    assert [p.name for p in path.parent.iterdir()] == ["config.yaml"]  # no temp file left behind


def test_dump_replaces_an_existing_file(tmp_path):
    path = tmp_path / "config.yaml"
    dump_config(parse_config({}), path)
    dump_config(parse_config({}, ["train.seed=7"]), path)
    assert load_config(path).train.seed == 7


def test_resolved_dict_has_every_key_and_the_game_params():
    data = config_to_dict(parse_config({"env": {"params": {"num_agents": 3}}}))
    flat = {f"{section}.{key}" for section, body in data.items() if body is not None for key in body}
    flat |= {section for section, body in data.items() if body is None}  # seats: null unless given
    idqn_keys = {row["key"] for row in schema_table() if row["kind"] in (None, "idqn")}
    assert flat == {k for k in idqn_keys if not k.startswith("reward.inequity_aversion.")}  # null by default
    expected = resolve("harvest_v0", envs.game_module("harvest_v0").PARAMS, {"num_agents": 3})
    assert data["env"]["params"] == expected
    yaml.safe_dump(data)  # plain data only


def test_empty_config_and_empty_sections_mean_defaults(tmp_path):
    assert parse_config({}) == RunConfig()
    assert load_config(_write(tmp_path, "")) == RunConfig()
    assert load_config(_write(tmp_path, "env:\n  params:\ntrain:\nlearner:\n")) == RunConfig()


def test_each_learner_kind_has_its_own_defaults():
    idqn, maddpg = parse_config({}).learner, parse_config({"learner": {"kind": "maddpg"}}).learner
    assert isinstance(idqn, IDQNConfig) and isinstance(maddpg, MADDPGConfig)
    assert idqn.gamma == 0.99  # DQN, Mnih et al. 2015 (docs/sources.md, "DQN")
    assert maddpg.gamma == 0.95  # MADDPG, Lowe et al. 2017, from memory (docs/sources.md, "MADDPG")
    assert maddpg.tau == 0.01  # MADDPG, Lowe et al. 2017, from memory (docs/sources.md, "MADDPG")
    # Schaul et al. 2016, proportional variant, from memory (docs/sources.md, "Prioritized replay")
    assert (idqn.priority_alpha, idqn.priority_beta_start) == (0.6, 0.4)
    assert (idqn.lr, idqn.batch_size) == (5e-4, 64)  # our choice (no source)
    assert (maddpg.lr, maddpg.batch_size) == (1e-3, 256)  # our choice (no source)
    assert idqn.eval_eps == 0.0  # greedy evaluation, our choice (DQN used 0.05 on Atari)


def test_docstring_example_is_the_default_config():
    doc = config_module.__doc__
    block = doc.split("::\n\n", 1)[1].split("\n\n", 1)[0]
    assert parse_config(yaml.safe_load(textwrap.dedent(block))) == RunConfig()


# ---------------------------------------------------------------------------------------------- hash

def test_config_hash_is_stable_and_follows_the_values():
    a = parse_config({"train": {"seed": 1}, "env": {"num_envs": 4}})
    b = parse_config({"env": {"num_envs": 4}, "train": {"seed": 1}})  # key order does not matter
    assert config_hash(a) == config_hash(b)
    assert len(config_hash(a)) == 12
    assert config_hash(parse_config({"env": {"num_envs": 4}, "train": {"seed": 2}})) != config_hash(a)
    assert config_hash(parse_config({}, ["learner.lr=1e-3"])) != config_hash(parse_config({}))
    # an explicit default is the same resolved config as a missing key
    assert config_hash(parse_config({"env": {"params": {"num_agents": 5}}})) == config_hash(RunConfig())


def test_config_hash_is_the_same_in_another_process():
    code = "from marl_core.config import RunConfig, config_hash; print(config_hash(RunConfig()))"
    env = {**os.environ, "PYTHONHASHSEED": "12345"}
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, env=env)
    assert out.stdout.strip() == config_hash(RunConfig())


# ----------------------------------------------------------------------------------------- overrides

@pytest.mark.parametrize("override, get, expected", [
    ("learner.lr=1e-3", lambda c: c.learner.lr, 1e-3),
    ("learner.gamma=0.9", lambda c: c.learner.gamma, 0.9),
    ("train.total_steps=1e6", lambda c: c.train.total_steps, 1_000_000),
    ("learner.double=false", lambda c: c.learner.double, False),
    ("learner.grad_clip=null", lambda c: c.learner.grad_clip, None),
    ("learner.conv_channels=[8, 8, 16]", lambda c: c.learner.conv_channels, [8, 8, 16]),
    ("env.params.num_agents=3", lambda c: c.env.params["num_agents"], 3),
    ("env.params.regrow_table=[0,0.1]", lambda c: c.env.params["regrow_table"], [0.0, 0.1]),
    ("env.name=cleanup_v0", lambda c: c.env.params["layout"], "cleanup_small"),
    ("env.params={num_agents: 2}", lambda c: c.env.params["num_agents"], 2),
], ids=["float", "plain-float", "int-from-1e6", "bool", "null", "list", "env-param", "env-param-list",
        "env-name", "mapping"])
def test_override_sets_a_value(override, get, expected):
    assert get(parse_config({}, [override])) == expected


def test_overrides_apply_in_order_and_leave_the_input_alone():
    data = {"learner": {"lr": 0.1}, "env": {"params": {"num_agents": 4}}}
    out = apply_overrides(data, ["learner.kind=maddpg", "learner.tau=0.05", "learner.lr=0.2",
                                 "learner.lr=0.3", "env.params.tag_cost=0.5"])
    assert data == {"learner": {"lr": 0.1}, "env": {"params": {"num_agents": 4}}}
    assert out == {"learner": {"lr": 0.3, "kind": "maddpg", "tau": 0.05},
                   "env": {"params": {"num_agents": 4, "tag_cost": 0.5}}}
    cfg = parse_config(data, ["learner.kind=maddpg", "learner.tau=0.05"])
    assert (cfg.learner.kind, cfg.learner.tau, cfg.learner.lr) == ("maddpg", 0.05, 0.1)


def test_load_config_applies_overrides(tmp_path):
    path = _write(tmp_path, "learner:\n  lr: 0.1\n")
    assert load_config(path, ["learner.lr=0.2"]).learner.lr == 0.2


def test_any_param_name_passes_for_an_external_env():
    cfg = parse_config({"env": {"name": "no_such_package.envs:make"}}, ["env.params.anything.deep=1"])
    assert cfg.env.params == {"anything": {"deep": 1}}  # not imported, not checked


def test_yaml_reads_1e_minus_3_as_a_number(tmp_path):
    cfg = load_config(_write(tmp_path, "learner:\n  lr: 1e-3\n  priority_eps: 2E-6\nenv:\n"
                                       "  params:\n    tag_cost: 1.5e2\n"))
    assert (cfg.learner.lr, cfg.learner.priority_eps, cfg.env.params["tag_cost"]) == (1e-3, 2e-6, 150.0)


def test_matrix_payoffs_null_round_trips(tmp_path):
    cfg = parse_config({"env": {"name": "matrix_v0"}})
    assert cfg.env.params["payoffs"] is None
    dump_config(cfg, tmp_path / "c.yaml")
    assert load_config(tmp_path / "c.yaml") == cfg


# -------------------------------------------------------------------------------------------- errors

@pytest.mark.parametrize("data, overrides, message", [
    ({"learner": {"gama": 0.9}}, [], r"^unknown key 'learner\.gama'; did you mean 'learner\.gamma'\?$"),
    ({"lerner": {}}, [], r"^unknown key 'lerner'; did you mean 'learner'\?$"),
    ({"learner": {"buffer_size": 10}}, [], r"^key 'learner\.buffer_size' was renamed: use 'learner\.replay_size'$"),
    ({"learner": {"learning_starts": 10}}, [],
     r"^key 'learner\.learning_starts' was renamed: use 'learner\.warmup_steps'$"),
    ({"learner": {"priority_beta0": 0.4}}, [],
     r"^key 'learner\.priority_beta0' was renamed: use 'learner\.priority_beta_start'$"),
    ({}, ["learner.priority_beta0=0.4"],
     r"^--set learner\.priority_beta0=0\.4: key 'learner\.priority_beta0' was renamed: use "
     r"'learner\.priority_beta_start'$"),
    ({"train": {"steps": 5}}, [], r"unknown key 'train\.steps'"),
    ({"learner": {"lr": "fast"}}, [], r"^learner\.lr = 'fast' is not allowed: expected a number > 0$"),
    ({"learner": {"double": 1}}, [], r"^learner\.double = 1 is not allowed: expected true or false$"),
    ({"train": {"seed": 1.5}}, [], r"^train\.seed = 1\.5 is not allowed: expected an integer >= 0$"),
    ({"learner": {"lr": -1.0}}, [], r"^learner\.lr = -1\.0 is not allowed: expected a number > 0$"),
    ({"learner": {"gamma": 1.5}}, [],
     r"^learner\.gamma = 1\.5 is not allowed: expected a number in \[0, 1\]$"),
    ({"learner": {"kind": "maddpg", "tau": 0}}, [], r"^learner\.tau = 0 is not allowed: .*in \(0, 1\]$"),
    ({"learner": {"conv_channels": [16, 0]}}, [], r"^learner\.conv_channels = \[16, 0\] is not allowed"),
    ({"env": {"num_envs": 0}}, [], r"^env\.num_envs = 0 is not allowed: expected an integer >= 1$"),
    ({"log": {"gif_every": -1}}, [], r"^log\.gif_every = -1 is not allowed"),
    ({"learner": {"eps_start": 0.1, "eps_end": 0.2}}, [],
     r"^learner\.eps_end = 0\.2 is not allowed: expected a number <= learner\.eps_start \(0\.1\)$"),
    ({"learner": {"kind": "a2c"}}, [],
     r"^learner\.kind = 'a2c' is not allowed: expected one of 'idqn', 'maddpg', 'lola', 'ppo'$"),
    ({"learner": {"kind": "maddpg", "double": False}}, [],
     r"^learner\.double is an idqn key; learner\.kind is 'maddpg'$"),
    ({"learner": {"tau": 0.1}}, [], r"^learner\.tau is a maddpg key; learner\.kind is 'idqn'$"),
    ({"learner": 3}, [], r"^learner = 3 is not allowed: expected a mapping"),
    ({"env": {"name": "harvest"}}, [], r"^env\.name = 'harvest' is not allowed: .*did you mean 'harvest_v0'"),
    ({"env": {"name": "pkg:mod:fn"}}, [], r"^env\.name = 'pkg:mod:fn' is not allowed: .*exactly one colon"),
    ({"env": {"name": "my-pkg:make"}}, [], r"^env\.name = 'my-pkg:make' is not allowed"),
    ({"env": {"name": "gymnasium:"}}, [], r"^env\.name = 'gymnasium:' is not allowed"),
    ({"env": {"name": "cleanup_v0", "params": {"river_speed": 0.1}}}, [],
     r"^unknown key 'env\.params\.river_speed' .*\(some cleanup_v0 parameters were renamed during v0; "
     r"`marl-core envs` lists the current ones\)$"),
    ({"env": {"params": {"regrow_tabel": [0.1]}}}, [],
     r"^unknown key 'env\.params\.regrow_tabel'; did you mean 'env\.params\.regrow_table'"),
    ({"env": {"params": {"num_agents": 0}}}, [],
     r"^env\.params\.num_agents = 0 is not allowed: expected an integer in \[1, 10\]$"),
    ({"env": {"params": {"regrow_table": [0.1, 2]}}}, [], r"^env\.params\.regrow_table = \[0\.1, 2\] is not"),
    ({"env": {"params": {"tag_width": 2}}}, [],
     r"^env\.params\.tag_width = 2 is not allowed: expected an odd"),
    ({"env": {"params": [1]}}, [], r"^env\.params = \[1\] is not allowed: expected a mapping"),
    ({}, ["learner.lr"], r"^--set 'learner\.lr' is not allowed: expected key\.path=value"),
    ({}, ["=1"], r"^--set '=1' is not allowed"),
    ({}, ["learner.lr=[1"], r"^--set 'learner\.lr=\[1': the value is not valid YAML"),
    ({}, ["learner.gama=0.9"], r"unknown key 'learner\.gama'; did you mean 'learner\.gamma'\?$"),
    ({}, ["trian.seed=1"], r"unknown key 'trian\.seed'; did you mean 'train\.seed'"),
    ({"env": {"params": {"num_agents": 3}}}, ["env.params.num_agents.x=1"],
     r"cannot set 'env\.params\.num_agents\.x' because env\.params\.num_agents = 3 is not a mapping$"),
    ({}, ["env.params.num_agents.x=1"], r"^env\.params\.num_agents = \{'x': 1\} is not allowed"),
    ([1, 2], [], r"^the config must be a mapping of sections"),
    ({"learner": {True: 1}}, [], r"^key True in learner is not allowed: expected a name$"),
])
def test_rejected_config_names_the_key_on_one_line(data, overrides, message):
    with pytest.raises(ConfigError, match=message) as info:
        parse_config(data, overrides)
    assert "\n" not in str(info.value)


def test_override_of_a_key_the_schema_lacks_is_an_error_before_validation():
    with pytest.raises(ConfigError, match=r"^--set env\.size=3: unknown key 'env\.size' "
                       r"\(valid keys in 'env': name, params, num_envs\)$"):
        apply_overrides({}, ["env.size=3"])


def test_missing_file(tmp_path):
    with pytest.raises(ConfigError, match=r"^config file '.*nope\.yaml' not found$"):
        load_config(tmp_path / "nope.yaml")


def test_directory_is_not_a_config_file(tmp_path):
    with pytest.raises(ConfigError, match=r"is a directory, not a file$"):
        load_config(tmp_path)


def test_invalid_yaml_gives_the_line(tmp_path):
    path = _write(tmp_path, "learner:\n  lr: 0.1\n gamma: 0.9\n")
    with pytest.raises(ConfigError, match=r"^invalid YAML in config file '.*run\.yaml' at line 3, column 2: ") as info:
        load_config(path)
    assert "\n" not in str(info.value)


def test_repeated_key_is_invalid_yaml(tmp_path):
    path = _write(tmp_path, "learner:\n  lr: 0.1\n  lr: 0.2\n")
    with pytest.raises(ConfigError, match=r"at line 3, .*key 'lr' appears twice \(first on line 2\)$"):
        load_config(path)


@pytest.mark.parametrize("text", ["- env\n- learner\n", "just text\n", "3\n"], ids=["list", "str", "int"])
def test_non_mapping_yaml(tmp_path, text):
    with pytest.raises(ConfigError, match=r"the top level must be a mapping of sections") as info:
        load_config(_write(tmp_path, text))
    assert "\n" not in str(info.value)


def test_direct_construction_validates_too():
    with pytest.raises(ValueError, match=r"learner\.eps_end = 0\.9"):
        IDQNConfig(eps_start=0.5, eps_end=0.9)


# -------------------------------------------------------------------------------------------- schema

def test_schema_table_lists_every_key_with_a_description():
    rows = schema_table()
    for row in rows:
        assert set(row) == {"key", "type", "default", "bounds", "meaning", "kind"}
        assert row["meaning"] and "\n" not in row["meaning"], row["key"]
        assert row["type"], row["key"]
    keys = {row["key"] for row in rows}
    models = {"env": [config_module.EnvConfig], "learner": [IDQNConfig, MADDPGConfig, config_module.LOLAConfig,
                                                               config_module.PPOConfig],
              "train": [config_module.TrainConfig], "log": [config_module.LogConfig],
              "reward": [config_module.RewardConfig],
              "reward.inequity_aversion": [config_module.InequityAversion]}
    fields = {f"{s}.{n}" for s, ms in models.items() for m in ms for n in m.model_fields} | {"seats"}
    assert keys == fields == set(valid_keys())
    assert len(valid_keys()) == len(set(valid_keys()))


def test_schema_table_defaults_are_the_model_defaults():
    by_kind = {"idqn": config_to_dict(parse_config({})),
               "maddpg": config_to_dict(parse_config({"learner": {"kind": "maddpg"}})),
               "lola": config_to_dict(parse_config({"env": {"name": "matrix_v0"}, "learner": {"kind": "lola"}})),
               "ppo": config_to_dict(parse_config({"learner": {"kind": "ppo"}}))}
    for row in schema_table():
        if row["key"] == "env.params":
            continue  # the game fills its own defaults in
        if row["key"].startswith("reward.inequity_aversion."):
            continue  # inside a mapping that is null by default (its defaults: test_rewards.py)
        if row["key"] == "seats":
            assert row["default"] is None and by_kind["idqn"]["seats"] is None
            continue
        section, name = row["key"].split(".")
        assert by_kind[row["kind"] or "idqn"][section][name] == row["default"], row["key"]


def test_schema_table_bounds():
    rows = {(r["key"], r["kind"]): r for r in schema_table()}
    assert rows["learner.lr", "idqn"]["bounds"] == "> 0"
    assert rows["learner.tau", "maddpg"]["bounds"] == "in (0, 1]"
    assert rows["learner.grad_clip", "idqn"]["type"] == "float | null"  # lola has no networks to clip
    assert rows["learner.torch_threads", None]["bounds"] == ">= 1"
    assert rows["learner.gamma", "lola"]["bounds"] == "in [0, 1)"
    assert rows["learner.critic", "maddpg"]["bounds"] == "one of 'one_network', 'per_agent'"
    assert rows["train.seed", None]["bounds"] == ">= 0"


# ------------------------------------------------------------------------------------ did you mean

LEARNER_KEYS = [k.split(".", 1)[1] for k in valid_keys() if k.startswith("learner.")]
HARVEST_PARAMS = [p.name for p in envs.harvest_v0.PARAMS]
SECTION_NAMES = ["env", "learner", "train", "log"]


@pytest.mark.parametrize("typed, names, expected", [
    ("learning_rate", LEARNER_KEYS, ["lr"]),  # a synonym (envs/params.py ALIASES)
    ("discount", LEARNER_KEYS, ["gamma"]),  # a synonym
    ("num_agent", HARVEST_PARAMS, ["num_agents"]),  # a prefix, not tag_length
    ("gama", LEARNER_KEYS, ["gamma"]),  # one letter missing
    ("lerner", SECTION_NAMES, ["learner"]),
    ("regrow_tabel", HARVEST_PARAMS, ["regrow_table"]),  # two letters swapped in one word part
    ("trian", SECTION_NAMES, ["train"]),
    ("tag_lenght", HARVEST_PARAMS, ["tag_length"]),
    ("freeze", HARVEST_PARAMS, ["freeze_steps"]),  # a word part that starts the name
    ("harvest_v1", list(envs.GAMES), ["harvest_v0"]),  # one wrong character in a short word part
    ("learner.learning_rate", valid_keys(), ["learner.lr"]),  # synonyms part by dotted part
    ("xyzzy", HARVEST_PARAMS, []),  # nothing close: no suggestion (the message lists the valid names)
])
def test_nearest_knows_synonyms_prefixes_and_word_parts(typed, names, expected):
    from envs.params import nearest

    assert nearest(typed, names) == expected


def test_nearest_names_a_clear_winner_alone_and_close_ones_together():
    from envs.params import nearest, similarity

    assert similarity("learning_rate", "learning_starts") < 0.6  # word 'rate' is not 'starts'
    assert set(nearest("eps", LEARNER_KEYS)) == {"eps_start", "eps_end", "eps_decay_steps"}  # all close
    assert len(nearest("e", LEARNER_KEYS)) <= 3


@pytest.mark.parametrize("data, overrides, message", [
    ({}, ["learner.learning_rate=1e-3"],
     r"^--set learner\.learning_rate=1e-3: unknown key 'learner\.learning_rate'; did you mean 'learner\.lr'\?$"),
    ({}, ["learner.discount=0.9"], r"did you mean 'learner\.gamma'\?$"),
    # unknown env.params keys given with --set carry the --set prefix like every other --set error
    ({}, ["env.params.num_agent=3"],
     r"^--set env\.params\.num_agent=3: unknown key 'env\.params\.num_agent'; did you mean "
     r"'env\.params\.num_agents'\?$"),
    ({"env": {"name": "cleanup_v0"}}, ["env.params.river_speed=0.1"],
     r"^--set env\.params\.river_speed=0\.1: unknown key 'env\.params\.river_speed'"),
    # the game is the one named after every override, wherever --set env.name comes
    ({}, ["env.params.pollution_rate=0.1", "env.name=matrix_v0"],
     r"^--set env\.params\.pollution_rate=0\.1: unknown key 'env\.params\.pollution_rate'"),
    # in the file, the same mistake has no --set prefix
    ({"env": {"params": {"num_agent": 3}}}, [],
     r"^unknown key 'env\.params\.num_agent'; did you mean 'env\.params\.num_agents'\?$"),
])
def test_set_errors_name_the_set_item(data, overrides, message):
    with pytest.raises(ConfigError, match=message) as info:
        parse_config(data, overrides)
    assert "\n" not in str(info.value)


def test_set_of_a_known_game_parameter_still_works():
    cfg = parse_config({"env": {"name": "cleanup_v0"}}, ["env.params.pollution_rate=0.01",
                                                         "env.params.num_agents=3"])
    assert cfg.env.params["pollution_rate"] == 0.01 and cfg.env.params["num_agents"] == 3
    # another env's keyword arguments are not ours to check (config.py docstring, Overrides)
    cfg = parse_config({"env": {"name": "gymnasium:CartPole-v1"}}, ["env.params.max_episode_steps=50"])
    assert cfg.env.params == {"max_episode_steps": 50}


def test_keys_added_later_leave_the_hash_of_earlier_configs_alone():
    # digests of parse_config({}) computed at commit e89254e, before reward, pack_replay, replay_ratio,
    # conv_strides, actor_every and harvest's regrow_scale existed: run ids in sweep ledgers and the
    # checkpoints of earlier runs stay valid. The default encoder has changed since (stride 2 per layer), so
    # the first release's encoder is conv_strides: null, which a run directory of that time gets back
    # (load_stored_config fills the keys its file lacks with the values that behave as before)
    old = {"learner": {"conv_strides": None}}
    assert config_hash(parse_config(old)) == "96fcbd9ac649"
    assert config_hash(parse_config({"learner": {"kind": "maddpg", "conv_strides": None}})) == "703d3519856c"
    for changed in (["learner.pack_replay=false"], ["learner.replay_ratio=2"], ["learner.conv_strides=[2,2]"],
                    ["env.params.regrow_scale=2"]):
        assert config_hash(parse_config(old, changed)) != "96fcbd9ac649", changed
    assert config_hash(parse_config({})) != "96fcbd9ac649"  # today's idqn default encoder is another network
    assert config_hash(parse_config({"learner": {"kind": "maddpg"}})) == "703d3519856c"  # maddpg's is not
    maddpg = config_hash(parse_config({"learner": {"kind": "maddpg", "conv_strides": None}},
                                      ["learner.actor_every=2"]))
    assert maddpg != "703d3519856c"


def test_a_stored_config_without_the_later_keys_resumes_as_it_ran(tmp_path):
    # a run directory written before conv_strides existed: its file has no such key, and the run was built
    # with the first release's encoder (1 then 2), not today's default
    data = config_to_dict(parse_config({"learner": {"conv_strides": None}}))
    for key in ("conv_strides", "pack_replay", "replay_ratio"):
        del data["learner"][key]
    del data["env"]["params"]["regrow_scale"]
    path = tmp_path / "config.yaml"
    path.write_text(yaml.safe_dump(data))
    cfg = load_stored_config(path)
    assert cfg.learner.conv_strides is None and config_hash(cfg) == "96fcbd9ac649"
    assert load_config(path).learner.conv_strides == [2, 2]  # a config file for a new run: today's default
