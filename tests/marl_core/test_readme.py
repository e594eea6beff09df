"""The README's quick-start example stays honest: the quick start is run once (seed 0, as the README's
example) and its printed table is held to the README's.

The non-learning teams are plain numpy driven by the seed alone, so their columns must match the README's
exactly. The learned team's figures move between CPUs and torch builds (docs/reproducibility.md), so its
efficiency is held only to the range over seeds the README states. Column names are read from the printed
header, never written here, so a renamed team changes nothing in this test.
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
README = ROOT / "README.md"
CONFIG = ROOT / "configs" / "harvest_idqn.yaml"
ROWS = ("return_mean", "efficiency", "equality", "sustainability", "peace")


def _section(text: str, title: str) -> str:
    start = text.index(f"\n## {title}\n")
    end = text.find("\n## ", start + 1)
    return text[start:end if end != -1 else None]


def _table(text: str) -> tuple[list[str], dict[str, list[str]]]:
    """The metrics table `marl-core train` prints at the end: header columns, and row name -> cells."""
    lines = text.splitlines()
    i = next(k for k, line in enumerate(lines) if line.startswith("run: "))
    header = lines[i + 1].split()
    rows = {}
    for line in lines[i + 2:]:
        cells = line.split()
        if not cells or cells[0] not in ROWS:
            break
        rows[cells[0]] = cells[1:]
    return header, rows


@pytest.fixture(scope="module")
def quickstart(tmp_path_factory):
    """Run the quick start once (its config, seed 0) into a temporary run directory; about a minute."""
    out = tmp_path_factory.mktemp("readme") / "quickstart"
    done = subprocess.run([sys.executable, "-m", "marl_core.cli", "train", str(CONFIG), "--out", str(out),
                           "--set", "train.seed=0", "--quiet"],
                          capture_output=True, text=True, cwd=ROOT, timeout=1800)
    assert done.returncode == 0, done.stderr[-2000:]
    return out, done.stdout


@pytest.mark.slow
def test_readme_quick_start_example_matches_a_fresh_run(quickstart):
    out, printed = quickstart
    text = README.read_text()
    quick = _section(text, "Quick start")

    # (a) every non-learning team's column equals the printed one, row by row; columns named by the print
    header, rows = _table(printed)
    readme_header, readme_rows = _table(quick)
    assert header[0] == "learned" and len(readme_header) == len(header)
    assert set(readme_rows) == set(rows) == set(ROWS)
    for col, team in enumerate(header):
        if team == "learned":
            continue
        for row in ROWS:
            assert readme_rows[row][col] == rows[row][col], (team, row, readme_rows[row][col], rows[row][col])

    # (b) the learned efficiency lies in the range over seeds the README states
    found = re.search(r"efficiency ranges from (\d+\.\d+) to (\d+\.\d+)", " ".join(quick.split()))
    assert found, "the README's quick start states no seed range of the learned efficiency"
    low, high = float(found[1]), float(found[2])
    learned = float(rows["efficiency"][header.index("learned")])
    assert low <= learned <= high, (learned, low, high)

    # (c) the README stays short
    assert len(text.splitlines()) <= 200

    # (d) every docs/ page the README names exists
    named = set(re.findall(r"\]\(((?:docs/)?[\w./-]+\.md)\)", text)) | set(re.findall(r"\bdocs/[\w-]+\.md", text))
    assert any(n.startswith("docs/") for n in named)
    missing = sorted(n for n in named if not (ROOT / n).is_file())
    assert not missing, missing

    # (e) the GIF is where the README says the run writes it
    gifs = re.findall(r"runs/quickstart/([\w./-]+\.gif)", quick)
    assert gifs, "the README's quick start names no GIF"
    for name in gifs:
        assert (out / name).is_file(), name
