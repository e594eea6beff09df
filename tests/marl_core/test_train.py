"""The training loop and its command line: reproducible runs, resume after SIGKILL, one-line user errors.

Runs are tiny (harvest_tiny, 2 agents, a few hundred env steps, nets of width 16) so the file stays fast;
the resume test kills a real ``marl-core train`` process and continues it with ``train --resume``.
"""

from __future__ import annotations

import copy
import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import torch
import yaml

from envs.metrics import METRIC_NAMES
from marl_core import train
from marl_core.cli import main
from marl_core.config import load_config, load_stored_config, parse_config
from marl_core.team_env import make_team_env

CONFIGS = Path(__file__).resolve().parents[2] / "configs"

# summary.json contract keys: contract in marl_core/train.py docstring
SUMMARY_KEYS = {"env_steps", "episodes", "returns", "efficiency", "equality", "sustainability", "peace",
                "random"}


# ---------------------------------------------------------------------- helpers
def _tiny(kind: str = "idqn", seed: int = 0) -> dict:
    """A run config small enough for a test: a few hundred env steps on harvest_tiny."""
    return {
        "env": {"name": "harvest_v0", "num_envs": 2,
                "params": {"layout": "harvest_tiny", "num_agents": 2, "view_radius": 2, "max_cycles": 50}},
        "learner": {"kind": kind, "hidden": 16, "conv_channels": [4, 8], "batch_size": 16,
                    "warmup_steps": 100, "replay_size": 2000, "train_every": 2},
        "train": {"total_steps": 400, "seed": seed, "eval_every": 200, "eval_episodes": 2,
                  "checkpoint_every": 200},
        "log": {"tensorboard": False, "gif_every": 0},
    }


def _write_yaml(path: Path, data: dict) -> Path:
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    return path


def _snapshot(root: Path) -> dict[str, tuple]:
    """Every entry under ``root``: (kind, size, mtime_ns, sha256 of the bytes) by relative path."""
    snap = {}
    for p in sorted(root.rglob("*")):
        st = p.stat()
        if p.is_dir():
            snap[str(p.relative_to(root))] = ("dir", st.st_mtime_ns)
        else:
            snap[str(p.relative_to(root))] = ("file", st.st_size, st.st_mtime_ns,
                                              hashlib.sha256(p.read_bytes()).hexdigest())
    return snap


def _metric_steps(run: Path) -> list[int]:
    """env_steps of each complete line of metrics.jsonl (a line being written by another process is left out)."""
    lines = (run / "metrics.jsonl").read_text().split("\n")[:-1]
    return [json.loads(line)["env_steps"] for line in lines if line.strip()]


def _cli_command(*argv: str) -> list[str]:
    return [sys.executable, "-m", "marl_core.cli", *argv]


def _one_error_line(err: str) -> str:
    """The CLI's error output: exactly one line, in the CLI's own format."""
    lines = err.strip().splitlines()
    assert len(lines) == 1, err  # contract in marl_core/cli.py docstring: one line on stderr
    assert lines[0].startswith("marl-core: error: "), lines[0]  # format of marl_core/cli.py main()
    return lines[0]


# ---------------------------------------------------------------------- fixtures
@pytest.fixture(scope="module")
def tiny_runs(tmp_path_factory):
    """``get(kind, seed, copy)`` trains a tiny run once per key and returns its run directory."""
    root = tmp_path_factory.mktemp("tiny_runs")
    cache: dict[tuple, Path] = {}

    def get(kind: str, seed: int = 0, copy_id: int = 0) -> Path:
        key = (kind, seed, copy_id)
        if key not in cache:
            out = root / f"{kind}_seed{seed}_{copy_id}"
            train.run(parse_config(_tiny(kind, seed)), out)
            cache[key] = out
        return cache[key]

    return get


@pytest.fixture(scope="module")
def finished_run(tiny_runs) -> Path:
    """A finished tiny idqn run. Tests must not change it (copy it first)."""
    return tiny_runs("idqn")


@pytest.fixture
def arena(tmp_path, finished_run):
    """A scratch directory with a copy of a finished run, a valid config, and names that do not exist."""
    run = tmp_path / "run"
    shutil.copytree(finished_run, run)
    cfg = _write_yaml(tmp_path / "tiny.yaml", _tiny())
    return {"root": tmp_path, "RUN": str(run), "CFG": str(cfg), "NEW": str(tmp_path / "new_run"),
            "MISSING_CFG": str(tmp_path / "missing.yaml"), "MISSING_RUN": str(tmp_path / "no_such_run")}


