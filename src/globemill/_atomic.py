"""Atomic output: every file is written to a temporary name beside its target, flushed to disk,
then renamed over the target, so a crash or Ctrl-C never leaves a half-written file and an
existing output stays untouched until its replacement is complete.

A set of files (the .glb, .collision.glb and .report.json of one world) is replaced as a set:
every temporary is written and flushed first, then a journal listing the renames is written and
flushed, then the renames run and the journal is removed. A process killed in the middle of the
renames (SIGKILL, power cut) leaves the journal, and the next write into that folder, or the
next farm run, finishes the renames first: the folder holds the complete new set or the
complete old one once anyone writes there again. Ctrl-C and SIGTERM are held back while a set is
written and renamed and delivered right after.

Every temporary (``.<name>.<8 random>.tmp``) and journal (``.globemill-set.<8 random>.journal``)
is locked (``flock``) by the process writing it for as long as it exists, so a sweep removes only
the ones whose process is gone (``sweep_temporaries``); a file locked by a live process is never
touched.

A failed write raises ``WriteError`` (an ``OSError``) that names the file and the cause, e.g.
``cannot write out/moor.glb: No space left on device``; nothing of the set is left behind.
``probe_folder`` finds an unwritable or full folder before any work is done.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import json
import os
import re
import shutil
import signal
import tempfile
import threading
from collections.abc import Iterator, Mapping
from pathlib import Path

try:
    import fcntl
except ImportError:  # not POSIX: no locks, the sweep then leaves every temporary alone
    fcntl = None  # type: ignore[assignment]

__all__ = [
    "WriteError",
    "atomic_path",
    "finish_interrupted_sets",
    "probe_folder",
    "recorded",
    "sweep_temporaries",
    "write_files_atomically",
]

_HELD = {signal.SIGINT, signal.SIGTERM}
JOURNAL_PREFIX = ".globemill-set."
JOURNAL_SUFFIX = ".journal"
# tempfile.mkstemp names: our prefix, 8 random characters from [a-z0-9_], our suffix
_TEMP_NAME = re.compile(r"^\..+\.[a-z0-9_]{8}\.tmp$")
_JOURNAL_NAME = re.compile(r"^\.globemill-set\.[a-z0-9_]{8}\.journal$")
PROBE_BYTES = 4096


class WriteError(OSError):
    """A file could not be written: ``filename`` names it, ``strerror`` says why."""

    def __str__(self) -> str:
        return f"cannot write {self.filename}: {self.strerror}"


def _write_error(exc: OSError, path: os.PathLike[str] | str) -> WriteError:
    if isinstance(exc, WriteError):
        return exc
    code = exc.errno if exc.errno is not None else errno.EIO
    return WriteError(code, exc.strerror or os.strerror(code), os.fspath(path))


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


# --------------------------------------------------------------------------------------------
# byte hashes of what was written (the farm's cache records name the files by them)

_recorders = threading.local()


@contextlib.contextmanager
def recorded() -> Iterator[dict[Path, tuple[int, str]]]:
    """Collect ``{target: (size, sha256 hex)}`` of every file this thread writes in the block,
    hashed from the bytes handed to the writer (not read back)."""
    got: dict[Path, tuple[int, str]] = {}
    stack = getattr(_recorders, "stack", None)
    if stack is None:
        stack = _recorders.stack = []
    stack.append(got)
    try:
        yield got
    finally:
        stack.remove(got)


def _record(files: Mapping[Path, bytes]) -> None:
    stack = getattr(_recorders, "stack", None)
    if not stack:
        return
    sums = {Path(t): (len(d), hashlib.sha256(d).hexdigest()) for t, d in files.items()}
    for got in stack:
        got.update(sums)


# --------------------------------------------------------------------------------------------
# locked temporaries


def _lock(fd: int, *, wait: bool) -> bool:
    if fcntl is None:
        return True
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | (0 if wait else fcntl.LOCK_NB))
    except BlockingIOError:
        return False
    return True


def _linked(fd: int, path: str) -> bool:
    """The open file `fd` is still the file at `path` (no sweep removed it in between)."""
    try:
        return os.fstat(fd).st_nlink > 0 and os.stat(path).st_ino == os.fstat(fd).st_ino
    except FileNotFoundError:
        return False


def _locked_temp(folder: Path, prefix: str, suffix: str, report: Path) -> tuple[int, Path]:
    """A new empty file in `folder`, locked by this process. A sweep can take the file between
    its creation and the lock; then it is made again."""
    while True:
        try:
            fd, name = tempfile.mkstemp(prefix=prefix, suffix=suffix, dir=folder)
        except OSError as exc:
            raise _write_error(exc, report) from None
        _lock(fd, wait=True)
        if _linked(fd, name):
            return fd, Path(name)
        os.close(fd)


def _write_all(fd: int, data: bytes | memoryview) -> None:
    view = memoryview(data)
    while view:
        n = os.write(fd, view)
        if n <= 0:  # a write that writes nothing would loop forever
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        view = view[n:]


def _fsync_folder(folder: Path) -> None:
    with contextlib.suppress(OSError):  # not every file system can sync a folder
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


# --------------------------------------------------------------------------------------------
# interrupted sets and stale temporaries


def _journals(folder: Path) -> list[Path]:
    try:
        return [folder / n for n in os.listdir(folder) if _JOURNAL_NAME.match(n)]
    except OSError:
        return []


def _journal_pairs(journal: Path) -> list[tuple[Path, Path]] | None:
    try:
        doc = json.loads(journal.read_text("utf-8"))
        return [(Path(tmp), Path(target)) for tmp, target in doc["renames"]]
    except (OSError, ValueError, KeyError, TypeError):
        return None


def _finish_set(journal: Path) -> bool:
    """Finish the renames of a dead writer's set; False when its writer is alive."""
    try:
        fd = os.open(journal, os.O_RDONLY)
    except OSError:
        return False
    try:
        if not _lock(fd, wait=False) or not _linked(fd, os.fspath(journal)):
            return False
        pairs = _journal_pairs(journal)
        # no readable journal: its writer died writing it, so before any rename; the
        # temporaries then go with the next sweep
        for tmp, target in pairs or []:
            if tmp.exists():  # a missing one was renamed already
                os.replace(tmp, target)
                _fsync_folder(target.parent)
        os.unlink(journal)
        _fsync_folder(journal.parent)
        return True
    finally:
        os.close(fd)


