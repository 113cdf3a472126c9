"""Issue 8, item 8: files named in --help texts and in README exist; no pointer to a
conventions file that users do not have."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from lyacomp.cli import SUBCOMMANDS, build_parser

ROOT = Path(__file__).resolve().parents[1]
# paths inside the repository (outputs such as map.png or generated/ are not checked)
REPO_PATH = re.compile(r"(?<![\w/.-])((?:examples|docs|lyacomp|benchmarks|tests)/[\w./-]*\w)")


def _help_texts() -> dict[str, str]:
    parser = build_parser()
    sub = next(a for a in parser._actions if a.choices and "eval" in a.choices)
    texts = {"lyacomp": parser.format_help()}
    for name, subparser in sub.choices.items():
        texts[name] = subparser.format_help()
    return texts


def test_every_subcommand_has_help():
    assert len(_help_texts()) == len(SUBCOMMANDS) + 1


@pytest.mark.parametrize("name", ["README.md", "DEVELOPERS.md", "--help"])
def test_named_paths_exist(name):
    if name == "--help":
        text = "\n".join(_help_texts().values())
    else:
        text = (ROOT / name).read_text()
    paths = set(REPO_PATH.findall(text))
    if name != "DEVELOPERS.md":
        assert paths, "the pattern should find the example files"
    missing = sorted(p for p in paths if not (ROOT / p).exists())
    assert not missing, f"{name} names files that do not exist: {missing}"


def test_no_user_facing_pointer_to_math_md():
    texts = [(ROOT / n).read_text() for n in ("README.md", "DEVELOPERS.md")]
    texts += [p.read_text() for p in (ROOT / "docs").glob("*.md")]
    texts += list(_help_texts().values())
    texts += [p.read_text() for p in (ROOT / "lyacomp").rglob("*.py")]
    for text in texts:
        assert "math.md" not in text.replace("mathematics.md", "")


def test_sources_cite_the_projects_own_document():
    # tests, benchmarks, templates and examples name conventions by docs/mathematics.md,
    # never by a file outside the repository
    files = [p for p in (ROOT / "tests").rglob("*.py") if p.name != Path(__file__).name]
    files += [*(ROOT / "benchmarks").glob("*.py"), *(ROOT / "templates").glob("*.j2")]
    files += [p for p in (ROOT / "examples").iterdir() if p.is_file()]
    assert len(files) > 50
    cited = [p.name for p in files if "math.md" in p.read_text().replace("mathematics.md", "")]
    assert not cited, f"these files cite a conventions file users do not have: {cited}"
    assert (ROOT / "docs" / "mathematics.md").exists()


def test_cold_compile_announces_itself(caplog):
    import logging
    import uuid

    import lyacomp

    name = f"progress note {uuid.uuid4().hex[:8]}"  # a model no cache has seen
    model = lyacomp.Model(
        name=name,
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": 0.0},
        equations={"x": "mu*x - y - x**3", "y": "x"},
        bifurcation="mu",
    )
    with caplog.at_level(logging.INFO, logger="lyacomp.progress"):
        lyacomp.compile(model)
    notes = [r.getMessage() for r in caplog.records if r.name == "lyacomp.progress"]
    assert notes == [f"compiling {name!r} (first use; a few seconds) ..."]
    caplog.clear()
    with caplog.at_level(logging.INFO, logger="lyacomp.progress"):
        lyacomp.compile(model)  # from the cache: no note
    assert not [r for r in caplog.records if r.name == "lyacomp.progress"]