# ---------------------------------------------------------------------- 1. reproducibility
@pytest.mark.parametrize("kind", ["idqn", "maddpg"])
def test_same_config_and_seed_give_byte_identical_summary(kind, tiny_runs):
    a, b = tiny_runs(kind, 0, 0), tiny_runs(kind, 0, 1)
    # expected: identical bytes -- a run is reproducible from its one seed (marl_core/team_env.py docstring,
    # "Seeding"; marl_core/learners/idqn.py and maddpg.py seed their own generators)
    # every number but the wall-clock time the run took (wall_seconds: how long, not what was learnt)
    def timeless(rows: list[dict]) -> list[dict]:
        for row in rows:
            assert row.pop("wall_seconds") > 0
        return rows

    def lines(path: Path) -> list[dict]:
        return [json.loads(line) for line in path.read_text().splitlines()]

    assert timeless([json.loads((a / "summary.json").read_text())]) == timeless(
        [json.loads((b / "summary.json").read_text())])
    assert timeless(lines(a / "metrics.jsonl")) == timeless(lines(b / "metrics.jsonl"))
    for pa in sorted((a / "policies").glob("*.pt")):
        wa = torch.load(pa, weights_only=True)["weights"]
        wb = torch.load(b / "policies" / pa.name, weights_only=True)["weights"]
        assert wa.keys() == wb.keys()
        assert all(torch.equal(wa[k], wb[k]) for k in wa), pa.name


@pytest.mark.parametrize("kind", ["idqn", "maddpg"])
def test_different_seed_gives_different_summary(kind, tiny_runs):
    a, c = tiny_runs(kind, 0, 0), tiny_runs(kind, 1, 0)
    sa = json.loads((a / "summary.json").read_text())
    sc = json.loads((c / "summary.json").read_text())
    assert (sa["seed"], sc["seed"]) == (0, 1)  # the seed we set
    del sa["seed"], sc["seed"]  # the seed field alone would make any two summaries differ
    # expected: different figures -- the seed drives envs, nets and exploration (config.py, train.seed);
    # common practice (no source)
    assert sa != sc
    pa = sorted((a / "policies").glob("*.pt"))[0]
    wa = torch.load(pa, weights_only=True)["weights"]
    wc = torch.load(c / "policies" / pa.name, weights_only=True)["weights"]
    assert any(not torch.equal(wa[k], wc[k]) for k in wa)


def test_summary_has_the_contract_keys(finished_run):
    s = json.loads((finished_run / "summary.json").read_text())
    assert SUMMARY_KEYS <= set(s)  # contract in marl_core/train.py docstring
    assert s["env_steps"] == 400  # total_steps of _tiny(); contract: run trains total_steps env steps
    assert set(s["returns"]) == {"agent_0", "agent_1"}  # num_agents 2 in _tiny()
    assert set(METRIC_NAMES) <= set(s["random"])  # "the random team's figures" (train.py docstring)
    # run directory layout: contract in marl_core/train.py docstring
    for name in ("config.yaml", "metrics.jsonl", "summary.json", "checkpoints/last.pt",
                 "policies/agent_0.pt", "policies/agent_1.pt"):
        assert (finished_run / name).is_file(), name
    # eval_every 200, total 400: evaluations at 200 and 400 (train.py: eval at multiples and at the end)
    assert _metric_steps(finished_run) == [200, 400]


# ---------------------------------------------------------------------- 2. resume after SIGKILL
RESUME_TOTAL, RESUME_EVAL, RESUME_CKPT = 3000, 500, 1000


