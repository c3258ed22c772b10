"""The package's folders are its stages, and data flows one way: no stage imports a later one.

The order is the project's design (DEVELOPERS.md, "Layout"); this test reads every module's
imports with the standard library's ast module and fails on an import that points backwards.
"""

from __future__ import annotations

import ast
import subprocess
from pathlib import Path

from conftest import ROOT

STAGES = ("version", "vocabulary", "ruleset", "intake", "derive", "evaluation", "results", "render", "ledger",
          "authoring", "cli")
PACKAGE = ROOT / "engine"
# The project's top level, fixed by its design (DEVELOPERS.md, "Layout"): anything else there is a slip.
TOP_LEVEL = {"README.md", "DEVELOPERS.md", "LICENSE", "Makefile", "pyproject.toml", ".gitignore", ".ci", "engine",
             "rules", "tests", "scenarios", "benchmarks", "docs"}
# What a run leaves at the top level and .gitignore keeps out of the repository.
BUILT = {".git", ".venv", ".pytest_cache", ".hypothesis", "out", "build", "sumpwise.egg-info"}


def _stage(module_path: Path) -> str:
    parts = module_path.relative_to(PACKAGE).with_suffix("").parts
    return parts[0]


def _imports(path: Path) -> list[tuple[int, str]]:
    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.append((node.lineno, node.module))
        elif isinstance(node, ast.Import):
            found.extend((node.lineno, alias.name) for alias in node.names)
    return [(line, name) for line, name in found if name == "sumpwise" or name.startswith("sumpwise.")]


def test_every_module_lives_in_a_stage_folder():
    loose = sorted(p.name for p in PACKAGE.glob("*.py") if p.stem not in ("__init__", "__main__", "version"))
    assert loose == []


def _top_level_entries() -> set[str]:
    """The repository's own top-level entries: git's list in a clone, the folder's without one."""
    if (ROOT / ".git").exists():
        listed = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True, check=True).stdout
        return {line.split("/")[0] for line in listed.splitlines()}
    return {p.name for p in ROOT.iterdir()} - BUILT


def test_the_top_level_holds_only_the_designed_entries():
    """Scratch files committed at the top level (four stray workbooks once were) fail here."""
    assert _top_level_entries() - TOP_LEVEL == set()


def test_no_stage_imports_a_later_stage():
    backwards = []
    for path in sorted(PACKAGE.rglob("*.py")):
        stage = _stage(path)
        if stage in ("__init__", "__main__"):
            continue
        for line, name in _imports(path):
            parts = name.split(".")
            if len(parts) < 2 or parts[1] not in STAGES:
                backwards.append(f"{path.relative_to(ROOT)}:{line} imports the package root {name}")
            elif STAGES.index(parts[1]) > STAGES.index(stage):
                backwards.append(f"{path.relative_to(ROOT)}:{line} ({stage}) imports {name}")
    assert backwards == []


def test_the_package_uses_absolute_imports_only():
    relative = [f"{p.relative_to(ROOT)}:{n.lineno}" for p in sorted(PACKAGE.rglob("*.py"))
                for n in ast.walk(ast.parse(p.read_text(encoding="utf-8")))
                if isinstance(n, ast.ImportFrom) and n.level > 0]
    assert relative == []


def test_exit_codes_are_defined_once():
    """Every command returns the names of cli/exit_codes.py, never a number of its own."""
    found = []
    for path in sorted((PACKAGE / "cli").glob("*.py")):
        if path.name == "exit_codes.py":
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Assign) and any(isinstance(t, (ast.Name, ast.Tuple)) and
                                                    {"OK", "INTERNAL", "USAGE", "FINDINGS"} &
                                                    {n.id for n in ast.walk(t) if isinstance(n, ast.Name)}
                                                    for t in node.targets):
                found.append(f"{path.name}:{node.lineno} defines an exit code")
            if isinstance(node, ast.Return) and isinstance(node.value, ast.Constant) and type(node.value.value) is int:
                found.append(f"{path.name}:{node.lineno} returns a bare number")
    assert found == []