def _near(folder: Path) -> list[Path]:
    # a set's journal lives in the folder its files share: look there and one level up
    return [folder, folder.parent] if folder.parent != folder else [folder]


def finish_interrupted_sets(folder: Path, targets: set[Path] | None = None) -> int:
    """Finish every set a killed process left half renamed in `folder` (only those touching
    `targets` when given); return how many."""
    done = 0
    for journal in _journals(folder):
        if targets is not None:
            pairs = _journal_pairs(journal)
            if pairs is not None and not any(t in targets for _, t in pairs):
                continue
        with contextlib.suppress(OSError):
            done += _finish_set(journal)
    return done


def sweep_temporaries(
    folder: Path, names: set[str] | None = None, *, older_than: float | None = None
) -> list[Path]:
    """Remove our temporaries in `folder` (of targets named in `names` when given) whose writer
    is gone: not locked by a live process, not part of an interrupted set, and (when
    `older_than`, a time.time() value, is given) last changed before it. Returns those removed."""
    removed: list[Path] = []
    if fcntl is None:
        return removed
    try:
        entries = os.listdir(folder)
    except OSError:
        return removed
    for entry in entries:
        if not _TEMP_NAME.match(entry):
            continue
        if names is not None and not any(entry.startswith(f".{n}.") for n in names):
            continue
        path = folder / entry
        try:
            fd = os.open(path, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0))
        except OSError:
            continue
        try:
            if not _lock(fd, wait=False) or not _linked(fd, os.fspath(path)):
                continue
            if older_than is not None and os.fstat(fd).st_mtime >= older_than:
                continue
            # read after the lock: a writer that died before it could lock is gone for good
            wanted = {
                tmp
                for where in _near(folder)
                for j in _journals(where)
                for tmp, _ in (_journal_pairs(j) or [])
            }
            if path in wanted:
                continue
            os.unlink(path)
            removed.append(path)
        except OSError:
            continue
        finally:
            os.close(fd)
    return removed


# --------------------------------------------------------------------------------------------
# writing


