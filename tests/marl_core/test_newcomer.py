"""Rough edges a newcomer meets first: GIFs that end on the wrong frame, file modes, hints that only work
with the venv active, the README's own snippets and those of the docs/ pages it links to."""

from __future__ import annotations

import os
import re
import stat
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import envs
from marl_core.files import atomic_write
from marl_core.rollout import evaluate
from marl_core.team_env import make_team_env

ROOT = Path(__file__).resolve().parents[2]
README = ROOT / "README.md"


# ---------------------------------------------------------------------- the last frame of a GIF
GIF_CASES = {
    # env.name -> params: our batched engine, and the same game through the PettingZoo adapter
    "harvest_v0": {"layout": "harvest_tiny", "num_agents": 2, "view_radius": 2, "max_cycles": 30},
    "envs.harvest_v0:parallel_env": {"layout": "harvest_tiny", "num_agents": 2, "view_radius": 2,
                                     "max_cycles": 30},
    "matrix_v0": {"game": "stag_hunt", "max_cycles": 6},
}


@pytest.mark.parametrize("name", list(GIF_CASES))
def test_last_gif_frame_is_the_state_after_the_last_step(name):
    """Training and evaluation GIFs come from rollout.evaluate on an auto-resetting team env: the last frame
    must show the state after the episode's last step, not the next episode's reset."""
    params = GIF_CASES[name]
    seed = 11
    env = make_team_env(name, dict(params), 2, seed, render=True, with_state=False)
    rng = np.random.default_rng(0)
    played = []

    def policy(obs):
        actions = rng.integers(env.spec.num_actions, size=obs.shape[:2])
        played.append(actions[0].copy())  # copy 0's actions: the GIF is copy 0's first episode
        return actions

    try:
        frames = evaluate(env, policy, episodes=2, seed=seed, gif=True)["frames"]
        after_reset = env.render(0)  # the env has auto-reset: its first state of the next episode
    finally:
        env.close()
    T = params["max_cycles"]
    assert len(frames) == T + 1  # rollout.evaluate docstring: the first state, then one per step

    # copy 0 of a team env is the single env reset with the same seed (team_env.py docstring, "Seeding"),
    # stepped with the same actions; compare whole frames (no colour is assumed)
    game = envs.game_module("harvest_v0" if name.startswith("envs.harvest_v0") else name)
    single = game.parallel_env(render_mode="rgb_array", **params)
    single.reset(seed=seed)
    assert np.array_equal(frames[0], single.render())
    for actions in played[:T]:
        single.step({a: int(x) for a, x in zip(single.possible_agents, actions)})
    assert not single.agents  # the single env's episode is over: this is the state after the last step
    assert np.array_equal(frames[-1], single.render())
    assert not np.array_equal(frames[-1], after_reset)  # and not the reset state the old GIFs ended on


def test_evaluate_gif_file_ends_on_the_last_step(tmp_path):
    """The GIF file itself (written by envs.render.write_gif) ends on the same frame."""
    from PIL import Image

    from envs.render import write_gif

    params = GIF_CASES["harvest_v0"]
    env = make_team_env("harvest_v0", dict(params), 1, 3, render=True, with_state=False)
    rng = np.random.default_rng(1)
    try:
        frames = evaluate(env, lambda o: rng.integers(env.spec.num_actions, size=o.shape[:2]), 1, 3,
                          gif=True)["frames"]
        reset = env.render(0)
    finally:
        env.close()
    path = write_gif(frames, tmp_path / "episode.gif")
    with Image.open(path) as im:
        im.seek(im.n_frames - 1)
        last = np.asarray(im.convert("RGB"))
    # GIF palettes are lossy, so compare by distance: the last frame is nearer the final state than the reset
    far = np.abs(last.astype(int) - reset.astype(int)).sum()
    near = np.abs(last.astype(int) - frames[-1].astype(int)).sum()
    assert near < far


# ---------------------------------------------------------------------- file modes
def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


@pytest.mark.parametrize("mask", [0o022, 0o027, 0o002])
def test_atomic_write_gives_the_usual_mode_of_a_new_file(tmp_path, mask):
    old = os.umask(mask)
    try:
        path = atomic_write(tmp_path / "a.txt", lambda f: f.write("x\n"))
        with open(tmp_path / "plain.txt", "w") as f:  # what any other new file gets
            f.write("x\n")
    finally:
        os.umask(old)
    # marl_core/files.py docstring: 0o666 less the umask (mkstemp's 0600 would fail this)
    assert stat.S_IMODE(path.stat().st_mode) == 0o666 & ~mask == stat.S_IMODE((tmp_path / "plain.txt").stat().st_mode)
    assert not list(tmp_path.glob(".a.txt.*"))  # no temporary file left behind


def test_atomic_write_replacing_a_0600_file_gives_the_usual_mode(tmp_path):
    path = tmp_path / "report.md"
    path.write_text("old")
    path.chmod(0o600)  # as an older version left it
    atomic_write(path, lambda f: f.write("new"))
    assert stat.S_IMODE(path.stat().st_mode) == 0o666 & ~_umask()
    assert path.read_text() == "new"


