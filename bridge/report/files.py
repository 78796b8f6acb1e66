"""Writing output files atomically: a temporary file beside the target, then a rename.

A reader never sees a half-written file, and a failed write leaves any earlier file
of that name as it was.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import BinaryIO


def write_atomically(path: str | os.PathLike[str], write: Callable[[BinaryIO], None]) -> Path:
    """Call `write(handle)` on a temporary file in the target's folder, then rename it into place."""
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    handle = tempfile.NamedTemporaryFile(  # noqa: SIM115 - closed below, then renamed or removed
        "wb", dir=folder, prefix=f".{target.name}.", suffix=".part", delete=False
    )
    try:
        with handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        os.chmod(handle.name, 0o644 & ~_umask())
        os.replace(handle.name, target)
    except BaseException:
        Path(handle.name).unlink(missing_ok=True)
        raise
    return target


def write_text_atomically(path: str | os.PathLike[str], text: str) -> Path:
    return write_atomically(path, lambda handle: handle.write(text.encode("utf-8")))


def _umask() -> int:
    current = os.umask(0)
    os.umask(current)
    return current
