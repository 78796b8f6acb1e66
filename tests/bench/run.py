"""`make bench`: the speed goals of the issues, measured (not asserted in the test suite).

Each line prints the measurement, the goal and whether it is met. Exit status 1 when a
goal is missed, so a regression is visible.
"""

from __future__ import annotations

import os
import platform
import re
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Sequence
from pathlib import Path

from bridge.netlist import parse_netlist, read_netlist
from bridge.netlist.numbers import parse_number
from bridge.netlist.parser import _parser

REPO = Path(__file__).resolve().parents[2]
EXAMPLES = REPO / "netlists"
STAGES = 200
# A resistor card whose value is a plain number (not a {parameter}): R<name> n1 n2 value ...
_RESISTOR_VALUE = re.compile(r"^(R\S*\s+\S+\s+\S+\s+)([0-9.][^\s;$]*)(.*)$", re.IGNORECASE)


def fifty_card_netlist() -> str:
    """A 50-card stage-sized netlist with the usual mix: models, params, sources, MOSFETs."""
    lines = ["Bench: fifty cards", ".param vdd=5 rload={10k}", ".model nch nmos (vto=0.7 kp=120u lambda=0.02)",
             ".model pch pmos (vto=-0.8 kp=45u)", "VDD vdd 0 {vdd}", "VIN in 0 DC 1.2 AC 1"]
    for i in range(20):
        lines.append(f"R{i} n{i} n{i + 1} {{rload*{i + 1}}}")
        lines.append(f"M{i} n{i + 1} in 0 0 nch W=20u L=2u M=1")
    lines += ["C1 in n0 1u", "RB vdd n0 4.7k", "* a comment", "+ ", ".op", ".dc VIN 0 5 0.1",
              ".options reltol=1e-4", ".end"]
    return "\n".join(line for line in lines if line.strip() not in {"+"}) + "\n"


