"""The package's layout: stages of one flow, imports only downward, small modules.

Data flows one way (DESIGN §6): model -> designs -> engine -> estimators -> meanfield ->
calibration -> study -> planning -> report -> cli. A module may import its own stage and
earlier ones, never a later one; the shared helpers import only each other. Every import
counts, also those inside functions (a lazy import is still a dependency); only imports
under ``if TYPE_CHECKING:`` are left out, since they never run. The checker reads the
source with ``ast`` and runs nothing.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "marketsim"
STAGES = ("model", "designs", "engine", "estimators", "meanfield", "calibration", "study",
          "planning", "report", "cli")
SHARED = ("_validation", "randomness", "power")
"""Helpers every stage may import: checks of input, seeds, normal-theory power."""
TOP = ("__init__", "__main__")
MAX_LINES = 400


def stage_of(module: str) -> tuple[int, str]:
    """Rank and name of the stage a dotted module name (``marketsim.x.y``) belongs to."""
    parts = module.split(".")
    head = parts[1] if len(parts) > 1 else "__init__"
    if head in SHARED:
        return -1, "shared helpers"
    if head in STAGES:
        return STAGES.index(head), head
    if head in TOP:
        return len(STAGES), "the package's front"
    raise ValueError(f"module {module} belongs to no stage: add it to STAGES or SHARED")


def module_name(path: Path, root: Path) -> str:
    relative = path.relative_to(root.parent).with_suffix("")
    parts = list(relative.parts)
    if parts[-1] == "__init__" and len(parts) > 1:
        parts = parts[:-1]
    return ".".join(parts)


def _type_checking_lines(tree: ast.AST) -> set[int]:
    lines: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            for inner in node.body:
                lines.update(range(inner.lineno, (inner.end_lineno or inner.lineno) + 1))
    return lines


def imports_of(path: Path, root: Path) -> list[tuple[int, str]]:
    """(line, dotted name) of every package import in ``path`` that can run.

    For ``from a.b import c`` the name is ``a.b.c``: the module ``c`` or a name in ``a.b``.
    """
    tree = ast.parse(path.read_text(), filename=str(path))
    skipped = _type_checking_lines(tree)
    package = root.name
    own = module_name(path, root)
    found = []
    for node in ast.walk(tree):
        if getattr(node, "lineno", None) in skipped:
            continue
        if isinstance(node, ast.Import):
            found += [(node.lineno, a.name) for a in node.names
                      if a.name.split(".")[0] == package]
        elif isinstance(node, ast.ImportFrom):
            if node.level:  # relative import: resolve against this module's package
                base = own.split(".")
                base = base[: len(base) - node.level + (1 if path.name == "__init__.py" else 0)]
                target = ".".join([*base, node.module] if node.module else base)
            else:
                target = node.module or ""
            if target.split(".")[0] != package:
                continue
            # `from marketsim.x import y`: y is a module of x or a name defined in x
            found += [(node.lineno, f"{target}.{a.name}") for a in node.names]
    return found


def layering_problems(root: Path) -> list[str]:
    """Every upward import and every module over MAX_LINES lines below ``root``."""
    problems = []
    for path in sorted(root.rglob("*.py")):
        shown = path.relative_to(root.parent)
        lines = len(path.read_text().splitlines())
        if lines > MAX_LINES:
            problems.append(f"{shown} has {lines} lines (at most {MAX_LINES}: split it by job)")
        own_rank, own_stage = stage_of(module_name(path, root))
        for line, target in imports_of(path, root):
            rank, stage = stage_of(target)
            if rank > own_rank:
                problems.append(
                    f"{shown}:{line} imports {target} (stage {stage!r}) from stage "
                    f"{own_stage!r}: a stage may import only itself and earlier stages "
                    f"({' -> '.join(STAGES)})"
                )
    return problems


def import_cycles(root: Path) -> list[list[str]]:
    """Circles in the graph of module imports (each reported once)."""
    graph: dict[str, set[str]] = {}
    modules = {module_name(p, root): p for p in root.rglob("*.py")}
    for name, path in modules.items():
        targets = set()
        for _, target in imports_of(path, root):
            while target not in modules and "." in target:  # a name inside a module
                target = target.rsplit(".", 1)[0]
            if target in modules and target != name:
                targets.add(target)
        graph[name] = targets
    cycles, state = [], {}

    def visit(node: str, trail: list[str]) -> None:
        state[node] = "open"
        for nxt in sorted(graph[node]):
            if state.get(nxt) == "open":
                cycles.append([*trail[trail.index(nxt):], nxt])
            elif nxt not in state:
                visit(nxt, [*trail, nxt])
        state[node] = "done"

    for start in sorted(graph):
        if start not in state:
            visit(start, [start])
    return cycles


def test_every_module_belongs_to_a_stage():
    for path in PACKAGE.rglob("*.py"):
        stage_of(module_name(path, PACKAGE))


def test_imports_only_go_downward_and_modules_stay_small():
    problems = layering_problems(PACKAGE)
    assert not problems, "\n".join(problems)


def test_stages_say_their_job_and_what_they_may_import():
    for stage in STAGES:
        init = PACKAGE / stage / "__init__.py"
        if not init.exists():
            continue
        doc = ast.get_docstring(ast.parse(init.read_text())) or ""
        assert doc, f"{init} must open with a docstring on the stage's job"
        assert "May import" in doc, f"{init}: say which stages it may import"


def _plant(tmp_path: Path, files: dict[str, str]) -> Path:
    root = tmp_path / "marketsim"
    for name, text in files.items():
        target = root / name
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_text(text)
    return root


def test_the_checker_catches_an_upward_import_by_file_and_line(tmp_path):
    root = _plant(tmp_path, {
        "__init__.py": "",
        "engine/__init__.py": '"""May import: model."""\n',
        "engine/runner.py": "import numpy\n\n\ndef f():\n    from marketsim.meanfield import x\n",
        "meanfield/__init__.py": "from marketsim.engine import runner\n",
    })
    problems = layering_problems(root)
    assert len(problems) == 1
    assert problems[0].startswith("marketsim/engine/runner.py:5 imports marketsim.meanfield.x "
                                  "(stage 'meanfield') from stage 'engine'")


def test_the_checker_ignores_type_checking_imports_and_counts_lines(tmp_path):
    root = _plant(tmp_path, {
        "__init__.py": "",
        "model/__init__.py": ("from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n"
                              "    from marketsim.study import Study\n"),
        "model/long.py": "x = 1\n" * (MAX_LINES + 1),
    })
    assert layering_problems(root) == [
        f"marketsim/model/long.py has {MAX_LINES + 1} lines (at most {MAX_LINES}: split it by job)"
    ]


def test_no_import_circles():
    assert import_cycles(PACKAGE) == []


def test_the_checker_finds_a_circle(tmp_path):
    root = _plant(tmp_path, {
        "__init__.py": "",
        "designs/__init__.py": "",
        "designs/a.py": "from marketsim.designs import b\n",
        "designs/b.py": "from marketsim.designs.a import thing\n",
    })
    assert import_cycles(root) == [["marketsim.designs.a", "marketsim.designs.b",
                                    "marketsim.designs.a"]]


@pytest.mark.parametrize("module", ["marketsim.study.study", "marketsim.cli"])
def test_stage_of_reads_dotted_names(module):
    rank, _ = stage_of(module)
    assert 0 <= rank < len(STAGES)
