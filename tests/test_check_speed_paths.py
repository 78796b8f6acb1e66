"""What the speed work must not change: the paths it takes are checked for their behaviour
(modules a run loads, the cards a parse gives, the vectors read), never for their timing."""

from __future__ import annotations

import json
import subprocess
import sys

from conftest import EXAMPLES

# A fresh process runs the command and then says, on stderr, which of rich's modules it loaded.
_RUN_AND_LIST_RICH = (
    "import sys; from bridge.cli import main; status = main(sys.argv[1:]); "
    "sys.stderr.write('RICH ' + repr(sorted(m for m in sys.modules if m.split('.')[0] == 'rich')) + '\\n'); "
    "sys.exit(status)"
)


def _rich_modules_loaded(*arguments: str) -> tuple[list[str], str]:
    completed = subprocess.run(
        [sys.executable, "-c", _RUN_AND_LIST_RICH, *arguments],
        capture_output=True, text=True, timeout=60, stdin=subprocess.DEVNULL,
    )
    assert completed.returncode in (0, 1), completed.stderr
    line = next(line for line in completed.stderr.splitlines() if line.startswith("RICH "))
    return eval(line[5:]), completed.stdout  # noqa: S307 - a repr of a list of names written above


def test_check_json_does_not_load_rich() -> None:
    loaded, stdout = _rich_modules_loaded("check", "--json", str(EXAMPLES / "cs_divider.cir"))
    assert loaded == []
    result = json.loads(stdout)
    assert "M1" in json.dumps(result)


def test_check_json_of_several_files_does_not_load_rich() -> None:
    files = [str(EXAMPLES / name) for name in ("cs_divider.cir", "pmos_cs.cir")]
    loaded, stdout = _rich_modules_loaded("check", "--json", *files)
    assert loaded == []
    assert len(stdout.splitlines()) == 2


def test_check_text_still_draws_with_rich() -> None:
    # The table needs rich's console: the path above is not rich-free by accident.
    loaded, stdout = _rich_modules_loaded("check", str(EXAMPLES / "cs_divider.cir"))
    assert "rich.console" in loaded
    assert "M1" in stdout
