"""References cite a paper by title, venue and year, never by its authors' names.

The 2022 Management Science paper "Experimental design in two-sided platforms: an
analysis of bias" and its companion papers are cited by title, venue and year only
(the project's rule, see DEVELOPERS.md). This test reads every text file of the
repository (code, tests, README, docs, notebooks, benchmarks, scripts) and fails,
naming file and line, if one of the authors' surnames appears. The surnames are kept
here rot13-encoded so that this file does not break the rule it checks.
"""

from __future__ import annotations

import codecs
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
ENCODED = ("Wbunev", "Yvfxbivpu", "Jrvagenho")
"""The surnames, rot13-encoded (``codecs.encode(name, "rot13")`` decodes them)."""
SKIPPED_DIRS = {".git", ".venv", "__pycache__", ".pytest_cache", ".ruff_cache", ".hypothesis",
                "build", "dist", "marketsim-report"}
TEXT_SUFFIXES = {".py", ".md", ".ipynb", ".txt", ".toml", ".cfg", ".ini", ".json", ".sh",
                 ".yml", ".yaml", ".rst", ".csv", ""}


def _text_files() -> list[Path]:
    files = []
    for path in ROOT.rglob("*"):
        parts = set(path.relative_to(ROOT).parts)
        if parts & SKIPPED_DIRS or any(p.endswith(".egg-info") for p in parts):
            continue
        if path.is_file() and path.suffix in TEXT_SUFFIXES:
            files.append(path)
    return files


def _pattern() -> re.Pattern[str]:
    names = [codecs.decode(name, "rot13") for name in ENCODED]
    return re.compile(r"\b(" + "|".join(names) + r")\b", re.IGNORECASE)


def test_no_author_names_anywhere():
    pattern = _pattern()
    found = []
    files = _text_files()
    assert any(p.name == "README.md" for p in files) and len(files) > 20
    for path in files:
        try:
            text = path.read_text(encoding="utf-8")
        except UnicodeDecodeError:
            continue
        for number, line in enumerate(text.splitlines(), start=1):
            if pattern.search(line):
                found.append(f"{path.relative_to(ROOT)}:{number}")
    assert not found, ("cite the 2022 Management Science paper by title, venue and year, "
                       "not by its authors' names; found in " + ", ".join(found))


def test_the_check_can_fail():
    """The pattern catches a surname in running text (so the test above can fail)."""
    name = codecs.decode(ENCODED[0], "rot13")
    assert _pattern().search(f"after {name} et al. (2022)")
    assert not _pattern().search("Experimental design in two-sided platforms (2022)")