@pytest.fixture(scope="module")
def resumed(tmp_path_factory):
    """Start ``marl-core train`` in a subprocess, SIGKILL it after a checkpoint with an evaluation logged
    past that checkpoint, then ``marl-core train --resume`` it to completion."""
    from marl_core.policy import safe_torch_load

    root = tmp_path_factory.mktemp("resume")
    data = _tiny()
    data["env"]["num_envs"] = 4  # 4 env steps per loop iteration: the same loop, fewer iterations
    data["learner"]["train_every"] = 8  # fewer updates: the same loop, faster
    data["train"].update(total_steps=RESUME_TOTAL, eval_every=RESUME_EVAL, checkpoint_every=RESUME_CKPT)
    data["log"]["tensorboard"] = True
    cfg = _write_yaml(root / "long.yaml", data)
    run = root / "run"
    errlog = root / "first.stderr"
    with open(errlog, "w") as err:
        proc = subprocess.Popen(_cli_command("train", str(cfg), "--out", str(run), "--quiet"),
                                stdout=subprocess.DEVNULL, stderr=err)
    ckpt, metrics = run / "checkpoints" / "last.pt", run / "metrics.jsonl"
    deadline = time.monotonic() + 120
    try:
        while True:
            if proc.poll() is not None:
                pytest.fail(f"training finished (rc {proc.returncode}) before it could be killed: "
                            f"{errlog.read_text()[-2000:]}")
            if time.monotonic() > deadline:
                pytest.fail("no checkpoint and evaluation after it within 120 s")
            if ckpt.is_file() and metrics.is_file():
                steps = _metric_steps(run)  # read first: the checkpoint read next is at least as new
                ckpt_step = safe_torch_load(ckpt, "checkpoint")["counters"]["env_steps"]
                if len(steps) >= 2 and steps[-1] > ckpt_step:
                    break
            time.sleep(0.01)
    finally:
        if proc.poll() is None:
            os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
    assert proc.returncode == -signal.SIGKILL
    killed = {"ckpt_step": safe_torch_load(ckpt, "checkpoint")["counters"]["env_steps"],
              "metric_steps": _metric_steps(run)}
    assert not (run / "summary.json").exists()  # the run was really interrupted
    done = subprocess.run(_cli_command("train", "--resume", str(run), "--quiet"), capture_output=True,
                          text=True, timeout=300)
    assert done.returncode == 0, done.stderr[-2000:]
    return {"run": run, "killed": killed, "stdout": done.stdout}


def test_kill_left_evaluations_past_the_checkpoint(resumed):
    """The precondition of the purge tests: the crash left lines that the resume must drop."""
    k = resumed["killed"]
    assert k["ckpt_step"] % RESUME_CKPT == 0  # checkpoints at multiples of checkpoint_every (train.py loop)
    assert len(k["metric_steps"]) >= 2 and max(k["metric_steps"]) > k["ckpt_step"]


def test_resume_reaches_total_steps(resumed):
    s = json.loads((resumed["run"] / "summary.json").read_text())
    # contract in marl_core/train.py docstring: resume continues the run from its checkpoint to the end
    assert s["env_steps"] == RESUME_TOTAL
    assert SUMMARY_KEYS <= set(s)
    assert f"({RESUME_TOTAL} env steps" in resumed["stdout"]  # marl_core/cli.py _train() output
    # it first says where it resumed, and its clock goes on from the earlier session (cli.py _train)
    first = resumed["stdout"].splitlines()[0]
    assert first.startswith(f"resumed at step {resumed['killed']['ckpt_step']:,} of {RESUME_TOTAL:,} env steps, ")
    assert first.endswith(" into the run")
    for agent in ("agent_0", "agent_1"):
        assert (resumed["run"] / "policies" / f"{agent}.pt").is_file()


def test_resume_logs_every_evaluation_once_in_metrics(resumed):
    steps = _metric_steps(resumed["run"])
    # contract in marl_core/train.py docstring: "logs every evaluation step exactly once"
    assert steps == list(range(RESUME_EVAL, RESUME_TOTAL + 1, RESUME_EVAL))
    assert all(a < b for a, b in zip(steps, steps[1:])) and steps[-1] == RESUME_TOTAL
    # the wall clock goes on from the checkpoint (train.py docstring): it never runs backwards at the resume
    clock = [json.loads(x)["wall_seconds"] for x in (resumed["run"] / "metrics.jsonl").read_text().splitlines()]
    assert all(a < b for a, b in zip(clock, clock[1:])), clock
    assert json.loads((resumed["run"] / "summary.json").read_text())["wall_seconds"] >= clock[-1]


def _accumulated_scalars(run: Path):
    from tensorboard.backend.event_processing.event_accumulator import EventAccumulator

    acc = EventAccumulator(str(run))
    acc.Reload()  # merges the event files of both processes and applies the purge of the resumed one
    return acc


def test_resume_tensorboard_steps_unique_and_increasing(resumed):
    run = resumed["run"]
    assert len(list(run.glob("events.out.tfevents.*"))) == 2  # one event file per process
    acc = _accumulated_scalars(run)
    tags = acc.Tags()["scalars"]
    assert "eval/efficiency" in tags
    for tag in tags:
        steps = [e.step for e in acc.Scalars(tag)]
        # contract in marl_core/train.py docstring: events after the checkpoint are purged, none repeated
        assert all(a < b for a, b in zip(steps, steps[1:])), (tag, steps)
    assert acc.Scalars("eval/efficiency")[-1].step == RESUME_TOTAL


