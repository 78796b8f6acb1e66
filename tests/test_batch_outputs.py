"""Nothing lands uninvited, nothing half-written: output files and ngspice's own files in a batch.

- A read-only folder or a full disk: a clear message, exit 2, and no file or temporary file left.
  The full disk is a fake of the OS (a write that raises ENOSPC half-way); the read-only folder
  is real (as root, the command runs without the capability that overrides file permissions).
- BSIM3's parameter check writes `b3v33check.log` into ngspice's working folder (`ngspice -b`
  leaves it in the folder it runs from, pinned in test_other_levels.py): every command run from
  a folder leaves that folder as it was, and its temporary folder goes with the worker, also
  when the job is stopped with SIGTERM.
"""

from __future__ import annotations

import errno
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pytest
from conftest import LIBRARY_FOUND, LIBRARY_HINT, REPO

from bridge.cli import main
from bridge.report import files

CORPUS = Path(__file__).resolve().parent / "batch_corpus"
STAGE = CORPUS / "cs_hive_scale.cir"
BSIM3_STAGE = CORPUS / "bsim3_card.cir"
needs_library = pytest.mark.skipif(not LIBRARY_FOUND, reason=LIBRARY_HINT)


def _environment(temporary: Path | None = None) -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(REPO), env.get("PYTHONPATH", "")])
    if temporary is not None:
        env["TMPDIR"] = str(temporary)
    return env


# ---- a read-only folder ---------------------------------------------------------------------

def _unprivileged(command: list[str]) -> list[str]:
    """`command` as run by someone a read-only folder stops: as root, without CAP_DAC_OVERRIDE."""
    if os.geteuid() != 0:
        return command
    setpriv = shutil.which("setpriv")
    if setpriv is None:
        pytest.skip("running as root and setpriv (util-linux) is not installed to drop CAP_DAC_OVERRIDE")
    return [setpriv, "--bounding-set", "-dac_override,-dac_read_search", "--", *command]


@pytest.fixture
def read_only_folder(tmp_path):
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o555)
    probe = subprocess.run(_unprivileged([sys.executable, "-c", f"open({str(folder / 'probe')!r}, 'w')"]),
                           capture_output=True)
    if probe.returncode == 0:
        os.unlink(folder / "probe")
        pytest.skip("this machine lets the test write into a read-only folder")
    yield folder
    folder.chmod(0o755)


@pytest.mark.parametrize("option, name", [("--csv", "out.csv"), ("--plot", "out.png")])
def test_a_read_only_folder_is_refused_before_the_sweep_runs(option, name, read_only_folder, tmp_path):
    shutil.copyfile(STAGE, tmp_path / STAGE.name)
    completed = subprocess.run(
        _unprivileged([sys.executable, "-m", "bridge", "sweep", STAGE.name, option, f"ro/{name}"]),
        capture_output=True, text=True, cwd=tmp_path, env=_environment(), timeout=60,
    )
    assert completed.returncode == 2
    # It used to run the whole sweep first, then fail at the write ("Permission denied").
    assert completed.stderr == (
        f"biasbridge: error: {STAGE.name}: {option} ro/{name}: the folder ro is not writable\n"
    )
    assert completed.stdout == ""
    assert list(read_only_folder.iterdir()) == []


# ---- a full disk ----------------------------------------------------------------------------

class _FullDisk:
    """A temporary file on a disk that fills up after `room` bytes: the write raises ENOSPC."""

    def __init__(self, handle, room: int) -> None:
        self._handle, self._room = handle, room
        self.name = handle.name

    def write(self, data: bytes) -> int:
        fits = max(0, self._room)
        self._handle.write(data[:fits])
        self._room -= len(data)
        if self._room < 0:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return len(data)

    def __getattr__(self, name: str):
        return getattr(self._handle, name)

    def __enter__(self):
        return self

    def __exit__(self, *exc: object) -> None:
        self._handle.close()


