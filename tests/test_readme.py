"""Every output the README shows is produced by its code in the test suite.

The README's examples run as doctests (pyproject: ``--doctest-glob=README.md``); an
example marked ``+SKIP`` would show an output nobody checks, which is how README outputs
went stale before. These checks fail when that can happen again.
"""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")


def test_no_readme_example_is_skipped():
    skipped = [n + 1 for n, line in enumerate(README.splitlines()) if "+SKIP" in line]
    assert not skipped, f"README.md lines {skipped} skip their doctest: run them in quick mode"


def test_readme_doctests_are_collected():
    settings = (ROOT / "pyproject.toml").read_text(encoding="utf-8")
    addopts = re.search(r"^addopts = (.*)$", settings, flags=re.M).group(1)
    testpaths = re.search(r"^testpaths = (.*)$", settings, flags=re.M).group(1)
    assert "--doctest-glob=README.md" in addopts
    assert '"README.md"' in testpaths


def test_python_blocks_show_no_output_outside_doctests():
    """A ```python block is either a doctest (its outputs are checked) or plain code that
    compiles (code that needs a cluster, say, and shows no output)."""
    blocks = re.findall(r"```python\n(.*?)```", README, flags=re.S)
    assert blocks
    for block in blocks:
        if not block.lstrip().startswith(">>>"):
            compile(block, "README.md", "exec")  # output text here would not compile