def test_resume_tensorboard_has_every_evaluation_step_once(resumed):
    acc = _accumulated_scalars(resumed["run"])
    steps = [e.step for e in acc.Scalars("eval/efficiency")]
    # contract in marl_core/train.py docstring: "logs every evaluation step exactly once" (TensorBoard too)
    assert steps == list(range(RESUME_EVAL, RESUME_TOTAL + 1, RESUME_EVAL))


def test_resume_of_a_finished_run_returns_the_same_summary(resumed, capsys):
    run = resumed["run"]
    before = _snapshot(run)
    summary = json.loads((run / "summary.json").read_text())
    assert train.resume(run) == summary  # resume() in marl_core/train.py: a finished run returns its summary
    assert train.finished_summary(run) == summary  # finished_summary(): summary.json at total_steps
    assert main(["train", "--resume", str(run), "--quiet"]) == 0  # a finished run is no mistake: exit 0
    out = capsys.readouterr().out
    # marl_core/cli.py _train(): it says the run is finished, how far it got, and where its summary is
    assert f"run: {run} is already finished: {RESUME_TOTAL} of {RESUME_TOTAL} env steps" in out
    assert f"{summary['episodes']} episodes; nothing to resume" in out
    assert f"summary: {run}/summary.json" in out
    # "returns immediately": no new event file, no new metrics line, nothing rewritten (resume() in train.py)
    assert _snapshot(run) == before


def test_finished_summary_is_none_for_an_unfinished_run(tmp_path, finished_run):
    run = tmp_path / "run"
    shutil.copytree(finished_run, run)
    (run / "summary.json").unlink()  # as after a crash: checkpoints but no summary yet
    assert train.finished_summary(run) is None  # finished_summary() docstring


def test_resume_without_checkpoint_is_one_line_exit_2(tmp_path, finished_run, capsys):
    run = tmp_path / "run"
    shutil.copytree(finished_run, run)
    (run / "checkpoints" / "last.pt").unlink()
    before = _snapshot(tmp_path)
    assert main(["train", "--resume", str(run), "--quiet"]) == 2  # contract in marl_core/cli.py docstring
    line = _one_error_line(capsys.readouterr().err)
    assert "checkpoint" in line and str(run) in line  # RunDirError in train.resume() names both
    assert _snapshot(tmp_path) == before


# ---------------------------------------------------------------------- 3. bad inputs on the command line
BAD_INPUTS = [
    # (id, argv with placeholders, words the one line must contain)
    ("unknown_key", ["train", "CFG", "--out", "NEW", "--set", "learner.gama=0.9"],
     ["learner.gama", "learner.gamma"]),  # "did you mean" form: marl_core/config.py docstring
    ("wrong_type", ["train", "CFG", "--out", "NEW", "--set", "learner.lr=abc"], ["learner.lr", "'abc'"]),
    ("out_of_range", ["train", "CFG", "--out", "NEW", "--set", "learner.lr=-1"],
     ["learner.lr = -1", "> 0"]),  # example line in marl_core/config.py docstring
    ("unknown_env", ["train", "CFG", "--out", "NEW", "--set", "env.name=nope_v0"], ["env.name", "nope_v0"]),
    ("bad_set_syntax", ["train", "CFG", "--out", "NEW", "--set", "learner.lr"], ["--set", "learner.lr"]),
    ("missing_config", ["train", "MISSING_CFG", "--out", "NEW"], ["MISSING_CFG", "not found"]),
    ("evaluate_missing_run", ["evaluate", "MISSING_RUN"], ["MISSING_RUN"]),
    ("resume_missing_run", ["train", "--resume", "MISSING_RUN"], ["MISSING_RUN"]),
    ("train_into_existing_run", ["train", "CFG", "--out", "RUN"], ["RUN", "already exists"]),
    ("evaluate_episodes_0", ["evaluate", "RUN", "--episodes", "0"], ["--episodes", "0"]),
]


def _fill(words: list[str], arena: dict) -> list[str]:
    return [arena.get(w, w) for w in words]


