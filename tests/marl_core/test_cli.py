"""The command line: the demo writes its GIFs and prints the metrics; mistakes are one line and exit 2."""

import json
import re
from pathlib import Path

import pytest

import envs
from marl_core.cli import main

# the games' reference (docs/games.md, linked from the README) documents every parameter
GAMES_PAGE = Path(__file__).resolve().parents[2] / "docs" / "games.md"


def test_demo_writes_gifs_and_prints_metrics(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path), "--steps", "60", "--agents", "3"]) == 0
    out = capsys.readouterr().out
    for word in ("efficiency", "equality", "sustainability", "peace", "greedy", "one_cleaner"):
        assert word in out
    gifs = sorted(p.name for p in tmp_path.glob("*.gif"))
    assert gifs == ["cleanup_v0_nobody_cleans.gif", "cleanup_v0_one_cleaner.gif",
                    "harvest_v0_greedy.gif", "harvest_v0_restrained.gif"]
    from PIL import Image

    with Image.open(tmp_path / gifs[0]) as im:
        assert im.n_frames == 61  # reset frame + one per step


@pytest.mark.parametrize("argv, field", [
    (["demo", "--agents", "0", "--no-gif"], "num_agents"),
    (["demo", "--agents", "7", "--no-gif"], "num_agents"),
    (["demo", "--steps", "0", "--no-gif"], "max_cycles"),
    (["demo", "--steps", "many"], "--steps"),
    (["launch"], "launch"),
])
def test_user_mistakes_are_one_line_and_exit_2(argv, field, capsys, tmp_path):
    assert main([*argv, "--out", str(tmp_path / "x")] if argv[0] == "demo" else argv) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and field in err
    assert not (tmp_path / "x").exists()  # nothing half-written


def test_envs_lists_every_game_and_parameter(capsys):
    assert main(["envs", "--json"]) == 0
    listed = json.loads(capsys.readouterr().out)
    assert list(listed) == list(envs.GAMES)
    assert [p["name"] for p in listed["harvest_v0"]] == [p.name for p in envs.harvest_v0.PARAMS]


def _table_rows(text, header_start):
    lines = text.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith(header_start))
    rows = {}
    for line in lines[start + 2:]:
        if not line.startswith("|"):
            break
        cells = [c.strip() for c in line.strip("|").split("|")]
        rows[cells[0].strip("`")] = cells
    return rows


def _shown(value):
    return ", ".join(f"{v:g}" for v in value) if isinstance(value, list) else f"`{value}`"


def test_games_page_documents_every_parameter_with_its_default():
    text = GAMES_PAGE.read_text()
    grid = _table_rows(text, "| parameter | type | harvest_v0 | cleanup_v0 |")
    for column, game in ((2, "harvest_v0"), (3, "cleanup_v0")):
        for p in envs.game_module(game).PARAMS:
            assert p.name in grid, f"docs/games.md has no row for {game}.{p.name}"
            assert grid[p.name][column].strip("`") == _shown(p.default).strip("`"), (game, p.name)
    matrix = _table_rows(text, "| `matrix_v0` parameter |")
    for p in envs.matrix_v0.PARAMS:
        assert p.name in matrix and matrix[p.name][2].strip("`") == str(p.default), p.name


def _envs_table(capsys, monkeypatch, columns: int) -> str:
    monkeypatch.setenv("COLUMNS", str(columns))  # shutil.get_terminal_size reads COLUMNS first
    assert main(["envs"]) == 0
    return capsys.readouterr().out


@pytest.mark.parametrize("columns", [80, 100, 160])
def test_envs_table_cells_stay_in_their_columns(capsys, monkeypatch, columns):
    out = _envs_table(capsys, monkeypatch, columns)
    rows = [line for line in out.splitlines() if line.startswith("  ")]
    # the column starts, from the first row: name, type, default, meaning each begin after a run of spaces
    first = rows[0]
    starts = [m.start() for m in re.finditer(r"(?:(?<=^)|(?<=\s\s))\S", first)]
    assert len(starts) == 4, first
    for line in rows:
        for c in starts[1:]:
            # the two characters before every column start are blank: no cell ran into the next column
            assert line[c - 2:c].strip() == "", (c, line)
        if line[:starts[1]].strip():  # the first line of a parameter: its cells begin at the column starts
            cells = [line[a:b].strip() for a, b in zip(starts, [*starts[1:], None])]
            assert all(cells[:2]) and line[starts[1]] != " " and line[starts[2]] != " ", line
    assert max(len(line) for line in out.splitlines()) <= max(columns, starts[3] + 30)  # cli.py _widths


def test_envs_table_wraps_a_long_default_without_losing_it(capsys, monkeypatch):
    out = _envs_table(capsys, monkeypatch, 100)
    lines = out.splitlines()
    i = next(k for k, line in enumerate(lines) if line.split()[:1] == ["regrow_table"])
    starts = [m.start() for m in re.finditer(r"(?:(?<=^)|(?<=\s\s))\S", lines[i])]
    end = starts[3]
    cell = [lines[i][starts[2]:end].strip()]
    for line in lines[i + 1:]:
        if line[:starts[2]].strip():  # the next parameter
            break
        cell.append(line[starts[2]:end].strip())
    default = next(p for p in envs.harvest_v0.PARAMS if p.name == "regrow_table").default
    assert len(cell) > 1  # it is long enough to wrap at 100 columns
    assert " ".join(c for c in cell if c) == _shown(default)  # every value, in docs/games.md's spelling


def test_small_cli_courtesies(tmp_path, capsys):
    from marl_core import __version__

    with pytest.raises(SystemExit) as done:  # argparse's version action prints and exits 0
        main(["--version"])
    assert done.value.code == 0 and capsys.readouterr().out.strip() == f"marl-core {__version__}"
    # a space for the '=' in --set names the fix
    assert main(["train", "configs/harvest_idqn.yaml", "--out", str(tmp_path / "r"), "--set", "learner.lr",
                 "1e-3"]) == 2
    assert capsys.readouterr().err.strip() == ("marl-core: error: --set learner.lr: expected KEY=VALUE with an "
                                               "'=' (e.g. --set learner.lr=1e-3)")
    assert not (tmp_path / "r").exists()
    # a directory that does not exist says so
    assert main(["evaluate", str(tmp_path / "typo")]) == 2
    assert capsys.readouterr().err.strip() == f"marl-core: error: run directory '{tmp_path / 'typo'}' does not exist"
    (tmp_path / "empty").mkdir()
    assert main(["evaluate", str(tmp_path / "empty")]) == 2
    assert "is not a run directory (no config.yaml)" in capsys.readouterr().err


def test_envs_lists_games_with_a_header_layouts_matrix_games_and_other_envs(capsys, monkeypatch):
    from envs.layouts import bundled_layouts
    from envs.matrix_v0 import GAME_CHOICES

    out = " ".join(_envs_table(capsys, monkeypatch, 100).split())
    assert "harvest_v0 (metrics: efficiency, equality, sustainability, peace)" in out
    assert "matrix_v0 (metrics: efficiency)" in out
    assert "parameter type default meaning" in out
    assert all(name in out for name in bundled_layouts()) and all(g in out for g in GAME_CHOICES)
    assert "'module:callable'" in out and "'gymnasium:ID'" in out
