"""Dump `check --json`, `check --steps` and `sweep --json` for every example and test netlist, to compare runs.

    python tests/bench/dump_results.py OUT_FOLDER

The netlists: netlists/*.cir, and every plain string literal in tests/*.py (the test modules and
check_support.py, which holds the check tests' stages) that reads as a single-stage netlist (a
`.model` card and a MOSFET card). Each is checked on its own (one
`biasbridge` per file and mode), with NO_COLOR, and its stdout, stderr and exit status are
written to OUT_FOLDER/<name>.json.txt, <name>.steps.txt and <name>.sweep.txt (a test netlist's
name is a digest of its text, so moving a test does not rename it). Run it before and after a change
and `diff -r` the two folders: a change that must keep the results identical shows none.
"""

from __future__ import annotations

import ast
import hashlib
import os
import shutil
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
EXAMPLES = REPO / "netlists"
BIASBRIDGE = Path(sys.executable).with_name("biasbridge")


def _looks_like_netlist(text: str) -> bool:
    lines = [line.strip().lower() for line in text.splitlines()[1:]]
    return any(line.startswith(".model") for line in lines) and any(line.startswith("m") for line in lines)


def test_netlists(folder: Path) -> list[Path]:
    """The string literals of tests/*.py that read as netlists, written to `folder`."""
    paths = []
    shutil.copytree(EXAMPLES / "models", folder / "models", dirs_exist_ok=True)
    for source in sorted((REPO / "tests").glob("*.py")):  # test modules and what they share
        for node in ast.walk(ast.parse(source.read_text())):
            if isinstance(node, ast.Constant) and isinstance(node.value, str) and _looks_like_netlist(node.value):
                digest = hashlib.sha1(node.value.encode()).hexdigest()[:10]
                path = folder / f"t_{digest}.cir"
                path.write_text(node.value)
                paths.append(path)
    return paths


def main() -> int:
    out = Path(sys.argv[1])
    out.mkdir(parents=True, exist_ok=True)
    inputs = out / "inputs"
    inputs.mkdir(exist_ok=True)
    paths = sorted(EXAMPLES.glob("*.cir")) + test_netlists(inputs)
    env = dict(os.environ, NO_COLOR="1", COLUMNS="100")
    env.pop("FORCE_COLOR", None)
    paths = list(dict.fromkeys(paths))  # the same text in two tests: once
    runs = {".json": ["check", "--json"], ".steps": ["check", "--steps"], ".sweep": ["sweep", "--json"]}
    for path in paths:
        for suffix, arguments in runs.items():
            run = subprocess.run([str(BIASBRIDGE), *arguments, path.name], capture_output=True, text=True,
                                 cwd=path.parent, env=env, timeout=120)
            text = f"exit {run.returncode}\n--- stdout\n{run.stdout}--- stderr\n{run.stderr}"
            (out / f"{path.stem}{suffix}.txt").write_text(text)
    print(f"{len(paths)} netlists, {len(runs) * len(paths)} outputs in {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
