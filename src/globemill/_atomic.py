"""Atomic output: every file is written to a temporary name beside its target, flushed to disk,
then renamed over the target, so a crash or Ctrl-C never leaves a half-written file and an
existing output stays untouched until its replacement is complete."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator, Mapping
from pathlib import Path


def _write_temp(target: Path, data: bytes) -> Path:
    fd, name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(name)
        raise
    return Path(name)


def write_files_atomically(files: Mapping[Path, bytes]) -> None:
    """Write every file in `files` or none of them: all temporaries first, then the renames."""
    temps: list[tuple[Path, Path]] = []
    try:
        for target, data in files.items():
            target.parent.mkdir(parents=True, exist_ok=True)
            temps.append((_write_temp(target, data), target))
    except BaseException:
        for tmp, _ in temps:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
        raise
    for tmp, target in temps:
        os.replace(tmp, target)


@contextlib.contextmanager
def atomic_path(target: Path) -> Iterator[Path]:
    """Yield a temporary path to write to; it replaces `target` only if the block succeeds."""
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    os.close(fd)
    tmp = Path(name)
    try:
        yield tmp
        os.replace(tmp, target)
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink()
