"""Output files are written atomically: all or nothing, an earlier file kept on failure."""

from __future__ import annotations

import pytest

from bridge.report.files import write_atomically, write_text_atomically


def test_text_lands_whole(tmp_path):
    target = tmp_path / "out.csv"
    write_text_atomically(target, "x,y\n1,2\n")
    assert target.read_text() == "x,y\n1,2\n"
    assert [p.name for p in tmp_path.iterdir()] == ["out.csv"]


def test_failed_write_keeps_the_earlier_file_and_leaves_no_debris(tmp_path):
    target = tmp_path / "out.csv"
    target.write_text("earlier\n")

    def broken(handle):
        handle.write(b"half")
        raise RuntimeError("disk on fire")

    with pytest.raises(RuntimeError):
        write_atomically(target, broken)
    assert target.read_text() == "earlier\n"
    assert [p.name for p in tmp_path.iterdir()] == ["out.csv"]