# ---------------------------------------------------------------------- hints name runnable commands
def test_hint_is_the_bare_name_when_path_finds_this_install(monkeypatch):
    from marl_core.hints import command

    bindir = Path(sys.prefix) / "bin"
    if not (bindir / "marl-core").is_file():
        pytest.skip("marl-core is not installed as a script in this environment")
    monkeypatch.setenv("PATH", f"{bindir}{os.pathsep}{os.environ.get('PATH', '')}")
    assert command() == "marl-core"  # venv active: hints.py docstring


def test_hint_is_the_scripts_path_when_the_venv_is_not_active(monkeypatch, tmp_path):
    from marl_core.hints import command

    script = Path(sys.prefix) / "bin" / "marl-core"
    if not script.is_file():
        pytest.skip("marl-core is not installed as a script in this environment")
    monkeypatch.setenv("PATH", "/usr/bin:/bin")  # no venv on PATH
    monkeypatch.chdir(sys.prefix)
    assert command() == str(Path("bin") / "marl-core")  # relative to the working directory when below it
    monkeypatch.chdir(tmp_path)
    assert command() == str(script)
    assert command("tensorboard") in ("tensorboard", str(Path(sys.prefix) / "bin" / "tensorboard"))


def test_printed_hints_use_the_runnable_command(tmp_path):
    """`marl-core train` without the venv on PATH prints hints that run as printed."""
    script = Path(sys.prefix) / "bin" / "marl-core"
    if not script.is_file():
        pytest.skip("marl-core is not installed as a script in this environment")
    env = dict(os.environ, PATH="/usr/bin:/bin")
    run = tmp_path / "run"
    first = subprocess.run([str(script), "train", str(ROOT / "nope.yaml"), "--out", str(run)],
                           capture_output=True, text=True, env=env, timeout=60, cwd=tmp_path)
    assert first.returncode == 2  # a missing config: one-line error
    (tmp_path / "run").mkdir()
    (tmp_path / "run" / "x").write_text("")
    taken = subprocess.run([str(script), "train", str(ROOT / "configs" / "harvest_idqn.yaml"), "--out", str(run)],
                           capture_output=True, text=True, env=env, timeout=60, cwd=tmp_path)
    assert taken.returncode == 2
    assert f"continue it with: {script} train --resume {run}" in taken.stderr  # runnable as printed


# ---------------------------------------------------------------------- the README
def _section(text: str, title: str) -> str:
    start = text.index(f"\n## {title}\n")
    end = text.find("\n## ", start + 1)
    return text[start:end if end != -1 else None]


def test_readme_opening_and_quick_start_shape():
    text = README.read_text()
    intro = text.split("\n## ", 1)[0].split("\n", 1)[1].strip()
    assert "\n\n" not in intro  # one paragraph stating the job
    quick = _section(text, "Quick start")
    blocks = re.findall(r"```bash\n(.*?)```", quick, flags=re.S)
    assert len(blocks) == 2  # exactly two quick-start commands
    # right after them, once: the commands assume the venv is active, or are called from it
    after = quick.split(blocks[1], 1)[1]
    assert "source .venv/bin/activate" in after.split("\n\n")[1]
    assert ".venv/bin/marl-core" in after.split("\n\n")[1]
    assert text.count("source .venv/bin/activate") == 1


def test_readme_quick_start_output_names_the_runnable_tensorboard():
    quick = _section(README.read_text(), "Quick start")
    # the quick start runs .venv/bin/marl-core without activating the venv: hints name .venv/bin/...
    assert "TensorBoard: .venv/bin/tensorboard --logdir runs/quickstart" in quick


def test_readme_and_docs_python_snippets_run_as_written(tmp_path):
    pages = [README, *sorted((ROOT / "docs").glob("*.md"))]
    snippets = [code for page in pages
                for code in re.findall(r"```python\n(.*?)```", page.read_text(), flags=re.S)]
    games = (ROOT / "docs" / "games.md").read_text()
    assert "```python\n" in games, "docs/games.md has no python snippet"  # the games' API example
    for code in snippets:
        done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120,
                              cwd=tmp_path, env=dict(os.environ, PYTHONPATH=str(ROOT)))
        assert done.returncode == 0, f"{code}\n{done.stderr[-2000:]}"


def test_sweeps_page_and_quick_spec_call_the_quick_sweep_a_smoke_test_with_one_duration():
    import yaml

    spec_text = (ROOT / "configs" / "ablations" / "quick.yaml").read_text()
    header = spec_text.split("\nbase:", 1)[0]
    assert "smoke test" in header.lower()
    assert yaml.safe_load(spec_text)["smoke_test"] is True  # the report says so (report.py)
    page = (ROOT / "docs" / "sweeps.md").read_text()  # the sweeps page (the README links to it)
    assert "smoke test" in page
    durations = set(re.findall(r"(\d+) s measured", header + page))
    assert durations == {"40"}  # one measured duration, the same in both
