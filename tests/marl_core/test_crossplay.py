"""marl-core crossplay (marl_core/crossplay.py): every seating of runs' agents, its table, heatmaps, errors.

The numbers are checked against an exact computation outside the code under test: for memory-one players
in a repeated matrix game, the expected return over T rounds follows from the joint-action distribution
pushed forward round by round (a Markov chain; common practice (no source): textbook algebra).
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest

from marl_core import train
from marl_core.cli import main
from marl_core.config import load_config, parse_config
from marl_core.crossplay import crossplay
from marl_core.errors import CheckpointError, RunDirError
from marl_core.policy import MemoryOnePolicy, load_policy

ROOT = Path(__file__).resolve().parents[2]
ROUNDS = 20
IPD = np.array([[[-1, -1], [-3, 0]], [[0, -3], [-2, -2]]], float)  # ipd_lola.yaml's table


def _lola_run(tmp: Path, name: str, shaping: bool, seed: int) -> Path:
    cfg = load_config(ROOT / "configs" / "ipd_lola.yaml", [
        "learner.updates=15", "learner.eval_every_updates=15", "train.eval_episodes=8", "log.tensorboard=false",
        f"learner.opponent_shaping={str(shaping).lower()}", f"train.seed={seed}", f"env.params.max_cycles={ROUNDS}"])
    train.run(cfg, tmp / name)
    return tmp / name


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("runs")
    return _lola_run(tmp, "lola", True, 0), _lola_run(tmp, "naive", False, 1)


def _expected_return(p0: np.ndarray, p1: np.ndarray, rounds: int) -> np.ndarray:
    """Expected return of each seat over ``rounds`` rounds: d_{t+1} = d_t P, return = sum_t d_t . r."""
    def joint(q0, q1):
        return np.outer([q0, 1 - q0], [q1, 1 - q1]).ravel()
    d = joint(p0[0], p1[0])
    trans = np.stack([joint(p0[1 + s], p1[1 + s]) for s in range(4)])
    r = IPD.reshape(4, 2)
    total = np.zeros(2)
    for _ in range(rounds):
        total += d @ r
        d = d @ trans
    return total


def test_every_seating_is_played_and_matches_the_exact_expectation(two_runs, tmp_path):
    a, b = two_runs
    res = crossplay([str(a), str(b)], tmp_path / "cp", episodes=400, members=["random"])
    assert [s["label"] for s in res["sources"]] == ["lola", "naive", "random"]
    assert len(res["cells"]) == 9
    rows = list(csv.DictReader((tmp_path / "cp" / "crossplay.csv").open()))
    pa = {ag: load_policy(a / "policies" / f"{ag}.pt").probs for ag in ("agent_0", "agent_1")}
    pb = {ag: load_policy(b / "policies" / f"{ag}.pt").probs for ag in ("agent_0", "agent_1")}
    # focal lola in seat 0 beside naive's agent_1; focal lola in seat 1 beside naive's agent_0
    cases = {"agent_0": _expected_return(pa["agent_0"], pb["agent_1"], ROUNDS)[0],
             "agent_1": _expected_return(pb["agent_0"], pa["agent_1"], ROUNDS)[1]}
    for seat, exact in cases.items():
        row = next(r for r in rows if (r["focal"], r["others"], r["focal_seat"]) == ("lola", "naive", seat))
        low, high = float(row["focal_return_low"]), float(row["focal_return_high"])
        mean = float(row["focal_return"])
        half = (high - low) / 2
        # the 95% interval over 400 episodes, widened to about 4 standard errors (common practice, no source)
        assert abs(mean - exact) <= 2 * half + 1e-9, (seat, mean, exact, low, high)
    # self-play of a run is the run's own team: both seats' returns are the exact ones of its two policies
    self_row = next(r for r in rows if (r["focal"], r["others"]) == ("lola", "lola"))
    exact_team = _expected_return(pa["agent_0"], pa["agent_1"], ROUNDS).mean()
    assert abs(float(self_row["focal_return"]) - exact_team) <= (float(self_row["focal_return_high"])
                                                                 - float(self_row["focal_return_low"])) + 1e-9
    for metric in ("efficiency", "equality", "sustainability", "peace", "focal_return", "others_return"):
        png = tmp_path / "cp" / f"heatmap_{metric}.png"
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    data = json.loads((tmp_path / "cp" / "crossplay.json").read_text())
    assert set(data["gap"]) >= {"efficiency", "focal_return"}


def test_runs_under_one_label_are_seeds_and_give_intervals_over_them(two_runs, tmp_path):
    a, b = two_runs
    c = _lola_run(tmp_path, "lola_seed2", True, 2)
    res = crossplay([f"lola={a}", f"lola={c}", f"naive={b}"], tmp_path / "cp", episodes=8)
    cell = next(x for x in res["cells"] if (x["focal"], x["others"]) == ("lola", "naive"))
    assert cell["run_pairs"] == 2 and cell["interval_over"] == "seeds"
    self_cell = next(x for x in res["cells"] if (x["focal"], x["others"]) == ("lola", "lola"))
    assert self_cell["run_pairs"] == 2  # each run with itself


def test_a_memory_one_player_reads_the_other_seat_with_the_blocks_swapped():
    tft_as_agent_0 = MemoryOnePolicy(np.log(np.array([1e6, 1e6, 1e-6, 1e6, 1e-6])), "agent_0", 0)
    in_seat_1 = tft_as_agent_0.for_seat(1)
    # observation: agent_0 defected, agent_1 cooperated -> (1, 0) one-hot blocks [0, 1, 1, 0]
    obs = np.array([[0, 1, 1, 0]], np.uint8)
    assert tft_as_agent_0.act(obs)[0] == 0  # in its own seat: the other (agent_1) cooperated -> cooperate
    assert in_seat_1.act(obs)[0] == 1       # in seat 1: the other (agent_0) defected -> defect


def test_cli_prints_the_table_and_the_gap(two_runs, tmp_path, capsys):
    a, b = two_runs
    assert main(["crossplay", str(a), str(b), "--out", str(tmp_path / "cp"), "--episodes", "4", "--by",
                 "seat"]) == 0
    drawn = {p.name for p in (tmp_path / "cp").glob("heatmap_*.png")}
    assert {"heatmap_efficiency.png", "heatmap_efficiency_agent_0.png", "heatmap_efficiency_agent_1.png"} <= drawn
    out = capsys.readouterr().out
    assert "cross-play of lola, naive on matrix_v0" in out and "cross-play gap" in out
    assert out.startswith("playing lola with lola (self-play); 1 seatings so far")  # progress as it plays


def _tiny_harvest(tmp: Path, name: str, radius: int) -> Path:
    cfg = parse_config({"env": {"name": "harvest_v0", "num_envs": 2,
                                "params": {"layout": "harvest_tiny", "num_agents": 2, "view_radius": radius,
                                           "max_cycles": 30}},
                        "learner": {"hidden": 8, "conv_channels": [4], "batch_size": 8, "replay_size": 200,
                                    "warmup_steps": 20},
                        "train": {"total_steps": 60, "eval_every": 60, "eval_episodes": 2,
                                  "checkpoint_every": 60},
                        "log": {"tensorboard": False, "gif_every": 0, "progress": False}})
    train.run(cfg, tmp / name)
    return tmp / name


def test_grid_runs_cross_play_with_a_scripted_member(tmp_path):
    a, b = _tiny_harvest(tmp_path, "a", 2), _tiny_harvest(tmp_path, "b", 2)
    res = crossplay([str(a), str(b)], tmp_path / "cp", episodes=2, members=["greedy"])
    assert len(res["cells"]) == 9
    greedy = next(x for x in res["cells"] if (x["focal"], x["others"]) == ("greedy", "greedy"))
    assert greedy["efficiency"] > 0  # the scripted team harvests
    # every interval stays in its measure's range (envs/metrics.py): peace in [0, N], equality at most 1
    for c in res["cells"]:
        assert 0.0 <= c["peace_low"] <= c["peace_high"] <= 2.0 and c["equality_high"] <= 1.0
    # each cross cell of learned sources beside their self-play, and the gap normalised by it
    cells = {(c["focal"], c["others"]): c for c in res["cells"]}
    norm = {(r["focal"], r["others"], r["measure"]): r for r in res["gap_normalised"]["cells"]}
    assert {(f, o) for f, o, _ in norm} == {("a", "b"), ("b", "a")}  # the member takes no part
    for m in ("focal_return", "efficiency"):
        r = norm["a", "b", m]
        ref = (cells["a", "a"][m] + cells["b", "b"][m]) / 2
        assert (r["self_focal"], r["self_others"]) == (cells["a", "a"][m], cells["b", "b"][m])
        assert r["normalised"] == (pytest.approx(1 - cells["a", "b"][m] / ref) if ref > 0 else None)


@pytest.mark.parametrize("case, message", [
    ("no_policy", r"^crossplay: run '.*' has no policy for agent_0 \(.*agent_0\.pt not found\)"),
    ("shape", r"^crossplay: policy '.*' expects observations of shape \(.*\); the game gives \(.*\)$"),
    ("game", r"^crossplay: run '.*' played 'matrix_v0'; run '.*' played 'harvest_v0'"),
    ("member", r"^crossplay: --with 'greedy' is not allowed for 'matrix_v0'; expected one of random$"),
])
def test_bad_inputs_get_one_line_and_write_nothing(case, message, two_runs, tmp_path, capsys):
    a, b = two_runs
    if case == "no_policy":
        broken = tmp_path / "broken"
        broken.mkdir()
        (broken / "config.yaml").write_text((a / "config.yaml").read_text())
        args, err = [str(broken)], CheckpointError
    elif case == "shape":
        args, err = [str(_tiny_harvest(tmp_path, "r2", 2)), str(_tiny_harvest(tmp_path, "r3", 3))], CheckpointError
    elif case == "game":
        args, err = [str(_tiny_harvest(tmp_path, "h", 2)), str(a)], RunDirError
    else:
        args, err = [str(a)], RunDirError
    members = ["greedy"] if case == "member" else []
    with pytest.raises(err, match=message):
        crossplay(args, tmp_path / "cp", episodes=4, members=members)
    assert not (tmp_path / "cp").exists()
    cli = ["crossplay", *args, "--out", str(tmp_path / "cp"), "--episodes", "4"]
    cli += [x for m in members for x in ("--with", m)]
    assert main(cli) == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("marl-core: error: crossplay:")
    assert not (tmp_path / "cp").exists()


def test_an_existing_out_directory_is_refused(two_runs, tmp_path):
    a, _ = two_runs
    (tmp_path / "cp").mkdir()
    (tmp_path / "cp" / "keep.txt").write_text("mine")
    with pytest.raises(RunDirError, match="already exists and is not empty"):
        crossplay([str(a)], tmp_path / "cp")
    assert (tmp_path / "cp" / "keep.txt").read_text() == "mine"


def test_runs_of_one_name_without_labels_are_refused(two_runs, tmp_path):
    a, _ = two_runs
    twin = tmp_path / "other" / a.name
    twin.parent.mkdir()
    twin.symlink_to(a, target_is_directory=True)
    with pytest.raises(RunDirError, match=r"^crossplay: two sources are named 'lola'; label them apart"):
        crossplay([str(a), str(twin)], tmp_path / "cp")
    assert not (tmp_path / "cp").exists()
