"""The built grammar is kept in the user's cache folder; a missing, stale or broken file is rebuilt."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

# A fresh process reads the netlist below and prints what it understood: the same with or without a cache.
_READ = (
    "import sys; from bridge.netlist import parse_netlist; c = parse_netlist(sys.argv[1], 'vent.cir'); "
    "print(sorted(e.name for e in c.elements), sorted(c.nodes()))"
)


# A netlist with `{expression}` cards: those are read by the parser, which the cache is for (a
# netlist of plain cards, `{name}` and `{number}` values among them, is read without it, see
# parser.plain_card). A greenhouse vent actuator driver.
EXPRESSIONS = """greenhouse vent driver
.param rl=2.2k
VDD vdd 0 12
RD vdd d {2*rl}
RG vdd g {rl/2}
M1 d g 0 0 vent W=40u L=2u
.model vent nmos (vto=1 kp=80u)
.op
.end
"""


def _read_in_fresh_process(cache_home: Path) -> str:
    env = dict(os.environ, XDG_CACHE_HOME=str(cache_home))
    completed = subprocess.run(
        [sys.executable, "-c", _READ, EXPRESSIONS],
        capture_output=True, text=True, env=env, check=True,
    )
    assert completed.stderr == ""
    return completed.stdout


def test_grammar_cache_is_written_and_then_used(tmp_path: Path) -> None:
    first = _read_in_fresh_process(tmp_path)
    cache = tmp_path / "biasbridge" / "grammar.lark-cache"
    assert cache.stat().st_size > 1000
    written = cache.stat().st_mtime_ns
    assert _read_in_fresh_process(tmp_path) == first
    assert cache.stat().st_mtime_ns == written  # read back, not rebuilt


def test_broken_grammar_cache_is_rebuilt_silently(tmp_path: Path) -> None:
    reference = _read_in_fresh_process(tmp_path / "clean")
    cache = tmp_path / "broken" / "biasbridge" / "grammar.lark-cache"
    cache.parent.mkdir(parents=True)
    cache.write_bytes(b"not a cache at all\n\x80\x04garbage")
    assert _read_in_fresh_process(tmp_path / "broken") == reference
    assert cache.read_bytes()[:18] != b"not a cache at all"


def test_unwritable_cache_folder_still_reads(tmp_path: Path) -> None:
    blocker = tmp_path / "file-not-folder"
    blocker.write_text("")
    # XDG_CACHE_HOME names a file: no cache folder can be made, the grammar is built in memory.
    assert "M1" in _read_in_fresh_process(blocker)