def write_files_atomically(files: Mapping[Path, bytes]) -> None:
    """Write every file in `files` or none of them: all temporaries first, then the renames.

    Raises WriteError naming the file that could not be written and why."""
    mode = 0o666 & ~_umask()
    targets = {Path(t): data for t, data in files.items()}
    if not targets:
        return
    folders = list(dict.fromkeys(t.parent for t in targets))
    with _signals_held():
        for folder in folders:
            try:
                folder.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise _write_error(exc, folder) from None
        for near in dict.fromkeys(n for f in folders for n in _near(f)):
            finish_interrupted_sets(near, set(targets))
        for folder in folders:
            sweep_temporaries(folder, {t.name for t in targets if t.parent == folder})
        opened: list[tuple[int, Path, Path]] = []
        journal: tuple[int, Path] | None = None
        renamed = 0
        try:
            for target, data in targets.items():
                fd, tmp = _locked_temp(target.parent, f".{target.name}.", ".tmp", target)
                opened.append((fd, tmp, target))
                try:
                    _write_all(fd, data)
                    os.fsync(fd)
                    # mkstemp creates 0600; outputs get the usual permissions (0666 less umask)
                    os.fchmod(fd, mode)
                except OSError as exc:
                    raise _write_error(exc, target) from None
            if len(opened) > 1:
                home = Path(os.path.commonpath([os.fspath(f) for f in folders]))
                jfd, jpath = _locked_temp(home, JOURNAL_PREFIX, JOURNAL_SUFFIX, home)
                journal = (jfd, jpath)
                doc = {"pid": os.getpid(), "renames": [[str(t), str(g)] for _, t, g in opened]}
                try:
                    _write_all(jfd, json.dumps(doc).encode("utf-8"))
                    os.fsync(jfd)
                except OSError as exc:
                    raise _write_error(exc, jpath) from None
            for folder in folders:
                _fsync_folder(folder)
            for _, tmp, target in opened:
                try:
                    os.replace(tmp, target)
                except OSError as exc:
                    raise _write_error(exc, target) from None
                renamed += 1
            for folder in folders:
                _fsync_folder(folder)
            if journal is not None:
                os.unlink(journal[1])
        except BaseException:
            if renamed == 0:
                for _, tmp, _ in opened:
                    with contextlib.suppress(OSError):
                        os.unlink(tmp)
                if journal is not None:
                    with contextlib.suppress(OSError):
                        os.unlink(journal[1])
            # else: the journal stays, and the next write here finishes the renames
            raise
        finally:
            for fd, _, _ in opened:
                os.close(fd)
            if journal is not None:
                os.close(journal[0])
    _record(targets)


@contextlib.contextmanager
def atomic_path(target: Path) -> Iterator[Path]:
    """Yield a temporary path to write to; it replaces `target` only if the block succeeds."""
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise _write_error(exc, target.parent) from None
    fd, tmp = _locked_temp(target.parent, f".{target.name}.", ".tmp", target)
    try:
        yield tmp
        try:
            os.chmod(tmp, 0o666 & ~_umask())
            os.replace(tmp, target)
        except OSError as exc:
            raise _write_error(exc, target) from None
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink()
        os.close(fd)


# --------------------------------------------------------------------------------------------
# finding a bad folder before the work


def probe_folder(folder: Path, need_bytes: int = 0) -> None:
    """Raise WriteError unless files can be written in `folder` (or, when it does not exist
    yet, in the nearest folder above it, which is then where it would be made) and about
    `need_bytes` are free there. Writes, flushes and removes a small temporary file; creates
    nothing that stays."""
    folder = Path(folder)
    probe = folder
    while not probe.exists():
        if probe.parent == probe:
            break
        probe = probe.parent
    if probe.exists() and not probe.is_dir():
        raise WriteError(errno.ENOTDIR, "it is a file, not a folder", os.fspath(probe))
    fd, tmp = _locked_temp(probe, ".globemill-probe.", ".tmp", folder)
    try:
        try:
            _write_all(fd, b"\0" * PROBE_BYTES)
            os.fsync(fd)
        except OSError as exc:
            raise _write_error(exc, folder) from None
    finally:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        os.close(fd)
    if need_bytes > 0:
        try:
            free = shutil.disk_usage(probe).free
        except OSError:
            return
        if free < need_bytes:
            raise WriteError(
                errno.ENOSPC,
                f"No space left on device: {free / 1e6:,.1f} MB free, the outputs need about "
                f"{need_bytes / 1e6:,.1f} MB",
                os.fspath(folder),
            )
