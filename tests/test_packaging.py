"""The grammar and the examples are found at run time in a plain (non-editable) install too, and
every package biasbridge imports is one of its declared dependencies."""

from __future__ import annotations

import ast
import importlib.metadata
import os
import re
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest
from conftest import REPO

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib


@pytest.mark.slow
def test_plain_install_finds_grammar_and_examples(tmp_path):
    """A real wheel built and installed by pip, then run from elsewhere: 5–10 s of pip on a
    shared machine, which no shortcut replaces (an editable install would find the files anyway)."""
    wheels = tmp_path / "wheels"
    subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--quiet", "--no-deps",
         "-w", str(wheels), str(REPO)],
        check=True, capture_output=True, timeout=300,
    )
    (wheel,) = wheels.glob("biasbridge-*.whl")
    names = zipfile.ZipFile(wheel).namelist()
    assert "bridge/_grammar/spice.lark" in names
    assert "bridge/_examples/cs_divider.cir" in names
    # every subpackage of the source tree ships (the list in pyproject.toml is explicit)
    for init in (REPO / "bridge").rglob("__init__.py"):
        assert str(init.relative_to(REPO)) in names, init
    target = tmp_path / "site"
    subprocess.run(
        [sys.executable, "-m", "pip", "install", "--quiet", "--no-deps", "--target", str(target), str(wheel)],
        check=True, capture_output=True, timeout=300,
    )
    netlist = tmp_path / "n.cir"
    netlist.write_text("plain install\nV1 a 0 1\nR1 a 0 1k\n.op\n")
    # Run from an unrelated directory with only the installed copy on the path.
    env = {**os.environ, "PYTHONPATH": str(target), "NO_COLOR": "1", "COLUMNS": "300"}
    code = (
        "import bridge.netlist.parser as p, bridge.cli as c, sys; "
        "assert 'site' in p.__file__, p.__file__; "
        "print(c.example_path('cs_divider.cir')); sys.exit(c.main(['parse', sys.argv[1]]))"
    )
    completed = subprocess.run(
        [sys.executable, "-I", "-c", f"import sys; sys.path.insert(0, {str(target)!r}); {code}", str(netlist)],
        capture_output=True, text=True, cwd=tmp_path, env=env, timeout=120,
    )
    assert completed.returncode == 0, completed.stderr
    assert str(target) in completed.stdout.splitlines()[0]
    assert "plain install" in completed.stdout
    assert Path(completed.stdout.splitlines()[0]).is_file()


def imported_top_level_modules(folder: Path) -> set[str]:
    """The top-level names every `import` and `from ... import` in the package's sources reach."""
    names: set[str] = set()
    for source in folder.rglob("*.py"):
        for node in ast.walk(ast.parse(source.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                names.update(alias.name.split(".")[0] for alias in node.names)
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                names.add(node.module.split(".")[0])
    return names


def test_every_third_party_module_the_package_imports_is_a_declared_dependency():
    # reference: importlib.metadata maps an importable name to the distribution that installs it
    declared = set()
    for requirement in tomllib.loads((REPO / "pyproject.toml").read_text())["project"]["dependencies"]:
        declared.add(re.split(r"[<>=!~;\[ ]", requirement, maxsplit=1)[0].lower())
    distributions = importlib.metadata.packages_distributions()
    imported = imported_top_level_modules(REPO / "bridge") - set(sys.stdlib_module_names) - {"bridge"}
    assert {"scipy", "matplotlib", "numpy"} <= imported  # the scan sees imports inside functions
    undeclared = {
        name: distributions.get(name)
        for name in imported
        if not {d.lower() for d in distributions.get(name, [name])} & declared
    }
    assert not undeclared, f"imported but not in pyproject.toml's dependencies: {undeclared}"