@pytest.mark.parametrize("argv, words", [(a, w) for _, a, w in BAD_INPUTS], ids=[i for i, _, _ in BAD_INPUTS])
def test_bad_input_is_one_line_exit_2_and_writes_nothing(argv, words, arena, capsys):
    before = _snapshot(arena["root"])
    # contract in marl_core/cli.py docstring: one line on stderr, exit status 2, nothing written
    assert main(_fill(argv, arena)) == 2
    captured = capsys.readouterr()
    line = _one_error_line(captured.err)
    for word in _fill(words, arena):
        assert word in line, (word, line)
    # stdout: nothing but the blank line rich's progress bar leaves when it closes (not --quiet)
    assert captured.out.strip() == ""
    assert _snapshot(arena["root"]) == before
    assert not Path(arena["NEW"]).exists()


@pytest.mark.parametrize("payload", ["foreign_dict", "random_bytes"])
@pytest.mark.parametrize("command", ["evaluate", "resume"])
def test_checkpoint_that_is_not_ours_is_one_line_exit_2(payload, command, arena, capsys):
    ckpt = Path(arena["RUN"]) / "checkpoints" / "last.pt"
    if payload == "foreign_dict":
        torch.save({"x": 1}, ckpt)
    else:
        ckpt.write_bytes(np.random.default_rng(0).bytes(4096))
    before = _snapshot(arena["root"])
    argv = ["evaluate", arena["RUN"]] if command == "evaluate" else ["train", "--resume", arena["RUN"]]
    assert main(argv) == 2  # contract in marl_core/cli.py docstring (a bad checkpoint is a user mistake)
    line = _one_error_line(capsys.readouterr().err)
    # CheckpointError: "a checkpoint is ... not ours" (marl_core/errors.py); the message names the file
    assert str(ckpt) in line and "not a marl-core file" in line
    assert _snapshot(arena["root"]) == before