@pytest.mark.parametrize("option, name", [("--csv", "out.csv"), ("--plot", "out.png")])
def test_a_full_disk_leaves_the_earlier_file_whole_and_no_temporary_file(option, name, tmp_path, monkeypatch,
                                                                          capsys):
    netlist = tmp_path / STAGE.name
    shutil.copyfile(STAGE, netlist)
    earlier = tmp_path / name
    earlier.write_bytes(b"the earlier output\n")
    real = tempfile.NamedTemporaryFile

    def filling(*args, **kwargs):
        return _FullDisk(real(*args, **kwargs), room=100)

    monkeypatch.setattr(files.tempfile, "NamedTemporaryFile", filling)
    status = main(["sweep", str(netlist), option, str(earlier)])
    captured = capsys.readouterr()
    assert status == 2
    assert captured.err.endswith(f"biasbridge: error: cannot write {earlier}: No space left on device\n")
    assert earlier.read_bytes() == b"the earlier output\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([STAGE.name, name])


def test_a_full_disk_at_the_flush_also_leaves_no_temporary_file(tmp_path, monkeypatch):
    # The error of a full disk often comes when the data reaches the disk, not at write().
    def full(fd: int) -> None:
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(files.os, "fsync", full)
    with pytest.raises(OSError, match="No space left on device"):
        files.write_text_atomically(tmp_path / "rows.csv", "vin,vout\n" * 1000)
    assert list(tmp_path.iterdir()) == []


# ---- ngspice's files stay out of the user's folders -----------------------------------------

@needs_library
@pytest.mark.parametrize("command", [
    ["check", "--json", "a.cir", "b.cir", "c.cir", "d.cir"],  # four files: the read-ahead helper runs too
    ["check", "a.cir"],
    ["sweep", "a.cir", "--points", "21"],
    ["lint", "a.cir", "b.cir"],
])
def test_a_bsim3_stage_checked_from_a_folder_leaves_it_and_the_temporary_folder_as_they_were(command, tmp_path):
    folder, temporary = tmp_path / "stages", tmp_path / "tmp"
    folder.mkdir()
    temporary.mkdir()
    for name in ("a.cir", "b.cir", "c.cir", "d.cir"):
        shutil.copyfile(BSIM3_STAGE, folder / name)
    completed = subprocess.run([sys.executable, "-m", "bridge", *command], capture_output=True, text=True,
                               cwd=folder, env=_environment(temporary), timeout=60)
    assert completed.returncode in (0, 1), completed.stderr
    assert "ngspice" in completed.stdout or command[0] == "lint"
    assert sorted(p.name for p in folder.iterdir()) == ["a.cir", "b.cir", "c.cir", "d.cir"]
    assert list(temporary.iterdir()) == []


@needs_library
def test_a_check_stopped_with_sigterm_removes_the_workers_temporary_folder(tmp_path):
    """About 2 s: forty BSIM3 stages, so that the batch is still running when it is stopped."""
    folder, temporary = tmp_path / "stages", tmp_path / "tmp"
    folder.mkdir()
    temporary.mkdir()
    names = [f"hive{i:02}.cir" for i in range(40)]
    for name in names:
        shutil.copyfile(BSIM3_STAGE, folder / name)
    process = subprocess.Popen([sys.executable, "-m", "bridge", "check", "--json", *names], cwd=folder,
                               env=_environment(temporary), stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        assert process.stdout is not None
        first = process.stdout.readline()  # a result is out: the worker and its folder exist
        assert first.startswith(b"{"), process.stderr.read() if process.stderr else ""
        assert any(p.name.startswith("biasbridge-ngspice-") for p in temporary.iterdir())
        process.send_signal(signal.SIGTERM)
        process.communicate(timeout=30)
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()
    # It used to end on the spot, leaving the worker's folder (and b3v33check.log) and its log.
    assert process.returncode == 128 + signal.SIGTERM
    deadline = time.monotonic() + 5
    while list(temporary.iterdir()) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert list(temporary.iterdir()) == []
    assert sorted(p.name for p in folder.iterdir()) == names