def stage_variants(folder: Path, count: int = STAGES) -> list[Path]:
    """`count` stages: the bundled examples in turn, their plain resistor values scaled by a few
    tenths of a percent more each round, `.control` blocks left out (so `ngspice -b` runs only the
    `.op` each keeps). The model library the bench-session example includes is copied beside them."""
    shutil.copytree(EXAMPLES / "models", folder / "models", dirs_exist_ok=True)
    examples = sorted(EXAMPLES.glob("*.cir"))
    paths = []
    for k in range(count):
        example = examples[k % len(examples)]
        scale = 1.0 + 0.002 * (1 + k // len(examples))
        lines, in_control = [], False
        for line in example.read_text().splitlines():
            word = line.strip().lower()
            if word.startswith(".control") or in_control:
                in_control = not word.startswith(".endc")
                continue
            if match := _RESISTOR_VALUE.match(line):
                line = f"{match[1]}{parse_number(match[2]) * scale:.6g}{match[3]}"
            lines.append(line)
        assert any(line.strip().lower() == ".op" for line in lines), example
        path = folder / f"{example.stem}_{k:03d}.cir"
        path.write_text("\n".join(lines) + "\n")
        paths.append(path)
    return paths


def child_environment(bytecode_folder: Path | None) -> dict[str, str]:
    """The environment of a measured `biasbridge` process: no colour, output to a pipe.

    With `bytecode_folder`, Python may cache compiled modules there (as every installed program
    has them after its first run) even where PYTHONDONTWRITEBYTECODE is set; the tree stays clean.
    """
    env = dict(os.environ, NO_COLOR="1")
    env.pop("FORCE_COLOR", None)
    if bytecode_folder is not None:
        env.pop("PYTHONDONTWRITEBYTECODE", None)
        env["PYTHONPYCACHEPREFIX"] = str(bytecode_folder)
    return env


def children_cpu() -> float:
    """User + system CPU seconds of every child process this process has waited for so far."""
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def run_check(files: Sequence[Path], env: dict[str, str], *, json: bool = True) -> tuple[float, float]:
    """Wall and CPU seconds (user + system, the process and its children: the ngspice worker,
    the helper) of one `python -m bridge check [--json] FILE...` in a fresh process."""
    options = ["--json"] if json else []
    cpu, start = children_cpu(), time.perf_counter()
    completed = subprocess.run(
        [sys.executable, "-m", "bridge", "check", *options, *map(str, files)],
        stdin=subprocess.DEVNULL, capture_output=True, env=env, cwd=REPO,
    )
    seconds, cpu = time.perf_counter() - start, children_cpu() - cpu
    if completed.returncode not in (0, 1):
        raise RuntimeError(f"check failed ({completed.returncode}): {completed.stderr.decode()[-500:]}")
    return seconds, cpu


def run_ngspice_batch(ngspice: str, files: Sequence[Path]) -> tuple[float, float]:
    """Wall and CPU seconds (user + system of the ngspice processes) of `ngspice -b` run on each
    file in turn."""
    cpu, start = children_cpu(), time.perf_counter()
    for path in files:
        subprocess.run([ngspice, "-b", path.name], stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
                       stderr=subprocess.DEVNULL, cwd=path.parent, check=True)
    return time.perf_counter() - start, children_cpu() - cpu


def interpreter_build() -> str:
    """Whether this interpreter's libpython is linked into its executable or loaded as a shared
    library (its memory map says; sysconfig describes only how the shared library was built)."""
    try:
        maps = Path("/proc/self/maps").read_text()
    except OSError:
        return ""
    return " (libpython loaded as a shared library)" if "libpython" in maps else " (libpython in the executable)"


def load_average() -> str:
    """The machine's 1, 5 and 15 minute load averages and its CPU count, for the record."""
    one, five, fifteen = os.getloadavg()
    return f"load average {one:.2f} {five:.2f} {fifteen:.2f} on {os.cpu_count()} CPUs"


def median_seconds(action: Callable[[], object], repeat: int) -> float:
    samples = []
    for _ in range(repeat):
        start = time.perf_counter()
        action()
        samples.append(time.perf_counter() - start)
    return statistics.median(samples)


def report(name: str, value: float, goal: float, unit: str = "ms") -> bool:
    ok = value <= goal
    print(f"{name:<52} {value:9.3f} {unit}   goal ≤ {goal:g} {unit}   {'ok' if ok else 'MISSED'}")
    return ok


def note(name: str, value: float, unit: str) -> None:
    """A measurement shown for context, without a goal."""
    print(f"{name:<52} {value:9.3f} {unit}")


def check_goals() -> list[bool]:
    """The check speed goals: one cold check, and 200 stages in one `check --json` against
    `ngspice -b` on each, by wall time and by CPU time (the machine is shared: its load is printed
    before and after)."""
    results = []
    print(f"{'machine before the check goals':<52} {load_average()}")
    print(f"{'interpreter':<52} Python {platform.python_version()} from "
          f"{Path(sys.base_prefix) / 'bin'}{interpreter_build()}")
    with tempfile.TemporaryDirectory() as folder:
        bytecode = Path(folder) / "bytecode"
        env = child_environment(bytecode)
        demo = [EXAMPLES / "cs_divider.cir"]
        run_check(demo, env)  # the first run compiles the bytecode, as after an install
        colds = [run_check(demo, env) for _ in range(5)]
        cold = statistics.median(wall for wall, _ in colds)
        results.append(report("cold `check --json` of one bundled stage (median of 5)", cold, 0.25, "s"))
        note("  its CPU time, process and children (median of 5)", statistics.median(c for _, c in colds), "s")
        if "PYTHONDONTWRITEBYTECODE" in os.environ:
            uncached = statistics.median(run_check(demo, child_environment(None))[0] for _ in range(3))
            note("  the same, compiling every module (median of 3)", uncached, "s")
        ngspice = shutil.which("ngspice")
        stages = Path(folder) / "stages"
        stages.mkdir()
        files = stage_variants(stages)
        if ngspice is None:
            batch = statistics.median(run_check(files, env)[0] for _ in range(3))
            note(f"`check --json` of {len(files)} stages in one call (median of 3)", batch, "s")
            print(f"{'ngspice -b on each stage':<52} skipped: ngspice is not installed")
            return results
        # The two runs alternate, so that both see the machine in the same state (it is shared
        # and its speed drifts); the goals are judged on the medians of the pairs' ratios.
        pairs = [(run_check(files, env), run_ngspice_batch(ngspice, files)) for _ in range(5)]
        batch = statistics.median(own[0] for own, _ in pairs)
        reference = statistics.median(other[0] for _, other in pairs)
        note(f"`check --json` of {len(files)} stages in one call (median of 5)", batch, "s")
        note("  its CPU time, process and children (median of 5)", statistics.median(o[1] for o, _ in pairs), "s")
        beyond = (batch - cold) / (len(files) - 1)
        note(f"  per stage beyond the first: (batch − cold) / {len(files) - 1}", beyond * 1e3, "ms")
        note(f"`ngspice -b` on each of the {len(files)} in turn (median of 5)", reference, "s")
        note("  its CPU time (median of 5)", statistics.median(other[1] for _, other in pairs), "s")
        wall_ratio = statistics.median(own[0] / other[0] for own, other in pairs)
        cpu_ratio = statistics.median(own[1] / other[1] for own, other in pairs)
        results.append(report(f"{len(files)} stages: check wall time / ngspice -b wall time", wall_ratio, 0.25, "×"))
        results.append(report(f"{len(files)} stages: check CPU time / ngspice -b CPU time", cpu_ratio, 0.4, "×"))
        text = statistics.median(run_check(files, env, json=False)[0] for _ in range(3))
        note(f"  `check` of the {len(files)} in text (batch view; median of 3)", text, "s")
    print(f"{'machine after the check goals':<52} {load_average()}")
    return results


def main() -> int:
    results = []
    start = time.perf_counter()
    _parser()
    print(f"{'grammar load (once per process)':<52} {(time.perf_counter() - start) * 1e3:9.3f} ms")
    text = fifty_card_netlist()
    cards = sum(1 for line in text.splitlines()[1:] if line.strip() and not line.startswith("*"))
    assert cards >= 50, cards
    seconds = median_seconds(lambda: parse_netlist(text, "bench.cir"), 200)
    results.append(report(f"parse a {cards}-card netlist (median of 200)", seconds * 1e3, 10.0))
    with tempfile.TemporaryDirectory() as folder:
        huge = Path(folder) / "huge.cir"
        huge.write_text("huge\n" + "".join(f"R{i} n{i} n{i + 1} 1k\n" for i in range(300_000)))
        start = time.perf_counter()
        try:
            read_netlist(huge)
        except Exception as exc:  # the refusal is the expected outcome
            refused = type(exc).__name__
        else:
            refused = "not refused"
        results.append(report(f"refuse a 300,000-card netlist ({refused})", time.perf_counter() - start, 1.0, "s"))
    results.extend(check_goals())
    from lint_bench import lint_goal  # tests/bench/lint_bench.py, beside this file

    results.append(lint_goal())
    from fit_bench import fit_goals  # tests/bench/fit_bench.py, beside this file

    results.extend(fit_goals())
    return 0 if all(results) else 1


if __name__ == "__main__":
    sys.exit(main())