def test_real_exit_code_and_stderr_of_a_bad_input(arena):
    proc = subprocess.run(_cli_command("train", arena["CFG"], "--out", arena["NEW"],
                                       "--set", "learner.gama=0.9"),
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2  # contract in marl_core/cli.py docstring: exit status 2
    assert "learner.gamma" in _one_error_line(proc.stderr)
    assert proc.stdout == ""
    assert not Path(arena["NEW"]).exists()


# ---------------------------------------------------------------------- 4. evaluate --json / --gif
def test_evaluate_json_has_the_summary_metric_keys(finished_run, capsys):
    before = _snapshot(finished_run)
    assert main(["evaluate", str(finished_run), "--json"]) == 0
    res = json.loads(capsys.readouterr().out)
    summary = json.loads((finished_run / "summary.json").read_text())
    assert SUMMARY_KEYS <= set(res)  # contract: evaluate_run docstring, "the keys match summary.json"
    # the summary's extra keys name the run or how it trained, not a metric (train.py _Run.finish)
    assert set(res) == set(summary) - {"learner", "env", "seed", "replay_ratio", "replay_ratio_measured",
                                       "wall_seconds"}
    assert set(res["random"]) == set(summary["random"])
    assert set(res["returns"]) == set(summary["returns"])
    assert res["env_steps"] == summary["env_steps"] == 400  # the last checkpoint is at total_steps
    assert res["eval_episodes"] == 2  # default --episodes: the run's train.eval_episodes (cli.py help)
    assert res["random"] == summary["random"]  # the random team's figures are stored in the checkpoint
    assert _snapshot(finished_run) == before  # evaluating reads the run; common practice (no source)


def test_evaluate_gif_writes_an_animated_gif(tmp_path, capsys):
    from PIL import Image

    # a short run of its own that evaluates with random actions (eval_eps 1): a greedy policy that stands
    # still draws the same frame each step, which Pillow merges into one
    data = _tiny()
    data["learner"]["eval_eps"] = 1.0
    data["train"]["total_steps"] = 200
    run = tmp_path / "run"
    train.run(parse_config(data), run)
    gif = tmp_path / "episode.gif"
    assert main(["evaluate", str(run), "--episodes", "1", "--gif", str(gif)]) == 0
    assert f"GIF: {gif}" in capsys.readouterr().out  # marl_core/cli.py _evaluate() output
    with Image.open(gif) as im:
        # one episode of max_cycles 50: reset frame + one per step (rollout.evaluate) is at most 51;
        # Pillow may merge identical consecutive frames, so only "animated" is asserted below that
        assert 1 < im.n_frames <= 51


# ---------------------------------------------------------------------- 5. bundled configs
BUNDLED = sorted(CONFIGS.glob("*.yaml"))

# team sizes, from each file's num_agents / N (gymnasium envs are a team of one: marl_core/team_env.py)
TEAM_SIZE = {"cartpole_idqn": 1, "cartpole_ppo": 1, "cleanup_idqn": 3, "cleanup_tiny_idqn": 2, "climbing_ppo": 2, "cleanup_maddpg": 3, "cleanup_ppo": 5, "harvest_idqn": 3,
             "harvest_maddpg": 3, "harvest_ppo": 3, "spread_maddpg": 3, "spread_ppo": 3, "harvest_mixed": 3, "ipd_lola": 2, "ipd_naive": 2}


def test_every_bundled_config_is_listed():
    assert sorted(p.stem for p in BUNDLED) == sorted(TEAM_SIZE)


@pytest.mark.parametrize("path", BUNDLED, ids=[p.stem for p in BUNDLED])
def test_bundled_config_loads_and_builds_its_env(path):
    cfg = load_config(path)
    raw = yaml.safe_load(path.read_text())
    assert cfg.env.name == raw["env"]["name"] and cfg.learner.kind == raw["learner"]["kind"]  # the file
    env = make_team_env(cfg.env.name, copy.deepcopy(cfg.env.params), 1, cfg.train.seed)
    try:
        assert env.spec.num_agents == TEAM_SIZE[path.stem]
        obs, _ = env.reset(cfg.train.seed)
        assert obs.shape == (1, env.spec.num_agents, *env.spec.obs_space.shape)  # TeamEnv Shape section
        st = env.step(np.zeros((1, env.spec.num_agents), np.int64))
        assert st.rewards.shape == (1, env.spec.num_agents)  # TeamEnv Shape section
    finally:
        env.close()


# ---------------------------------------------------------------------- 6. Ctrl-C, piped output, file modes
def test_interrupt_between_steps_saves_a_checkpoint_and_resume_finishes(tmp_path):
    from marl_core.policy import safe_torch_load

    out = tmp_path / "run"

    def stop_at_150(step: int, total: int, last: dict | None) -> None:  # the progress callback, after a step
        if step >= 150:
            raise KeyboardInterrupt

    with pytest.raises(train.TrainingInterrupted) as info:
        train.run(parse_config(_tiny()), out, progress=stop_at_150)
    err = info.value
    assert isinstance(err, KeyboardInterrupt)  # TrainingInterrupted docstring: still an interrupt
    # num_envs 2: steps go 2 at a time, so the loop stops at exactly 150 (train.py module docstring: a
    # KeyboardInterrupt from the progress callback is handled between steps, where a checkpoint is saved)
    assert (err.env_steps, err.total_steps, err.saved) == (150, 400, True)
    assert err.checkpoint == out / "checkpoints" / "last.pt" and err.checkpoint_steps == 150
    assert safe_torch_load(err.checkpoint, "checkpoint")["counters"]["env_steps"] == 150
    assert not (out / "summary.json").exists()
    summary = train.resume(out)  # the saved checkpoint is a normal one
    assert summary["env_steps"] == 400
    assert _metric_steps(out) == [200, 400]  # every evaluation once (train.py docstring)


def test_interrupt_inside_a_step_keeps_the_last_periodic_checkpoint(tmp_path, monkeypatch):
    """An interrupt in the middle of a step (here: in the update) must not save a checkpoint there."""
    out = tmp_path / "run"
    real = train.linear_schedule

    def schedule(step, *args):  # called by the loop just before an update round (train.py _loop)
        if step >= 250:
            raise KeyboardInterrupt
        return real(step, *args)

    monkeypatch.setattr(train, "linear_schedule", schedule)
    with pytest.raises(train.TrainingInterrupted) as info:
        train.run(parse_config(_tiny()), out)
    err = info.value
    # checkpoint_every 200 in _tiny(): the last periodic checkpoint is at 200; the interrupt came mid-step
    assert err.saved is False and err.checkpoint_steps == 200 and err.env_steps >= 250


def test_cli_interrupt_is_one_line_with_the_resume_command_exit_130(tmp_path, monkeypatch, capsys):
    from marl_core.hints import command

    cfg = _write_yaml(tmp_path / "tiny.yaml", _tiny())
    out = tmp_path / "run"
    real_run = train.run

    def run_until_interrupted(cfg, out, progress=None):
        def progress_then_stop(step, total, last):
            if progress is not None:
                progress(step, total, last)
            if step >= 100:
                raise KeyboardInterrupt
        return real_run(cfg, out, progress=progress_then_stop)

    monkeypatch.setattr(train, "run", run_until_interrupted)
    assert main(["train", str(cfg), "--out", str(out), "--quiet"]) == 130  # cli.py docstring: Ctrl-C, 130
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err  # one line (cli.py docstring)
    assert f"checkpoint saved: {out / 'checkpoints' / 'last.pt'} (step 100)" in err
    assert err.strip().endswith(f"resume with: {command()} train --resume {out}")


def test_cli_interrupt_before_any_checkpoint_says_there_is_nothing_to_resume(tmp_path, monkeypatch, capsys):
    cfg = _write_yaml(tmp_path / "tiny.yaml", _tiny())
    out = tmp_path / "run"

    def interrupted_while_building(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(train, "run", interrupted_while_building)
    assert main(["train", str(cfg), "--out", str(out)]) == 130
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "before anything was written" in err  # cli.py _Interrupted


def test_sigint_to_a_real_train_process(tmp_path):
    """Ctrl-C on a real ``marl-core train``: one line naming the saved checkpoint and the resume command,
    exit status 130, no traceback."""
    from marl_core.policy import safe_torch_load

    data = _tiny()
    data["train"]["total_steps"] = 1_000_000  # far more than the test waits for
    cfg = _write_yaml(tmp_path / "long.yaml", data)
    run = tmp_path / "run"
    # files, not pipes: the test waits for the process to exit, not for every holder of a pipe to close it
    out_path, err_path = tmp_path / "stdout.txt", tmp_path / "stderr.txt"
    with open(out_path, "w") as out, open(err_path, "w") as err:
        # SIGINT back to its default in the child: a test process started in the background by a
        # non-interactive shell ignores SIGINT, children inherit that, and Python keeps it ignored
        proc = subprocess.Popen(_cli_command("train", str(cfg), "--out", str(run)), stdout=out, stderr=err,
                                text=True, preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    try:
        deadline = time.monotonic() + 180
        while not out_path.read_text().endswith("\n") and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.05)
        first = out_path.read_text().splitlines()[:1]  # one line per evaluation (cli.py docstring)
        assert first and first[0].startswith("step 200/1000000"), f"{first} {err_path.read_text()}"
        proc.send_signal(signal.SIGINT)
        try:
            proc.wait(timeout=60)
        except subprocess.TimeoutExpired:  # say where the child stands (state, blocked or ignored signals)
            status = Path(f"/proc/{proc.pid}/status")
            lines = status.read_text().splitlines() if status.exists() else []
            raise AssertionError(f"no exit 60 s after SIGINT; child "
                                 f"{[ln for ln in lines if ln.startswith(('State', 'Sig'))]}") from None
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    stderr = err_path.read_text()
    assert proc.returncode == 130, stderr  # cli.py docstring
    lines = stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in stderr, stderr
    ckpt = run / "checkpoints" / "last.pt"
    steps = safe_torch_load(ckpt, "checkpoint")["counters"]["env_steps"]
    assert f"checkpoint saved: {ckpt} (step {steps})" in lines[0]
    assert lines[0].endswith(f"train --resume {run}")
    assert steps >= 200 and not (run / "summary.json").exists()


def test_piped_stdout_gets_one_plain_line_per_evaluation(tmp_path):
    data = _tiny()
    data["train"].update(total_steps=600, eval_every=200)
    cfg = _write_yaml(tmp_path / "tiny.yaml", data)
    run = tmp_path / "run"
    # no --quiet and log.progress true: only the missing terminal makes the lines plain (cli.py _Progress)
    done = subprocess.run(_cli_command("train", str(cfg), "--out", str(run)), capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    lines = done.stdout.splitlines()
    progress = [line for line in lines if line.startswith("step ")]
    # eval_every 200, total 600: evaluations at 200, 400, 600 (train.py loop), each printed once, in order,
    # and all of them before the final table (printed as they happen, not at the end)
    assert [line.split()[1] for line in progress] == ["200/600", "400/600", "600/600"]
    assert lines.index(progress[-1]) < next(i for i, line in enumerate(lines) if line.startswith("run: "))
    for line in progress:
        for word in ("elapsed", "steps/s", "eval return", "efficiency", "equality", "sustainability", "peace"):
            assert word in line, line
    assert "\x1b[" not in done.stdout  # no terminal control codes (a progress bar) in piped output


def _usual_mode() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def test_every_file_of_a_run_has_the_usual_mode(finished_run):
    files = [p for p in finished_run.rglob("*") if p.is_file()]
    assert {"config.yaml", "summary.json", "metrics.jsonl", "last.pt", "agent_0.pt"} <= {p.name for p in files}
    # marl_core/files.py docstring: atomically written files get 0o666 less the umask, like any new file
    # (metrics.jsonl is appended with open(): the reference)
    modes = {p.name: p.stat().st_mode & 0o777 for p in files}
    assert set(modes.values()) == {_usual_mode()}, modes


# ---------------------------------------------------------------------- 7. a team of one agent
@pytest.fixture(scope="module")
def cartpole_run(tmp_path_factory):
    data = yaml.safe_load((CONFIGS / "cartpole_idqn.yaml").read_text())
    data["env"]["num_envs"] = 2
    data["learner"].update(warmup_steps=100, batch_size=16, replay_size=2000)
    data["train"].update(total_steps=300, eval_every=150, eval_episodes=2, checkpoint_every=150)
    data["log"] = {"tensorboard": False, "gif_every": 0}
    root = tmp_path_factory.mktemp("cartpole")
    cfg = _write_yaml(root / "cartpole.yaml", data)
    done = subprocess.run(_cli_command("train", str(cfg), "--out", str(root / "run")), capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    return {"run": root / "run", "stdout": done.stdout}


def _table_rows(stdout: str) -> list[str]:
    """The first word of each line of the metrics table (the lines after its header 'learned ...')."""
    lines = stdout.splitlines()
    start = next(i for i, line in enumerate(lines) if line.split()[:1] == ["learned"])
    rows = []
    for line in lines[start + 1:]:
        if line.startswith(("summary:", "(", "GIF:")):
            break
        rows.append(line.split()[0])
    return rows


def test_single_agent_train_shows_returns_only(cartpole_run):
    out = cartpole_run["stdout"]
    # marl_core/cli.py docstring: a team of one is shown its returns only
    assert _table_rows(out) == ["return"]
    for word in ("efficiency", "equality", "sustainability", "peace"):
        assert word not in out.split("(one agent")[0], word  # nor in the per-evaluation lines
    assert "(one agent: the social metrics need a team" in out
    summary = json.loads((cartpole_run["run"] / "summary.json").read_text())
    assert SUMMARY_KEYS <= set(summary)  # the contract keys stay (marl_core/train.py docstring)
    assert list(summary["returns"]) == ["agent_0"]  # gymnasium envs: a team of one (team_env.py)


def test_single_agent_evaluate_shows_returns_only(cartpole_run, capsys):
    assert main(["evaluate", str(cartpole_run["run"]), "--episodes", "2"]) == 0
    assert _table_rows(capsys.readouterr().out) == ["return"]
    assert main(["evaluate", str(cartpole_run["run"]), "--episodes", "2", "--json"]) == 0
    res = json.loads(capsys.readouterr().out)
    assert {"efficiency", "equality", "sustainability", "peace"} <= set(res)  # JSON keeps every key


def test_team_train_table_keeps_the_social_metrics(finished_run, capsys):
    assert main(["evaluate", str(finished_run)]) == 0
    assert _table_rows(capsys.readouterr().out) == ["return_mean", "efficiency", "equality", "sustainability",
                                                   "peace"]


def test_a_finished_run_is_extended_to_more_steps(arena, capsys):
    run = Path(arena["RUN"])
    first = json.loads((run / "summary.json").read_text())
    assert main(["train", "--resume", str(run), "--set", "train.total_steps=800", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert out.startswith("extended: train.total_steps 400 -> 800\nresumed at step 400 of 800 env steps, ")
    summary = json.loads((run / "summary.json").read_text())
    assert summary["env_steps"] == 800 and load_stored_config(run / "config.yaml").train.total_steps == 800
    assert json.loads((run / "summary.400.json").read_text()) == first  # nothing is lost
    assert _metric_steps(run) == [200, 400, 600, 800]  # it went on, each evaluation once
    # only the budget may change, and only upwards past what the run has done
    assert main(["train", "--resume", str(run), "--set", "learner.lr=0.01"]) == 2
    assert "takes only --set train.total_steps=M" in capsys.readouterr().err
    assert main(["train", "--resume", str(run), "--set", "train.total_steps=600"]) == 2
    assert capsys.readouterr().err.strip() == ("marl-core: error: train.total_steps = 600 is not allowed: the run "
                                               "has taken 800 env steps; expected more than that to extend it")
