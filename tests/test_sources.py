"""The sources file, docs/sources.md: nothing cites a file outside the repository, and every citation of a
section of docs/sources.md names a section that exists.

Citation syntax (DEVELOPERS.md, "Tests", and the "How to cite" paragraph at the top of docs/sources.md): the
file name, a comma, a space and the section heading in double quotes, all on one line. The heading may be given in full or without its
closing parenthesis, so "Gini coefficient" and "Gini coefficient (MathWorld)" name the same section. A name
in angle brackets is a placeholder in a description of the syntax and is not checked.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SOURCES = ROOT / "docs" / "sources.md"

# Directories that are not part of the repository's content: the virtualenv, git's own data, and generated
# output and caches (the .gitignore list).
SKIP_DIRS = {".venv", ".git", "__pycache__", ".pytest_cache", ".ruff_cache", "runs", "build"}
SKIP_DIR_SUFFIXES = (".egg-info",)
CITING_SUFFIXES = {".py", ".md", ".yaml"}

# Built from pieces so that this file does not contain them itself.
FORBIDDEN = ("REFER" + "ENCES", ".." + "/" + "shared", "/" + "shared" + "/")

_FILE = re.escape("docs/sources.md")
CITATION = re.compile(_FILE + r', "([^"\n]+)"')
# A citation cut by a line break: the name's opening quote (or the name itself) is not on the line.
BROKEN = re.compile(_FILE + r',[ \t]*(?:"[^"\n]*)?$', re.MULTILINE)
HEADING = re.compile(r"^## (.+?)\s*$", re.MULTILINE)


def _repository_files() -> list[Path]:
    out = []
    stack = [ROOT]
    while stack:
        folder = stack.pop()
        for path in sorted(folder.iterdir()):
            if path.is_symlink():
                continue
            if path.is_dir():
                if path.name not in SKIP_DIRS and not path.name.endswith(SKIP_DIR_SUFFIXES):
                    stack.append(path)
            elif path.is_file():
                out.append(path)
    return out


def _text(path: Path) -> str | None:
    """The file's text, or None for a binary file (a NUL byte, or not UTF-8)."""
    data = path.read_bytes()
    if b"\0" in data:
        return None
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        return None


def _line_of(text: str, index: int) -> int:
    return text.count("\n", 0, index) + 1


def section_names(text: str) -> dict[str, str]:
    """Every name a citation may use -> the heading it names: each ``##`` heading in full, and without its
    closing parenthesis when it has one."""
    names: dict[str, str] = {}
    for heading in HEADING.findall(text):
        short = re.sub(r"\s*\([^()]*\)$", "", heading)
        for name in {heading, short}:
            assert names.get(name, heading) == heading, f"{name!r} names two sections of docs/sources.md"
            names[name] = heading
    return names


FILES = _repository_files()


def test_the_sources_file_exists_and_has_sections():
    assert SOURCES.is_file()
    names = section_names(SOURCES.read_text(encoding="utf-8"))
    # a few of the sections the code and the tests rely on
    for name in ("Social outcome metrics", "Gini coefficient", "Colour palette", "Cleanup",
                 "Gymnasium registry values", "mpe2 simple_spread", "Student t / Welch intervals"):
        assert name in names, name


def test_no_file_cites_a_file_outside_the_repository():
    found = []
    for path in FILES:
        text = _text(path)
        if text is None:
            continue
        for needle in FORBIDDEN:
            for m in re.finditer(re.escape(needle), text):
                found.append(f"{path.relative_to(ROOT)}:{_line_of(text, m.start())}: {needle}")
    assert not found, "cite docs/sources.md instead:\n" + "\n".join(found)


def test_the_forbidden_strings_are_found():
    # the check above would catch each of them (a check of the test itself)
    sample = "see " + FORBIDDEN[0] + ".md in " + FORBIDDEN[1] + " or /work" + FORBIDDEN[2]
    assert all(needle in sample for needle in FORBIDDEN)


def _citations() -> list[tuple[str, int, str]]:
    out = []
    for path in FILES:
        if path.suffix not in CITING_SUFFIXES:
            continue
        text = _text(path)
        if text is None:
            continue
        for m in CITATION.finditer(text):
            out.append((str(path.relative_to(ROOT)), _line_of(text, m.start()), m.group(1)))
    return out


def test_citation_parser():
    text = ('a (docs/sources.md, "Gini coefficient") b\n'
            '# docs/sources.md, "DQN"; docs/sources.md, "MADDPG"\n')
    assert CITATION.findall(text) == ["Gini coefficient", "DQN", "MADDPG"]
    assert BROKEN.search("x docs/sources.md, \"Interquartile mean\nand intervals\"")
    assert BROKEN.search("x docs/sources.md,\n\"DQN\"")
    assert not BROKEN.search(text)
    names = section_names("## Gini coefficient (MathWorld)\n\n## Student t / Welch intervals\n")
    assert set(names) == {"Gini coefficient", "Gini coefficient (MathWorld)", "Student t / Welch intervals"}


def test_every_cited_section_exists():
    names = section_names(SOURCES.read_text(encoding="utf-8"))
    citations = _citations()
    assert citations, "no citation of docs/sources.md found: the parser or the syntax changed"
    missing = [f"{f}:{line}: {name!r}" for f, line, name in citations
               if name not in names and not (name.startswith("<") and name.endswith(">"))]
    assert not missing, ("these citations name no section of docs/sources.md (its ## headings, in full or "
                         "without the closing parenthesis):\n" + "\n".join(missing))


@pytest.mark.parametrize("suffix", sorted(CITING_SUFFIXES))
def test_no_citation_is_cut_by_a_line_break(suffix):
    broken = []
    for path in FILES:
        if path.suffix != suffix:
            continue
        text = _text(path)
        if text is None:
            continue
        for m in BROKEN.finditer(text):
            broken.append(f"{path.relative_to(ROOT)}:{_line_of(text, m.start())}")
    assert not broken, "keep each citation of docs/sources.md on one line:\n" + "\n".join(broken)
