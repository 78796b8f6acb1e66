"""Files that are not plain netlists, among the many a batch is given: each is that file's
located error, read no further than the size limit, and the message says what the file is."""

from __future__ import annotations

import os
import resource
import subprocess
import sys

import pytest
from conftest import REPO

from bridge.netlist import NetlistError, parse_netlist, read_netlist


def _limited_memory() -> None:  # so that a reader that never stops fails fast, not the machine
    resource.setrlimit(resource.RLIMIT_AS, (1 << 30, 1 << 30))


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="no /dev/zero on this system")
def test_an_endless_device_is_refused_at_the_size_limit(tmp_path):
    # It read /dev/zero (size 0 to os.path.getsize) until memory ran out.
    completed = subprocess.run(
        [sys.executable, "-m", "bridge", "parse", "/dev/zero"], capture_output=True, text=True, timeout=60,
        env={**os.environ, "PYTHONPATH": str(REPO)}, preexec_fn=_limited_memory,
    )
    assert completed.returncode == 2
    assert completed.stderr == "/dev/zero:1:1: more than 16 MiB to read: far beyond a single-stage netlist\n"


def test_a_pipe_is_read_like_a_file(tmp_path):
    read_end, write_end = os.pipe()
    os.write(write_end, b"Bicycle dynamo light\nVDD vdd 0 6\nRD vdd d 4.7k\n.end\n")
    os.close(write_end)
    try:
        circuit = read_netlist(f"/dev/fd/{read_end}")
    finally:
        os.close(read_end)
    assert [e.name for e in circuit.elements] == ["VDD", "RD"]


def test_an_included_folder_is_called_a_folder(tmp_path):
    (tmp_path / "models").mkdir()
    with pytest.raises(NetlistError) as caught:
        parse_netlist("Bicycle dynamo light\n.include models\nVDD vdd 0 6\n", "lamp.cir", str(tmp_path))
    # It said "not found", of a folder that is there.
    assert caught.value.message == f"included `models` is a folder, not a file ({tmp_path / 'models'})"
    assert (caught.value.location.line, caught.value.location.column) == (2, 10)


@pytest.mark.skipif(not os.path.exists("/dev/null"), reason="no /dev/null on this system")
def test_an_included_device_is_called_no_regular_file(tmp_path):
    with pytest.raises(NetlistError) as caught:
        parse_netlist("Bicycle dynamo light\n.include /dev/null\nVDD vdd 0 6\n", "lamp.cir", str(tmp_path))
    assert caught.value.message == "included `/dev/null` is not a regular file (/dev/null)"


def test_a_small_file_is_read_at_its_size_not_at_the_limit(tmp_path):
    # The reader asked for the whole 16 MiB limit at every file: Python allocated that much for
    # each netlist read (then shrank it), ~25 µs a file in a batch.
    import tracemalloc

    from bridge.netlist.source import read_source

    path = tmp_path / "dynamo.cir"
    text = "Bicycle dynamo light\nVDD vdd 0 6\nRD vdd d 4.7k\n.end\n"
    path.write_text(text)
    tracemalloc.start()
    try:
        source = read_source(path)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert [line.rstrip("\n") for line in source.lines][:2] == ["Bicycle dynamo light", "VDD vdd 0 6"]
    assert peak < 1 << 20

