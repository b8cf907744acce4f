"""Atomic output: every file is written to a temporary name beside its target, flushed to disk,
then renamed over the target, so a crash or Ctrl-C never leaves a half-written file and an
existing output stays untouched until its replacement is complete.

Ctrl-C and SIGTERM are held back while the files of one output set are written and renamed (a
fraction of a second) and delivered right after, so an interrupt cannot leave a temporary file
behind or a set that mixes old and new files. Only SIGKILL or a power cut in the middle of the
renames themselves (microseconds) can; hidden `.*.tmp` files left by a SIGKILL are never read.
"""

from __future__ import annotations

import contextlib
import os
import signal
import tempfile
import threading
from collections.abc import Iterator, Mapping
from pathlib import Path

_HELD = {signal.SIGINT, signal.SIGTERM}


def _read_umask() -> int:
    # os.umask can only be read by setting it; do that once, at import, before any threads
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


_UMASK = _read_umask()


def _umask() -> int:
    return _UMASK


@contextlib.contextmanager
def _signals_held() -> Iterator[None]:
    """Hold back SIGINT/SIGTERM in this block (main thread, POSIX); they arrive after it."""
    if (
        not hasattr(signal, "pthread_sigmask")
        or threading.current_thread() is not threading.main_thread()
    ):
        yield
        return
    old = signal.pthread_sigmask(signal.SIG_BLOCK, _HELD)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


def _write_temp(target: Path, data: bytes, mode: int) -> Path:
    fd, name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        # mkstemp creates 0600; outputs get the usual permissions (0666 less the umask)
        os.chmod(name, mode)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(name)
        raise
    return Path(name)


def write_files_atomically(files: Mapping[Path, bytes]) -> None:
    """Write every file in `files` or none of them: all temporaries first, then the renames."""
    mode = 0o666 & ~_umask()
    with _signals_held():
        temps: list[tuple[Path, Path]] = []
        try:
            for target, data in files.items():
                target.parent.mkdir(parents=True, exist_ok=True)
                temps.append((_write_temp(target, data, mode), target))
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
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, target)
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink()
